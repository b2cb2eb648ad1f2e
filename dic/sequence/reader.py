"""Reading the results file: :class:`Results` and the summary :func:`results_info`.

The layout is in :mod:`dic.sequence.layout`.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from dic.errors import InputError
from dic.field import DisplacementField
from dic.limits import GROW_SIGMA
from dic.sequence.checks import check_path, short
from dic.sequence.h5file import open_h5
from dic.sequence.layout import (FORMAT, FORMAT_VERSION, STRAIN_COMPONENTS, group_attrs,
                                 read_field, read_format, strain_key)
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["Results", "results_info"]

_TOKEN = object()


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
        read_format(f, path)
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
            raise InputError(f"path: '{path}' has n_done={self._n_done} outside 0.."
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
        p = check_path(path)
        f = open_h5(p, "r", "read", locking=False)
        try:
            return cls(p, f, _token=_TOKEN)
        except BaseException:
            f.close()
            raise

    def refresh(self) -> int:
        """Reopen the file to see frames completed since; returns the new ``len(self)``."""
        f = open_h5(self.path, "r", "read", locking=False)
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
            raise InputError(f"results file '{self.path}' is closed; open it again")
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
        return read_field(self._file, k, self.grid_x, self.grid_y, self.settings)

    def strain_keys(self) -> list[str]:
        """Names of the stored strain groups, e.g. ``["green_lagrange_w15"]``."""
        return sorted(self._file["strain"].keys())

    def strain_attrs(self, key) -> dict:
        """Attributes of a strain group (measure, window, and those the writer added)."""
        return group_attrs(self._strain_group(key))

    def strain_written(self, key) -> np.ndarray:
        """Boolean per frame: is that frame's strain stored under ``key``."""
        g = self._strain_group(key)
        return g["written"][()].astype(bool) & (np.arange(self.n_frames) < self._n_done)

    def _strain_group(self, key):
        if isinstance(key, tuple) and len(key) == 2:
            key = strain_key(*key)
        g = self._file["strain"]
        if key not in g:
            have = ", ".join(sorted(g.keys())) or "none"
            raise KeyError(f"key: no strain {key!r} in '{self.path}' (stored: {have}); "
                           "compute it first")
        return g[key]

    def strain(self, k, *, window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE, fit="plane"):
        """Strain field of frame ``k``, computed from its displacement field (two cameras:
        the surface strain from the 3-D positions; one camera with a calibration: from the
        lens-corrected displacements; :mod:`dic.sequence.stereofile`).

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

        if "stereo" in self._file:   # two cameras: surface strain from the 3-D positions
            from dic.sequence.stereofile import surface_strain_field

            return surface_strain_field(self, self._frame_index(k), window=window,
                                        measure=measure, fit=fit)
        if "lens" in self._file:     # one camera with a calibration: lens-corrected
            from dic.sequence.stereofile import lens_strain_field

            return lens_strain_field(self, self._frame_index(k), window=window,
                                     measure=measure, fit=fit)
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
        return {c: g[c][k] for c in STRAIN_COMPONENTS}


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
            last = r.field(n - 1)
            lines.append(f"last frame ({n - 1}): {last.summary()}")
            sure = last.sigma_summary(GROW_SIGMA)
            if sure is not None:
                lines.append(f"how sure (last frame): standard deviation median "
                             f"{sure['median']:.3g} px, 95 % within {sure['p95']:.3g} px, "
                             f"largest {sure['largest']:.3g} px; {sure['above']} of "
                             f"{sure['n']} points less sure than {GROW_SIGMA:g} px")
            if last.shape_order is not None:
                order = np.asarray(last.shape_order)
                lines.append(f"shape function: {r.settings.get('shape_function', '?')}; last "
                             f"frame: first order at {int(np.count_nonzero(order == 1))}, "
                             f"second order at {int(np.count_nonzero(order == 2))} points")
        scale = (f"{r.scale:g} mm/px" if r.scale is not None else
                 "unknown (results in px)")
        lines.append(f"scale: {scale}")
        if r.settings:
            lines.append("settings: " + ", ".join(f"{k}={short(v, 30)}"
                                                  for k, v in sorted(r.settings.items())))
        for key in r.strain_keys():
            a = r.strain_attrs(key)
            more = ", ".join(f"{k} {v}" for k, v in a.items() if k not in ("measure", "window"))
            lines.append(f"strain {key}: {a.get('measure')}, window {a.get('window')}"
                         + (f", {more}" if more else "")
                         + f"; {int(r.strain_written(key).sum())} of {n} frames")
        from dic.sequence.stereofile import info_lines

        lines.extend(info_lines(r._file))
        return "\n".join(lines)
