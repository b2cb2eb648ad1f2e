"""Tests of dic.images.synth: exact synthetic speckle images under known displacement fields.

Oracles: the Gaussian-sum speckle model evaluated directly with numpy over all blobs (Zhou &
Goodson, Opt. Eng. 40 (2001) 1613), closed-form inverses of homogeneous maps, scipy root finders
for nonlinear maps, the Gaussian integral, Campbell's theorem and scipy.stats.
"""

from __future__ import annotations

import dataclasses
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

import dic.images.synth as synth

ROOT = Path(__file__).resolve().parents[1]

# Largest relative part of the intensity lost by cutting every blob at 4 radii. At a point the
# neglected tail is on average density * mean(a) * exp(-16) (integral of the tail of a 2-D
# Gaussian beyond 4 r is exp(-16) of its mass): about 1e-5 grey levels for the default pattern
# against an intensity of at least the 40-grey background, i.e. ~3e-7 relative (largest values
# measured over six seeds: 3.8e-7 to 4.6e-7); 1e-6 leaves a factor 2 for local pile-ups of blobs
# just beyond the cut.
CUT_RTOL = 1e-6


def direct_sum(pat, X, Y, *, cut=False):
    """Zhou & Goodson 2001 speckle model, b + sum_k a_k exp(-|X - c_k|^2 / r_k^2), all blobs.

    With ``cut=True`` each blob is dropped beyond 4 r_k, the truncation dic.images.synth documents.
    """
    X = np.asarray(X, dtype=float)[..., None]
    Y = np.asarray(Y, dtype=float)[..., None]
    d2 = (X - pat.centres[:, 0]) ** 2 + (Y - pat.centres[:, 1]) ** 2
    terms = pat.amplitude * np.exp(-d2 / pat.radius**2)
    if cut:
        terms = np.where(d2 < (4.0 * pat.radius) ** 2, terms, 0.0)
    return pat.background + terms.sum(axis=-1)


def pixel_grid(shape):
    rows, cols = shape
    y, x = np.mgrid[0:rows, 0:cols].astype(float)
    return x, y


# ------------------------------------------------------------------------------------------
# the reference image and the pattern
# ------------------------------------------------------------------------------------------
def test_reference_image_equals_gaussian_sum():
    shape = (30, 40)
    pat = synth.make_speckle(shape, seed=11)
    img = synth.render(pat, shape)
    x, y = pixel_grid(shape)
    # Zhou & Goodson 2001 model, all blobs, no cut; tolerance CUT_RTOL from the exp(-16) cut
    np.testing.assert_allclose(img, direct_sum(pat, x, y), rtol=CUT_RTOL, atol=0)
    # same model with the documented 4-radius cut: only float summation order differs
    # (~1e-15 relative), so 1e-12 shows the cell search misses no blob inside the cut
    np.testing.assert_allclose(img, direct_sum(pat, x, y, cut=True), rtol=1e-12, atol=0)


def test_total_intensity_equals_gaussian_integrals():
    # Sum over a unit pixel lattice of a_k exp(-d^2/r_k^2) equals its integral a_k pi r_k^2 up to
    # 2 exp(-pi^2 r_k^2) relative (Poisson summation formula, from memory) -- exp(-39) for
    # r >= 2 px -- and up to exp(-16) of the mass lost beyond the 4-radius cut (Gaussian
    # integral). rtol 1e-6 covers both with a margin of ten.
    pat = synth.make_speckle((40, 40), radius=2.5, margin=10.0, seed=5)
    assert pat.radius.min() >= 2.0
    shift = 30.0  # blobs at [-10, 49] move to [20, 79]; the 100 px grid holds them and their cut
    img = synth.render(pat, (100, 100), synth.translation(shift, shift))
    lhs = np.sum(img - pat.background)
    rhs = np.sum(pat.amplitude * math.pi * pat.radius**2)
    np.testing.assert_allclose(lhs, rhs, rtol=1e-6)


def test_image_mean_and_variance_follow_campbell_theorem():
    # Campbell's theorem for a field of randomly placed blobs (e.g. Papoulis, Probability, Random
    # Variables and Stochastic Processes, shot noise; from memory): mean = b + lam E[int blob],
    # variance = lam E[int blob^2], with int a exp(-d^2/r^2) = a pi r^2 and int of its square
    # a^2 pi r^2 / 2. With lam = density / (pi radius^2) the mean is the `density` the caller
    # asked for. Tolerances: over 30 seeds on a 400 px image the relative errors of the mean and
    # variance scattered by 0.5 % and 1.7 % (standard deviations); the 600 px image used here
    # shrinks that by 1.5; 2 % and 6 % are about 5 such standard deviations.
    shape = (600, 600)
    density, radius, spread = 0.6, 2.5, 0.2
    pat = synth.make_speckle(shape, density=density, radius=radius, seed=2)
    img = synth.render(pat, shape)
    e_r2 = radius**2 * (1 + spread**2 / 3)  # E[r^2] for r ~ U(0.8, 1.2) * radius
    mean = pat.background + density * pat.amplitude.mean() * e_r2 / radius**2
    var = density * np.mean(pat.amplitude**2) * e_r2 / (2 * radius**2)
    np.testing.assert_allclose(img.mean(), mean, rtol=0.02)
    np.testing.assert_allclose(img.var(), var, rtol=0.06)
    # the documented span: background + contrast is the mean plus five standard deviations
    np.testing.assert_allclose(mean + 5 * math.sqrt(var), pat.background + 180.0, rtol=0.02)


def test_make_speckle_follows_its_specification():
    # checks against the documented parameters (specification, no outside source)
    shape = (50, 80)
    margin, radius, density = 20.0, 3.0, 0.5
    pat = synth.make_speckle(shape, radius=radius, density=density, margin=margin, seed=4,
                             background=25.0, contrast=150.0)
    area = (80 - 1 + 2 * margin) * (50 - 1 + 2 * margin)
    assert pat.count == round(density * area / (math.pi * radius**2))
    assert pat.centres.shape == (pat.count, 2)
    assert pat.centres[:, 0].min() >= -margin and pat.centres[:, 0].max() <= 79 + margin
    assert pat.centres[:, 1].min() >= -margin and pat.centres[:, 1].max() <= 49 + margin
    assert pat.radius.min() >= 0.8 * radius and pat.radius.max() <= 1.2 * radius
    assert np.ptp(pat.amplitude) > 0 and np.all(pat.amplitude > 0)
    # amplitudes are one scale times U(0.6, 1.0): their spread stays inside the ratio 0.6
    assert pat.amplitude.min() >= 0.6 * pat.amplitude.max() - 1e-12
    assert pat.background == 25.0
    same = synth.make_speckle(shape, radius=radius, density=density, margin=margin, seed=4,
                              background=25.0, contrast=150.0)
    np.testing.assert_array_equal(same.centres, pat.centres)
    other = synth.make_speckle(shape, radius=radius, density=density, margin=margin, seed=5)
    assert not np.array_equal(other.centres, pat.centres)


# ------------------------------------------------------------------------------------------
# deformed images
# ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("dx, dy", [(3.37, -7.81), (45.2, 28.9), (-0.5, 0.25)])
def test_translation_equals_shifted_pattern(dx, dy):
    # exact identity: f(x - d) for the pattern equals the pattern with centres moved by d.
    # Both sides differ only by float rounding of the positions (~1e-13 px) times the largest
    # image gradient (~100 grey/px): 1e-9 grey is a generous bound.
    shape = (60, 70)
    pat = synth.make_speckle(shape, seed=7)
    moved = dataclasses.replace(pat, centres=pat.centres + np.array([dx, dy]))
    expected = synth.render(moved, shape)
    np.testing.assert_allclose(synth.render(pat, shape, synth.translation(dx, dy)), expected,
                               rtol=0, atol=1e-9)
    # the same field without an analytic Jacobian (central differences), and as a bare callable
    wrapped = synth.from_function(lambda X, Y: dx + 0 * X, lambda X, Y: dy + 0 * Y)
    np.testing.assert_allclose(synth.render(pat, shape, wrapped), expected, rtol=0, atol=1e-9)
    np.testing.assert_allclose(synth.render(pat, shape, lambda X, Y: (dx + 0 * X, dy + 0 * Y)),
                               expected, rtol=0, atol=1e-9)


def _sample_pixels(shape, n, seed):
    rng = np.random.default_rng(seed)
    rows = rng.integers(0, shape[0], n)
    cols = rng.integers(0, shape[1], n)
    return rows, cols


@pytest.mark.parametrize("F", [[[1.25, 0.1], [-0.05, 0.8]], [[0.62, 0.0], [0.0, 1.6]],
                               [[math.cos(0.3), -math.sin(0.3)], [math.sin(0.3), math.cos(0.3)]]])
def test_homogeneous_inverse_map_and_values(F):
    shape = (80, 90)
    centre, offset = np.array([40.0, 35.0]), np.array([3.5, -2.25])
    field = synth.homogeneous(F, centre=tuple(centre), offset=tuple(offset))
    pat = synth.make_speckle(shape, seed=3)
    img = synth.render(pat, shape, field)
    rows, cols = _sample_pixels(shape, 150, seed=1)
    x, y = cols.astype(float), rows.astype(float)
    # closed-form inverse of x = c + F (X - c) + o (linear algebra): X = c + F^-1 (x - c - o)
    Xe = centre[:, None] + np.linalg.solve(np.asarray(F),
                                           np.stack([x, y]) - (centre + offset)[:, None])
    X, Y = synth.inverse_map(field, x, y)
    # 1e-9 px: the solver stops below 1e-10 px of residual and F is well conditioned (cond < 3)
    np.testing.assert_allclose(X, Xe[0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(Y, Xe[1], rtol=0, atol=1e-9)
    u, v = field(X, Y)
    assert np.max(np.hypot(X + u - x, Y + v - y)) < 1e-10  # definition of the inverse map
    # the deformed image is the reference model at the mapped point (Zhou & Goodson 2001 model);
    # 1e-9 px of position error moves the value by < 1e-7 grey, far inside CUT_RTOL
    np.testing.assert_allclose(img[rows, cols], direct_sum(pat, Xe[0], Xe[1]), rtol=CUT_RTOL)


@pytest.mark.parametrize("direction", ["x", "y"])
def test_sinusoid_inverse_map_and_values(direction):
    shape = (70, 80)
    A, P = 3.0, 40.0  # 2 pi A / P = 0.47 < 1: one-to-one
    field = synth.sinusoid(A, P, direction=direction)
    pat = synth.make_speckle(shape, seed=8)
    img = synth.render(pat, shape, field)
    rows, cols = _sample_pixels(shape, 120, seed=2)
    x, y = cols.astype(float), rows.astype(float)
    # oracle: scipy.optimize.brentq on the monotone 1-D map s + A sin(2 pi s / P) = t
    def solve(t):
        return optimize.brentq(lambda s: s + A * math.sin(2 * math.pi * s / P) - t,
                               t - A - 1, t + A + 1, xtol=1e-14, rtol=4 * np.finfo(float).eps)
    if direction == "x":
        Xe, Ye = np.array([solve(t) for t in x]), y
    else:
        Xe, Ye = x, np.array([solve(t) for t in y])
    X, Y = synth.inverse_map(field, x, y)
    # residual < 1e-10 px and slope of the map >= 1 - 0.47: position error < 2e-10 px
    np.testing.assert_allclose(X, Xe, rtol=0, atol=1e-9)
    np.testing.assert_allclose(Y, Ye, rtol=0, atol=1e-9)
    u, v = field(X, Y)
    assert np.max(np.hypot(X + u - x, Y + v - y)) < 1e-10  # definition of the inverse map
    np.testing.assert_allclose(img[rows, cols], direct_sum(pat, Xe, Ye), rtol=CUT_RTOL)


def test_nonlinear_field_without_jacobian_matches_scipy_root():
    # a 2-D nonlinear one-to-one field with no analytic Jacobian (central differences inside)
    def fu(X, Y):
        return 0.002 * (X - 20) * (Y - 10) + 1.5

    def fv(X, Y):
        return 1.5 * np.sin(Y / 15.0) + 0.01 * X

    field = synth.from_function(fu, fv)
    shape = (50, 60)
    pat = synth.make_speckle(shape, seed=9)
    img = synth.render(pat, shape, field)
    rows, cols = _sample_pixels(shape, 60, seed=3)
    x, y = cols.astype(float), rows.astype(float)
    X, Y = synth.inverse_map(field, x, y)
    # oracle: scipy.optimize.root (MINPACK hybrd) on X + u(X) - x = 0, started at x
    for i in range(x.size):
        sol = optimize.root(lambda p: [p[0] + fu(p[0], p[1]) - x[i], p[1] + fv(p[0], p[1]) - y[i]],
                            [x[i], y[i]], method="hybr", tol=1e-14)
        assert sol.success
        # both solve to ~1e-10 px or better on a map with |grad u| < 0.2: 1e-8 px is ample
        np.testing.assert_allclose([X[i], Y[i]], sol.x, rtol=0, atol=1e-8)
    assert np.max(np.hypot(X + fu(X, Y) - x, Y + fv(X, Y) - y)) < 1e-10  # definition
    np.testing.assert_allclose(img[rows, cols], direct_sum(pat, X, Y), rtol=CUT_RTOL)


def test_field_jacobians():
    X = np.linspace(-30, 130, 41)
    Y = np.linspace(90, -20, 41)
    F = np.array([[1.3, 0.2], [-0.1, 0.9]])
    g = synth.homogeneous(F, centre=(5.0, 7.0)).jacobian(X, Y)
    # grad u = F - I for u = (F - I)(X - c) + o (definition)
    for got, want in zip(g, (F - np.eye(2)).ravel()):
        np.testing.assert_array_equal(got, np.full(X.shape, want))
    gs = synth.sinusoid(2.0, 25.0).jacobian(X, Y)
    # d/dX [A sin(2 pi X / P)] = 2 pi A / P cos(2 pi X / P) (calculus)
    np.testing.assert_allclose(gs[0], 2 * math.pi * 2.0 / 25.0 * np.cos(2 * math.pi * X / 25.0),
                               rtol=1e-14, atol=1e-15)
    np.testing.assert_array_equal(np.stack(gs[1:]), 0.0)
    # central differences (step 1e-4 px) against the derivative by hand of u = sin(0.1 X) Y,
    # v = 0.01 X^2: truncation h^2/6 |u'''| ~ 1e-12, rounding eps |u| / h ~ 1e-10
    fd = synth.from_function(lambda X, Y: np.sin(0.1 * X) * Y, lambda X, Y: 0.01 * X**2)
    du_dx, du_dy, dv_dx, dv_dy = fd.jacobian(X, Y)
    np.testing.assert_allclose(du_dx, 0.1 * np.cos(0.1 * X) * Y, rtol=0, atol=1e-8)
    np.testing.assert_allclose(du_dy, np.sin(0.1 * X), rtol=0, atol=1e-8)
    np.testing.assert_allclose(dv_dx, 0.02 * X, rtol=0, atol=1e-8)
    np.testing.assert_allclose(dv_dy, 0.0, rtol=0, atol=1e-8)
    u, v = synth.translation(1.5, -2.0)(X, Y)
    np.testing.assert_array_equal(u, 1.5)
    np.testing.assert_array_equal(v, -2.0)


# ------------------------------------------------------------------------------------------
# noise, quantisation, output type
# ------------------------------------------------------------------------------------------
def test_noise_is_gaussian_with_requested_std():
    shape = (256, 256)
    pat = synth.make_speckle(shape, seed=1)
    clean = synth.render(pat, shape)
    sigma = 4.0
    noisy = synth.render(pat, shape, noise=sigma, seed=123)
    r = (noisy - clean).ravel()
    n = r.size
    # standard errors of the sample std (sigma / sqrt(2n), 0.28 %) and mean (sigma / sqrt(n));
    # bounds at about 7 and 5 standard errors
    np.testing.assert_allclose(r.std(), sigma, rtol=0.02)
    assert abs(r.mean()) < 5 * sigma / math.sqrt(n)
    # normal shape: scipy.stats.kstest against N(0, sigma); fixed seed, so deterministic
    assert stats.kstest(r / sigma, "norm").pvalue > 1e-3
    np.testing.assert_array_equal(synth.render(pat, shape, noise=sigma, seed=123), noisy)
    assert not np.array_equal(synth.render(pat, shape, noise=sigma, seed=124), noisy)


def test_bits_and_dtype():
    shape = (60, 60)
    # background 200 so that bright blobs pass 255 and clipping is exercised
    pat = synth.make_speckle(shape, seed=2, background=200.0, contrast=150.0)
    f = synth.render(pat, shape, noise=2.0, seed=5)
    assert f.max() > 255
    # camera model: round to the nearest integer, clip to the range (common practice, no source)
    img8 = synth.render(pat, shape, noise=2.0, seed=5, bits=8)
    assert img8.dtype == np.float64
    np.testing.assert_array_equal(img8, np.clip(np.rint(f), 0, 255))
    assert img8.min() >= 0 and img8.max() == 255 and np.all(img8 == np.round(img8))
    u8 = synth.render(pat, shape, noise=2.0, seed=5, dtype=np.uint8)  # bits default to 8
    assert u8.dtype == np.uint8
    np.testing.assert_array_equal(u8, img8)
    u16 = synth.render(pat, shape, noise=2.0, seed=5, bits=12, dtype="uint16")
    assert u16.dtype == np.uint16
    np.testing.assert_array_equal(u16, np.clip(np.rint(f), 0, 4095))
    assert synth.render(pat, shape, dtype=np.float32).dtype == np.float32


# ------------------------------------------------------------------------------------------
# bad input
# ------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def small():
    return synth.make_speckle((40, 40), seed=0)


@pytest.mark.parametrize("field, message", [
    # 2 pi A / P = 3.1 > 1: the map x = X + A sin(2 pi X / P) folds (calculus)
    (synth.sinusoid(10.0, 20.0), "det F"),
    # x = -X: a mirror image, det F = -1
    (synth.from_function(lambda X, Y: -2 * X, lambda X, Y: 0 * Y), "det F"),
    # x = 10 tanh(X / 10) never reaches 20: no material point lands on most pixels
    (synth.from_function(lambda X, Y: 10 * np.tanh(X / 10) - X, lambda X, Y: 0 * Y),
     "det F|did not converge"),
    (synth.from_function(lambda X, Y: np.where(X > 20, np.nan, 0.0), lambda X, Y: 0 * Y),
     "non-finite"),
])
def test_bad_fields_raise(small, field, message):
    with pytest.raises(ValueError, match=message):
        synth.render(small, (40, 40), field)


@pytest.mark.parametrize("shape", [(0, 10), (10,), (10.5, 4), "ab", (3, -2), None, (True, 5)])
def test_bad_shape_raises(small, shape):
    with pytest.raises(ValueError, match="shape"):
        synth.make_speckle(shape)
    with pytest.raises(ValueError, match="shape"):
        synth.render(small, shape)


@pytest.mark.parametrize("kwargs, message", [
    ({"radius": -1.0}, "radius"), ({"radius": 0.0}, "radius"), ({"radius": np.nan}, "radius"),
    ({"density": 0.0}, "density"), ({"density": 1e-9}, "density"), ({"contrast": 0.0}, "contrast"),
    ({"margin": -3.0}, "margin"), ({"radius_spread": 1.0}, "radius_spread"),
])
def test_bad_pattern_options_raise(kwargs, message):
    with pytest.raises(ValueError, match=message):
        synth.make_speckle((20, 20), **kwargs)


@pytest.mark.parametrize("kwargs, message", [
    ({"noise": -1.0}, "noise"), ({"bits": 17}, "bits"), ({"bits": 8.0}, "bits"),
    ({"dtype": np.int32}, "dtype"), ({"bits": 16, "dtype": np.uint8}, "bits"),
    ({"displacement": 3.0}, "displacement"),
])
def test_bad_render_options_raise(small, kwargs, message):
    with pytest.raises(ValueError, match=message):
        synth.render(small, (20, 20), **kwargs)


def test_bad_pattern_and_field_arguments_raise(small):
    with pytest.raises(ValueError, match="Speckle"):
        synth.render(np.zeros((3, 2)), (20, 20))
    with pytest.raises(ValueError, match="radius"):
        synth.render(dataclasses.replace(small, radius=-small.radius), (20, 20))
    with pytest.raises(ValueError, match="positive determinant"):
        synth.homogeneous([[1.0, 0.0], [0.0, -1.0]])
    with pytest.raises(ValueError, match="F must"):
        synth.homogeneous(np.eye(3))
    with pytest.raises(ValueError, match="period"):
        synth.sinusoid(1.0, 0.0)
    with pytest.raises(ValueError, match="direction"):
        synth.sinusoid(1.0, 10.0, direction="z")
    with pytest.raises(ValueError, match="callables"):
        synth.from_function(1.0, lambda X, Y: X)


def test_package_import_stays_light():
    # project rule: `import dic` must not load numba; dic.images.synth loads on first use
    code = ("import sys, dic; assert 'numba' not in sys.modules, 'numba loaded'; "
            "import types; assert isinstance(dic.synth, types.ModuleType); "
            "assert callable(dic.synth.render)")
    subprocess.run([sys.executable, "-c", code], cwd=ROOT, check=True)
