"""Second chances for points whose match failed from the starting guess they were given.

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

_DR = (-1, 1, 0, 0, -1, -1, 1, 1)
_DC = (0, 0, -1, 1, -1, 1, -1, 1)


def _guesses(prop, failed):
    """For each failed point, its matched 8-neighbours' shape functions carried over to it,
    best-correlated neighbour first: a list, one (indices, guesses) pair per rank."""
    from dic.matching._waves import shift_params

    ny, nx = prop.ny, prop.nx
    good = prop.state == prop.w.GOOD
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
    npar = prop.params.shape[1]
    for rank in range(nbr.shape[1]):
        has = nbr[:, rank] >= 0
        if not has.any():
            break
        idx, src = failed[has], nbr[has, rank]
        p0 = np.empty((idx.size, npar))
        for t in range(idx.size):
            shift_params(prop.params[src[t]], float(prop.px[idx[t]] - prop.px[src[t]]),
                         float(prop.py[idx[t]] - prop.py[src[t]]), prop.m.second, p0[t])
        ranks.append((idx, p0))
    return ranks


def retry_failed(prop):
    """Try the failed matches of propagation state ``prop`` (see :func:`dic.correlate`) again,
    from each matched 8-neighbour in turn (best correlated first), over a few rounds. A point
    that fails from every guess keeps the reason of its first failure. Returns the number of
    points rescued."""
    w = prop.w
    rescued = 0
    first_reason = {}
    for _ in range(ROUNDS):
        failed = np.flatnonzero((prop.state == w.BAD) & np.isin(prop.reason, RETRY_REASONS))
        if failed.size == 0:
            break
        for k in failed:
            first_reason.setdefault(int(k), int(prop.reason[k]))
        before = int(np.count_nonzero(prop.state == w.GOOD))
        for idx, p0 in _guesses(prop, failed):
            todo = prop.state[idx] == w.BAD
            if todo.any():
                prop.run(idx[todo], p0[todo], on_fail=w.BAD)
        gained = int(np.count_nonzero(prop.state == w.GOOD)) - before
        rescued += gained
        if gained == 0:
            break
    for k, reason in first_reason.items():
        if prop.state[k] != w.GOOD and prop.reason[k] != Reason.FLAT:
            prop.reason[k] = reason
    return rescued
