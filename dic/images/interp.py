"""B-spline interpolation of images: prefiltered coefficients and exact kernel weights.

An image is interpolated by a B-spline of degree 3 (cubic, the default) or 5 (quintic) that
passes through every pixel value. The coefficients are computed once per image by the recursive
prefilter (``scipy.ndimage.spline_filter`` with mirror boundaries) and stored with a border of
mirrored values, so the compiled evaluation needs no bounds checks.

References
----------
.. [1] M. Unser, "Splines: a perfect fit for signal and image processing", IEEE Signal
   Processing Magazine 16 (1999) 22-38.
.. [2] H. W. Schreier, J. R. Braasch, M. A. Sutton, "Systematic errors in digital image
   correlation caused by intensity interpolation", Optical Engineering 39 (2000) 2915-2921.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["BSplineImage", "prefilter", "bspline", "bspline_derivative", "reference_gradients",
           "image_gradients",
           "ORDERS"]

#: supported spline degrees
ORDERS = (3, 5)
# the filter after the prefilter that leaves the coefficients as they are
_IDENTITY = np.ones(1)

# poles of the B-spline prefilter (Thevenaz, Blu & Unser 2000, Table I)
_POLES = {
    3: np.array([np.sqrt(3.0) - 2.0]),
    5: np.array([np.sqrt(135.0 / 2.0 - np.sqrt(17745.0 / 4.0)) + np.sqrt(105.0 / 4.0) - 6.5,
                 np.sqrt(135.0 / 2.0 + np.sqrt(17745.0 / 4.0)) - np.sqrt(105.0 / 4.0) - 6.5]),
}


@dataclass(frozen=True)
class BSplineImage:
    """Prefiltered B-spline coefficients of an image, padded for unchecked evaluation.

    Attributes
    ----------
    coef : ndarray, shape (rows + 2 * pad, cols + 2 * pad)
        Coefficients; ``coef[pad + r, pad + c]`` belongs to pixel ``(r, c)``.
    order : int
        Spline degree (3 or 5).
    pad : int
        Border width.
    shape : tuple
        Shape of the original image.
    """

    coef: np.ndarray
    order: int
    pad: int
    shape: tuple


def _check_order(order: int) -> int:
    if order not in ORDERS:
        raise ValueError(f"interpolation order must be one of {ORDERS} (cubic or quintic "
                         f"B-spline), got {order!r}")
    return int(order)


def prefilter(image: np.ndarray, order: int = 3) -> BSplineImage:
    """Compute padded B-spline coefficients of an image (mirror boundaries).

    Same coefficients as ``scipy.ndimage.spline_filter(image, order, mode="mirror")``, computed
    by the recursive filter of [2]_ in parallel over rows and columns.

    Parameters
    ----------
    image : ndarray, shape (rows, cols)
        Grey levels (float64).
    order : {3, 5}
        Spline degree.

    Returns
    -------
    BSplineImage
        Coefficients with a mirrored border of ``order // 2 + 2`` samples.

    References
    ----------
    .. [1] M. Unser, IEEE Signal Process. Mag. 16 (1999) 22-38.
    .. [2] P. Thévenaz, T. Blu, M. Unser, "Interpolation revisited", IEEE Trans. Med. Imaging
       19 (2000) 739-758.
    """
    from dic.images._interp_kernel import cols_pass, rows_pass

    order = _check_order(order)
    img = np.ascontiguousarray(image, dtype=np.float64)
    pad = order // 2 + 2
    if img.ndim != 2 or min(img.shape) <= pad:
        raise ValueError(f"image must be a 2-D array larger than {pad} x {pad} pixels, got "
                         f"shape {img.shape}")
    poles = _POLES[order]
    gain = float(np.prod([(1.0 - z) * (1.0 - 1.0 / z) for z in poles]))
    rows, cols = img.shape
    coef = np.empty((rows + 2 * pad, cols + 2 * pad))
    body = coef[pad:pad + rows]             # rows of the image (C-contiguous), all columns
    inner = body[:, pad:pad + cols]
    rows_pass(img, 0, cols, poles, gain, _IDENTITY, body, pad)
    cols_pass(body, pad, cols, poles, gain, _IDENTITY, body)
    # whole-sample symmetric border (c[-k] = c[k]), matching the mirror boundary condition
    coef[:pad, pad:pad + cols] = inner[pad:0:-1]
    coef[pad + rows:, pad:pad + cols] = inner[rows - 2:rows - 2 - pad:-1]
    coef[:, :pad] = coef[:, 2 * pad:pad:-1]
    coef[:, pad + cols:] = coef[:, pad + cols - 2:cols - 2:-1]
    return BSplineImage(coef, order, pad, img.shape)


def bspline(x: np.ndarray, order: int = 3) -> np.ndarray:
    """Centred B-spline basis function of the given degree, evaluated at ``x``."""
    order = _check_order(order)
    from scipy.interpolate import BSpline

    knots = np.arange(order + 2) - (order + 1) / 2.0
    b = BSpline.basis_element(knots, extrapolate=False)
    return np.nan_to_num(b(np.asarray(x, dtype=np.float64)))


def bspline_derivative(x: np.ndarray, order: int = 3) -> np.ndarray:
    """First derivative of the centred B-spline basis function at ``x``."""
    order = _check_order(order)
    from scipy.interpolate import BSpline

    knots = np.arange(order + 2) - (order + 1) / 2.0
    b = BSpline.basis_element(knots, extrapolate=False).derivative()
    return np.nan_to_num(b(np.asarray(x, dtype=np.float64)))


def reference_gradients(spline: BSplineImage) -> tuple[np.ndarray, np.ndarray]:
    """Exact derivatives of the interpolating spline at every pixel centre.

    Parameters
    ----------
    spline : BSplineImage
        Coefficients of the reference image.

    Returns
    -------
    gx, gy : ndarray, shape (rows, cols)
        d/dx (along columns) and d/dy (along rows) of the interpolant at integer positions.
    """
    from dic.images._interp_kernel import separable_at_nodes

    k = spline.order // 2
    offsets = np.arange(-k, k + 1, dtype=np.float64)
    # f(i) = sum_d c[i + d] beta(-d): weights w[d + k] = beta(-d)
    val = bspline(-offsets, spline.order)
    der = bspline_derivative(-offsets, spline.order)
    rows, cols = spline.shape
    gx = np.empty((rows, cols))
    gy = np.empty((rows, cols))
    separable_at_nodes(spline.coef, spline.pad, rows, cols, der, val, gx)
    separable_at_nodes(spline.coef, spline.pad, rows, cols, val, der, gy)
    return gx, gy


def image_gradients(image: np.ndarray, order: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Exact derivatives of an image's interpolating spline at every pixel centre.

    The same as ``reference_gradients(prefilter(image, order))`` up to rounding, in fewer
    passes: along y the interpolating spline reproduces the samples, so d/dx needs the
    prefilter and the derivative filter along x only (and d/dy those along y only).

    Parameters
    ----------
    image : ndarray, shape (rows, cols)
        Grey levels.
    order : {3, 5}
        Spline degree.

    Returns
    -------
    gx, gy : ndarray, shape (rows, cols)
    """
    from dic.images._interp_kernel import cols_pass, rows_pass

    order = _check_order(order)
    img = np.ascontiguousarray(image, dtype=np.float64)
    k = order // 2
    if img.ndim != 2 or min(img.shape) <= k + 2:
        raise ValueError(f"image must be a 2-D array larger than {k + 2} x {k + 2} pixels, "
                         f"got shape {img.shape}")
    poles = _POLES[order]
    gain = float(np.prod([(1.0 - z) * (1.0 - 1.0 / z) for z in poles]))
    der = bspline_derivative(-np.arange(-k, k + 1, dtype=np.float64), order)
    gx = np.empty(img.shape)
    gy = np.empty(img.shape)
    # along x: the coefficients of each row, mirrored beyond both ends, then d/dx (and the
    # same along y), a few lines at a time in small buffers
    rows_pass(img, 0, img.shape[1], poles, gain, der, gx, 0)
    cols_pass(img, 0, img.shape[1], poles, gain, der, gy)
    return gx, gy
