"""The 'auto' shape function: second order only where the field's curvature would bias a
first-order match."""

from __future__ import annotations

import numpy as np

from dic.field import Reason
from dic.matching._checks import affine_bias
from dic.matching._icgn import SubsetMatcher, grad_from_params, params_from_fields

#: second order where first order would be biased by more than this (px)
AUTO_BIAS = 0.01


def second_order_where_curved(prop, shape_order, step, order, max_iterations, tolerance,
                               min_std):
    """Shape function 'auto': re-match to second order the points of a first-order solution
    where the field's curvature would bias the first-order match by more than AUTO_BIAS px.

    Turns ``prop.params`` into second-order parameter vectors (second derivatives zero where
    first order was kept). Returns the seconds spent in the solver."""
    m = prop.m
    good = prop.state == prop.w.GOOD
    p6 = np.where(good[:, None], prop.params, np.nan)
    grad = grad_from_params(p6, False)
    bias, curv = affine_bias(grad.reshape(prop.ny, prop.nx, 2, 2), float(step), m.half)
    p12 = params_from_fields(p6[:, 0], p6[:, 3], grad, True)
    prop.params = p12
    if not np.any(bias > AUTO_BIAS):
        # nowhere curved enough (the filtered bias below cannot exceed the largest raw one)
        return 0.0
    # second order pays where the bias exceeds both AUTO_BIAS and the first-order random
    # error (its own random error is larger, ~1.5 x; common practice, no source). A neck's
    # curvature spans several points, noise in the gradients does not: the median over each
    # point's 3 x 3 neighbourhood (edges repeated) keeps the one and drops the other. The
    # median of nine values exceeds a limit when at least five of them do, which is what is
    # counted (first against AUTO_BIAS, the smallest limit, to find the candidates)
    b = np.pad(np.where(np.isfinite(bias), bias, 0.0), 1, mode="edge")

    def over(limit):
        count = np.zeros(bias.shape, np.int8)
        for dr in range(3):
            for dc in range(3):
                count += b[dr:dr + prop.ny, dc:dc + prop.nx] > limit
        return (count >= 5).ravel()

    idx = np.flatnonzero(good & over(AUTO_BIAS))
    if idx.size:
        # the first-order matches' own standard deviations (the matcher is first order here)
        limit = np.full(good.size, np.inf)
        limit[idx] = np.fmax(AUTO_BIAS, 2.0 * prop.fit_sigma(prop.std[idx], prop.zncc[idx],
                                                             prop.unc[idx]))
        idx = np.flatnonzero(good & over(limit.reshape(bias.shape)))
    if idx.size == 0:
        return 0.0
    m2 = SubsetMatcher(m.reference, None, subset=2 * m.half + 1, second_order=True,
                       order=order, max_iterations=max_iterations, tolerance=tolerance,
                       min_std=min_std, reference_gradients=(m.gx, m.gy),
                       deformed_spline=m.spline, border=m.border)
    c = np.nan_to_num(curv.reshape(-1, 2, 3)[idx])
    start = p12[idx].copy()
    start[:, 3:6] = c[:, 0]
    start[:, 9:12] = c[:, 1]
    res = m2.match(prop.px[idx], prop.py[idx], start)
    # at least as good as the first-order match it replaces (which may be a weak one)
    ok = (res.status == Reason.MEASURED) & (res.zncc >= np.fmin(prop.min_zncc, prop.zncc[idx]))
    k = idx[ok]
    p12[k] = res.params[ok]
    prop.zncc[k] = res.zncc[ok]
    prop.iters[k] = prop.iters[k] + res.iterations[ok]
    prop.near_iters[k] = res.near_iterations[ok]
    prop.unc[k] = res.uncertainty[ok]
    shape_order[k] = 2
    return m2.kernel_time
