"""The compiled IC-GN kernel against the plain, independently written reference solver.

Both implement IC-GN on the ZNSSD criterion (Pan, Li & Tong, Exp. Mech. 53 (2013) 1277) and
converge to the same stationary point, so with tight tolerances they agree far below any
accuracy bar; a disagreement means a bug in one of them.
"""

import numpy as np
import pytest

from dic.images import synth
import plain_icgn as plain
from dic.matching._icgn import SubsetMatcher, n_params


@pytest.fixture(scope="module")
def images():
    shape = (120, 130)
    pat = synth.make_speckle(shape, radius=2.5, seed=12)
    fu = lambda X, Y: 0.6 + 0.012 * (X - 65) + 0.004 * (Y - 60) + 2e-4 * (X - 65) ** 2
    fv = lambda X, Y: -0.3 + 0.003 * (X - 65) - 0.008 * (Y - 60) + 1e-4 * (Y - 60) ** 2
    return synth.render(pat, shape), synth.render(pat, shape, synth.from_function(fu, fv))


@pytest.mark.parametrize("second", [False, True])
@pytest.mark.parametrize("order", [3, 5])
def test_kernel_agrees_with_reference_solver(images, second, order):
    ref, dfm = images
    pts = [(40, 40), (65, 60), (90, 75), (50, 85)]
    m = SubsetMatcher(ref, dfm, subset=21, second_order=second, order=order,
                      tolerance=1e-9, max_iterations=100)
    xs = np.array([p[0] for p in pts])
    ys = np.array([p[1] for p in pts])
    p0 = np.zeros((len(pts), n_params(second)))
    p0[:, 0] = 0.5
    res = m.match(xs, ys, p0)
    assert np.all(res.status == 0)
    cref = plain.spline_coefficients(ref, order)
    cdef = plain.spline_coefficients(dfm, order)
    for k, (x, y) in enumerate(pts):
        want = plain.match_subset(ref, dfm, x, y, subset=21, p0=p0[k], second_order=second,
                                  order=order, tolerance=1e-10, max_iterations=200,
                                  reference_coefficients=cref, deformed_coefficients=cdef)
        assert want["converged"]
        # every parameter to 1e-7 (px, or px/px): both stop within 1e-9 of the same point
        np.testing.assert_allclose(res.params[k], want["p"], atol=1e-7)
        assert abs(res.zncc[k] - want["zncc"]) <= 1e-9
