"""Compiled normalised median test over a point grid (numba); see
:func:`dic.matching.median_test`, which checks the input and documents the test."""

import numpy as np
from numba import njit


@njit(cache=True)
def median_outliers(x, y, a, ax, ay, axx, axy, ayy, valid, eps, threshold, min_neighbours,
                    out):
    """Set ``out`` True at the points that fail the test for one displacement component.

    ``a`` is the component, ``ax, ay`` its first and ``axx, axy, ayy`` its second derivatives
    (zero where absent), all (ny, nx). Each measured neighbour predicts the point's value
    from its own shape function; a point with at most one such neighbour (on grids of at least
    3 x 3 points) is an outlier, one with fewer than ``min_neighbours`` is not tested."""
    ny, nx = valid.shape
    full = ny >= 3 and nx >= 3
    pred = np.empty(8)
    res = np.empty(8)
    for r in range(ny):
        for c in range(nx):
            if not valid[r, c]:
                continue
            k = 0
            for rr in range(max(r - 1, 0), min(r + 2, ny)):
                for cc in range(max(c - 1, 0), min(c + 2, nx)):
                    if (rr == r and cc == c) or not valid[rr, cc]:
                        continue
                    dx = x[r, c] - x[rr, cc]
                    dy = y[r, c] - y[rr, cc]
                    p = (a[rr, cc] + ax[rr, cc] * dx + ay[rr, cc] * dy
                         + 0.5 * axx[rr, cc] * dx * dx + axy[rr, cc] * dx * dy
                         + 0.5 * ayy[rr, cc] * dy * dy)
                    if p == p and abs(p) < np.inf:
                        pred[k] = p
                        k += 1
            if full and k <= 1:
                out[r, c] = True
            if k < min_neighbours or k == 0:
                continue
            # medians by insertion sort (at most 8 values)
            for i in range(1, k):
                t = pred[i]
                j = i - 1
                while j >= 0 and pred[j] > t:
                    pred[j + 1] = pred[j]
                    j -= 1
                pred[j + 1] = t
            med = pred[k // 2] if k % 2 else 0.5 * (pred[k // 2 - 1] + pred[k // 2])
            for i in range(k):
                t = abs(pred[i] - med)
                j = i - 1
                while j >= 0 and res[j] > t:
                    res[j + 1] = res[j]
                    j -= 1
                res[j + 1] = t
            rm = res[k // 2] if k % 2 else 0.5 * (res[k // 2 - 1] + res[k // 2])
            if abs(a[r, c] - med) / (rm + eps) > threshold:
                out[r, c] = True
