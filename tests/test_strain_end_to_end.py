"""End-to-end checks of the strain stage: exact synthetic images -> correlate -> strain_field.

Images come from :mod:`dic.images.synth` (analytic Gaussian-blob speckle evaluated at the exact inverse
of a known displacement field; no stored image is interpolated), so every expected value below is
known in closed form. Matching uses the package defaults (affine shape function, quintic spline,
FFT seed search) unless a test says otherwise.

Symbols used in the tolerances: ``h`` = half strain window in grid points, ``s`` = step (px),
``M`` = half subset (px). Plane-fit slope weights on a full window are
``w_k = k / (s * N * sum(k^2))`` per grid point, so their L1 norm along one axis is
``sum|k| / (s * sum(k^2))`` (ordinary least squares; Pan et al., Opt. Lasers Eng. 47 (2009) 865).
"""

import math

import numpy as np
import pytest
import scipy.linalg
from scipy import ndimage

import dic
from dic.images import synth

N_IMG = 400
CENTRE = ((N_IMG - 1) / 2.0, (N_IMG - 1) / 2.0)
# The engine keeps subsets 6 px clear of the border for the quintic spline (documented in
# dic.matching._icgn.edge_margin); 8 px here keeps our "should be measurable" set strictly inside.
SAFE_MARGIN = 8.0
# support of the quintic B-spline interpolant: a pixel influences samples up to 3 px away
SPLINE_REACH = 3.0


def rotation(deg):
    t = math.radians(deg)
    return np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])


def feasible(field, disp, subset, shape=(N_IMG, N_IMG), margin=SAFE_MARGIN):
    """Points whose reference subset and exactly deformed subset lie inside the image.

    The deformed subset is the image of the square under the true map; for an affine map a
    convex square stays inside if its corners do, for the smooth maps used here the corners and
    edge mid-points are checked.
    """
    rows, cols = shape
    m = subset // 2
    ok = np.ones(field.shape, bool)
    for cx in (-m, 0, m):
        for cy in (-m, 0, m):
            X = field.x + cx
            Y = field.y + cy
            u, v = disp(X, Y)
            for px, py in ((X, Y), (X + u, Y + v)):
                ok &= (px >= margin) & (px <= cols - 1 - margin)
                ok &= (py >= margin) & (py <= rows - 1 - margin)
    return ok


def window_indices(i, j, h, shape):
    return (slice(max(i - h, 0), min(i + h + 1, shape[0])),
            slice(max(j - h, 0), min(j + h + 1, shape[1])))


# --------------------------------------------------------------------------------------------
# 1. homogeneous large stretch: every measure against its textbook formula
# --------------------------------------------------------------------------------------------
STRETCH = (1.30, 0.88)  # 30 % stretch along x with lateral contraction
OFFSET = (0.37, -0.21)  # subpixel rigid offset


@pytest.fixture(scope="module", params=[0.0, 5.0], ids=["no-rotation", "rotated-5deg"])
def large_stretch(request):
    # F = R U with U = diag(1.30, 0.88): the rotated case makes the xy components of the
    # rotation-sensitive measures (infinitesimal, Euler-Almansi) non-zero
    F = rotation(request.param) @ np.diag(STRETCH)
    disp = synth.homogeneous(F, centre=CENTRE, offset=OFFSET)
    pat = synth.make_speckle((N_IMG, N_IMG), seed=5)
    ref = synth.render(pat, (N_IMG, N_IMG))
    dfm = synth.render(pat, (N_IMG, N_IMG), disp)
    # default seeding (FFT guess at zero gradient, search 60 px): no seeds passed
    field = dic.correlate(ref, dfm, subset=21, step=10)
    return F, disp, field


def textbook_strains(F):
    """Strain tensors from F by their definitions (Holzapfel, Nonlinear Solid Mechanics, 2000,
    ch. 2; from memory), evaluated with scipy.linalg: right polar decomposition F = R U
    (scipy.linalg.polar) and the matrix logarithm (scipy.linalg.logm)."""
    eye = np.eye(2)
    _, U = scipy.linalg.polar(F, side="right")
    Finv = np.linalg.inv(F)
    return {
        "green-lagrange": 0.5 * (F.T @ F - eye),          # E = (F^T F - I) / 2
        "infinitesimal": 0.5 * (F + F.T) - eye,            # eps = sym(grad u)
        "euler-almansi": 0.5 * (eye - Finv.T @ Finv),      # e = (I - F^-T F^-1) / 2
        "hencky": np.real(scipy.linalg.logm(U)),           # H = ln U
        "engineering": U - eye,                            # Biot strain U - I
    }


def test_large_homogeneous_stretch_measured_points(large_stretch):
    F, disp, field = large_stretch
    ok = feasible(field, disp, 21)
    # the 30 % stretch carries about a quarter of the grid out of the image; the rest must be
    # matched. Required: >= 98 % of the points whose subset and deformed subset lie >= 8 px
    # inside the image (noise-free exact images and an affine map that the affine shape
    # function represents exactly, so every such point is matchable; 2 % slack for points at
    # the edge of that set, where a Gauss-Newton iterate may step outside the image).
    assert ok.sum() > 0.5 * ok.size
    assert field.valid[ok].mean() >= 0.98
    # displacement check on the way (exact map u = (F - I)(X - c) + offset); 2e-3 px is the
    # project's bias bar for noise-free images (DESIGN.md section 6)
    u, v = disp(field.x, field.y)
    np.testing.assert_allclose(field.u[field.valid], u[field.valid], atol=2e-3)
    np.testing.assert_allclose(field.v[field.valid], v[field.valid], atol=2e-3)


@pytest.mark.parametrize("measure", ["green-lagrange", "infinitesimal", "euler-almansi",
                                     "hencky", "engineering"])
def test_large_homogeneous_stretch_all_measures(large_stretch, measure):
    F, disp, field = large_stretch
    s = dic.strain_field(field, window=9, measure=measure)
    # points whose whole 9 x 9 window of grid points is measurable must have a strain:
    # >= 98 % of them (same reasoning as for the matching above)
    interior = ndimage.minimum_filter(feasible(field, disp, 21).astype(np.uint8), size=9,
                                      mode="constant", cval=0).astype(bool)
    assert interior.sum() > 100
    assert s.valid[interior].mean() >= 0.98
    T = textbook_strains(F)[measure]
    # 1e-3 bar (set by the project for this test); the gradient error of noise-free matching
    # is ~1e-5 or less and the measures are smooth functions of F with slopes <= ~1.3 here, so
    # any formula or convention error (e.g. ln 1.3 = 0.262 vs 1.3 - 1, a sign of xy, engineering
    # instead of tensor shear) is far above it
    for comp, (i, j) in (("xx", (0, 0)), ("yy", (1, 1)), ("xy", (0, 1))):
        got = getattr(s, comp)[s.valid]
        np.testing.assert_allclose(got, T[i, j], rtol=0, atol=1e-3, err_msg=comp)
    # invalid points are NaN, never a number
    assert np.all(np.isnan(s.xx[~s.valid]))
    assert not np.any(s.valid & ~field.valid)


# --------------------------------------------------------------------------------------------
# 2. linear displacement: the plane fit is exact up to the matching error
# --------------------------------------------------------------------------------------------
G_LIN = np.array([[0.012, -0.004], [0.007, -0.020]])


def test_linear_field_gradient_within_matching_error():
    disp = synth.homogeneous(np.eye(2) + G_LIN, centre=CENTRE, offset=(2.3, -1.6))
    pat = synth.make_speckle((N_IMG, N_IMG), seed=3)
    ref = synth.render(pat, (N_IMG, N_IMG))
    dfm = synth.render(pat, (N_IMG, N_IMG), disp)
    step, window = 10, 7
    field = dic.correlate(ref, dfm, subset=21, step=step)
    s = dic.strain_field(field, window=window)
    grad = s.F - np.eye(2)
    ut, vt = disp(field.x, field.y)
    du, dv = field.u - ut, field.v - vt
    # the displacement error is the matching error; noise-free bias bar 2e-3 px (DESIGN.md s. 6)
    assert np.nanmax(np.abs(du[field.valid])) < 2e-3
    assert np.nanmax(np.abs(dv[field.valid])) < 2e-3
    h = window // 2
    assert s.valid.sum() > 800
    n_partial = 0
    for i, j in np.argwhere(s.valid):
        sl = window_indices(i, j, h, field.shape)
        used = field.valid[sl]
        dx = (field.x[sl] - field.x[i, j])[used]
        dy = (field.y[sl] - field.y[i, j])[used]
        # least-squares slope weights of this point's window (numpy.linalg.pinv); the plane fit
        # reproduces the linear truth exactly, so grad - G = P @ (matching error) and
        # |grad - G| <= ||row of P||_1 * max|error| over the window (triangle inequality)
        P = np.linalg.pinv(np.column_stack([np.ones_like(dx), dx, dy]))
        n_partial += int(used.sum() < window * window)
        for c, err in enumerate((du, dv)):
            e = err[sl][used]
            bound = np.abs(P[1:]).sum(axis=1) * np.abs(e).max() + 1e-12
            assert np.all(np.abs(grad[i, j, c] - G_LIN[c]) <= bound), (i, j, c)
            # and the stage's gradient is that least-squares fit (numpy.linalg.pinv), to
            # rounding: |u| <= 5 px, weights <= 0.05/px -> ~1e-14; 1e-11 bar
            np.testing.assert_allclose(grad[i, j, c],
                                       P[1:] @ (field.u, field.v)[c][sl][used],
                                       rtol=0, atol=1e-11)
    assert n_partial > 50  # the edge windows (partial fits) were exercised as well
    # the resulting bar on a full window: sum|k| / (s sum k^2) = 12 / (10 * 28) = 0.043 / px
    # times max|error|; with noise-free images that is a few 1e-6 .. 1e-5
    full = s.n_used == window * window
    assert np.max(np.abs(grad[full] - G_LIN)) < 3e-5


# --------------------------------------------------------------------------------------------
# 3. cubic displacement: the bias the window and the subset predict
# --------------------------------------------------------------------------------------------
A_CUBIC = 3e-7  # u = a (X - xc)^3: du/dX up to 3 a 190^2 = 3.2 %


def sg_cubic_window_bias(a, step, h):
    """Plane-fit (Savitzky-Golay) slope bias for u = a x^3 on a full window of 2h+1 points:
    a s^2 sum(k^4)/sum(k^2) = a s^2 (3h^2 + 3h - 1)/5 (closed form derived and checked in
    tests/test_strain_gradients.py::test_cubic_field_bias_closed_form_interior; Faulhaber)."""
    return a * step ** 2 * (3 * h * h + 3 * h - 1) / 5.0


@pytest.fixture(scope="module")
def cubic_field():
    xc = CENTRE[0]
    a = A_CUBIC

    def fu(X, Y):
        return a * (X - xc) ** 3 + 0.0 * Y

    def fv(X, Y):
        return 0.0 * X + 0.0 * Y

    def jac(X, Y):
        z = 0.0 * X + 0.0 * Y
        return 3 * a * (X - xc) ** 2 + z, z, z, z

    disp = synth.from_function(fu, fv, jacobian=jac)
    pat = synth.make_speckle((N_IMG, N_IMG), seed=7)
    ref = synth.render(pat, (N_IMG, N_IMG))
    dfm = synth.render(pat, (N_IMG, N_IMG), disp)
    return disp, dic.correlate(ref, dfm, subset=21, step=10)


def test_cubic_subset_level_filter(cubic_field):
    # An undermatched (affine) subset returns the least-squares fit of the true displacement
    # over the subset (Schreier & Sutton, Exp. Mech. 42 (2002) 303; from memory): for
    # u = a x^3 the intercept at x0 is a x0^3 + 3 a x0 <xi^2>, with <xi^2> = M(M+1)/3 the mean
    # of xi^2 over a (2M+1)-px subset (uniform weights). So u_measured - u_true ~ 3 a <xi^2> x0.
    disp, field = cubic_field
    M = 10
    ok = field.valid
    x0 = field.x[ok] - CENTRE[0]
    err = field.u[ok] - disp(field.x, field.y)[0][ok]
    slope = np.polyfit(x0, err, 1)[0]  # numpy.polyfit
    predicted = 3 * A_CUBIC * M * (M + 1) / 3.0
    # 15 %: Gauss-Newton weights each pixel by its squared intensity gradient, so the subset's
    # effective <xi^2> equals the uniform value only on average over the random pattern
    assert slope == pytest.approx(predicted, rel=0.15)


@pytest.mark.parametrize("window", [7, 9, 11])
def test_cubic_strain_bias_window_plus_subset(cubic_field, window):
    disp, field = cubic_field
    step, M, h = 10, 10, window // 2
    s = dic.strain_field(field, window=window, measure="infinitesimal")
    full = s.n_used == window * window
    assert full.sum() > 500
    x0 = field.x - CENTRE[0]
    bias = (s.F[..., 0, 0] - 1.0 - 3 * A_CUBIC * x0 ** 2)[full]
    b_window = sg_cubic_window_bias(A_CUBIC, step, h)
    # the subset term 3 a <xi^2> is linear in x0, so the plane fit passes it on unchanged
    b_subset = A_CUBIC * M * (M + 1)
    # mean bias over the full-window points = window term + subset term; tolerance 15 % of
    # the subset term (its uncertainty, see test_cubic_subset_level_filter); the window term
    # is an exact closed form
    assert np.mean(bias) == pytest.approx(b_window + b_subset, abs=0.15 * b_subset)
    # the window-only prediction is off by the whole subset term: the subset filter is real
    assert abs(np.mean(bias) - b_window) > 0.5 * b_subset
    # and the bias is far above the matching error (~1e-5): window term >= 2e-4
    assert b_window > 2e-4


def test_cubic_bias_difference_between_windows(cubic_field):
    # The subset term is common to every window (same displacement data), so the pointwise
    # difference between two windows is the closed-form window term alone (test_strain_gradients
    # closed form; Schreier & Sutton 2002 for the filter view).
    disp, field = cubic_field
    step = 10
    s7 = dic.strain_field(field, window=7, measure="infinitesimal")
    s11 = dic.strain_field(field, window=11, measure="infinitesimal")
    both = (s11.n_used == 121) & (s7.n_used == 49)
    assert both.sum() > 500
    diff = (s11.F - s7.F)[..., 0, 0][both]
    expected = sg_cubic_window_bias(A_CUBIC, step, 5) - sg_cubic_window_bias(A_CUBIC, step, 3)
    # 10 % of 3.2e-4: the difference filter has L1 norm 0.0027 + 0.0043 = 0.007/px (header
    # formula); the subset-to-subset scatter of the gradient-weighted <xi^2> leaves displacement
    # deviations from the uniform-weight model of order 3 a |x0| * 0.5 <xi^2> <= 3e-3 px, so
    # <= 2e-5 in the difference
    np.testing.assert_allclose(diff, expected, rtol=0, atol=0.10 * expected)


# --------------------------------------------------------------------------------------------
# 4. noise floor on the demo pattern
# --------------------------------------------------------------------------------------------
# The pattern the demo uses: radius 2.5 px, contrast 1200 grey levels in a 12-bit image. With
# the synth default contrast (180, an 8-bit-like pattern) the same settings give ~500 microstrain
# at sigma = 2, far above the bar; the floor scales as 1/contrast (scripts/bench_strain.py).
DEMO_PATTERN = {"radius": 2.5, "contrast": 1200.0}
DEMO_BITS = 12
NOISE_SIGMA = 2.0
NOISE_BAR = 100e-6  # strain noise floor bar at VSG ~ 50 px, DESIGN.md section 6


def strain_filter_factor(subset, step, window):
    """sigma(du/dx) / sigma(u) for white image noise, derived (linear error propagation):
    the displacement error of a subset is the subset sum of fx * noise over sum fx^2; the plane
    fit sums those with slope weights; for uniform fx^2 the result is
    sqrt(sum_p W(p)^2 / subset^2) with W(p) = sum of the weights of the subsets holding pixel p.
    """
    h, m = window // 2, subset // 2
    k = np.arange(-h, h + 1)
    p = np.arange(-h * step - m, h * step + m + 1)
    inside = np.abs(p[:, None] - k[None, :] * step) <= m  # pixel p in subset k
    wx = inside @ (k / (step * np.sum(k ** 2)))  # slope weights along x
    wy = inside @ np.full(k.size, 1.0 / window)  # averaging along y
    return math.sqrt(np.sum(wx ** 2) * np.sum(wy ** 2)) / subset


def test_noise_floor_demo_pattern():
    n = 500
    pat = synth.make_speckle((n, n), seed=21, **DEMO_PATTERN)
    # the SAME undeformed pattern twice, independent noise (zero strain everywhere)
    ref = synth.render(pat, (n, n), noise=NOISE_SIGMA, bits=DEMO_BITS, seed=101)
    dfm = synth.render(pat, (n, n), noise=NOISE_SIGMA, bits=DEMO_BITS, seed=202)
    assert ref.max() < 2 ** DEMO_BITS - 1  # no clipping: the pattern fits the 12-bit range
    subset, step, window = 21, 4, 9
    field = dic.correlate(ref, dfm, subset=subset, step=step)
    s = dic.strain_field(field, window=window)
    # VSG = (window - 1) * step + subset (iDICs Good Practices Guide 2018, from memory)
    assert s.vsg == (window - 1) * step + subset == 53
    assert s.valid.mean() > 0.85  # all but the border band of half a subset and half a window
    sd = {c: float(np.std(getattr(s, c)[s.valid])) for c in ("xx", "yy", "xy")}
    # the bar (DESIGN.md section 6): <= 100 microstrain at VSG ~ 50 px, sigma = 2 grey levels
    assert sd["xx"] <= NOISE_BAR, f"exx noise floor {sd['xx'] * 1e6:.0f} microstrain"
    assert sd["yy"] <= NOISE_BAR, f"eyy noise floor {sd['yy'] * 1e6:.0f} microstrain"
    # zero strain: the mean is zero within its sampling error (~ sd / sqrt(number of
    # independent VSG-sized patches, ~80)); 0.5 sd is > 4 of those (common practice, no source)
    assert abs(np.mean(s.xx[s.valid])) < 0.5 * sd["xx"]
    # the strain stage passes displacement noise on as predicted: sd(exx) / sd(u) equals the
    # derived filter factor (strain_filter_factor, 0.035/px here) within 15 % (approximations:
    # uniform fx^2 and a zero-order subset model; sampling error of the two std ~ 5 %)
    kappa = strain_filter_factor(subset, step, window)
    ratio = sd["xx"] / float(np.std(field.u[field.valid]))
    assert ratio == pytest.approx(kappa, rel=0.15)
    # tensor shear: (du/dy + dv/dx) / 2 of two independent slopes -> kappa sd(u) / sqrt(2)
    ratio_xy = sd["xy"] / float(np.std(field.u[field.valid]))
    assert ratio_xy == pytest.approx(kappa / math.sqrt(2), rel=0.2)


# --------------------------------------------------------------------------------------------
# 5. an unmatchable region: invalid points never reach their neighbours
# --------------------------------------------------------------------------------------------
FLAT_BOX = (250, 330, 90, 170)  # x0, x1, y0, y1 (inclusive) of the flat grey patch


@pytest.fixture(scope="module")
def occluded_field():
    G = np.array([[0.010, 0.002], [-0.003, -0.004]])
    disp = synth.homogeneous(np.eye(2) + G, centre=CENTRE, offset=(1.3, 0.6))
    pat = synth.make_speckle((N_IMG, N_IMG), seed=4)
    ref = synth.render(pat, (N_IMG, N_IMG))
    dfm = synth.render(pat, (N_IMG, N_IMG), disp)
    x0, x1, y0, y1 = FLAT_BOX
    dfm[y0:y1 + 1, x0:x1 + 1] = np.median(dfm)  # e.g. a reflection or a lost patch of paint
    return disp, dic.correlate(ref, dfm, subset=21, step=5)


def test_flat_region_points_are_invalid(occluded_field):
    disp, field = occluded_field
    x0, x1, y0, y1 = FLAT_BOX
    m = 10 + SPLINE_REACH
    u, v = disp(field.x, field.y)
    xd, yd = field.x + u, field.y + v
    # deformed subset (plus the interpolant's reach) wholly inside the flat patch: nothing to
    # match there, so the point must not be measured (common practice, no source)
    inside = (xd - m >= x0) & (xd + m <= x1) & (yd - m >= y0) & (yd + m <= y1)
    assert inside.sum() >= 50
    assert not field.valid[inside].any()
    s = dic.strain_field(field, window=7)
    for comp in (s.xx, s.yy, s.xy):
        assert np.all(np.isnan(comp[inside]))
    assert np.all(np.isnan(s.F[inside]))
    # a strain exists only where the point itself was measured
    assert not np.any(s.valid & ~field.valid)
    assert s.valid.sum() > 0.7 * s.valid.size


@pytest.mark.parametrize("measure", ["green-lagrange", "hencky"])
def test_garbage_at_invalid_points_changes_nothing(occluded_field, measure):
    disp, field = occluded_field
    bad = ~field.valid
    assert bad.sum() > 300
    s = dic.strain_field(field, window=7, measure=measure)
    rng = np.random.default_rng(8)
    for fill in (1e6, -np.inf, np.nan, rng.normal(0.0, 1e3, field.shape)):
        g = dic.DisplacementField(**{k: getattr(field, k) for k in (
            "x", "y", "zncc", "reason", "iterations", "settings", "std_u", "std_v")},
            u=field.u.copy(), v=field.v.copy(), grad=field.grad.copy())
        val = fill if np.isscalar(fill) else fill[bad]
        g.u[bad] = val
        g.v[bad] = val
        g.grad[bad] = val if np.isscalar(val) else val[:, None, None]
        sg = dic.strain_field(g, window=7, measure=measure)
        np.testing.assert_array_equal(sg.valid, s.valid)
        # checked at EVERY point, including those whose window holds invalid points (stronger
        # than only the points whose window avoids them); 1e-12 (requirement: unmeasured
        # points are excluded, common practice, no source)
        for comp in ("xx", "yy", "xy"):
            np.testing.assert_allclose(getattr(sg, comp), getattr(s, comp), rtol=0,
                                       atol=1e-12, equal_nan=True)


def test_windows_next_to_the_hole_use_only_measured_points(occluded_field):
    # at points whose window holds unmeasured points, the gradient is the least-squares plane
    # through the measured points of the window only (numpy.linalg.lstsq; Pan et al. 2009),
    # each weighing (0.2 px / sigma)^2 where its standard deviation sigma exceeds 0.2 px
    # (weighted least squares: rows scaled by the square root of the weights, textbook)
    disp, field = occluded_field
    window, h = 7, 3
    s = dic.strain_field(field, window=window, measure="infinitesimal")
    grad = s.F - np.eye(2)
    partial = np.argwhere(s.valid & (s.n_used < window * window))
    # keep points near the flat patch (not the image-border band)
    near = [(i, j) for i, j in partial
            if 230 <= field.x[i, j] <= 350 and 70 <= field.y[i, j] <= 190]
    assert len(near) > 20
    for i, j in near:
        sl = window_indices(i, j, h, field.shape)
        used = field.valid[sl]
        assert used.sum() == s.n_used[i, j]
        A = np.column_stack([np.ones(used.sum()), (field.x[sl] - field.x[i, j])[used],
                             (field.y[sl] - field.y[i, j])[used]])
        sig = np.fmax(field.std_u[sl], field.std_v[sl])[used]
        r = np.sqrt(np.where(sig > 0.2, (0.2 / sig) ** 2, 1.0))
        for c, comp in enumerate((field.u, field.v)):
            coef = np.linalg.lstsq(A * r[:, None], comp[sl][used] * r, rcond=None)[0]
            # |u| <= 4 px, offsets <= 15 px: rounding ~1e-15; 1e-11 bar
            np.testing.assert_allclose(grad[i, j, c], coef[1:], rtol=0, atol=1e-11)
