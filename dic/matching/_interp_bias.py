"""Systematic error of a match from the B-spline interpolation of the deformed image.

An interpolating B-spline shifts each spatial frequency of the image by slightly the wrong
amount: sampled at a fractional position ``t``, a sinusoid of frequency ``w`` (rad/px) comes
out displaced by an extra ``delta(w, t)`` px, zero at ``t = 0`` and ``t = 1/2`` and largest
between (Schreier, Braasch & Sutton 2000). The subset's translation is the mean of these
errors weighted by the subset's gradient power at each frequency. The error is systematic:
it does not show in the residual of the fit, so the residual's standard deviation leaves it
out, and on low-noise images of natural textures (much gradient power near the sampling
limit) it dominates the error.

Here ``delta(w, t) ~ -D(w) A(t)`` (the frequency shape taken at ``t = 1/4``, the dependence
on ``t`` averaged over frequencies with weights where natural gradients put their power), so
the bias of a subset is ``K A(t)`` with ``K = sum (q * g_x)^2 / sum g_x^2`` over the subset,
``q`` a short symmetric filter with ``|Q(w)|^2 ~ D(w)``: one filtered image sum per point.
``A`` is averaged over the fractional positions the subset's pixels fall on.

References
----------
.. [1] H. W. Schreier, J. R. Braasch, M. A. Sutton, "Systematic errors in digital image
   correlation caused by intensity interpolation", Optical Engineering 39 (2000) 2915-2921.
.. [2] M. Unser, "Splines: a perfect fit for signal and image processing", IEEE Signal
   Processing Magazine 16 (1999) 22-38.
"""

from __future__ import annotations

import functools

import numpy as np
from numba import njit

__all__ = ["phase_error", "interpolation_bias"]

# frequencies and fractional positions of the tables
_NW = 128
_NT = 128
# terms of the sine series of the position dependence A(t)
_HARMONICS = 3
# half-length of the filter q (2 * _L + 1 taps)
_L = 5
# pixels of the subset used for the sums: every _SUB-th row and column (a ratio of two sums
# over the same pixels, which a ninth of them estimate well enough for an uncertainty term)
_SUB = 3


def phase_error(order, w, t):
    """Displacement error (px) of B-spline interpolation for a sinusoid.

    Interpolating the samples of ``cos(w x)`` with the prefiltered B-spline of degree
    ``order`` and evaluating at ``x + t`` gives a sinusoid shifted by ``t + delta(w, t)``.

    Parameters
    ----------
    order : {3, 5}
        B-spline degree.
    w : array_like
        Frequencies, rad/px (0 < w <= pi).
    t : array_like
        Fractional sample positions (0 <= t <= 1).

    Returns
    -------
    ndarray, shape (len(w), len(t))
        ``delta(w, t)`` in px (negative for 0 < t < 1/2: the interpolant lags).

    References
    ----------
    .. [1] H. W. Schreier, J. R. Braasch, M. A. Sutton, "Systematic errors in digital image
       correlation caused by intensity interpolation", Optical Engineering 39 (2000)
       2915-2921.
    """
    w = np.atleast_1d(np.asarray(w, dtype=np.float64))
    t = np.atleast_1d(np.asarray(t, dtype=np.float64))
    # the interpolant of exp(i w k) at k + t is exp(i w k) sum_m b(t + m) exp(-i w m) / B(w),
    # B(w) real and positive; its phase less the ideal w t is the error
    return np.angle(_response(order, w, t)) / w[:, None]


def _response(order, w, t):
    """Complex response ``H(w, t)`` of the interpolating B-spline sampled at fractional
    position ``t``, relative to the ideal ``exp(i w t)``; shape (len(w), len(t))."""
    from dic.images.interp import bspline

    m = np.arange(-order - 2, order + 3)
    s = (bspline(t[None, :, None] + m, order) * np.exp(-1j * w[:, None, None] * m)).sum(-1)
    b = (bspline(m.astype(np.float64), order)[None, :] * np.exp(-1j * w[:, None] * m)).sum(-1)
    return s * np.exp(-1j * w[:, None] * t[None, :]) / b.real[:, None]


def _even_filter(w, response, lowest):
    """Taps (2 _L + 1) of the even filter whose frequency response fits ``response``, built
    from the powers ``lowest`` to ``_L`` of the second difference [-1, 2, -1] (response
    ``2 - 2 cos w``): it passes nothing at low frequencies to order ``w^(2 lowest)``, where
    image power is largest and a small ripple of a free fit would swamp the result. The error
    is weighted so that the small response away from the sampling limit matters as much as
    the large one near it."""
    ks = np.arange(lowest, _L + 1)
    basis = np.column_stack([(2.0 - 2.0 * np.cos(w)) ** k for k in ks])
    wt = 1.0 / (np.abs(response) + 0.02)
    c = np.linalg.lstsq(basis * wt[:, None], response * wt, rcond=None)[0]
    taps = np.zeros(2 * _L + 1)
    for ck, k in zip(c, ks):
        f = np.array([1.0])
        for _ in range(k):
            f = np.convolve(f, [-1.0, 2.0, -1.0])
        m = (taps.size - f.size) // 2
        taps[m:m + f.size] += ck * f
    return taps


@functools.lru_cache(maxsize=None)
def _model(order):
    """(q, A): the filter whose power response follows -delta(w, 1/4), and the sine-series
    coefficients of A(t) (A(1/4) = 1; A is odd, with period 1), _HARMONICS of them."""
    w = np.pi * np.arange(1, _NW + 1) / _NW
    t = np.arange(_NT + 1) / _NT
    d = phase_error(order, w, t)
    quarter = d[:, _NT // 4]
    shape = -quarter
    # the t-dependence, averaged over frequency with weights D(w) sin(w)^2: the bias weights
    # the gradient power (whose filter response falls to zero at the sampling limit)
    wt = shape * np.sin(w) ** 2
    a = (wt[:, None] * d / quarter[:, None]).sum(0) / wt.sum()
    # nearly sin(2 pi t): for the quintic 1.013, -0.069, 0.014 (the rest below 0.5 %)
    j = np.arange(1, _HARMONICS + 1)
    coef = 2.0 * (a[:-1, None] * np.sin(2.0 * np.pi * np.outer(t[:-1], j))).mean(0)
    # sqrt(D) goes as w^4 at low frequencies (quintic; cubic as w^3)
    q = _even_filter(w, np.sqrt(np.maximum(shape, 0.0)), 2)
    return q, np.ascontiguousarray(coef)


@njit(cache=True, nogil=True)
def _mean_sine(coef, t0, gx_, gy_, n):
    """Mean of A(t) = sum_j coef[j-1] sin(2 pi j t) over the n x n pixels of a subset whose
    fractional position is ``t0 + gx_ dx + gy_ dy`` (dx, dy = -h..h): each harmonic's mean is
    its value at the centre times two Dirichlet kernels."""
    out = 0.0
    for j in range(1, coef.shape[0] + 1):
        w = 2.0 * np.pi * j
        out += coef[j - 1] * np.sin(w * t0) * _dirichlet(w * gx_, n) * _dirichlet(w * gy_, n)
    return out


@njit(cache=True, nogil=True)
def _dirichlet(theta, n):
    """Mean of exp(i theta k) over k = -(n-1)/2 .. (n-1)/2 (real)."""
    s = np.sin(0.5 * theta)
    if abs(s) < 1e-12:
        return 1.0
    return np.sin(0.5 * n * theta) / (n * s)


@njit(cache=True, nogil=True, fastmath=True)
def _bias_kernel(lo, hi, gx, gy, px, py, params, iu, iv, half, q, a, sub, out):
    """out[k] = (bias of u, bias of v) for points lo..hi-1 (see interpolation_bias)."""
    rows, cols = gx.shape
    for k in range(lo, hi):
        x0 = px[k]
        y0 = py[k]
        su = 0.0
        sx = 0.0
        sv = 0.0
        sy = 0.0
        for j in range(-half, half + 1, sub):
            r = y0 + j
            if r < _L or r >= rows - _L:
                continue
            for i in range(-half, half + 1, sub):
                c = x0 + i
                # pixels whose filter reaches past the image border are left out
                if c < _L or c >= cols - _L:
                    continue
                # the gradients filtered along x (for u) and along y (for v); the tap count
                # is a compile-time constant, so the loop unrolls
                fx = 0.0
                fy = 0.0
                for m in range(2 * _L + 1):
                    fx += q[m] * gx[r, c + m - _L]
                    fy += q[m] * gy[r + m - _L, c]
                su += fx * fx
                sx += gx[r, c] * gx[r, c]
                sv += fy * fy
                sy += gy[r, c] * gy[r, c]
        # A at the fractional positions the subset's pixels are sampled at in the deformed
        # image, averaged over the subset (first-order terms of the shape function)
        ns = 2 * half + 1
        au = _mean_sine(a, params[k, iu], params[k, iu + 1], params[k, iu + 2], ns)
        av = _mean_sine(a, params[k, iv], params[k, iv + 1], params[k, iv + 2], ns)
        out[k, 0] = (su / sx if sx > 0.0 else 0.0) * au
        out[k, 1] = (sv / sy if sy > 0.0 else 0.0) * av


def interpolation_bias(gx, gy, px, py, params, half, order, second=False):
    r"""Predicted systematic error of u and v (px) from interpolating the deformed image.

    For each matched subset, ``b = K A``: ``K = sum (q * g)^2 / sum g^2`` over the subset
    (reference gradient ``g`` along the direction of the component, ``q`` a filter whose power
    response follows the spline's phase error at a quarter pixel), ``A`` the phase error's
    dependence on the fractional sample position, averaged over the subset's pixels at their
    matched positions (see the module notes). The sums take every third row and column of
    the subset; ``A``, a short sine series, is averaged over all its pixels in closed form.

    Parameters
    ----------
    gx, gy : ndarray
        Reference image gradients (the matcher's).
    px, py : ndarray of int
        Subset centres, px.
    params : ndarray, shape (n, 6) or (n, 12)
        Matched shape-function parameters (first or second order; the second-order terms are
        left out of the sample positions).
    half : int
        Subset half-width, px.
    order : {3, 5}
        B-spline degree of the deformed image.
    second : bool
        ``params`` are second-order vectors.

    Returns
    -------
    ndarray, shape (n, 2)
        Signed bias of u and v (px; NaN where ``params`` is NaN).

    References
    ----------
    .. [1] H. W. Schreier, J. R. Braasch, M. A. Sutton, "Systematic errors in digital image
       correlation caused by intensity interpolation", Optical Engineering 39 (2000)
       2915-2921.
    """
    from dic.images.parallel import run_chunks
    from dic.matching._ahead import ready

    ready("interpolation_bias")
    q, a = _model(int(order))
    iu, iv = (0, 6) if second else (0, 3)
    p = np.ascontiguousarray(params, dtype=np.float64)
    n = p.shape[0]
    out = np.full((n, 2), np.nan)
    if n == 0:
        return out
    run_chunks(_bias_kernel, n, np.ascontiguousarray(gx, dtype=np.float64),
               np.ascontiguousarray(gy, dtype=np.float64),
               np.ascontiguousarray(px, dtype=np.int64), np.ascontiguousarray(py, dtype=np.int64),
               np.nan_to_num(p), iu, iv, int(half), q, a, _SUB, out, min_chunk=64)
    out[~np.all(np.isfinite(p), axis=1)] = np.nan
    return out
