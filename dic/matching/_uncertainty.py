"""Predicted random error of subset matching from image noise and each subset's Hessian."""

from __future__ import annotations

import functools

import numpy as np

__all__ = ["point_sigma", "gradient_noise_gain", "predicted_sigma"]


@functools.lru_cache(maxsize=4)
def gradient_noise_gain(order: int = 5) -> float:
    """Variance of the matcher's x-gradient of unit white noise, ``sum_k d_k^2``.

    The reference gradients are the derivatives of the B-spline interpolant at the pixel
    centres (:func:`dic.images.interp.reference_gradients`): a linear filter ``d`` along x (identity
    along y). White noise of variance ``s^2`` gives gradient noise of variance ``c s^2`` with
    ``c = sum_k d_k^2``, found here by filtering a unit impulse.

    Parameters
    ----------
    order : {3, 5}
        B-spline degree.

    Returns
    -------
    float
    """
    from dic.images import interp

    n = 65
    delta = np.zeros((n, n))
    delta[n // 2, n // 2] = 1.0
    gx, _ = interp.image_gradients(delta, int(order))
    return float(np.sum(gx[n // 2] ** 2))


def point_sigma(terms, noise_reference, noise_deformed, order: int = 5):
    r"""Predicted standard deviations of u and v from a subset's Hessian and the image noise.

    With white noise of standard deviations ``s_f`` (reference) and ``s_g`` (deformed), the
    first-order error of the Gauss-Newton solution (``r`` the grey-level residual, ``J`` the
    steepest-descent images built from the reference gradients) has covariance

    .. math:: (s_f^2 + s_g^2)\, H_0^{-1} + c\, s_f^2 s_g^2\, H_0^{-1} M H_0^{-1},

    where ``H_0`` is the Hessian of the noise-free reference. The first term is the usual one
    (Pan et al. 2008: ``2 s^2 / SSSIG`` for a translation-only subset); the second comes from the
    noise in the reference gradients that form ``J`` (``c``: see :func:`gradient_noise_gain`;
    ``M = diag(S, S)``, ``S`` the subset sum of the outer products of the shape-function
    vectors). The matcher only has the Hessian ``H`` of the noisy reference, whose expectation
    is ``H_0 + e M`` with ``e = c s_f^2``. Expanding ``H_0^-1 = H^-1 + e H^-1 M H^-1 +
    e^2 H^-1 M H^-1 M H^-1 + ...`` to second order in ``e`` gives

    .. math:: \mathrm{var} = (s_f^2 + s_g^2)\, A + c\, s_f^2 (s_f^2 + 2 s_g^2)\, B
              + c^2 s_f^4 (s_f^2 + 3 s_g^2)\, C

    with ``A``, ``B``, ``C`` the u (or v) diagonal entries of ``H^-1``, ``H^-1 M H^-1`` and
    ``H^-1 M H^-1 M H^-1``. The corrections are small when the pattern's gradients are strong
    against those of the noise (``c s_f^2`` well below the mean squared gradient, the
    ``gradient_noise_ratio`` of :func:`dic.metrology.pattern_quality`): the prediction is then
    within a few per cent of the measured scatter. For faint or coarse patterns (ratio above
    about 0.1) the neglected orders leave it low, by 10-25 %.

    Parameters
    ----------
    terms : ndarray, shape (..., 6)
        ``(A_u, A_v, B_u, B_v, C_u, C_v)`` per point, as the matching kernel returns them (NaN
        where not available). Four columns (no ``C``) are accepted: first order.
    noise_reference, noise_deformed : float
        Noise standard deviations of the two images, grey levels.
    order : {3, 5}
        B-spline degree of the matcher's gradients.

    Returns
    -------
    std_u, std_v : ndarray, shape (...)
        Standard deviations in px (NaN where ``terms`` is NaN).

    References
    ----------
    .. [1] B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, "Study on subset size selection in
       digital image correlation for speckle patterns", Opt. Express 16 (2008) 7037-7048.
    .. [2] S. Baker, I. Matthews, "Lucas-Kanade 20 years on: a unifying framework", Int. J.
       Comput. Vis. 56 (2004) 221-255 (the inverse-compositional Hessian).
    """
    t = np.asarray(terms, dtype=np.float64)
    sf2 = float(noise_reference) ** 2
    sg2 = float(noise_deformed) ** 2
    c = gradient_noise_gain(order)
    var = (sf2 + sg2) * t[..., 0:2] + c * sf2 * (sf2 + 2.0 * sg2) * t[..., 2:4]
    if t.shape[-1] >= 6:
        var = var + c * c * sf2 * sf2 * (sf2 + 3.0 * sg2) * t[..., 4:6]
    sig = np.sqrt(np.where(var >= 0, var, np.nan))
    return sig[..., 0], sig[..., 1]


def _hessian_terms(gx, gy, xs, ys, half, second, chunk=256):
    """The kernel's uncertainty terms computed from gradient images at integer points."""
    from dic.matching._icgn import shape_outer_sum

    d = np.arange(-half, half + 1, dtype=np.float64)
    dx, dy = (a.ravel() for a in np.meshgrid(d, d))
    s = [np.ones_like(dx), dx, dy]
    if second:
        s += [0.5 * dx * dx, dx * dy, 0.5 * dy * dy]
    s = np.stack(s)                                   # (k, npix)
    k = s.shape[0]
    smat = shape_outer_sum(half, second)
    M = np.zeros((2 * k, 2 * k))
    M[:k, :k] = smat
    M[k:, k:] = smat
    out = np.full((len(xs), 6), np.nan)
    from numpy.lib.stride_tricks import sliding_window_view

    n = 2 * half + 1
    wx = sliding_window_view(gx, (n, n))
    wy = sliding_window_view(gy, (n, n))
    for lo in range(0, len(xs), chunk):
        px = xs[lo:lo + chunk] - half
        py = ys[lo:lo + chunk] - half
        fx = wx[py, px].reshape(len(px), -1)           # (m, npix)
        fy = wy[py, px].reshape(len(px), -1)
        J = np.concatenate([fx[:, None, :] * s[None], fy[:, None, :] * s[None]], axis=1)
        H = np.einsum("map,mbp->mab", J, J)
        ok = np.linalg.eigvalsh(H)[:, 0] > 1e-10 * np.einsum("maa->m", H)
        Hi = np.full_like(H, np.nan)
        if ok.any():
            Hi[ok] = np.linalg.inv(H[ok])
        B = Hi @ M @ Hi
        C = B @ M @ Hi
        for j, i in enumerate((0, k)):
            out[lo:lo + chunk, j] = Hi[:, i, i]
            out[lo:lo + chunk, 2 + j] = B[:, i, i]
            out[lo:lo + chunk, 4 + j] = C[:, i, i]
    return out


def predicted_sigma(image, subset, noise, *, points=None, step=None, shape_function="affine",
                    interpolation="quintic", roi=None, _gradients=None):
    """Predicted displacement noise of matching ``image`` against a copy with its own noise.

    Computes, at grid points, the same Hessian as the matcher (B-spline gradients of the
    image, the subset shape function) and the predicted standard deviations of
    :func:`point_sigma`, with the noise ``noise`` in both images.

    Parameters
    ----------
    image : ndarray
        Reference image (float).
    subset : int
        Odd subset size, px.
    noise : float
        Image noise standard deviation, grey levels (the same in both images).
    points : tuple of int arrays (xs, ys), optional
        Points to evaluate; default a grid at ``step`` over the ROI.
    step : int, optional
        Grid spacing when ``points`` is not given (default about half the subset).
    shape_function, interpolation : str
        As for :func:`dic.correlate`.
    roi : optional
        Region of interest (see :func:`dic.images.roi.make_roi`).

    Returns
    -------
    std_u, std_v : ndarray
        Per point, px (NaN where a subset has too little texture to invert its Hessian).
    xs, ys : ndarray of int
        The points.

    References
    ----------
    .. [1] B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, Opt. Express 16 (2008) 7037-7048.
    """
    from dic.images import interp
    from dic.matching._grid import prepare_grid
    from dic.matching._icgn import INTERPOLATIONS, SHAPE_FUNCTIONS, edge_margin

    img = np.asarray(image, dtype=np.float64)
    order = INTERPOLATIONS[str(interpolation).lower()]
    second = SHAPE_FUNCTIONS[str(shape_function).lower()] == 2
    half = int(subset) // 2
    if points is None:
        step = max(1, half) if step is None else int(step)
        xs, ys, cand, _m, _i = prepare_grid(img.shape, roi, int(subset), step, edge_margin(order))
        gx, gy = np.meshgrid(xs, ys)
        xs, ys = gx[cand], gy[cand]
    else:
        xs, ys = (np.asarray(a, dtype=np.int64).ravel() for a in points)
    if _gradients is None:
        _gradients = interp.image_gradients(img, order)
    terms = _hessian_terms(_gradients[0], _gradients[1], xs, ys, half, second)
    su, sv = point_sigma(terms, noise, noise, order)
    return su, sv, xs, ys
