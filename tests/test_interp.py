"""B-spline prefilter, evaluation and derivatives against scipy.ndimage (independent oracle)."""

import numpy as np
import pytest
from scipy import ndimage

from dic.images import interp
from dic.matching._icgn_kernel import evaluate


@pytest.fixture(scope="module")
def image():
    rng = np.random.default_rng(0)
    return ndimage.gaussian_filter(rng.random((61, 83)) * 255, 1.0)


@pytest.mark.parametrize("order", [3, 5])
def test_prefilter_matches_scipy_spline_filter(image, order):
    # scipy.ndimage.spline_filter with mirror boundaries is the oracle; both are exact
    # recursive filters, so they agree to rounding (1e-9 of grey levels ~ 1e2).
    s = interp.prefilter(image, order)
    ref = ndimage.spline_filter(image, order=order, mode="mirror")
    p = s.pad
    np.testing.assert_allclose(s.coef[p:-p, p:-p], ref, atol=1e-9)
    # the border holds the whole-sample mirror image of the coefficients
    np.testing.assert_allclose(s.coef, np.pad(ref, p, mode="reflect"), atol=1e-9)


@pytest.mark.parametrize("order", [3, 5])
def test_evaluation_matches_map_coordinates(image, order):
    # scipy.ndimage.map_coordinates (same spline, mirror mode) is the oracle
    s = interp.prefilter(image, order)
    rng = np.random.default_rng(1)
    x = rng.uniform(0, image.shape[1] - 1, 2000)
    y = rng.uniform(0, image.shape[0] - 1, 2000)
    got = evaluate(s.coef, s.pad, order, x, y)
    want = ndimage.map_coordinates(image, [y, x], order=order, mode="mirror")
    np.testing.assert_allclose(got, want, atol=1e-9)
    # and the spline interpolates: exact at pixel centres
    r, c = np.mgrid[0:image.shape[0], 0:image.shape[1]]
    np.testing.assert_allclose(evaluate(s.coef, s.pad, order, c.ravel() * 1.0, r.ravel() * 1.0),
                               image.ravel(), atol=1e-9)


def test_two_pass_quintic_matches_map_coordinates(image):
    # the solver's vectorised quintic (weights of all positions, then the 6 x 6 sums) against
    # scipy.ndimage.map_coordinates (same spline, mirror mode), the independent oracle, at
    # random positions, at pixel centres and just below them (where the integer part changes)
    from dic.matching._icgn_kernel import _quintic_at

    s = interp.prefilter(image, 5)
    rng = np.random.default_rng(2)
    x = np.concatenate([rng.uniform(0, image.shape[1] - 1, 2000), np.arange(1.0, 40.0),
                        np.arange(1.0, 40.0) - 1e-12])
    y = np.concatenate([rng.uniform(0, image.shape[0] - 1, 2000), np.arange(40.0, 1.0, -1),
                        np.arange(40.0, 1.0, -1) - 1e-12])
    n = x.size
    g = np.full(n, np.nan)
    _quintic_at(s.coef, s.pad, np.concatenate([x, y]), np.empty(2 * n, np.int64),
                np.empty((6, 2 * n)), g, n)
    want = ndimage.map_coordinates(image, [y, x], order=5, mode="mirror")
    np.testing.assert_allclose(g, want, atol=1e-9)


@pytest.mark.parametrize("order", [3, 5])
def test_reference_gradients_are_spline_derivatives(image, order):
    # central differences (h = 1e-5 px) of scipy's interpolant are the oracle; their own error
    # is ~ h^2 f''' + rounding/h ~ 1e-7 on this image, hence the tolerance
    s = interp.prefilter(image, order)
    gx, gy = interp.reference_gradients(s)
    h = 1e-5
    r, c = np.mgrid[2:image.shape[0] - 2, 2:image.shape[1] - 2].astype(float)
    f = lambda rr, cc: ndimage.map_coordinates(image, [rr, cc], order=order, mode="mirror")
    np.testing.assert_allclose(gx[2:-2, 2:-2], (f(r, c + h) - f(r, c - h)) / (2 * h), atol=1e-5)
    np.testing.assert_allclose(gy[2:-2, 2:-2], (f(r + h, c) - f(r - h, c)) / (2 * h), atol=1e-5)


@pytest.mark.parametrize("order", [3, 5])
def test_image_gradients_are_spline_derivatives(image, order):
    # the same oracle as above (central differences of scipy's interpolant), over the whole
    # image this time: the border follows the mirror boundary condition of scipy's 'mirror'
    gx, gy = interp.image_gradients(image, order)
    h = 1e-5
    r, c = np.mgrid[0:image.shape[0], 0:image.shape[1]].astype(float)
    f = lambda rr, cc: ndimage.map_coordinates(image, [rr, cc], order=order, mode="mirror")
    np.testing.assert_allclose(gx[:, 1:-1], ((f(r, c + h) - f(r, c - h)) / (2 * h))[:, 1:-1],
                               atol=1e-5)
    np.testing.assert_allclose(gy[1:-1], ((f(r + h, c) - f(r - h, c)) / (2 * h))[1:-1],
                               atol=1e-5)


def test_basis_functions_are_partitions_of_unity():
    # B-splines sum to one over integer shifts (Unser 1999)
    t = np.linspace(0, 1, 11)
    for order in (3, 5):
        total = sum(interp.bspline(t - k, order) for k in range(-3, 4))
        np.testing.assert_allclose(total, 1.0, atol=1e-12)


def test_bad_order():
    with pytest.raises(ValueError, match="order"):
        interp.prefilter(np.zeros((10, 10)), 4)
