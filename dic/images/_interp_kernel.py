"""Compiled B-spline prefilter and derivative filters (numba), run in threads over lines.

Private: :mod:`dic.images.interp` wraps these and checks their input.

References
----------
.. [1] M. Unser, "Splines: a perfect fit for signal and image processing", IEEE Signal
   Processing Magazine 16 (1999) 22-38.
.. [2] P. Thévenaz, T. Blu, M. Unser, "Interpolation revisited", IEEE Transactions on Medical
   Imaging 19 (2000) 739-758.
"""

import numpy as np
from numba import njit

from dic.images.parallel import run_chunks

_BLOCK = 64


@njit(cache=True)
def _horizon(z, n):
    h = int(np.ceil(np.log(1e-15) / np.log(abs(z))))
    return min(h, n)


@njit(cache=True, nogil=True)
def _filter_rows(lo, hi, img, poles, gain, out):
    """Recursive B-spline prefilter along axis 1 (mirror boundaries), rows lo..hi-1.

    Eight rows at a time, the inner loop running across them: the recursion along a row is a
    chain of dependent operations, and eight independent chains keep the processor busy."""
    n = img.shape[1]
    for r0 in range(lo, hi, 8):
        r1 = min(hi, r0 + 8)
        for r in range(r0, r1):
            for i in range(n):
                out[r, i] = img[r, i] * gain
        if n == 1:
            continue
        for z in poles:
            h = _horizon(z, n)
            k = z / (z * z - 1.0)
            for r in range(r0, r1):
                s = out[r, 0]
                zn = z
                for i in range(1, h):
                    s += zn * out[r, i]
                    zn *= z
                out[r, 0] = s
            for i in range(1, n):
                for r in range(r0, r1):
                    out[r, i] += z * out[r, i - 1]
            for r in range(r0, r1):
                out[r, n - 1] = k * (z * out[r, n - 2] + out[r, n - 1])
            for i in range(n - 2, -1, -1):
                for r in range(r0, r1):
                    out[r, i] = z * (out[r, i + 1] - out[r, i])


def filter_rows(img, poles, gain, out):
    """Recursive B-spline prefilter along axis 1 (mirror boundaries), rows in parallel."""
    run_chunks(_filter_rows, img.shape[0], img, poles, gain, out, min_chunk=16)


@njit(cache=True, nogil=True)
def _filter_cols(lo, hi, a, poles, gain):
    """Recursive B-spline prefilter along axis 0, in place, column blocks lo..hi-1."""
    n, cols = a.shape
    for b in range(lo, hi):
        c0 = b * _BLOCK
        c1 = min(cols, c0 + _BLOCK)
        for r in range(n):
            for c in range(c0, c1):
                a[r, c] *= gain
        if n == 1:
            continue
        for z in poles:
            h = _horizon(z, n)
            zn = z
            for r in range(1, h):
                for c in range(c0, c1):
                    a[0, c] += zn * a[r, c]
                zn *= z
            for r in range(1, n):
                for c in range(c0, c1):
                    a[r, c] += z * a[r - 1, c]
            k = z / (z * z - 1.0)
            for c in range(c0, c1):
                a[n - 1, c] = k * (z * a[n - 2, c] + a[n - 1, c])
            for r in range(n - 2, -1, -1):
                for c in range(c0, c1):
                    a[r, c] = z * (a[r + 1, c] - a[r, c])


def filter_cols(a, poles, gain):
    """Recursive B-spline prefilter along axis 0, in place, blocks of columns in parallel."""
    run_chunks(_filter_cols, (a.shape[1] + _BLOCK - 1) // _BLOCK, a, poles, gain)


@njit(cache=True, nogil=True)
def _filter_x(lo, hi, coef, r0, c0, cols, w, out):
    """out[r - r0, c] = sum_k w[k] coef[r, c0 + c + k - K] for rows r0 + lo..r0 + hi - 1."""
    kk = w.shape[0] // 2
    for r in range(r0 + lo, r0 + hi):
        for c in range(cols):
            acc = 0.0
            for k in range(w.shape[0]):
                acc += w[k] * coef[r, c0 + c + k - kk]
            out[r - r0, c] = acc


@njit(cache=True, nogil=True)
def _filter_y(lo, hi, a, w, out):
    """out[r, c] = sum_j w[j] a[r + j, c] for rows lo..hi-1 (a has len(w) - 1 more rows)."""
    cols = out.shape[1]
    for r in range(lo, hi):
        for c in range(cols):
            out[r, c] = 0.0
        for j in range(w.shape[0]):
            wj = w[j]
            for c in range(cols):
                out[r, c] += wj * a[r + j, c]


def separable_at_nodes(coef, pad, rows, cols, wx, wy, out):
    """out[r, c] = sum_jk wy[j] wx[k] coef[pad + r + j - K, pad + c + k - K], K = len(w) // 2."""
    ky = wy.shape[0] // 2
    tmp = np.empty((rows + 2 * ky, cols))
    run_chunks(_filter_x, rows + 2 * ky, coef, pad - ky, pad, cols, wx, tmp, min_chunk=16)
    run_chunks(_filter_y, rows, tmp, wy, out, min_chunk=16)


def derivative_x(a, k, cols, w, out):
    """out[r, c] = sum_j w[j] a[r, k + c + j - K] (rows in parallel)."""
    run_chunks(_filter_x, out.shape[0], a, 0, k, cols, w, out, min_chunk=16)


def derivative_y(a, w, out):
    """out[r, c] = sum_j w[j] a[r + j, c] (a has len(w) - 1 more rows than out)."""
    run_chunks(_filter_y, out.shape[0], a, w, out, min_chunk=16)
