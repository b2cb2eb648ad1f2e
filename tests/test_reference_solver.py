"""Tests of the plain reference IC-GN solver (tests/plain_icgn.py), the oracle for the kernel.

Oracles: exactly known motion of analytic Gaussian-blob speckle (``dic.images.synth``; Zhou & Goodson,
Opt. Eng. 40 (2001) 1613), direct evaluation of affine maps and of polynomial products with
numpy/scipy, finite differences of ``scipy.ndimage.map_coordinates``, ``numpy.corrcoef`` and the
offset/gain invariance of the ZNSSD criterion (Pan, Xie & Wang, Appl. Opt. 49 (2010) 5501).

Tolerances on recovered motion come from the interpolation bias of B-splines: Schreier, Braasch &
Sutton, Opt. Eng. 39 (2000) 2915, show the position bias of an interpolated subset is periodic in
the subpixel shift and shrinks fast with the spline degree; for a quintic B-spline and speckle
of 2-3 px radius it is well under the project's 0.002 px bar (DESIGN section 6, noise-free
translation bias, 21 px subset). A displacement bias ``b`` at the subset edge (``half`` = 10 px
from the centre) bounds a gradient error near ``b / half`` = 2e-4, hence 3e-4; and a
second-order term (scaled by ``half^2 / 2`` = 50 px^2 in the shape function) near
``b / 50`` = 4e-5. Measured errors are some 40 times smaller than these bounds (about 5e-5 px,
5e-6 and 2e-6).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage, signal

from dic.images import synth
import plain_icgn as ref_solver

SHAPE = (96, 96)
#: displacement bias bar, px (DESIGN section 6; Schreier, Braasch & Sutton 2000, see module doc)
TOL_U = 2e-3
#: gradient tolerance, ~ TOL_U / half-subset (10 px) with margin (see module docstring)
TOL_GRAD = 3e-4
#: second-order tolerance, ~ TOL_U / (half^2 / 2) for a 21 px subset (see module docstring)
TOL_SECOND = 4e-5


@pytest.fixture(scope="module")
def speckle():
    pat = synth.make_speckle(SHAPE, seed=3)
    return pat, synth.render(pat, SHAPE)


def _affine_params(field, x0, y0):
    """Known first-order parameters [u, ux, uy, v, vx, vy] of a synth field at (x0, y0)."""
    u, v = field(float(x0), float(y0))
    ux, uy, vx, vy = field.jacobian(float(x0), float(y0))
    return np.array([u, ux, uy, v, vx, vy], dtype=np.float64)


# --------------------------------------------------------------------------------------------
# recovery of known motion
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("x0, y0", [(48, 48), (30, 61), (65, 33)])
def test_subpixel_translation_recovered(speckle, x0, y0):
    # Oracle: the exactly known translation of the analytic speckle (Zhou & Goodson 2001).
    # Tolerance: 0.002 px bias bar for quintic B-splines (Schreier, Braasch & Sutton 2000).
    pat, ref = speckle
    field = synth.translation(0.37, -0.62)
    dfm = synth.render(pat, SHAPE, field)
    out = ref_solver.match_subset(ref, dfm, x0, y0, subset=21)
    assert out["converged"]
    expected = _affine_params(field, x0, y0)
    np.testing.assert_allclose(out["p"][[0, 3]], expected[[0, 3]], rtol=0, atol=TOL_U)
    np.testing.assert_allclose(out["p"][[1, 2, 4, 5]], 0.0, rtol=0, atol=TOL_GRAD)


@pytest.mark.parametrize("x0, y0", [(48, 48), (35, 58)])
def test_homogeneous_affine_recovered(speckle, x0, y0):
    # Oracle: the known homogeneous field u = (F - I)(X - c) + o of the analytic speckle
    # (Zhou & Goodson 2001); a first-order shape function represents it exactly, so only the
    # interpolation bias remains (Schreier, Braasch & Sutton 2000): 0.002 px on u, v and
    # 0.002 px / 10 px (with margin, 3e-4) on the gradients.
    pat, ref = speckle
    F = [[1.01, 0.005], [0.0, 0.995]]
    field = synth.homogeneous(F, centre=(40.0, 50.0), offset=(0.3, -0.45))
    dfm = synth.render(pat, SHAPE, field)
    out = ref_solver.match_subset(ref, dfm, x0, y0, subset=21)
    assert out["converged"]
    expected = _affine_params(field, x0, y0)
    np.testing.assert_allclose(out["p"][[0, 3]], expected[[0, 3]], rtol=0, atol=TOL_U)
    np.testing.assert_allclose(out["p"][[1, 2, 4, 5]], expected[[1, 2, 4, 5]], rtol=0,
                               atol=TOL_GRAD)


@pytest.mark.parametrize("x0, y0", [(64, 48), (56, 40)])
def test_second_order_recovers_quadratic_field(speckle, x0, y0):
    # Oracle: u = a (X - xc)^2, v = 0 rendered exactly (Zhou & Goodson 2001). About the subset
    # centre u(x0 + dx) = a d^2 + 2 a d dx + a dx^2 with d = x0 - xc, so the second-order shape
    # function holds it exactly: u = a d^2, ux = 2 a d, uxx = 2 a, every other term 0.
    # Tolerances: the interpolation bias bar (Schreier, Braasch & Sutton 2000) scaled as in the
    # module docstring: 2e-3 px, 3e-4 and 4e-5 px^-1.
    pat, ref = speckle
    a, xc = 1e-3, 40.0
    field = synth.from_function(lambda X, Y: a * (X - xc) ** 2, lambda X, Y: np.zeros_like(X),
                                jacobian=lambda X, Y: (2 * a * (X - xc), 0 * X, 0 * X, 0 * X))
    dfm = synth.render(pat, SHAPE, field)
    out = ref_solver.match_subset(ref, dfm, x0, y0, subset=21, second_order=True)
    assert out["converged"]
    d = x0 - xc
    expected = np.zeros(12)
    expected[0], expected[1], expected[3] = a * d**2, 2 * a * d, 2 * a
    p = out["p"]
    # each known term is at least 20 times its tolerance, so a wrong solver cannot pass
    assert min(expected[0] / TOL_U, expected[1] / TOL_GRAD, expected[3] / TOL_SECOND) > 20
    np.testing.assert_allclose(p[[0, 6]], expected[[0, 6]], rtol=0, atol=TOL_U)
    np.testing.assert_allclose(p[[1, 2, 7, 8]], expected[[1, 2, 7, 8]], rtol=0, atol=TOL_GRAD)
    np.testing.assert_allclose(p[[3, 4, 5, 9, 10, 11]], expected[[3, 4, 5, 9, 10, 11]], rtol=0,
                               atol=TOL_SECOND)


def test_cubic_interpolation_recovers_translation(speckle):
    # Oracle: known translation (Zhou & Goodson 2001). Cubic B-splines have a larger bias than
    # quintic ones (Schreier, Braasch & Sutton 2000); 0.01 px is a loose bound for 2.5 px
    # speckle (from memory of their bias curves; measured here about 6e-4 px).
    pat, ref = speckle
    dfm = synth.render(pat, SHAPE, synth.translation(0.37, -0.62))
    out = ref_solver.match_subset(ref, dfm, 48, 48, order=3)
    assert out["converged"]
    np.testing.assert_allclose(out["p"][[0, 3]], [0.37, -0.62], rtol=0, atol=1e-2)


# --------------------------------------------------------------------------------------------
# ZNCC and ZNSSD properties
# --------------------------------------------------------------------------------------------
def test_zncc_of_exact_match_and_pearson(speckle):
    # A perfect match has ZNCC = 1 (Pan, Xie & Wang 2010); interpolation error of the quintic
    # spline keeps it within 1e-4 of that. The reported value is the Pearson correlation of the
    # reference subset and the deformed image sampled at the final warp (numpy.corrcoef, with
    # the deformed image sampled here by scipy.ndimage.map_coordinates), to rounding (1e-12).
    pat, ref = speckle
    dfm = synth.render(pat, SHAPE, synth.translation(0.37, -0.62))
    out = ref_solver.match_subset(ref, dfm, 48, 48, subset=21)
    assert out["zncc"] > 0.9999
    u, ux, uy, v, vx, vy = out["p"]
    dy, dx = np.mgrid[-10:11, -10:11].astype(np.float64)
    xs = 48 + dx + u + ux * dx + uy * dy
    ys = 48 + dy + v + vx * dx + vy * dy
    g = ndimage.map_coordinates(dfm, [ys.ravel(), xs.ravel()], order=5, mode="mirror")
    f = ref[38:59, 38:59].ravel()
    assert out["zncc"] == pytest.approx(np.corrcoef(f, g)[0, 1], abs=1e-12)


@pytest.mark.parametrize("second_order", [False, True])
def test_offset_and_gain_leave_parameters_unchanged(speckle, second_order):
    # ZNSSD is invariant to g -> 1.3 g + 20 (Pan, Xie & Wang 2010), and the B-spline prefilter
    # is linear and reproduces constants, so the iteration is the same up to rounding: 1e-9
    # (rounding of sums over 441 pixels of ~100 grey levels is ~1e-13 relative).
    pat, ref = speckle
    F = [[1.01, 0.005], [0.0, 0.995]]
    dfm = synth.render(pat, SHAPE, synth.homogeneous(F, centre=(48.0, 48.0),
                                                     offset=(0.37, -0.62)))
    a = ref_solver.match_subset(ref, dfm, 48, 48, second_order=second_order)
    b = ref_solver.match_subset(ref, 1.3 * dfm + 20.0, 48, 48, second_order=second_order)
    assert a["converged"] and b["converged"]
    np.testing.assert_allclose(b["p"], a["p"], rtol=0, atol=1e-9)
    assert b["zncc"] == pytest.approx(a["zncc"], abs=1e-12)


# --------------------------------------------------------------------------------------------
# warps
# --------------------------------------------------------------------------------------------
def _random_params(rng, second_order):
    # displacements of a few px, gradients of a few percent, second-order terms of 1e-3 / px
    scale = [2.0, 0.05, 0.05] + ([1e-3] * 3 if second_order else [])
    return rng.normal(0.0, scale * 2)


@pytest.mark.parametrize("second_order", [False, True])
def test_composition_with_own_inverse_is_identity(second_order):
    # Group property of inverse composition (Baker & Matthews 2004): W(p) o W(p)^-1 = identity,
    # i.e. all parameters zero, to rounding of a 3x3 / 6x6 inverse (1e-12).
    rng = np.random.default_rng(11)
    for _ in range(20):
        p = _random_params(rng, second_order)
        np.testing.assert_allclose(ref_solver.compose_inverse(p, p), 0.0, rtol=0, atol=1e-12)
        M = ref_solver.warp_matrix(p)
        np.testing.assert_allclose(ref_solver.params_from_matrix(M), p, rtol=0, atol=1e-15)


def test_first_order_composition_equals_direct_affine_maps():
    # Oracle: apply the affine maps to points directly; W(dp)^-1 by numpy.linalg.solve on the
    # 2x2 system, then W(p). Must equal W of the composed parameters to rounding (1e-12 px).
    rng = np.random.default_rng(5)
    dx, dy = rng.uniform(-10, 10, (2, 50))
    for _ in range(20):
        p = _random_params(rng, False)
        dp = _random_params(rng, False) * 0.1
        A = np.array([[1 + dp[1], dp[2]], [dp[4], 1 + dp[5]]])
        t = np.array([dp[0], dp[3]])
        inv_pts = np.linalg.solve(A, np.vstack([dx, dy]) - t[:, None])
        direct = ref_solver.warp_offsets(p, inv_pts[0], inv_pts[1])
        composed = ref_solver.warp_offsets(ref_solver.compose_inverse(p, dp), dx, dy)
        np.testing.assert_allclose(composed, direct, rtol=0, atol=1e-12)


def test_second_order_matrix_rows_are_truncated_polynomial_products():
    # Oracle for the 6x6 matrix (Gao et al., Opt. Lasers Eng. 65 (2015) 73): multiply the
    # polynomials x'(dx, dy), y'(dx, dy) with scipy.signal.convolve2d on their coefficient
    # arrays and keep terms up to degree 2. Exact arithmetic up to rounding (1e-14).
    rng = np.random.default_rng(8)
    monomials = [(2, 0), (1, 1), (0, 2), (1, 0), (0, 1), (0, 0)]  # (power of dx, power of dy)
    for _ in range(10):
        p = _random_params(rng, True)
        u, ux, uy, uxx, uxy, uyy, v, vx, vy, vxx, vxy, vyy = p
        X = np.zeros((3, 3))  # X[i, j]: coefficient of dx^i dy^j
        X[0, 0], X[1, 0], X[0, 1], X[2, 0], X[1, 1], X[0, 2] = u, 1 + ux, uy, uxx / 2, uxy, uyy / 2
        Y = np.zeros((3, 3))
        Y[0, 0], Y[1, 0], Y[0, 1], Y[2, 0], Y[1, 1], Y[0, 2] = v, vx, 1 + vy, vxx / 2, vxy, vyy / 2
        one = np.zeros((3, 3))
        one[0, 0] = 1.0
        polys = [signal.convolve2d(X, X), signal.convolve2d(X, Y), signal.convolve2d(Y, Y),
                 X, Y, one]
        expected = np.array([[P[i, j] for (i, j) in monomials] for P in polys])
        np.testing.assert_allclose(ref_solver.warp_matrix(p), expected, rtol=0, atol=1e-14)


def test_spline_gradient_matches_finite_differences(speckle):
    # Oracle: central differences (h = 1e-4 px) of scipy.ndimage.map_coordinates on the same
    # coefficients, over the whole image including the mirrored border. Error h^2/6 |f'''| with
    # |f'''| below ~100 grey/px^3 for 2.5 px speckle, plus rounding 1e-16 * 250 / 1e-4: < 1e-6.
    _, ref = speckle
    for order in (3, 5):
        c = ref_solver.spline_coefficients(ref, order)
        gx, gy = ref_solver.spline_gradient(c, order)
        yy, xx = np.mgrid[0:SHAPE[0], 0:SHAPE[1]].astype(np.float64)
        h = 1e-4

        def at(r, q):
            return ndimage.map_coordinates(c, [r, q], order=order, mode="mirror",
                                           prefilter=False)

        np.testing.assert_allclose(gx, (at(yy, xx + h) - at(yy, xx - h)) / (2 * h), rtol=0,
                                   atol=1e-6)
        np.testing.assert_allclose(gy, (at(yy + h, xx) - at(yy - h, xx)) / (2 * h), rtol=0,
                                   atol=1e-6)
        # the interpolant passes through the pixel values (Unser 1999)
        np.testing.assert_allclose(at(yy, xx), ref, rtol=0, atol=1e-9)


# --------------------------------------------------------------------------------------------
# failures and bad input
# --------------------------------------------------------------------------------------------
def test_match_leaving_image_is_nan(speckle):
    # A start that puts the subset outside the deformed image cannot be evaluated: NaN, not
    # converged (project rule: invalid points are NaN). Common practice, no source.
    _, ref = speckle
    p0 = np.array([-30.0, 0, 0, 0, 0, 0])
    out = ref_solver.match_subset(ref, ref, 20, 48, p0=p0)
    assert not out["converged"]
    assert np.all(np.isnan(out["p"])) and np.isnan(out["zncc"])


def test_flat_subset_is_nan():
    # A constant subset has no gradient and a singular Hessian: nothing to match (NaN).
    img = np.full((40, 40), 100.0)
    out = ref_solver.match_subset(img, img, 20, 20, subset=11)
    assert not out["converged"] and np.all(np.isnan(out["p"]))


@pytest.mark.parametrize("kwargs, word", [
    ({"subset": 20}, "subset"),
    ({"x0": 3}, "inside"),
    ({"p0": np.zeros(12)}, "p0"),
    ({"order": 4}, "order"),
    ({"tolerance": 0.0}, "tolerance"),
])
def test_bad_input_raises(speckle, kwargs, word):
    _, ref = speckle
    args = {"x0": 48, "y0": 48}
    args.update(kwargs)
    x0, y0 = args.pop("x0"), args.pop("y0")
    with pytest.raises(ValueError, match=word):
        ref_solver.match_subset(ref, ref, x0, y0, **args)
