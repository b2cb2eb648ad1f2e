"""Displacement gradients by pointwise least squares, and the StrainField built on them.

Fields are built directly as DisplacementField objects from analytic displacements (no images).
Tolerances: linear/quadratic fields are reproduced exactly by the fit in exact arithmetic; in
float64 the window sums of displacements of size ~10 px over <= 81 points, divided by moments of
order 1e2..1e4, leave errors ~1e-14 in the gradient, so 1e-12 is a safe bar that still catches any
wrong weight (a wrong offset or normalisation gives errors >= 1e-4 here).
"""

import math

import numpy as np
import pytest
from scipy.interpolate import RegularGridInterpolator

import dic
from dic.field import DisplacementField, Reason
from dic.strain import (MEASURES, default_min_points, displacement_gradient, green_lagrange,
                        hencky, strain_field, vsg_size)

STEP = 4.0


def make_field(ufun, vfun, nx=40, ny=30, step=STEP, invalid=None, fill=np.nan, subset=21,
               step_y=None):
    """A DisplacementField on the grid x, y = 10 + k * step; ``invalid`` points hold ``fill``."""
    step_y = step if step_y is None else step_y
    x, y = np.meshgrid(np.arange(nx) * step + 10.0, np.arange(ny) * step_y + 10.0)
    u = np.asarray(ufun(x, y), dtype=float) + np.zeros(x.shape)
    v = np.asarray(vfun(x, y), dtype=float) + np.zeros(x.shape)
    reason = np.zeros(x.shape, np.int8)  # Reason.MEASURED = 0
    if invalid is not None:
        reason[invalid] = Reason.OUTSIDE_ROI
        u[invalid] = fill if np.isscalar(fill) else fill[invalid]
        v[invalid] = fill if np.isscalar(fill) else fill[invalid]
    return DisplacementField(x=x, y=y, u=u, v=v, grad=np.full(x.shape + (2, 2), np.nan),
                             zncc=np.ones(x.shape), reason=reason,
                             iterations=np.zeros(x.shape, np.int16),
                             settings={"subset": subset, "step": step})


def holes(ny=30, nx=40):
    """A round hole, a square hole and two isolated unmeasured points."""
    i, j = np.mgrid[:ny, :nx]
    mask = (i - 15) ** 2 + (j - 12) ** 2 <= 9
    mask |= (i >= 5) & (i < 9) & (j >= 28) & (j < 31)
    mask[22, 30] = mask[2, 20] = True
    return mask


def window_count(valid, window):
    """Measured points in each point's window, by explicit slicing (independent of the code)."""
    h = window // 2
    ny, nx = valid.shape
    out = np.zeros(valid.shape, int)
    for i in range(ny):
        for j in range(nx):
            out[i, j] = valid[max(i - h, 0):i + h + 1, max(j - h, 0):j + h + 1].sum()
    return out


# linear displacement: grad u = G exactly
G = np.array([[0.012, -0.004], [0.007, -0.02]])


def lin_u(x, y):
    return 0.5 + G[0, 0] * x + G[0, 1] * y


def lin_v(x, y):
    return -0.3 + G[1, 0] * x + G[1, 1] * y


# --- linear fields: exact everywhere, including edges and holes ----------------------------------

@pytest.mark.parametrize("window, fit", [(3, "plane"), (9, "plane"), (5, "quadratic"),
                                         (9, "quadratic")])
def test_linear_field_exact_at_edges_and_holes(window, fit):
    mask = holes()
    f = make_field(lin_u, lin_v, invalid=mask)
    g = displacement_gradient(f, window=window, fit=fit)
    # expected validity from the stated rule: centre measured and enough measured neighbours
    # (default_min_points documents the count; the window count is computed independently)
    expected_valid = ~mask & (window_count(~mask, window) >= default_min_points(window, fit))
    np.testing.assert_array_equal(g.valid, expected_valid)
    # an edge point keeps its strain under the default rule, a corner does not
    assert g.valid[15, 0] and g.valid[0, 5] and not g.valid[0, 0]
    # exact recovery (plane fit reproduces linear fields: Pan et al. 2009, least squares)
    np.testing.assert_allclose(g.grad[g.valid], np.broadcast_to(G, g.grad[g.valid].shape),
                               rtol=0, atol=1e-12)
    assert np.all(np.isnan(g.grad[~g.valid]))


def test_linear_field_corner_with_relaxed_min_points():
    # with min_points = a quarter window the corners count; still exact (least squares)
    f = make_field(lin_u, lin_v)
    g = displacement_gradient(f, window=9, min_points=25)
    assert g.valid.all()
    np.testing.assert_allclose(g.grad, np.broadcast_to(G, g.grad.shape), rtol=0, atol=1e-12)
    assert g.n_used[0, 0] == 25 and g.n_used[15, 20] == 81  # (h+1)^2 and N^2 (counting)


def test_physical_coordinates_and_anisotropic_step():
    # gradients are per px of the reference image, not per grid step: same G for any spacing,
    # also unequal along x and y (least squares in physical coordinates, Pan et al. 2009)
    for sx, sy in ((7.0, 7.0), (3.0, 5.0)):
        f = make_field(lin_u, lin_v, step=sx, step_y=sy, invalid=holes())
        for fit in ("plane", "quadratic"):
            g = displacement_gradient(f, window=7, fit=fit)
            np.testing.assert_allclose(g.grad[g.valid],
                                       np.broadcast_to(G, g.grad[g.valid].shape), atol=1e-12)
        assert g.spacing == (sx, sy)


# --- quadratic and cubic fields: the bias the window predicts -----------------------------------

A2 = 3e-4  # u = A2 x^2, v = B2 y^2
B2 = -2e-4


@pytest.mark.parametrize("window", [5, 9])
def test_plane_fit_on_quadratic_field_bias_closed_form(window):
    h = window // 2
    f = make_field(lambda x, y: A2 * x ** 2, lambda x, y: B2 * y ** 2)
    g = displacement_gradient(f, window=window, fit="plane")
    x, y = f.x, f.y
    rows = slice(h, 30 - h)  # full vertical extent of the window
    inner = slice(h, 40 - h)
    # symmetric window: exact 2 a x at the centre (the x^2 term is even, so it is orthogonal to
    # the odd offset; Savitzky-Golay, Schreier & Sutton, Exp. Mech. 42 (2002) 303)
    np.testing.assert_allclose(g.grad[rows, inner, 0, 0], 2 * A2 * x[rows, inner], atol=1e-12)
    np.testing.assert_allclose(g.grad[rows, inner, 1, 1], 2 * B2 * y[rows, inner], atol=1e-12)
    # left edge, offsets k = 0..h: regressing k^2 on k has slope h (derived: cov(k, k^2) =
    # h^2 (h+2)/12, var(k) = h (h+2)/12), so du/dx = 2 a x + a * step * h; right edge minus
    np.testing.assert_allclose(g.grad[rows, 0, 0, 0], 2 * A2 * x[rows, 0] + A2 * STEP * h,
                               atol=1e-12)
    np.testing.assert_allclose(g.grad[rows, -1, 0, 0], 2 * A2 * x[rows, -1] - A2 * STEP * h,
                               atol=1e-12)
    # same along y at the top edge for v = b y^2
    np.testing.assert_allclose(g.grad[0, inner, 1, 1], 2 * B2 * y[0, inner] + B2 * STEP * h,
                               atol=1e-12)
    # the bias is real (not within tolerance of zero): a * step * h >= 2.4e-3
    assert abs(A2 * STEP * h) > 1e-3


def test_quadratic_fit_removes_quadratic_bias_everywhere():
    # the quadratic model contains the field, so least squares reproduces it exactly at edges,
    # corners and around holes (Pan et al. 2009; least squares, exact model)
    mask = holes()

    def u(x, y):
        return 0.2 + 0.01 * x + A2 * x ** 2 + 5e-5 * x * y - 1e-4 * y ** 2

    def v(x, y):
        return -0.1 + 0.003 * y + B2 * y ** 2 + 2e-5 * x ** 2

    f = make_field(u, v, invalid=mask)
    g = displacement_gradient(f, window=7, fit="quadratic", min_points=16)
    np.testing.assert_array_equal(g.valid, ~mask & (window_count(~mask, 7) >= 16))
    assert g.valid[0, 0] and g.valid[29, 39]  # corners included with min_points=16
    x, y = f.x[g.valid], f.y[g.valid]
    exp = np.stack([np.stack([0.01 + 2 * A2 * x + 5e-5 * y, 5e-5 * x - 2e-4 * y], -1),
                    np.stack([4e-5 * x, 0.003 + 2 * B2 * y], -1)], -2)
    np.testing.assert_allclose(g.grad[g.valid], exp, rtol=0, atol=1e-12)
    # the plane fit on the same field is biased at the edges by at least 1e-3 (see above)
    gp = displacement_gradient(f, window=7, fit="plane", min_points=16)
    assert np.nanmax(np.abs(gp.grad[..., 0, 0] - g.grad[..., 0, 0])) > 1e-3


@pytest.mark.parametrize("window", [3, 7, 9, 11])
def test_cubic_field_bias_closed_form_interior(window):
    # u = a x^3: plane fit slope = 3 a x^2 + a s^2 sum(k^4)/sum(k^2), k = -h..h (derived; the
    # x^2 term drops out by symmetry; Schreier & Sutton 2002 for the filter view). Faulhaber:
    # sum k^4 / sum k^2 = (3h^2 + 3h - 1)/5. The quadratic fit has the same first derivative on a
    # full symmetric window (Savitzky & Golay 1964: degrees 2 and 1 share derivative weights).
    a = 1e-7
    h = window // 2
    f = make_field(lambda x, y: a * x ** 3, lambda x, y: 0.0 * x)
    bias = a * STEP ** 2 * (3 * h * h + 3 * h - 1) / 5
    assert math.isclose((3 * h * h + 3 * h - 1) / 5,
                        sum(k ** 4 for k in range(-h, h + 1)) / sum(k ** 2 for k in range(-h, h + 1)))
    sl = (slice(h, 30 - h), slice(h, 40 - h))
    xs = f.x[sl]
    fits = ["plane"] + (["quadratic"] if window >= 5 else [])
    for fit in fits:
        g = displacement_gradient(f, window=window, fit=fit)
        np.testing.assert_allclose(g.grad[sl][..., 0, 0], 3 * a * xs ** 2 + bias, rtol=0,
                                   atol=1e-12)
    assert bias > 1e-6  # measurable against the 1e-12 bar


# --- invalid points never reach their neighbours ------------------------------------------------

@pytest.mark.parametrize("fit", ["plane", "quadratic"])
def test_invalid_points_do_not_contaminate(fit):
    # requirement (common practice, no source): unmeasured points are excluded, not propagated
    mask = holes()
    rng = np.random.default_rng(3)

    def u(x, y):
        return 0.3 * np.sin(x / 37.0) + 1e-3 * y

    def v(x, y):
        return 0.2 * np.cos(y / 23.0 + x / 51.0)

    ref = displacement_gradient(make_field(u, v, invalid=mask), window=7, fit=fit)
    for fill in (1e6, -7.5, rng.normal(0, 100, mask.shape), np.inf):
        got = displacement_gradient(make_field(u, v, invalid=mask, fill=fill), window=7, fit=fit)
        np.testing.assert_array_equal(got.grad, ref.grad)  # NaN compare equal here
        np.testing.assert_array_equal(got.valid, ref.valid)
    assert np.all(np.isnan(ref.grad[mask]))
    assert ref.valid.sum() > 0.8 * mask.size


def test_degenerate_neighbourhoods_are_nan_without_warnings():
    # one measured row (all points collinear) and one isolated point: the plane is not determined
    # (least squares needs points off a line); warnings are errors in this test run
    ny, nx = 12, 15
    mask = np.ones((ny, nx), bool)
    mask[6, :] = False  # a single row
    mask[1, 1] = False  # an isolated point
    f = make_field(lin_u, lin_v, nx=nx, ny=ny, invalid=mask)
    g = displacement_gradient(f, window=3, min_points=3)
    assert not g.valid.any()
    assert np.all(np.isnan(g.grad))


def test_centre_must_be_measured():
    mask = np.zeros((30, 40), bool)
    mask[10, 10] = True
    f = make_field(lin_u, lin_v, invalid=mask)
    g = displacement_gradient(f, window=9)
    assert not g.valid[10, 10] and np.all(np.isnan(g.grad[10, 10]))
    assert g.valid[10, 11] and g.n_used[10, 11] == 80  # its neighbours use 80 of 81 points


# --- independent oracle: numpy.linalg.lstsq / numpy.polyfit on the same window -------------------

def smooth_field(seed):
    rng = np.random.default_rng(seed)
    k = rng.uniform(1 / 60, 1 / 25, (2, 3, 2))
    ph = rng.uniform(0, 2 * np.pi, (2, 3))
    amp = rng.uniform(0.1, 0.5, (2, 3))

    def make(c):
        return lambda x, y: sum(amp[c, m] * np.sin(k[c, m, 0] * x + k[c, m, 1] * y + ph[c, m])
                                for m in range(3))
    return make(0), make(1)


@pytest.mark.parametrize("window, fit", [(5, "plane"), (9, "plane"), (5, "quadratic"),
                                         (9, "quadratic")])
def test_against_lstsq_oracle(window, fit):
    mask = holes()
    u, v = smooth_field(window)
    f = make_field(u, v, invalid=mask)
    g = displacement_gradient(f, window=window, fit=fit)
    h = window // 2
    rng = np.random.default_rng(11)
    idx = np.argwhere(g.valid)
    partial = idx[g.n_used[g.valid] < window * window]
    full = idx[g.n_used[g.valid] == window * window]
    picks = np.concatenate([partial[rng.choice(len(partial), 12, replace=False)],
                            full[rng.choice(len(full), 6, replace=False)]])
    for i, j in picks:
        sl = (slice(max(i - h, 0), i + h + 1), slice(max(j - h, 0), j + h + 1))
        ok = ~mask[sl]
        dx = (f.x[sl] - f.x[i, j])[ok]
        dy = (f.y[sl] - f.y[i, j])[ok]
        cols = [np.ones_like(dx), dx, dy]
        if fit == "quadratic":
            cols += [dx * dx, dx * dy, dy * dy]
        A = np.stack(cols, 1)
        for c, comp in enumerate((f.u, f.v)):
            coef = np.linalg.lstsq(A, comp[sl][ok], rcond=None)[0]  # numpy.linalg.lstsq
            # gradients ~1e-2; both solvers are backward stable on cond(A) <~ 1e4: 1e-11 bar
            np.testing.assert_allclose(g.grad[i, j, c], coef[1:3], rtol=0, atol=1e-11)
        assert g.n_used[i, j] == ok.sum()


def test_full_window_against_polyfit():
    # u depends on x only: on a full window the plane fit's du/dx is the straight-line slope
    # through all window points (numpy.polyfit, degree 1)
    f = make_field(lambda x, y: 0.4 * np.sin(x / 30.0) + 0 * y, lambda x, y: 0 * x)
    g = displacement_gradient(f, window=7)
    for i, j in [(5, 5), (12, 20), (20, 33)]:
        sl = (slice(i - 3, i + 4), slice(j - 3, j + 4))
        slope = np.polyfit((f.x[sl] - f.x[i, j]).ravel(), f.u[sl].ravel(), 1)[0]
        np.testing.assert_allclose(g.grad[i, j, 0, 0], slope, rtol=0, atol=1e-12)
        np.testing.assert_allclose(g.grad[i, j, 0, 1], 0.0, atol=1e-12)


# --- the StrainField ----------------------------------------------------------------------------

def test_strain_field_homogeneous_F_all_measures():
    mask = holes()
    f = make_field(lin_u, lin_v, invalid=mask)
    F = np.eye(2) + G
    for name in MEASURES:
        s = strain_field(f, window=9, measure=name)
        assert s.measure == name
        T = dic.strain.strain_tensor(F, name)
        np.testing.assert_allclose(s.xx[s.valid], T[0, 0], atol=1e-12)
        np.testing.assert_allclose(s.yy[s.valid], T[1, 1], atol=1e-12)
        np.testing.assert_allclose(s.xy[s.valid], T[0, 1], atol=1e-12)
        assert np.all(np.isnan(s.xx[~s.valid]))
    s = strain_field(f, window=9)
    np.testing.assert_allclose(s.F[s.valid], np.broadcast_to(F, s.F[s.valid].shape), atol=1e-12)
    # Green-Lagrange by its definition 1/2 (F^T F - I) (Holzapfel 2000 ch. 2; from memory)
    E = 0.5 * (F.T @ F - np.eye(2))
    np.testing.assert_allclose(s.xx[s.valid], E[0, 0], atol=1e-12)
    np.testing.assert_allclose(s.xy[s.valid], E[0, 1], atol=1e-12)
    assert s.F.shape == (30, 40, 2, 2) and s.valid.dtype == bool
    # as_measure reuses F: identical to a direct Hencky evaluation, no refit
    sh = s.as_measure("log")
    assert sh.measure == "hencky" and sh.window == 9 and sh.vsg == s.vsg
    np.testing.assert_array_equal(sh.xx, hencky(s.F)[..., 0, 0])
    np.testing.assert_array_equal(s.difference("small"),
                                  green_lagrange(s.F) - dic.strain.infinitesimal(s.F))


def test_tensor_shear_is_half_engineering_shear():
    # simple shear u = gamma * y: engineering shear angle gamma, tensor shear gamma/2
    # (definition of tensor vs engineering shear; any mechanics text)
    gamma = 0.004
    f = make_field(lambda x, y: gamma * y, lambda x, y: 0 * x)
    s = strain_field(f, window=5, measure="small")
    np.testing.assert_allclose(s.xy[s.valid], gamma / 2, atol=1e-14)
    assert "tensor shear" in s.summary()


def test_vsg_formula():
    # VSG = (window - 1) * step + subset (iDICs Good Practices Guide 2018, doi
    # 10.32720/idics/gpg.ed1; as quoted in the project design, from memory)
    f = make_field(lin_u, lin_v, step=4.0, subset=21)
    assert strain_field(f, window=9).vsg == (9 - 1) * 4 + 21
    assert strain_field(f, window=5).vsg == (5 - 1) * 4 + 21
    assert vsg_size(15, 7, 31) == 14 * 7 + 31
    # unknown subset: VSG is NaN, not a made-up number
    f.settings = {"step": 4}
    assert math.isnan(strain_field(f, window=9).vsg)


def test_out_of_plane_and_derived_quantities():
    f = make_field(lin_u, lin_v, invalid=holes())
    s = strain_field(f, window=9, measure="hencky", out_of_plane="incompressible")
    assert s.zz_assumption == "incompressible"
    # Hencky incompressible: zz = -(xx + yy) (Jacobi's formula, tr ln U = ln det U)
    np.testing.assert_allclose(s.zz[s.valid], -(s.xx + s.yy)[s.valid], atol=1e-12)
    assert strain_field(f, window=9).zz is None
    assert strain_field(f, window=9).zz_assumption is None
    # area change det F - 1 (numpy.linalg.det) and principal values (numpy.linalg.eigvalsh)
    F = np.eye(2) + G
    np.testing.assert_allclose(s.area_change()[s.valid], np.linalg.det(F) - 1, atol=1e-12)
    w = np.linalg.eigvalsh(hencky(F))
    major, minor, _ = s.principal()
    np.testing.assert_allclose(major[s.valid], w[1], atol=1e-12)
    np.testing.assert_allclose(minor[s.valid], w[0], atol=1e-12)
    np.testing.assert_allclose(s.component("max_shear")[s.valid], (w[1] - w[0]) / 2, atol=1e-12)
    assert np.all(s.nonlinear_share()[s.valid] > 0)


# --- sampling the field -------------------------------------------------------------------------

def _varying_strain_field(mask=None):
    return strain_field(make_field(lambda x, y: 2e-5 * x ** 2 + 1e-5 * x * y,
                                   lambda x, y: 3e-5 * y ** 2, invalid=mask),
                        window=5, fit="quadratic")


def test_at_and_along_against_regular_grid_interpolator():
    s = _varying_strain_field()
    xg, yg = s.x[0], s.y[:, 0]
    rng = np.random.default_rng(5)
    xq = rng.uniform(xg[0], xg[-1], 200)
    yq = rng.uniform(yg[0], yg[-1], 200)
    for comp in ("xx", "yy", "xy", "equivalent"):
        oracle = RegularGridInterpolator((yg, xg), s.component(comp), method="linear")
        np.testing.assert_allclose(s.at(xq, yq, comp), oracle(np.stack([yq, xq], -1)),
                                   rtol=0, atol=1e-14)  # scipy RegularGridInterpolator
    # on a grid point: the grid value itself (interpolation property)
    assert s.at(s.x[3, 7], s.y[3, 7]) == pytest.approx(s.xx[3, 7], abs=1e-15)
    # along a line: positions, distances and values
    prof = s.along((20.0, 30.0), (150.0, 90.0), n=41, component="xx")
    assert prof.x[0] == 20.0 and prof.y[-1] == 90.0 and len(prof.value) == 41
    np.testing.assert_allclose(prof.distance[-1], np.hypot(130.0, 60.0), rtol=1e-15)
    oracle = RegularGridInterpolator((yg, xg), s.xx, method="linear")
    np.testing.assert_allclose(prof.value, oracle(np.stack([prof.y, prof.x], -1)), atol=1e-14)
    # outside the grid: NaN
    assert np.isnan(s.at(xg[0] - 1.0, yg[0]))
    assert np.isnan(s.at(xg[-1] + 0.5, yg[5]))


def test_at_is_nan_next_to_invalid_points():
    mask = np.zeros((30, 40), bool)
    mask[10, 10] = True
    s = _varying_strain_field(mask)
    x0, y0 = s.x[10, 10], s.y[10, 10]
    # any cell touching the unmeasured point gives NaN inside it; cells beyond do not
    assert np.isnan(s.at(x0 + 1.0, y0 + 1.0))
    assert np.isnan(s.at(x0 - 1.0, y0 - 3.0))
    assert np.isfinite(s.at(x0 + STEP + 1.0, y0 + 1.0))
    # on the neighbouring grid points themselves (the NaN point is a corner of their cell but
    # carries zero weight): their own values
    assert s.at(x0 - STEP, y0) == pytest.approx(s.xx[10, 9], abs=1e-15)
    assert s.at(x0, y0 - STEP) == pytest.approx(s.xx[9, 10], abs=1e-15)
    # on a cell edge through the NaN point, half-way: NaN (the NaN corner has weight 1/2)
    assert np.isnan(s.at(x0 - STEP / 2, y0))


# --- bad input ----------------------------------------------------------------------------------

@pytest.mark.parametrize("kwargs, match", [
    ({"window": 8}, "window must be an odd integer >= 3"),
    ({"window": 1}, "window must be an odd integer >= 3"),
    ({"window": 2}, "window must be an odd integer >= 3"),
    ({"window": 9.0}, "window must be an odd integer"),
    ({"window": True}, "window must be an odd integer"),
    ({"window": 41}, "larger than the grid"),
    ({"window": 31}, "larger than the grid"),
    ({"measure": "cauchy"}, "measure 'cauchy' is not known"),
    ({"fit": "cubic"}, "fit must be one of"),
    ({"fit": None}, "fit must be one of"),
    ({"fit": "quadratic", "window": 3}, "too small for fit='quadratic'"),
    ({"min_points": 2}, "min_points must be an integer"),
    ({"min_points": 82}, "min_points must be an integer"),
    ({"min_points": 10.5}, "min_points must be an integer"),
    ({"out_of_plane": "plane-stress"}, "out_of_plane must be"),
])
def test_bad_arguments(kwargs, match):
    f = make_field(lin_u, lin_v)  # 30 x 40 grid
    with pytest.raises(ValueError, match=match) as info:
        strain_field(f, **kwargs)
    assert "\n" not in str(info.value)


def test_unknown_measure_message_lists_all_names():
    with pytest.raises(ValueError) as info:
        strain_field(make_field(lin_u, lin_v), measure="true-ish")
    for name in MEASURES:
        assert name in str(info.value)


def test_too_few_valid_points():
    mask = np.ones((30, 40), bool)
    mask[3:6, 3:6] = False  # 9 measured points, fewer than the 41 a 9-point window needs
    with pytest.raises(ValueError, match="field has only 9 valid points"):
        strain_field(make_field(lin_u, lin_v, invalid=mask), window=9)


def test_not_a_field_and_irregular_grid():
    with pytest.raises(ValueError, match="field must be a DisplacementField"):
        strain_field(np.zeros((10, 10)))
    f = make_field(lin_u, lin_v)
    f.x = f.x.copy()
    f.x[:, 5] += 0.5
    with pytest.raises(ValueError, match="not a regular grid"):
        strain_field(f)


def test_bad_sampling_arguments():
    s = strain_field(make_field(lin_u, lin_v), window=5)
    with pytest.raises(ValueError, match="component 'ezz' is not known"):
        s.at(20.0, 20.0, component="ezz")
    with pytest.raises(ValueError, match="component='zz' is not available"):
        s.at(20.0, 20.0, component="zz")
    with pytest.raises(ValueError, match="n must be an integer >= 2"):
        s.along((10, 10), (50, 50), n=1)
    with pytest.raises(ValueError, match="p0 and p1 must be"):
        s.along(10, (50, 50))


def test_lazy_package_names():
    # the package's lazy table maps these names to dic.strain
    assert dic.strain_field is strain_field
    assert dic.StrainField is dic.strain.StrainField


# --- uncertain points weigh by their standard deviation ------------------------------------------

@pytest.mark.parametrize("fit", ["plane", "quadratic"])
def test_uncertain_points_weigh_by_inverse_variance(fit):
    # a linear field with a few points off by 1.5 px whose standard deviations say so (1.5 px):
    # each fit is the weighted least squares of the window's points with weights
    # (0.2 / sigma)^2 above 0.2 px, 1 below (numpy.linalg.lstsq on rows scaled by the square
    # roots of the weights: the textbook weighted least squares)
    f = make_field(lin_u, lin_v, invalid=holes())
    su = np.full(f.shape, 0.02)
    off = [(10, 10), (11, 25), (20, 5), (25, 35), (3, 3)]
    for i, j in off:
        f.u[i, j] += 1.5
        su[i, j] = 1.5
    f.std_u, f.std_v = su, su.copy()
    window, h = 7, 3
    fit_w = displacement_gradient(f, window=window, fit=fit)
    monos = ((0, 0), (1, 0), (0, 1)) + (((2, 0), (1, 1), (0, 2)) if fit == "quadratic" else ())
    checked = 0
    for i, j in np.argwhere(fit_w.valid):
        sl = (slice(max(i - h, 0), i + h + 1), slice(max(j - h, 0), j + h + 1))
        used = f.valid[sl]
        sig = np.fmax(f.std_u[sl], f.std_v[sl])[used]
        if not np.any(sig > 0.2):
            continue
        dx = (f.x[sl] - f.x[i, j])[used] / STEP
        dy = (f.y[sl] - f.y[i, j])[used] / STEP
        A = np.column_stack([dx ** p * dy ** q for p, q in monos])
        r = np.sqrt(np.where(sig > 0.2, (0.2 / sig) ** 2, 1.0))
        for c, comp in enumerate((f.u, f.v)):
            coef = np.linalg.lstsq(A * r[:, None], comp[sl][used] * r, rcond=None)[0]
            # offsets <= 3 grid steps, |u| <= 2 px: rounding ~1e-15; 1e-11 bar
            np.testing.assert_allclose(fit_w.grad[i, j, c], coef[1:3] / STEP, rtol=0,
                                       atol=1e-11)
        checked += 1
    assert checked > 100
    # the weights pull the fit towards the exact gradient: the largest error of du/dx falls by
    # more than 5 times against the same field without standard deviations (plain fit)
    f.std_u = f.std_v = None
    plain = displacement_gradient(f, window=window, fit=fit)
    e_w = np.nanmax(np.abs(fit_w.grad[..., 0, 0] - G[0, 0]))
    e_p = np.nanmax(np.abs(plain.grad[..., 0, 0] - G[0, 0]))
    assert e_w < e_p / 5


def test_points_within_the_full_weight_limit_change_nothing():
    # standard deviations all at or below 0.2 px: the fit is exactly the unweighted one
    f = make_field(lin_u, lin_v, invalid=holes())
    rng = np.random.default_rng(3)
    f.u += rng.normal(0, 0.05, f.shape)
    plain = displacement_gradient(f, window=9)
    f.std_u = rng.uniform(0.0, 0.2, f.shape)
    f.std_v = rng.uniform(0.0, 0.2, f.shape)
    np.testing.assert_array_equal(displacement_gradient(f, window=9).grad, plain.grad)
