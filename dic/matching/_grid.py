"""Laying out the grid of points and checking the matching options (shared by
:func:`dic.correlate`, the sequence tracker and the accuracy tools)."""

from __future__ import annotations

import numpy as np

from dic.errors import RegionTooSmall

from dic.matching._icgn import INTERPOLATIONS, SHAPE_FUNCTIONS

__all__ = ["check_int", "check_options", "prepare_grid"]


def check_int(name, value, low, hint):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{name} must be an integer, got {value!r}; {hint}")
    if value < low:
        raise ValueError(f"{name} must be at least {low}, got {value}; {hint}")
    return int(value)


def check_options(subset, step, shape_function, interpolation, search, min_zncc,
                   max_iterations, tolerance, min_texture):
    subset = check_int("subset", subset, 7, "use an odd size of 7 px or more, e.g. 21")
    if subset % 2 == 0:
        raise ValueError(f"subset must be odd so it has a centre pixel, got {subset}; "
                         f"use {subset + 1}")
    step = check_int("step", step, 1, "use a grid spacing of 1 px or more, e.g. 10")
    sf = str(shape_function).lower()
    if sf not in SHAPE_FUNCTIONS:
        raise ValueError(f"unknown shape_function {shape_function!r}; use 'auto', "
                         f"'affine' or 'quadratic'")
    it = str(interpolation).lower()
    if it not in INTERPOLATIONS:
        raise ValueError(f"unknown interpolation {interpolation!r}; use 'cubic' or 'quintic'")
    search = check_int("search", search, 0, "give the search radius in px, e.g. 60")
    if not (-1.0 < float(min_zncc) < 1.0):
        raise ValueError(f"min_zncc must lie between -1 and 1, got {min_zncc}; e.g. 0.9")
    max_iterations = check_int("max_iterations", max_iterations, 1, "e.g. 50")
    if not float(tolerance) > 0:
        raise ValueError(f"tolerance must be positive, got {tolerance}; e.g. 0.001 px")
    if not 0.0 <= float(min_texture) < 1.0:
        raise ValueError(f"min_texture must lie in [0, 1), got {min_texture}; e.g. 0.02")
    return (subset, step, SHAPE_FUNCTIONS[sf] == 2, INTERPOLATIONS[it], search,
            float(min_zncc), max_iterations, float(tolerance), float(min_texture))


def prepare_grid(shape, roi, subset, step, border=0):
    """Point grid over the ROI and the points whose whole subset lies inside it.

    Parameters
    ----------
    shape : tuple
        Image shape ``(rows, cols)``.
    roi : None, bool array, rectangle or polygon
        See :func:`dic.images.roi.make_roi`.
    subset, step : int
        Subset size and grid spacing (px).
    border : int, optional
        Width of the image margin that subsets must not touch (px).

    Returns
    -------
    xs, ys : ndarray of int
        Column and row positions of the grid lines.
    candidate : ndarray of bool, shape (len(ys), len(xs))
        Points whose subset is wholly inside the ROI and clear of the image margin.
    mask : ndarray of bool
        The ROI as a pixel mask.
    in_image : ndarray of bool, shape (len(ys), len(xs))
        Points whose subset is clear of the image margin.
    """
    from dic.images.roi import erode_for_subset, make_roi, roi_bbox

    mask = make_roi(roi, shape)
    half = subset // 2
    x0, y0, x1, y1 = roi_bbox(mask)
    xs = np.arange(x0 + half, x1 - half + 1, step, dtype=np.int64)
    ys = np.arange(y0 + half, y1 - half + 1, step, dtype=np.int64)
    if xs.size == 0 or ys.size == 0:
        raise RegionTooSmall(f"roi is too small for subset {subset} px (its bounding box is "
                         f"{x1 - x0 + 1} x {y1 - y0 + 1} px); enlarge the ROI or use a smaller "
                         f"subset")
    rows, cols = shape
    lo_x, hi_x = border + half, cols - 1 - border - half
    lo_y, hi_y = border + half, rows - 1 - border - half
    # the grid is laid out where subsets fit: grid lines whose subsets would cross the image
    # margin (always "outside image") are left out; the others keep their positions
    for name, lines, lo, hi in (("column", xs, lo_x, hi_x), ("row", ys, lo_y, hi_y)):
        if hi < lo:
            raise RegionTooSmall(f"subset: {subset} px subsets (plus a {border} px margin for "
                                 f"interpolation) do not fit in the image ({cols} x {rows} px); "
                                 f"use a smaller subset")
        if not ((lines >= lo) & (lines <= hi)).any():
            raise RegionTooSmall(f"step: a {step} px step puts no grid {name} where a "
                                 f"{subset} px subset fits (between {lo} and {hi} px); use a "
                                 f"smaller step")
    xs = xs[(xs >= lo_x) & (xs <= hi_x)]
    ys = ys[(ys >= lo_y) & (ys <= hi_y)]
    in_image = (((xs >= lo_x) & (xs <= hi_x))[None, :] & ((ys >= lo_y) & (ys <= hi_y))[:, None])
    if mask[y0:y1 + 1, x0:x1 + 1].all():
        # a rectangular ROI: every subset inside the bounding box is inside the ROI
        candidate = in_image
    else:
        candidate = erode_for_subset(mask, subset)[np.ix_(ys, xs)] & in_image
    if not candidate.any():
        raise RegionTooSmall(f"roi holds no point whose {subset} px subset fits inside it; enlarge "
                         f"the ROI or use a smaller subset")
    return xs, ys, candidate, mask, in_image
