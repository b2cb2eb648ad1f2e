"""Strain maps, the measure comparison, line plots and animations (dic.figures).

Two kinds of data: a homogeneous stretch built by hand (every strain value known in closed
form), and a small sequence tracked by dic.track on exact synthetic speckle images with a hole
in the region of interest, so that unmeasured points sit inside the measured area.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from types import SimpleNamespace

import numpy as np
import pytest

import dic
import dic.figures.common
from dic import figures
from dic.images import synth
from dic.field import DisplacementField, Reason

SHAPE = (96, 160)
CENTRE = (80.0, 48.0)
STRAINS = (0.0, 0.01, 0.025, 0.04)
SCALE = 0.05  # mm per px
STEP = 6
LAMBDA = 1.2  # stretch of the hand-made homogeneous field


def _mask():
    m = np.zeros(SHAPE, bool)
    m[14:82, 8:152] = True
    m[38:58, 70:90] = False  # a hole at the neck centre: unmeasured points inside the map
    return m


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("figures")
    pat = synth.make_speckle(SHAPE, radius=2.5, seed=11, contrast=600)
    paths = []
    for k, e in enumerate(STRAINS):
        d = synth.tensile_neck(0.6 * e, centre=CENTRE, neck_strain=0.4 * e,
                               neck_width=30.0) if k else None
        img = synth.render(pat, SHAPE, d, noise=0.5, seed=k)
        paths.append(dic.images.io.write_image(folder / f"f{k}.png", img * 16, bits=16))
    res = dic.track(paths, folder / "run.h5", subset=15, step=STEP, roi=_mask(), scale=SCALE)
    return res, paths


def _stretch_field(lam=LAMBDA, *, hole=True):
    """u = (lam - 1) (x - 50), v = 0 on a 10 px grid: F = diag(lam, 1) everywhere."""
    xs = np.arange(10.0, 101.0, 10.0)
    ys = np.arange(10.0, 71.0, 10.0)
    x, y = np.meshgrid(xs, ys)
    u = (lam - 1.0) * (x - 50.0)
    v = np.zeros_like(x)
    grad = np.zeros(x.shape + (2, 2))
    grad[..., 0, 0] = lam - 1.0
    reason = np.zeros(x.shape, np.int8)
    if hole:
        reason[3, 4] = Reason.LOW_ZNCC
    bad = reason != 0
    u[bad] = v[bad] = np.nan
    grad[bad] = np.nan
    zncc = np.where(bad, np.nan, 0.999)
    return DisplacementField(x=x, y=y, u=u, v=v, grad=grad, zncc=zncc, reason=reason,
                             iterations=np.where(bad, 0, 3).astype(np.int16),
                             settings={"subset": 21, "step": 10, "min_zncc": 0.9})


def _by_gid(ax, gid):
    return [a for a in ax.get_children() if getattr(a, "get_gid", lambda: None)() == gid]


def _render(fig):
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(int)


def _pixel(fig, ax, rgb, x, y):
    """Rendered colour at data position (x, y)."""
    dx, dy = ax.transData.transform((x, y))
    h = rgb.shape[0]
    return rgb[int(round(h - dy - 0.5)), int(round(dx - 0.5))]


# --------------------------------------------------------------------------------------------
# no colour where nothing was measured (checked on rendered pixels)
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("configuration", ["reference", "deformed"])
def test_rendered_map_shows_no_colour_where_not_measured(run, configuration):
    res, paths = run
    k = len(res) - 1
    s = res.strain(k, window=5)
    f = res.field(k)
    # uniform mid-grey picture (two corner pixels pin the grey scale to 0..1)
    grey = np.full(SHAPE, 0.5)
    grey[0, 0], grey[0, 1] = 0.0, 1.0
    alpha = 0.7
    fig, ax = figures.strain_map(s, grey, component="xx", field=f, configuration=configuration,
                                 alpha=alpha, colorbar=False, title="", figsize=(8, 5))
    fig.set_dpi(100)
    rgb = _render(fig)
    mappable = _by_gid(ax, "strain")[0]
    cmap, norm = mappable.get_cmap(), mappable.norm
    background = np.array(dic.figures.common.colormap("gray", False)(0.5)[:3]) * 255
    u = np.where(np.isfinite(f.u), f.u, 0.0) if configuration == "deformed" else 0.0 * f.u
    v = np.where(np.isfinite(f.v), f.v, 0.0) if configuration == "deformed" else 0.0 * f.v
    values = s.xx * 100.0  # shown in % (limits reach 1 %)
    measured = s.valid
    assert measured.sum() > 50 and (~measured).sum() > 10
    # measured points: the map colour laid over the grey at the chosen opacity, i.e. the
    # 'over' operator c = a c_map + (1 - a) c_image (Porter & Duff 1984, common practice);
    # 3 levels of 255 allow for 8-bit rounding at each of the two layers
    for j, i in zip(*np.nonzero(measured)):
        want = alpha * np.array(cmap(norm(values[j, i]))[:3]) * 255 + (1 - alpha) * background
        got = _pixel(fig, ax, rgb, s.x[j, i] + u[j, i], s.y[j, i] + v[j, i])
        np.testing.assert_allclose(got, want, atol=3.0)
    # unmeasured points well inside the hole (farther than 1.5 steps from any measured point,
    # whose cells move by well under a step there): exactly the grey of the picture
    mx, my = s.x[measured], s.y[measured]
    checked = 0
    for j, i in zip(*np.nonzero(~measured)):
        d = np.min(np.hypot(mx - s.x[j, i], my - s.y[j, i]))
        inside_roi = 14 <= s.y[j, i] <= 81 and 8 <= s.x[j, i] <= 151
        if d >= 1.5 * STEP and inside_roi:
            got = _pixel(fig, ax, rgb, s.x[j, i], s.y[j, i])
            np.testing.assert_allclose(got, background, atol=1.0)
            checked += 1
    assert checked >= 1


def test_unmeasured_points_are_masked_and_transparent(run):
    res, _ = run
    s = res.strain(len(res) - 1, window=5)
    fig, ax = figures.strain_map(s, component="equivalent")
    im = _by_gid(ax, "strain")[0]
    np.testing.assert_array_equal(np.ma.getmaskarray(im.get_array()), ~s.valid)
    # the 'bad' colour is fully transparent (alpha 0), whatever the map's opacity
    assert im.get_cmap()(np.ma.masked)[3] == 0.0


# --------------------------------------------------------------------------------------------
# colours, units, labels
# --------------------------------------------------------------------------------------------
def test_signed_components_diverge_about_zero_and_magnitudes_are_uniform(run):
    res, _ = run
    s = res.strain(len(res) - 1, window=5)
    for comp in ("xx", "yy", "xy", "major", "minor", "rotation"):
        _, ax = figures.strain_map(s, component=comp)
        im = _by_gid(ax, "strain")[0]
        # diverging map centred on zero for signed quantities (project rule, DESIGN.md 5)
        assert im.get_cmap().name.startswith("RdBu_r")
        assert im.norm.vmin == -im.norm.vmax
    for comp in ("equivalent", "max_shear", "nonlinear_share"):
        _, ax = figures.strain_map(s, component=comp)
        im = _by_gid(ax, "strain")[0]
        assert im.get_cmap().name.startswith("cividis")
        assert im.norm.vmin == 0.0


def test_units_labels_and_the_tensor_shear_note(run):
    res, _ = run
    s = res.strain(len(res) - 1, window=5)
    fig, ax = figures.strain_map(s, component="xy", units="microstrain")
    im = _by_gid(ax, "strain")[0]
    # 1 microstrain = 1e-6 (SI prefix micro, BIPM SI Brochure 9th ed.)
    np.testing.assert_allclose(im.get_array()[s.valid], s.xy[s.valid] * 1e6, rtol=1e-12)
    label = im.colorbar.ax.get_xlabel() + im.colorbar.ax.get_ylabel()
    assert "\u00b5\u03b5" in label and "tensor shear" in label and "Green-Lagrange" in label
    _, ax = figures.strain_map(s, component="xx", units="%")
    im = _by_gid(ax, "strain")[0]
    np.testing.assert_allclose(im.get_array()[s.valid], s.xx[s.valid] * 100.0, rtol=1e-12)
    assert "(%)" in im.colorbar.ax.get_xlabel() + im.colorbar.ax.get_ylabel()


def test_strain_limits_are_the_largest_frame_percentile(run):
    res, _ = run
    lo, hi = figures.strain_limits(res, "xx", window=5)
    # definition: largest over frames of the 99.5th percentile of |xx| (numpy.percentile)
    want = max(np.percentile(np.abs(res.strain(k, window=5).xx[res.strain(k, window=5).valid]),
                             99.5) for k in range(len(res)))
    assert hi == pytest.approx(want, rel=1e-12) and lo == -hi
    lo, hi = figures.strain_limits(res, "equivalent", window=5, frames=[1, 2])
    assert lo == 0.0 and hi > 0.0
    # the same from strain fields already computed
    fields = [res.strain(k, window=5) for k in range(len(res))]
    assert figures.strain_limits(fields, "xx")[1] == pytest.approx(want, rel=1e-12)
    # fixed limits reach the map unchanged (in the display units)
    _, ax = figures.strain_map(fields[-1], limits=(-0.05, 0.05), units="%")
    im = _by_gid(ax, "strain")[0]
    assert (im.norm.vmin, im.norm.vmax) == pytest.approx((-5.0, 5.0))


# --------------------------------------------------------------------------------------------
# closed-form checks on a homogeneous stretch
# --------------------------------------------------------------------------------------------
def test_measure_comparison_of_a_uniaxial_stretch():
    f = _stretch_field(hole=False)
    s = dic.strain_field(f, window=3)
    fig = figures.measure_comparison(s, component="xx")
    maps = [m for ax in fig.get_axes() for m in _by_gid(ax, "strain")]
    assert len(maps) == 4
    gl, inf, hen, share = maps
    lam = LAMBDA
    # Holzapfel 2000 (Nonlinear Solid Mechanics, ch. 2): uniaxial stretch lam gives
    # E = (lam^2 - 1)/2, infinitesimal lam - 1, Hencky ln lam; shown in % (limits > 1 %)
    for m, want in ((gl, (lam * lam - 1) / 2), (inf, lam - 1), (hen, math.log(lam))):
        np.testing.assert_allclose(m.get_array().compressed(), 100.0 * want, rtol=1e-9)
    # one colour scale for the three measures
    assert gl.norm.vmin == inf.norm.vmin == hen.norm.vmin
    assert gl.norm.vmax == inf.norm.vmax == hen.norm.vmax
    # nonlinear share |H^T H / 2| / |eps| = ((lam-1)^2 / 2) / (lam - 1) = (lam - 1)/2 (by hand
    # from the definition with H = diag(lam - 1, 0)), in %
    np.testing.assert_allclose(share.get_array().compressed(), 100.0 * (lam - 1) / 2,
                               rtol=1e-9)
    assert share.get_cmap().name.startswith("cividis")


def test_deformed_cells_follow_the_displacement():
    f = _stretch_field(hole=False)
    s = dic.strain_field(f, window=3)
    fig, ax = figures.strain_map(
        s, component="xx", field=f, configuration="deformed",
        gauges=[{"points": [(20.0, 30.0), (80.0, 30.0)], "label": "L"}])
    mesh = _by_gid(ax, "strain")[0]
    corners = mesh.get_coordinates()  # (ny + 1, nx + 1, 2)
    # interior corners sit midway between grid points (X = 15, 25, ...); a corner moves with
    # the mean displacement of its four points, which for the linear field is u at the corner
    # itself: x = X + (lam - 1)(X - 50) (exact for a linear function)
    inner = corners[1:-1, 1:-1, 0]
    Xref = np.arange(15.0, 100.0, 10.0)
    np.testing.assert_allclose(inner, np.broadcast_to(Xref + (LAMBDA - 1) * (Xref - 50.0),
                                                      inner.shape), atol=1e-12)
    # the gauge's end points move the same way (bilinear sampling of a linear field is exact)
    (line,) = _by_gid(ax, "gauge")
    np.testing.assert_allclose(line.get_xdata(), [20 + 0.2 * (20 - 50), 80 + 0.2 * (80 - 50)],
                               atol=1e-12)


def test_contours_gauges_and_scale_bar(run):
    res, _ = run
    s = res.strain(len(res) - 1, window=5)
    poly = [(40, 30), (120, 30), (120, 70), (40, 70)]
    fig, ax = figures.strain_map(s, component="xx", contours=4, scale=SCALE,
                                 gauges=[([(20, 48), (140, 48)], "L0"),
                                         {"points": poly, "label": "area"}])
    (cs,) = _by_gid(ax, "contours")
    data = s.xx[s.valid] * 100.0
    assert all(data.min() < lev < data.max() for lev in cs.levels)
    lines = _by_gid(ax, "gauge")
    assert len(lines) == 2
    np.testing.assert_array_equal(lines[0].get_xdata(), [20, 140])
    # a polygon is drawn closed: first point repeated at the end
    np.testing.assert_array_equal(lines[1].get_xdata(), [40, 120, 120, 40, 40])
    (bar,) = _by_gid(ax, "scale_bar")
    # view 160 px wide = 8 mm; a fifth is 1.6 mm, rounded down to the 1-2-5 series: 1 mm
    # (common practice, no source) = 20 px at 0.05 mm/px
    texts = [t.get_text() for t in bar.findobj(lambda a: hasattr(a, "get_text"))]
    assert "1 mm" in texts
    rect = [r for r in bar.findobj(lambda a: type(a).__name__ == "Rectangle")
            if r.get_width() > 1][0]
    assert rect.get_width() == pytest.approx(1.0 / SCALE)
    _, ax = figures.strain_map(s, component="xx")
    assert not _by_gid(ax, "scale_bar")


def test_map_series_draws_the_maps_strain_map_draws(run, tmp_path):
    # the fast maps of a sequence (drawn once, then only the cells, gauges and title per
    # frame) are pixel for pixel the maps of strain_map saved by save_figure, the reference
    # path (common practice, no source: blitting must not change what is drawn)
    from matplotlib.image import imread

    from dic.figures.series import MapSeries

    res, paths = run
    gauges = [([(20, 48), (140, 48)], "L0"),
              {"points": [(40, 30), (120, 30), (120, 70), (40, 70)], "label": "area"}]
    for limits, full in (((-0.2, 0.2), 1), (figures.strain_limits(res, "xx", window=5), None)):
        maps = MapSeries(paths[0], component="xx", limits=limits, scale=SCALE, gauges=gauges)
        for k in range(1, len(res)):
            s = res.strain(k, window=5)
            title = f"frame {k}\n{int(np.count_nonzero(s.valid))} points " + "x" * k
            fast = maps.save(s, tmp_path / f"fast{k}.png", title=title)
            fig, _ = figures.strain_map(s, paths[0], component="xx", limits=limits,
                                        scale=SCALE, gauges=gauges, alpha=0.85, title=title)
            plain = figures.save_figure(fig, tmp_path / f"plain{k}.png")
            np.testing.assert_array_equal(imread(fast), imread(plain))
        if full is not None:
            # limits every frame stays within: one colour bar, so one full drawing
            assert maps.full_draws == full
    with pytest.raises(OSError, match="PNG"):
        maps.save(s, tmp_path / "m.svg", title="x")


# --------------------------------------------------------------------------------------------
# other figures
# --------------------------------------------------------------------------------------------
def test_quality_map_and_valid_point_counts(run):
    res, paths = run
    f = res.field(len(res) - 1)
    fig, ax = figures.quality_map(f, dic.images.io.read_image(paths[0]), scale=SCALE)
    (im,) = _by_gid(ax, "zncc")
    np.testing.assert_array_equal(np.ma.getmaskarray(im.get_array()), ~f.valid)
    assert im.get_cmap().name.startswith("cividis") and im.norm.vmax == 1.0
    counts, total, median = figures.valid_counts(res)
    for k in range(len(res)):
        fk = res.field(k)
        # counted independently: reason code 0 means measured (dic.field.Reason)
        assert counts[k] == np.count_nonzero(fk.reason == 0)
        assert median[k] == pytest.approx(np.median(fk.zncc[fk.reason == 0]))
    # points that can be measured: subset inside the ROI and inside the reference image (the
    # reference frame, 0 here, shows which; dic.field.Reason)
    r0 = res.field(0).reason
    assert total == np.count_nonzero((r0 != Reason.OUTSIDE_ROI) & (r0 != Reason.OUTSIDE_IMAGE))
    assert counts[0] <= total
    fig = figures.valid_points_plot(res)
    ax = fig.get_axes()[0]
    np.testing.assert_array_equal(ax.get_lines()[0].get_ydata(), counts)


def test_history_figure_and_curve_figure():
    n = 6
    g1 = SimpleNamespace(name="L0", frames=np.arange(n), values=np.linspace(0, 0.05, n),
                         unit="strain")
    g2 = SimpleNamespace(name="force", frames=np.arange(n), values=np.linspace(0, 9, n),
                         unit="kN")
    fig = figures.history_figure([g1, g2], times=2.0 * np.arange(n))
    axes = fig.get_axes()
    assert len(axes) == 2  # one panel per unit
    # plain strain numbers shown in % (x 100), x axis the image times
    np.testing.assert_allclose(axes[0].get_lines()[0].get_ydata(), 100 * g1.values)
    np.testing.assert_allclose(axes[0].get_lines()[0].get_xdata(), 2.0 * np.arange(n))
    assert axes[0].get_ylabel() == "strain (%)" and axes[1].get_ylabel() == "kN"
    with pytest.raises(ValueError, match="one value per frame"):
        figures.history_figure([SimpleNamespace(name="x", frames=[0, 1], values=[0.0])])
    with pytest.raises(ValueError, match="none given"):
        figures.history_figure([])
    e = np.linspace(0, 0.1, 20)
    fig = figures.curve_figure(e, 300 * np.sqrt(e), lines=[("E", [0, 0.005], [0, 340])],
                               points=[("Rm", 0.1, 95.0)])
    ax = fig.get_axes()[0]
    np.testing.assert_allclose(ax.get_lines()[0].get_xdata(), 100 * e)  # strain in %
    assert ax.get_xlabel() == "strain (%)" and ax.get_ylabel() == "stress (MPa)"


def test_save_figure_sizes_and_formats(run, tmp_path):
    res, _ = run
    fig, _ = figures.strain_map(res.strain(1, window=5))
    png = figures.save_figure(fig, tmp_path / "m.png", dpi=50, size=(4, 3))
    from PIL import Image

    with Image.open(png) as im:  # Pillow reads the PNG header: 4 x 3 in at 50 dpi
        assert im.size == (200, 150)
    svg = figures.save_figure(fig, tmp_path / "m.svg")
    assert ET.parse(svg).getroot().tag.endswith("svg")  # well-formed XML (W3C SVG)
    pdf = figures.save_figure(fig, tmp_path / "m.pdf")
    assert pdf.read_bytes()[:5] == b"%PDF-"  # ISO 32000 file header
    with pytest.raises(ValueError, match="size"):
        figures.save_figure(fig, tmp_path / "m.png", size=(0, 3))


@pytest.mark.parametrize("kwargs, words", [
    (dict(component="exx"), "use one of: xx, yy, xy"),
    (dict(units="permille"), "microstrain"),
    (dict(configuration="deformed"), "field"),
    (dict(configuration="sideways"), "reference"),
    (dict(limits=(1, 0)), "low < high"),
    (dict(contours=0), "contours"),
    (dict(gauges=[{"points": [(1, 2)]}]), "at least two"),
    (dict(alpha=2), "alpha"),
    (dict(scale=-1), "scale"),
])
def test_strain_map_bad_input(run, kwargs, words):
    res, _ = run
    s = res.strain(1, window=5)
    with pytest.raises(ValueError, match=words):
        figures.strain_map(s, **kwargs)


def test_zz_needs_an_estimate_and_strain_must_be_a_strain_field(run):
    res, _ = run
    with pytest.raises(ValueError, match="out_of_plane"):
        figures.strain_map(res.strain(1, window=5), component="zz")
    with pytest.raises(ValueError, match="StrainField"):
        figures.strain_map(res.field(1))
    with pytest.raises(ValueError, match="frame 9 does not exist"):
        figures.strain_limits(res, frames=[9])


# --------------------------------------------------------------------------------------------
# animations
# --------------------------------------------------------------------------------------------
def test_gif_animation(run, tmp_path):
    from PIL import Image

    res, _ = run
    force = np.array([0.0, 1.5, 3.0, np.nan])
    p = figures.animate(res, tmp_path / "xx.gif", window=5, fps=4, force=force,
                        size=(6, 3.5), dpi=80)
    with Image.open(p) as im:  # read back with Pillow
        assert im.n_frames == len(res)
        w, h = im.size
        assert w % 16 == 0 and h % 16 == 0 and w >= 480 and h >= 280
        # GIF frame delays are in 1/100 s (GIF89a spec): 1/4 s per frame
        assert im.info["duration"] == pytest.approx(250, abs=10)
        assert im.info.get("loop") == 0


def test_mp4_animation(run, tmp_path):
    import imageio_ffmpeg

    res, _ = run
    p = figures.animate(res, tmp_path / "eq.mp4", component="equivalent", window=5,
                        configuration="deformed", fps=5, size=(6, 3.5), dpi=80,
                        frames=[1, 2, 3])
    # decoded by the ffmpeg program itself (imageio-ffmpeg): 3 frames at 5 per second
    n, secs = imageio_ffmpeg.count_frames_and_secs(str(p))
    assert n == 3 and secs == pytest.approx(3 / 5, abs=0.05)
    gen = imageio_ffmpeg.read_frames(str(p))
    try:
        meta = next(gen)
        first = next(gen)
    finally:
        gen.close()
    w, h = meta["size"]
    assert meta["codec"] == "h264" and meta["fps"] == pytest.approx(5.0)
    assert w % 16 == 0 and h % 16 == 0 and len(first) == w * h * 3
    with pytest.raises(OSError, match="unsupported animation type"):
        figures.animate(res, tmp_path / "x.avi")
    with pytest.raises(ValueError, match="one value per frame"):
        figures.animate(res, tmp_path / "x.gif", force=[1.0, 2.0])
