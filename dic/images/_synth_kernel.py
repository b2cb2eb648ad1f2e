"""Compiled kernel for :mod:`dic.images.synth`: sum of truncated Gaussian blobs at given points.

Private. The Python wrapper in :mod:`dic.images.synth` checks every argument and builds the cell table;
this module trusts its input.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange


@njit(cache=True, parallel=True)
def blob_sum(px, py, cx, cy, inv_r2, cut2, amp, cell_start, x0, y0, cell, ncx, ncy,
             background, out):
    """Intensity ``background + sum_k amp_k exp(-|P - c_k|^2 inv_r2_k)`` at points ``P``.

    Blobs are sorted by cell (cells of side ``cell``, origin ``(x0, y0)``, ``ncx`` by ``ncy``
    cells, row-major); blob ``k`` of cell ``c`` is ``cell_start[c] <= k < cell_start[c + 1]``.
    Only blobs with ``|P - c_k|^2 < cut2_k`` are summed; ``cut2_k <= cell**2`` for every blob, so
    the 3 x 3 cells around the point's own cell hold all of them.
    """
    n = px.shape[0]
    for i in prange(n):
        X = px[i]
        Y = py[i]
        fx = (X - x0) / cell
        fy = (Y - y0) / cell
        s = background
        # points two or more cells outside the table have no blob within reach (also keeps the
        # int conversion below in range)
        if fx > -2.0 and fx < ncx + 1.0 and fy > -2.0 and fy < ncy + 1.0:
            ix = int(np.floor(fx))
            iy = int(np.floor(fy))
            jx0 = max(ix - 1, 0)
            jx1 = min(ix + 2, ncx)
            jy0 = max(iy - 1, 0)
            jy1 = min(iy + 2, ncy)
            for jy in range(jy0, jy1):
                for jx in range(jx0, jx1):
                    c = jy * ncx + jx
                    for k in range(cell_start[c], cell_start[c + 1]):
                        dx = X - cx[k]
                        dy = Y - cy[k]
                        d2 = dx * dx + dy * dy
                        if d2 < cut2[k]:
                            s += amp[k] * np.exp(-d2 * inv_r2[k])
        out[i] = s
