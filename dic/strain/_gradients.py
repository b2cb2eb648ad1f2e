"""Displacement gradients by pointwise least squares over a square window of grid points.

At each point a plane (or a quadratic) in the grid coordinates is fitted to ``u`` and to ``v``
over the ``N x N`` window of grid points centred on it, using only measured neighbours. The fit
is centred at the point itself, so the gradient is the linear coefficient of the fit.

Two paths give the same numbers:

* points whose whole window is measured: the fit is a fixed linear filter (Savitzky-Golay
  derivative weights, separable), applied with :func:`scipy.ndimage.correlate1d`; on a full
  symmetric window the plane and the quadratic fit give the same first derivative;
* points with missing neighbours (ROI edges, holes): the normal equations are assembled from
  windowed sums of the validity mask and of the masked displacements (the same separable
  correlations) and solved in one batched :func:`numpy.linalg.solve`.

Unmeasured points enter neither path: their displacements are replaced by zeros with weight zero
before any sum, so they never reach a neighbour.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from dic.errors import RegionTooSmall, TooFewPoints
from dic.strain.defaults import DEFAULT_WINDOW, FULL_WEIGHT_SIGMA

__all__ = ["displacement_gradient", "default_min_points", "GradientFit", "FITS"]

#: fit names and their monomials (power of the x offset, power of the y offset)
FITS = {
    "plane": ((0, 0), (1, 0), (0, 1)),
    "quadratic": ((0, 0), (1, 0), (0, 1), (2, 0), (1, 1), (0, 2)),
}

# a Cholesky pivot of the unit-diagonal normal matrix is 1 - R^2 of regressing that monomial on
# the earlier ones over the valid points; below this the monomial is taken as not determined
# (e.g. all valid neighbours on one line: the pivot is then zero up to rounding, ~1e-16, while
# usable windows give pivots of order 0.01 to 1)
_PIVOT_MIN = 1e-10


class GradientFit(NamedTuple):
    """Result of :func:`displacement_gradient`."""

    #: ``grad[..., i, j] = d u_i / d X_j`` (``u_0 = u``, ``X_0 = x``), NaN where invalid
    grad: np.ndarray
    #: points with a gradient
    valid: np.ndarray
    #: number of measured points in each point's window that entered the fit (0 where invalid)
    n_used: np.ndarray
    #: the minimum count that was applied
    min_points: int
    #: grid spacing along x and y, from ``field.x`` / ``field.y``
    spacing: tuple
    #: canonical fit name and window size that were used
    fit: str
    window: int


def default_min_points(window: int, fit: str = "plane") -> int:
    """Default minimum number of measured points in a window for a valid gradient.

    ``max(6, ceil(N*N / 2))`` for the plane fit and ``max(12, ceil(N*N / 2))`` for the
    quadratic fit: at least twice the unknowns (3 or 6), so every fit has as many redundant
    points as parameters; and at least half the window, so a point on a straight ROI edge (its
    window is ``(N+1)/2`` rows of ``N``, just over half) keeps its strain while a convex corner
    (a quarter window) or a near-isolated point, where the fit is a one-sided extrapolation with
    about three times the interior noise, gets none.

    Parameters
    ----------
    window : int
        Odd window size N in grid points.
    fit : {"plane", "quadratic"}

    Returns
    -------
    int
    """
    floor = 6 if fit == "plane" else 12
    return max(floor, math.ceil(window * window / 2))


def _check_window(window, shape) -> int:
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)):
        raise ValueError(f"window must be an odd integer >= 3 (got {window!r}); use e.g. 9")
    window = int(window)
    if window < 3 or window % 2 == 0:
        fix = "use 3" if window < 3 else f"use {window - 1} or {window + 1}"
        raise ValueError(f"window must be an odd integer >= 3 (got {window}); {fix}")
    if window > min(shape):
        raise RegionTooSmall(f"window={window} is larger than the grid of points {shape}; use a "
                         f"window of at most {min(shape) - (1 - min(shape) % 2)} points")
    return window


def _check_fit(fit) -> str:
    key = fit.strip().lower() if isinstance(fit, str) else None
    if key not in FITS:
        raise ValueError(f"fit must be one of {', '.join(map(repr, FITS))} (got {fit!r})")
    return key


def _grid_spacing(x, y) -> tuple[float, float]:
    """Spacing of a regular axis-aligned grid given by point coordinate arrays, else ValueError."""
    ny, nx = x.shape
    sx = (x[0, -1] - x[0, 0]) / (nx - 1)
    sy = (y[-1, 0] - y[0, 0]) / (ny - 1)
    if not (np.isfinite(sx) and np.isfinite(sy) and sx > 0 and sy > 0):
        raise ValueError("field.x/field.y must increase along columns/rows with a positive step; "
                         "pass the point grid of the reference image")
    ex = x[0, 0] + sx * np.arange(nx)
    ey = y[0, 0] + sy * np.arange(ny)
    tol = 1e-9 * max(1.0, float(np.max(np.abs(x))), float(np.max(np.abs(y))))
    if np.max(np.abs(x - ex[None, :])) > tol or np.max(np.abs(y - ey[:, None])) > tol:
        raise ValueError("field.x/field.y are not a regular grid; strain needs the regular point "
                         "grid that matching produces")
    return float(sx), float(sy)


def _point_weights(field, measured):
    """Weights of the measured points in the fit: ``(FULL_WEIGHT_SIGMA / sigma)^2`` where the
    larger standard deviation ``sigma`` of a point exceeds ``FULL_WEIGHT_SIGMA``, 1 elsewhere
    (and where it is not known), 0 at unmeasured points; None when every weight is 0 or 1."""
    su, sv = getattr(field, "std_u", None), getattr(field, "std_v", None)
    if su is None or sv is None:
        return None
    with np.errstate(invalid="ignore"):
        s = np.fmax(np.asarray(su, dtype=np.float64), np.asarray(sv, dtype=np.float64))
        over = measured & (s > FULL_WEIGHT_SIGMA)  # NaN compares False: weight 1
    if not over.any():
        return None
    weight = measured.astype(np.float64)
    weight[over] = (FULL_WEIGHT_SIGMA / s[over]) ** 2
    return weight


def _window_sum(arr: np.ndarray, p: int, q: int, h: int) -> np.ndarray:
    """``sum over the window of arr * dj**p * di**q`` at every point (zero outside the grid)."""
    from scipy.ndimage import correlate1d

    k = np.arange(-h, h + 1, dtype=np.float64)
    out = correlate1d(arr, k ** p, axis=1, mode="constant", cval=0.0)
    return correlate1d(out, k ** q, axis=0, mode="constant", cval=0.0)


def _solve_normal(M: np.ndarray, rhs: np.ndarray):
    """Solve a batch of small symmetric normal-equation systems by a vectorised Cholesky.

    Parameters
    ----------
    M : ndarray, shape (k, P, P)
        Symmetric positive semi-definite matrices.
    rhs : ndarray, shape (k, P, R)

    Returns
    -------
    coef : ndarray, shape (k, P, R)
        Solutions; meaningless where ``good`` is False.
    good : ndarray of bool, shape (k,)
        Systems that are positive definite with every scaled pivot above ``_PIVOT_MIN``.
    """
    k, P, _ = M.shape
    diag = np.einsum("kii->ki", M)
    good = np.all(diag > 0.0, axis=1)
    scale = 1.0 / np.sqrt(np.where(good[:, None], diag, 1.0))
    A = M * scale[:, :, None] * scale[:, None, :]  # unit diagonal (Jacobi scaling)
    b = rhs * scale[:, :, None]
    L = np.zeros_like(A)
    for j in range(P):
        piv = A[:, j, j] - np.sum(L[:, j, :j] ** 2, axis=1)
        good &= piv > _PIVOT_MIN
        L[:, j, j] = np.sqrt(np.where(good, piv, 1.0))
        for i in range(j + 1, P):
            L[:, i, j] = (A[:, i, j] - np.sum(L[:, i, :j] * L[:, j, :j], axis=1)) / L[:, j, j]
    z = np.empty_like(b)
    for i in range(P):  # L z = b
        z[:, i] = (b[:, i] - np.einsum("kj,kjr->kr", L[:, i, :i], z[:, :i])) / L[:, i, i, None]
    c = np.empty_like(b)
    for i in reversed(range(P)):  # L^T c = z
        c[:, i] = (z[:, i] - np.einsum("kj,kjr->kr", L[:, i + 1:, i], c[:, i + 1:])) \
            / L[:, i, i, None]
    return c * scale[:, :, None], good


def displacement_gradient(field, *, window: int = DEFAULT_WINDOW, fit: str = "plane",
                          min_points: int | None = None) -> GradientFit:
    """Displacement gradients by pointwise least squares (strain window) on a displacement field.

    Parameters
    ----------
    field : DisplacementField
        Displacements on a regular grid of points; only ``field.valid`` points are used. Where
        the field has standard deviations (``std_u``, ``std_v``), a point whose larger one
        exceeds ``FULL_WEIGHT_SIGMA`` (0.2 px) weighs ``(FULL_WEIGHT_SIGMA / sigma)^2`` in the
        fit (weighted least squares); all others weigh 1.
    window : int
        Odd size N of the square strain window in grid points (>= 3; >= 5 for the quadratic fit).
    fit : {"plane", "quadratic"}
        Local model fitted to u and v in the physical grid coordinates (``field.x``,
        ``field.y``). The quadratic fit removes the bias of the plane fit on a quadratic
        displacement field where the window is not symmetric (edges, holes); on a full window
        both give the same gradient.
    min_points : int, optional
        Minimum number of measured points in the window (centre included); fewer gives NaN.
        Default :func:`default_min_points`. The centre point itself must always be measured.

    Returns
    -------
    GradientFit
        ``grad`` of shape (ny, nx, 2, 2) with ``grad[..., i, j] = d u_i / d X_j``; ``valid``;
        ``n_used``; ``min_points``; ``spacing``.

    Raises
    ------
    ValueError
        For a bad window, fit or min_points, an irregular grid, or a field with fewer valid
        points than ``min_points``.

    References
    ----------
    .. [1] B. Pan, A. Asundi, H. Xie, J. Gao, "Digital image correlation using iterative least
       squares and pointwise least squares for displacement field and strain field
       measurements", Opt. Lasers Eng. 47 (2009) 865-874.
    .. [2] A. Savitzky, M. J. E. Golay, Anal. Chem. 36 (1964) 1627-1639.
    .. [3] H. W. Schreier, M. A. Sutton, "Systematic errors in digital image correlation due to
       undermatched subset shape functions", Exp. Mech. 42 (2002) 303-310.
    """
    if not all(hasattr(field, name) for name in ("x", "y", "u", "v", "valid")):
        raise ValueError(f"field must be a DisplacementField (got {type(field).__name__}); "
                         "pass the result of correlate()")
    u = np.asarray(field.u, dtype=np.float64)
    v = np.asarray(field.v, dtype=np.float64)
    x = np.asarray(field.x, dtype=np.float64)
    y = np.asarray(field.y, dtype=np.float64)
    valid_in = np.asarray(field.valid, dtype=bool)
    if u.ndim != 2 or not (u.shape == v.shape == x.shape == y.shape == valid_in.shape):
        raise ValueError("field.u, v, x, y and valid must be 2-D arrays of one shape; pass a "
                         "DisplacementField")
    fit = _check_fit(fit)
    window = _check_window(window, u.shape)
    if fit == "quadratic" and window < 5:
        raise ValueError(f"window={window} is too small for fit='quadratic'; use window >= 5 or "
                         "fit='plane'")
    n_par = len(FITS[fit])
    n_win = window * window
    if min_points is None:
        min_points = default_min_points(window, fit)
    elif isinstance(min_points, bool) or not isinstance(min_points, (int, np.integer)) \
            or not n_par <= min_points <= n_win:
        raise ValueError(f"min_points must be an integer from {n_par} to {n_win} for "
                         f"fit={fit!r}, window={window} (got {min_points!r})")
    min_points = int(min_points)
    w = valid_in & np.isfinite(u) & np.isfinite(v)
    n_good = int(np.count_nonzero(w))
    if n_good < min_points:
        raise TooFewPoints(f"field has only {n_good} valid points, fewer than min_points="
                         f"{min_points}; use a field with more measured points or a smaller "
                         "window")
    sx, sy = _grid_spacing(x, y)

    h = window // 2
    wf = w.astype(np.float64)
    uf = np.where(w, u, 0.0)
    vf = np.where(w, v, 0.0)
    count = _window_sum(wf, 0, 0, h)
    # the counts are exact small integers in float64
    full = w & (count == n_win)
    weight = _point_weights(field, w)
    weighted = weight is not None
    if weighted:
        # a window holding an uncertain point is fitted with the weights (the general path)
        full &= _window_sum(np.where(weight < 1.0, 1.0, 0.0), 0, 0, h) == 0
        uw, vw = weight * uf, weight * vf
    else:
        weight, uw, vw = wf, uf, vf
    part = w & (count >= min_points) & ~full

    # slopes in index units (per grid step) along j (x) and i (y)
    slope = np.full(u.shape + (2, 2), np.nan)
    s2 = float(np.sum(np.arange(-h, h + 1) ** 2))
    norm = window * s2  # sum of dj**2 over the full window
    rhs_first = {}
    for comp, arr in enumerate((uf, vf)):
        for axis, (p, q) in enumerate(((1, 0), (0, 1))):
            sums = _window_sum(arr, p, q, h)
            slope[..., comp, axis] = np.where(full, sums / norm, np.nan)
            rhs_first[(comp, p, q)] = sums

    ok_part = np.zeros(u.shape, bool)
    if np.any(part):
        monos = FITS[fit]
        idx = np.nonzero(part)
        powers = {(a[0] + b[0], a[1] + b[1]) for a in monos for b in monos}
        moments = {pq: _window_sum(weight, *pq, h)[idx] for pq in powers}
        k = idx[0].size
        M = np.empty((k, n_par, n_par))
        for r, a in enumerate(monos):
            for c, b in enumerate(monos):
                M[:, r, c] = moments[(a[0] + b[0], a[1] + b[1])]
        rhs = np.empty((k, n_par, 2))
        for comp, arr in enumerate((uw, vw)):
            for r, (p, q) in enumerate(monos):
                # the unweighted sums of the full-window path serve again where unweighted
                sums = None if weighted else rhs_first.get((comp, p, q))
                if sums is None:
                    sums = _window_sum(arr, p, q, h)
                rhs[:, r, comp] = sums[idx]
        coef, good = _solve_normal(M, rhs)  # (k, n_par, 2)
        coef = coef[good]
        gi = (idx[0][good], idx[1][good])
        # monomials 1 and 2 are the x and y offsets
        slope[gi[0], gi[1], :, 0] = coef[:, 1, :]
        slope[gi[0], gi[1], :, 1] = coef[:, 2, :]
        ok_part[gi] = True

    valid = full | ok_part
    grad = slope
    grad[..., 0] /= sx
    grad[..., 1] /= sy
    grad[~valid] = np.nan
    n_used = np.where(valid, count, 0).astype(np.int32)
    return GradientFit(grad, valid, n_used, min_points, (sx, sy), fit, window)
