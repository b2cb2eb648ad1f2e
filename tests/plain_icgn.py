"""Plain reference solver, used by the tests as an oracle for the compiled kernel.

One square subset of the reference image is matched in the deformed image by the
inverse-compositional Gauss-Newton (IC-GN) iteration on the zero-normalised sum of squared
differences (ZNSSD). Everything is plain numpy/scipy, vectorised over the pixels of the subset
and written for clarity, not speed: images are interpolated with ``scipy.ndimage`` B-splines,
the warp is kept as a matrix (3 x 3 homogeneous for the first-order shape function, the 6 x 6
matrix of Gao et al. for the second-order one) and the update ``W(p) <- W(p) o W(dp)^-1`` is a
matrix product with a matrix inverse.

Parameter vectors
-----------------
First order (6): ``[u, ux, uy, v, vx, vy]``. Second order (12):
``[u, ux, uy, uxx, uxy, uyy, v, vx, vy, vxx, vxy, vyy]``. A subset pixel at offset
``(dx, dy)`` from the centre ``(x0, y0)`` is carried to

.. math:: x' = x_0 + dx + u + u_x dx + u_y dy + u_{xx} dx^2/2 + u_{xy} dx\\,dy + u_{yy} dy^2/2

and ``y'`` likewise with the ``v`` terms. ``x`` is the column and ``y`` the row.

References
----------
.. [1] S. Baker and I. Matthews, "Lucas-Kanade 20 years on: a unifying framework",
   Int. J. Comput. Vis. 56 (2004) 221-255.
.. [2] B. Pan, K. Li, W. Tong, "Fast, robust and accurate digital image correlation calculation
   without redundant computations", Exp. Mech. 53 (2013) 1277-1289.
.. [3] B. Pan, H. Xie, Z. Wang, "Equivalence of digital image correlation criteria for pattern
   matching", Applied Optics 49 (2010) 5501-5509.
.. [4] Y. Gao, T. Cheng, Y. Su, X. Xu, Y. Zhang, Q. Zhang, "High-efficiency and high-accuracy
   digital image correlation for three-dimensional measurement", Opt. Lasers Eng. 65 (2015)
   73-80.
.. [5] M. Unser, "Splines: a perfect fit for signal and image processing", IEEE Signal
   Process. Mag. 16 (1999) 22-38.
"""

from __future__ import annotations

import numbers

import numpy as np
from scipy import ndimage
from scipy.interpolate import BSpline

__all__ = ["spline_coefficients", "spline_gradient", "warp_matrix", "params_from_matrix",
           "compose_inverse", "warp_offsets", "match_subset"]

#: a Hessian whose condition number exceeds this is treated as singular (flat subset)
_MAX_CONDITION = 1e12


# --------------------------------------------------------------------------------------------
# interpolation
# --------------------------------------------------------------------------------------------
def _check_image(image, name):
    a = np.asarray(image, dtype=np.float64)
    if a.ndim != 2 or min(a.shape) < 2:
        raise ValueError(f"{name} must be a 2-D grey image (rows, cols); got shape {a.shape}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must hold finite grey values; replace NaN/inf first")
    return a


def _check_order(order):
    if isinstance(order, bool) or not isinstance(order, numbers.Integral) or order not in (3, 5):
        raise ValueError(f"order must be 3 (cubic) or 5 (quintic) B-spline; got {order!r}")
    return int(order)


def spline_coefficients(image, order=5):
    """B-spline coefficients of an image with mirror boundaries.

    Parameters
    ----------
    image : array_like, shape (rows, cols)
        Grey image.
    order : {3, 5}, optional
        Spline degree.

    Returns
    -------
    ndarray
        ``scipy.ndimage.spline_filter(image, order, mode="mirror")``, float64; evaluate it with
        ``scipy.ndimage.map_coordinates(..., order=order, mode="mirror", prefilter=False)``.

    References
    ----------
    .. [1] M. Unser, IEEE Signal Process. Mag. 16 (1999) 22-38.
    """
    order = _check_order(order)
    image = _check_image(image, "image")
    return ndimage.spline_filter(image, order=order, mode="mirror", output=np.float64)


def _kernel_samples(order):
    """Samples ``beta(m)`` and ``beta'(m)`` of the centred B-spline at m = -h..h (h = order//2).

    The centred B-spline of odd degree ``n`` has the knots ``-(n+1)/2 .. (n+1)/2``; it is
    built with :meth:`scipy.interpolate.BSpline.basis_element`.
    """
    half_support = (order + 1) // 2
    basis = BSpline.basis_element(np.arange(-half_support, half_support + 1, dtype=np.float64),
                                  extrapolate=False)
    m = np.arange(-(order // 2), order // 2 + 1, dtype=np.float64)
    return basis(m), basis.derivative()(m)


def spline_gradient(coefficients, order=5):
    """Exact gradient of a B-spline interpolant at the pixel centres.

    With ``s(x) = sum_k c[k] beta(x - k)``, the derivative at an integer ``n`` is
    ``s'(n) = sum_m c[n - m] beta'(m)``: a short correlation of the coefficients with samples of
    the B-spline derivative, with the coefficients extended by mirroring as ``map_coordinates``
    does for ``mode="mirror"``.

    Parameters
    ----------
    coefficients : ndarray, shape (rows, cols)
        From :func:`spline_coefficients`.
    order : {3, 5}, optional
        Spline degree the coefficients were made for.

    Returns
    -------
    gx, gy : ndarray
        Derivatives along ``x`` (columns) and ``y`` (rows) at every pixel, grey levels per px.

    References
    ----------
    .. [1] M. Unser, IEEE Signal Process. Mag. 16 (1999) 22-38.
    """
    order = _check_order(order)
    c = np.asarray(coefficients, dtype=np.float64)
    if c.ndim != 2:
        raise ValueError(f"coefficients must be 2-D; got shape {c.shape}")
    b, d = _kernel_samples(order)
    # correlate1d: out[n] = sum_j w[j] c[n + j - h]; s'(n) = sum_m c[n + m] beta'(-m), so the
    # weights are beta' reversed; along the other axis the weights beta(m) are symmetric
    w = d[::-1]
    gx = ndimage.correlate1d(ndimage.correlate1d(c, w, axis=1, mode="mirror"), b, axis=0,
                             mode="mirror")
    gy = ndimage.correlate1d(ndimage.correlate1d(c, w, axis=0, mode="mirror"), b, axis=1,
                             mode="mirror")
    return gx, gy


# --------------------------------------------------------------------------------------------
# warps
# --------------------------------------------------------------------------------------------
def _check_params(p, name="p"):
    p = np.asarray(p, dtype=np.float64)
    if p.shape not in ((6,), (12,)) or not np.all(np.isfinite(p)):
        raise ValueError(f"{name} must be 6 (first order) or 12 (second order) finite numbers; "
                         f"got shape {p.shape}")
    return p


def warp_matrix(p):
    """The warp ``W(p)`` as a matrix.

    Parameters
    ----------
    p : array_like, shape (6,) or (12,)
        First- or second-order parameters (see the module docstring).

    Returns
    -------
    ndarray, shape (3, 3) or (6, 6)
        First order: the homogeneous affine matrix acting on ``(dx, dy, 1)``. Second order: the
        matrix acting on ``(dx^2, dx dy, dy^2, dx, dy, 1)`` and giving ``(x'^2, x'y', y'^2, x',
        y', 1)`` up to second order in ``dx, dy`` (here ``x', y'`` are offsets from the subset
        centre). With ``x' = a + b dx + c dy + d dx^2 + e dx dy + f dy^2`` and
        ``y' = g + h dx + i dy + j dx^2 + k dx dy + l dy^2`` the rows are the coefficients of
        ``x'^2``, ``x'y'``, ``y'^2``, ``x'``, ``y'`` and ``1`` truncated after the quadratic
        terms, e.g. ``x'^2 -> a^2 + 2ab dx + 2ac dy + (b^2 + 2ad) dx^2 + (2bc + 2ae) dx dy
        + (c^2 + 2af) dy^2``.

    References
    ----------
    .. [1] S. Baker and I. Matthews, Int. J. Comput. Vis. 56 (2004) 221-255.
    .. [2] Y. Gao et al., Opt. Lasers Eng. 65 (2015) 73-80.
    """
    p = _check_params(p)
    if p.size == 6:
        u, ux, uy, v, vx, vy = p
        return np.array([[1.0 + ux, uy, u],
                         [vx, 1.0 + vy, v],
                         [0.0, 0.0, 1.0]])
    u, ux, uy, uxx, uxy, uyy, v, vx, vy, vxx, vxy, vyy = p
    a, b, c, d, e, f = u, 1.0 + ux, uy, 0.5 * uxx, uxy, 0.5 * uyy
    g, h, i, j, k, l = v, vx, 1.0 + vy, 0.5 * vxx, vxy, 0.5 * vyy
    return np.array([
        # x'^2
        [b * b + 2 * a * d, 2 * b * c + 2 * a * e, c * c + 2 * a * f, 2 * a * b, 2 * a * c, a * a],
        # x'y'
        [a * j + d * g + b * h, a * k + e * g + b * i + c * h, a * l + f * g + c * i,
         a * h + b * g, a * i + c * g, a * g],
        # y'^2
        [h * h + 2 * g * j, 2 * h * i + 2 * g * k, i * i + 2 * g * l, 2 * g * h, 2 * g * i, g * g],
        # x'
        [d, e, f, b, c, a],
        # y'
        [j, k, l, h, i, g],
        # 1
        [0.0, 0.0, 0.0, 0.0, 0.0, 1.0],
    ])


def params_from_matrix(M):
    """Read the parameter vector back from a warp matrix (the ``x'`` and ``y'`` rows).

    Parameters
    ----------
    M : array_like, shape (3, 3) or (6, 6)

    Returns
    -------
    ndarray, shape (6,) or (12,)
    """
    M = np.asarray(M, dtype=np.float64)
    if M.shape == (3, 3):
        return np.array([M[0, 2], M[0, 0] - 1.0, M[0, 1], M[1, 2], M[1, 0], M[1, 1] - 1.0])
    if M.shape == (6, 6):
        d, e, f, b, c, a = M[3]
        j, k, l, h, i, g = M[4]
        return np.array([a, b - 1.0, c, 2.0 * d, e, 2.0 * f, g, h, i - 1.0, 2.0 * j, k, 2.0 * l])
    raise ValueError(f"M must be a 3x3 or 6x6 warp matrix; got shape {M.shape}")


def compose_inverse(p, dp):
    """Inverse-compositional update: the parameters of ``W(p) o W(dp)^-1``.

    Parameters
    ----------
    p, dp : array_like, shape (6,) or (12,)
        Current parameters and the Gauss-Newton increment (same order).

    Returns
    -------
    ndarray
        ``params_from_matrix(warp_matrix(p) @ inv(warp_matrix(dp)))``.

    Notes
    -----
    For the second-order shape function the 6 x 6 matrices are a truncated representation: the
    product of two of them is in general not itself of the form :func:`warp_matrix`, and only
    its ``x'`` and ``y'`` rows are read back. This changes the path of the iteration only, not
    its fixed point (``dp = 0`` gives the identity).

    References
    ----------
    .. [1] S. Baker and I. Matthews, Int. J. Comput. Vis. 56 (2004) 221-255.
    .. [2] Y. Gao et al., Opt. Lasers Eng. 65 (2015) 73-80.
    """
    p = _check_params(p)
    dp = _check_params(dp, "dp")
    if p.shape != dp.shape:
        raise ValueError(f"p and dp must have the same length; got {p.size} and {dp.size}")
    return params_from_matrix(warp_matrix(p) @ np.linalg.inv(warp_matrix(dp)))


def warp_offsets(p, dx, dy):
    """Offsets ``(x' - x0, y' - y0)`` of subset pixels at ``(dx, dy)`` under ``W(p)``.

    Parameters
    ----------
    p : array_like, shape (6,) or (12,)
    dx, dy : array_like
        Offsets of the subset pixels from the subset centre (column, row).

    Returns
    -------
    wx, wy : ndarray
    """
    p = _check_params(p)
    dx = np.asarray(dx, dtype=np.float64)
    dy = np.asarray(dy, dtype=np.float64)
    if p.size == 6:
        u, ux, uy, v, vx, vy = p
        return (dx + u + ux * dx + uy * dy,
                dy + v + vx * dx + vy * dy)
    u, ux, uy, uxx, uxy, uyy, v, vx, vy, vxx, vxy, vyy = p
    return (dx + u + ux * dx + uy * dy + 0.5 * uxx * dx**2 + uxy * dx * dy + 0.5 * uyy * dy**2,
            dy + v + vx * dx + vy * dy + 0.5 * vxx * dx**2 + vxy * dx * dy + 0.5 * vyy * dy**2)


def _shape_terms(dx, dy, second_order):
    """Columns of dW/dp for one displacement component: 1, dx, dy (, dx^2/2, dx dy, dy^2/2)."""
    cols = [np.ones_like(dx), dx, dy]
    if second_order:
        cols += [0.5 * dx**2, dx * dy, 0.5 * dy**2]
    return np.stack(cols, axis=1)


def _update_norm(dp, half, second_order):
    """Size of an increment as displacement at the subset edge (px), Pan et al. 2013."""
    n = dp.size // 2
    scale = np.ones(n)
    scale[1:3] = half
    if second_order:
        scale[3:6] = 0.5 * half**2
    s = np.concatenate([scale, scale])
    return float(np.sqrt(np.sum((dp * s) ** 2)))


# --------------------------------------------------------------------------------------------
# the solver
# --------------------------------------------------------------------------------------------
def match_subset(reference, deformed, x0, y0, *, subset=21, p0=None, second_order=False,
                 order=5, max_iterations=50, tolerance=1e-8, reference_coefficients=None,
                 deformed_coefficients=None):
    """Match one subset by inverse-compositional Gauss-Newton on the ZNSSD criterion.

    Parameters
    ----------
    reference, deformed : array_like, shape (rows, cols)
        Grey images, float64.
    x0, y0 : int
        Subset centre in the reference image: column and row.
    subset : int, optional
        Side of the square subset in px (odd, >= 3); the subset must lie wholly inside the
        reference image.
    p0 : array_like, optional
        Starting parameters (6 or 12, matching ``second_order``); zeros by default.
    second_order : bool, optional
        Use the 12-parameter second-order shape function instead of the 6-parameter affine one.
    order : {3, 5}, optional
        B-spline degree for both images.
    max_iterations : int, optional
        Iteration cap.
    tolerance : float, optional
        The iteration stops when the norm of the increment, taken as displacement at the subset
        edge, ``sqrt(du^2 + dv^2 + sum (d(grad) * half)^2 + sum (d(second) * half^2 / 2)^2)``
        with ``half = (subset - 1) / 2`` (every second-order term, ``uxy`` included, scaled by
        ``half^2 / 2``), falls below it (px).
    reference_coefficients, deformed_coefficients : ndarray, optional
        Precomputed :func:`spline_coefficients` of the images (same ``order``), to save the
        prefilter when matching many subsets of the same images.

    Returns
    -------
    dict
        ``p`` (ndarray, 6 or 12 parameters), ``zncc`` (float, at the final ``p``),
        ``iterations`` (int, Gauss-Newton steps taken) and ``converged`` (bool). If the subset
        is flat (singular Hessian or constant grey level) or its match leaves the deformed
        image, ``p`` and ``zncc`` are NaN and ``converged`` is False. If the iteration cap is
        reached, ``p`` is the last iterate, ``converged`` is False.

    Notes
    -----
    Reference subset ``f`` at the integer pixels ``(x0 + dx, y0 + dy)``, its gradient the exact
    derivative of the reference B-spline (:func:`spline_gradient`). Steepest-descent images
    ``J = grad f . dW/dp`` and the Hessian ``H = sum J^T J`` are computed once. Each iteration
    samples the deformed image at ``W(p)``, forms the ZNSSD residual
    ``r = (f - fm) - (df / dg) (g - gm)`` with ``df = sqrt(sum (f - fm)^2)`` and ``dg`` likewise,
    solves ``dp = -H^-1 sum J^T r`` and updates ``W(p) <- W(p) o W(dp)^-1``
    (:func:`compose_inverse`). ``zncc = sum (f - fm)(g - gm) / (df dg)``.

    References
    ----------
    .. [1] S. Baker and I. Matthews, Int. J. Comput. Vis. 56 (2004) 221-255.
    .. [2] B. Pan, K. Li, W. Tong, Exp. Mech. 53 (2013) 1277-1289.
    .. [3] B. Pan, H. Xie, Z. Wang, Applied Optics 49 (2010) 5501-5509.
    .. [4] Y. Gao et al., Opt. Lasers Eng. 65 (2015) 73-80.
    """
    order = _check_order(order)
    ref = _check_image(reference, "reference")
    dfm = _check_image(deformed, "deformed")
    if ref.shape != dfm.shape:
        raise ValueError(f"reference and deformed must have the same shape; got {ref.shape} "
                         f"and {dfm.shape}")
    if (isinstance(subset, bool) or not isinstance(subset, numbers.Integral) or subset < 3
            or subset % 2 == 0):
        raise ValueError(f"subset must be an odd integer >= 3 (e.g. 21); got {subset!r}")
    for name, val in (("x0", x0), ("y0", y0)):
        if isinstance(val, bool) or not isinstance(val, numbers.Integral):
            raise ValueError(f"{name} must be an integer pixel index; got {val!r}")
    if isinstance(max_iterations, bool) or not isinstance(max_iterations, numbers.Integral) \
            or max_iterations < 1:
        raise ValueError(f"max_iterations must be a positive integer; got {max_iterations!r}")
    tolerance = float(tolerance)
    if not tolerance > 0:
        raise ValueError(f"tolerance must be > 0 (px); got {tolerance!r}")
    rows, cols = ref.shape
    half = (subset - 1) // 2
    x0, y0 = int(x0), int(y0)
    if x0 - half < 0 or y0 - half < 0 or x0 + half > cols - 1 or y0 + half > rows - 1:
        raise ValueError(f"subset of {subset} px at (x0, y0) = ({x0}, {y0}) is not wholly "
                         f"inside the {cols} x {rows} px reference image; move it inwards")
    n_par = 12 if second_order else 6
    if p0 is None:
        p = np.zeros(n_par)
    else:
        p = np.array(p0, dtype=np.float64)
        if p.shape != (n_par,) or not np.all(np.isfinite(p)):
            raise ValueError(f"p0 must be {n_par} finite numbers for second_order="
                             f"{bool(second_order)}; got shape {p.shape}")

    cref = (spline_coefficients(ref, order) if reference_coefficients is None
            else np.asarray(reference_coefficients, dtype=np.float64))
    cdef = (spline_coefficients(dfm, order) if deformed_coefficients is None
            else np.asarray(deformed_coefficients, dtype=np.float64))
    if cref.shape != ref.shape or cdef.shape != dfm.shape:
        raise ValueError("reference_coefficients / deformed_coefficients must have the image "
                         "shape; compute them with spline_coefficients(image, order)")

    failed = {"p": np.full(n_par, np.nan), "zncc": np.nan, "iterations": 0, "converged": False}

    # reference subset, its gradient and the steepest-descent images
    dy, dx = np.mgrid[-half:half + 1, -half:half + 1].astype(np.float64)
    dx, dy = dx.ravel(), dy.ravel()
    sl = (slice(y0 - half, y0 + half + 1), slice(x0 - half, x0 + half + 1))
    f = ref[sl].ravel()
    gx_full, gy_full = spline_gradient(cref, order)
    fx, fy = gx_full[sl].ravel(), gy_full[sl].ravel()
    fm = f.mean()
    f0 = f - fm
    df = np.sqrt(np.sum(f0**2))
    terms = _shape_terms(dx, dy, second_order)
    J = np.hstack([fx[:, None] * terms, fy[:, None] * terms])
    H = J.T @ J
    if df == 0.0 or not np.linalg.cond(H) < _MAX_CONDITION:
        return failed

    def sample(params):
        wx, wy = warp_offsets(params, dx, dy)
        xs, ys = x0 + wx, y0 + wy
        if (xs.min() < 0 or ys.min() < 0 or xs.max() > cols - 1 or ys.max() > rows - 1):
            return None
        return ndimage.map_coordinates(cdef, [ys, xs], order=order, mode="mirror",
                                       prefilter=False)

    converged = False
    it = 0
    for it in range(1, int(max_iterations) + 1):
        g = sample(p)
        if g is None:
            return dict(failed, iterations=it)
        g0 = g - g.mean()
        dg = np.sqrt(np.sum(g0**2))
        if dg == 0.0:
            return dict(failed, iterations=it)
        r = f0 - (df / dg) * g0
        dp = -np.linalg.solve(H, J.T @ r)
        p = compose_inverse(p, dp)
        if not np.all(np.isfinite(p)):
            return dict(failed, iterations=it)
        if _update_norm(dp, half, second_order) < tolerance:
            converged = True
            break

    g = sample(p)
    if g is None:
        return dict(failed, iterations=it)
    g0 = g - g.mean()
    dg = np.sqrt(np.sum(g0**2))
    zncc = float(np.sum(f0 * g0) / (df * dg)) if dg > 0 else np.nan
    return {"p": p, "zncc": zncc, "iterations": it, "converged": converged}
