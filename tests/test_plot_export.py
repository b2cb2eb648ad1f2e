"""Displacement maps (dic.figures.maps) and table/archive export (dic.export).

Fields here are built by hand, so every expected value is known without running the matcher.
"""

from __future__ import annotations

import numpy as np
import pytest

from dic.export import CSV_COLUMNS, field_from_npz, field_to_csv, field_to_npz
from dic.field import DisplacementField, Reason
from dic.images.io import read_image
from dic.figures import ROBUST_PERCENTILE, displacement_map, save_figure

IMAGE_SHAPE = (120, 160)  # rows, cols
STEP = 10


def make_field(*, second=False, invalid_cols=slice(0, 4), step=STEP):
    """A field on a 10 px grid, u from -1 to +3 px, with the left columns not measured."""
    xs = np.arange(10, 151, step, dtype=float)
    ys = np.arange(10, 111, step, dtype=float)
    x, y = np.meshgrid(xs, ys)
    u = -1.0 + 4.0 * (x - x.min()) / np.ptp(x) + 1e-3 / 3.0
    v = 0.25 * np.sin(y / 17.0) - 1.0 / 7.0
    grad = np.zeros(x.shape + (2, 2))
    grad[..., 0, 0] = 4.0 / np.ptp(x)
    grad[..., 1, 1] = 0.25 / 17.0 * np.cos(y / 17.0)
    zncc = 0.999 - 1e-4 * (x / 150.0) ** 2
    reason = np.zeros(x.shape, np.int8)
    reason[:, invalid_cols] = Reason.OUTSIDE_IMAGE
    reason[-1, -1] = Reason.LOW_ZNCC
    bad = reason != Reason.MEASURED
    u[bad] = v[bad] = zncc[bad] = np.nan
    grad[bad] = np.nan
    grad2 = None
    if second:
        grad2 = np.full(x.shape + (2, 3), 1e-5)
        grad2[bad] = np.nan
    settings = {"subset": 21, "step": step, "shape_function": "quadratic" if second else "affine",
                "interpolation": "quintic", "min_zncc": 0.9, "image_shape": IMAGE_SHAPE}
    iterations = np.where(bad, 0, 3).astype(np.int16)
    return DisplacementField(x=x, y=y, u=u, v=v, grad=grad, zncc=zncc, reason=reason,
                             iterations=iterations, grad2=grad2, settings=settings)


def _overlay(ax):
    (im,) = [im for im in ax.images if im.get_gid() == "displacement"]
    return im


# --------------------------------------------------------------------------------------------
# maps
# --------------------------------------------------------------------------------------------
def test_magnitude_map_masks_unmeasured_points():
    f = make_field()
    image = np.random.default_rng(0).uniform(0, 255, IMAGE_SHAPE)
    fig, ax = displacement_map(f, image)
    im = _overlay(ax)
    data = im.get_array()
    # every unmeasured point is masked, every measured one is not
    np.testing.assert_array_equal(np.ma.getmaskarray(data), ~f.valid)
    # the drawn values are the magnitude sqrt(u^2 + v^2) (numpy.hypot as the reference)
    np.testing.assert_allclose(data[f.valid], np.hypot(f.u, f.v)[f.valid], rtol=1e-12)
    # a perceptually uniform map from zero (project rule, DESIGN.md section 5)
    assert im.get_cmap().name.startswith("cividis")
    assert im.norm.vmin == 0.0
    # the masked ('bad') colour is fully transparent
    assert im.get_cmap()(np.ma.masked)[3] == 0.0
    assert "(px)" in im.colorbar.ax.get_ylabel()
    assert ax.get_xlabel() == "x (px)" and ax.get_ylabel() == "y (px)"
    # cells centred on the points, one grid step wide, in image pixel coordinates
    assert im.get_extent() == [5.0, 155.0, 115.0, 5.0]
    assert "measured" in ax.get_title()


def test_unmeasured_cells_show_the_image_underneath():
    # black image with one white pixel far from the grid: the grey map (matplotlib 'gray',
    # low limit = black) paints the background pure black; an unmeasured cell must stay black,
    # a measured cell must be tinted by the overlay
    f = make_field()
    image = np.zeros(IMAGE_SHAPE)
    image[-1, -1] = 255.0
    fig, ax = displacement_map(f, image, alpha=0.7)
    fig.canvas.draw()
    rgba = np.asarray(fig.canvas.buffer_rgba())
    height = rgba.shape[0]

    def pixel(x, y):
        px, py = ax.transData.transform((x, y))
        return rgba[int(round(height - py)), int(round(px)), :3]

    for x, y in [(10.0, 60.0), (30.0, 20.0), (40.0, 100.0)]:  # unmeasured (columns 0..3)
        np.testing.assert_array_equal(pixel(x, y), [0, 0, 0])
    for x, y in [(80.0, 60.0), (140.0, 20.0)]:  # measured
        assert pixel(x, y).max() > 40


def test_signed_component_uses_centred_diverging_map():
    f = make_field()
    fig, ax = displacement_map(f, component="u")
    im = _overlay(ax)
    assert im.get_cmap().name.startswith("RdBu_r")
    # centred on zero: vmin = -vmax (project rule, DESIGN.md section 5)
    assert im.norm.vmin == -im.norm.vmax > -np.inf
    assert im.norm.vmax > 0
    # zero sits in the middle of the colour map
    assert im.norm(0.0) == pytest.approx(0.5, abs=1e-12)
    # default limit: the 99.5th percentile of |u| over measured points (numpy.percentile)
    expect = np.percentile(np.abs(f.u[f.valid]), ROBUST_PERCENTILE)
    assert im.norm.vmax == pytest.approx(expect, rel=1e-12)
    assert "u (px)" in im.colorbar.ax.get_ylabel()


def test_v_component_and_explicit_limits():
    f = make_field()
    fig, ax = displacement_map(f, component="v", limits=(-0.5, 0.5))
    im = _overlay(ax)
    assert (im.norm.vmin, im.norm.vmax) == (-0.5, 0.5)
    assert im.colorbar.extend == "neither"  # |v| <= 0.25 + 1/7 < 0.5 everywhere


def test_outlier_does_not_set_the_scale_and_is_flagged():
    # a 2 px grid holds ~3000 measured points, so one stray point is far inside the top 0.5 %
    f = make_field(step=2)
    f.u[25, 40] = 500.0
    fig, ax = displacement_map(f)
    im = _overlay(ax)
    # the scale is set by the true field: |u| <= 3, |v| <= 0.4, so the magnitude <= 3.1
    assert im.norm.vmax < 3.2
    assert im.colorbar.extend == "max"


def test_map_with_nothing_measured_draws_without_warnings():
    f = make_field(invalid_cols=slice(None))
    fig, ax = displacement_map(f, np.zeros(IMAGE_SHAPE), component="u")
    im = _overlay(ax)
    assert np.ma.getmaskarray(im.get_array()).all()
    fig.canvas.draw()  # warnings are errors in this test run


def test_map_into_given_axes():
    from matplotlib.figure import Figure

    fig = Figure()
    ax = fig.add_subplot()
    out_fig, out_ax = displacement_map(make_field(), ax=ax, title="mine")
    assert out_fig is fig and out_ax is ax and ax.get_title() == "mine"


@pytest.mark.parametrize("kwargs, word", [
    ({"component": "w"}, "component"),
    ({"alpha": 2.0}, "alpha"),
    ({"cmap": "no_such_map"}, "cmap"),
    ({"limits": (1.0, 1.0)}, "limits"),
    ({"image": np.zeros((50, 50))}, "image"),
])
def test_map_bad_arguments(kwargs, word):
    with pytest.raises(ValueError, match=word):
        displacement_map(make_field(), **kwargs)


def test_save_figure_png_svg_and_errors(tmp_path):
    fig, _ = displacement_map(make_field(), np.zeros(IMAGE_SHAPE))
    png = save_figure(fig, tmp_path / "map.png", dpi=50)
    img = read_image(png)
    assert img.ndim == 2 and img.shape[1] == 400  # 8 in at 50 dpi
    svg = save_figure(fig, tmp_path / "map.svg")
    assert svg.read_text(encoding="utf-8").lstrip().startswith("<?xml")
    with pytest.raises(OSError, match="unsupported"):
        save_figure(fig, tmp_path / "map.gif")
    with pytest.raises(OSError, match="does not exist"):
        save_figure(fig, tmp_path / "missing" / "map.png")
    with pytest.raises(ValueError, match="dpi"):
        save_figure(fig, tmp_path / "map.png", dpi=0)
    # written atomically: a folder in the file's place stays, no temporary is left, and the
    # error is one line naming the file (os.replace cannot put a file over a folder: POSIX
    # rename(2), EISDIR; common practice, no source)
    (tmp_path / "taken.pdf").mkdir()
    with pytest.raises(OSError) as e:
        save_figure(fig, tmp_path / "taken.pdf")
    assert str(e.value).startswith(f"path: cannot write '{tmp_path / 'taken.pdf'}'")
    assert "\n" not in str(e.value) and ".partial" not in str(e.value)
    assert sorted(q.name for q in tmp_path.iterdir()) == ["map.png", "map.svg", "taken.pdf"]


# --------------------------------------------------------------------------------------------
# export
# --------------------------------------------------------------------------------------------
def test_csv_round_trip_through_numpy_genfromtxt(tmp_path):
    f = make_field()
    path = field_to_csv(f, tmp_path / "field.csv")
    # numpy.genfromtxt is the independent reader
    table = np.genfromtxt(path, delimiter=",", names=True)
    assert table.dtype.names == CSV_COLUMNS
    assert table.shape == (f.n_points,)
    expect = {"x_px": f.x, "y_px": f.y, "u_px": f.u, "v_px": f.v,
              "dudx": f.grad[..., 0, 0], "dudy": f.grad[..., 0, 1],
              "dvdx": f.grad[..., 1, 0], "dvdy": f.grad[..., 1, 1], "zncc": f.zncc,
              "reason": f.reason}
    for name, values in expect.items():
        # exact equality, NaN in the same places (assert_array_equal treats NaN == NaN)
        np.testing.assert_array_equal(table[name], np.ravel(values).astype(float), err_msg=name)
    assert np.isnan(table["u_px"]).sum() == f.n_points - f.n_valid > 0
    lines = path.read_text().splitlines()
    assert lines[0] == ",".join(CSV_COLUMNS)
    assert len(lines) == 1 + f.n_points  # a header and numbers, nothing else
    # the settings are in the sidecar JSON beside the table
    import json

    about = json.loads(path.with_suffix(".json").read_text())
    assert about["settings"]["subset"] == 21 and about["settings"]["image_shape"] == [120, 160]
    # pandas with default options reads every column as numbers (pandas docs, read_csv)
    pd = pytest.importorskip("pandas")
    frame = pd.read_csv(path)
    assert list(frame.columns) == list(CSV_COLUMNS)
    assert all(pd.api.types.is_numeric_dtype(frame[c]) for c in frame.columns)


def test_csv_reads_with_the_standard_csv_module(tmp_path):
    import csv

    f = make_field()
    path = field_to_csv(f, tmp_path / "field.csv")
    with open(path, newline="") as fh:
        rows = [r for r in csv.reader(fh) if r and not r[0].startswith("#")]
    assert rows[0] == list(CSV_COLUMNS)
    assert len(rows) == f.n_points + 1
    assert all(len(r) == len(CSV_COLUMNS) for r in rows)


@pytest.mark.parametrize("second", [False, True])
def test_npz_round_trip(tmp_path, second):
    f = make_field(second=second)
    path = field_to_npz(f, tmp_path / "field")
    assert path.suffix == ".npz"
    g = field_from_npz(path)
    for name in ("x", "y", "u", "v", "grad", "zncc", "reason", "iterations"):
        np.testing.assert_array_equal(getattr(g, name), getattr(f, name), err_msg=name)
        assert getattr(g, name).dtype == getattr(f, name).dtype
    if second:
        np.testing.assert_array_equal(g.grad2, f.grad2)
    else:
        assert g.grad2 is None
    assert g.settings == f.settings
    assert g.n_valid == f.n_valid


def test_export_errors(tmp_path):
    f = make_field()
    with pytest.raises(ValueError, match="DisplacementField"):
        field_to_csv({"u": 1}, tmp_path / "a.csv")
    with pytest.raises(OSError, match="does not exist"):
        field_to_csv(f, tmp_path / "missing" / "a.csv")
    with pytest.raises(OSError, match="does not exist"):
        field_to_npz(f, tmp_path / "missing" / "a.npz")
    with pytest.raises(OSError, match="no such file"):
        field_from_npz(tmp_path / "nothing.npz")
    np.savez(tmp_path / "other.npz", a=np.zeros(3))
    with pytest.raises(OSError, match="not a displacement-field archive"):
        field_from_npz(tmp_path / "other.npz")
