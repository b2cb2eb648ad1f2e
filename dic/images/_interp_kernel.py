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
#: image rows the row pass filters side by side
_ROWS = 8


@njit(cache=True)
def _horizon(z, n):
    h = int(np.ceil(np.log(1e-15) / np.log(abs(z))))
    return min(h, n)


@njit(cache=True, nogil=True)
def _recurse_cols(buf, off, n, w, poles):
    """The recursive prefilter along axis 0 of ``buf[off:off + n, :w]``, in place (mirror
    boundaries; the gain already applied). The inner loop runs across the ``w`` lines side by
    side (next to each other in memory): the recursion along a line is a chain of dependent
    operations, and several independent chains keep the processor busy. The row pass uses it
    too, on its rows held side by side."""
    for z in poles:
        h = _horizon(z, n)
        zn = z
        for r in range(1, h):
            for c in range(w):
                buf[off, c] += zn * buf[off + r, c]
            zn *= z
        for r in range(off + 1, off + n):
            for c in range(w):
                buf[r, c] += z * buf[r - 1, c]
        k = z / (z * z - 1.0)
        for c in range(w):
            buf[off + n - 1, c] = k * (z * buf[off + n - 2, c] + buf[off + n - 1, c])
        for r in range(off + n - 2, off - 1, -1):
            for c in range(w):
                buf[r, c] = z * (buf[r + 1, c] - buf[r, c])


@njit(cache=True, nogil=True)
def _rows_pass(lo, hi, src, s0, n, poles, gain, fir, out, c0):
    """Along axis 1, for rows lo..hi-1: the prefilter of ``src[r, s0:s0 + n]``, then the
    filter ``fir`` (odd length, centred; mirror boundaries) into ``out[r, c0:c0 + n]``,
    eight rows at a time in a small buffer that holds them side by side (transposed).
    ``out`` may be ``src`` (in place)."""
    kk = fir.shape[0] // 2
    nf = fir.shape[0]
    buf = np.empty((n + 2 * kk, _ROWS))
    acc = np.empty(_ROWS)
    for r0 in range(lo, hi, _ROWS):
        nr = min(hi, r0 + _ROWS) - r0
        for r in range(nr):
            for i in range(n):
                buf[kk + i, r] = src[r0 + r, s0 + i] * gain
        for r in range(nr, _ROWS):           # a last, partial group: unused lanes stay zero
            for i in range(n + 2 * kk):
                buf[i, r] = 0.0
        if n > 1:
            _recurse_cols(buf, kk, n, _ROWS, poles)
        # whole-sample mirror beyond both ends: c[-j] = c[j], c[n - 1 + j] = c[n - 1 - j]
        for j in range(1, kk + 1):
            for r in range(_ROWS):
                buf[kk - j, r] = buf[kk + j, r]
                buf[kk + n - 1 + j, r] = buf[kk + n - 1 - j, r]
        for c in range(n):
            for r in range(_ROWS):
                acc[r] = fir[0] * buf[c, r]
            for j in range(1, nf):
                fj = fir[j]
                for r in range(_ROWS):
                    acc[r] += fj * buf[c + j, r]
            for r in range(nr):
                out[r0 + r, c0 + c] = acc[r]


@njit(cache=True, nogil=True)
def _cols_pass(lo, hi, src, c0, n, poles, gain, fir, out):
    """Along axis 0, for the blocks lo..hi-1 of ``_BLOCK`` columns of ``src[:, c0:c0 + n]``:
    the prefilter, then the filter ``fir`` into ``out`` (same columns), in a buffer one
    block wide. ``out`` may be ``src`` (in place)."""
    rows = src.shape[0]
    kk = fir.shape[0] // 2
    buf = np.empty((rows + 2 * kk, _BLOCK))
    acc = np.empty(_BLOCK)
    for b in range(lo, hi):
        q0 = c0 + b * _BLOCK
        w = min(c0 + n, q0 + _BLOCK) - q0
        for r in range(rows):
            for c in range(w):
                buf[kk + r, c] = src[r, q0 + c] * gain
        if rows > 1:
            _recurse_cols(buf, kk, rows, w, poles)
        for j in range(1, kk + 1):
            for c in range(w):
                buf[kk - j, c] = buf[kk + j, c]
                buf[kk + rows - 1 + j, c] = buf[kk + rows - 1 - j, c]
        # the filter summed in a local row, then written out once
        for r in range(rows):
            for c in range(w):
                acc[c] = fir[0] * buf[r, c]
            for j in range(1, fir.shape[0]):
                fj = fir[j]
                for c in range(w):
                    acc[c] += fj * buf[r + j, c]
            for c in range(w):
                out[r, q0 + c] = acc[c]


def rows_pass(src, s0, n, poles, gain, fir, out, c0):
    """:func:`_rows_pass` over all rows, in parallel."""
    run_chunks(_rows_pass, src.shape[0], src, s0, n, poles, gain, fir, out, c0, min_chunk=16)


def cols_pass(src, c0, n, poles, gain, fir, out):
    """:func:`_cols_pass` over all column blocks, in parallel."""
    run_chunks(_cols_pass, (n + _BLOCK - 1) // _BLOCK, src, c0, n, poles, gain, fir, out)


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
