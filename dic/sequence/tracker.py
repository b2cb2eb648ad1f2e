"""The sequence driver: frames in order, blocks in parallel, results appended to the file.

See :mod:`dic.sequence.frames` for the per-frame logic. This module schedules it: the first frame of
every block is matched in sequence (each from the previous block's first frame), the remaining
frames of the blocks then run in any order -- in this process, in a process pool or on a Dask
cluster -- and their results are written in frame order by this process alone.
"""

from __future__ import annotations

import hashlib
import logging
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from dic.field import DisplacementField
from dic.limits import DEFAULT_MAX_SIGMA, check_max_sigma
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW
from dic.sequence.frames import (FrameMatcher, TrackSettings, accounted, as_stored,
                                 extrapolate, needs_new_reference)

__all__ = ["track", "load_results", "resolve_images"]

log = logging.getLogger(__name__)


# ------------------------------------------------------------------------------------------
# inputs
# ------------------------------------------------------------------------------------------
def resolve_images(images) -> list:
    """A list of image paths (natural order) or arrays from what the user gave.

    ``images`` may be a folder, a glob pattern, a list of paths/patterns, or a list of arrays.
    """
    from dic.images.io import list_images

    if isinstance(images, (str, os.PathLike)):
        return list(list_images(images))
    items = list(images)
    if not items:
        raise ValueError("images is empty; give a folder, a glob pattern such as "
                         "'frames/*.tif', or a list of image files")
    if all(isinstance(i, np.ndarray) for i in items):
        return items
    out = []
    for it in items:
        p = Path(it)
        if p.is_file():
            out.append(p)
        else:
            out.extend(list_images(str(it)))
    return out


def _sha256(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _check_frames(paths, reference_shape):
    """All frames the same size and bit depth as the reference (cheap header reads)."""
    from dic.images.io import image_info

    if isinstance(paths[0], np.ndarray):
        for k, a in enumerate(paths):
            if a.shape[:2] != reference_shape:
                raise ValueError(f"image {k} is {a.shape[1]} x {a.shape[0]} px but the "
                                 f"reference is {reference_shape[1]} x {reference_shape[0]}; "
                                 f"all frames must come from the same camera setting")
        return
    first = image_info(paths[0])
    for p in paths:
        info = image_info(p)
        if tuple(info["shape"]) != tuple(reference_shape):
            raise ValueError(f"{p} is {info['shape'][1]} x {info['shape'][0]} px but the "
                             f"reference is {reference_shape[1]} x {reference_shape[0]}; all "
                             f"frames must come from the same camera setting (remove or crop "
                             f"that file)")
        if info["bits"] != first["bits"]:
            raise ValueError(f"{p} has {info['bits']}-bit pixels but {paths[0]} has "
                             f"{first['bits']}; convert the sequence to one bit depth")


def _load(item):
    from dic.images.io import read_image

    if isinstance(item, np.ndarray):
        return read_image(item, name="image")
    return read_image(item, name="image")  # the message names the path itself


# ------------------------------------------------------------------------------------------
# one block of frames: the unit of parallel work
# ------------------------------------------------------------------------------------------
@dataclass
class _Stage:
    """One reference image and what is needed to match against it (picklable)."""

    ref_item: object
    roi: object
    base: DisplacementField | None
    settings: TrackSettings
    ref_index: int = 0

    def matcher(self) -> FrameMatcher:
        return FrameMatcher(_load(self.ref_item), self.settings, roi=self.roi, base=self.base)


_WORKER_CACHE: dict = {}

# a stop asked for (e.g. by Ctrl-C, see stop_on_interrupt): honoured after the next frame written
_STOP = {"asked": False, "signal": None}


def stop_on_interrupt():
    """A context manager: Ctrl-C during :func:`track` stops it after the frame being written.

    SIGTERM and SIGHUP (a closed terminal, ``kill``) are treated the same way. The name of
    the last such signal is in ``stop_signal()`` afterwards. The first signal only asks for a
    stop, which the tracker honours at its next safe point (a
    frame completely written) by raising KeyboardInterrupt there; a second SIGINT interrupts at
    once. A KeyboardInterrupt raised wherever the signal happens to land could be swallowed (for
    example inside a garbage-collection callback) and the run would go on.
    """
    import contextlib
    import signal
    import threading

    @contextlib.contextmanager
    def guard():
        if threading.current_thread() is not threading.main_thread():
            yield
            return

        def handler(signum, frame):
            _STOP["signal"] = signal.Signals(signum).name
            if _STOP["asked"]:
                raise KeyboardInterrupt
            _STOP["asked"] = True

        _STOP["asked"] = False
        _STOP["signal"] = None
        kinds = [signal.SIGINT, signal.SIGTERM] + ([signal.SIGHUP]
                                                   if hasattr(signal, "SIGHUP") else [])
        old = {sig: signal.signal(sig, handler) for sig in kinds}
        try:
            yield
        finally:
            for sig, h in old.items():
                signal.signal(sig, h)
            _STOP["asked"] = False

    return guard()


def stop_signal():
    """Name of the signal that last stopped :func:`track` under :func:`stop_on_interrupt`."""
    return _STOP["signal"]


def _worker_matcher(stage: _Stage, key) -> FrameMatcher:
    m = _WORKER_CACHE.get(key)
    if m is None:
        _WORKER_CACHE.clear()
        m = _WORKER_CACHE[key] = stage.matcher()
    return m


def _run_block(stage, key, items, first_raw, n_expected, may_update, threads=None):
    """Match the frames of a block in order, each from the previous one's raw field.

    Returns a list of (total, raw, degraded) tuples; stops after the first degraded frame. A
    failure (an unreadable image, ...) ends the list as the exception itself.
    ``may_update[j]`` is False where a new reference would be the current one again.
    """
    if threads is not None:
        import numba

        numba.set_num_threads(threads)
    m = _worker_matcher(stage, key)
    out = []
    prev = first_raw
    try:
        for it, may in zip(items, may_update):
            total, raw = m.match(_load(it), prev)
            bad = may and needs_new_reference(total, n_expected, stage.settings)
            out.append((total, raw, bad))
            if bad:
                break
            prev = raw
    except Exception as exc:  # noqa: BLE001 -- returned last, so the frames before it are kept
        out.append(exc)
    return out


class _Local:
    """Runs tasks in this process (the executor interface of concurrent.futures)."""

    slots = 1

    class _Done:
        def __init__(self, value):
            self._v = value

        def result(self):
            return self._v

    def submit(self, fn, *args):
        return self._Done(fn(*args))

    def shutdown(self, cancel_futures=False):
        pass


def _ignore_ctrl_c():
    """Set up a worker process: it leaves Ctrl-C to the main process, which stops the pool,
    and ends itself when the main process dies (a SIGKILL leaves no one to stop it)."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _exit_with_parent()


def _exit_with_parent(poll_s: float = 0.5):
    """End this process when its parent ends.

    On Linux the kernel sends SIGKILL at once (``prctl(PR_SET_PDEATHSIG)``); everywhere a
    daemon thread also polls ``os.getppid()``, which changes when the parent dies (the
    process is adopted by another).
    """
    import signal
    import sys
    import threading
    import time

    import multiprocessing

    # the parent as multiprocessing recorded it when it started this process: os.getppid()
    # here could already name the process that adopted an orphan
    known = multiprocessing.parent_process()
    parent = known.pid if known is not None and known.pid else os.getppid()
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
        except (OSError, AttributeError):  # pragma: no cover - no prctl: the thread remains
            pass

    def watch():
        while True:
            if os.getppid() != parent:
                os._exit(1)
            time.sleep(poll_s)

    if os.getppid() != parent:  # pragma: no cover - the parent died during set-up
        os._exit(1)
    threading.Thread(target=watch, name="dic-parent-watch", daemon=True).start()


def _make_executor(workers, cluster):
    if cluster is not None:
        try:
            from distributed import Client
        except ImportError as exc:  # pragma: no cover - optional dependency
            raise ValueError("cluster needs the optional dependency dask.distributed; install "
                             "it with: pip install 'dask[distributed]'") from exc
        client = cluster if hasattr(cluster, "submit") else Client(cluster)

        class _Dask:
            slots = max(1, sum(client.nthreads().values()))

            def submit(self, fn, *args):
                return client.submit(fn, *args, pure=False)

            def shutdown(self, cancel_futures=False):
                if client is not cluster:
                    client.close()

        return _Dask(), 1
    if workers is None or workers <= 1:
        return _Local(), (1 if workers == 1 else None)
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    # 'spawn': forking a process whose compiled kernels have started threads is unsafe
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn"),
                               initializer=_ignore_ctrl_c)
    pool.slots = workers
    return pool, 1


# ------------------------------------------------------------------------------------------
# the driver
# ------------------------------------------------------------------------------------------
def track(images, out, *, subset=21, step=10, roi=None, reference=0, frames=None,
          shape_function="auto", interpolation="quintic", min_zncc=0.9,
          max_sigma=DEFAULT_MAX_SIGMA, search=60, block=8, update_valid=0.95, update_zncc=0.97,
          workers=None, cluster=None,
          scale=None, overwrite=False, progress=False, strain=None, right_images=None,
          calibration=None, max_view_angle=None):
    """Track a sequence of images and write a results file.

    Parameters
    ----------
    images : folder, glob pattern, list of paths or list of arrays
        The sequence, in natural order (``img2`` before ``img10``).
    out : path
        Results file (HDF5). An existing file from the same analysis is resumed after its last
        completed frame; one from different settings is an error unless ``overwrite``.
    subset, step, roi, shape_function, interpolation, min_zncc, max_sigma, search
        As for :func:`dic.correlate` (``max_sigma``: points whose standard deviation of u or v
        exceeds this many px are not measured; default 2).
    reference : int
        Index of the reference image (default the first).
    frames : slice, range or sequence of int, optional
        Which images to analyse (default all).
    block : int
        Frames per block of parallel work (part of the settings: it fixes which guess each
        frame starts from, so results do not depend on the number of workers).
    update_valid, update_zncc : float
        The reference moves to the last good image when fewer than ``update_valid`` of the
        points measured in the first frame against the current reference are still measured,
        or when the median ZNCC falls below ``update_zncc``.
    workers : int, optional
        ``None``: this process, all cores in the matching kernel. ``N``: a pool of N
        single-threaded processes working on blocks of frames.
    cluster : str or distributed.Client, optional
        Address of a Dask distributed scheduler (or a client) to run blocks on.
    scale : float, optional
        mm per px, stored with the results.
    progress : bool
        Show a progress bar on stderr.
    strain : dict, optional
        ``{"window": 9, "measure": "green-lagrange"}`` to compute and store strain per frame.
    right_images : folder, glob pattern, list of paths or list of arrays, optional
        Two cameras: the right camera's sequence (``images`` is then the left one); needs a
        two-camera ``calibration``. Adds 3-D positions and displacements in mm and surface
        strain (:mod:`dic.sequence.stereo`).
    calibration : dic.stereo.Calibration or path, optional
        From :func:`dic.calibrate` or a calibration file. With one camera, the displacements
        are corrected for lens distortion before strain.
    max_view_angle : float, optional
        Two cameras: points where a camera sees the surface at more than this many degrees
        from its normal get no 3-D position (``Reason.OBLIQUE``); default 45
        (:func:`dic.stereo.grid_points`).

    Returns
    -------
    dic.sequence.Results
        The results, read back from the file.

    References
    ----------
    .. [1] B. Pan, "Reliability-guided digital image correlation for image deformation
       measurement", Applied Optics 48 (2009) 1535-1542.
    """
    if right_images is not None or calibration is not None:   # calibrated cameras
        from dic.sequence.stereo import track_calibrated

        return track_calibrated(
            track, resolve_images(images), out, calibration=calibration, strain=strain,
            max_view_angle=max_view_angle,
            right_images=None if right_images is None else resolve_images(right_images),
            subset=subset, step=step, roi=roi, reference=reference, frames=frames,
            shape_function=shape_function, interpolation=interpolation, min_zncc=min_zncc,
            max_sigma=max_sigma, search=search, block=block, update_valid=update_valid,
            update_zncc=update_zncc, workers=workers, cluster=cluster, scale=scale,
            overwrite=overwrite,
            progress=progress)
    from dic.images.roi import make_roi
    from dic.sequence.reader import Results
    from dic.sequence.writer import open_for_writing

    items = resolve_images(images)
    n_img = len(items)
    if not isinstance(reference, (int, np.integer)) or not 0 <= reference < n_img:
        raise ValueError(f"reference must be an image index from 0 to {n_img - 1}, got "
                         f"{reference!r}")
    order = _frame_list(frames, n_img)
    max_sigma = check_max_sigma(max_sigma)
    settings = TrackSettings(subset=subset, step=step, shape_function=shape_function,
                             interpolation=interpolation, min_zncc=min_zncc,
                             max_sigma=max_sigma, search=search,
                             block=int(block), update_valid=float(update_valid),
                             update_zncc=float(update_zncc))
    if settings.block < 1:
        raise ValueError(f"block must be at least 1, got {block}")
    ref_img = _load(items[reference])
    _check_frames(items, ref_img.shape)
    mask = make_roi(roi, ref_img.shape)
    names = [f"array {k}" if isinstance(it, np.ndarray) else str(it) for k, it in
             enumerate(items)]
    names = [names[k] for k in order]
    shas = [hashlib.sha256(np.ascontiguousarray(items[k]).tobytes()).hexdigest()
            if isinstance(items[k], np.ndarray) else _sha256(items[k]) for k in order]
    record = dict(settings.as_dict(), reference=int(reference), frames=[int(k) for k in order],
                  roi=("mask" if roi is not None else "whole image"),
                  strain=strain or {})

    # the grid of points, as dic.correlate lays it out (no matching needed for that), after
    # the same checks of the options that dic.correlate makes
    from dic.matching import INTERPOLATIONS, check_options, edge_margin, prepare_grid

    check_options(subset, step, shape_function, interpolation, search, min_zncc, 50, 3e-3,
                  0.02)

    xs, ys = prepare_grid(ref_img.shape, mask, settings.subset, settings.step,
                          edge_margin(INTERPOLATIONS[settings.interpolation]))[:2]
    grid_x, grid_y = (a.astype(np.float64) for a in np.meshgrid(xs, ys))
    if strain:
        _check_strain_window(strain, grid_x.shape, settings.step)
    first_stage = _Stage(items[reference], mask, None, settings, int(reference))
    matcher0 = first_stage.matcher()
    # the first stage's matcher lives in the cache only, so that it is dropped when the
    # reference changes: memory stays flat however many times that happens
    _WORKER_CACHE.clear()
    _WORKER_CACHE[("stage", reference)] = matcher0
    del matcher0, ref_img

    writer = open_for_writing(
        out, settings=record, grid_x=grid_x, grid_y=grid_y, n_frames=len(order),
        image_names=names, image_sha256=shas, roi_mask=mask, scale_mm_per_px=scale,
        overwrite=overwrite)
    executor, threads = _make_executor(workers, cluster)
    bar = None
    stopped = True
    try:
        if progress:
            from tqdm import tqdm

            bar = tqdm(total=len(order), initial=writer.n_done, unit="frame", desc="tracking",
                       dynamic_ncols=True)
        if strain:
            _fill_strain(writer, strain)
        _drive(items, order, reference, settings, mask, writer, executor, threads, bar,
               strain)
        stopped = False
    finally:
        if bar is not None:
            bar.close()
        executor.shutdown(cancel_futures=stopped)  # on Ctrl-C or an error: no waiting work
        writer.close()
    return Results.open(out)


def load_results(path):
    """Open a results file written by :func:`track` (see :class:`dic.sequence.Results`)."""
    from dic.sequence.reader import Results

    return Results.open(path)


def _frame_list(frames, n_img):
    if frames is None:
        return list(range(n_img))
    if isinstance(frames, slice):
        return list(range(n_img))[frames]
    out = [int(k) for k in frames]
    bad = [k for k in out if not 0 <= k < n_img]
    if bad or not out:
        raise ValueError(f"frames must be image indices from 0 to {n_img - 1}; got {bad or out}")
    return out


def _drive(items, order, reference, settings, mask, writer, executor, threads, bar, strain):
    """Run stages (one per reference image) until every frame is written.

    The first stage's matcher is expected in ``_WORKER_CACHE`` (put there by :func:`track`).
    """
    n = len(order)
    if writer.n_done >= n:  # a finished analysis: nothing to match
        return
    stage = _Stage(items[reference], mask, None, settings, int(reference))
    stage_key = ("stage", reference)
    start = 0
    ref_index = reference
    done = writer.n_done
    last_total = None
    # resuming: rebuild the stage that was current at the last completed frame
    updates = [u for u in writer.reference_updates if u < done]
    for u in updates:
        # replay the updated stages from their first frame: their raw fields are not stored
        start = u
    if updates:
        base = writer.read_field(start - 1)
        ref_index = order[start - 1]
        stage = _Stage(items[ref_index], None, base, settings, int(ref_index))
        stage_key = ("stage", ref_index, start)
    while start < n:
        end, last_total, new_stage = _run_stage(items, order, start, stage, stage_key, writer,
                                                executor, threads, bar, settings, strain)
        if new_stage is None:
            break
        # a new reference: the last good frame, as stored (as a resume would read it back)
        base = as_stored(last_total)
        log.debug("new stage at %d from base with %d valid points", end, base.n_valid)
        ref_index = order[end - 1]
        stage = _Stage(items[ref_index], None, base, settings, int(ref_index))
        stage_key = ("stage", ref_index, end)
        log.info("frame %d: correlation degraded, new reference is image %d", end, ref_index)
        if writer.n_done <= end:
            writer.add_reference_update(end)
        start = end
    del done


def _run_stage(items, order, start, stage, key, writer, executor, threads, bar, settings,
               strain):
    """Frames from ``start`` against one reference, until the end or until it degrades.

    Returns (first frame of the next stage, last good total field, flag of a new stage).
    """
    n = len(order)
    B = settings.block
    starts = list(range(start, n, B))
    local = _WORKER_CACHE.get(key) if isinstance(executor, _Local) else None
    if local is None and isinstance(executor, _Local):
        local = _worker_matcher(stage, key)
    n_expected = None
    prev_raw = prev2_raw = None
    # blocks started per round: enough to keep every worker busy, few enough to keep memory flat
    window = max(1, 2 * getattr(executor, "slots", 1))
    i = 0
    last_total = None
    while i < len(starts):
        batch = starts[i:i + window]
        # 1. the first frames of the blocks, in sequence
        heads = []
        stop_at = None
        error = None  # a failure (unreadable image, ...): frames before it are still written
        try:
            for s in batch:
                if s < writer.n_done and stage.base is None:
                    # already in the file (resume, first stage): its raw field is the stored one
                    total = raw = writer.read_field(s)
                    bad = False
                else:
                    guess = extrapolate(prev2_raw, prev_raw) if prev_raw is not None else None
                    total, raw = _stage_matcher(stage, key, local).match(
                        _load(items[order[s]]), guess)
                    bad = (n_expected is not None and s > start
                           and order[s - 1] != stage.ref_index
                           and needs_new_reference(total, n_expected, settings))
                if n_expected is None:
                    n_expected = max(accounted(total), 1)
                heads.append((s, total, raw, bad))
                if bad:
                    stop_at = s
                    break
                prev2_raw, prev_raw = prev_raw, raw
        except Exception as exc:  # noqa: BLE001 -- re-raised below, after saving
            error = exc
        # 2. the rest of each block, in parallel
        futures = []
        for s, total, raw, bad in heads:
            if bad:
                continue
            ks = [k for k in range(s + 1, min(s + B, n)) if stop_at is None or k < stop_at]
            rest = [items[order[k]] for k in ks]
            may = [order[k - 1] != stage.ref_index for k in ks]
            futures.append((s, executor.submit(_run_block, stage, key, rest, raw, n_expected,
                                               may, threads) if rest else None))
        # 3. collect in frame order, write, and find the first degraded frame
        results = {}
        for s, total, raw, bad in heads:
            results[s] = (total, bad)
        for s, fut in futures:
            if fut is None:
                continue
            try:
                done = fut.result()
            except Exception as exc:  # noqa: BLE001 -- re-raised below, after saving
                done = [exc]
            for j, item in enumerate(done):
                if isinstance(item, BaseException):
                    error = item
                    break
                results[s + 1 + j] = item[0], item[2]
            if error is not None:
                break
        following = batch[0]
        for k in sorted(results):
            if k != following:  # a gap left by a failure: frames are written in order only
                break
            following += 1
            total, bad = results[k]
            if bad and k > start:
                return k, last_total, True
            if k >= writer.n_done:
                writer.write_frame(k, total, reference_index=stage.ref_index)
                if strain:
                    _write_strain(writer, k, total, strain)
                if bar is not None:
                    bar.update(1)
                if _STOP["asked"]:
                    raise KeyboardInterrupt
            last_total = total
        if error is not None:
            raise error
        if stop_at is not None:
            return stop_at, last_total, True
        i += len(batch)
    return n, last_total, None


def _stage_matcher(stage, key, local):
    return local if local is not None else _worker_matcher(stage, key)


def _check_strain_window(strain, shape, step):
    """The strain window against the grid, before anything is written (SettingsConflict)."""
    from dic.errors import SettingsConflict

    w = int(strain.get("window", DEFAULT_WINDOW))
    most = min(shape) - (1 - min(shape) % 2)  # the largest odd window that fits
    if w > min(shape):
        fix = (f"use --strain-window {most} or less, or a smaller --step" if most >= 3 else
               "use a smaller --step or a larger region of interest")
        raise SettingsConflict(f"--strain-window: a window of {w} x {w} points does not fit "
                               f"the grid of {shape[0]} x {shape[1]} points (step {step} px); "
                               f"{fix}")


def _strain_of(total, strain):
    from dic.strain import strain_field

    return strain_field(total, window=int(strain.get("window", DEFAULT_WINDOW)),
                        measure=strain.get("measure", DEFAULT_MEASURE))


def _write_strain(writer, k, total, strain):
    writer.write_strain_frame(k, _strain_of(total, strain))


def _fill_strain(writer, strain):
    """Store the strain of completed frames that lack it (a stop between a frame and its
    strain, or a strain write that failed): from the stored displacements."""
    flags = writer.strain_written(strain.get("measure", DEFAULT_MEASURE),
                                  int(strain.get("window", DEFAULT_WINDOW)))
    for k in np.flatnonzero(np.asarray(flags) == 0):
        log.info("frame %d: storing its strain, missing after the last stop", k)
        writer.write_strain_frame(int(k), _strain_of(writer.read_field(int(k)), strain))
