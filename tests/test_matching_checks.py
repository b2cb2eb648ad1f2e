"""Engine round two: shape function chosen by the data (neck), a-posteriori sigma, blank
reference, neighbour-consistency flag. Oracles: exactly known synthetic motion (dic.synth),
Fourier-shifted scikit-image photographs."""

import numpy as np
import pytest
from scipy import ndimage

import dic
from dic.field import Reason
from dic.images import synth
from dic.matching import median_test
from shifting import fourier_shift


def _neck_pair():
    shape = (240, 480)
    pat = synth.make_speckle(shape, radius=2.5, seed=3)
    ref = synth.render(pat, shape, bits=8)
    # 40 % extra strain over a band sech^2((X - xc) / w), w = 35 px, on 5 % uniform strain
    mot = synth.tensile_neck(0.05, centre=(240, 120), neck_strain=0.40, neck_width=35.0,
                             offset=(1.3, -0.4))
    return ref, synth.render(pat, shape, mot, bits=8), mot


def test_neck_with_default_settings():
    ref, dfm, mot = _neck_pair()
    roi = (70, 30, 340, 180)    # x, y, width, height: subsets stay inside both images
    f = dic.correlate(ref, dfm, subset=25, step=10, roi=roi)
    inside = f.reason != Reason.OUTSIDE_ROI
    ut, vt = mot(f.x, f.y)      # exact motion (dic.synth.tensile_neck, analytic)
    err = np.hypot(f.u - ut, f.v - vt)[f.valid]
    # bars from the project issue: >= 95 % of ROI points valid, 95th percentile <= 0.05 px
    assert f.valid[inside].mean() >= 0.95
    assert np.percentile(err, 95) <= 0.05
    # the neck is matched to second order, the uniform part to first order
    assert f.settings["shape_function"] == "auto"
    so = f.shape_order
    near = np.abs(f.x - 240) <= 30
    assert np.all(so[f.valid & near] == 2)
    assert np.mean(so[f.valid & (np.abs(f.x - 240) >= 120)] == 1) >= 0.9
    assert np.all(so[~f.valid] == 0)
    # first order alone is biased there (project issue: 0.27 px on a case like this)
    a = dic.correlate(ref, dfm, subset=25, step=10, roi=roi, shape_function="affine")
    ea = np.hypot(a.u - ut, a.v - vt)[a.valid]
    assert np.percentile(ea, 95) > 0.1


@pytest.mark.parametrize("name, noise, lo, hi", [
    ("gravel", 0.0, 0.5, 0.9), ("gravel", 2.0, 0.5, 0.9), ("grass", 0.0, 0.5, 0.9),
    ("grass", 2.0, 0.5, 0.9), ("coins", 0.0, 0.5, 0.9), ("coins", 2.0, 0.5, 0.9),
    ("camera", 0.0, 0.5, 0.9), ("camera", 2.0, 0.5, 0.9), ("astronaut", 0.0, 0.5, 0.9),
    ("astronaut", 2.0, 0.5, 0.9), ("moon", 0.0, 0.5, 0.9), ("moon", 2.0, 0.5, 0.9),
    ("brick", 0.0, 0.5, 0.9), ("brick", 2.0, 0.5, 0.9)])
def test_posterior_sigma_is_calibrated_on_photographs(name, noise, lo, hi):
    skdata = pytest.importorskip("skimage.data")
    img = getattr(skdata, name)()
    if img.ndim == 3:
        img = img @ np.array([0.299, 0.587, 0.114])
    img = img.astype(float)
    rng = np.random.default_rng(5)
    dx, dy = 0.25, 0.2
    ref = img + rng.normal(0, noise, img.shape)
    dfm = fourier_shift(img, dx, dy) + rng.normal(0, noise, img.shape)
    h, w = img.shape
    f = dic.correlate(ref, dfm, subset=21, step=8, roi=(40, 40, w - 80, h - 80))
    ok = f.valid
    assert ok.sum() >= 300
    assert f.settings["sigma_from"] == "residual"
    r = np.concatenate([np.abs(f.u - dx)[ok] / f.std_u[ok],
                        np.abs(f.v - dy)[ok] / f.std_v[ok]])
    # a calibrated standard deviation of a normal error gives median |e| / sigma = 0.674
    # (normal distribution); the project issue's calibration target is 0.5-0.9, with and
    # without noise. Without noise the error is the interpolation's bias, which the residual
    # does not show (1.7-2.9 without the bias term, dic.matching.interpolation_bias). Brick
    # with noise: 0.76 (0.98 before dic.matching.slow_convergence_factor: on its faint
    # texture many matches crawl to their solution, and the Hessian overstates how sure
    # they are).
    assert lo <= np.median(r) <= hi


@pytest.mark.parametrize("seed", [5, 7])
def test_slowly_converged_matches_get_wider_standard_deviations(seed, monkeypatch):
    # coarse speckle (6 px radius) against a 25 px subset with 2 grey levels of noise under an
    # exact translation (rendered analytically, dic.images.synth): the matches that take 10
    # or more Gauss-Newton iterations are off by more than their Hessian says (median
    # |e| / sigma about 1.7-1.9 without dic.matching.slow_convergence_factor); with it they
    # meet the calibration target of the project issue, 0.5-0.9, widened to 0.4-1.2 for a
    # subgroup of about 200 points (a median of 200 samples scatters by roughly 10 %)
    import dic.matching
    from dic.matching import slow_convergence_factor

    shape = (400, 400)
    pat = synth.make_speckle(shape, radius=6, seed=seed)
    dx, dy = 0.37, -0.21
    ref = synth.render(pat, shape, noise=2, seed=1)
    dfm = synth.render(pat, shape, synth.translation(dx, dy), noise=2, seed=2)

    def ratios(f, sel):
        return np.r_[np.abs(f.u - dx)[sel] / f.std_u[sel], np.abs(f.v - dy)[sel] / f.std_v[sel]]

    f = dic.correlate(ref, dfm, subset=25, step=8, shape_function="affine")
    slow = f.valid & (f.iterations >= 10)
    assert slow.sum() >= 100
    assert 0.4 <= np.median(ratios(f, slow)) <= 1.2
    # the quick matches are calibrated too (the factor is 1 up to 3 iterations near the
    # solution)
    assert 0.5 <= np.median(ratios(f, f.valid & (f.iterations <= 3))) <= 0.9
    # the same matches with the factor held at 1: the slow ones are off by more than their
    # standard deviations say, so the factor is what calibrates them
    monkeypatch.setattr(dic.matching, "slow_convergence_factor",
                        lambda n: np.ones(np.shape(n)))
    g = dic.correlate(ref, dfm, subset=25, step=8, shape_function="affine")
    np.testing.assert_array_equal(g.u, f.u)
    assert np.median(ratios(g, slow)) >= 1.4
    np.testing.assert_allclose(slow_convergence_factor([1, 3, 6, 9]),
                               [1.0, 1.0, np.sqrt(2.0), np.sqrt(3.0)])


def test_blank_reference_is_flat_with_a_warning():
    ref = np.full((120, 140), 80.0)
    with pytest.warns(UserWarning, match="too little texture"):
        f = dic.correlate(ref, ref.copy(), subset=21, step=10)
    inside = f.reason != Reason.OUTSIDE_IMAGE
    # project issue: a featureless reference gives FLAT, not NOT_REACHED
    assert inside.any() and np.all(f.reason[inside] == Reason.FLAT)


@pytest.mark.parametrize("noise", [0.5, 2.0])
def test_blank_surface_photographed_with_camera_noise_is_flat(noise):
    # A blank surface as a real camera sees it: a constant grey plus independent noise in each
    # image, rounded to whole grey levels. The noise looks like texture to any one-image rule,
    # but no match can lock onto it; the reason to report is the missing texture (FLAT, with
    # the warning), not 'not reached' (project issue). A subset of pure noise varies by the
    # noise itself (common practice, no source).
    rng = np.random.default_rng(4)
    ref = np.round(80.0 + rng.normal(0.0, noise, (150, 170)))
    dfm = np.round(80.0 + rng.normal(0.0, noise, (150, 170)))
    with pytest.warns(UserWarning, match="too little texture"):
        f = dic.correlate(ref, dfm, subset=21, step=10)
    inside = f.reason != Reason.OUTSIDE_IMAGE
    assert inside.sum() >= 100 and np.all(f.reason[inside] == Reason.FLAT)


def test_textured_points_that_fail_keep_their_own_reason():
    # the other side: speckle whose middle band is replaced by unrelated speckle in the
    # deformed image cannot match there, but it is textured: those points are not FLAT
    shape = (200, 200)
    pat = synth.make_speckle(shape, radius=2.5, seed=3)
    ref = synth.render(pat, shape, bits=8)
    dfm = synth.render(pat, shape, synth.translation(0.6, 0.3), bits=8)
    other = synth.render(synth.make_speckle(shape, radius=2.5, seed=9), shape, bits=8)
    dfm[80:120] = other[80:120]
    f = dic.correlate(ref, dfm, subset=21, step=10)
    band = (f.y >= 90) & (f.y <= 110)
    assert band.any() and not f.valid[band].any()
    assert not np.any(f.reason[band] == Reason.FLAT)


def test_median_test_on_a_known_outlier():
    # Westerweel & Scarano (2005): a linear field has zero normalised residual everywhere,
    # also at the edge of the region when the neighbours carry their gradients; one point
    # displaced by 2 px is flagged, and only it
    y, x = np.mgrid[0:9, 0:11] * 10.0
    g = np.zeros((9, 11, 2, 2))
    g[..., 0, 0], g[..., 1, 1] = 0.05, -0.02
    u, v = 0.05 * x + 1.0, -0.02 * y
    u[4, 5] += 2.0
    out = median_test(x, y, u, v, g, np.ones(u.shape, bool))
    assert out[4, 5] and out.sum() == 1


def test_points_straddling_a_flat_patch_are_not_off():
    # A subset that straddles a flat patch can pass ZNCC and still be off (project issue);
    # such points are invalid (INCONSISTENT, FLAT or another reason), never ~2 px wrong.
    shape = (200, 200)
    pat = synth.make_speckle(shape, radius=2.5, seed=21)
    dx, dy = 2.3, -1.7
    ref = synth.render(pat, shape, bits=8)
    dfm = synth.render(pat, shape, synth.translation(dx, dy), bits=8)
    rng = np.random.default_rng(2)
    # a flat patch with faint noise in both images (its own noise, so it matches nothing)
    ref[60:140, 60:140] = 120.0 + rng.normal(0, 0.5, (80, 80))
    dfm[60 + 2:140 + 2, 60 - 2:140 - 2] = 120.0 + rng.normal(0, 0.5, (80, 80))
    f = dic.correlate(ref, dfm, subset=21, step=5)
    err = np.hypot(f.u - dx, f.v - dy)[f.valid]
    # exact translation as oracle; bars from the project issue for real photographs: none
    # off by more than 2 px in the flat-patch case, at least 98 % within 0.5 px
    assert err.max() < 2.0
    assert np.mean(err <= 0.5) >= 0.98
    assert f.n_valid >= 300
    # the neighbour check fires here (it caught a point 2.7 px off while this test was written)
    assert np.count_nonzero(f.reason == Reason.INCONSISTENT) >= 1


def test_noisy_low_texture_photograph_is_measured():
    # skimage.data.moon, shifted exactly by a Fourier phase ramp (scipy.ndimage.fourier_shift)
    # with 2 grey levels of noise: its ZNCC stays below 0.9 over much of the picture although
    # the match is well determined. With only the ZNCC rule 7 % of the points were valid (the
    # low-ZNCC points stopped the propagation); bars from the project issue for real
    # photographs: >= 98 % within 0.5 px, <= 1 % off by more than 2 px
    skdata = pytest.importorskip("skimage.data")
    img = skdata.moon().astype(float)
    rng = np.random.default_rng(5)
    dx, dy = 0.37, -0.61
    ref = img + rng.normal(0, 2.0, img.shape)
    dfm = fourier_shift(img, dx, dy) + rng.normal(0, 2.0, img.shape)
    h, w = img.shape
    f = dic.correlate(ref, dfm, subset=21, step=8, roi=(40, 40, w - 80, h - 80))
    inside = f.reason != Reason.OUTSIDE_ROI
    err = np.hypot(f.u - dx, f.v - dy)[f.valid]
    assert f.valid[inside].mean() >= 0.75
    assert np.mean(err <= 0.5) >= 0.98
    assert np.mean(err > 2.0) <= 0.01


def test_photograph_under_a_smooth_nonuniform_field():
    # skimage.data.astronaut (grey) deformed by an exactly known smooth field: the deformed
    # image samples the reference's cubic spline (scipy.ndimage.map_coordinates, order 3, on a
    # 4 x upsampled copy from scipy.ndimage.zoom) at the X solving x = X + u(X); 2 grey levels
    # of noise in both. Bars from the project issue for real photographs: >= 98 % of the valid
    # points within 0.5 px, <= 1 % off by more than 2 px, median |error| / sigma in 0.3-1.5;
    # valid share 94 % here (80 % with the ZNCC rule alone; the part of the picture that is
    # flat or out of focus keeps it under the 95 %)
    skdata = pytest.importorskip("skimage.data")
    img = skdata.astronaut().astype(float).mean(axis=2)
    h, w = img.shape

    def field(X, Y):
        return (1.3 + 1.5 * np.sin(2 * np.pi * X / w) * np.cos(np.pi * Y / h),
                -0.8 + 1.0 * np.cos(2 * np.pi * Y / h) * np.sin(np.pi * X / w))

    up = ndimage.zoom(img, 4, order=3)
    yy, xx = np.mgrid[0:h, 0:w].astype(float)
    X, Y = xx.copy(), yy.copy()
    for _ in range(30):         # fixed point of X = x - u(X) (gradients below 0.03)
        u, v = field(X, Y)
        X, Y = xx - u, yy - v

    def sample(xs, ys):
        return ndimage.map_coordinates(up, [ys * 4 + 1.5, xs * 4 + 1.5], order=3, mode="mirror")

    rng = np.random.default_rng(7)
    ref = sample(xx, yy) + rng.normal(0, 2.0, img.shape)
    dfm = sample(X, Y) + rng.normal(0, 2.0, img.shape)
    f = dic.correlate(ref, dfm, subset=21, step=8, roi=(30, 30, w - 60, h - 60))
    ut, vt = field(f.x, f.y)
    ok = f.valid
    inside = f.reason != Reason.OUTSIDE_ROI
    err = np.hypot(f.u - ut, f.v - vt)[ok]
    assert ok[inside].mean() >= 0.9
    assert np.mean(err <= 0.5) >= 0.98
    assert np.mean(err > 2.0) <= 0.01
    r = np.concatenate([np.abs(f.u - ut)[ok] / f.sigma_u[ok],
                        np.abs(f.v - vt)[ok] / f.sigma_v[ok]])
    assert 0.3 <= np.median(r) <= 1.5


def _smooth_points(disp, x, y, half):
    """Grid points whose subset sees a finite, nearly planar ground-truth disparity (largest
    deviation from its least-squares plane under 0.5 px) and whose matched subset lies inside
    the right image too."""
    d = np.arange(-half, half + 1.0)
    dx, dy = (a.ravel() for a in np.meshgrid(d, d))
    A = np.column_stack([np.ones(dx.size), dx, dy])
    P = A @ np.linalg.pinv(A)
    h, w = disp.shape
    out = np.zeros(x.shape, bool)
    for k in np.ndindex(x.shape):
        cx, cy = int(x[k]), int(y[k])
        if not (half <= cx < w - half and half <= cy < h - half):
            continue
        win = disp[cy - half:cy + half + 1, cx - half:cx + half + 1].ravel()
        if not np.all(np.isfinite(win)) or np.abs(win - P @ win).max() >= 0.5:
            continue
        out[k] = half <= cx - disp[cy, cx] < w - half
    return out


def test_photographed_stereo_pair_smooth_surfaces():
    # A real photographed pair with independent ground truth: the rectified Middlebury 2014
    # motorcycle scene as shipped with scikit-image (Scharstein et al., GCPR 2014), left ->
    # right image, u = -disparity, v = 0. Measured on the points of smooth surfaces.
    skdata = pytest.importorskip("skimage.data")
    cv2 = pytest.importorskip("cv2")
    left, right, disp = skdata.stereo_motorcycle()
    L, R = dic.read_image(left), dic.read_image(right)
    f = dic.correlate(L, R, subset=21, step=10, search=80)
    smooth = _smooth_points(disp, f.x, f.y, 10)
    assert smooth.sum() >= 800
    ok = f.valid & smooth
    d = disp[f.y.astype(int), f.x.astype(int)]
    eu, ev = (f.u + d)[ok], f.v[ok]
    err = np.hypot(eu, ev)
    # bars from the project issue for real photographs: >= 95 % of the points measured (95.8 %
    # while this was written; 90 % before uncertain points were matched from anchors, the
    # propagation growing through well-determined ones only), >= 98 % within 0.5 px, <= 1 %
    # off by more than 2 px
    assert np.mean(err <= 0.5) >= 0.98
    assert np.mean(err > 2.0) <= 0.01
    assert f.valid[smooth].mean() >= 0.95
    # The ground truth and this pair disagree by an offset along x of about 0.07 px that
    # OpenCV's semi-global block matcher (an independent matcher) finds too, so it lies in the
    # data, not in either matcher.
    sg = cv2.StereoSGBM_create(minDisparity=0, numDisparities=96, blockSize=7, P1=8 * 49,
                               P2=32 * 49, mode=cv2.STEREO_SGBM_MODE_HH)
    ds = sg.compute(cv2.cvtColor(left, cv2.COLOR_RGB2GRAY),
                    cv2.cvtColor(right, cv2.COLOR_RGB2GRAY)).astype(float) / 16.0
    s = ds[f.y.astype(int), f.x.astype(int)][ok]
    sgbm_offset = np.median((d[ok] - s)[s > 0])
    offset = np.median(eu)
    assert abs(offset - sgbm_offset) <= 0.03
    # It is where the map was sampled: both matchers' differences from it go as about 0.375 x
    # the disparity's slope along y (ours 0.39, SGBM's 0.36; the scene's floor and wall slope
    # by -0.17 px/px along y), the offset a map taken from every fourth full-size pixel has
    # against images averaged over 4 x 4 blocks, whose pixel centres lie 1.5 full-size pixels
    # further on (scikit-image documents the block averaging of the images; the sampling of
    # the map is our reading of the data). Read at those centres the map leaves no offset.
    with np.errstate(invalid="ignore"):
        slope_y, slope_x = (g[f.y.astype(int), f.x.astype(int)][ok] for g in np.gradient(disp))
    fit = np.linalg.lstsq(np.column_stack([np.ones(eu.size), slope_x, slope_y]), -eu,
                          rcond=None)[0]
    # (what is left of the offset, at most half of it, is within the fit's spread: the slope
    # along y varies little over these surfaces)
    assert abs(fit[0]) <= 0.035 and 0.25 <= fit[2] <= 0.5
    from scipy import ndimage

    shifted = ndimage.map_coordinates(disp, [f.y[ok] + 0.375, f.x[ok] + 0.375], order=1)
    eu_true = f.u[ok] + shifted
    assert abs(np.median(eu_true)) <= 0.03
    # the bar: median |error| / sigma_u between 0.3 and 1.5 (v is left out: the pair's
    # rectification leaves a small varying vertical offset, 0.03-0.09 px, that is not error)
    r = np.abs(eu_true) / f.std_u[ok]
    assert 0.3 <= np.median(r) <= 1.5
    # a point whose subset and its true match lie at least 20 px inside both images is not
    # reported OUTSIDE_IMAGE: a match that wandered out from there diverged (45 such points,
    # on a dark patch of floor whose subsets hardly correlate at the true disparity, were
    # reported outside the image before; 1 is left, whose nearest measured neighbour, across
    # a depth step, extrapolates out of the image)
    h, w = disp.shape
    xi, yi = f.x.astype(int), f.y.astype(int)
    with np.errstate(invalid="ignore"):
        dd = disp[yi, xi]
        inner = np.minimum.reduce([xi - 10, w - 11 - xi, yi - 10, h - 11 - yi, xi - dd - 10,
                                   w - 11 - (xi - dd)]) >= 20
    assert np.count_nonzero(inner & (f.reason == Reason.OUTSIDE_IMAGE)) <= 2
    print(f"motorcycle: {f.valid[smooth].mean():.3f} of {smooth.sum()} smooth points measured, "
          f"{np.mean(err <= 0.5):.4f} within 0.5 px; offsets {offset:.3f} (ours), "
          f"{sgbm_offset:.3f} (SGBM) px; slope coefficient {fit[2]:.3f}; median |e| / sigma "
          f"{np.median(r):.2f} against the map read at the block centres, "
          f"{np.median(np.abs(eu) / f.std_u[ok]):.2f} as shipped")


def test_photographed_pair_sigma_predicts_the_scatter_between_subset_sizes():
    # A check of sigma on a real photographed pair that needs no ground truth (the motorcycle
    # pair, as above): each point of smooth surfaces matched with 21 px and with 41 px
    # subsets. The two matches differ by about what their standard deviations say. The
    # errors of the two are positively correlated (the small subset lies inside the large
    # one), so an honest sigma gives a median |difference| / sqrt(sigma_21^2 + sigma_41^2)
    # somewhat below the 0.674 of independent normal errors (normal distribution): 0.57 when
    # this was written, and 0.56 for 15 and 31 px. A sigma half as large would give about
    # 1.1, one twice as large about 0.29. The errors of both against the ground truth share
    # a systematic part (a median -0.027 px along x after the map is read at the block
    # centres, and 0.03 px along y at every subset size) that lies in the data, not in the
    # random error that sigma describes.
    skdata = pytest.importorskip("skimage.data")
    left, right, disp = skdata.stereo_motorcycle()
    L, R = dic.read_image(left), dic.read_image(right)
    got = {}
    for subset in (21, 41):
        f = dic.correlate(L, R, subset=subset, step=5, search=80)
        k = f.valid & _smooth_points(disp, f.x, f.y, 20)
        got[subset] = {(int(a), int(b)): (u, s) for a, b, u, s in
                       zip(f.x[k], f.y[k], f.u[k], f.std_u[k])}
    common = sorted(set(got[21]) & set(got[41]))
    assert len(common) >= 1500
    a, b = (np.array([got[s][p] for p in common]) for s in (21, 41))
    r = np.abs(a[:, 0] - b[:, 0]) / np.hypot(a[:, 1], b[:, 1])
    assert 0.4 <= np.median(r) <= 0.9
