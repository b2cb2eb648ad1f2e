"""Regions of interest: boolean masks of the pixels to measure.

A region of interest (ROI) is given as a rectangle, a polygon, a mask array or a mask image
file, and becomes a boolean mask of the image's shape. Coordinates follow the project
convention: ``x`` is the column, ``y`` the row (downwards), origin at the centre of the
top-left pixel; a pixel belongs to a shape when its centre does.
"""

from __future__ import annotations

import math
import numbers
import os

import numpy as np

__all__ = ["erode_for_subset", "make_roi", "roi_bbox"]

# how far (in pixels) a rectangle or polygon may reach past the outer pixel centres: up to the
# outer edge of the border pixels
_SLACK = 0.5


def make_roi(roi, shape):
    """Turn a region-of-interest description into a boolean mask.

    Parameters
    ----------
    roi : None, dict, 4-tuple, (N, 2) array_like, 2-D array, str or os.PathLike
        - ``None``: the whole image.
        - ``{"x": x0, "y": y0, "width": w, "height": h}``: the rectangle of pixels whose
          centres satisfy ``x0 <= x < x0 + w`` and ``y0 <= y < y0 + h`` (for whole numbers:
          ``w`` columns from column ``x0``, ``h`` rows from row ``y0``).
        - ``(x0, y0, x1, y1)``: the rectangle of pixels whose centres satisfy
          ``x0 <= x <= x1`` and ``y0 <= y <= y1`` (both ends included).
        - ``(N, 2)`` vertices ``(x, y)``, ``N >= 3``: a polygon; pixels whose centres lie inside.
        - a boolean array of shape ``shape`` (or one holding only 0 and 1): used as is.
        - a path to a mask image of shape ``shape``: non-zero pixels are inside.

        Rectangles and polygons must lie within the image, up to its outer pixel edges
        (half a pixel past the outer pixel centres).
    shape : tuple of int
        Image shape ``(rows, cols)``.

    Returns
    -------
    mask : ndarray of bool, shape ``shape``
        A new array; ``True`` marks pixels inside the region. Never empty.

    Raises
    ------
    ValueError
        Wrong mask shape or values, a rectangle outside the image or empty, a degenerate
        polygon, a region with no pixel, or an unrecognised ``roi``.
    OSError
        A mask image file cannot be read.
    """
    rows, cols = _check_shape(shape)
    if roi is None:
        mask = np.ones((rows, cols), dtype=bool)
    elif isinstance(roi, (str, os.PathLike)):
        mask = _mask_from_file(roi, (rows, cols))
    elif isinstance(roi, dict):
        mask = _rectangle_from_dict(roi, rows, cols)
    else:
        try:
            arr = np.asarray(roi)
        except Exception:
            arr = None
        if arr is None or arr.dtype == object:
            raise ValueError(_unrecognised(roi))
        if arr.ndim == 2 and arr.shape == (rows, cols) and arr.dtype.kind in "buif":
            mask = _mask_from_array(arr)
        elif arr.dtype == bool:
            raise ValueError(
                f"roi: boolean mask has shape {arr.shape} but the image is {rows} x {cols} "
                f"(rows x cols); pass a mask of shape ({rows}, {cols})"
            )
        elif arr.ndim == 1 and arr.size == 4 and arr.dtype.kind in "uif":
            mask = _rectangle_from_corners(arr.astype(np.float64), rows, cols)
        elif arr.ndim == 2 and arr.shape[1] == 2 and arr.dtype.kind in "uif":
            mask = _polygon(arr.astype(np.float64), rows, cols)
        elif arr.ndim == 2 and arr.dtype.kind in "uif" and min(arr.shape) > 2:
            raise ValueError(
                f"roi: mask has shape {arr.shape} but the image is {rows} x {cols} "
                f"(rows x cols); pass a mask of shape ({rows}, {cols})"
            )
        else:
            raise ValueError(_unrecognised(roi))
    if not mask.any():
        raise ValueError(
            "roi: the region holds no pixel of the image; draw a larger region, or check "
            "that x is the column and y the row"
        )
    return mask


def _unrecognised(roi):
    return (
        f"roi: cannot use {type(roi).__name__} {_short(roi)} as a region; pass None, "
        f"{{'x', 'y', 'width', 'height'}}, (x0, y0, x1, y1), (N, 2) polygon vertices (x, y), "
        f"a boolean mask array or a mask image file"
    )


def _short(obj, limit=60):
    text = repr(obj).replace("\n", " ")
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _check_shape(shape):
    try:
        rows, cols = shape
        ok = all(
            isinstance(n, numbers.Integral) and not isinstance(n, bool) and n > 0
            for n in (rows, cols)
        )
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ValueError(
            f"shape must be (rows, cols) with two positive integers, got {_short(shape)}; "
            f"pass image.shape"
        )
    return int(rows), int(cols)


def _mask_from_array(arr):
    if arr.dtype == bool:
        return arr.copy()
    if arr.dtype.kind == "f" and not np.isfinite(arr).all():
        raise ValueError("roi: mask array contains NaN or inf; pass a boolean mask")
    inside = arr != 0
    if np.any(arr[inside] != 1):
        raise ValueError(
            "roi: a numeric mask array must hold only 0 and 1; pass a boolean mask, "
            "e.g. roi=(labels == k)"
        )
    return inside


def _mask_from_file(path, shape):
    from dic.images.io import read_image

    image = read_image(path, name="roi")
    if image.shape != shape:
        raise ValueError(
            f"roi: mask image '{os.fspath(path)}' is {image.shape[0]} x {image.shape[1]} but "
            f"the image is {shape[0]} x {shape[1]} (rows x cols); save the mask at the image's "
            f"size"
        )
    return image != 0


def _finite_numbers(values, what):
    try:
        out = [float(v) for v in values]
    except (TypeError, ValueError):
        raise ValueError(f"roi: {what} must be numbers, got {_short(values)}") from None
    if not all(math.isfinite(v) for v in out):
        raise ValueError(f"roi: {what} must be finite numbers, got {_short(values)}")
    return out


def _rectangle_from_dict(roi, rows, cols):
    keys = ("x", "y", "width", "height")
    if set(roi) != set(keys):
        raise ValueError(
            f"roi: a rectangle dict needs exactly the keys x, y, width, height, got "
            f"{sorted(roi)}; e.g. {{'x': 10, 'y': 20, 'width': 100, 'height': 50}}"
        )
    x, y, w, h = _finite_numbers([roi[k] for k in keys], "rectangle x, y, width, height")
    if w <= 0 or h <= 0:
        raise ValueError(
            f"roi: rectangle width and height must be positive, got width={w:g}, "
            f"height={h:g}; give the size in pixels"
        )
    described = f"rectangle x={x:g}, y={y:g}, width={w:g}, height={h:g}"
    # edges of the covered pixels: centres x .. x + w (half-open), edges half a pixel before
    _check_inside(x, x + w - 1, y, y + h - 1, rows, cols, described)
    c0, c1 = math.ceil(x), math.ceil(x + w) - 1
    r0, r1 = math.ceil(y), math.ceil(y + h) - 1
    return _box(r0, r1, c0, c1, rows, cols, described)


def _rectangle_from_corners(corners, rows, cols):
    x0, y0, x1, y1 = _finite_numbers(corners, "rectangle corners (x0, y0, x1, y1)")
    described = f"rectangle (x0, y0, x1, y1) = ({x0:g}, {y0:g}, {x1:g}, {y1:g})"
    if x1 < x0 or y1 < y0:
        raise ValueError(
            f"roi: {described} is empty; give (x0, y0, x1, y1) with x0 <= x1 and y0 <= y1 "
            f"(top-left corner first)"
        )
    _check_inside(x0, x1, y0, y1, rows, cols, described)
    return _box(math.ceil(y0), math.floor(y1), math.ceil(x0), math.floor(x1), rows, cols,
                described)


def _check_inside(x0, x1, y0, y1, rows, cols, described):
    if x0 < -_SLACK or y0 < -_SLACK or x1 > cols - 1 + _SLACK or y1 > rows - 1 + _SLACK:
        raise ValueError(
            f"roi: {described} reaches outside the image (x 0..{cols - 1}, y 0..{rows - 1}); "
            f"give a region inside the image, x being the column and y the row"
        )


def _box(r0, r1, c0, c1, rows, cols, described):
    r0, c0 = max(r0, 0), max(c0, 0)
    r1, c1 = min(r1, rows - 1), min(c1, cols - 1)
    if r1 < r0 or c1 < c0:
        raise ValueError(
            f"roi: {described} contains no pixel centre; make it at least one pixel wide "
            f"and high"
        )
    mask = np.zeros((rows, cols), dtype=bool)
    mask[r0 : r1 + 1, c0 : c1 + 1] = True
    return mask


def _polygon(vertices, rows, cols):
    n = vertices.shape[0]
    if n < 3:
        raise ValueError(
            f"roi: a polygon needs at least 3 (x, y) vertices, got {n}; for a rectangle "
            f"pass (x0, y0, x1, y1)"
        )
    if not np.isfinite(vertices).all():
        raise ValueError("roi: polygon vertices must be finite numbers; remove NaN or inf")
    x, y = vertices[:, 0], vertices[:, 1]
    described = f"polygon with {n} vertices"
    _check_inside(x.min(), x.max(), y.min(), y.max(), rows, cols, described)
    # shoelace area, about a vertex to keep the sums small
    xs, ys = x - x[0], y - y[0]
    area = 0.5 * abs(np.dot(xs, np.roll(ys, -1)) - np.dot(ys, np.roll(xs, -1)))
    if area < 1e-9 * max(1.0, float(np.ptp(x)) * float(np.ptp(y))):
        raise ValueError(
            f"roi: {described} has zero area (its vertices lie on one line); give vertices "
            f"(x, y) that enclose a region"
        )
    from skimage.draw import polygon2mask

    # polygon2mask takes (row, col) = (y, x) vertices
    mask = polygon2mask((rows, cols), np.column_stack([y, x]))
    if not mask.any():
        raise ValueError(
            f"roi: {described} contains no pixel centre; make it larger than one pixel"
        )
    return mask


def roi_bbox(mask):
    """Smallest rectangle holding all pixels of a mask.

    Parameters
    ----------
    mask : array_like of bool, 2-D
        Region of interest.

    Returns
    -------
    x0, y0, x1, y1 : int
        First and last column and row holding a ``True`` pixel (both ends included).

    Raises
    ------
    ValueError
        ``mask`` is not 2-D or has no ``True`` pixel.
    """
    m = np.asarray(mask)
    if m.ndim != 2:
        raise ValueError(f"mask must be 2-D, got shape {m.shape}; pass a (rows, cols) mask")
    m = m.astype(bool, copy=False)
    rows_any = np.flatnonzero(m.any(axis=1))
    if rows_any.size == 0:
        raise ValueError("mask has no True pixel; pass a non-empty region of interest")
    cols_any = np.flatnonzero(m.any(axis=0))
    return int(cols_any[0]), int(rows_any[0]), int(cols_any[-1]), int(rows_any[-1])


def erode_for_subset(mask, subset):
    """Pixels whose whole subset lies inside the mask.

    Parameters
    ----------
    mask : array_like of bool, 2-D
        Region of interest.
    subset : int
        Subset side in pixels, odd and positive.

    Returns
    -------
    inside : ndarray of bool
        ``True`` where the ``subset x subset`` square centred on the pixel lies wholly inside
        ``mask`` and inside the image (pixels beyond the image count as outside).

    Raises
    ------
    ValueError
        ``mask`` is not 2-D, or ``subset`` is not a positive odd integer.

    Notes
    -----
    Binary erosion by a square, done as two one-dimensional running minima (a square is the
    dilation of a row by a column), so the cost does not grow with the subset size.
    """
    m = np.asarray(mask)
    if m.ndim != 2:
        raise ValueError(f"mask must be 2-D, got shape {m.shape}; pass a (rows, cols) mask")
    if (
        not isinstance(subset, numbers.Integral)
        or isinstance(subset, bool)
        or subset < 1
        or subset % 2 == 0
    ):
        raise ValueError(
            f"subset must be a positive odd integer (pixels), got {subset!r}; e.g. subset=21"
        )
    from scipy.ndimage import minimum_filter1d

    out = m.astype(np.uint8)
    if subset > 1:
        for axis in (0, 1):
            out = minimum_filter1d(out, int(subset), axis=axis, mode="constant", cval=0)
    return out.astype(bool)
