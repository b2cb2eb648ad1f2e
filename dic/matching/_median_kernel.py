"""Compiled normalised median test over a point grid (numba); see
:func:`dic.matching.median_test`, which checks the input and documents the test."""

import numpy as np
from numba import njit


@njit(cache=True)
def _median(a, k):
    """Median of the first ``k`` entries of ``a`` (sorted in place; k >= 1)."""
    for i in range(1, k):
        t = a[i]
        j = i - 1
        while j >= 0 and a[j] > t:
            a[j + 1] = a[j]
            j -= 1
        a[j + 1] = t
    if k % 2:
        return a[k // 2]
    return 0.5 * (a[k // 2 - 1] + a[k // 2])


@njit(cache=True)
def median_outliers(x, y, comps, grad, grad2, valid, eps, threshold, min_neighbours, out):
    """Set ``out`` True at the points that fail the test in either component.

    ``comps`` (2, ny, nx): u and v; ``grad`` (ny, nx, 2, 2); ``grad2`` (ny, nx, 2, 3), zero
    where absent. Each measured neighbour predicts the point's value from its own shape
    function; a point with at most one such neighbour (on grids of at least 3 x 3 points) is
    an outlier, one with fewer than ``min_neighbours`` is not tested."""
    ny, nx = valid.shape
    full = ny >= 3 and nx >= 3
    pred = np.empty(8)
    res = np.empty(8)
    for r in range(ny):
        for c in range(nx):
            if not valid[r, c]:
                continue
            for i in range(2):
                k = 0
                for dr in range(-1, 2):
                    for dc in range(-1, 2):
                        rr = r + dr
                        cc = c + dc
                        if (dr == 0 and dc == 0) or rr < 0 or rr >= ny or cc < 0 or cc >= nx:
                            continue
                        if not valid[rr, cc]:
                            continue
                        ddx = x[r, c] - x[rr, cc]
                        ddy = y[r, c] - y[rr, cc]
                        p = (comps[i, rr, cc] + grad[rr, cc, i, 0] * ddx
                             + grad[rr, cc, i, 1] * ddy
                             + 0.5 * grad2[rr, cc, i, 0] * ddx * ddx
                             + grad2[rr, cc, i, 1] * ddx * ddy
                             + 0.5 * grad2[rr, cc, i, 2] * ddy * ddy)
                        if np.isfinite(p):
                            pred[k] = p
                            k += 1
                if full and k <= 1:
                    out[r, c] = True
                if k < min_neighbours or k == 0:
                    continue
                med = _median(pred, k)
                for t in range(k):
                    res[t] = abs(pred[t] - med)
                rm = _median(res, k)
                if abs(comps[i, r, c] - med) / (rm + eps) > threshold:
                    out[r, c] = True
