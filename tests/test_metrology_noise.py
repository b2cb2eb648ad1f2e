"""Image noise, per-point uncertainty and the noise floor, against images of known noise.

Synthetic speckle comes from ``dic.images.synth`` (analytic Gaussian blobs, Zhou & Goodson, Opt. Eng. 40
(2001) 1613); the noise added to it is drawn by numpy with a known standard deviation, which is
the oracle for the noise estimators and, through many independent draws, for the scatter of the
measured displacements.
"""

import math

import numpy as np
import pytest
from scipy import ndimage

import dic
from dic.images import synth
from dic.metrology import image_noise, noise_floor, pair_noise, point_sigma


def immerkaer(img):
    # J. Immerkaer, "Fast noise variance estimation", Comput. Vis. Image Underst. 64 (1996)
    # 300-302: sigma = sqrt(pi / 2) / (6 (W - 2)(H - 2)) * sum |I * N|, N the 3 x 3 mask below
    # (from memory). An independent published estimator for white noise on a flat image.
    mask = np.array([[1, -2, 1], [-2, 4, -2], [1, -2, 1]], float)
    r = ndimage.convolve(img, mask)[1:-1, 1:-1]
    return math.sqrt(math.pi / 2.0) * np.mean(np.abs(r)) / 6.0


@pytest.mark.parametrize("size", [64, 256])
def test_single_image_noise_on_pure_noise(size):
    rng = np.random.default_rng(size)
    img = 100.0 + rng.normal(0.0, 3.0, (size, size))
    est = image_noise(img)
    # the known sigma (numpy's generator) is the oracle; 5 % covers the sampling scatter of the
    # smallest eigenvalue of a 49 x 49 covariance from 3,400 blocks (size 64), checked over
    # seeds to be below 3 %
    assert est == pytest.approx(3.0, rel=0.05)
    # and Immerkaer's 1996 estimator agrees on a flat image (both are unbiased there)
    assert est == pytest.approx(immerkaer(img), rel=0.05)


@pytest.mark.parametrize("radius,sigma", [(2.0, 2.0), (2.5, 5.0), (3.5, 1.0)])
def test_single_image_noise_on_speckle(radius, sigma):
    pat = synth.make_speckle((256, 256), radius=radius, seed=7)
    img = synth.render(pat, (256, 256), noise=sigma, seed=8)
    # known sigma as the oracle; 5 %: a speckle of 4 px or more has almost no power in the
    # highest spatial frequencies, which is what the estimator relies on (Pyatykh et al., IEEE
    # Trans. Image Process. 22 (2013) 687)
    assert image_noise(img) == pytest.approx(sigma, rel=0.05)


def test_clipped_pixels_do_not_hide_the_noise():
    pat = synth.make_speckle((256, 256), radius=2.5, contrast=400.0, seed=3)
    img = np.clip(synth.render(pat, (256, 256), noise=2.0, seed=4), 0, 255)
    assert np.mean(img == 255) > 0.02  # a real share of saturated pixels
    # known sigma as the oracle; rounding is not applied here, so the noise is exactly 2
    assert image_noise(img) == pytest.approx(2.0, rel=0.06)


def test_pair_noise_and_blank_images():
    pat = synth.make_speckle((200, 200), radius=2.5, seed=5)
    clean = synth.render(pat, (200, 200))
    rng = np.random.default_rng(0)
    a = clean + rng.normal(0, 2.0, clean.shape)
    b = clean + rng.normal(0, 2.0, clean.shape) + 7.0   # a lighting offset is allowed
    # std(a - b) / sqrt(2) = sigma for independent draws; sampling error 1/sqrt(2 * 40000)
    assert pair_noise(a, b) == pytest.approx(2.0, rel=0.02)
    assert image_noise(np.full((80, 80), 17.0)) == 0.0
    with pytest.raises(ValueError, match="differ in size"):
        pair_noise(a, b[:100])


# --------------------------------------------------------------------------------------------
# per-point uncertainty
# --------------------------------------------------------------------------------------------
def test_point_sigma_reduces_to_the_sssig_formula():
    # translation-only information: (H^-1)_uu = 1 / SSSIG; with no gradient-noise term the
    # prediction is sqrt(s_f^2 + s_g^2 / SSSIG) = sqrt(2) s / sqrt(SSSIG) (Pan et al., Opt.
    # Express 16 (2008) 7037)
    sssig = np.array([1e4, 4e4])
    terms = np.column_stack([1 / sssig, 1 / sssig, 0 * sssig, 0 * sssig])
    su, sv = point_sigma(terms, 2.0, 2.0)
    np.testing.assert_allclose(su, math.sqrt(2) * 2.0 / np.sqrt(sssig), rtol=1e-12)
    np.testing.assert_allclose(sv, su, rtol=1e-12)


@pytest.fixture(scope="module")
def static_stack():
    """Six images of one static speckle pattern, each with its own noise of sigma = 2."""
    shape = (180, 180)
    pat = synth.make_speckle(shape, radius=2.5, seed=21)
    clean = synth.render(pat, shape)
    return [clean + np.random.default_rng(100 + k).normal(0.0, 2.0, shape) for k in range(6)]


def test_per_point_sigma_matches_the_measured_noise_floor(static_stack):
    nf = noise_floor(static_stack, subset=21, step=8, window=7)
    assert nf.n_images == 6 and nf.n_points > 300
    # the measured spatial noise of u and v on static images (iDICs Good Practices Guide 2018)
    # against the mean predicted per-point sigma: 15 %. The prediction's own error is 2-7 % on
    # this pattern (first-order theory); the spatial std pooled over 5 fields of ~360 points
    # scatters by ~2 %.
    for k, name in enumerate("uv"):
        assert nf.predicted[k] == pytest.approx(nf.spatial[name], rel=0.15), name
    # the temporal scatter at a point leaves out the reference image's noise, which is common
    # to every field: its variance is the half that comes from the deformed images, so it is
    # the prediction / sqrt(2) (derived: var = s_f^2 A + s_g^2 A, first order)
    for k, name in enumerate("uv"):
        assert nf.temporal_rms[name] == pytest.approx(nf.predicted[k] / math.sqrt(2), rel=0.2)


def test_sigma_is_nan_where_not_measured_and_follows_a_given_noise():
    shape = (160, 160)
    pat = synth.make_speckle(shape, radius=2.5, seed=2)
    ref = synth.render(pat, shape)
    ref[:, :60] = 40.0                       # a blank band: no texture, no measurement
    dfm = synth.render(pat, shape, synth.translation(0.3, 0.1))
    dfm[:, :60] = 40.0
    f = dic.correlate(ref, dfm, subset=21, step=10, image_noise=2.0)
    assert f.settings["image_noise"] == (2.0, 2.0)
    assert np.all(np.isnan(f.std_u[~f.valid])) and np.all(np.isnan(f.std_v[~f.valid]))
    assert np.all(np.isfinite(f.std_u[f.valid])) and (~f.valid).any()
    g = dic.correlate(ref, dfm, subset=21, step=10, image_noise=(0.0, 0.0))
    # no noise, no predicted scatter: what is left is the interpolation's predicted bias
    # (dic.matching.interpolation_bias), small on smooth speckle at a 0.3 px shift but not 0
    assert np.all((g.std_u[g.valid] > 0.0) & (g.std_u[g.valid] < 0.005))
    both = f.valid & g.valid
    assert np.all(g.std_u[both] < 0.25 * f.std_u[both])
    with pytest.raises(ValueError, match="image_noise"):
        dic.correlate(ref, dfm, subset=21, step=10, image_noise=-1)


# --------------------------------------------------------------------------------------------
# noise floor bookkeeping and bad input
# --------------------------------------------------------------------------------------------
def test_noise_floor_follows_its_definition(static_stack):
    nf = noise_floor(static_stack[:3], subset=21, step=8, window=7)
    # definition (iDICs Good Practices Guide 2018, doi:10.32720/idics/gpg.ed1, from memory):
    # the spatial standard deviation over the ROI for each image against the reference,
    # averaged over the images; recomputed here directly from dic.correlate / strain_field
    sds = []
    for img in static_stack[1:3]:
        f = dic.correlate(static_stack[0], img, subset=21, step=8)
        e = dic.strain_field(f, window=7)
        sds.append([np.std(f.u[f.valid]), np.std(e.xx[e.valid])])
    np.testing.assert_allclose([nf.spatial["u"], nf.spatial["xx"]], np.mean(sds, axis=0),
                               rtol=1e-9)
    assert nf.settings["vsg"] == 6 * 8 + 21
    assert nf.temporal["u"].shape == nf.x.shape
    # nothing moved: the mean displacement is zero within its sampling error
    assert abs(nf.mean["u"]) < 5 * nf.spatial["u"] / math.sqrt(nf.n_points / 9)


def test_noise_floor_bad_input(static_stack):
    with pytest.raises(ValueError, match="at least two images"):
        noise_floor(static_stack[:1])
    with pytest.raises(ValueError, match="at least two images"):
        noise_floor(static_stack[0])
    with pytest.raises(ValueError, match=r"images\[1\] is"):
        noise_floor([static_stack[0], static_stack[1][:150]])
    two = noise_floor(static_stack[:2], subset=21, step=10, window=5)
    # one field has no temporal scatter
    assert two.temporal is None and "three images" in two.summary()
