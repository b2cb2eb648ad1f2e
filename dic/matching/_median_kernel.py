"""Compiled normalised median test over a point grid (numba); see
:func:`dic.matching.median_test`, which checks the input and documents the test."""

import numpy as np
from numba import njit


# an optimal sorting network for 8 values (19 compare-exchanges; Knuth, The Art of Computer
# Programming vol. 3, section 5.3.4, from memory): branch-free, unlike a sort by comparisons
_NET8 = ((0, 2), (1, 3), (4, 6), (5, 7), (0, 4), (1, 5), (2, 6), (3, 7), (0, 1), (2, 3),
         (4, 5), (6, 7), (2, 4), (3, 5), (1, 4), (3, 6), (1, 2), (3, 4), (5, 6))


@njit(cache=True)
def median_of(a, k):
    """Median of the first ``k`` (at least 1) entries of ``a``, which it reorders: a sorting
    network for 8 values, an insertion sort otherwise."""
    if k == 8:
        for i, j in _NET8:
            lo = min(a[i], a[j])
            a[j] = max(a[i], a[j])
            a[i] = lo
        return 0.5 * (a[3] + a[4])
    for i in range(1, k):
        t = a[i]
        j = i - 1
        while j >= 0 and a[j] > t:
            a[j + 1] = a[j]
            j -= 1
        a[j + 1] = t
    return a[k // 2] if k % 2 else 0.5 * (a[k // 2 - 1] + a[k // 2])


@njit(cache=True, nogil=True)
def median_outliers(lo, hi, x, y, a, ax, ay, axx, axy, ayy, valid, eps, threshold,
                    min_neighbours, out):
    """Set ``out`` True at the points of rows lo..hi-1 that fail the test for one displacement
    component (rows apart run in parallel threads: each writes only its own rows).

    ``a`` is the component, ``ax, ay`` its first and ``axx, axy, ayy`` its second derivatives
    (zero where absent), all (ny, nx). Each measured neighbour predicts the point's value
    from its own shape function; a point with at most one such neighbour (on grids of at least
    3 x 3 points) is an outlier, one with fewer than ``min_neighbours`` is not tested."""
    ny, nx = valid.shape
    full = ny >= 3 and nx >= 3
    pred = np.empty(8)
    res = np.empty(8)
    for r in range(lo, hi):
        for c in range(nx):
            if not valid[r, c]:
                continue
            k = np.int64(0)   # typed int64 from the start: no extra compile for a literal 0
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
            med = median_of(pred, k)
            for i in range(k):
                res[i] = abs(pred[i] - med)
            rm = median_of(res, k)
            if abs(a[r, c] - med) / (rm + eps) > threshold:
                out[r, c] = True
