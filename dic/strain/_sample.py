"""Bilinear sampling of a field given on a regular grid of points, honest about NaN."""

from __future__ import annotations

import numpy as np

__all__ = ["bilinear"]


def bilinear(values, x0: float, y0: float, sx: float, sy: float, xq, yq) -> np.ndarray:
    """Bilinear interpolation of ``values`` (rows along y, columns along x) at points (xq, yq).

    The grid point ``values[i, j]`` sits at ``(x0 + j*sx, y0 + i*sy)``. The result is NaN
    outside the grid and wherever a corner that carries weight is NaN; a query exactly on a grid
    line or point uses only the corners it touches.

    Parameters
    ----------
    values : ndarray, shape (ny, nx)
    x0, y0, sx, sy : float
        Grid origin and spacing.
    xq, yq : array_like
        Query positions, broadcast together.

    Returns
    -------
    ndarray
        Interpolated values, of the broadcast shape of ``xq`` and ``yq``.
    """
    values = np.asarray(values, dtype=np.float64)
    xq, yq = np.broadcast_arrays(np.asarray(xq, dtype=np.float64),
                                 np.asarray(yq, dtype=np.float64))
    ny, nx = values.shape
    fj = (xq - x0) / sx
    fi = (yq - y0) / sy
    eps = 1e-9  # tolerate rounding in positions computed on the grid's own edge
    inside = (fj >= -eps) & (fj <= nx - 1 + eps) & (fi >= -eps) & (fi <= ny - 1 + eps)
    fj = np.clip(np.where(inside, fj, 0.0), 0.0, nx - 1)
    fi = np.clip(np.where(inside, fi, 0.0), 0.0, ny - 1)
    j0 = np.minimum(np.floor(fj).astype(np.intp), nx - 2)
    i0 = np.minimum(np.floor(fi).astype(np.intp), ny - 2)
    t = fj - j0
    s = fi - i0
    out = np.zeros(xq.shape)
    bad = ~inside
    for di, dj, wgt in ((0, 0, (1 - s) * (1 - t)), (0, 1, (1 - s) * t),
                        (1, 0, s * (1 - t)), (1, 1, s * t)):
        val = values[i0 + di, j0 + dj]
        used = wgt > 0
        bad |= used & np.isnan(val)
        out += np.where(used, wgt * np.where(used, val, 0.0), 0.0)
    out[bad] = np.nan
    return out
