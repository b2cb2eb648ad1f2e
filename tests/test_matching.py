"""Accuracy of the subset-matching engine on images whose motion is exactly known.

Synthetic images come from ``dic.images.synth``: analytic Gaussian-blob speckle evaluated at the exact
reference position of every pixel (Zhou & Goodson, Opt. Eng. 40 (2001) 1613), so no
interpolation is involved in making them. Real texture comes from ``skimage.data.gravel``,
shifted exactly by a Fourier phase ramp (``scipy.ndimage.fourier_shift``).
"""

import numpy as np
import pytest

import dic
from dic.images import synth
from dic.field import Reason

SHAPE = (200, 200)


def _pattern(radius, seed=3, shape=SHAPE):
    return synth.make_speckle(shape, radius=radius, seed=seed)


@pytest.fixture(scope="module")
def speckle():
    pat = _pattern(2.5)
    return pat, synth.render(pat, SHAPE)


@pytest.mark.parametrize("radius", [2.0, 2.5, 3.0])
def test_subpixel_translation_sweep_bias(radius):
    # Bar from the project issue: noise-free subpixel translation sweep 0..1 px in 0.1 px
    # steps, 21 px subsets, speckle radius 2-3 px: worst |mean error| <= 0.002 px. The known
    # translation of the analytic speckle (Zhou & Goodson 2001) is the oracle.
    pat = _pattern(radius)
    ref = synth.render(pat, SHAPE)
    worst = 0.0
    for s in np.round(np.arange(0.0, 1.0001, 0.1), 10):
        dx, dy = s, -0.5 * s
        dfm = synth.render(pat, SHAPE, synth.translation(dx, dy))
        f = dic.correlate(ref, dfm, subset=21, step=10)
        assert f.n_valid >= 0.8 * f.n_points
        worst = max(worst, abs(np.nanmean(f.u) - dx), abs(np.nanmean(f.v) - dy))
    assert worst <= 0.002


def test_homogeneous_affine_deformation(speckle):
    # Bar from the project issue: 1 % stretch, 0.5 % shear, subpixel offset, noise-free:
    # displacement RMS error <= 0.002 px and gradient error <= 2e-4 at every point. The
    # homogeneous field of dic.images.synth.homogeneous is the oracle (exact analytic images).
    pat, ref = speckle
    F = np.array([[1.01, 0.005], [0.0, 1.0]])
    c, off = (100.0, 100.0), (0.31, -0.47)
    dfm = synth.render(pat, SHAPE, synth.homogeneous(F, centre=c, offset=off))
    f = dic.correlate(ref, dfm, subset=21, step=10)
    ok = f.valid
    assert ok.sum() >= 0.9 * np.count_nonzero(f.reason != Reason.OUTSIDE_IMAGE)
    ut = (F[0, 0] - 1) * (f.x - c[0]) + F[0, 1] * (f.y - c[1]) + off[0]
    vt = F[1, 0] * (f.x - c[0]) + (F[1, 1] - 1) * (f.y - c[1]) + off[1]
    rms = np.sqrt(np.mean((f.u[ok] - ut[ok]) ** 2 + (f.v[ok] - vt[ok]) ** 2) / 2)
    assert rms <= 0.002
    grad_err = np.abs(f.grad[ok] - (F - np.eye(2)))
    assert grad_err.max() <= 2e-4


def test_second_order_shape_function_on_quadratic_field():
    # u = a (X - xc)^2: the second-order shape function holds the field exactly, so u, du/dx and
    # d2u/dx2 = 2a are recovered (analytic field as oracle); the affine one cannot hold the
    # curvature, so its displacement error is larger (Schreier & Sutton, Exp. Mech. 42 (2002)
    # 303: undermatched shape functions).
    a, xc = 2e-4, 100.0
    fu = lambda X, Y: a * (X - xc) ** 2
    fv = lambda X, Y: np.zeros_like(X) + 0.2
    jac = lambda X, Y: (2 * a * (X - xc), np.zeros_like(X), np.zeros_like(X), np.zeros_like(X))
    pat = _pattern(2.5, seed=5)
    ref = synth.render(pat, SHAPE)
    dfm = synth.render(pat, SHAPE, synth.from_function(fu, fv, jacobian=jac))
    q = dic.correlate(ref, dfm, subset=31, step=10, shape_function="quadratic")
    aff = dic.correlate(ref, dfm, subset=31, step=10, shape_function="affine")
    ok = q.valid & aff.valid
    assert ok.sum() >= 50
    ut = a * (q.x - xc) ** 2
    err_q = np.abs(q.u[ok] - ut[ok])
    err_a = np.abs(aff.u[ok] - ut[ok])
    # subset 31 px: the affine fit of a parabola over the subset is biased by
    # a * <dx^2> = a * (15 * 16 / 3) = 0.016 px at every point (common practice, no source:
    # least-squares fit of a parabola by a line over a symmetric window)
    assert np.median(err_a) > 0.005
    assert err_q.max() <= 0.003
    assert np.abs(q.grad[ok][:, 0, 0] - 2 * a * (q.x[ok] - xc)).max() <= 3e-4
    assert np.abs(q.grad2[ok][:, 0, 0] - 2 * a).max() <= 2e-5


def _sssig_u(ref, xs, ys, half):
    # SSSIG: sum of squared x-gradients over the subset (Pan et al., Opt. Express 16 (2008)
    # 7037), gradients by numpy's central differences of the noise-free image
    gy, gx = np.gradient(ref)
    out = np.empty(len(xs))
    for k, (x, y) in enumerate(zip(xs, ys)):
        out[k] = np.sum(gx[y - half:y + half + 1, x - half:x + half + 1] ** 2)
    return out


def test_random_error_matches_sssig_bound():
    # Pan et al., Opt. Express 16 (2008) 7037: with Gaussian noise sigma in both images the
    # standard deviation of u is sqrt(2) sigma / sqrt(SSSIG). Bar from the project issue: the
    # measured random error is within 1.2 x that bound. Many noise draws on a fixed pattern;
    # per-point variance over draws, pooled over points (the ratio of variances has a sampling
    # spread of about sqrt(2/(draws*points)) ~ 1 %, so the bounds below cannot fail by chance).
    sigma, draws = 2.0, 24
    pat = _pattern(2.5, seed=8, shape=(160, 160))
    shift = (0.35, -0.2)
    ref0 = synth.render(pat, (160, 160))
    dfm0 = synth.render(pat, (160, 160), synth.translation(*shift))
    us = []
    for k in range(draws):
        rng = np.random.default_rng(100 + k)
        ref = ref0 + rng.normal(0, sigma, ref0.shape)
        dfm = dfm0 + rng.normal(0, sigma, ref0.shape)
        f = dic.correlate(ref, dfm, subset=21, step=12)
        us.append(f.u)
    us = np.array(us)
    ok = np.all(np.isfinite(us), axis=0)
    assert ok.sum() >= 50
    xs, ys = f.x[ok].astype(int), f.y[ok].astype(int)
    predicted = np.sqrt(2.0) * sigma / np.sqrt(_sssig_u(ref0, xs, ys, 10))
    measured = us[:, ok].std(axis=0, ddof=1)
    ratio = np.sqrt(np.mean(measured ** 2) / np.mean(predicted ** 2))
    assert ratio <= 1.2
    # and it is a real measurement of the noise, not a suppressed one (the bound is the
    # first-order prediction, which a least-squares matcher cannot beat by much)
    assert ratio >= 0.7
    # no bias from the noise
    assert abs(np.mean(us[:, ok]) - shift[0]) <= 0.003


def _fourier_shifted_gravel(dx, dy):
    from skimage import data

    from shifting import fourier_shift

    img = data.gravel().astype(np.float64)
    return img, fourier_shift(img, dx, dy)


def test_real_texture_fourier_shift_and_opencv_lk():
    # Real texture (skimage.data.gravel) shifted exactly by a Fourier phase ramp
    # (scipy.ndimage.fourier_shift): bar from the project issue, RMS error <= 0.01 px and no
    # worse than OpenCV's calcOpticalFlowPyrLK on the same points. The phase ramp wraps the
    # image around, so the ROI keeps 40 px away from the borders.
    import cv2

    dx, dy = 0.43, -0.27
    ref, dfm = _fourier_shifted_gravel(dx, dy)
    rows, cols = ref.shape
    f = dic.correlate(ref, dfm, subset=21, step=16, roi=(40, 40, cols - 41, rows - 41))
    ok = f.valid
    assert ok.sum() >= 0.95 * np.count_nonzero(f.reason != Reason.OUTSIDE_ROI)
    err = np.sqrt(np.mean((f.u[ok] - dx) ** 2 + (f.v[ok] - dy) ** 2))
    assert err <= 0.01
    # OpenCV pyramidal Lucas-Kanade on the same points, same window, 8-bit input as it needs
    pts = np.stack([f.x[ok], f.y[ok]], axis=1).astype(np.float32).reshape(-1, 1, 2)
    a8 = np.clip(np.rint(ref), 0, 255).astype(np.uint8)
    b8 = np.clip(np.rint(dfm), 0, 255).astype(np.uint8)
    nxt, st, _ = cv2.calcOpticalFlowPyrLK(a8, b8, pts, None, winSize=(21, 21))
    d = (nxt - pts).reshape(-1, 2)[st.ravel() == 1]
    err_lk = np.sqrt(np.mean((d[:, 0] - dx) ** 2 + (d[:, 1] - dy) ** 2))
    assert err <= err_lk


def test_large_motion_with_stretch():
    # Bar from the project issue: 40 px translation plus 5 % stretch: >= 99 % of interior
    # points valid and within 0.01 px of the exact field (dic.images.synth.homogeneous as oracle).
    shape = (240, 320)
    pat = synth.make_speckle(shape, radius=2.5, seed=21)
    ref = synth.render(pat, shape)
    F = np.diag([1.05, 1.0])
    c, off = (160.0, 120.0), (40.0, 6.0)
    dfm = synth.render(pat, shape, synth.homogeneous(F, centre=c, offset=off))
    f = dic.correlate(ref, dfm, subset=21, step=10)
    ut = 0.05 * (f.x - c[0]) + off[0]
    vt = np.full_like(f.y, off[1])
    # interior: the reference subset and the deformed subset, each with the interpolation
    # margin, stay inside the image
    half, margin = 10, 6
    xd, yd = f.x + ut, f.y + vt
    rows, cols = shape
    interior = ((f.x - half - margin >= 0) & (f.x + half + margin <= cols - 1)
                & (f.y - half - margin >= 0) & (f.y + half + margin <= rows - 1)
                & (xd - half * 1.05 - margin >= 0) & (xd + half * 1.05 + margin <= cols - 1)
                & (yd - half - margin >= 0) & (yd + half + margin <= rows - 1))
    assert interior.sum() >= 100
    ok = f.valid & interior
    assert ok.sum() >= 0.99 * interior.sum()
    err = np.hypot(f.u - ut, f.v - vt)
    assert np.all(err[ok] <= 0.01)
    # material moved out of the frame is reported as such, not as 'not reached'
    assert np.all(f.reason[~f.valid] == Reason.OUTSIDE_IMAGE)


def test_flat_region_and_crack_are_invalid_elsewhere_correct(speckle):
    # A region without texture and a region whose content is replaced ("crack") give invalid
    # points there and correct points elsewhere (project issue; the known translation is the
    # oracle).
    pat, ref = speckle
    ref = ref.copy()
    ref[20:80, 20:80] = 100.0                    # no texture in the reference
    dx, dy = 0.6, 0.3
    dfm = synth.render(pat, SHAPE, synth.translation(dx, dy))
    dfm[20:80, 20:80] = 100.0
    rng = np.random.default_rng(0)
    other = synth.render(synth.make_speckle(SHAPE, radius=2.5, seed=99), SHAPE)
    dfm[120:180, 110:170] = other[120:180, 110:170]    # content replaced
    f = dic.correlate(ref, dfm, subset=21, step=10)
    x, y = f.x, f.y
    # points whose whole subset (half-width 10) lies in the flat or in the replaced region
    in_flat = (x >= 30) & (x <= 69) & (y >= 30) & (y <= 69)
    in_crack = (x >= 120) & (x <= 159) & (y >= 130) & (y <= 169)
    assert in_flat.sum() >= 9 and in_crack.sum() >= 9
    assert not f.valid[in_flat].any()
    assert set(np.unique(f.reason[in_flat])) <= {Reason.FLAT}
    assert not f.valid[in_crack].any()
    assert np.all(np.isnan(f.u[~f.valid])) and np.all(np.isnan(f.zncc[~f.valid]))
    # far from both regions (no subset overlap), everything is measured and right
    clear = ~((x >= 0) & (x <= 100) & (y >= 0) & (y <= 100)) \
        & ~((x >= 100) & (y >= 100)) & (f.reason != Reason.OUTSIDE_IMAGE)
    assert f.valid[clear].all()
    assert np.abs(f.u[clear] - dx).max() <= 0.01
    assert np.abs(f.v[clear] - dy).max() <= 0.01
    del rng


def test_seeds_islands_and_user_seed(speckle):
    # Two disjoint parts of the ROI: each gets its own seed, so both are measured. A seed given
    # by the user, with or without a displacement guess, works (known translation as oracle).
    pat, ref = speckle
    dx, dy = 3.4, -2.2
    dfm = synth.render(pat, SHAPE, synth.translation(dx, dy))
    mask = np.zeros(SHAPE, bool)
    mask[10:90, 10:190] = True
    mask[110:190, 10:190] = True
    f = dic.correlate(ref, dfm, subset=21, step=10, roi=mask)
    top = f.y < 100
    assert f.valid[top].sum() >= 10 and f.valid[~top].sum() >= 10
    assert np.nanmax(np.abs(f.u - dx)) <= 0.01
    for seeds in ([(100, 100)], [(100, 100, dx, dy)], [(50, 50), (150, 150)]):
        g = dic.correlate(ref, dfm, subset=21, step=10, seeds=seeds)
        assert g.n_valid >= 0.8 * g.n_points
        assert np.nanmax(np.abs(g.u - dx)) <= 0.01


def test_island_cut_off_by_a_band_gets_its_own_seed(speckle):
    # A connected ROI whose lower part can only be reached across a band where the content is
    # replaced: propagation stops at the band and the part beyond it is seeded separately.
    pat, ref = speckle
    dx, dy = 1.3, 0.4
    dfm = synth.render(pat, SHAPE, synth.translation(dx, dy))
    other = synth.render(synth.make_speckle(SHAPE, radius=2.5, seed=77), SHAPE)
    dfm[95:125, :] = other[95:125, :]
    f = dic.correlate(ref, dfm, subset=21, step=10)
    # points whose subset (half-width 10) stays clear of the band, above and below it
    below = f.y >= 135
    above = f.y <= 84
    inside = (f.y >= 105) & (f.y <= 114)
    assert f.valid[below].mean() >= 0.8 and f.valid[above].mean() >= 0.8
    assert not f.valid[inside].any()
    clear = f.valid & (below | above)
    assert np.abs(f.u[clear] - dx).max() <= 0.01
    assert np.abs(f.v[clear] - dy).max() <= 0.01


def test_textured_patch_off_centre_of_a_blank_roi_is_found():
    # A speckled specimen filling a small, off-centre part of an otherwise blank image (the
    # whole image as the ROI): the seeds tried near the ROI's centre and spread from it all
    # land on blank subsets, so the solver goes on to the best-textured points; before it did,
    # none of the specimen was measured. Known translation as the oracle.
    n = 240
    pat = synth.make_speckle((n, n), radius=2.5, seed=3)
    dx, dy = 1.3, -0.7
    ref = synth.render(pat, (n, n), bits=8)
    dfm = synth.render(pat, (n, n), synth.translation(dx, dy), bits=8)
    spot = np.zeros((n, n), bool)
    spot[120:215, 15:110] = True
    ref = np.where(spot, ref, 128.0)
    # the deformed image's patch moves with the specimen (by whole pixels: 1 right, 1 up)
    dfm = np.where(np.roll(spot, (-1, 1), axis=(0, 1)), dfm, 128.0)
    with pytest.warns(UserWarning, match="too little texture"):
        f = dic.correlate(ref, dfm, subset=21, step=5)
    # points whose subset lies inside the patch, 2 px clear of its edges; within 0.02 px of
    # the translation (8-bit speckle of this size matches to about 0.003 px RMS, the
    # benchmark's figure; common practice, no source, for the margin)
    inner = (f.x >= 15 + 12) & (f.x <= 109 - 12) & (f.y >= 120 + 12) & (f.y <= 214 - 12)
    assert inner.sum() >= 150
    assert f.valid[inner].all()
    assert np.abs(f.u[inner] - dx).max() <= 0.02
    assert np.abs(f.v[inner] - dy).max() <= 0.02
    # the blank rest is flat, not "not reached"
    assert np.count_nonzero(f.reason == Reason.NOT_REACHED) <= 0.01 * f.valid.size


def test_offset_and_gain_change_of_lighting(speckle):
    # ZNSSD is insensitive to offset and gain changes of the grey levels (Pan, Xie & Wang,
    # Appl. Opt. 49 (2010) 5501): the same field with g' = 0.7 g + 25.
    pat, ref = speckle
    dfm = synth.render(pat, SHAPE, synth.translation(0.4, 0.7))
    a = dic.correlate(ref, dfm, subset=21, step=10)
    b = dic.correlate(ref, 0.7 * dfm + 25.0, subset=21, step=10)
    np.testing.assert_array_equal(a.valid, b.valid)
    np.testing.assert_allclose(b.u[a.valid], a.u[a.valid], atol=1e-6)


def test_fields_have_reason_for_every_point_and_nan_where_invalid(speckle):
    pat, ref = speckle
    dfm = synth.render(pat, SHAPE, synth.translation(2.0, 0.0))
    f = dic.correlate(ref, dfm, subset=21, step=10)
    assert f.u.shape == f.x.shape == f.zncc.shape == f.reason.shape
    assert f.grad.shape == f.x.shape + (2, 2)
    bad = ~f.valid
    for arr in (f.u, f.v, f.zncc):
        assert np.all(np.isnan(arr[bad])) and np.all(np.isfinite(arr[~bad]))
    assert np.all(np.isnan(f.grad[bad]))
    assert np.all(f.zncc[~bad] >= 0.9)
    # the grid: x = column, y = row, spaced by the step
    assert np.all(np.diff(f.x, axis=1) == 10) and np.all(np.diff(f.y, axis=0) == 10)
    assert "measured" in f.summary()


def test_reads_image_files_in_full_bit_depth(tmp_path, speckle):
    # 16-bit PNG keeps the full depth: the same field as from the float arrays scaled by 256
    # (offset/gain invariance makes the scaling irrelevant to the match).
    pat, ref = speckle
    dfm = synth.render(pat, SHAPE, synth.translation(0.25, 0.5))
    p_ref, p_def = tmp_path / "a.png", tmp_path / "b.png"
    dic.images.io.write_image(p_ref, ref * 256, bits=16)
    dic.images.io.write_image(p_def, dfm * 256, bits=16)
    f = dic.correlate(p_ref, p_def, subset=21, step=20)
    assert f.n_valid > 0
    assert abs(np.nanmean(f.u) - 0.25) <= 0.003
