"""Writing the results file frame by frame: :class:`ResultsWriter` and :func:`open_for_writing`.

The layout and the crash-safety argument are in :mod:`dic.sequence.layout`.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np

from dic import __version__
from dic.errors import DiskFull, InputError, ResultsFileError, ResultsMismatch
from dic.field import DisplacementField, Reason
from dic.files import (atomic_write, check_folder, is_disk_full, lock_file, partial_name,
                       remove_stale_partials, reserve_space, sparse_copy, unlock_file)
from dic.sequence.checks import (check_path, differences, same_value, settings_json, short,
                                 strain_spec, string_list, with_added_settings)
from dic.sequence.h5file import load_h5py, one_line, open_h5
from dic.sequence.layout import (FIX_IMAGES, FIX_SETTINGS, FIX_SPACE, FORMAT, FORMAT_VERSION,
                                 STRAIN_COMPONENTS, TIME_FORMAT_LEN, WRITE_KW, add_grad2,
                                 build_strain_group, fixed_dataset, frame_layout, group_attrs,
                                 now_utc, read_field, read_format, set_attrs, stored_name)

__all__ = ["ResultsWriter", "open_for_writing", "set_write_hook"]

_TOKEN = object()

# the write hook (see set_write_hook): a fault injector for tests, None in normal use
_HOOK = {"hook": None}


def set_write_hook(hook):
    """Install a function called at fixed points of every write; returns the previous one.

    Meant for tests that make writes fail where they choose (a full disk, an I/O error)
    without a real full disk: ``hook(point, k)`` may raise, e.g.
    ``OSError(errno.ENOSPC, "No space left on device")``. The points are ``"create"`` (the
    new file is being built), ``"reserve"`` (before disk space for frame ``k`` is reserved),
    ``"data"`` (frame ``k`` half written), ``"commit"`` (frame ``k`` written and flushed,
    ``n_done`` not yet advanced) and ``"strain"`` (strain of frame ``k`` about to be written).

    Parameters
    ----------
    hook : callable or None
        ``hook(point: str, k: int)``; None removes the hook.

    Returns
    -------
    callable or None
        The hook installed before.
    """
    if hook is not None and not callable(hook):
        raise InputError(f"hook: expected a function hook(point, k) or None, got "
                         f"{type(hook).__name__}")
    old, _HOOK["hook"] = _HOOK["hook"], hook
    return old


def _at(point: str, k: int) -> None:
    hook = _HOOK["hook"]
    if hook is not None:
        hook(point, k)


class ResultsWriter:
    """Write a results file frame by frame; a killed writer leaves every completed frame.

    Make one with :meth:`create` (new analysis), :meth:`resume` (carry on after a stop) or
    :meth:`reopen` (add strain to a file). Use it as a context manager so that the file is
    closed on Ctrl-C or any error. See :mod:`dic.sequence.layout` for the file layout and the
    crash-safety argument.

    Attributes
    ----------
    path : pathlib.Path
        The results file.
    n_frames : int
        Planned number of frames.
    n_done : int
        Frames completed; the next :meth:`write_frame` must be frame ``n_done``.
    shape : tuple of int
        Grid shape ``(ny, nx)``.
    """

    def __init__(self, path: Path, *, fsync: bool, _token=None):
        if _token is not _TOKEN:
            raise TypeError("use ResultsWriter.create, .resume or .reopen")
        self.path = path
        self._fsync = bool(fsync)
        self._f = None
        self._pending_update = None
        self._open()

    # ---------------------------------------------------------------- construction
    @classmethod
    def create(cls, path, *, grid_x, grid_y, n_frames, settings, image_names, image_sha256,
               image_times=None, roi_mask=None, scale_mm_per_px=None,
               second_derivatives=False, strain=(), overwrite=False,
               fsync=True) -> "ResultsWriter":
        """Make a new results file, ready for frame 0.

        The file is built under a temporary name beside ``path`` and renamed over it only
        when complete, so an existing file at ``path`` (with ``overwrite=True``) stays whole
        until the new one replaces it.

        Parameters
        ----------
        path : str or os.PathLike
            The results file to make (``.h5`` by convention).
        grid_x, grid_y : array_like, shape (ny, nx)
            Point positions in reference-image pixels.
        n_frames : int
            Number of frames planned (one per image).
        settings : dict
            Every analysis setting; stored as JSON and compared by :meth:`resume`.
        image_names, image_sha256 : sequence of str, length n_frames
            Image names (as the tracker wants them shown; compared by :meth:`resume`) and the
            SHA-256 hex digest of each image file.
        image_times : array_like, length n_frames, optional
            Time of each image in seconds; NaN where unknown. Default all NaN.
        roi_mask : array_like of bool, 2-D, optional
            Region of interest, stored compressed.
        scale_mm_per_px : float, optional
            Millimetres per pixel if known.
        second_derivatives : bool, optional
            Reserve room for ``DisplacementField.grad2`` (second-order shape function). Without
            it, room is added (on a copy of the file) when a frame first brings ``grad2``.
            Frames without ``grad2`` store NaN there.
        strain : sequence of (measure, window) or (measure, window, attrs), optional
            Strain groups to make now, so that :meth:`write_strain` later fills them without
            copying the file (a group first named there is added on a copy of the file).
        overwrite : bool, optional
            Replace an existing file at ``path``. Default False: an existing file raises.
        fsync : bool, optional
            ``os.fsync`` each frame before committing it (default True), so that a power cut
            too loses at most the frame in progress. False still survives any kill of the
            process.

        Returns
        -------
        ResultsWriter

        Raises
        ------
        ValueError
            Inconsistent arguments.
        OSError
            The file exists (and ``overwrite`` is False), its folder is missing or not
            writable, or the disk is full; no existing file is changed.
        """
        p = check_path(path)
        gx = np.asarray(grid_x, dtype=np.float64)
        gy = np.asarray(grid_y, dtype=np.float64)
        if gx.ndim != 2 or gx.shape != gy.shape or gx.size == 0:
            raise InputError(f"grid_x, grid_y: expected two 2-D arrays of one shape, got "
                             f"{gx.shape} and {gy.shape}; pass the point grid (ny, nx)")
        if not (np.all(np.isfinite(gx)) and np.all(np.isfinite(gy))):
            raise InputError("grid_x, grid_y: hold NaN or infinite positions; pass finite "
                             "point positions")
        if isinstance(n_frames, bool) or not isinstance(n_frames, (int, np.integer)) \
                or n_frames < 1:
            raise InputError(f"n_frames: expected a positive integer, got {n_frames!r}; "
                             "pass the number of images")
        n_frames = int(n_frames)
        settings_text = settings_json(settings)
        names = string_list(image_names, "image_names", n_frames)
        digests = string_list(image_sha256, "image_sha256", n_frames)
        if image_times is None:
            times = np.full(n_frames, np.nan)
        else:
            times = np.asarray(image_times, dtype=np.float64)
            if times.shape != (n_frames,):
                raise InputError(f"image_times: shape {times.shape} for {n_frames} frames; "
                                 "pass one time per image (NaN if unknown)")
        mask = None
        if roi_mask is not None:
            mask = np.asarray(roi_mask)
            if mask.ndim != 2 or mask.dtype != bool:
                raise InputError(f"roi_mask: expected a 2-D boolean array, got "
                                 f"{mask.dtype} of shape {mask.shape}; pass the ROI mask")
        try:
            strain_specs = [strain_spec(*spec) if len(spec) == 3 else
                            strain_spec(*spec, None) for spec in strain]
        except TypeError:
            raise InputError("strain: expected (measure, window) or (measure, window, attrs) "
                             "items; pass e.g. [('green_lagrange', 15)]") from None
        if scale_mm_per_px is None:
            scale = math.nan
        else:
            scale = float(scale_mm_per_px)
            if not (math.isfinite(scale) and scale > 0):
                raise InputError(f"scale_mm_per_px: {scale_mm_per_px!r} is not a positive "
                                 "number; pass mm per pixel or None if unknown")

        check_folder(p, "create results file")
        if p.exists() and not overwrite:
            raise FileExistsError(f"results file '{p}' already exists; choose a "
                                  "new --out file, resume it, or pass overwrite=True")
        if p.is_dir():
            raise IsADirectoryError(f"cannot create results file '{p}': it is a "
                                    "folder; give a file name such as run.h5")
        remove_stale_partials(p)
        tmp = partial_name(p)
        h5py = load_h5py()
        ny, nx = gx.shape
        try:
            with atomic_write(p, None, fsync=fsync) as tmp, \
                    open_h5(tmp, "w", "create", **WRITE_KW) as f:
                _at("create", -1)
                a = f.attrs
                a["format"] = FORMAT
                a["format_version"] = np.int64(FORMAT_VERSION)
                a["package_version"] = __version__
                a["created"] = now_utc()
                a["settings"] = settings_text
                a["units"] = "px"
                a["scale_mm_per_px"] = np.float64(scale)
                a["n_frames"] = np.int64(n_frames)
                nd = fixed_dataset(f, "n_done", (), np.int64)
                nd[()] = 0
                nd.attrs["description"] = "frames completed; frames 0 .. n_done-1 are whole"
                g = f.create_group("grid")
                g.create_dataset("x", data=gx, track_times=False)
                g.create_dataset("y", data=gy, track_times=False)
                g.attrs["units"] = "px"
                if mask is not None:
                    f.create_group("roi").create_dataset(
                        "mask", data=mask, compression="gzip", shuffle=True, track_times=False)
                im = f.create_group("images")
                sdt = h5py.string_dtype("utf-8")
                im.create_dataset("name", data=np.array(names, dtype=object), dtype=sdt,
                                  track_times=False)
                im.create_dataset("sha256", data=np.array(digests, dtype=object), dtype=sdt,
                                  track_times=False)
                im.create_dataset("time", data=times, track_times=False)
                im["time"].attrs["units"] = "s"
                fr = f.create_group("frames")
                for name, shape, dtype in frame_layout(ny, nx, bool(second_derivatives)):
                    fixed_dataset(fr, name, (n_frames, *shape), dtype)
                fr["u"].attrs["units"] = "px"
                fr["v"].attrs["units"] = "px"
                fr["grad"].attrs["description"] = "grad[..., i, j] = d u_i / d X_j"
                fr["reason"].attrs["codes"] = json.dumps(
                    {r.name.lower(): int(r) for r in Reason})
                fixed_dataset(fr, "reference", (n_frames,), np.int32)
                fixed_dataset(fr, "reference_update", (n_frames,), np.uint8)
                fixed_dataset(fr, "finished", (n_frames,), f"S{TIME_FORMAT_LEN}")
                fr["finished"].attrs["description"] = "ISO 8601 UTC time the frame was completed"
                f.create_group("strain")
                for key, measure, window, extra in strain_specs:
                    if key not in f["strain"]:
                        build_strain_group(f, measure, window, extra)
            # leaving the block closes the file (HDF5 writes its last records), syncs it and
            # renames it over the target; on any error the temporary is removed
        except OSError as exc:
            if str(exc).startswith("cannot create results"):
                raise type(exc)(str(exc).replace(str(tmp), str(p))) from None
            error = DiskFull if is_disk_full(exc) else ResultsFileError
            raise error(f"cannot create results file '{p}' ({one_line(exc)}); free "
                        "disk space or choose another --out folder") from None
        return cls(p, fsync=fsync, _token=_TOKEN)

    @classmethod
    def resume(cls, path, *, settings, image_names, image_sha256, fsync=True) -> "ResultsWriter":
        """Reopen a results file to carry on after the last completed frame.

        Parameters
        ----------
        path : str or os.PathLike
            An existing results file.
        settings : dict
            The analysis settings; must equal the stored ones key for key.
        image_names, image_sha256 : sequence of str
            The image list; must equal the stored one.
        fsync : bool, optional
            As in :meth:`create`.

        Returns
        -------
        ResultsWriter
            With ``n_done`` read from the file; the next frame to write is ``n_done``.

        Raises
        ------
        ValueError
            Settings or images differ from those stored (the message names them), or the
            file is not a results file.
        OSError
            The file is missing, not writable, or open in another writer.
        """
        p = check_path(path)
        new = json.loads(settings_json(settings))
        names = string_list(image_names, "image_names", None)
        digests = string_list(image_sha256, "image_sha256", len(names))
        with open_h5(p, "r", "resume", locking=False) as f:
            read_format(f, p)
            old = with_added_settings(json.loads(f.attrs["settings"]), new)
            diff = differences(old, new)
            if diff:
                parts = "; ".join(f"{k}: {short(a)} in file, {short(b)} now"
                                  for k, a, b in diff)
                raise ResultsMismatch(f"settings: results file '{p}' was made with other "
                                      f"settings ({parts}); {FIX_SETTINGS}", fix=FIX_SETTINGS)
            old_names = list(f["images/name"].asstr()[()])
            old_digests = list(f["images/sha256"].asstr()[()])
            n_done = int(f["n_done"][()])
            # the images completed frames depend on: their own and their reference images
            order = old.get("frames", list(range(len(old_names)))) \
                if isinstance(old, dict) else list(range(len(old_names)))
            used = {int(r) for r in f["frames/reference"][:n_done]} if n_done else set()
        if len(old_names) != len(names):
            raise ResultsMismatch(f"image_names: results file '{p}' was made from "
                                  f"{len(old_names)} images, {len(names)} given now; "
                                  f"{FIX_IMAGES}", fix=FIX_IMAGES)
        for i, (a, b) in enumerate(zip(old_names, names)):
            if a != b:
                raise ResultsMismatch(f"image_names: results file '{p}' was made from other "
                                      f"images (image {i}: {a!r} in file, {b!r} now); "
                                      f"{FIX_IMAGES}", fix=FIX_IMAGES)
        renewed = {}
        for i, (a, b) in enumerate(zip(old_digests, digests)):
            if a == b:
                continue
            image = order[i] if i < len(order) else i
            if i < n_done or image in used:
                raise ResultsMismatch(f"image_sha256: image {i} ({names[i]!r}) has changed "
                                      f"since frame {i} was stored in results file '{p}' "
                                      f"(SHA-256 differs); {FIX_IMAGES}", fix=FIX_IMAGES)
            renewed[i] = b  # not used yet (e.g. a damaged image copied again): take the new one
        remove_stale_partials(p)
        w = cls(p, fsync=fsync, _token=_TOKEN)
        if renewed:
            try:
                w._restructure("record the new image digests in",
                               lambda h: _set_digests(h, renewed))
            except BaseException:
                w.close()
                raise
        return w

    @classmethod
    def reopen(cls, path, *, fsync=True) -> "ResultsWriter":
        """Open an existing results file to add strain (no settings check).

        Frames can be written through it too, but :meth:`resume` is the checked way to carry
        on an analysis.

        Parameters
        ----------
        path : str or os.PathLike
            An existing results file.
        fsync : bool, optional
            As in :meth:`create`.

        Returns
        -------
        ResultsWriter
        """
        p = check_path(path)
        remove_stale_partials(p)
        return cls(p, fsync=fsync, _token=_TOKEN)

    def _open(self, lock=None) -> None:
        self._lock = lock_file(self.path, "results file") if lock is None else lock
        try:
            f = open_h5(self.path, "r+", "open", **WRITE_KW)
        except BaseException:
            self._unlock()
            raise
        try:
            read_format(f, self.path)
            self.n_frames = int(f.attrs["n_frames"])
            self.n_done = int(f["n_done"][()])
            if not 0 <= self.n_done <= self.n_frames:
                raise InputError(f"path: '{self.path}' has n_done={self.n_done} outside 0.."
                                 f"{self.n_frames}; the file is damaged, start a new one")
            self.shape = tuple(f["grid/x"].shape)
            self._x = f["grid/x"][()]
            self._y = f["grid/y"][()]
            self._has_grad2 = "grad2" in f["frames"]
        except BaseException:
            f.close()
            self._unlock()
            raise
        self._f = f

    def _unlock(self) -> None:
        fd, self._lock = getattr(self, "_lock", None), None
        unlock_file(fd)  # closing the descriptor releases the lock

    # ---------------------------------------------------------------- context manager
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def close(self) -> None:
        """Close the file (idempotent). Completed frames are already safe before this."""
        f, self._f = self._f, None
        try:
            if f is not None:
                f.close()
        finally:
            self._unlock()

    @property
    def closed(self) -> bool:
        """True once :meth:`close` has run."""
        return self._f is None

    def _need_open(self):
        if self._f is None:
            raise InputError(f"results file '{self.path}' is closed; open a new writer")
        return self._f

    def _reserve(self, group, names, k0: int, k1: int) -> None:
        """Reserve disk blocks for frames ``k0 .. k1-1`` of the named datasets of ``group``.

        HDF5 passes writes smaller than its sieve buffer through that buffer, which it later
        writes back whole (up to the buffer's size from the first byte written, within the
        dataset): that window is reserved too, or its write-back could meet a full disk.
        """
        sieve = int(self._f.id.get_access_plist().get_sieve_buf_size())
        ranges = []
        for name in names:
            d = group[name]
            offset = d.id.get_offset()
            if offset is None:  # no storage yet (cannot happen with fixed_dataset)
                continue
            size = d.id.get_storage_size()
            per = size // max(d.shape[0], 1)
            start = offset + k0 * per
            end = min(offset + size, max(offset + k1 * per, start + sieve))
            ranges.append((start, end - start))
        reserve_space(self.path, ranges)

    def _sync(self, f) -> None:
        f.flush()
        if self._fsync:
            os.fsync(f.id.get_vfd_handle())

    # ---------------------------------------------------------------- frames
    def add_reference_update(self, k) -> None:
        """Mark frame ``k`` as the first frame matched against a new reference image.

        Call it before ``write_frame(k)``: the mark is committed together with frame ``k``,
        so a stop between the two cannot lose it.

        Parameters
        ----------
        k : int
            Must equal ``n_done`` (the next frame to be written).
        """
        self._need_open()
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or int(k) != self.n_done:
            raise InputError(f"k: reference update for frame {k!r}, but the next frame to write "
                             f"is {self.n_done}; call add_reference_update(k) just before "
                             "write_frame(k)")
        self._pending_update = int(k)

    def write_frame(self, k, field: DisplacementField, *, reference_index) -> None:
        """Store the displacement field of frame ``k`` and commit it.

        Writes only frame ``k``'s slots; nothing of earlier frames is read.

        Parameters
        ----------
        k : int
            Frame index; must equal ``n_done`` (frames are written in order).
        field : DisplacementField
            On the file's grid.
        reference_index : int
            Index of the image this frame was matched against.

        Raises
        ------
        ValueError
            ``k`` out of order, a field of another grid, or ``reference_index`` out of range.
        OSError
            The write failed (for example a full disk); the file keeps its earlier frames and
            ``n_done`` is unchanged, so the frame can be written again after the fix.
        """
        f = self._need_open()
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
            raise InputError(f"k: expected an integer frame index, got {k!r}")
        k = int(k)
        if k >= self.n_frames and k == self.n_done:
            raise InputError(f"k: all {self.n_frames} frames of '{self.path}' are written; "
                             "make a new file for more frames")
        if k != self.n_done:
            raise InputError(f"k: frames are written in order; the next frame is "
                             f"{self.n_done}, got {k}")
        if not isinstance(field, DisplacementField):
            raise InputError(f"field: expected a DisplacementField, got "
                             f"{type(field).__name__}")
        if isinstance(reference_index, bool) or not isinstance(reference_index,
                                                                (int, np.integer)) \
                or not 0 <= int(reference_index) < self.n_frames:
            raise InputError(f"reference_index: {reference_index!r} is not an image index in "
                             f"0..{self.n_frames - 1}; pass the index of the reference image")
        ny, nx = self.shape
        with_grad2 = self._has_grad2 or field.grad2 is not None
        arrays = {}
        for name, shape, dtype in frame_layout(ny, nx, with_grad2):
            value = getattr(field, name)
            if value is None:  # no grad2 (e.g. a combined field): NaN; no shape order: 0
                value = np.zeros(shape) if name == "shape_order" else np.full(shape, np.nan)
            a = np.asarray(value)
            if a.shape != shape:
                raise InputError(f"field.{name}: shape {a.shape}, the file's grid needs {shape}; "
                                 "write fields on the grid the file was created with")
            arrays[name] = a.astype(dtype, copy=False)
        if not (np.array_equal(np.asarray(field.x), self._x)
                and np.array_equal(np.asarray(field.y), self._y)):
            raise InputError("field.x, field.y: point positions differ from the file's grid; "
                             "write fields on the grid the file was created with")
        if with_grad2 and not self._has_grad2:
            # second derivatives turn up: add room for them (on a copy, see _restructure;
            # cheapest at frame 0), NaN for the frames already stored without them
            self._restructure("add second derivatives to",
                              lambda h: add_grad2(h, self.n_frames, k, ny, nx))
            f = self._f
        try:
            fr = f["frames"]
            arrays = {n: a for n, a in arrays.items() if stored_name(fr, n) in fr}  # older files
            names = [*(stored_name(fr, n) for n in arrays), "reference", "reference_update",
                     "finished"]
            # disk blocks for the frame's slots first: a full disk stops here, before HDF5
            # buffers a write it could not carry out (it would report that only when the
            # buffer is dropped, too late to keep n_done honest)
            _at("reserve", k)
            self._reserve(fr, names, k, k + 1)
            for j, (name, a) in enumerate(arrays.items()):
                fr[stored_name(fr, name)][k] = a  # an older file's name where it has one
                if j == 0:
                    _at("data", k)
            fr["reference"][k] = np.int32(reference_index)
            fr["reference_update"][k] = np.uint8(self._pending_update == k)
            fr["finished"][k] = np.bytes_(now_utc(ms=True))
            self._sync(f)
            _at("commit", k)
            f["n_done"][()] = np.int64(k + 1)
            f.flush()
        except OSError as exc:
            error = DiskFull if is_disk_full(exc) else ResultsFileError
            kept = (f"frames 0..{k - 1} are saved" if k else "no frame is saved yet")
            raise error(f"cannot write frame {k} to results file '{self.path}' "
                        f"({one_line(exc)}); {kept}; {FIX_SPACE}") from None
        self.n_done = k + 1
        self._pending_update = None

    # ---------------------------------------------------------------- strain
    def write_strain(self, measure, window, arrays, *, start=0, attrs=None) -> None:
        """Store strain tensor components for frames ``start .. start + m - 1``.

        The first call for a ``(measure, window)`` pair adds the group
        ``/strain/<measure>_w<window>`` (on a copy of the file that then replaces it, so the
        file is never left half-changed); later calls only fill frames.

        Parameters
        ----------
        measure : str
            Strain measure name, e.g. ``"green_lagrange"``.
        window : int
            Strain window (points per side of the least-squares fit).
        arrays : dict
            ``{"xx": a, "yy": a, "xy": a}`` (``xy`` tensor shear), each of shape (ny, nx) for
            one frame or (m, ny, nx) for ``m`` frames.
        start : int, optional
            First frame; frames must already have displacements (``start + m <= n_done``).
        attrs : dict, optional
            More group attributes (``vsg``, ``fit``, ...). Values already stored must not
            change; attributes the group lacks are added (on a copy of the file).

        Raises
        ------
        ValueError
            Bad names, shapes, frames, or attributes that differ from the stored ones.
        OSError
            The write failed; frames already flagged as written stay intact.
        """
        f = self._need_open()
        key, measure, window, extra = strain_spec(measure, window, attrs)
        if not isinstance(arrays, dict) or set(arrays) != set(STRAIN_COMPONENTS):
            got = sorted(arrays) if isinstance(arrays, dict) else type(arrays).__name__
            raise InputError(f"arrays: expected a dict with keys xx, yy, xy, got {got}")
        ny, nx = self.shape
        comps = {}
        for c in STRAIN_COMPONENTS:
            a = np.asarray(arrays[c], dtype=np.float64)
            if a.shape == (ny, nx):
                a = a[None]
            if a.ndim != 3 or a.shape[1:] != (ny, nx):
                raise InputError(f"arrays[{c!r}]: shape {np.shape(arrays[c])}, expected "
                                 f"({ny}, {nx}) or (m, {ny}, {nx}); pass strain on the file's "
                                 "grid")
            comps[c] = a
        m = comps["xx"].shape[0]
        if any(a.shape[0] != m for a in comps.values()):
            raise InputError("arrays: xx, yy and xy hold different numbers of frames; pass "
                             "the same frames for each")
        if isinstance(start, bool) or not isinstance(start, (int, np.integer)) or start < 0 \
                or start + m > self.n_done:
            raise InputError(f"start: frames {start}..{start + m - 1} requested, but only "
                             f"frames 0..{self.n_done - 1} have displacements; write strain "
                             "for completed frames")
        if key not in f["strain"]:
            self._restructure(f"add strain {key} to",
                              lambda h: build_strain_group(h, measure, window, extra))
            f = self._f
        else:
            stored = group_attrs(f["strain"][key])
            diff = [k for k, v in extra.items() if k in stored and not same_value(stored[k], v)]
            if diff:
                have = ", ".join(f"{k}={stored[k]!r}" for k in diff)
                raise InputError(f"attrs: strain {key} is stored with other {', '.join(diff)} "
                                 f"({have}); use another measure or window for other "
                                 "settings")
            missing = {k: v for k, v in extra.items() if k not in stored}
            if missing:  # a group made before these were known: add them on a copy
                self._restructure(f"add attributes of strain {key} to",
                                  lambda h: set_attrs(h["strain"][key], missing))
                f = self._f
        g = f["strain"][key]
        s = int(start)
        try:
            _at("strain", s)
            self._reserve(g, list(comps), s, s + m)
            for c, a in comps.items():
                g[c][s:s + m] = a
            self._sync(f)
            g["written"][s:s + m] = np.ones(m, np.uint8)
            f.flush()
        except OSError as exc:
            error = DiskFull if is_disk_full(exc) else ResultsFileError
            raise error(f"cannot write strain {key} to results file '{self.path}' "
                          f"({one_line(exc)}); free disk space, then store the strain "
                          "again") from None

    def write_strain_frame(self, k, strain) -> None:
        """Store the strain of frame ``k`` from a :class:`dic.strain.StrainField`.

        The group is ``/strain/<measure>_w<window>`` with the field's ``measure`` and
        ``window``; its attributes ``fit``, ``vsg``, ``step``, ``subset`` and ``min_points``
        come from the field.

        Parameters
        ----------
        k : int
            A completed frame (``k < n_done``).
        strain : dic.strain.StrainField
            On the file's grid.
        """
        try:
            measure, window = strain.measure, int(strain.window)
            comps = {c: getattr(strain, c) for c in STRAIN_COMPONENTS}
        except AttributeError:
            raise InputError(f"strain: expected a StrainField, got {type(strain).__name__}; "
                             "pass the result of dic.strain_field") from None
        attrs = {}
        for name in ("fit", "vsg", "step", "subset", "min_points"):
            value = getattr(strain, name, None)
            if value is not None:
                attrs[name] = value.item() if isinstance(value, np.generic) else value
        self.write_strain(measure, window, comps, start=k, attrs=attrs)

    def strain_written(self, measure, window) -> np.ndarray:
        """Flags (0/1) of the completed frames whose strain ``measure``/``window`` is stored.

        Zeros for every frame when the file has no such strain group yet; a run stopped
        between a frame and its strain leaves a 0 there, which a resume fills.
        """
        f = self._need_open()
        key = strain_spec(measure, window, None)[0]
        if key not in f["strain"]:
            return np.zeros(self.n_done, np.uint8)
        return f["strain"][key]["written"][: self.n_done]

    @property
    def reference_updates(self) -> np.ndarray:
        """Completed frames flagged by :meth:`add_reference_update`."""
        f = self._need_open()
        return np.flatnonzero(f["frames/reference_update"][: self.n_done])

    def read_field(self, k) -> DisplacementField:
        """The stored displacement field of completed frame ``k`` (e.g. to carry on a resume).

        Reading is only done on request; :meth:`write_frame` never reads.
        """
        f = self._need_open()
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) \
                or not 0 <= int(k) < self.n_done:
            raise IndexError(f"k: frame {k!r} is not completed (frames 0..{self.n_done - 1} "
                             "are); pick a completed frame")
        return read_field(f, int(k), self._x, self._y, json.loads(f.attrs["settings"]))

    def _restructure(self, what: str, change) -> None:
        """Apply ``change(h5file)`` to a copy of the file, then swap the copy in atomically.

        For changes of the file's structure (new groups, datasets, attributes), which HDF5
        cannot make safe against a kill in place.
        """
        p = self.path
        f, self._f = self._f, None
        f.close()
        old_lock, self._lock = self._lock, None  # keep the old file locked while copying
        try:
            try:
                # the copy is synced and renamed over the file when the block ends; on any
                # error the copy is removed and the file stays as it was
                with atomic_write(p, None, fsync=self._fsync) as tmp:
                    sparse_copy(p, tmp)
                    with open_h5(tmp, "r+", "update", **WRITE_KW) as h:
                        change(h)
            except BaseException as exc:
                lock, old_lock = old_lock, None
                self._open(lock)  # the file is unchanged: reopen it under the lock still held
                if isinstance(exc, OSError):
                    error = DiskFull if is_disk_full(exc) else ResultsFileError
                    raise error(f"cannot {what} results file '{p}' ({one_line(exc)}); "
                                "free disk space and try again") from None
                raise
            self._open()
        finally:
            unlock_file(old_lock)


def _set_digests(h, renewed: dict) -> None:
    d = h["images/sha256"]
    digests = list(d.asstr()[()])
    for i, b in renewed.items():
        digests[i] = b
    d[...] = np.array(digests, dtype=object)


def open_for_writing(path, *, settings, grid_x, grid_y, n_frames, image_names, image_sha256,
                     image_times=None, roi_mask=None, scale_mm_per_px=None,
                     second_derivatives=False, strain=(), overwrite=False,
                     fsync=True) -> ResultsWriter:
    """Resume the results file of the same analysis if there is one, else create it.

    Parameters are those of :meth:`ResultsWriter.create`. An existing file is resumed (see
    :meth:`ResultsWriter.resume`) unless ``overwrite`` is True, in which case a new file
    replaces it.

    Returns
    -------
    ResultsWriter
        Ready for frame ``n_done`` (0 for a new file).

    Raises
    ------
    ValueError
        The existing file was made with other settings, images, grid, region of interest or
        scale (the message names them and the fix).
    OSError
        As for :meth:`ResultsWriter.create` and :meth:`ResultsWriter.resume`.
    """
    p = check_path(path)
    kw = dict(settings=settings, image_names=image_names, image_sha256=image_sha256,
              fsync=fsync)
    if overwrite or not p.exists():
        return ResultsWriter.create(p, grid_x=grid_x, grid_y=grid_y, n_frames=n_frames,
                                    image_times=image_times, roi_mask=roi_mask,
                                    scale_mm_per_px=scale_mm_per_px,
                                    second_derivatives=second_derivatives, strain=strain,
                                    overwrite=overwrite, **kw)
    w = ResultsWriter.resume(p, **kw)
    try:
        f = w._f
        problem = None
        if w.n_frames != n_frames:
            problem = f"n_frames: {w.n_frames} in file, {n_frames} now"
        elif not (np.array_equal(w._x, np.asarray(grid_x, dtype=np.float64))
                  and np.array_equal(w._y, np.asarray(grid_y, dtype=np.float64))):
            problem = "grid_x, grid_y: the point grid differs from the file's"
        else:
            stored = f["roi/mask"][()] if "roi/mask" in f else None
            given = None if roi_mask is None else np.asarray(roi_mask)
            if (stored is None) != (given is None) or (
                    stored is not None and not np.array_equal(stored, given)):
                problem = "roi_mask: the region of interest differs from the file's"
            else:
                old = float(f.attrs["scale_mm_per_px"])
                new = math.nan if scale_mm_per_px is None else float(scale_mm_per_px)
                if not same_value(old, new):
                    problem = (f"scale_mm_per_px: {old:g} in file, {new:g} now")
        if problem:
            raise ResultsMismatch(f"{problem} (results file '{p}'); {FIX_SETTINGS}",
                                  fix=FIX_SETTINGS)
    except BaseException:
        w.close()
        raise
    return w
