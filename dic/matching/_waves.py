"""Compiled bookkeeping for reliability-guided propagation in parallel waves (numba)."""

import numpy as np
from numba import njit

from dic.matching._median_kernel import median_of

# per-point state during propagation
NOT_CANDIDATE = 0
TODO = 1
QUEUED = 2
GOOD = 3
BAD = 4
#: failed in the coarse waves (a far neighbour's guess); tried again from a nearer one
DEFERRED = 5

# neighbour offsets (rows, columns): the four along the grid, then the diagonals
_DR = (-1, 1, 0, 0, -1, -1, 1, 1)
_DC = (0, 0, -1, 1, -1, 1, -1, 1)


@njit(cache=True)
def shift_params(p, ddx, ddy, second, out):
    """Carry a neighbour's shape-function parameters to a point (ddx, ddy) px away."""
    if second:
        u, ux, uy, uxx, uxy, uyy = p[0], p[1], p[2], p[3], p[4], p[5]
        v, vx, vy, vxx, vxy, vyy = p[6], p[7], p[8], p[9], p[10], p[11]
        out[0] = u + ux * ddx + uy * ddy + 0.5 * uxx * ddx * ddx + uxy * ddx * ddy \
            + 0.5 * uyy * ddy * ddy
        out[1] = ux + uxx * ddx + uxy * ddy
        out[2] = uy + uxy * ddx + uyy * ddy
        out[3] = uxx
        out[4] = uxy
        out[5] = uyy
        out[6] = v + vx * ddx + vy * ddy + 0.5 * vxx * ddx * ddx + vxy * ddx * ddy \
            + 0.5 * vyy * ddy * ddy
        out[7] = vx + vxx * ddx + vxy * ddy
        out[8] = vy + vxy * ddx + vyy * ddy
        out[9] = vxx
        out[10] = vxy
        out[11] = vyy
    else:
        out[0] = p[0] + p[1] * ddx + p[2] * ddy
        out[1] = p[1]
        out[2] = p[2]
        out[3] = p[3] + p[4] * ddx + p[5] * ddy
        out[4] = p[4]
        out[5] = p[5]


@njit(cache=True)
def next_wave(state, zncc, params, nx, ny, px, py, second, new_good, stride, nbrs):
    """Queue the unmatched neighbours of newly matched points.

    Points form a grid topologically (``nx`` by ``ny``); their pixel positions ``px, py`` need
    not be regular. Neighbours are the four (``nbrs`` 4) or eight (``nbrs`` 8, with the
    diagonals) points ``stride`` grid places away. Each queued point gets, as its starting
    guess, the parameters of its best-correlated (highest ZNCC) matched neighbour, carried over
    to its own position.
    """
    npar = params.shape[1]
    m = 0
    lo = state.shape[0]
    hi = -1
    for t in range(new_good.shape[0]):
        k = new_good[t]
        r = k // nx
        c = k - r * nx
        for d in range(nbrs):
            rr = r + stride * _DR[d]
            cc = c + stride * _DC[d]
            if rr < 0 or rr >= ny or cc < 0 or cc >= nx:
                continue
            q = rr * nx + cc
            if state[q] == TODO:
                state[q] = QUEUED
                m += 1
                lo = min(lo, q)
                hi = max(hi, q)
    # the queued points in index order (a scan instead of a sort: it compiles much faster)
    idx = np.empty(m, np.int64)
    t = 0
    for q in range(lo, hi + 1):
        if state[q] == QUEUED:
            idx[t] = q
            t += 1
    p0 = np.empty((m, npar))
    for t in range(m):
        q = idx[t]
        r = q // nx
        c = q - r * nx
        best = -1
        bz = -2.0
        for d in range(nbrs):
            rr = r + stride * _DR[d]
            cc = c + stride * _DC[d]
            if rr < 0 or rr >= ny or cc < 0 or cc >= nx:
                continue
            nb = rr * nx + cc
            if state[nb] == GOOD and zncc[nb] > bz:
                bz = zncc[nb]
                best = nb
        shift_params(params[best], float(px[q] - px[best]), float(py[q] - py[best]), second,
                     p0[t])
    return idx, p0


@njit(cache=True)
def fill_between(state, zncc, params, nx, ny, px, py, second, reach, stride, r0, c0):
    """Unmatched points with a matched point at most ``reach`` grid places away (along rows,
    columns or diagonals), with starting guesses; only points on the lattice of every
    ``stride``-th row and column through ``(r0, c0)`` (all points for ``stride`` 1).

    Used after propagation over a coarse lattice (every ``2 reach``-th point): the points in
    between are then matched in one batch, in row order. Each starts from the median,
    parameter by parameter, of the shape functions of the matched points within ``reach``,
    carried over to it: points on opposite sides bracket it, so the errors of their gradients
    (and the field's curvature) largely cancel, and one false match cannot mislead it.
    """
    npar = params.shape[1]
    n = nx * ny
    buf = np.empty(n, np.int64)
    m = 0
    for q in range(n):
        if state[q] != TODO:
            continue
        r = q // nx
        c = q - r * nx
        if (r - r0) % stride != 0 or (c - c0) % stride != 0:
            continue
        found = False
        for rr in range(max(r - reach, 0), min(r + reach + 1, ny)):
            for cc in range(max(c - reach, 0), min(c + reach + 1, nx)):
                if state[rr * nx + cc] == GOOD:
                    found = True
        if found:
            buf[m] = q
            m += 1
    idx = buf[:m].copy()
    p0 = np.empty((m, npar))
    w = 2 * reach + 1
    preds = np.empty((w * w, npar))
    col = np.empty(w * w)
    for t in range(m):
        q = idx[t]
        r = q // nx
        c = q - r * nx
        k = np.int64(0)   # typed int64 from the start: no extra compile for a literal 0
        for rr in range(max(r - reach, 0), min(r + reach + 1, ny)):
            for cc in range(max(c - reach, 0), min(c + reach + 1, nx)):
                nb = rr * nx + cc
                if state[nb] == GOOD:
                    shift_params(params[nb], float(px[q] - px[nb]), float(py[q] - py[nb]),
                                 second, preds[k])
                    k += 1
        for a in range(npar):
            for j in range(k):
                col[j] = preds[j, a]
            p0[t, a] = median_of(col, k)
    return idx, p0
