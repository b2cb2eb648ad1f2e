"""The second process of :mod:`dic.matching._ahead` (its command line:
``dic.matching._ahead.command``): it compiles the named kernels (of
``dic.matching._ahead.KERNELS``) in the order given, each through the same Python wrapper a run
calls (so the compiled signatures are the run's), on tiny arrays, at the lowest priority. It
prints ``package FOLDER`` (the package it imported), then ``start NAME`` before each kernel and
``ready NAME`` after it (also when one fails: the run then compiles that one itself)."""

from __future__ import annotations

import os
import sys


def build(name):
    """Build kernel ``name`` through the wrapper a run calls, on tiny arrays (also used by
    :func:`dic.matching._ahead.ready` in the run's own process)."""
    import numpy as np

    from dic.images.interp import BSplineImage

    n, half = 40, 3
    img = np.random.default_rng(0).normal(100.0, 20.0, (n, n))
    gx = np.ascontiguousarray(np.gradient(img, axis=1))
    gy = np.ascontiguousarray(np.gradient(img, axis=0))
    if name == "flat_subsets":
        from dic.images.parallel import run_chunks
        from dic.matching._icgn_kernel import flat_subsets

        xs = np.array([20], np.int64)
        run_chunks(flat_subsets, 1, img, gx, gy, xs, xs, half, np.zeros(3), np.empty(1),
                   np.empty(1, np.bool_), min_chunk=64)
    elif name in ("next_wave", "fill_between"):
        from dic.matching._waves import GOOD, TODO, fill_between, next_wave

        state = np.full(9, TODO, np.int8)
        state[4] = GOOD
        zncc, params = np.ones(9), np.zeros((9, 6))
        px = np.tile(np.arange(3, dtype=np.int64), 3)
        py = np.repeat(np.arange(3, dtype=np.int64), 3)
        if name == "next_wave":
            next_wave(state, zncc, params, 3, 3, px, py, False, np.array([4], np.int64), 1, 4)
        else:
            fill_between(state, zncc, params, 3, 3, px, py, False, 1, 1, 1, 1)
    elif name == "interpolation_bias":
        from dic.matching._interp_bias import interpolation_bias

        xs = np.array([20], np.int64)
        interpolation_bias(gx, gy, xs, xs, np.zeros((1, 6)), half, 5, False)
    elif name == "median_test":
        from dic.matching._checks import median_test

        y, x = np.mgrid[0:3, 0:3].astype(np.int64)
        median_test(x, y, np.zeros((3, 3)), np.zeros((3, 3)), np.zeros((3, 3, 2, 2)),
                    np.ones((3, 3), bool))
    elif name in ("first_order", "second_order"):
        from dic.matching._icgn import SubsetMatcher

        second = name == "second_order"
        pad = 5 // 2 + 2
        spline = BSplineImage(np.pad(img, pad, mode="reflect"), 5, pad, img.shape)
        m = SubsetMatcher(img, img, subset=2 * half + 1, second_order=second, order=5,
                          reference_gradients=(gx, gy), deformed_spline=spline, border=0)
        m.match(np.array([20]), np.array([20]), np.zeros(12 if second else 6))


def main(names) -> int:
    try:
        os.nice(19)   # the lowest priority: it runs on a core this process leaves idle
    except (AttributeError, OSError):
        pass
    import dic

    print("package", os.path.dirname(os.path.abspath(dic.__file__)), flush=True)
    for name in names:
        print("start", name, flush=True)
        try:
            build(name)
        except Exception:  # this kernel is compiled by the run itself
            pass
        print("ready", name, flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
