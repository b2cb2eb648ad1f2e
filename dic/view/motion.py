"""Between the reference image and a deformed frame: where material points are, and the strain
map drawn over the deformed image.

Results are Lagrangian: every value belongs to a grid point of the reference image. Over the
image of frame ``k`` a value belongs at ``X + u(X)``. The displacement between grid points is
the library's own (:func:`dic.tensile.gauges.displacement_at`), so a gauge's end drawn over a
deformed image sits where the gauge itself reads it.
"""

from __future__ import annotations

import math

import numpy as np

from dic.errors import InputError

__all__ = ["to_current", "to_reference", "current_grid_map"]


def to_current(field, points):
    """Reference positions -> positions in the deformed image of ``field``'s frame.

    Parameters
    ----------
    field : dic.DisplacementField
    points : array_like, shape (n, 2)
        ``(x, y)`` px in the reference image.

    Returns
    -------
    ndarray, shape (n, 2)
        NaN where the displacement is unknown (off the measured region).
    """
    from dic.tensile.gauges import displacement_at

    P = np.asarray(points, dtype=np.float64).reshape(-1, 2)
    u, v = displacement_at(field, P[:, 0], P[:, 1])
    return np.column_stack([P[:, 0] + u, P[:, 1] + v])


def to_reference(field, x, y, *, tol=1e-6, max_iter=50):
    """The reference position of the material at ``(x, y)`` in the deformed image.

    Solves ``X + u(X) = x`` by fixed-point iteration ``X <- x - u(X)``, which converges while
    the displacement gradient is below 1 (any strain short of folding).

    Raises
    ------
    InputError
        The point is not over the measured part of the specimen.
    """
    from dic.tensile.gauges import displacement_at

    X, Y = float(x), float(y)
    for _ in range(max_iter):
        u, v = displacement_at(field, X, Y)
        u, v = float(u), float(v)
        if not (math.isfinite(u) and math.isfinite(v)):
            raise InputError(f"point ({x:.1f}, {y:.1f}) px: not over the measured part of the "
                             "specimen in this frame; click inside the map")
        Xn, Yn = float(x) - u, float(y) - v
        if abs(Xn - X) < tol and abs(Yn - Y) < tol:
            return Xn, Yn
        X, Y = Xn, Yn
    return X, Y


def current_grid_map(field, values, image_shape, cell: float):
    """A value grid resampled over the deformed image: what lies under each of its pixels.

    Parameters
    ----------
    field : dic.DisplacementField
        The frame's displacements (on the reference grid).
    values : ndarray, shape (ny, nx)
        Values at the grid points (NaN blank).
    image_shape : (rows, cols)
    cell : float
        Size of an output pixel, image px (output pixel ``(r, c)`` covers the image pixels
        around ``((c + 0.5) cell - 0.5, (r + 0.5) cell - 0.5)``).

    Returns
    -------
    ndarray, shape (ceil(rows / cell), ceil(cols / cell))
        The value of the grid point nearest to each output pixel's reference position; NaN
        where no measured point lies.
    """
    import cv2
    from scipy.ndimage import distance_transform_edt

    gx, gy = field.x, field.y
    ny, nx = gx.shape
    step_x = (gx[0, -1] - gx[0, 0]) / (nx - 1) if nx > 1 else 1.0
    step_y = (gy[-1, 0] - gy[0, 0]) / (ny - 1) if ny > 1 else 1.0
    ok = np.isfinite(field.u) & np.isfinite(field.v)
    if not ok.any():
        rows, cols = image_shape
        return np.full((math.ceil(rows / cell), math.ceil(cols / cell)), np.nan)
    # displacements filled outwards from the nearest measured point, so that the positions of
    # points just off the measured region are still found (their values stay blank)
    _, (ii, jj) = distance_transform_edt(~ok, return_indices=True)
    U = field.u[ii, jj].astype(np.float32)
    V = field.v[ii, jj].astype(np.float32)
    rows, cols = image_shape
    H, W = math.ceil(rows / cell), math.ceil(cols / cell)
    x = ((np.arange(W) + 0.5) * cell - 0.5).astype(np.float32)[None, :].repeat(H, 0)
    y = ((np.arange(H) + 0.5) * cell - 0.5).astype(np.float32)[:, None].repeat(W, 1)
    X, Y = x.copy(), y.copy()
    for _ in range(6):  # X <- x - u(X), bilinear u between grid points
        mj = (X - gx[0, 0]) / step_x
        mi = (Y - gy[0, 0]) / step_y
        u = cv2.remap(U, mj.astype(np.float32), mi.astype(np.float32), cv2.INTER_LINEAR,
                      borderMode=cv2.BORDER_REPLICATE)
        v = cv2.remap(V, mj.astype(np.float32), mi.astype(np.float32), cv2.INTER_LINEAR,
                      borderMode=cv2.BORDER_REPLICATE)
        X, Y = x - u, y - v
    j = np.rint((X - gx[0, 0]) / step_x).astype(np.int64)
    i = np.rint((Y - gy[0, 0]) / step_y).astype(np.int64)
    inside = (i >= 0) & (i < ny) & (j >= 0) & (j < nx)
    out = np.full((H, W), np.nan)
    out[inside] = np.asarray(values, dtype=np.float64)[i[inside], j[inside]]
    return out
