"""Checks on a matched field: curvature that biases the first-order shape function, the
a-posteriori uncertainty of each match, and the consistency of each point with its neighbours.
"""

from __future__ import annotations

import numpy as np

#: the residual covariance leaves out error that does not show in the residual (interpolation
#: of the deformed image, texture the fit absorbs); on Fourier-shifted scikit-image photographs
#: (gravel, grass, brick, camera, moon, coins; with and without 2 grey levels of added noise)
#: median |error| / sigma was 0.64-1.2 unscaled (largest on camera and brick), on synthetic
#: speckle the unscaled value is right to a few per cent: scaled by this it is 0.6-1.1 (all
#: measured before the interpolation bias joined the standard deviations in dic.correlate:
#: dic.matching.interpolation_bias, which brings noise-free photographs from 1.7-2.9 to
#: 0.7-0.9 at a quarter-pixel shift)
POSTERIOR_SCALE = 1.1
#: slow_convergence_factor: iterations near the solution a match takes without a sign of slow
#: convergence, and the further ones per doubling of the variance
SLOW_AFTER = 3
SLOW_PER_DOUBLING = 3

__all__ = ["grid_derivative", "affine_bias", "posterior_sigma", "median_test", "translation_sigma",
           "slow_convergence_factor"]


def grid_derivative(a, spacing, axis):
    """Derivative of a grid array along ``axis`` (1: x, 0: y) per px, NaN-aware.

    Central differences where both neighbours are finite, one-sided where only one is, NaN
    where neither is.
    """
    a = np.moveaxis(np.asarray(a, dtype=np.float64), axis, 0)
    out = np.full(a.shape, np.nan)
    if a.shape[0] >= 2:
        d = (a[1:] - a[:-1]) / spacing
        ok = np.isfinite(d)
        fwd, bwd = d[1:], d[:-1]                 # the two sides of the inner points
        okf, okb = ok[1:], ok[:-1]
        out[1:-1] = np.where(okf, np.where(okb, 0.5 * (fwd + bwd), fwd),
                             np.where(okb, bwd, np.nan))
        out[0] = np.where(ok[0], d[0], np.nan)
        out[-1] = np.where(ok[-1], d[-1], np.nan)
    return np.moveaxis(out, 0, axis)


def affine_bias(grad, step, half):
    r"""Displacement bias (px) a first-order subset would have from the field's curvature.

    Fitting an affine shape function to a displacement with second derivatives ``u_xx, u_yy``
    over a square subset of half-width ``h`` shifts the fitted displacement at the centre by
    the subset mean of the quadratic terms, ``(u_xx + u_yy) m_2 / 2`` with
    ``m_2 = h (h + 1) / 3`` the mean of ``dx^2`` over the subset (the least-squares fit of a
    polynomial; common practice, no source). The second derivatives are estimated from the
    differences of the neighbouring points' first-order gradients.

    Parameters
    ----------
    grad : ndarray, shape (ny, nx, 2, 2)
        Displacement gradients of a first-order field (NaN where not measured).
    step : float
        Grid spacing, px.
    half : int
        Subset half-width, px.

    Returns
    -------
    bias : ndarray, shape (ny, nx)
        The larger of the u and v biases (px); NaN where no neighbour is measured.
    curv : ndarray, shape (ny, nx, 2, 3)
        The estimated second derivatives ``d2u_i/dx2, d2u_i/dxdy, d2u_i/dy2``.
    """
    g = np.asarray(grad, dtype=np.float64)
    curv = np.empty(g.shape[:2] + (2, 3))
    for i in range(2):
        dxx = grid_derivative(g[..., i, 0], step, 1)
        dyy = grid_derivative(g[..., i, 1], step, 0)
        dxy = 0.5 * (grid_derivative(g[..., i, 0], step, 0)
                     + grid_derivative(g[..., i, 1], step, 1))
        curv[..., i, 0] = dxx
        curv[..., i, 1] = dxy
        curv[..., i, 2] = dyy
    m2 = half * (half + 1) / 3.0
    b = 0.5 * m2 * np.abs(curv[..., :, 0] + curv[..., :, 2])
    with np.errstate(invalid="ignore"):
        bias = np.fmax(b[..., 0], b[..., 1])
    return bias, curv


def posterior_sigma(std, zncc, terms, npix, npar, order=5):
    r"""Standard deviations of u and v from the converged fit itself.

    The a-posteriori Gauss-Newton covariance is ``s^2 H^-1`` with ``s^2`` the residual
    variance over the subset, ``s^2 = sum r^2 / (n - p)`` (``n`` pixels, ``p`` parameters).
    For the zero-normalised criterion the residual ``r = (f - f_m) - (|f - f_m| / |g - g_m|)
    (g - g_m)`` has ``sum r^2 = 2 |f - f_m|^2 (1 - ZNCC)`` (Pan, Xie & Wang 2010), with
    ``|f - f_m|^2 = n std^2`` of the reference subset. The noise in the reference gradients
    adds the terms of :func:`dic.matching.point_sigma`, evaluated with the residual variance
    shared equally between the two images (``s_f^2 = s_g^2 = s^2 / 2``). The result is scaled
    by ``POSTERIOR_SCALE`` (1.1), an empirical calibration on photographs of real textures.

    Parameters
    ----------
    std : ndarray
        Grey-level standard deviation of each reference subset.
    zncc : ndarray
        ZNCC of each converged match.
    terms : ndarray, shape (..., 6)
        The kernel's uncertainty terms per point (see :func:`dic.matching.point_sigma`).
    npix, npar : int or ndarray
        Pixels per subset and shape-function parameters (per point, or one for all).
    order : {3, 5}
        B-spline degree of the matcher's gradients.

    Returns
    -------
    std_u, std_v : ndarray

    References
    ----------
    .. [1] B. Pan, H. Xie, Z. Wang, "Equivalence of digital image correlation criteria for
       pattern matching", Applied Optics 49 (2010) 5501-5509.
    .. [2] J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., Springer (2006),
       section 10.3 (the Gauss-Newton approximation of the covariance of a least-squares fit).
    """
    std = np.asarray(std, dtype=np.float64)
    one_minus = np.clip(1.0 - np.asarray(zncc, dtype=np.float64), 0.0, None)
    s2 = 2.0 * npix * std ** 2 * one_minus / np.maximum(npix - np.asarray(npar), 1)
    from dic.matching._uncertainty import gradient_noise_gain

    t = np.asarray(terms, dtype=np.float64)
    c = gradient_noise_gain(order)
    h = 0.5 * s2[..., None]
    var = (2.0 * h * t[..., 0:2] + c * h * 3.0 * h * t[..., 2:4]
           + c * c * h * h * 4.0 * h * t[..., 4:6])
    with np.errstate(invalid="ignore"):
        sig = POSTERIOR_SCALE * np.sqrt(np.where(var >= 0, var, np.nan))
    return sig[..., 0], sig[..., 1]


def slow_convergence_factor(iterations):
    r"""Factor on the standard deviations of a match that converged slowly.

    Inverse-compositional Gauss-Newton steps with the reference subset's Hessian ``H``. Near
    the solution the error shrinks by a factor ``rho`` per iteration, the spectral radius of
    ``I - H^-1 H_c`` with ``H_c`` the true curvature of the criterion there: where ``H``
    overstates the curvature (noise in the reference gradients adds to ``H``, and a coarse or
    faint texture has little of its own), the iteration crawls, and the covariance
    ``s^2 H^-1`` understates the scatter by the same ratio, ``var = s^2 H_c^-1 ~ s^2 H^-1 /
    (1 - rho)``. The number of iterations near the solution (updates below ``NEAR_STEP``,
    0.1 px, of the matching kernel: independent of how far the starting guess was) grows as
    ``1 / (1 - rho)`` does, so the variance is scaled by ``1 + (n - SLOW_AFTER) /
    SLOW_PER_DOUBLING`` for ``n > SLOW_AFTER`` of them (3 and 3).

    Calibrated on Fourier-shifted scikit-image photographs (astronaut, brick, camera, coffee,
    coins, moon, page, text; 0.5 and 2 grey levels of noise, shift (0.37, -0.61) px) and on
    rendered coarse speckle (4 and 6 px radius, 2 grey levels of noise): without it the median
    |error| / sigma grew with those iterations, from 0.62 (2) to 0.82 (4-5), 1.03 (6-7), 1.19
    (8-11), 1.44 (12-19), 1.76 (20-29) and 2.6 (30 or more); with it, 0.62-0.77 in every
    range, and 0.57-0.76 per image (was 0.57-0.94).

    Parameters
    ----------
    iterations : array_like of int
        Gauss-Newton iterations near the solution of each point's final match.

    Returns
    -------
    ndarray
        Factor (at least 1) on the standard deviations.

    References
    ----------
    .. [1] J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., Springer (2006),
       section 10.3 (the linear convergence of Gauss-Newton when its Hessian model differs
       from the true one).
    .. [2] S. Baker, I. Matthews, "Lucas-Kanade 20 years on: a unifying framework", Int. J.
       Comput. Vis. 56 (2004) 221-255 (the inverse-compositional Hessian).
    """
    n = np.asarray(iterations, dtype=np.float64)
    return np.sqrt(1.0 + np.maximum(n - SLOW_AFTER, 0.0) / SLOW_PER_DOUBLING)


def median_test(x, y, u, v, grad, valid, *, grad2=None, eps=0.1, threshold=2.0,
                min_neighbours=3):
    r"""Points that disagree with their neighbours: the normalised median test.

    For every measured point, over its measured neighbours among the 8 around it: each
    neighbour's prediction of the point's displacement from its own shape function,
    ``u_i + grad_i d + d^T grad2_i d / 2`` with ``d = X_0 - X_i`` (so a uniform strain, or a
    curved field matched to second order, leaves no residual, also at the edge of the measured
    region), their median ``u_m``, the median ``r_m`` of the residuals
    ``|u_i - u_m|``, and the normalised residual ``|u_0 - u_m| / (r_m + eps)``. A point whose
    normalised residual of ``u`` or ``v`` exceeds ``threshold`` is an outlier. ``eps`` (px)
    stands for the noise level of a good match (Westerweel & Scarano: about 0.1 px,
    threshold 2).

    Parameters
    ----------
    x, y : ndarray, shape (ny, nx)
        Point positions, px.
    u, v : ndarray, shape (ny, nx)
        Displacement components (NaN where not measured).
    grad : ndarray, shape (ny, nx, 2, 2)
        Displacement gradients (``grad[..., i, j] = du_i/dX_j``).
    valid : ndarray of bool, shape (ny, nx)
        Measured points.
    grad2 : ndarray, shape (ny, nx, 2, 3), optional
        Second derivatives ``d2u_i/dX2, d2u_i/dXdY, d2u_i/dY2`` (NaN or absent: zero).
    eps, threshold : float
        Noise level (px) and threshold of the test.
    min_neighbours : int
        Points with fewer measured neighbours are not tested; on grids of at least 3 x 3
        points, those with none or one are outliers (they cannot be checked).

    Returns
    -------
    ndarray of bool, shape (ny, nx)
        True at outliers.

    References
    ----------
    .. [1] J. Westerweel, F. Scarano, "Universal outlier detection for PIV data", Experiments
       in Fluids 39 (2005) 1096-1100.
    """
    from dic.images.parallel import run_chunks
    from dic.matching._ahead import ready
    from dic.matching._median_kernel import median_outliers

    ready("median_test")
    valid = np.asarray(valid, bool)
    ny, nx = valid.shape
    out = np.zeros((ny, nx), bool)

    def f64(a):
        return np.ascontiguousarray(a, dtype=np.float64)

    g = f64(grad)
    g2 = np.zeros((ny, nx, 2, 3)) if grad2 is None else np.nan_to_num(f64(grad2))
    x, y = f64(x), f64(y)
    for i, comp in enumerate((u, v)):
        a = np.ascontiguousarray(np.where(valid, comp, np.nan))
        run_chunks(median_outliers, ny, x, y, a, f64(g[..., i, 0]), f64(g[..., i, 1]),
                   f64(g2[..., i, 0]), f64(g2[..., i, 1]), f64(g2[..., i, 2]), valid,
                   float(eps), float(threshold), int(min_neighbours), out, min_chunk=8)
    return out


def sssig(gx, gy, xs, ys, half):
    """The smaller of the subset sums of squared x and y grey-level gradients (SSSIG, Pan et
    al. 2008, cited at :func:`translation_sigma`) of the subsets centred on integer pixels
    ``(xs, ys)``, half-width ``half`` (wholly inside the images ``gx``, ``gy``), from
    summed-area tables over their bounding box."""
    xs = np.asarray(xs, dtype=np.int64)
    ys = np.asarray(ys, dtype=np.int64)
    if xs.size == 0:
        return np.empty(0)
    r0, r1 = int(ys.min()) - half, int(ys.max()) + half + 1
    c0, c1 = int(xs.min()) - half, int(xs.max()) + half + 1
    sums = []
    for g in (gx, gy):
        a = np.square(g[r0:r1, c0:c1])
        c = np.zeros((a.shape[0] + 1, a.shape[1] + 1))
        c[1:, 1:] = np.cumsum(np.cumsum(a, axis=0), axis=1)
        y0, x0 = ys - half - r0, xs - half - c0
        n = 2 * half + 1
        sums.append(c[y0 + n, x0 + n] - c[y0, x0 + n] - c[y0 + n, x0] + c[y0, x0])
    return np.minimum(sums[0], sums[1])


def translation_sigma(gx, gy, xs, ys, half, noise):
    r"""Predicted standard deviation (px) of a match from image noise, translation only.

    ``sqrt(s_f^2 + s_g^2) / sqrt(SSSIG)`` with ``SSSIG`` the subset sum of squared grey-level
    gradients, the smaller of x and y (Pan et al. 2008). It is a lower bound of the affine
    case; a subset without gradients gives infinity.

    Parameters
    ----------
    gx, gy : ndarray
        Grey-level gradient images of the reference.
    xs, ys : ndarray of int
        Subset centres.
    half : int
        Subset half-width.
    noise : (float, float)
        Noise standard deviations of the reference and deformed images (NaN: zero).

    Returns
    -------
    ndarray

    References
    ----------
    .. [1] B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, "Study on subset size selection in
       digital image correlation for speckle patterns", Opt. Express 16 (2008) 7037-7048.
    """
    smin = sssig(gx, gy, xs, ys, half)
    if smin.size == 0:
        return smin
    s2 = float(np.nansum(np.square(np.asarray(noise, dtype=np.float64))))
    with np.errstate(divide="ignore", invalid="ignore"):
        sig = np.where(smin > 1e-12 * max(float(np.max(smin)), 1e-300), np.sqrt(s2 / smin),
                       np.inf)
    return sig


#: a failed point whose reference subset's grey levels vary by at most this many times the
#: image noise holds no more texture than noise (the texture's own standard deviation,
#: sqrt(std^2 - noise^2), at most the noise's): it is reported FLAT (a blank or featureless
#: surface photographed with a real camera), not as a failed match. A noise-only subset's
#: standard deviation is about 1 x the noise; a smooth ramp under it, the sky of a
#: photograph, about 1.2 x (common practice, no source)
FEATURELESS = float(np.sqrt(2.0))


def featureless(prop, noise, factor=FEATURELESS):
    """Relabel ``FLAT`` the points of propagation state ``prop`` (see :func:`dic.correlate`)
    that no match reached or whose match failed (``NOT_REACHED``, ``LOW_ZNCC``,
    ``NO_CONVERGENCE``) where the reference subset's standard deviation is at most ``factor``
    times the reference image's ``noise`` (grey levels): the reason to report is then the
    missing texture. Returns the number relabelled."""
    from dic.field import Reason

    idx = np.flatnonzero((prop.state == prop.w.BAD) & np.isin(
        prop.reason, (Reason.NOT_REACHED, Reason.LOW_ZNCC, Reason.NO_CONVERGENCE)))
    if idx.size == 0 or not np.isfinite(noise) or noise <= 0:
        return 0
    prop.texture(idx)
    flat = idx[prop.std[idx] <= factor * noise]
    prop.reason[flat] = Reason.FLAT
    return int(flat.size)
