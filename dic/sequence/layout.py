"""The results file: one HDF5 file per analysis, written frame by frame and safe to kill.

A sequence analysis writes one displacement field per image into a single HDF5 file. The file
can be read with plain h5py (or any HDF5 reader); :class:`~dic.sequence.Results` is the
convenient way in Python, :func:`~dic.sequence.results_info` prints a summary (both in
:mod:`dic.sequence.reader`), and :class:`~dic.sequence.ResultsWriter` writes it
(:mod:`dic.sequence.writer`). This module holds the layout itself: names, format constants and
the builders of the preallocated datasets. Temporary files, syncing, the lock and the atomic
rename are :mod:`dic.files`.

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
    /frames/std_u, /frames/std_v (F, ny, nx) float32  predicted standard deviation of u and
                                                v from each subset's Hessian and the image
                                                noise (NaN where not measured or unknown)
    /frames/shape_order  (F, ny, nx)   int8     order of the subset shape function used per
                                                point: 1 or 2, 0 where not measured (files
                                                made before it was stored have none)
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

Before step 1 the disk blocks of the frame's slots are reserved (``posix_fallocate``; the
datasets are otherwise left sparse, so a file takes disk space only as frames arrive). The
reservation covers the window HDF5's sieve buffer writes back for small writes, so a full
disk is reported there, as an error before anything of the frame is written, and never from
inside HDF5's buffers, which report a failed write only when they are freed, too late for the
writer to know.

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
import json
from pathlib import Path

import numpy as np

from dic.errors import InputError
from dic.field import DisplacementField
from dic.sequence.h5file import load_h5py

__all__ = ["FORMAT", "FORMAT_VERSION", "FORMER_NAMES", "STRAIN_COMPONENTS", "stored_name",
           "strain_key"]

#: value of the root attribute ``format``
FORMAT = "dic-results"
#: value of the root attribute ``format_version`` written by this package
FORMAT_VERSION = 1

#: advice ending the messages of :class:`dic.errors.ResultsMismatch` (its ``fix``)
FIX_SETTINGS = "use a new --out file or the same settings"
FIX_IMAGES = "use a new --out file or the same images"
#: advice after a failed frame write
FIX_SPACE = ("free disk space (or move the file to a disk with space and point --out at it), "
             "then run the same command again to carry on")
TIME_FORMAT_LEN = 24  # "2026-05-09T07:35:25.123Z"
#: stored strain tensor components (``xy`` is tensor shear)
STRAIN_COMPONENTS = ("xx", "yy", "xy")

# file access options for every writer: 8-byte alignment keeps the 8-byte n_done counter inside
# one page. HDF5's own file locking is off so that readers in the same process (which open
# without a lock) can share the file; the writer takes its own exclusive lock (lock_file).
WRITE_KW = dict(alignment_threshold=1, alignment_interval=8, locking=False)


def now_utc(ms: bool = False) -> str:
    t = _dt.datetime.now(_dt.timezone.utc)
    if ms:
        return t.strftime("%Y-%m-%dT%H:%M:%S.") + f"{t.microsecond // 1000:03d}Z"
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def strain_key(measure: str, window: int) -> str:
    return f"{measure}_w{int(window)}"


#: former names of per-frame datasets, as files written before the rename hold them
FORMER_NAMES = {"std_u": "sigma_u", "std_v": "sigma_v"}


def stored_name(frames, name: str) -> str:
    """The dataset name ``name`` has in the ``/frames`` group ``frames`` (files written before
    the rename hold ``sigma_u``, ``sigma_v`` instead of ``std_u``, ``std_v``)."""
    former = FORMER_NAMES.get(name)
    if former is not None and name not in frames and former in frames:
        return former
    return name


def frame_layout(ny: int, nx: int, second: bool):
    """(name, per-frame shape, dtype) of every per-frame dataset."""
    out = [
        ("u", (ny, nx), np.float64),
        ("v", (ny, nx), np.float64),
        ("grad", (ny, nx, 2, 2), np.float64),
        ("zncc", (ny, nx), np.float32),
        ("reason", (ny, nx), np.int8),
        ("iterations", (ny, nx), np.int16),
        ("std_u", (ny, nx), np.float32),
        ("std_v", (ny, nx), np.float32),
        ("shape_order", (ny, nx), np.int8),
    ]
    if second:
        out.append(("grad2", (ny, nx, 2, 3), np.float64))
    return out


def fixed_dataset(group, name: str, shape: tuple, dtype):
    """A dataset with contiguous storage allocated now at full size and never filled.

    Writing into it later changes raw data only, never HDF5 metadata.
    """
    h5py = load_h5py()
    space = h5py.h5s.create(h5py.h5s.SCALAR) if shape == () else h5py.h5s.create_simple(shape)
    dcpl = h5py.h5p.create(h5py.h5p.DATASET_CREATE)
    dcpl.set_layout(h5py.h5d.CONTIGUOUS)
    dcpl.set_alloc_time(h5py.h5d.ALLOC_TIME_EARLY)
    dcpl.set_fill_time(h5py.h5d.FILL_TIME_NEVER)
    dcpl.set_obj_track_times(False)
    tid = h5py.h5t.py_create(np.dtype(dtype))
    dsid = h5py.h5d.create(group.id, name.encode(), tid, space, dcpl=dcpl)
    return h5py.Dataset(dsid)


def read_format(f, p: Path) -> None:
    fmt = f.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode()
    if fmt != FORMAT:
        raise InputError(f"path: '{p}' is not a results file (its 'format' attribute is "
                         f"{fmt!r}, expected {FORMAT!r}); pass a file written by dic")
    version = int(f.attrs.get("format_version", -1))
    if version != FORMAT_VERSION:
        raise InputError(f"path: '{p}' has results format version {version}, this dic reads "
                         f"version {FORMAT_VERSION}; use the dic version that wrote it")


def set_attrs(obj, attrs: dict) -> None:
    for k, v in attrs.items():
        obj.attrs[k] = v if not isinstance(v, (list, dict)) else json.dumps(v)


def group_attrs(g) -> dict:
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


def build_strain_group(f, measure, window, extra) -> None:
    """Make /strain/<measure>_w<window> with preallocated components and no frame written."""
    n = int(f.attrs["n_frames"])
    ny, nx = f["grid/x"].shape
    g = f["strain"].create_group(strain_key(measure, window))
    g.attrs["measure"] = measure
    g.attrs["window"] = np.int64(window)
    set_attrs(g, extra)
    for c in STRAIN_COMPONENTS:
        fixed_dataset(g, c, (n, ny, nx), np.float64)
    g[STRAIN_COMPONENTS[-1]].attrs["description"] = "tensor shear: half the engineering shear"
    w = fixed_dataset(g, "written", (n,), np.uint8)
    w[...] = np.zeros(n, np.uint8)


def add_grad2(h, n: int, n_done: int, ny: int, nx: int) -> None:
    d = fixed_dataset(h["frames"], "grad2", (n, ny, nx, 2, 3), np.float64)
    nan = np.full((ny, nx, 2, 3), np.nan)
    for j in range(n_done):  # one frame at a time: flat memory
        d[j] = nan


def read_field(f, k: int, x, y, settings) -> DisplacementField:
    fr = f["frames"]
    kw = {name: fr[name][k] for name in ("u", "v", "grad", "zncc", "reason", "iterations")}
    grad2 = fr["grad2"][k] if "grad2" in fr else None
    # order of the shape function per point (files made before it was stored have none)
    order = fr["shape_order"][k] if "shape_order" in fr else None
    sig = {name: fr[stored_name(fr, name)][k].astype(np.float64) for name in ("std_u", "std_v")
           if stored_name(fr, name) in fr}
    return DisplacementField(x=x, y=y, grad2=grad2, settings=dict(settings), shape_order=order,
                             **kw, **sig)
