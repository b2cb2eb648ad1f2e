"""Failed matches get a second chance from their other matched neighbours."""

import numpy as np

from dic.field import Reason
from dic.images import synth
from dic.matching._icgn import SubsetMatcher
from dic.matching._rescue import retry_failed


def _propagation(shift=(1.3, -0.7)):
    """A propagation state over an exactly translated analytic speckle pair (the rendered field
    is the known motion), every point matched from the exact translation."""
    from dic.matching import _Propagation

    pat = synth.make_speckle((160, 160), radius=2.5, seed=4)
    ref = synth.render(pat, (160, 160))
    dfm = synth.render(pat, (160, 160), synth.translation(*shift))
    m = SubsetMatcher(ref, dfm, subset=21, order=3, max_iterations=50, tolerance=0.02,
                      border=0)
    xs = np.arange(30, 131, 10)
    gx, gy = np.meshgrid(xs, xs)
    cand = np.ones(gx.shape, bool)
    prop = _Propagation(m, gx, gy, cand, cand, 0.9)
    idx = np.arange(gx.size)
    p0 = np.zeros((idx.size, 6))
    p0[:, 0], p0[:, 3] = shift
    prop.run(idx, p0)
    assert np.all(prop.state == prop.w.GOOD)
    return prop


def test_failed_point_is_rescued_from_its_other_neighbours():
    shift = (1.3, -0.7)
    prop = _propagation(shift)
    k = 5 * prop.nx + 5                    # a point in the middle of the grid
    # its best-correlated neighbour is false (25 px off): the guess it gives runs off
    bad_nb = k + 1
    prop.params[bad_nb, 0] += 25.0
    prop.zncc[bad_nb] = 1.0
    guess = prop.params[bad_nb].copy()
    assert prop.m.match(prop.px[[k]], prop.py[[k]], guess[None]).status[0] != Reason.MEASURED
    prop.state[k] = prop.w.BAD
    prop.reason[k] = Reason.NO_CONVERGENCE
    prop.params[k] = np.nan
    assert retry_failed(prop) == 1
    assert prop.state[k] == prop.w.GOOD and prop.reason[k] == Reason.MEASURED
    # the exact translation of the rendered images (analytic solution); 0.02 px is the
    # engine's noise-free accuracy bar for a cubic spline (DESIGN.md, common practice)
    assert abs(prop.params[k, 0] - shift[0]) < 0.02
    assert abs(prop.params[k, 3] - shift[1]) < 0.02


def test_point_failing_from_every_guess_keeps_its_first_reason():
    prop = _propagation()
    k = 5 * prop.nx + 5
    # every neighbour gives a guess 30 px off: no start converges to the true match
    rows, cols = divmod(k, prop.nx)
    for dr in (-1, 0, 1):
        for dc in (-1, 0, 1):
            if dr or dc:
                prop.params[(rows + dr) * prop.nx + cols + dc, 0] += 30.0
    prop.state[k] = prop.w.BAD
    prop.reason[k] = Reason.OUTSIDE_IMAGE
    assert retry_failed(prop) == 0
    assert prop.state[k] == prop.w.BAD
    assert prop.reason[k] == Reason.OUTSIDE_IMAGE


def test_flat_and_unreached_points_are_not_retried():
    prop = _propagation()
    flat, unreached = 3 * prop.nx + 3, 7 * prop.nx + 7
    for k, why in ((flat, Reason.FLAT), (unreached, Reason.NOT_REACHED)):
        prop.state[k] = prop.w.BAD
        prop.reason[k] = why
    n = prop.n_matched
    assert retry_failed(prop) == 0
    assert prop.n_matched == n                 # no match was tried
    assert prop.reason[flat] == Reason.FLAT and prop.reason[unreached] == Reason.NOT_REACHED


def test_vectorised_carry_over_equals_the_compiled_one():
    # the Taylor expansion of the shape function about the neighbour (exact for polynomials of
    # the shape function's order): the vectorised and compiled forms agree to rounding
    from dic.matching._rescue import _carry
    from dic.matching._waves import shift_params

    rng = np.random.default_rng(3)
    for second, npar in ((False, 6), (True, 12)):
        p = rng.normal(0, 0.1, (5, npar))
        ddx, ddy = rng.integers(-10, 11, 5).astype(float), rng.integers(-10, 11, 5).astype(float)
        got = _carry(p, ddx, ddy, second)
        for t in range(5):
            want = np.empty(npar)
            shift_params(p[t], ddx[t], ddy[t], second, want)
            np.testing.assert_allclose(got[t], want, rtol=0, atol=1e-14)


def test_a_point_rescued_in_one_round_gives_its_neighbour_a_guess_in_the_next():
    shift = (1.3, -0.7)
    prop = _propagation(shift)
    k = 5 * prop.nx + 5
    k2 = k + 1                       # its right-hand neighbour
    r2, c2 = divmod(k2, prop.nx)
    # every matched neighbour of k2 but k gives a guess 30 px off (no start converges from it)
    for dr in (-1, 0, 1):
        for dc in (-1, 0, 1):
            q = (r2 + dr) * prop.nx + c2 + dc
            if q not in (k, k2):
                prop.params[q, 0] += 30.0
    for q in (k, k2):
        prop.state[q] = prop.w.BAD
        prop.reason[q] = Reason.NO_CONVERGENCE
        prop.params[q] = np.nan
    # k is rescued from its own good neighbours in the first round, k2 from k in the second
    assert retry_failed(prop) == 2
    for q in (k, k2):
        assert prop.state[q] == prop.w.GOOD
        # the exact translation of the rendered images (analytic solution), to the engine's
        # noise-free accuracy bar for a cubic spline (0.02 px; common practice)
        assert abs(prop.params[q, 0] - shift[0]) < 0.02
