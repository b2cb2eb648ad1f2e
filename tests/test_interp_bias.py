"""The interpolation bias model against scipy's spline interpolation and exact Fourier shifts."""

import numpy as np
import pytest
from scipy import ndimage

import dic
from dic.matching import interpolation_bias, phase_error
from dic.matching._icgn import SubsetMatcher
from shifting import fourier_shift


def _fitted_phase(order, w, t):
    # scipy.ndimage's B-spline interpolation (an independent implementation) of a sampled
    # cos(w x), evaluated at x + t; the least-squares phase of the result less w t, in px
    n = 1024
    x = np.arange(n, dtype=float)
    c = ndimage.spline_filter1d(np.cos(w * x), order=order, mode="mirror")
    xx = x[200:-200]
    g = ndimage.map_coordinates(np.repeat(c[None, :], 3, axis=0),
                                [np.ones(xx.size), xx + t], order=order, prefilter=False)
    a, b = np.linalg.lstsq(np.column_stack([np.cos(w * (xx + t)), np.sin(w * (xx + t))]), g,
                           rcond=None)[0]
    return np.arctan2(-b, a) / w


@pytest.mark.parametrize("order", [3, 5])
def test_phase_error_matches_scipy_spline_interpolation(order):
    ws = np.pi * np.array([0.5, 0.75, 0.9])
    ts = np.array([0.1, 0.25, 0.4])
    d = phase_error(order, ws, ts)
    for i, w in enumerate(ws):
        for j, t in enumerate(ts):
            # exact model against scipy: to 1e-6 px (the fit over 624 samples is exact to
            # rounding; the interior samples are far from the mirrored ends)
            assert abs(d[i, j] - _fitted_phase(order, w, t)) < 1e-6
    # an interpolating spline is exact at the samples, and symmetric about half a pixel
    # (Schreier, Braasch & Sutton 2000: the bias vanishes at t = 0 and 1/2, odd about 1/2)
    e = phase_error(order, ws, np.array([0.0, 0.5, 0.3, 0.7]))
    assert np.all(np.abs(e[:, :2]) < 1e-12)
    assert np.allclose(e[:, 2], -e[:, 3], atol=1e-12)
    # the lag grows with frequency: about 0.02 px at 0.75 pi for the quintic at a quarter
    # pixel (common practice, no source: the order of magnitude reported for quintic splines)
    assert np.all(np.diff(np.abs(d[:, 1])) > 0)


@pytest.mark.parametrize("name", ["camera", "gravel", "moon"])
def test_predicted_bias_follows_the_measured_bias(name):
    # Noise-free photographs shifted exactly (Fourier phase ramp): the measured error is the
    # interpolation's bias. The prediction has its sign and most of its size (measured: 0.63
    # to 0.86 of the mean error on camera, gravel, moon and coins at three shifts), and turns
    # with the fractional position (t and 1 - t give opposite signs).
    skdata = pytest.importorskip("skimage.data")
    img = getattr(skdata, name)().astype(float)
    h, w = img.shape
    for dx, dy in [(0.25, 0.2), (0.75, 0.8)]:
        f = dic.correlate(img, fourier_shift(img, dx, dy), subset=21, step=8,
                          roi=(40, 40, w - 80, h - 80))
        m = SubsetMatcher(img, fourier_shift(img, dx, dy), subset=21, order=5)
        ok = f.valid.ravel()
        p = np.column_stack([f.u.ravel(), f.grad[..., 0, 0].ravel(), f.grad[..., 0, 1].ravel(),
                             f.v.ravel(), f.grad[..., 1, 0].ravel(),
                             f.grad[..., 1, 1].ravel()])[ok]
        b = interpolation_bias(m.gx, m.gy, f.x.ravel()[ok].astype(int),
                               f.y.ravel()[ok].astype(int), p, 10, 5)
        for k, e in enumerate((f.u.ravel()[ok] - dx, f.v.ravel()[ok] - dy)):
            ratio = b[:, k].mean() / e.mean()
            assert 0.55 <= ratio <= 1.0, (name, dx, dy, k, ratio)
            assert np.sign(e.mean()) == (1 if dx < 0.5 else -1)


def test_bias_is_small_on_speckle_and_follows_the_strain():
    # Smooth speckle (Gaussian dots of radius 2.5 px) carries little power near the sampling
    # limit: the predicted bias is a few thousandths of a pixel at most. Under a strain whose
    # fractional positions sweep a whole pixel across the subset, it averages out.
    from dic.images import synth

    pat = synth.make_speckle((200, 200), radius=2.5, seed=3)
    ref = synth.render(pat, (200, 200))
    m = SubsetMatcher(ref, ref, subset=21, order=5)
    xs, ys = np.meshgrid(np.arange(30, 171, 10), np.arange(30, 171, 10))
    n = xs.size
    p = np.zeros((n, 6))
    p[:, 0] = p[:, 3] = 0.25
    b = interpolation_bias(m.gx, m.gy, xs.ravel(), ys.ravel(), p, 10, 5)
    assert np.all(np.abs(b) < 0.003) and np.all(b > 0)
    # u_x = 0.1: over 21 px the fractional position runs through two whole pixels, where the
    # odd position dependence cancels (to the 5 x 5 lattice's resolution)
    p[:, 1] = p[:, 5] = 0.1
    b2 = interpolation_bias(m.gx, m.gy, xs.ravel(), ys.ravel(), p, 10, 5)
    assert np.all(np.abs(b2) < 0.2 * np.abs(b).max())


def test_rounded_images_have_a_rounding_floor():
    # Moon shifted exactly by (0.1, 0.05) px (Fourier phase ramp), both images rounded to
    # whole grey levels, no noise: over its smooth parts the two roundings agree, the residual
    # misses them and the match locks towards the samples. The standard deviations of whole-
    # grey-level images are at least what rounding noise (variance 1/12; common practice, no
    # source) alone would give. The same images offset by half a grey level (no longer whole;
    # ZNSSD is blind to the offset, so the matches are the same) show the floor's effect.
    skdata = pytest.importorskip("skimage.data")
    img = skdata.moon().astype(float)
    dx, dy = 0.1, 0.05
    ref = np.round(img)
    dfm = np.clip(np.round(fourier_shift(img, dx, dy)), 0, 255)
    h, w = img.shape
    roi = (40, 40, w - 80, h - 80)
    f = dic.correlate(ref, dfm, subset=21, step=8, roi=roi)
    g = dic.correlate(ref + 0.5, dfm + 0.5, subset=21, step=8, roi=roi)
    both = f.valid & g.valid
    assert both.sum() >= 1000
    assert np.allclose(f.u[both], g.u[both], atol=1e-9)
    assert np.all(f.std_u[both] >= g.std_u[both] - 1e-12)

    def ratio(field):
        ok = field.valid
        return np.median(np.concatenate([np.abs(field.u - dx)[ok] / field.std_u[ok],
                                         np.abs(field.v - dy)[ok] / field.std_v[ok]]))

    # measured: 3.1 without the floor, 1.6 with it (a normal error gives 0.67)
    assert ratio(g) > 2.5
    assert ratio(f) < 0.6 * ratio(g)
