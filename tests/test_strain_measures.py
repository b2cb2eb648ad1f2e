"""Strain measures from deformation gradients, checked against textbook formulas and scipy.

Tolerances: the closed forms work on O(1) numbers with a few dozen floating-point operations,
so their rounding error is ~1e-15; 1e-12 leaves three orders of margin without letting a wrong
formula pass (the measures differ from one another by >= 1e-3 for the strains used here).
scipy.linalg.logm/polar are iterative (Pade/Schur, Newton), accurate to ~1e-14 on these
well-conditioned 2x2 matrices; 1e-11 is used against them.
"""

import math

import numpy as np
import pytest
import scipy.linalg

from dic.strain import (MEASURES, area_change, canonical_measure, engineering, equivalent_strain,
                        euler_almansi, green_lagrange, hencky, infinitesimal, max_shear,
                        measure_difference, nonlinear_mask, nonlinear_part, nonlinear_share,
                        out_of_plane, polar_decomposition, principal_strains, rotation_angle,
                        strain_tensor)

LAMBDAS = np.linspace(0.7, 1.8, 23)


def _uniaxial(lam):
    F = np.zeros(np.shape(lam) + (2, 2))
    F[..., 0, 0] = lam
    F[..., 1, 1] = 1.0
    return F


def _rot(theta):
    c, s = np.cos(theta), np.sin(theta)
    return np.array([[c, -s], [s, c]])


def _general_F(n=60, seed=1):
    """Random F = R U with shear, stretch 0.6..1.7 and rotation up to +-170 degrees."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        lam = rng.uniform(0.6, 1.7, 2)
        phi = rng.uniform(-np.pi, np.pi)
        U = _rot(phi) @ np.diag(lam) @ _rot(phi).T
        out.append(_rot(np.radians(rng.uniform(-170, 170))) @ U)
    return np.array(out)


FS = _general_F()


# --- uniaxial stretch: textbook closed forms ----------------------------------------------------

@pytest.mark.parametrize("measure, expected", [
    # Holzapfel, Nonlinear Solid Mechanics (2000), ch. 2 strain tensors, uniaxial case (from memory)
    ("engineering", lambda lam: lam - 1.0),
    ("green-lagrange", lambda lam: 0.5 * (lam ** 2 - 1.0)),
    ("euler-almansi", lambda lam: 0.5 * (1.0 - lam ** -2.0)),
    ("hencky", np.log),
    # small-strain tensor of F = diag(lam, 1): du/dx = lam - 1 (definition)
    ("infinitesimal", lambda lam: lam - 1.0),
])
def test_uniaxial_stretch_exact(measure, expected):
    T = strain_tensor(_uniaxial(LAMBDAS), measure)
    np.testing.assert_allclose(T[:, 0, 0], expected(LAMBDAS), rtol=0, atol=1e-12)
    np.testing.assert_allclose(T[:, 1, 1], 0.0, atol=1e-12)
    np.testing.assert_allclose(T[:, 0, 1], 0.0, atol=1e-12)
    np.testing.assert_allclose(T[:, 1, 0], 0.0, atol=1e-12)


def test_uniaxial_along_y_and_zero_strain():
    # same closed forms with the stretch along y (Holzapfel 2000, ch. 2; from memory)
    F = np.zeros((LAMBDAS.size, 2, 2))
    F[:, 0, 0] = 1.0
    F[:, 1, 1] = LAMBDAS
    np.testing.assert_allclose(hencky(F)[:, 1, 1], np.log(LAMBDAS), atol=1e-12)
    np.testing.assert_allclose(green_lagrange(F)[:, 1, 1], 0.5 * (LAMBDAS ** 2 - 1), atol=1e-12)
    np.testing.assert_allclose(hencky(F)[:, 0, 0], 0.0, atol=1e-12)
    # identity: every measure is exactly zero (definition)
    for name in MEASURES:
        np.testing.assert_allclose(strain_tensor(np.eye(2), name), 0.0, atol=1e-15)


# --- general F with shear and rotation: scipy oracles --------------------------------------------

def test_polar_decomposition_against_scipy():
    R, U = polar_decomposition(FS)
    for F, r, u in zip(FS, R, U):
        r_ref, u_ref = scipy.linalg.polar(F, side="right")  # F = R U, scipy.linalg.polar
        np.testing.assert_allclose(r, r_ref, atol=1e-11)
        np.testing.assert_allclose(u, u_ref, atol=1e-11)


def test_hencky_against_scipy_logm():
    H = hencky(FS)
    for F, h in zip(FS, H):
        U = scipy.linalg.polar(F, side="right")[1]
        ref = np.real(scipy.linalg.logm(U))  # H = ln U, scipy.linalg.logm
        np.testing.assert_allclose(h, ref, atol=1e-11)


def test_engineering_against_scipy_polar():
    B = engineering(FS)
    for F, b in zip(FS, B):
        U = scipy.linalg.polar(F, side="right")[1]  # Biot strain U - I, scipy.linalg.polar
        np.testing.assert_allclose(b, U - np.eye(2), atol=1e-11)


def test_almansi_is_push_forward_of_green_lagrange():
    # e = F^-T E F^-1 (Holzapfel 2000, ch. 2; from memory); inverse by numpy.linalg.inv
    e = euler_almansi(FS)
    for F, ei in zip(FS, e):
        Fi = np.linalg.inv(F)
        E = 0.5 * (F.T @ F - np.eye(2))
        np.testing.assert_allclose(ei, Fi.T @ E @ Fi, atol=1e-12)
        # and the defining form e = (I - F^-T F^-1) / 2
        np.testing.assert_allclose(ei, 0.5 * (np.eye(2) - Fi.T @ Fi), atol=1e-12)


def test_green_lagrange_objective_under_rigid_rotation():
    # E(QF) = E(F) for any rotation Q (objectivity; Holzapfel 2000, ch. 2, from memory)
    rng = np.random.default_rng(7)
    for F in FS:
        Q = _rot(rng.uniform(-np.pi, np.pi))
        np.testing.assert_allclose(green_lagrange(Q @ F), green_lagrange(F), atol=1e-12)
        # so are Hencky and engineering (functions of U only)
        np.testing.assert_allclose(hencky(Q @ F), hencky(F), atol=1e-12)
        np.testing.assert_allclose(engineering(Q @ F), engineering(F), atol=1e-12)


def test_small_strain_not_objective_under_rotation():
    # rigid rotation by theta: eps = (cos theta - 1) I, E = 0 (any continuum text, e.g.
    # Holzapfel 2000 ch. 2; from memory)
    theta = np.radians(np.linspace(-60, 60, 13))
    F = np.array([_rot(t) for t in theta])
    eps = infinitesimal(F)
    np.testing.assert_allclose(eps[:, 0, 0], np.cos(theta) - 1, atol=1e-15)
    np.testing.assert_allclose(eps[:, 0, 1], 0.0, atol=1e-15)
    np.testing.assert_allclose(green_lagrange(F), 0.0, atol=1e-15)
    np.testing.assert_allclose(rotation_angle(F), np.degrees(theta), atol=1e-12)


def test_principal_values_against_eigvalsh_and_eigh():
    for name in MEASURES:
        T = strain_tensor(FS, name)
        major, minor, angle = principal_strains(T[:, 0, 0], T[:, 1, 1], T[:, 0, 1])
        for t, a, b, ang in zip(T, major, minor, angle):
            w, vec = np.linalg.eigh(t)  # numpy.linalg.eigh, ascending eigenvalues
            np.testing.assert_allclose([b, a], w, atol=1e-12)
            d = np.array([np.cos(np.radians(ang)), np.sin(np.radians(ang))])
            # same direction up to sign (eigenvector of the larger eigenvalue)
            np.testing.assert_allclose(abs(d @ vec[:, 1]), 1.0, atol=1e-9)
        assert np.all((angle > -90) & (angle <= 90))
        # max in-plane tensor shear = half the difference of principal values (Mohr's circle)
        np.testing.assert_allclose(max_shear(T[:, 0, 0], T[:, 1, 1], T[:, 0, 1]),
                                   0.5 * (major - minor), atol=1e-12)


def test_rotation_angle_against_scipy_polar():
    ang = rotation_angle(FS)
    for F, a in zip(FS, ang):
        R = scipy.linalg.polar(F, side="right")[0]  # scipy.linalg.polar
        np.testing.assert_allclose(a, np.degrees(np.arctan2(R[1, 0], R[0, 0])), atol=1e-9)


def test_area_change_against_numpy_det():
    # det F - 1, numpy.linalg.det
    np.testing.assert_allclose(area_change(FS), np.linalg.det(FS) - 1.0, atol=1e-12)


# --- equivalent strain, out-of-plane estimate ----------------------------------------------------

def test_equivalent_strain_definition_and_uniaxial_incompressible():
    # definition sqrt(2/3 dev:dev) evaluated with numpy on the 3x3 tensor (Hill 1950; from memory)
    T = hencky(FS)
    zz = out_of_plane(FS, "hencky")
    got = equivalent_strain(T[:, 0, 0], T[:, 1, 1], T[:, 0, 1], zz)
    for t, z, g in zip(T, zz, got):
        T3 = np.zeros((3, 3))
        T3[:2, :2] = t
        T3[2, 2] = z
        dev = T3 - np.trace(T3) / 3 * np.eye(3)
        np.testing.assert_allclose(g, np.sqrt(2 / 3 * np.sum(dev * dev)), atol=1e-12)
    # incompressible uniaxial stretch lam: F = diag(lam, lam^-1/2), eps_eq = ln lam
    # (common practice: equivalent strain equals the axial log strain in uniaxial tension)
    F = np.zeros((LAMBDAS.size, 2, 2))
    F[:, 0, 0] = LAMBDAS
    F[:, 1, 1] = LAMBDAS ** -0.5
    H = hencky(F)
    eq = equivalent_strain(H[:, 0, 0], H[:, 1, 1], H[:, 0, 1], out_of_plane(F, "log"))
    np.testing.assert_allclose(eq, np.abs(np.log(LAMBDAS)), atol=1e-12)
    # by default zz comes from incompressibility: the Hencky components of a plastic uniaxial
    # stretch 1.2 give ln 1.2 without zz (with zz = 0 it would read ~12 % low)
    np.testing.assert_allclose(equivalent_strain(H[:, 0, 0], H[:, 1, 1], H[:, 0, 1]),
                               np.abs(np.log(LAMBDAS)), atol=1e-12)
    lam = 1.2
    assert equivalent_strain(math.log(lam), -0.5 * math.log(lam), 0.0) == \
        pytest.approx(math.log(lam), rel=1e-12)
    assert equivalent_strain(math.log(lam), -0.5 * math.log(lam), 0.0, out_of_plane="zero") \
        < 0.9 * math.log(lam)
    # the incompressible zz from the components of every measure equals out_of_plane from F
    from dic.strain import strain_tensor
    from dic.strain import incompressible_zz
    for name in ("green-lagrange", "euler-almansi", "engineering", "hencky"):
        T = strain_tensor(FS, name)
        np.testing.assert_allclose(incompressible_zz(T[:, 0, 0], T[:, 1, 1], T[:, 0, 1], name),
                                   out_of_plane(FS, name), atol=1e-12)
    # out_of_plane="zero": pure in-plane shear eps_xy = g gives sqrt(2/3 * 2 g^2)
    g = 0.01
    np.testing.assert_allclose(equivalent_strain(0.0, 0.0, g, out_of_plane="zero"),
                               np.sqrt(4 / 3) * g, rtol=1e-14)


def test_out_of_plane_incompressible():
    # Hencky: -(H_xx + H_yy) = -tr ln U = -ln det F (Jacobi's formula det exp A = exp tr A)
    H = hencky(FS)
    zz = out_of_plane(FS, "hencky")
    np.testing.assert_allclose(zz, -(H[:, 0, 0] + H[:, 1, 1]), atol=1e-12)
    np.testing.assert_allclose(zz, -np.log(np.linalg.det(FS)), atol=1e-12)
    # other measures: the measure of the stretch lambda_3 = 1/det F (volume conservation;
    # formulas as in the uniaxial test, Holzapfel 2000 ch. 2, from memory)
    l3 = 1.0 / np.linalg.det(FS)
    np.testing.assert_allclose(out_of_plane(FS, "green"), 0.5 * (l3 ** 2 - 1), atol=1e-12)
    np.testing.assert_allclose(out_of_plane(FS, "almansi"), 0.5 * (1 - l3 ** -2), atol=1e-12)
    np.testing.assert_allclose(out_of_plane(FS, "engineering"), l3 - 1, atol=1e-12)


# --- nonlinear share -----------------------------------------------------------------------------

def test_green_lagrange_is_linear_plus_quadratic_part():
    # E = eps + (grad u)^T grad u / 2 (Holzapfel 2000 ch. 2, from memory)
    np.testing.assert_allclose(green_lagrange(FS), infinitesimal(FS) + nonlinear_part(FS),
                               atol=1e-12)
    np.testing.assert_allclose(measure_difference(FS, "green-lagrange", "small"),
                               nonlinear_part(FS), atol=1e-12)
    # difference of two measures is antisymmetric in the pair (definition)
    np.testing.assert_allclose(measure_difference(FS, "hencky", "biot"),
                               hencky(FS) - engineering(FS), atol=0)


def test_nonlinear_share_uniaxial_closed_form_and_mask():
    # F = diag(1 + a, 1): eps = a, Q = a^2/2, so share = |a|/2 exactly (definition of the share)
    a = np.array([-0.3, -0.05, -0.019, 0.001, 0.019, 0.021, 0.1, 0.5])
    F = _uniaxial(1.0 + a)
    np.testing.assert_allclose(nonlinear_share(F), np.abs(a) / 2, rtol=1e-12)
    # mask at 1 %: flagged exactly where |a| > 0.02
    np.testing.assert_array_equal(nonlinear_mask(F, threshold=0.01), np.abs(a) > 0.02)
    np.testing.assert_array_equal(nonlinear_mask(F, threshold=0.2), np.abs(a) > 0.4)
    # no deformation: share undefined (NaN), not flagged
    assert np.isnan(nonlinear_share(np.eye(2)))
    assert not nonlinear_mask(np.eye(2))


# --- names and degenerate input -----------------------------------------------------------------

@pytest.mark.parametrize("alias, canon", [
    ("Green-Lagrange", "green-lagrange"), ("green", "green-lagrange"),
    ("GREEN_LAGRANGE", "green-lagrange"), ("almansi", "euler-almansi"),
    ("Euler Almansi", "euler-almansi"), ("log", "hencky"), ("logarithmic", "hencky"),
    ("Hencky", "hencky"), ("small", "infinitesimal"), ("infinitesimal", "infinitesimal"),
    ("biot", "engineering"), ("Engineering", "engineering"),
])
def test_measure_aliases(alias, canon):
    assert canonical_measure(alias) == canon


@pytest.mark.parametrize("bad", ["cauchy", "", None, 3])
def test_unknown_measure_lists_valid_names(bad):
    with pytest.raises(ValueError, match="measure") as info:
        strain_tensor(np.eye(2), bad)
    msg = str(info.value)
    assert "\n" not in msg
    for name in MEASURES:
        assert name in msg


def test_folded_gradient_gives_nan_not_numbers():
    # det F <= 0: no proper polar decomposition, no inverse (common practice, no source)
    F = np.array([[[-1.0, 0.0], [0.0, 1.0]], [[1.0, 1.0], [1.0, 1.0]], [[1.1, 0.0], [0.0, 0.9]]])
    for fun in (hencky, engineering, euler_almansi, rotation_angle):
        out = fun(F)
        assert np.all(np.isnan(out[:2]))
        assert np.all(np.isfinite(out[2]))
    R, U = polar_decomposition(F)
    assert np.all(np.isnan(R[:2])) and np.all(np.isnan(U[:2]))
    assert np.all(np.isnan(out_of_plane(F[:2], "hencky")))


def test_bad_F_shape():
    with pytest.raises(ValueError, match="F must have shape"):
        green_lagrange(np.eye(3))
