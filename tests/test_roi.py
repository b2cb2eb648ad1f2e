"""Tests of dic.images.roi: region-of-interest masks, bounding box, erosion for subsets.

Oracles: skimage.draw.rectangle for rectangles, matplotlib.path.Path.contains_points for
polygons (point in polygon at pixel centres), scipy.ndimage.binary_erosion and a brute-force
loop for the subset erosion, numpy.nonzero for bounding boxes.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from matplotlib.path import Path as MplPath
from scipy import ndimage
from skimage.draw import rectangle

from dic.images.roi import erode_for_subset, make_roi, roi_bbox

SHAPE = (48, 64)  # rows, cols: not square, so swapped x and y show up


def _centres(shape):
    """(x, y) of every pixel centre, in row-major order."""
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]]
    return np.column_stack([xx.ravel(), yy.ravel()]).astype(float)


def _mpl_polygon_mask(vertices, shape):
    # matplotlib.path.Path.contains_points: an independent point-in-polygon test
    inside = MplPath(np.asarray(vertices, dtype=float)).contains_points(_centres(shape))
    return inside.reshape(shape)


# ------------------------------------------------------------------------------------------
# whole image and masks
# ------------------------------------------------------------------------------------------
def test_none_is_whole_image():
    mask = make_roi(None, SHAPE)
    assert mask.dtype == bool and mask.shape == SHAPE and mask.all()


def test_bool_mask_kept_as_is_but_copied():
    src = np.zeros(SHAPE, dtype=bool)
    src[5:9, 10:30] = True
    got = make_roi(src, SHAPE)
    np.testing.assert_array_equal(got, src)
    got[0, 0] = True
    assert not src[0, 0]  # a new array


@pytest.mark.parametrize("dtype", [np.uint8, np.int64, np.float64])
def test_zero_one_numeric_mask(dtype):
    src = np.zeros(SHAPE, dtype=dtype)
    src[3:7, 2:5] = 1
    got = make_roi(src, SHAPE)
    assert got.dtype == bool
    np.testing.assert_array_equal(got, src == 1)


def test_mask_image_file(tmp_path):
    expected = np.zeros(SHAPE, dtype=bool)
    expected[10:40, 5:60] = True
    expected[20, 30] = False
    path = tmp_path / "mask.png"
    assert cv2.imwrite(str(path), expected.astype(np.uint8) * 255)  # written by OpenCV
    np.testing.assert_array_equal(make_roi(path, SHAPE), expected)
    np.testing.assert_array_equal(make_roi(str(path), SHAPE), expected)


# ------------------------------------------------------------------------------------------
# rectangles
# ------------------------------------------------------------------------------------------
def _skimage_rect(r0, c0, r1, c1, shape):
    # skimage.draw.rectangle: start and end (row, col) both included
    mask = np.zeros(shape, dtype=bool)
    rr, cc = rectangle((r0, c0), end=(r1, c1), shape=shape)
    mask[rr.astype(int), cc.astype(int)] = True
    return mask


@pytest.mark.parametrize(
    "x0, y0, x1, y1", [(0, 0, 63, 47), (10, 5, 20, 30), (7, 7, 7, 7), (0, 40, 63, 47)]
)
def test_rectangle_corners_integer_match_skimage(x0, y0, x1, y1):
    got = make_roi((x0, y0, x1, y1), SHAPE)
    np.testing.assert_array_equal(got, _skimage_rect(y0, x0, y1, x1, SHAPE))
    got_arr = make_roi(np.array([x0, y0, x1, y1]), SHAPE)  # array form too
    np.testing.assert_array_equal(got_arr, got)


@pytest.mark.parametrize(
    "x, y, w, h", [(0, 0, 64, 48), (10, 5, 11, 26), (3, 4, 1, 1), (62, 46, 2, 2)]
)
def test_rectangle_dict_integer_match_skimage(x, y, w, h):
    got = make_roi({"x": x, "y": y, "width": w, "height": h}, SHAPE)
    # w columns from column x: x .. x + w - 1 inclusive
    np.testing.assert_array_equal(got, _skimage_rect(y, x, y + h - 1, x + w - 1, SHAPE))
    assert got.sum() == w * h


def test_rectangle_fractional_against_brute_force():
    rng = np.random.default_rng(3)
    c = _centres(SHAPE)
    for _ in range(50):
        x0, x1 = np.sort(rng.uniform(-0.5, SHAPE[1] - 0.5, 2))
        y0, y1 = np.sort(rng.uniform(-0.5, SHAPE[0] - 0.5, 2))
        if np.floor(x1) < np.ceil(x0) or np.floor(y1) < np.ceil(y0):
            continue  # no pixel centre inside: an error case, tested elsewhere
        # brute force: pixel centre inside the closed rectangle (common practice, no source)
        expected = ((c[:, 0] >= x0) & (c[:, 0] <= x1) & (c[:, 1] >= y0) & (c[:, 1] <= y1))
        np.testing.assert_array_equal(make_roi((x0, y0, x1, y1), SHAPE), expected.reshape(SHAPE))
        w, h = x1 - x0, y1 - y0
        expected_d = (c[:, 0] >= x0) & (c[:, 0] < x0 + w) & (c[:, 1] >= y0) & (c[:, 1] < y0 + h)
        if expected_d.any():
            got_d = make_roi({"x": x0, "y": y0, "width": w, "height": h}, SHAPE)
            np.testing.assert_array_equal(got_d, expected_d.reshape(SHAPE))


def test_rectangle_x_is_column_y_is_row():
    mask = make_roi((50, 2, 60, 3), SHAPE)  # x beyond the row count: only valid as a column
    rows, cols = np.nonzero(mask)
    assert set(rows) == {2, 3} and set(cols) == set(range(50, 61))


# ------------------------------------------------------------------------------------------
# polygons
# ------------------------------------------------------------------------------------------
def test_polygon_random_against_matplotlib():
    rng = np.random.default_rng(11)
    for n in (3, 5, 9):
        for _ in range(10):
            # star-shaped polygon around a centre: may be concave; random non-integer vertices
            # keep pixel centres off the edges, where point-in-polygon rules may differ
            angles = np.sort(rng.uniform(0, 2 * np.pi, n))
            radius = rng.uniform(4, 20, n)
            cx, cy = rng.uniform(22, 40), rng.uniform(21, 26)
            vertices = np.column_stack([cx + radius * np.cos(angles), cy + radius * np.sin(angles)])
            expected = _mpl_polygon_mask(vertices, SHAPE)
            if not expected.any():
                continue
            np.testing.assert_array_equal(make_roi(vertices, SHAPE), expected)
            np.testing.assert_array_equal(make_roi(vertices.tolist(), SHAPE), expected)


def test_polygon_asymmetric_triangle_orientation():
    # right triangle with the right angle at top-left (x=2.5, y=1.5), long leg along x
    vertices = [(2.5, 1.5), (60.5, 1.5), (2.5, 10.5)]
    got = make_roi(vertices, SHAPE)
    np.testing.assert_array_equal(got, _mpl_polygon_mask(vertices, SHAPE))  # matplotlib oracle
    rows, cols = np.nonzero(got)
    assert rows.max() <= 10 and cols.max() >= 55  # wide, not tall: x and y not swapped


def test_polygon_on_half_pixel_edges_has_exact_count():
    # rectangle polygon through pixel edges: pixel centres 10..19 x 5..12 inside, 10 x 8 pixels
    vertices = [(9.5, 4.5), (19.5, 4.5), (19.5, 12.5), (9.5, 12.5)]
    got = make_roi(vertices, SHAPE)
    assert got.sum() == 80
    np.testing.assert_array_equal(got, _skimage_rect(5, 10, 12, 19, SHAPE))  # skimage.draw


# ------------------------------------------------------------------------------------------
# errors: ValueError, naming roi, with the fix
# ------------------------------------------------------------------------------------------
def test_wrong_mask_shape():
    with pytest.raises(ValueError, match=r"^roi: boolean mask has shape \(48, 63\).*\(48, 64\)"):
        make_roi(np.ones((48, 63), dtype=bool), SHAPE)
    with pytest.raises(ValueError, match=r"^roi: mask has shape \(10, 10\)"):
        make_roi(np.ones((10, 10), dtype=np.uint8), SHAPE)


def test_mask_with_other_values():
    with pytest.raises(ValueError, match=r"^roi: a numeric mask array must hold only 0 and 1"):
        make_roi(np.full(SHAPE, 255, dtype=np.uint8), SHAPE)
    with pytest.raises(ValueError, match=r"^roi: mask array contains NaN"):
        make_roi(np.full(SHAPE, np.nan), SHAPE)


def test_mask_image_of_wrong_size(tmp_path):
    path = tmp_path / "m.png"
    assert cv2.imwrite(str(path), np.full((20, 30), 255, dtype=np.uint8))
    with pytest.raises(ValueError, match=r"^roi: mask image .*m\.png' is 20 x 30"):
        make_roi(path, SHAPE)


def test_missing_mask_file_is_oserror_naming_roi(tmp_path):
    with pytest.raises(FileNotFoundError, match=r"^roi: file not found: .*gone\.png"):
        make_roi(tmp_path / "gone.png", SHAPE)


@pytest.mark.parametrize(
    "roi",
    [
        np.zeros(SHAPE, dtype=bool),
        np.zeros(SHAPE, dtype=np.uint8),
    ],
)
def test_empty_mask(roi):
    with pytest.raises(ValueError, match=r"^roi: the region holds no pixel"):
        make_roi(roi, SHAPE)


def test_empty_mask_file(tmp_path):
    path = tmp_path / "black.png"
    assert cv2.imwrite(str(path), np.zeros(SHAPE, dtype=np.uint8))
    with pytest.raises(ValueError, match=r"^roi: the region holds no pixel"):
        make_roi(path, SHAPE)


@pytest.mark.parametrize(
    "roi",
    [
        (-1, 0, 10, 10),
        (0, 0, 64, 10),  # x1 = cols: past the last column
        (0, 0, 10, 48),  # y1 = rows
        (0, 0, 47, 63),  # x and y swapped for a 48 x 64 image
        {"x": 60, "y": 0, "width": 10, "height": 5},
        {"x": 0, "y": -2, "width": 10, "height": 5},
    ],
)
def test_rectangle_outside_image(roi):
    with pytest.raises(ValueError, match=r"^roi: rectangle .* reaches outside the image"):
        make_roi(roi, SHAPE)


def test_rectangle_reaching_the_outer_pixel_edges_is_accepted():
    # half a pixel of slack beyond the outer pixel centres: the image's own outer edges
    assert make_roi((-0.5, -0.5, 63.5, 47.5), SHAPE).all()
    assert make_roi({"x": 0, "y": 0, "width": 64, "height": 48}, SHAPE).all()


@pytest.mark.parametrize(
    "roi, message",
    [
        ((10, 10, 5, 20), r"^roi: rectangle .* is empty; give .* x0 <= x1"),
        ((3.2, 3, 3.8, 9), r"^roi: rectangle .* contains no pixel centre"),
        ({"x": 3, "y": 3, "width": 0, "height": 5}, r"^roi: rectangle width and height must be"),
        ({"x": 3, "y": 3, "width": 4, "height": -1}, r"^roi: rectangle width and height must be"),
        ({"x": 3, "y": 3, "w": 4, "h": 1}, r"^roi: a rectangle dict needs exactly the keys"),
        ({"x": 3, "y": np.nan, "width": 4, "height": 1}, r"^roi: rectangle .* must be finite"),
        ({"x": "a", "y": 1, "width": 4, "height": 1}, r"^roi: rectangle .* must be numbers"),
        ((0, np.inf, 3, 4), r"^roi: rectangle corners .* must be finite"),
    ],
)
def test_bad_rectangles(roi, message):
    with pytest.raises(ValueError, match=message):
        make_roi(roi, SHAPE)


@pytest.mark.parametrize(
    "vertices, message",
    [
        ([(1, 1), (5, 5), (9, 9)], r"^roi: polygon with 3 vertices has zero area"),
        ([(1, 1), (5, 1), (5, 1), (1, 1)], r"^roi: polygon with 4 vertices has zero area"),
        ([(1, 1), (5, 5)], r"^roi: a polygon needs at least 3"),
        ([(1, 1), (5, np.nan), (9, 1)], r"^roi: polygon vertices must be finite"),
        ([(1, 1), (70, 1), (9, 9)], r"^roi: polygon with 3 vertices reaches outside the image"),
        ([(10.1, 10.1), (10.4, 10.1), (10.4, 10.4)], r"^roi: polygon .* contains no pixel"),
    ],
)
def test_bad_polygons(vertices, message):
    with pytest.raises(ValueError, match=message):
        make_roi(vertices, SHAPE)


@pytest.mark.parametrize("roi", [3.0, {1, 2, 3}, (1, 2, 3), np.zeros((2, 3, 4)), object()])
def test_unrecognised_roi(roi):
    with pytest.raises(ValueError, match=r"^roi: cannot use .* as a region; pass None"):
        make_roi(roi, SHAPE)


@pytest.mark.parametrize("shape", [(10,), (0, 5), (5.0, 5), (True, 4), "ab", None])
def test_bad_shape(shape):
    with pytest.raises(ValueError, match=r"^shape must be \(rows, cols\) with two positive"):
        make_roi(None, shape)


# ------------------------------------------------------------------------------------------
# bounding box
# ------------------------------------------------------------------------------------------
def test_roi_bbox_against_nonzero():
    rng = np.random.default_rng(5)
    for _ in range(20):
        mask = rng.random(SHAPE) < rng.uniform(0.001, 0.05)
        if not mask.any():
            continue
        rows, cols = np.nonzero(mask)  # numpy.nonzero: the pixel list itself
        assert roi_bbox(mask) == (cols.min(), rows.min(), cols.max(), rows.max())
    # a rectangle's box is its corners (x0, y0, x1, y1)
    assert roi_bbox(make_roi((4, 9, 30, 17), SHAPE)) == (4, 9, 30, 17)


def test_roi_bbox_errors():
    with pytest.raises(ValueError, match=r"^mask has no True pixel"):
        roi_bbox(np.zeros(SHAPE, dtype=bool))
    with pytest.raises(ValueError, match=r"^mask must be 2-D"):
        roi_bbox(np.ones(10, dtype=bool))


# ------------------------------------------------------------------------------------------
# erosion for subsets
# ------------------------------------------------------------------------------------------
def _brute_force_erosion(mask, subset):
    # the definition itself: every pixel of the subset square inside the image and the mask
    rows, cols = mask.shape
    h = subset // 2
    out = np.zeros_like(mask)
    for r in range(rows):
        for c in range(cols):
            if r - h < 0 or c - h < 0 or r + h >= rows or c + h >= cols:
                continue
            out[r, c] = mask[r - h : r + h + 1, c - h : c + h + 1].all()
    return out


@pytest.mark.parametrize("subset", [1, 3, 7, 15])
def test_erode_for_subset_against_brute_force_and_scipy(subset):
    rng = np.random.default_rng(subset)
    # blobby mask touching the border, with holes
    mask = ndimage.binary_opening(rng.random((40, 52)) < 0.8, iterations=1)
    mask[:, :6] = True
    mask[0:3, :] = True
    got = erode_for_subset(mask, subset)
    assert got.dtype == bool and got.shape == mask.shape
    np.testing.assert_array_equal(got, _brute_force_erosion(mask, subset))
    # scipy.ndimage.binary_erosion with a square and outside-is-False
    square = np.ones((subset, subset), dtype=bool)
    np.testing.assert_array_equal(got, ndimage.binary_erosion(mask, square, border_value=0))


def test_erode_for_subset_full_image_leaves_the_margin():
    got = erode_for_subset(np.ones(SHAPE, dtype=bool), 21)
    expected = np.zeros(SHAPE, dtype=bool)
    expected[10:-10, 10:-10] = True  # half subset (10 px) margin on each side, by hand
    np.testing.assert_array_equal(got, expected)
    assert not erode_for_subset(np.ones((10, 10), dtype=bool), 11).any()  # subset too big


@pytest.mark.parametrize("subset", [0, 4, -3, 2.0, True, "21"])
def test_erode_for_subset_bad_subset(subset):
    with pytest.raises(ValueError, match=r"^subset must be a positive odd integer"):
        erode_for_subset(np.ones(SHAPE, dtype=bool), subset)


def test_erode_for_subset_bad_mask():
    with pytest.raises(ValueError, match=r"^mask must be 2-D"):
        erode_for_subset(np.ones((4, 4, 4), dtype=bool), 3)
