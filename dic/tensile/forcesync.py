"""Putting images and the force log on one clock, and the force at every image.

Three ways to relate frame ``k`` to the machine's record:

- **by index**: the machine logged one row per camera trigger, so frame ``k`` is row ``k``;
- **by image times**: each image has a time on the camera's clock -- from a CSV
  (:func:`read_frame_times`, e.g. ``file,time_s``), from the files' own metadata
  (:func:`image_times_from_files`) or from a constant frame interval -- and
  ``log time = image time + trigger_offset``, where the trigger offset is the log time at the
  camera's time zero;
- the force and crosshead travel are then interpolated linearly in the log at those times.

Images outside the log get NaN force (never an extrapolated one) and a note; when no image lies
within the log the records do not overlap and that is an error that reports both time spans.
"""

from __future__ import annotations

import datetime as _dt
import logging
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from dic.tensile.forcelog import TIME_UNITS, ForceLog, read_table, unit_factor

__all__ = ["ForceAtFrames", "read_frame_times", "image_times_from_files", "synchronise"]

log = logging.getLogger(__name__)


@dataclass
class ForceAtFrames:
    """The force log sampled at the images.

    Attributes
    ----------
    frame : ndarray of int
        Frame positions 0 .. n-1.
    time : ndarray of float64
        Time of each image on the log's clock, s.
    force : ndarray of float64
        Force at each image, N; NaN where the image lies outside the log.
    crosshead : ndarray of float64 or None
        Crosshead travel at each image, mm.
    method : str
        How the records were related, in words.
    trigger_offset : float
        Log time at the camera's time zero, s.
    notes : list of str
        Mismatches found (images outside the log, uneven timing).
    """

    frame: np.ndarray
    time: np.ndarray
    force: np.ndarray
    crosshead: np.ndarray | None
    method: str
    trigger_offset: float
    notes: list = field(default_factory=list)

    def __len__(self) -> int:
        return int(self.frame.size)

    @property
    def n_outside(self) -> int:
        """Images without a force (outside the log)."""
        return int(np.count_nonzero(np.isnan(self.force)))


# --------------------------------------------------------------------------------------------
# image times
# --------------------------------------------------------------------------------------------
def read_frame_times(path, *, names=None, time_column=None, file_column=None, time_unit="s",
                     delimiter=None, decimal=None) -> np.ndarray:
    """Per-image times from a CSV such as ``file,time_s``.

    Parameters
    ----------
    path : str or os.PathLike
    names : sequence of str, optional
        Image names (paths) in frame order, e.g. ``results.image_names``. When given and the
        file has a column of file names, times are matched by file name (the part after the
        last ``/``); otherwise rows are taken in order.
    time_column, file_column : str or int, optional
        Default: the one numeric column, and the one other column.
    time_unit : {"s", "ms", "min"}
    delimiter, decimal : optional
        As for :func:`dic.tensile.forcelog.read_table`.

    Returns
    -------
    ndarray of float64
        Seconds, one per image (per row when ``names`` is None).

    Raises
    ------
    OSError
        Missing file.
    ValueError
        No time column, non-numeric or missing times, or images not listed.
    """
    factor = unit_factor(time_unit, TIME_UNITS, "time_unit")
    want = [c for c in (time_column, file_column) if c is not None]
    table = read_table(path, what="frame times", want=want, delimiter=delimiter,
                       decimal=decimal)
    if time_column is None:
        numeric = [j for j in range(len(table.columns))
                   if all(_num_or_none(r, j, table.decimal) for r in table.rows[:50])]
        if len(numeric) != 1:
            raise ValueError(f"time_column: '{table.path}' has {len(numeric)} numeric columns "
                             f"({', '.join(table.columns[j] for j in numeric) or 'none'}); name "
                             "the one with the times")
        it = numeric[0]
    else:
        it = table.index(time_column, "time_column")
    t, _ = table.numbers(it, "time_column")
    t = t * factor
    if file_column is None:
        others = [j for j in range(len(table.columns)) if j != it]
        ifile = others[0] if len(others) == 1 else None
    else:
        ifile = table.index(file_column, "file_column")
    if names is None or ifile is None:
        return t
    listed = {}
    for row, value in zip(table.rows, t):
        listed[_base(row[ifile] if ifile < len(row) else "")] = value
    missing = [n for n in names if _base(n) not in listed]
    if missing:
        raise ValueError(f"frame times: '{table.path}' lists no time for {len(missing)} of "
                         f"{len(names)} images (first: '{_base(missing[0])}'); add them or "
                         "give times by frame interval")
    return np.array([listed[_base(n)] for n in names], dtype=np.float64)


def _num_or_none(row, j, decimal):
    from dic.tensile.forcelog import to_float

    return j < len(row) and to_float(row[j], decimal) is not None


def _base(name) -> str:
    return str(name).replace("\\", "/").rsplit("/", 1)[-1].strip()


def image_times_from_files(paths, *, source="auto"):
    """Capture times of image files, in seconds after the first image.

    Parameters
    ----------
    paths : sequence of str or os.PathLike
    source : {"auto", "exif", "mtime"}
        ``"exif"``: the capture time stored in the file (EXIF ``DateTimeOriginal`` with its
        sub-second field, or the TIFF ``DateTime`` tag); ``"mtime"``: the file modification
        time (changed by copying!); ``"auto"``: capture times when every file has one, else
        modification times.

    Returns
    -------
    times : ndarray of float64
        Seconds after the first image.
    used : str
        ``"capture time"`` or ``"file modification time"``.

    Raises
    ------
    OSError
        A file is missing.
    ValueError
        Unknown source, or ``"exif"`` and a file without a capture time.
    """
    if source not in ("auto", "exif", "mtime"):
        raise ValueError(f"source: use 'auto', 'exif' or 'mtime', got {source!r}")
    ps = [Path(os.fspath(p)) for p in paths]
    if not ps:
        raise ValueError("paths: no image files given")
    for p in ps:
        if not p.is_file():
            raise FileNotFoundError(f"paths: image file not found: '{p}'; image times from "
                                    "metadata need the original files")
    if source != "mtime":
        stamps = [_capture_time(p) for p in ps]
        if all(s is not None for s in stamps):
            t = np.array(stamps, dtype=np.float64)
            return t - t[0], "capture time"
        if source == "exif":
            bad = ps[[s is None for s in stamps].index(True)]
            raise ValueError(f"source: '{bad}' holds no capture time; use source='mtime' or a "
                             "frame-times CSV")
    t = np.array([p.stat().st_mtime_ns * 1e-9 for p in ps], dtype=np.float64)
    return t - t[0], "file modification time"


def _capture_time(p: Path):
    """Seconds since the epoch from EXIF/TIFF tags, or None."""
    try:
        from PIL import Image
    except ImportError:  # pragma: no cover - pillow comes with matplotlib
        return None
    try:
        with Image.open(p) as im:
            exif = im.getexif()
            sub = exif.get_ifd(0x8769)  # the EXIF sub-directory
            text = sub.get(36867) or exif.get(306)  # DateTimeOriginal, else DateTime
            frac = sub.get(37521) or sub.get(37520) or ""  # SubSecTimeOriginal, SubSecTime
    except Exception:  # noqa: BLE001 - any unreadable metadata means "no capture time"
        return None
    if not text:
        return None
    try:
        stamp = _dt.datetime.strptime(str(text).strip("\x00 "), "%Y:%m:%d %H:%M:%S")
    except ValueError:
        return None
    seconds = stamp.replace(tzinfo=_dt.timezone.utc).timestamp()
    digits = "".join(ch for ch in str(frac) if ch.isdigit())
    return seconds + (float("0." + digits) if digits else 0.0)


# --------------------------------------------------------------------------------------------
# synchronisation
# --------------------------------------------------------------------------------------------
def synchronise(force_log: ForceLog, n_frames: int, *, image_times=None, frame_interval=None,
                by_index=False, trigger_offset=0.0) -> ForceAtFrames:
    """Force (and crosshead travel) at each image.

    Give exactly one of ``image_times``, ``frame_interval`` or ``by_index=True``.

    Parameters
    ----------
    force_log : ForceLog
        From :func:`dic.tensile.forcelog.read_force_log`.
    n_frames : int
        Number of images.
    image_times : array_like, optional
        Time of each image on the camera's clock, s (e.g. from :func:`read_frame_times`).
    frame_interval : float, optional
        Constant time between images, s: image ``k`` at ``k * frame_interval``.
    by_index : bool
        Frame ``k`` is row ``k`` of the log (the machine logged one row per trigger); the log
        must have exactly ``n_frames`` rows.
    trigger_offset : float
        Log time at the camera's time zero, s (ignored ``by_index``).

    Returns
    -------
    ForceAtFrames

    Raises
    ------
    ValueError
        None or several of the ways given; wrong number of times; non-finite or decreasing image
        times; no image within the log (the message gives both time spans).
    """
    if not isinstance(force_log, ForceLog):
        raise ValueError(f"force_log: expected a ForceLog from read_force_log, got "
                         f"{type(force_log).__name__}")
    if isinstance(n_frames, bool) or not isinstance(n_frames, (int, np.integer)) or n_frames < 1:
        raise ValueError(f"n_frames: expected a positive integer, got {n_frames!r}")
    ways = [image_times is not None, frame_interval is not None, bool(by_index)]
    if sum(ways) != 1:
        raise ValueError("give exactly one of image_times, frame_interval or by_index=True to "
                         "relate the images to the force log")
    offset = _finite(trigger_offset, "trigger_offset")
    frames = np.arange(n_frames)
    notes = []
    if by_index:
        if len(force_log) != n_frames:
            raise ValueError(f"by_index: the force log has {len(force_log)} rows but there are "
                             f"{n_frames} images; index synchronisation needs one row per "
                             "image (use image times instead)")
        cross = None if force_log.crosshead is None else force_log.crosshead.copy()
        return ForceAtFrames(frames, force_log.time.copy(), force_log.force.copy(), cross,
                             "by frame index (log row k = image k)", 0.0, notes)
    if frame_interval is not None:
        dt = _finite(frame_interval, "frame_interval")
        if not dt > 0:
            raise ValueError(f"frame_interval: must be > 0 s, got {frame_interval!r}")
        cam = frames * dt
        method = f"constant frame interval {dt:g} s, trigger offset {offset:g} s"
    else:
        cam = np.asarray(image_times, dtype=np.float64).ravel()
        if cam.size != n_frames:
            raise ValueError(f"image_times: {cam.size} times for {n_frames} images; give one "
                             "time per image")
        if not np.all(np.isfinite(cam)):
            k = int(np.flatnonzero(~np.isfinite(cam))[0])
            raise ValueError(f"image_times: image {k} has no time ({cam[k]}); complete the "
                             "frame times")
        if n_frames > 1 and np.any(np.diff(cam) <= 0):
            k = int(np.flatnonzero(np.diff(cam) <= 0)[0]) + 1
            raise ValueError(f"image_times: image {k} is not later than image {k - 1} "
                             f"({cam[k]:g} s after {cam[k - 1]:g} s); check the frame times")
        method = f"per-image times, trigger offset {offset:g} s"
    t = cam + offset
    t0, t1 = force_log.span
    tol = 1e-9 * max(1.0, abs(t0), abs(t1))
    inside = (t >= t0 - tol) & (t <= t1 + tol)
    if not inside.any():
        raise ValueError(f"the force log ({t0:g} .. {t1:g} s) and the images ({t[0]:g} .. "
                         f"{t[-1]:g} s on the log's clock, trigger offset {offset:g} s) do not "
                         "overlap; check the trigger offset, the time unit and the frame times")
    tc = np.clip(t, t0, t1)
    force = np.where(inside, np.interp(tc, force_log.time, force_log.force), np.nan)
    cross = None
    if force_log.crosshead is not None:
        cross = np.where(inside, np.interp(tc, force_log.time, force_log.crosshead), np.nan)
    before, after = np.flatnonzero(t < t0 - tol), np.flatnonzero(t > t1 + tol)
    if before.size:
        notes.append(f"{before.size} images before the log starts at {t0:g} s (frames "
                     f"{_span(before)}); their force is NaN")
    if after.size:
        notes.append(f"{after.size} images after the log ends at {t1:g} s (frames "
                     f"{_span(after)}); their force is NaN")
    gap = float(np.max(np.diff(force_log.time))) if len(force_log) > 1 else math.inf
    if n_frames > 1 and gap > np.min(np.diff(t)):
        notes.append(f"the log's largest time step ({gap:g} s) is longer than the shortest "
                     "time between images; forces between log rows are interpolated")
    for n in notes:
        log.warning(n)
    return ForceAtFrames(frames, t, force, cross, method, offset, notes)


def _finite(value, what) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected a number of seconds, got {value!r}") from None
    if not math.isfinite(v):
        raise ValueError(f"{what}: expected a finite number of seconds, got {value!r}")
    return v


def _span(idx) -> str:
    return f"{idx[0]}" if idx.size == 1 else f"{idx[0]}..{idx[-1]}"
