"""Subsets that reach close to the image border: how close, and what that may cost.

The B-spline interpolant of the deformed image is fixed near the border by the mirror boundary
condition rather than by the image, an error the recursive prefilter carries inwards by a
factor of its dominant pole per pixel. A match whose deformed subset comes within
:func:`dic.matching.edge_margin` of the border is kept only where this error is small against
the match's own random error, and its standard deviations then include it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["edge_distance", "edge_bias", "near_border", "EDGE_SHARE"]

#: largest displacement error of a subset touching the image border (px): measured on exact
#: speckle images (2.5 px and 1.5 px speckles, 21 px subsets, no noise, translations and a 1 %
#: affine deformation moving subsets onto every border): 0.044 px (quintic), 0.041 px (cubic)
EDGE_BIAS_PX = 0.05
#: a subset inside the margin is kept if that error is at most this share of its smaller
#: standard deviation, which then includes it (the total error grows by at most a factor
#: sqrt(1 + 3^2) = 3.2, and the standard deviations say so). Noise-free images, whose random
#: error is tiny, still keep no point where the border's error is felt. On the photographed
#: motorcycle pair (step 5) a share of 0.5 left 18 points of smooth surfaces unmeasured within
#: 1-2.5 px of the border, where their errors were as small as elsewhere (0.07-0.17 px)
EDGE_SHARE = 3.0
# magnitude of the dominant pole of the B-spline prefilter (Unser 1999): the factor by which
# the boundary's error shrinks per pixel inwards
_POLE = {3: 2.0 - np.sqrt(3.0), 5: 0.4305753470999738}


def edge_distance(px, py, params, half, shape) -> np.ndarray:
    """Distance (px) from the image border of the warped subset of each point.

    Parameters
    ----------
    px, py : ndarray
        Subset centres in the reference image (px).
    params : ndarray, shape (n, 6) or (n, 12)
        Shape-function parameters (first order ``u, ux, uy, v, vx, vy``; second order with
        ``uxx, uxy, uyy`` after each gradient).
    half : int
        Subset half-width (px).
    shape : tuple
        Image shape ``(rows, cols)``.

    Returns
    -------
    ndarray
        The smallest distance of the subset's corners and edge midpoints, where the warped
        square reaches furthest, to the border (negative: outside; NaN: no parameters).
    """
    p = np.asarray(params, dtype=np.float64)
    second = p.shape[1] == 12
    iu, iv = (0, 6) if second else (0, 3)
    h = float(half)
    off = np.array([(dx, dy) for dx in (-h, 0.0, h) for dy in (-h, 0.0, h) if dx or dy])
    dx, dy = off[:, 0][None, :], off[:, 1][None, :]

    def warped(c, i, along):
        w = c[:, None] + along + p[:, i, None] + p[:, i + 1, None] * dx + p[:, i + 2, None] * dy
        if second:
            w = w + 0.5 * p[:, i + 3, None] * dx * dx + p[:, i + 4, None] * dx * dy \
                + 0.5 * p[:, i + 5, None] * dy * dy
        return w

    xw = warped(np.asarray(px, dtype=np.float64), iu, dx)
    yw = warped(np.asarray(py, dtype=np.float64), iv, dy)
    rows, cols = shape
    return np.minimum.reduce([xw.min(axis=1), cols - 1.0 - xw.max(axis=1),
                              yw.min(axis=1), rows - 1.0 - yw.max(axis=1)])


def edge_bias(distance, order: int) -> np.ndarray:
    """Bound on the interpolation error (px) of a subset this far from the image border.

    ``EDGE_BIAS_PX * |z| ** distance`` inside :func:`dic.matching.edge_margin`, 0 beyond it
    (``z`` the prefilter's dominant pole: 0.27 cubic, 0.43 quintic).

    Parameters
    ----------
    distance : ndarray
        From :func:`edge_distance` (px).
    order : {3, 5}
        B-spline degree.

    Returns
    -------
    ndarray

    References
    ----------
    .. [1] M. Unser, "Splines: a perfect fit for signal and image processing", IEEE Signal
       Processing Magazine 16 (1999) 22-38.
    """
    from dic.matching._icgn import edge_margin

    d = np.asarray(distance, dtype=np.float64)
    b = EDGE_BIAS_PX * _POLE[int(order)] ** np.clip(d, 0.0, None)
    return np.where(d < edge_margin(int(order)), b, 0.0)


def near_border(prop, good, su, sv, order):
    """Matches whose deformed subset reaches into the image's edge margin: kept where the
    interpolation error there is small against their own random error (then included in their
    standard deviations), OUTSIDE_IMAGE where it is not. ``prop`` is the propagation state of
    :func:`dic.correlate` (its matcher, points, parameters and per-point states, which this
    updates). Returns (std_u, std_v)."""
    from dic.field import Reason
    from dic.matching._icgn import edge_margin, index_u_v

    idx = np.flatnonzero(good)
    # a cheap lower bound on the distance first: the warped centre less the subset's reach
    p = prop.params[idx]
    iu, iv = index_u_v(p.shape[1] == 12)
    h = float(prop.m.half)
    reach = h * (1.0 + np.abs(p[:, [iu + 1, iu + 2, iv + 1, iv + 2]]).sum(axis=1))
    if p.shape[1] == 12:
        reach += h * h * np.abs(p[:, [iu + 3, iu + 4, iu + 5, iv + 3, iv + 4, iv + 5]]).sum(axis=1)
    xc, yc = prop.px[idx] + p[:, iu], prop.py[idx] + p[:, iv]
    rows, cols = prop.m.reference.shape
    lower = np.minimum(np.minimum(xc, cols - 1.0 - xc), np.minimum(yc, rows - 1.0 - yc)) - reach
    idx = idx[lower < edge_margin(order)]
    if idx.size == 0:
        return su, sv
    d = edge_distance(prop.px[idx], prop.py[idx], prop.params[idx], prop.m.half,
                      prop.m.reference.shape)
    b = edge_bias(d, order)
    near = b > 0
    if not near.any():
        return su, sv
    k = idx[near]
    b = b[near]
    out = ~(b <= EDGE_SHARE * np.fmin(su[k], sv[k]))
    prop.state[k[out]] = prop.w.BAD
    prop.reason[k[out]] = Reason.OUTSIDE_IMAGE
    su, sv = su.copy(), sv.copy()
    su[k] = np.hypot(su[k], b)
    sv[k] = np.hypot(sv[k], b)
    return su, sv
