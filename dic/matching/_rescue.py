"""Second chances for points whose match failed from the starting guess they were given, and
for points too uncertain to lead the propagation (:func:`admit_uncertain`).

Propagation gives each point one or two starting guesses, carried over from matched neighbours.
Next to a depth step, a crease or the edge of the visible part of a surface, the neighbour
chosen can sit on the other side, and the Gauss-Newton iteration then runs off (out of the
image, into a fold, or to the iteration cap). Such a point is not unmeasurable: started from a
neighbour on its own side it usually converges at once. This pass tries every failed point from
each of its matched neighbours in turn, best correlated first.
"""

from __future__ import annotations

import numpy as np

from dic.field import Reason

#: reasons of a failed match that a different starting guess may cure
RETRY_REASONS = (Reason.OUTSIDE_IMAGE, Reason.NO_CONVERGENCE, Reason.LOW_ZNCC,
                 Reason.DEGENERATE)
#: rounds: a point rescued in one round can give its own failed neighbours a guess in the next
ROUNDS = 3
#: an uncertain point (see admit_uncertain) is kept only this close (px) to the displacement its
#: anchor, a well-determined point, predicts for it. Next to a flat patch, subsets that straddle
#: it converge confidently 1-3.5 px off; chained from one uncertain point to the next without
#: an anchor they were kept (largest error 2.9-3.5 px), with it none is more than 0.22 px off.
#: On the photographed motorcycle pair (smooth surfaces, step 5) 1 px instead of 0.5 px
#: measures 0.3 % more points, with 99.1 % of them within 0.5 px either way
REACH = 1.0
#: reasons of the points admit_uncertain tries, and its rounds (a later round starts only from
#: points admitted in the round before)
ADMIT_REASONS = (Reason.FLAT, Reason.LOW_ZNCC, Reason.NOT_REACHED)
ADMIT_ROUNDS = 4

_DR = (-1, 1, 0, 0, -1, -1, 1, 1)
_DC = (0, 0, -1, 1, -1, 1, -1, 1)


def _carry(p, ddx, ddy, second):
    """Shape-function parameters ``p`` (n, 6 or 12) carried over ``(ddx, ddy)`` px (arrays of
    n): the vectorised :func:`dic.matching._waves.shift_params`."""
    out = p.copy()
    for k in (0, 6) if second else (0, 3):
        if second:
            u, ux, uy, uxx, uxy, uyy = (p[:, k + a] for a in range(6))
            out[:, k] = (u + ux * ddx + uy * ddy + 0.5 * uxx * ddx * ddx + uxy * ddx * ddy
                         + 0.5 * uyy * ddy * ddy)
            out[:, k + 1] = ux + uxx * ddx + uxy * ddy
            out[:, k + 2] = uy + uxy * ddx + uyy * ddy
        else:
            out[:, k] = p[:, k] + p[:, k + 1] * ddx + p[:, k + 2] * ddy
    return out


def _guesses(prop, failed, sources=None):
    """For each failed point, its matched 8-neighbours' shape functions carried over to it,
    best-correlated neighbour first: a list, one (indices, guesses, neighbours) triple per rank.
    Only neighbours in the boolean mask ``sources`` give guesses, when it is given. Guesses that
    would put the subset outside the image are left out."""
    ny, nx = prop.ny, prop.nx
    good = prop.state == prop.w.GOOD
    if sources is not None:
        good &= sources
    r, c = np.divmod(failed, nx)
    nbr = np.full((failed.size, len(_DR)), -1, np.int64)
    score = np.full((failed.size, len(_DR)), -np.inf)
    for d, (dr, dc) in enumerate(zip(_DR, _DC)):
        rr, cc = r + dr, c + dc
        inside = (rr >= 0) & (rr < ny) & (cc >= 0) & (cc < nx)
        q = np.where(inside, rr * nx + cc, 0)
        ok = inside & good[q]
        nbr[ok, d] = q[ok]
        score[ok, d] = prop.zncc[q[ok]]
    order = np.argsort(-score, axis=1, kind="stable")
    nbr = np.take_along_axis(nbr, order, axis=1)
    ranks = []
    for rank in range(nbr.shape[1]):
        has = nbr[:, rank] >= 0
        if not has.any():
            break
        idx, src = failed[has], nbr[has, rank]
        p0 = _carry(prop.params[src], (prop.px[idx] - prop.px[src]).astype(float),
                    (prop.py[idx] - prop.py[src]).astype(float), prop.m.second)
        keep = _inside(prop, idx, p0)
        ranks.append((idx[keep], p0[keep], src[keep]))
    return ranks


def _inside(prop, idx, p0):
    """True where the guess keeps the warped subset's corners inside the deformed image: a
    guess that does not would fail at once (the match is then not tried)."""
    from dic.matching._icgn import index_u_v

    iu, iv = index_u_v(p0.shape[1] == 12)
    rows, cols = prop.m.reference.shape
    h = float(prop.m.half)
    ok = np.ones(idx.size, bool)
    for cx in (-h, h):
        for cy in (-h, h):
            xw = prop.px[idx] + cx + p0[:, iu] + p0[:, iu + 1] * cx + p0[:, iu + 2] * cy
            yw = prop.py[idx] + cy + p0[:, iv] + p0[:, iv + 1] * cx + p0[:, iv + 2] * cy
            ok &= (xw >= 0) & (xw <= cols - 1.0) & (yw >= 0) & (yw <= rows - 1.0)
    return ok


def retry_failed(prop):
    """Try the failed matches of propagation state ``prop`` (see :func:`dic.correlate`) again,
    from each matched 8-neighbour in turn (best correlated first), over a few rounds. A point
    that fails from every guess keeps the reason of its first failure. Returns the number of
    points rescued."""
    w = prop.w
    rescued = 0
    first_reason = np.full(prop.reason.shape, -1, np.int16)
    # the first round tries every matched neighbour; the later ones only those matched in
    # the round before (the others gave their guesses already)
    sources = None
    for _ in range(ROUNDS):
        failed = np.flatnonzero((prop.state == w.BAD) & np.isin(prop.reason, RETRY_REASONS))
        if failed.size == 0:
            break
        fresh = failed[first_reason[failed] < 0]
        first_reason[fresh] = prop.reason[fresh]
        before = prop.state == w.GOOD
        for idx, p0, _ in _guesses(prop, failed, sources):
            todo = prop.state[idx] == w.BAD
            if todo.any():
                prop.run(idx[todo], p0[todo], on_fail=w.BAD)
        sources = (prop.state == w.GOOD) & ~before
        gained = int(np.count_nonzero(sources))
        rescued += gained
        if gained == 0:
            break
    back = (first_reason >= 0) & (prop.state != w.GOOD) & (prop.reason != Reason.FLAT)
    prop.reason[back] = first_reason[back]
    return rescued


def admit_uncertain(prop, min_grad2, sigma_limit, reach=REACH):
    """Points the propagation left out as too uncertain (``FLAT``: a texture too weak for its
    strict limit, or a standard deviation above it), weakly correlated (``LOW_ZNCC``) or cut off
    by such points (``NOT_REACHED``), matched once more under the user's looser limit
    ``sigma_limit`` (px; texture threshold ``min_grad2`` before matching), from their matched
    8-neighbours (best correlated first), over a few rounds.

    Every point matched here has an anchor: the nearest well-determined point (standard
    deviation within the propagation's limit ``prop.sigma_limit``) on its chain of guesses,
    itself if it is one. A match is kept only within ``reach`` px of the displacement its anchor
    predicts for it, so uncertain matches cannot lead each other astray step by step (a subset
    straddling a flat patch converges confidently to a place several px off). Weak matches keep
    the propagation's limit. Returns the number admitted."""
    from dic.matching._icgn import index_u_v

    w = prop.w
    failed = np.flatnonzero((prop.state == w.BAD) & np.isin(prop.reason, ADMIT_REASONS))
    if failed.size == 0:
        return 0
    m = prop.m
    tried, first = failed, prop.reason[failed].copy()
    iu, iv = index_u_v(m.second)
    strict = m.min_grad2, prop.sigma_limit
    sources = prop.state == w.GOOD
    anchor = np.arange(prop.state.size)
    m.min_grad2, prop.sigma_limit = min_grad2, sigma_limit
    try:
        for _ in range(ADMIT_ROUNDS):
            gained = []
            for idx, p0, src in _guesses(prop, failed, sources):
                todo = prop.state[idx] == w.BAD
                if not todo.any():
                    continue
                idx, src = idx[todo], src[todo]
                got = prop.run(idx, p0[todo], on_fail=w.BAD)
                pos = np.searchsorted(idx, got)
                a = anchor[src[pos]]
                pred = _carry(prop.params[a], (prop.px[got] - prop.px[a]).astype(float),
                              (prop.py[got] - prop.py[a]).astype(float), m.second)
                far = np.hypot(prop.params[got, iu] - pred[:, iu],
                               prop.params[got, iv] - pred[:, iv]) > reach
                prop.state[got[far]] = w.BAD
                anchor[got[~far]] = a[~far]
                gained.append(got[~far])
            failed = failed[prop.state[failed] != w.GOOD]
            k = np.concatenate(gained) if gained else np.zeros(0, np.int64)
            if k.size == 0 or failed.size == 0:
                break
            sure = _within(prop, k, strict[1])
            anchor[k[sure]] = k[sure]
            sources = np.zeros(prop.state.shape, bool)
            sources[k] = True
    finally:
        m.min_grad2, prop.sigma_limit = strict
    back = prop.state[tried] != w.GOOD
    prop.reason[tried[back]] = first[back]
    return int(np.count_nonzero(~back))


def _within(prop, idx, limit):
    """True where the matches ``idx`` meet the propagation's strict limits: ZNCC at least its
    minimum and standard deviations from the fit within ``limit`` px."""
    sigma = prop.fit_sigma(prop.std[idx], prop.zncc[idx], prop.unc[idx])
    return (prop.zncc[idx] >= prop.min_zncc) & (sigma <= limit)
