"""The results file: one HDF5 file per analysis, written frame by frame and safe to kill.

A sequence analysis writes one displacement field per image into a single HDF5 file. The file
can be read with plain h5py (or any HDF5 reader); :class:`Results` is the convenient way in
Python, :func:`results_info` prints a summary, and :class:`ResultsWriter` writes it.

Layout
------
Root attributes, written once when the file is made and never changed afterwards:

=================== =======================================================================
``format``          ``"dic-results"``
``format_version``  ``1``
``package_version`` version of the ``dic`` package that made the file
``created``         ISO 8601 UTC time the file was made, e.g. ``2026-05-09T07:35:25Z``
``settings``        JSON text of every analysis setting
``units``           ``"px"``: displacements and positions are in pixels of the reference image
``scale_mm_per_px`` millimetres per pixel, NaN if unknown
``n_frames``        planned number of frames (= number of images)
=================== =======================================================================

There is no "last updated" attribute (changing attributes would change HDF5 metadata after the
file is made, see below): the time of the last completed frame is
``frames/finished[n_done - 1]``.

Datasets (``F`` = ``n_frames``, ``(ny, nx)`` = grid shape)::

    /n_done              ()            int64    frames completed: frames 0 .. n_done-1 are whole
    /grid/x, /grid/y     (ny, nx)      float64  point positions, reference-image pixels
    /roi/mask            (rows, cols)  bool     region of interest (only if one was given;
                                                gzip-compressed)
    /images/name         (F,)          UTF-8    image names as given to the writer
    /images/sha256       (F,)          UTF-8    SHA-256 of each image file (hex)
    /images/time         (F,)          float64  time of each image in s, NaN if unknown
    /frames/u, /frames/v (F, ny, nx)   float64  displacements in px, NaN where not measured
    /frames/grad         (F, ny, nx, 2, 2) float64  grad[..., i, j] = d u_i / d X_j
    /frames/grad2        (F, ny, nx, 2, 3) float64  second derivatives d2u_i/dx2, d2u_i/dxdy,
                                                d2u_i/dy2 (only if some frame had them;
                                                NaN in frames without them)
    /frames/zncc         (F, ny, nx)   float32  zero-normalised cross-correlation of each match
    /frames/reason       (F, ny, nx)   int8     reason code per point (dic.Reason; 0 = measured)
    /frames/iterations   (F, ny, nx)   int16    Gauss-Newton iterations
    /frames/sigma_u, /frames/sigma_v (F, ny, nx) float32  predicted standard deviation of u and
                                                v from each subset's Hessian and the image
                                                noise (NaN where not measured or unknown)
    /frames/reference    (F,)          int32    index of the image each frame was matched against
    /frames/reference_update (F,)      uint8    1 where the tracker switched to a new reference
    /frames/finished     (F,)          ASCII    ISO 8601 UTC time each frame was completed
    /strain/<measure>_w<window>/xx|yy|xy (F, ny, nx) float64  strain tensor components (xy is
                                                tensor shear, half the engineering shear angle)
    /strain/<measure>_w<window>/written  (F,)   uint8    1 where that frame's strain is stored
        group attributes: measure, window, and whatever else the caller gave (vsg, fit, ...)

Only frames ``0 .. n_done-1`` (and strain frames flagged in ``written``) hold results; the
rest of each frame dataset is unused space (zeros, or the remains of a frame that was being
written when the writer stopped). The reference-image changes are
``numpy.flatnonzero(f["frames/reference_update"][:n_done])``.

Reading with plain h5py::

    with h5py.File("run.h5", "r") as f:          # add locking=False while a writer runs
        n = int(f["n_done"][()])
        u_last = f["frames/u"][n - 1]

How a killed writer leaves a readable file
------------------------------------------
Every structural part of the file (groups, datasets, attributes, image names) is written once,
into a temporary file beside the target, which is flushed, synced and renamed over the target
(``os.replace`` is atomic). The frame datasets are preallocated at their full size with
contiguous storage, so each later frame write puts raw numbers at fixed file offsets and never
touches HDF5's own bookkeeping (object headers, chunk indexes, free-space records, superblock).
A frame is committed in this order:

1. write the frame's numbers into their slots (u, v, grad, ..., reference, finished time);
2. flush HDF5's buffers to the operating system and, unless ``fsync=False``, ``os.fsync``;
3. write ``n_done = k + 1``, one 8-byte integer at an 8-byte-aligned offset (so within one
   page: the kernel cannot tear it), and flush.

A process stopped at any instant (SIGKILL, a crash, Ctrl-C, a full disk) therefore leaves a file
whose structure is exactly as it was made and whose ``n_done`` counts only frames whose numbers
were already in the file. Data in the operating system's page cache survives the death of the
process; ``fsync`` in step 2 extends the guarantee to a power cut on file systems that honour
it. :meth:`ResultsWriter.resume` carries on at frame ``n_done`` and overwrites any partial
frame, so an interrupted and resumed run ends with the same numbers as an uninterrupted one.
On Ctrl-C (KeyboardInterrupt) the writer, used as a context manager, also closes the file.

While a writer runs it holds an exclusive advisory lock on the file (released by the kernel when
the process ends, however it ends), which keeps a second writer out; readers open the file
without locking (:meth:`Results.open`, or ``h5py.File(path, "r", locking=False)``) and see the
frames completed so far. The guarantee assumes POSIX write() semantics, as HDF5's own
single-writer/multiple-reader mode does; network file systems may not give them.

Strain groups named when the file is made (``create(strain=...)``) are preallocated like the
frames. A strain group first named later changes the file's structure, so it is added on a copy
of the file that then replaces it atomically (this costs one copy of the file). Filling strain
frames is again raw writes, committed by the one-byte ``written`` flags.

Alternatives weighed and rejected:

- HDF5 single-writer/multiple-reader mode (SWMR) orders metadata writes so that the file stays
  consistent for readers, but a writer that dies leaves the superblock marked "open for write":
  plain ``h5py.File(path, "r")`` and any reopening for writing then fail with "file is already
  open for write (may use <h5clear file> ...)" until the HDF5 command-line tool ``h5clear``
  clears the mark, and h5py has no call for that (HDF5 h5clear documentation; checked with
  h5py 3.16 / HDF5 2.0). SWMR also forbids adding datasets or attributes while writing.
- Compressed chunks: a compressed chunk's size varies, so every frame would change the chunk
  index and the file's end-of-allocation record, and without SWMR HDF5 does not order those
  metadata writes: a kill between them can leave pointers to space the file does not hold.
  The price of the design chosen is that frames are stored uncompressed: 63 bytes per grid point
  per frame (111 with second derivatives), plus 24 per strain group.
- A side journal from which a damaged file is rebuilt would need a good copy of the whole file
  to rebuild from; the fixed layout needs no repair step at all.
"""

from __future__ import annotations

import datetime as _dt
import errno
import json
import math
import os
import re
from pathlib import Path

import numpy as np

from dic import __version__
from dic.field import DisplacementField, Reason

__all__ = ["FORMAT", "FORMAT_VERSION", "Results", "ResultsWriter", "open_for_writing",
           "results_info"]

#: value of the root attribute ``format``
FORMAT = "dic-results"
#: value of the root attribute ``format_version`` written by this module
FORMAT_VERSION = 1

_FIX_SETTINGS = "use a new --out file or the same settings"
_FIX_IMAGES = "use a new --out file or the same images"
_FIX_SPACE = "free disk space or choose another --out folder, then resume"
_TIME_FORMAT_LEN = 24  # "2026-05-09T07:35:25.123Z"
_STRAIN_COMPONENTS = ("xx", "yy", "xy")
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


# --------------------------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------------------------
def _h5py():
    import h5py  # noqa: PLC0415 -- keep `import dic` light

    return h5py


def _now(ms: bool = False) -> str:
    t = _dt.datetime.now(_dt.timezone.utc)
    if ms:
        return t.strftime("%Y-%m-%dT%H:%M:%S.") + f"{t.microsecond // 1000:03d}Z"
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def _one_line(exc: BaseException) -> str:
    """The gist of an exception on one line (HDF5's long I/O errors cut to their cause)."""
    text = " ".join(str(exc).split())
    m = re.search(r"error message = '([^']*)'", text)
    if m:  # HDF5: "... errno = 28, error message = 'No space left on device' (time = ..."
        head = text.split(",")[0].split("(")[0].strip()
        return f"{head}: {m.group(1)}" if head else m.group(1)
    return text or type(exc).__name__


def _json_default(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    raise TypeError(type(obj).__name__)


def _settings_json(settings) -> str:
    if not isinstance(settings, dict):
        raise ValueError(f"settings: expected a dict of analysis settings, got "
                         f"{type(settings).__name__}; pass a dict")
    for key, value in settings.items():
        if not isinstance(key, str):
            raise ValueError(f"settings: key {key!r} is not a string; use string keys")
        try:
            json.dumps(value, default=_json_default)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"settings: value of {key!r} cannot be stored as JSON "
                             f"({_one_line(exc)}); give numbers, strings, lists or dicts") from None
    return json.dumps(settings, sort_keys=True, default=_json_default)


def _differences(old, new, prefix=""):
    """Dotted names of the keys whose values differ between two JSON-like dicts."""
    out = []
    for key in sorted(set(old) | set(new)):
        name = f"{prefix}{key}"
        if key not in old or key not in new:
            out.append((name, old.get(key, "<absent>"), new.get(key, "<absent>")))
        elif isinstance(old[key], dict) and isinstance(new[key], dict):
            out.extend(_differences(old[key], new[key], name + "."))
        elif old[key] != new[key]:
            out.append((name, old[key], new[key]))
    return out


def _short(value, width=40) -> str:
    text = json.dumps(value) if not isinstance(value, str) else repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."


def _string_list(values, name: str, n: int | None) -> list[str]:
    if isinstance(values, (str, bytes)):
        raise ValueError(f"{name}: expected a list of strings, got one string; pass a list")
    try:
        out = [os.fspath(v) if isinstance(v, os.PathLike) else v for v in values]
    except TypeError:
        raise ValueError(f"{name}: expected a list of strings; pass a list") from None
    for i, v in enumerate(out):
        if not isinstance(v, str) or not v:
            raise ValueError(f"{name}: entry {i} is {v!r}, not a non-empty string; "
                             "pass one string per image")
    if n is not None and len(out) != n:
        raise ValueError(f"{name}: {len(out)} entries for {n} frames; pass one per image")
    return out


def _check_path(path) -> Path:
    try:
        p = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"path: expected a file path, got {type(path).__name__}; "
                         "pass a str or pathlib.Path") from None
    if not p.name:
        raise ValueError(f"path: '{p}' names no file; give a file name such as run.h5")
    return p


def _fsync_path(p: Path) -> None:
    fd = os.open(p, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _partial_name(p: Path) -> Path:
    return p.with_name(f".{p.name}.{os.getpid()}.partial")


def _remove_stale_partials(p: Path) -> None:
    """Remove temporary files that killed writers left beside ``p``."""
    pattern = re.compile(r"^\." + re.escape(p.name) + r"\.(\d+)\.partial$")
    try:
        entries = list(p.parent.iterdir())
    except OSError:
        return
    for entry in entries:
        m = pattern.match(entry.name)
        if not m:
            continue
        pid = int(m.group(1))
        if pid != os.getpid():
            try:
                os.kill(pid, 0)
                continue  # that process still lives: leave its file alone
            except ProcessLookupError:
                pass
            except PermissionError:
                continue
        try:
            entry.unlink()
        except OSError:
            pass


def _writable_folder(p: Path, what: str) -> None:
    folder = p.parent
    if not folder.exists():
        raise FileNotFoundError(f"cannot {what} results file '{p}': folder "
                                f"'{folder}' does not exist; create it or choose another --out")
    if not folder.is_dir():
        raise NotADirectoryError(f"cannot {what} results file '{p}': '{folder}' "
                                 "is not a folder; choose another --out")


def _open_h5(p: Path, mode: str, what: str, **kw):
    """h5py.File with every failure turned into a one-line OSError naming the file."""
    h5py = _h5py()
    try:
        return h5py.File(p, mode, **kw)
    except OSError as exc:
        msg = _one_line(exc)
        if "lock" in msg.lower() and ("errno = 11" in msg or "unavailable" in msg.lower()):
            raise OSError(f"cannot {what} results file '{p}': another process has "
                          "it open for writing; wait for it to finish or stop it") from None
        if isinstance(exc, FileNotFoundError) or "errno = 2," in msg:
            raise FileNotFoundError(f"cannot {what} results file '{p}': no such "
                                    "file; check the path") from None
        if isinstance(exc, PermissionError) or "errno = 13," in msg or "errno = 30," in msg:
            raise PermissionError(f"cannot {what} results file '{p}': permission "
                                  "denied; choose a writable --out folder or fix its "
                                  "permissions") from None
        raise OSError(f"cannot {what} results file '{p}' ({msg}); check that it is an HDF5 "
                      "results file and not damaged") from None


def _fixed_dataset(group, name: str, shape: tuple, dtype):
    """A dataset with contiguous storage allocated now at full size and never filled.

    Writing into it later changes raw data only, never HDF5 metadata.
    """
    h5py = _h5py()
    space = h5py.h5s.create(h5py.h5s.SCALAR) if shape == () else h5py.h5s.create_simple(shape)
    dcpl = h5py.h5p.create(h5py.h5p.DATASET_CREATE)
    dcpl.set_layout(h5py.h5d.CONTIGUOUS)
    dcpl.set_alloc_time(h5py.h5d.ALLOC_TIME_EARLY)
    dcpl.set_fill_time(h5py.h5d.FILL_TIME_NEVER)
    dcpl.set_obj_track_times(False)
    tid = h5py.h5t.py_create(np.dtype(dtype))
    dsid = h5py.h5d.create(group.id, name.encode(), tid, space, dcpl=dcpl)
    return h5py.Dataset(dsid)


# file access options for every writer: 8-byte alignment keeps the 8-byte n_done counter inside
# one page. HDF5's own file locking is off so that readers in the same process (which open
# without a lock) can share the file; the writer takes its own exclusive lock (_lock_file).
_WRITE_KW = dict(alignment_threshold=1, alignment_interval=8, locking=False)


def _lock_file(p: Path):
    """Exclusive advisory lock on ``p`` (flock, as HDF5 uses); None where there is none.

    A second writer fails at once; plain h5py readers that lock (the default) are kept out
    while the writer runs, exactly as HDF5's own locking would; ``locking=False`` readers are
    not. The kernel drops the lock when the process dies, however it dies.
    """
    try:
        import fcntl  # noqa: PLC0415 -- POSIX only
    except ImportError:
        return None
    try:
        fd = os.open(p, os.O_RDONLY)
    except FileNotFoundError:
        raise FileNotFoundError(f"cannot open results file '{p}': no such file; check the "
                                "path") from None
    except OSError as exc:
        raise OSError(f"cannot open results file '{p}' ({_one_line(exc)}); check the "
                      "path") from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        raise OSError(f"cannot open results file '{p}' for writing: another process has it "
                      "open; wait for it to finish or stop it") from None
    except OSError:
        return fd  # the file system has no locks: carry on without
    return fd


def _strain_key(measure: str, window: int) -> str:
    return f"{measure}_w{int(window)}"


def _frame_layout(ny: int, nx: int, second: bool):
    """(name, per-frame shape, dtype) of every per-frame dataset."""
    out = [
        ("u", (ny, nx), np.float64),
        ("v", (ny, nx), np.float64),
        ("grad", (ny, nx, 2, 2), np.float64),
        ("zncc", (ny, nx), np.float32),
        ("reason", (ny, nx), np.int8),
        ("iterations", (ny, nx), np.int16),
        ("sigma_u", (ny, nx), np.float32),
        ("sigma_v", (ny, nx), np.float32),
    ]
    if second:
        out.append(("grad2", (ny, nx, 2, 3), np.float64))
    return out


def _read_format(f, p: Path) -> None:
    fmt = f.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode()
    if fmt != FORMAT:
        raise ValueError(f"path: '{p}' is not a results file (its 'format' attribute is "
                         f"{fmt!r}, expected {FORMAT!r}); pass a file written by dic")
    version = int(f.attrs.get("format_version", -1))
    if version != FORMAT_VERSION:
        raise ValueError(f"path: '{p}' has results format version {version}, this dic reads "
                         f"version {FORMAT_VERSION}; use the dic version that wrote it")


# --------------------------------------------------------------------------------------------
# writer
# --------------------------------------------------------------------------------------------
class ResultsWriter:
    """Write a results file frame by frame; a killed writer leaves every completed frame.

    Make one with :meth:`create` (new analysis), :meth:`resume` (carry on after a stop) or
    :meth:`reopen` (add strain to a file). Use it as a context manager so that the file is
    closed on Ctrl-C or any error. See the module documentation for the file layout and the
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
        p = _check_path(path)
        gx = np.asarray(grid_x, dtype=np.float64)
        gy = np.asarray(grid_y, dtype=np.float64)
        if gx.ndim != 2 or gx.shape != gy.shape or gx.size == 0:
            raise ValueError(f"grid_x, grid_y: expected two 2-D arrays of one shape, got "
                             f"{gx.shape} and {gy.shape}; pass the point grid (ny, nx)")
        if not (np.all(np.isfinite(gx)) and np.all(np.isfinite(gy))):
            raise ValueError("grid_x, grid_y: hold NaN or infinite positions; pass finite "
                             "point positions")
        if isinstance(n_frames, bool) or not isinstance(n_frames, (int, np.integer)) \
                or n_frames < 1:
            raise ValueError(f"n_frames: expected a positive integer, got {n_frames!r}; "
                             "pass the number of images")
        n_frames = int(n_frames)
        settings_text = _settings_json(settings)
        names = _string_list(image_names, "image_names", n_frames)
        digests = _string_list(image_sha256, "image_sha256", n_frames)
        if image_times is None:
            times = np.full(n_frames, np.nan)
        else:
            times = np.asarray(image_times, dtype=np.float64)
            if times.shape != (n_frames,):
                raise ValueError(f"image_times: shape {times.shape} for {n_frames} frames; "
                                 "pass one time per image (NaN if unknown)")
        mask = None
        if roi_mask is not None:
            mask = np.asarray(roi_mask)
            if mask.ndim != 2 or mask.dtype != bool:
                raise ValueError(f"roi_mask: expected a 2-D boolean array, got "
                                 f"{mask.dtype} of shape {mask.shape}; pass the ROI mask")
        try:
            strain_specs = [_strain_spec(*spec) if len(spec) == 3 else
                            _strain_spec(*spec, None) for spec in strain]
        except TypeError:
            raise ValueError("strain: expected (measure, window) or (measure, window, attrs) "
                             "items; pass e.g. [('green_lagrange', 15)]") from None
        if scale_mm_per_px is None:
            scale = math.nan
        else:
            scale = float(scale_mm_per_px)
            if not (math.isfinite(scale) and scale > 0):
                raise ValueError(f"scale_mm_per_px: {scale_mm_per_px!r} is not a positive "
                                 "number; pass mm per pixel or None if unknown")

        _writable_folder(p, "create")
        if p.exists() and not overwrite:
            raise FileExistsError(f"results file '{p}' already exists; choose a "
                                  "new --out file, resume it, or pass overwrite=True")
        if p.is_dir():
            raise IsADirectoryError(f"cannot create results file '{p}': it is a "
                                    "folder; give a file name such as run.h5")
        _remove_stale_partials(p)
        tmp = _partial_name(p)
        h5py = _h5py()
        ny, nx = gx.shape
        try:
            with _open_h5(tmp, "w", "create", **_WRITE_KW) as f:
                a = f.attrs
                a["format"] = FORMAT
                a["format_version"] = np.int64(FORMAT_VERSION)
                a["package_version"] = __version__
                a["created"] = _now()
                a["settings"] = settings_text
                a["units"] = "px"
                a["scale_mm_per_px"] = np.float64(scale)
                a["n_frames"] = np.int64(n_frames)
                nd = _fixed_dataset(f, "n_done", (), np.int64)
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
                for name, shape, dtype in _frame_layout(ny, nx, bool(second_derivatives)):
                    _fixed_dataset(fr, name, (n_frames, *shape), dtype)
                fr["u"].attrs["units"] = "px"
                fr["v"].attrs["units"] = "px"
                fr["grad"].attrs["description"] = "grad[..., i, j] = d u_i / d X_j"
                fr["reason"].attrs["codes"] = json.dumps(
                    {r.name.lower(): int(r) for r in Reason})
                _fixed_dataset(fr, "reference", (n_frames,), np.int32)
                _fixed_dataset(fr, "reference_update", (n_frames,), np.uint8)
                _fixed_dataset(fr, "finished", (n_frames,), f"S{_TIME_FORMAT_LEN}")
                fr["finished"].attrs["description"] = "ISO 8601 UTC time the frame was completed"
                f.create_group("strain")
                for key, measure, window, extra in strain_specs:
                    if key not in f["strain"]:
                        _build_strain_group(f, measure, window, extra)
            if fsync:
                _fsync_path(tmp)  # after closing: the close writes HDF5's last records
            os.replace(tmp, p)
        except BaseException as exc:
            try:
                tmp.unlink()
            except OSError:
                pass
            if isinstance(exc, OSError) and str(exc).startswith("cannot create results"):
                raise type(exc)(str(exc).replace(str(tmp), str(p))) from None
            if isinstance(exc, OSError):
                raise OSError(f"cannot create results file '{p}' ({_one_line(exc)}); free "
                              "disk space or choose another --out folder") from None
            raise
        if fsync:
            _fsync_dir(p.parent)
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
        p = _check_path(path)
        new = json.loads(_settings_json(settings))
        names = _string_list(image_names, "image_names", None)
        digests = _string_list(image_sha256, "image_sha256", len(names))
        with _open_h5(p, "r", "resume", locking=False) as f:
            _read_format(f, p)
            old = json.loads(f.attrs["settings"])
            diff = _differences(old, new)
            if diff:
                parts = "; ".join(f"{k}: {_short(a)} in file, {_short(b)} now"
                                  for k, a, b in diff)
                raise ValueError(f"settings: results file '{p}' was made with other settings "
                                 f"({parts}); {_FIX_SETTINGS}")
            old_names = list(f["images/name"].asstr()[()])
            old_digests = list(f["images/sha256"].asstr()[()])
        if len(old_names) != len(names):
            raise ValueError(f"image_names: results file '{p}' was made from {len(old_names)} "
                             f"images, {len(names)} given now; {_FIX_IMAGES}")
        for i, (a, b) in enumerate(zip(old_names, names)):
            if a != b:
                raise ValueError(f"image_names: results file '{p}' was made from other images "
                                 f"(image {i}: {a!r} in file, {b!r} now); {_FIX_IMAGES}")
        for i, (a, b) in enumerate(zip(old_digests, digests)):
            if a != b:
                raise ValueError(f"image_sha256: image {i} ({names[i]!r}) has changed since "
                                 f"results file '{p}' was made (SHA-256 differs); "
                                 f"{_FIX_IMAGES}")
        _remove_stale_partials(p)
        return cls(p, fsync=fsync, _token=_TOKEN)

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
        p = _check_path(path)
        _remove_stale_partials(p)
        return cls(p, fsync=fsync, _token=_TOKEN)

    def _open(self, lock=None) -> None:
        self._lock = _lock_file(self.path) if lock is None else lock
        try:
            f = _open_h5(self.path, "r+", "open", **_WRITE_KW)
        except BaseException:
            self._unlock()
            raise
        try:
            _read_format(f, self.path)
            self.n_frames = int(f.attrs["n_frames"])
            self.n_done = int(f["n_done"][()])
            if not 0 <= self.n_done <= self.n_frames:
                raise ValueError(f"path: '{self.path}' has n_done={self.n_done} outside 0.."
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
        if fd is not None:
            os.close(fd)  # closing the descriptor releases the lock

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
            raise ValueError(f"results file '{self.path}' is closed; open a new writer")
        return self._f

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
            raise ValueError(f"k: reference update for frame {k!r}, but the next frame to write "
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
            raise ValueError(f"k: expected an integer frame index, got {k!r}")
        k = int(k)
        if k >= self.n_frames and k == self.n_done:
            raise ValueError(f"k: all {self.n_frames} frames of '{self.path}' are written; "
                             "make a new file for more frames")
        if k != self.n_done:
            raise ValueError(f"k: frames are written in order; the next frame is "
                             f"{self.n_done}, got {k}")
        if not isinstance(field, DisplacementField):
            raise ValueError(f"field: expected a DisplacementField, got "
                             f"{type(field).__name__}")
        if isinstance(reference_index, bool) or not isinstance(reference_index,
                                                                (int, np.integer)) \
                or not 0 <= int(reference_index) < self.n_frames:
            raise ValueError(f"reference_index: {reference_index!r} is not an image index in "
                             f"0..{self.n_frames - 1}; pass the index of the reference image")
        ny, nx = self.shape
        with_grad2 = self._has_grad2 or field.grad2 is not None
        arrays = {}
        for name, shape, dtype in _frame_layout(ny, nx, with_grad2):
            value = getattr(field, name)
            if value is None:  # grad2 of a frame without it (e.g. a combined field): NaN
                value = np.full(shape, np.nan)
            a = np.asarray(value)
            if a.shape != shape:
                raise ValueError(f"field.{name}: shape {a.shape}, the file's grid needs {shape}; "
                                 "write fields on the grid the file was created with")
            arrays[name] = a.astype(dtype, copy=False)
        if not (np.array_equal(np.asarray(field.x), self._x)
                and np.array_equal(np.asarray(field.y), self._y)):
            raise ValueError("field.x, field.y: point positions differ from the file's grid; "
                             "write fields on the grid the file was created with")
        if with_grad2 and not self._has_grad2:
            # second derivatives turn up: add room for them (on a copy, see _restructure;
            # cheapest at frame 0), NaN for the frames already stored without them
            self._restructure("add second derivatives to",
                              lambda h: _add_grad2(h, self.n_frames, k, ny, nx))
            f = self._f
        try:
            fr = f["frames"]
            for name, a in arrays.items():
                fr[name][k] = a
            fr["reference"][k] = np.int32(reference_index)
            fr["reference_update"][k] = np.uint8(self._pending_update == k)
            fr["finished"][k] = np.bytes_(_now(ms=True))
            self._sync(f)
            f["n_done"][()] = np.int64(k + 1)
            f.flush()
        except OSError as exc:
            raise OSError(f"cannot write frame {k} to results file '{self.path}' "
                          f"({_one_line(exc)}); {_FIX_SPACE}") from None
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
        key, measure, window, extra = _strain_spec(measure, window, attrs)
        if not isinstance(arrays, dict) or set(arrays) != set(_STRAIN_COMPONENTS):
            got = sorted(arrays) if isinstance(arrays, dict) else type(arrays).__name__
            raise ValueError(f"arrays: expected a dict with keys xx, yy, xy, got {got}")
        ny, nx = self.shape
        comps = {}
        for c in _STRAIN_COMPONENTS:
            a = np.asarray(arrays[c], dtype=np.float64)
            if a.shape == (ny, nx):
                a = a[None]
            if a.ndim != 3 or a.shape[1:] != (ny, nx):
                raise ValueError(f"arrays[{c!r}]: shape {np.shape(arrays[c])}, expected "
                                 f"({ny}, {nx}) or (m, {ny}, {nx}); pass strain on the file's "
                                 "grid")
            comps[c] = a
        m = comps["xx"].shape[0]
        if any(a.shape[0] != m for a in comps.values()):
            raise ValueError("arrays: xx, yy and xy hold different numbers of frames; pass "
                             "the same frames for each")
        if isinstance(start, bool) or not isinstance(start, (int, np.integer)) or start < 0 \
                or start + m > self.n_done:
            raise ValueError(f"start: frames {start}..{start + m - 1} requested, but only "
                             f"frames 0..{self.n_done - 1} have displacements; write strain "
                             "for completed frames")
        if key not in f["strain"]:
            self._restructure(f"add strain {key} to",
                              lambda h: _build_strain_group(h, measure, window, extra))
            f = self._f
        else:
            stored = _group_attrs(f["strain"][key])
            diff = [k for k, v in extra.items() if k in stored and not _same(stored[k], v)]
            if diff:
                have = ", ".join(f"{k}={stored[k]!r}" for k in diff)
                raise ValueError(f"attrs: strain {key} is stored with other {', '.join(diff)} "
                                 f"({have}); use another measure or window for other "
                                 "settings")
            missing = {k: v for k, v in extra.items() if k not in stored}
            if missing:  # a group made before these were known: add them on a copy
                self._restructure(f"add attributes of strain {key} to",
                                  lambda h: _set_attrs(h["strain"][key], missing))
                f = self._f
        g = f["strain"][key]
        s = int(start)
        try:
            for c, a in comps.items():
                g[c][s:s + m] = a
            self._sync(f)
            g["written"][s:s + m] = np.ones(m, np.uint8)
            f.flush()
        except OSError as exc:
            raise OSError(f"cannot write strain {key} to results file '{self.path}' "
                          f"({_one_line(exc)}); free disk space, then store the strain "
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
            comps = {c: getattr(strain, c) for c in _STRAIN_COMPONENTS}
        except AttributeError:
            raise ValueError(f"strain: expected a StrainField, got {type(strain).__name__}; "
                             "pass the result of dic.strain_field") from None
        attrs = {}
        for name in ("fit", "vsg", "step", "subset", "min_points"):
            value = getattr(strain, name, None)
            if value is not None:
                attrs[name] = value.item() if isinstance(value, np.generic) else value
        self.write_strain(measure, window, comps, start=k, attrs=attrs)

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
        return _read_field(f, int(k), self._x, self._y, json.loads(f.attrs["settings"]))

    def _restructure(self, what: str, change) -> None:
        """Apply ``change(h5file)`` to a copy of the file, then swap the copy in atomically.

        For changes of the file's structure (new groups, datasets, attributes), which HDF5
        cannot make safe against a kill in place.
        """
        p = self.path
        tmp = _partial_name(p)
        f, self._f = self._f, None
        f.close()
        old_lock, self._lock = self._lock, None  # keep the old file locked while copying
        try:
            try:
                _sparse_copy(p, tmp)
                with _open_h5(tmp, "r+", "update", **_WRITE_KW) as h:
                    change(h)
                if self._fsync:
                    _fsync_path(tmp)  # after closing: the close writes HDF5's last records
                os.replace(tmp, p)
                if self._fsync:
                    _fsync_dir(p.parent)
            except BaseException as exc:
                try:
                    tmp.unlink()
                except OSError:
                    pass
                lock, old_lock = old_lock, None
                self._open(lock)  # the file is unchanged: reopen it under the lock still held
                if isinstance(exc, OSError):
                    raise OSError(f"cannot {what} results file '{p}' ({_one_line(exc)}); "
                                  "free disk space and try again") from None
                raise
            self._open()
        finally:
            if old_lock is not None:
                os.close(old_lock)


def _add_grad2(h, n: int, n_done: int, ny: int, nx: int) -> None:
    d = _fixed_dataset(h["frames"], "grad2", (n, ny, nx, 2, 3), np.float64)
    nan = np.full((ny, nx, 2, 3), np.nan)
    for j in range(n_done):  # one frame at a time: flat memory
        d[j] = nan


def _same(a, b) -> bool:
    """Equal, counting NaN equal to NaN."""
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b


def _set_attrs(obj, attrs: dict) -> None:
    for k, v in attrs.items():
        obj.attrs[k] = v if not isinstance(v, (list, dict)) else json.dumps(v)


def _sparse_copy(src: Path, dst: Path) -> None:
    """Copy a file, skipping holes where the system can find them (unused frame space)."""
    size = src.stat().st_size
    with open(src, "rb") as fi, open(dst, "wb") as fo:
        fdi = fi.fileno()
        pos = 0
        while pos < size:
            try:
                start = os.lseek(fdi, pos, os.SEEK_DATA)
                end = os.lseek(fdi, start, os.SEEK_HOLE)
            except (AttributeError, OSError) as exc:  # no hole finding, or no data left
                if isinstance(exc, OSError) and exc.errno == errno.ENXIO:  # only a hole left
                    break
                start, end = pos, size
            fi.seek(start)
            fo.seek(start)
            left = end - start
            while left > 0:
                block = fi.read(min(left, 1 << 22))
                if not block:
                    break
                fo.write(block)
                left -= len(block)
            pos = end
        fo.truncate(size)


def _read_field(f, k: int, x, y, settings) -> DisplacementField:
    fr = f["frames"]
    kw = {name: fr[name][k] for name in ("u", "v", "grad", "zncc", "reason", "iterations")}
    grad2 = fr["grad2"][k] if "grad2" in fr else None
    sig = {name: fr[name][k].astype(np.float64) for name in ("sigma_u", "sigma_v")
           if name in fr}
    return DisplacementField(x=x, y=y, grad2=grad2, settings=dict(settings), **kw, **sig)


def _strain_spec(measure, window, attrs):
    """Checked (key, measure, window, extra attributes) of a strain group."""
    if not isinstance(measure, str) or not _NAME_RE.match(measure):
        raise ValueError(f"measure: {measure!r} is not a plain name (letters, digits, _ . -); "
                         "pass e.g. 'green_lagrange'")
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 1:
        raise ValueError(f"window: expected a positive integer, got {window!r}")
    if attrs is not None and not isinstance(attrs, dict):
        raise ValueError(f"attrs: expected a dict, got {type(attrs).__name__}")
    extra = {}
    for key, value in (attrs or {}).items():
        if key in ("measure", "window"):
            raise ValueError(f"attrs: {key!r} is set from the arguments; leave it out")
        try:
            extra[key] = json.loads(json.dumps(value, default=_json_default))
        except (TypeError, ValueError):
            raise ValueError(f"attrs: value of {key!r} cannot be stored; give numbers or "
                             "strings") from None
    return _strain_key(measure, window), measure, int(window), extra


def _build_strain_group(f, measure, window, extra) -> None:
    """Make /strain/<measure>_w<window> with preallocated components and no frame written."""
    n = int(f.attrs["n_frames"])
    ny, nx = f["grid/x"].shape
    g = f["strain"].create_group(_strain_key(measure, window))
    g.attrs["measure"] = measure
    g.attrs["window"] = np.int64(window)
    _set_attrs(g, extra)
    for c in _STRAIN_COMPONENTS:
        _fixed_dataset(g, c, (n, ny, nx), np.float64)
    g[_STRAIN_COMPONENTS[-1]].attrs["description"] = "tensor shear: half the engineering shear"
    w = _fixed_dataset(g, "written", (n,), np.uint8)
    w[...] = np.zeros(n, np.uint8)


_TOKEN = object()


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
    p = _check_path(path)
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
                if not _same(old, new):
                    problem = (f"scale_mm_per_px: {old:g} in file, {new:g} now")
        if problem:
            raise ValueError(f"{problem} (results file '{p}'); {_FIX_SETTINGS}")
    except BaseException:
        w.close()
        raise
    return w


def _group_attrs(g) -> dict:
    out = {}
    for k, v in g.attrs.items():
        if isinstance(v, bytes):
            v = v.decode()
        elif isinstance(v, np.generic):
            v = v.item()
        elif isinstance(v, np.ndarray):
            v = v.tolist()
        if isinstance(v, str) and v[:1] in "[{":
            try:
                v = json.loads(v)
            except ValueError:
                pass
        out[k] = v
    return out


# --------------------------------------------------------------------------------------------
# reader
# --------------------------------------------------------------------------------------------
class Results:
    """Read a results file; only completed frames are visible.

    Open with :meth:`open`; works while a writer is still adding frames (the file is opened
    without a lock) and on files whose writer was killed. ``len(results)`` is the number of
    completed frames; :meth:`refresh` looks again for frames added since.

    Attributes
    ----------
    path : pathlib.Path
    n_frames : int
        Planned number of frames.
    settings : dict
        The analysis settings.
    image_names, image_sha256 : list of str
    image_times : ndarray of float64
        Seconds, NaN where unknown.
    grid_x, grid_y : ndarray of float64, shape (ny, nx)
    roi_mask : ndarray of bool or None
    scale : float or None
        Millimetres per pixel, None if unknown.
    units : str
        ``"px"``.
    created : str
        ISO 8601 UTC time the file was made.
    package_version : str
    """

    def __init__(self, path: Path, f, *, _token=None):
        if _token is not _TOKEN:
            raise TypeError("use Results.open")
        self.path = path
        self._f = f
        _read_format(f, path)
        a = f.attrs
        self.n_frames = int(a["n_frames"])
        self.settings = json.loads(a["settings"])
        self.units = str(a.get("units", "px"))
        s = float(a.get("scale_mm_per_px", math.nan))
        self.scale = s if math.isfinite(s) else None
        self.created = str(a["created"])
        self.package_version = str(a.get("package_version", ""))
        self.image_names = list(f["images/name"].asstr()[()])
        self.image_sha256 = list(f["images/sha256"].asstr()[()])
        self.image_times = f["images/time"][()]
        self.grid_x = f["grid/x"][()]
        self.grid_y = f["grid/y"][()]
        self.roi_mask = f["roi/mask"][()] if "roi/mask" in f else None
        self._n_done = int(f["n_done"][()])
        if not 0 <= self._n_done <= self.n_frames:
            raise ValueError(f"path: '{path}' has n_done={self._n_done} outside 0.."
                             f"{self.n_frames}; the file is damaged")

    @classmethod
    def open(cls, path) -> "Results":
        """Open a results file for reading.

        Parameters
        ----------
        path : str or os.PathLike

        Returns
        -------
        Results

        Raises
        ------
        OSError
            The file is missing or not an HDF5 file.
        ValueError
            It is an HDF5 file but not a results file of a version this package reads.

        Notes
        -----
        Equivalent plain call: ``h5py.File(path, "r", locking=False)``.
        """
        p = _check_path(path)
        f = _open_h5(p, "r", "read", locking=False)
        try:
            return cls(p, f, _token=_TOKEN)
        except BaseException:
            f.close()
            raise

    def refresh(self) -> int:
        """Reopen the file to see frames completed since; returns the new ``len(self)``."""
        f = _open_h5(self.path, "r", "read", locking=False)
        self._f.close()
        self._f = f
        self._n_done = int(f["n_done"][()])
        return self._n_done

    def close(self) -> None:
        """Close the file (idempotent)."""
        if self._f is not None:
            self._f.close()
            self._f = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def __len__(self) -> int:
        return self._n_done

    def __iter__(self):
        for k in range(self._n_done):
            yield self.field(k)

    @property
    def shape(self) -> tuple[int, int]:
        """Grid shape ``(ny, nx)``."""
        return tuple(self.grid_x.shape)

    @property
    def complete(self) -> bool:
        """True when every planned frame is written."""
        return self._n_done == self.n_frames

    @property
    def updated(self) -> str:
        """ISO 8601 UTC time the last frame was completed (``created`` if none)."""
        if self._n_done == 0:
            return self.created
        return self._file["frames/finished"][self._n_done - 1].decode()

    @property
    def reference_indices(self) -> np.ndarray:
        """Index of the image each completed frame was matched against."""
        return self._file["frames/reference"][: self._n_done]

    @property
    def reference_updates(self) -> np.ndarray:
        """Frames at which the tracker switched to a new reference image."""
        return np.flatnonzero(self._file["frames/reference_update"][: self._n_done])

    @property
    def _file(self):
        if self._f is None:
            raise ValueError(f"results file '{self.path}' is closed; open it again")
        return self._f

    def _frame_index(self, k) -> int:
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
            raise TypeError(f"k: expected an integer frame index, got {type(k).__name__}")
        k = int(k)
        if k < 0:
            k += self._n_done
        if not 0 <= k < self._n_done:
            raise IndexError(f"k: frame {k} is not completed (frames 0..{self._n_done - 1} "
                             f"of {self.n_frames} are); pick a completed frame")
        return k

    def field(self, k) -> DisplacementField:
        """The displacement field of completed frame ``k`` (negative counts from the end)."""
        k = self._frame_index(k)
        return _read_field(self._file, k, self.grid_x, self.grid_y, self.settings)

    def strain_keys(self) -> list[str]:
        """Names of the stored strain groups, e.g. ``["green_lagrange_w15"]``."""
        return sorted(self._file["strain"].keys())

    def strain_attrs(self, key) -> dict:
        """Attributes of a strain group (measure, window, and those the writer added)."""
        return _group_attrs(self._strain_group(key))

    def strain_written(self, key) -> np.ndarray:
        """Boolean per frame: is that frame's strain stored under ``key``."""
        g = self._strain_group(key)
        return g["written"][()].astype(bool) & (np.arange(self.n_frames) < self._n_done)

    def _strain_group(self, key):
        if isinstance(key, tuple) and len(key) == 2:
            key = _strain_key(*key)
        g = self._file["strain"]
        if key not in g:
            have = ", ".join(sorted(g.keys())) or "none"
            raise KeyError(f"key: no strain {key!r} in '{self.path}' (stored: {have}); "
                           "compute it first")
        return g[key]

    def strain(self, k, *, window=9, measure="green-lagrange", fit="plane"):
        """Strain field of frame ``k``, computed from its displacement field.

        Parameters
        ----------
        k : int
            Completed frame.
        window, measure, fit
            As for :func:`dic.strain_field`.

        Returns
        -------
        dic.strain.StrainField
        """
        from dic.strain import strain_field

        return strain_field(self.field(k), window=window, measure=measure, fit=fit)

    def stored_strain(self, k, key) -> dict[str, np.ndarray]:
        """Stored strain components ``xx``, ``yy``, ``xy`` (tensor shear) of frame ``k``.

        Parameters
        ----------
        k : int
            Completed frame.
        key : str or (measure, window)
            A name from :meth:`strain_keys`.
        """
        k = self._frame_index(k)
        g = self._strain_group(key)
        if not g["written"][k]:
            raise IndexError(f"k: strain {g.name.rsplit('/', 1)[-1]} of frame {k} is not "
                             "stored yet; compute it first")
        return {c: g[c][k] for c in _STRAIN_COMPONENTS}


# --------------------------------------------------------------------------------------------
# summary
# --------------------------------------------------------------------------------------------
def results_info(path) -> str:
    """A multi-line plain-words summary of a results file.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    str
        Several lines, no trailing newline.
    """
    with Results.open(path) as r:
        p = r.path
        size = p.stat().st_size
        n, nf = len(r), r.n_frames
        ny, nx = r.shape
        lines = [f"results file: {p} ({size / 1e6:.1f} MB)",
                 f"format: {FORMAT} version {FORMAT_VERSION}, written by dic "
                 f"{r.package_version}",
                 f"created: {r.created}; last frame completed: {r.updated}"]
        state = "complete" if r.complete else (
            "incomplete: resume with the same settings and images to finish")
        lines.append(f"frames: {n} of {nf} done ({state})")
        step = r.settings.get("step")
        lines.append(f"grid: {ny} x {nx} points, x {r.grid_x.min():g}..{r.grid_x.max():g} px, "
                     f"y {r.grid_y.min():g}..{r.grid_y.max():g} px"
                     + (f", step {step} px" if step is not None else ""))
        if r.roi_mask is not None:
            lines.append(f"region of interest: {int(r.roi_mask.sum())} of {r.roi_mask.size} "
                         "pixels")
        if nf:
            first, last = r.image_names[0], r.image_names[-1]
            lines.append(f"images: {nf} ({first} .. {last})")
        updates = r.reference_updates
        if n:
            refs = np.unique(r.reference_indices)
            lines.append("reference images: " + ", ".join(str(int(i)) for i in refs[:20])
                         + (" ..." if refs.size > 20 else "")
                         + (f"; updates at frames {', '.join(str(int(i)) for i in updates[:20])}"
                            if updates.size else ""))
            lines.append(f"last frame ({n - 1}): {r.field(n - 1).summary()}")
        scale = (f"{r.scale:g} mm/px" if r.scale is not None else
                 "unknown (results in px)")
        lines.append(f"scale: {scale}")
        if r.settings:
            lines.append("settings: " + ", ".join(f"{k}={_short(v, 30)}"
                                                  for k, v in sorted(r.settings.items())))
        for key in r.strain_keys():
            a = r.strain_attrs(key)
            more = ", ".join(f"{k} {v}" for k, v in a.items() if k not in ("measure", "window"))
            lines.append(f"strain {key}: {a.get('measure')}, window {a.get('window')}"
                         + (f", {more}" if more else "")
                         + f"; {int(r.strain_written(key).sum())} of {n} frames")
        return "\n".join(lines)
