"""A results-file writer run as a separate process by tests/test_store.py (kill and Ctrl-C tests).

Usage: python _store_writer.py PATH --n 40 --ny 60 --nx 80 [--sleep S] [--die-at N] [--no-fsync]

Creates PATH (or resumes it when it exists) and writes frames n_done .. n-1 of a deterministic
synthetic sequence, printing ``ready <n_done>`` once the file is open and ``done <k>`` after each
completed frame (stdout flushed each time). With ``--die-at N`` the process kills itself with
SIGKILL just before its N-th call of a file operation (Dataset write, File.flush, os.fsync),
counted from the first frame it writes. The frame generator is imported by the tests as the
oracle for what each frame must hold.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from dic.field import DisplacementField, Reason  # noqa: E402

SETTINGS = {"subset": 21, "step": 10, "shape_function": "affine", "criterion": "ZNSSD",
            "seed": {"x": 40.0, "y": 30.0}, "threshold": 0.9}
#: frames that are the first matched against a new reference image
REFERENCE_UPDATES = (0, 13, 27)


def grid(ny, nx):
    """Point grid with a 10 px step, offset 15 px from the image corner."""
    y, x = np.mgrid[0:ny, 0:nx].astype(np.float64) * 10.0 + 15.0
    return x, y


def images(n):
    """Image names and (made-up, well-formed) SHA-256 digests."""
    names = [f"specimen_{i:04d}.tif" for i in range(n)]
    digests = [f"{i:064x}" for i in range(n)]
    return names, digests


def reference_of(k):
    """Index of the reference image of frame k under REFERENCE_UPDATES."""
    return max(u for u in REFERENCE_UPDATES if u <= k) - (0 if k < REFERENCE_UPDATES[1] else 1)


def frame(k, ny, nx):
    """Deterministic field of frame k: random numbers with NaN and reason codes at some points."""
    rng = np.random.default_rng(1000 + k)
    x, y = grid(ny, nx)
    reason = np.zeros((ny, nx), np.int8)
    bad = rng.random((ny, nx)) < 0.05
    reason[bad] = rng.integers(1, len(Reason), size=int(bad.sum()))
    u = rng.normal(scale=k + 1.0, size=(ny, nx))
    v = rng.normal(size=(ny, nx))
    grad = rng.normal(scale=1e-3, size=(ny, nx, 2, 2))
    zncc = rng.uniform(0.9, 1.0, size=(ny, nx))
    iterations = rng.integers(1, 40, size=(ny, nx)).astype(np.int16)
    for a in (u, v, zncc):
        a[bad] = np.nan
    grad[bad] = np.nan
    iterations[bad] = 0
    return DisplacementField(x=x, y=y, u=u, v=v, grad=grad, zncc=zncc, reason=reason,
                             iterations=iterations, settings=dict(SETTINGS))


def install_kill_hook(die_at, counter=None):
    """Count file operations; SIGKILL this process just before operation number ``die_at``."""
    import h5py

    state = {"ops": 0}
    if counter is not None:
        state = counter

    def hook():
        state["ops"] += 1
        if die_at is not None and state["ops"] == die_at:
            os.kill(os.getpid(), signal.SIGKILL)

    def wrap(fn):
        def inner(*a, **kw):
            hook()
            return fn(*a, **kw)
        return inner

    saved = (h5py.Dataset.__setitem__, h5py.File.flush, os.fsync)
    h5py.Dataset.__setitem__ = wrap(h5py.Dataset.__setitem__)
    h5py.File.flush = wrap(h5py.File.flush)
    os.fsync = wrap(os.fsync)

    def undo():
        h5py.Dataset.__setitem__, h5py.File.flush, os.fsync = saved

    return state, undo


def open_writer(path, n, ny, nx, fsync=True):
    """Resume ``path`` if it exists, else create it, with the sequence's settings and images."""
    from dic.sequence import ResultsWriter

    names, digests = images(n)
    if Path(path).exists():
        return ResultsWriter.resume(path, settings=SETTINGS, image_names=names,
                                    image_sha256=digests, fsync=fsync)
    x, y = grid(ny, nx)
    return ResultsWriter.create(path, grid_x=x, grid_y=y, n_frames=n, settings=SETTINGS,
                                image_names=names, image_sha256=digests,
                                image_times=np.arange(n) * 0.5, scale_mm_per_px=0.02,
                                fsync=fsync)


def write_frames(writer, ny, nx, sleep=0.0, report=None):
    """Write frames n_done .. n_frames-1, calling report(k) after each."""
    for k in range(writer.n_done, writer.n_frames):
        if k in REFERENCE_UPDATES:
            writer.add_reference_update(k)
        writer.write_frame(k, frame(k, ny, nx), reference_index=reference_of(k))
        if report is not None:
            report(k)
        if sleep:
            time.sleep(sleep)


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("path")
    ap.add_argument("--n", type=int, default=40)
    ap.add_argument("--ny", type=int, default=60)
    ap.add_argument("--nx", type=int, default=80)
    ap.add_argument("--sleep", type=float, default=0.0)
    ap.add_argument("--die-at", type=int, default=None)
    ap.add_argument("--no-fsync", action="store_true")
    args = ap.parse_args(argv)
    with open_writer(args.path, args.n, args.ny, args.nx, fsync=not args.no_fsync) as w:
        print(f"ready {w.n_done}", flush=True)
        if args.die_at is not None:
            install_kill_hook(args.die_at)
        write_frames(w, args.ny, args.nx, args.sleep,
                     report=lambda k: print(f"done {k}", flush=True))
    print("finished", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
