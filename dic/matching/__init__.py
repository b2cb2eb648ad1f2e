"""Subset matching: the displacement field between a reference and a deformed image.

The public function is :func:`correlate`. Its stages live in private modules: ``_seed`` (FFT
starting guess), ``_icgn`` / ``_icgn_kernel`` (IC-GN solver), ``_waves`` (propagation
bookkeeping), ``_rescue`` (second tries, uncertain points), ``_shape_choice`` (the 'auto'
shape function), ``_checks`` / ``_edge`` (standard deviations, neighbour and border checks).
The tests compare the kernel against a plain, slow solver (tests/plain_icgn.py).
"""

from __future__ import annotations

import logging
from collections.abc import Sequence

import numpy as np

from dic.field import DisplacementField, Reason
from dic.limits import DEFAULT_MAX_SIGMA, GROW_SIGMA, check_max_sigma
from dic.matching._ahead import ready, set_builder, start
from dic.matching._ahead_build import build as compile_kernel
from dic.matching._edge import edge_bias, edge_distance, near_border
from dic.matching._icgn import (INTERPOLATIONS, SHAPE_FUNCTIONS, SubsetMatcher, edge_margin,
                    grad_from_params, index_u_v, n_params, params_from_fields)

from dic.matching._grid import check_int, check_options, prepare_grid
from dic.matching._noise import image_noise, pair_noise
from dic.matching._uncertainty import gradient_noise_gain, point_sigma, predicted_sigma
from dic.matching._checks import (affine_bias, featureless, median_test, posterior_sigma, sssig,
                                  slow_convergence_factor, translation_sigma)
from dic.matching._interp_bias import interpolation_bias, phase_error
from dic.matching._rescue import admit_uncertain, retry_failed
from dic.matching._seed import seed_candidates
from dic.matching._shape_choice import second_order_where_curved

__all__ = ["correlate", "compile_ahead", "prepare_grid", "check_options", "INTERPOLATIONS",
           "SHAPE_FUNCTIONS", "edge_margin", "edge_distance", "edge_bias", "image_noise",
           "pair_noise", "point_sigma", "predicted_sigma", "gradient_noise_gain", "affine_bias",
           "median_test", "posterior_sigma", "translation_sigma", "interpolation_bias",
           "phase_error", "slow_convergence_factor"]

#: a match below min_zncc still counts when its ZNCC is at least WEAK_ZNCC and its standard
#: deviation from the fit (dic.matching.posterior_sigma) at most WEAK_SIGMA x the
#: propagation's limit (min(GROW_SIGMA, max_sigma)): on noisy, low-texture photographs the ZNCC
#: stays low although the match is well determined
WEAK_ZNCC = 0.5
WEAK_SIGMA = 0.5
#: the texture check before matching skips only subsets whose predicted standard deviation
#: exceeds this many times max_sigma: the single-image noise estimate counts fine texture as
#: noise (on a photographed stereo pair, scikit-image's motorcycle, its central patch gave 4.6
#: grey levels, the whole image 2.7) and with the plain limit it took 17 % of the measurable
#: points of smooth surfaces as flat, which the residual of the match found well determined
PRECHECK = 3.0
# GROW_SIGMA (dic.limits): the propagation grows only through matches whose standard deviation
# is within it (px) or max_sigma if smaller. Points between it and max_sigma are matched
# afterwards, each anchored to a well-determined neighbour (dic.matching._rescue.admit_uncertain).
# On the photographed motorcycle pair (smooth surfaces, step 5), letting them lead the growth
# pulled 13 good points up to 8 px off; matched afterwards they take the measured share from
# 91.5 to 95.5 %: 162 points, median error 0.17 px, median |error| / sigma 0.89, one beyond 2 px.
# DEFAULT_MAX_SIGMA (dic.limits): correlate's default max_sigma
#: the predicted interpolation bias (dic.matching.interpolation_bias) enters the standard
#: deviations times this: a pure bias |b| gives the median |error| / sigma of a normal error
#: (0.67) with sigma = 1.48 |b|, and the prediction is low (0.63-0.86 of the mean error of
#: exactly shifted photographs: camera, gravel, moon, coins at three shifts); on six
#: photographs with and without noise at shifts of 0.1-0.37 px this gives 0.5-0.9 (0.5 at
#: 0.37 px on gravel and grass, where the residual already overstates the random error)
BIAS_SCALE = 1.7
#: the noise of rounding to whole grey levels, sqrt(1/12): a floor of the standard deviations
#: of images that hold whole grey levels (on exactly shifted, rounded photographs without
#: noise the median |error| / sigma of moon fell from 3.1 to 1.5, brick's from 1.2 to 0.8, at
#: a shift of (0.1, 0.05) px)
QUANTUM = float(np.sqrt(1.0 / 12.0))
#: normalised median test (Westerweel & Scarano 2005): noise level (px) and threshold
MEDIAN_EPS = 0.1
MEDIAN_THRESHOLD = 2.0
#: ... applied at most this many times, each without the outliers of the one before
MEDIAN_PASSES = 3
#: seconds spent in the stages of the last call of correlate() in this process (for the
#: benchmark): prefilter, seeds (FFT search), iterations (compiled solver), propagation
#: (bookkeeping between solver calls), checks (shape order, sigma, neighbours)
last_timings: dict = {}

log = logging.getLogger(__name__)
# kernels the run compiles itself while the second process builds the solver (_ahead.ready)
set_builder(compile_kernel)


def compile_ahead(second_order: bool = False) -> bool:
    """On a fresh install, start compiling the numerical kernels in a second, low-priority
    process now (otherwise the first matcher does; see :mod:`dic.matching._ahead`). With
    ``second_order``, for a run that will use the second-order solver too, that process builds
    it first while this one builds the first-order solver. Returns True if a process was
    started (not when the compile cache is complete, or once one was started)."""
    return start(second_order_first=second_order)


# separate parts of the ROI smaller than this many points are not seeded on their own
_MIN_ISLAND = 10
# grids at least this many points across propagate over a coarse lattice first
_COARSE_MIN = 12
# ... over every fourth point first when at least this many across, every eighth from this many
_COARSE4_MIN = 32
_COARSE8_MIN = 64
# ... to this fraction of the tolerance
_COARSE_TOLERANCE = 0.3
# blocks of the noise estimate behind the texture rule (dic.matching.image_noise)
_NOISE_BLOCKS = 4000


class _Propagation:
    """State of one reliability-guided propagation over the point grid."""

    def __init__(self, matcher, gx, gy, candidate, in_image, min_zncc, sigma_limit=np.inf):
        from types import SimpleNamespace

        from dic.matching._waves import (BAD, DEFERRED, GOOD, NOT_CANDIDATE, TODO,
                                         fill_between, next_wave)

        #: the propagation's compiled bookkeeping and point states (loaded on first use)
        self.w = SimpleNamespace(BAD=BAD, GOOD=GOOD, NOT_CANDIDATE=NOT_CANDIDATE, TODO=TODO,
                                 DEFERRED=DEFERRED, fill_between=fill_between,
                                 next_wave=next_wave)
        self.m = matcher
        self.ny, self.nx = candidate.shape
        self.px = np.ascontiguousarray(gx, dtype=np.int64).ravel()
        self.py = np.ascontiguousarray(gy, dtype=np.int64).ravel()
        self.min_zncc = min_zncc
        #: matches whose standard deviation from the fit exceeds this (px) are not accepted
        #: (reason FLAT); weak ones (ZNCC below min_zncc) need weak_limit, WEAK_SIGMA x the
        #: growth's limit (not raised for uncertain points: a weak match's standard deviation
        #: does not see a false match)
        self.sigma_limit = sigma_limit
        self.weak_limit = WEAK_SIGMA * sigma_limit
        n = candidate.size
        self.state = np.where(candidate.ravel(), TODO, NOT_CANDIDATE).astype(
            np.int8)
        self.reason = np.select([candidate.ravel(), ~in_image.ravel()],
                                [Reason.NOT_REACHED, Reason.OUTSIDE_IMAGE],
                                Reason.OUTSIDE_ROI).astype(np.int8)
        self.params = np.full((n, n_params(matcher.second)), np.nan)
        self.zncc = np.full(n, np.nan)
        self.iters = np.zeros(n, np.int16)
        #: iterations near the solution (update below 0.1 px) of each point's final match
        #: (the second-order one where 'auto' chose it): dic.matching.slow_convergence_factor
        self.near_iters = np.zeros(n, np.int16)
        self.sigma = np.full(n, np.nan)
        self.unc = np.full((n, 6), np.nan)
        #: grey-level standard deviation of each candidate's reference subset
        self.std = np.full(n, np.nan)
        self.n_matched = 0
        self.seed_time = 0.0

    def mark_flat(self, idx):
        """Apply the texture rule of the matcher (:func:`SubsetMatcher`: ``min_std``,
        ``min_grad2``) to points ``idx`` before any matching; mark the flat ones ``FLAT``
        and return a boolean array, True where flat.

        The solver applies the same rule to every point it is given, so this is needed only
        where no match is tried: seed candidates (an FFT search on a flat subset is wasted) and
        the points of a part of the ROI where no seed took hold."""
        idx = np.asarray(idx, np.int64)
        flat = self.texture(idx)
        self.state[idx[flat]] = self.w.BAD
        self.reason[idx[flat]] = Reason.FLAT
        return flat

    def texture(self, idx):
        """Grey-level standard deviation of the reference subsets at points ``idx`` (into
        ``self.std``) and whether the matcher's texture rule finds them flat (returned)."""
        from dic.images.parallel import run_chunks
        from dic.matching._icgn_kernel import flat_subsets

        ready("flat_subsets")
        idx = np.asarray(idx, np.int64)
        std, flat = np.empty(idx.size), np.empty(idx.size, np.bool_)
        m = self.m
        run_chunks(flat_subsets, idx.size, m.reference, m.gx, m.gy, self.px[idx],
                   self.py[idx], m.half, m.flat_rule(), std, flat, min_chunk=64)
        self.std[idx] = std
        return flat

    def fit_sigma(self, std, zncc, unc):
        """The larger of the standard deviations (px) of u and v from the fit of matches with
        subset standard deviations ``std``, ZNCC ``zncc`` and uncertainty terms ``unc``
        (:func:`dic.matching.posterior_sigma`)."""
        su, sv = posterior_sigma(std, zncc, unc, (2 * self.m.half + 1) ** 2,
                                 n_params(self.m.second), self.m.order)
        return np.fmax(su, sv)

    def run(self, idx, p0, *, retry_later=False, on_fail=None, tolerance=None):
        """Match points ``idx`` from ``p0``; return the indices that matched well.

        Points that fail become ``BAD``, or ``TODO`` again with ``retry_later`` (a failed
        start from an outside guess is no verdict), or ``on_fail`` when given."""
        res = self.m.match(self.px[idx], self.py[idx], p0, tolerance)
        self.n_matched += len(idx)
        conv = res.status == Reason.MEASURED
        good = conv & (res.zncc >= self.min_zncc)
        # a noisy but well-determined match: low ZNCC, small standard deviation from the fit
        weak = conv & ~good & (res.zncc >= WEAK_ZNCC)
        wide = np.zeros(good.shape, bool)
        if np.isfinite(self.sigma_limit):
            k = np.flatnonzero(good | weak)
            strong = good[k]
            ok = self.fit_sigma(res.std[k], res.zncc[k], res.uncertainty[k]) <= np.where(
                strong, self.sigma_limit, self.weak_limit)
            good[k] = ok  # NaN compares False
            wide[k] = strong & ~ok
        status = np.select([wide, conv & ~good], [Reason.FLAT, Reason.LOW_ZNCC],
                           res.status).astype(np.int8)
        self.params[idx] = res.params
        self.std[idx] = res.std
        self.zncc[idx] = res.zncc
        self.iters[idx] = res.iterations
        self.near_iters[idx] = res.near_iterations
        self.sigma[idx] = res.sigma_factor
        self.unc[idx] = res.uncertainty
        self.reason[idx] = status
        if on_fail is None:
            on_fail = self.w.TODO if retry_later else self.w.BAD
        # a subset without texture (or too uncertain a match) is flat whatever the starting
        # guess: no retry
        self.state[idx] = np.where(good, self.w.GOOD,
                                   np.where(status == Reason.FLAT, self.w.BAD, on_fail))
        return idx[good]

    def propagate(self, new_good):
        """Grow outwards from ``new_good`` until no neighbour is left to match.

        On larger grids the growth first runs over a coarse lattice through the first of
        ``new_good``: every eighth point (every fourth, every second on smaller grids), with
        diagonal neighbours, matched to a third of the tolerance. The points in between are
        then matched in row-ordered batches (with every eighth point first those of the lattice
        of every fourth, then the rest), each from the median of its matched neighbours'
        predictions, which keeps both cores busy and the image data in cache. A lattice point
        that fails from its far neighbour is tried again in a batch; a point that fails in the
        last batch gets one more try from a 4-neighbour in the final waves over the full grid.
        """
        w = self.w
        if self.ny >= _COARSE_MIN and self.nx >= _COARSE_MIN and new_good.size:
            across = min(self.ny, self.nx)
            stride = 8 if across >= _COARSE8_MIN else 4 if across >= _COARSE4_MIN else 2
            r0, c0 = divmod(int(new_good[0]), self.nx)
            # the lattice points start from a neighbour far away and are the starting guesses
            # of all the others: they are matched to a third of the tolerance
            tol = _COARSE_TOLERANCE * self.m.tolerance
            self._waves(new_good, stride, on_fail=w.DEFERRED, tolerance=tol)
            self.state[self.state == w.DEFERRED] = w.TODO
            tried = np.zeros(0, np.int64)
            # the points of the lattice of half the spacing, then all the others, each from
            # the matched points around it, in one batch per step
            ready("fill_between")
            for lattice, reach, t in ((4, 4, tol), (1, 2, None)) if stride == 8 else \
                    ((1, stride // 2, None),):
                idx, p0 = w.fill_between(self.state, self.zncc, self.params, self.nx,
                                         self.ny, self.px, self.py, self.m.second, reach,
                                         lattice, r0, c0)
                if idx.size:
                    self.run(idx, p0, retry_later=True, tolerance=t)
                    tried = idx[self.state[idx] == w.TODO]
            new_good = np.flatnonzero(self.state == w.GOOD)
            self._waves(new_good, 1)
            # a point that failed from two different neighbours is not tried again
            left = tried[self.state[tried] == w.TODO]
            self.state[left] = w.BAD
            return
        self._waves(new_good, 1)

    def _waves(self, new_good, stride, on_fail=None, tolerance=None):
        ready("next_wave")
        while new_good.size:
            idx, p0 = self.w.next_wave(self.state, self.zncc, self.params, self.nx, self.ny,
                                       self.px, self.py, self.m.second,
                                       new_good.astype(np.int64), stride,
                                       8 if stride > 1 else 4)
            if idx.size == 0:
                break
            new_good = self.run(idx, p0, on_fail=on_fail, tolerance=tolerance)


def _try_seed(prop, k, ref, deformed, search, guess=None, start=None):
    """Match grid point ``k`` from a full parameter vector ``start``, a user's ``(u, v)``
    guess, or an FFT search; True if it is a good seed."""
    from dic.matching._seed import fft_guess

    if prop.mark_flat([k])[0]:
        return False
    if start is not None and np.all(np.isfinite(start[k])):
        if prop.run(np.array([k], np.int64), start[k][None, :], retry_later=True).size:
            return True
    x, y = int(prop.px[k]), int(prop.py[k])
    if guess is None:
        rows, cols = ref.shape
        half = prop.m.half
        # a larger template than the subset makes the whole-pixel search more robust
        big = min(max(half, 15), x, y, cols - 1 - x, rows - 1 - y)
        import time

        t0 = time.perf_counter()
        du, dv, score = fft_guess(ref, deformed, x, y, half=max(big, half), search=search)
        prop.seed_time += time.perf_counter() - t0
        if not np.isfinite(score):
            return False
    else:
        du, dv = guess
    p0 = np.zeros(n_params(prop.m.second))
    iu, iv = index_u_v(prop.m.second)
    p0[iu], p0[iv] = du, dv
    good = prop.run(np.array([k], np.int64), p0[None, :], retry_later=True)
    return good.size == 1


def _nearest_candidate(prop, x, y):
    todo = np.flatnonzero(prop.state == prop.w.TODO)
    if todo.size == 0:
        return None
    d = (prop.px[todo] - x) ** 2 + (prop.py[todo] - y) ** 2
    return int(todo[np.argmin(d)])


def _parse_seeds(seeds):
    if seeds is None:
        return []
    arr = np.asarray(seeds, dtype=float)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] not in (2, 4) or not np.all(np.isfinite(arr)):
        raise ValueError("seeds must be a list of (x, y) or (x, y, u, v) points in reference "
                         "pixels, e.g. seeds=[(250, 300)]")
    return [tuple(r) for r in arr]


def correlate(reference, deformed, *, subset: int = 21, step: int = 10, roi=None,
              shape_function: str = "auto", interpolation: str = "quintic",
              seeds: Sequence | None = None, search: int = 60, min_zncc: float = 0.9,
              max_iterations: int = 50, tolerance: float = 0.02, min_texture: float = 0.0,
              max_sigma: float = DEFAULT_MAX_SIGMA, initial: DisplacementField | None = None,
              workers: int | None = None, image_noise=None, _prepared=None,
              _points=None) -> DisplacementField:
    """Measure the displacement field between a reference and a deformed image.

    Square subsets of the reference image, centred on a regular grid of points, are matched in
    the deformed image by inverse-compositional Gauss-Newton (IC-GN) iteration on the zero-
    normalised sum of squared differences (ZNSSD), which is insensitive to offset and gain
    changes of the lighting. The deformed image is interpolated by a prefiltered B-spline.
    Starting guesses come from a zero-normalised FFT cross-correlation at one or more seed
    points, then spread by reliability-guided propagation: each point starts from its
    best-correlated matched neighbour. Propagation runs in parallel waves (all points bordering
    the matched region at once), a parallel variant of the ZNCC-ordered queue of [3]_. A point
    whose match failed is tried again from each of its other matched neighbours.

    Parameters
    ----------
    reference, deformed : ndarray or path
        Grey or colour images of equal size (colour is converted to luminance).
    subset : int, optional
        Subset size in px (odd, at least 7).
    step : int, optional
        Grid spacing in px.
    roi : None, bool array, rectangle, polygon or mask-image path, optional
        Region of interest (see :func:`dic.images.roi.make_roi`). Points whose subset is not wholly
        inside it are not measured.
    shape_function : {'auto', 'affine', 'quadratic'}, optional
        First-order (6 parameters) or second-order (12 parameters) subset shape function.
        ``'auto'`` (default) matches every point to first order, then again to second order
        where the curvature of the field, estimated from the neighbours' gradients, would bias
        the first-order match by more than 0.01 px (see
        :func:`dic.matching.affine_bias`); ``field.shape_order`` says which was used.
    interpolation : {'cubic', 'quintic'}, optional
        B-spline degree for the deformed image.
    seeds : list of (x, y) or (x, y, u, v), optional
        Seed points in reference px, optionally with a displacement guess. By default one seed
        is placed near the centre of every connected part of the ROI.
    search : int, optional
        Search radius (px) of the FFT starting guess at seed points.
    min_zncc : float, optional
        Matches with a lower zero-normalised cross-correlation are rejected, unless their ZNCC
        is at least 0.5 and their standard deviation from the fit (see ``max_sigma``) at most
        half of ``max_sigma``: on noisy, low-texture images a well-determined match can have
        a low ZNCC.
    max_iterations : int, optional
        Gauss-Newton iteration cap.
    tolerance : float, optional
        Convergence threshold on the norm of the parameter update (px at the subset edge).
    min_texture : float, optional
        Subsets whose grey-level standard deviation is below this fraction of the image's
        1-99 percentile range are flat and not matched (off by default: ``max_sigma`` decides).
    max_sigma : float, optional
        Points whose standard deviation of u or v exceeds this many px are ``FLAT``: judged
        from the residual of the converged match (``std_u``, ``std_v``). Before matching,
        subsets whose standard deviation predicted from the estimated image noise and their
        grey-level gradients exceeds three times this are skipped as hopeless. The growth from
        point to point runs only through matches within ``GROW_SIGMA`` (0.2 px); the less
        certain points up to ``max_sigma`` are matched afterwards from their well-determined
        neighbours and reported with their (larger) standard deviations, which strain fits
        weigh them by. Lower it (e.g. 0.2) to leave such points unmeasured.
    initial : DisplacementField, optional
        A field on the same grid (for example from the previous image of a sequence) that
        gives the seed points their starting guesses instead of the FFT search; the other
        points start from their best matched neighbour as usual.
    workers : int, optional
        Threads for the matching kernel (default: all cores).
    image_noise : float or (float, float), optional
        Noise standard deviation of the images in grey levels (one value for both, or
        reference and deformed). When given, ``std_u``, ``std_v`` are predicted from it
        (:func:`dic.matching.point_sigma`); by default they come from the residual of each
        converged match (:func:`dic.matching.posterior_sigma`). Either way they are widened
        where the match converged slowly (:func:`dic.matching.slow_convergence_factor`) and
        include the predicted bias of interpolating the deformed image
        (:func:`dic.matching.interpolation_bias`, times ``BIAS_SCALE``). The noise estimated from
        each image over the points' area (:func:`dic.metrology.image_noise`) serves only the
        texture check before matching.

    Returns
    -------
    DisplacementField
        Displacements, gradients, ZNCC and a reason code for every point, the standard
        deviations ``std_u``, ``std_v`` (``settings["sigma_from"]`` says from what) and the
        shape-function order of each point (``shape_order``); the noise used is in
        ``settings["image_noise"]`` (reference, deformed).

    References
    ----------
    .. [1] B. Pan, K. Li, W. Tong, "Fast, robust and accurate digital image correlation
       calculation without redundant computations", Exp. Mech. 53 (2013) 1277-1289.
    .. [2] B. Pan, H. Xie, Z. Wang, "Equivalence of digital image correlation criteria for
       pattern matching", Applied Optics 49 (2010) 5501-5509.
    .. [3] B. Pan, "Reliability-guided digital image correlation for image deformation
       measurement", Applied Optics 48 (2009) 1535-1542.
    .. [4] M. Unser, "Splines: a perfect fit for signal and image processing", IEEE Signal
       Process. Mag. 16 (1999) 22-38.
    """
    from dic.images.io import read_image

    (subset, step, second, order, search, min_zncc, max_iterations, tolerance,
     min_texture) = check_options(subset, step, shape_function, interpolation, search,
                                   min_zncc, max_iterations, tolerance, min_texture)
    seed_list = _parse_seeds(seeds)
    ref = read_image(reference, name="reference")
    dfm = read_image(deformed, name="deformed")
    if ref.shape != dfm.shape:
        raise ValueError(f"reference and deformed images differ in size ({ref.shape[1]} x "
                         f"{ref.shape[0]} vs {dfm.shape[1]} x {dfm.shape[0]} px); use images "
                         f"from the same camera and crop")
    if _points is None:
        xs, ys, candidate, mask, in_image = prepare_grid(ref.shape, roi, subset, step,
                                                         edge_margin(order))
        gx, gy = np.meshgrid(xs, ys)
    else:
        gx, gy, candidate, in_image, mask = _irregular_points(ref.shape, subset, order,
                                                              *_points)
    if initial is not None and initial.shape != candidate.shape:
        raise ValueError(f"initial field has grid {initial.shape}, this analysis has "
                         f"{candidate.shape}; use a field from the same ROI, subset and step")
    noise = _image_noise(image_noise, ref, dfm, gx[candidate], gy[candidate], subset)

    min_std = 0.0
    if min_texture > 0:
        # the grey-level range of the ROI, from a sparse sample (exactness is not needed here)
        sample = ref[::3, ::3][mask[::3, ::3]]
        lo, hi = np.percentile(sample if sample.size > 100 else ref[mask], [1, 99])
        min_std = min_texture * float(hi - lo)
    max_sigma = check_max_sigma(max_sigma)
    # the translation-only prediction sqrt(noise^2 / SSSIG) of dic.matching.translation_sigma
    # above PRECHECK x max_sigma, turned into a bound on SSSIG (applied by the solver to every
    # subset before it iterates); the residual of the match decides the rest
    noise2 = float(np.nansum(np.square(np.asarray(noise, dtype=np.float64))))
    grow_sigma = min(max_sigma, GROW_SIGMA)
    min_grad2 = noise2 / (PRECHECK * grow_sigma) ** 2
    loose_grad2 = noise2 / (PRECHECK * max_sigma) ** 2
    auto = SHAPE_FUNCTIONS[str(shape_function).lower()] == 0
    prev_threads = None
    if workers is not None:
        import numba

        workers = check_int("workers", workers, 1, "e.g. 2")
        prev_threads = numba.get_num_threads()
        numba.set_num_threads(min(workers, numba.config.NUMBA_NUM_THREADS))
    import time

    t0 = time.perf_counter()
    try:
        matcher = SubsetMatcher(ref, dfm, subset=subset, second_order=second, order=order,
                                max_iterations=max_iterations, tolerance=tolerance,
                                min_std=min_std, min_grad2=min_grad2,
                                reference_gradients=_prepared, border=0)
        t1 = time.perf_counter()
        prop = _Propagation(matcher, gx, gy, candidate, in_image, min_zncc, grow_sigma)
        _solve(prop, ref, dfm, search, seed_list, initial)
        if max_sigma > grow_sigma:
            admit_uncertain(prop, loose_grad2, max_sigma)
        featureless(prop, noise[0])
        t2 = time.perf_counter()
        k_solve = matcher.kernel_time
        shape_order = np.where(prop.state == prop.w.GOOD, 2 if second else 1, 0).astype(np.int8)
        if auto:
            matcher.extra_time = second_order_where_curved(
                prop, shape_order, step, order, max_iterations, tolerance, min_std)
            second = True
        sig_u, sig_v = _finish(prop, shape_order, noise if image_noise is not None else None,
                               order, max_sigma, _integer_valued(ref, dfm))
        t3 = time.perf_counter()
        k_extra = getattr(matcher, "extra_time", 0.0) or 0.0
        last_timings.clear()
        last_timings.update(prefilter=t1 - t0, seeds=prop.seed_time,
                            iterations=k_solve + k_extra,
                            propagation=t2 - t1 - k_solve - prop.seed_time,
                            checks=t3 - t2 - k_extra)
    finally:
        if prev_threads is not None:
            import numba

            numba.set_num_threads(prev_threads)

    shape = candidate.shape
    good = prop.state == prop.w.GOOD
    shape_order[~good] = 0
    p = np.where(good[:, None], prop.params, np.nan)
    iu, iv = index_u_v(second)
    grad = grad_from_params(p, second).reshape(shape + (2, 2))
    grad2 = None
    if second:
        # points matched to first order (shape_function 'auto') have no second derivatives
        q = np.where((shape_order == 2)[:, None], p, np.nan)
        grad2 = np.stack([q[:, iu + 3:iu + 6], q[:, iv + 3:iv + 6]], axis=1).reshape(
            shape + (2, 3))
    settings = {
        "subset": subset, "step": step,
        "shape_function": "auto" if auto else ("quadratic" if second else "affine"),
        "interpolation": "quintic" if order == 5 else "cubic",
        "criterion": "ZNSSD", "solver": "IC-GN", "min_zncc": min_zncc,
        "max_iterations": max_iterations, "tolerance": tolerance,
        "min_texture": min_texture, "max_sigma": max_sigma, "search": search,
        "image_shape": tuple(int(s) for s in ref.shape),
        "image_noise": noise,
        "sigma_from": "residual" if image_noise is None else "image_noise",
        "shape_order_counts": {"first": int(np.count_nonzero(shape_order == 1)),
                               "second": int(np.count_nonzero(shape_order == 2))},
    }
    field = DisplacementField(
        x=gx.astype(np.float64), y=gy.astype(np.float64),
        u=p[:, iu].reshape(shape), v=p[:, iv].reshape(shape), grad=grad,
        zncc=np.where(good, prop.zncc, np.nan).reshape(shape),
        reason=prop.reason.reshape(shape), iterations=prop.iters.reshape(shape),
        grad2=grad2, settings=settings, std_u=sig_u.reshape(shape),
        std_v=sig_v.reshape(shape), shape_order=shape_order.reshape(shape))
    _warn_flat(field, candidate)
    log.info("matched %s", field.summary())
    return field


def _image_noise(value, ref, dfm, px, py, subset):
    """(reference, deformed) noise standard deviations: given, or estimated from each image
    over the bounding box of the points' subsets (its central 128 x 128 px at most: the noise
    is taken as the same everywhere, and the estimate then costs a few milliseconds)."""
    if value is not None:
        try:
            vals = np.atleast_1d(np.asarray(value, dtype=np.float64)).ravel()
        except (TypeError, ValueError):
            vals = np.array([np.nan])
        if vals.size not in (1, 2) or not np.all(np.isfinite(vals) & (vals >= 0)):
            raise ValueError(f"image_noise must be one or two non-negative numbers (grey "
                             f"levels), got {value!r}; e.g. 2.0")
        return (float(vals[0]), float(vals[-1]))
    from dic.matching._noise import image_noise

    half = subset // 2
    if px.size == 0:
        return (float("nan"), float("nan"))
    r0, r1 = max(int(py.min()) - half, 0), min(int(py.max()) + half + 1, ref.shape[0])
    c0, c1 = max(int(px.min()) - half, 0), min(int(px.max()) + half + 1, ref.shape[1])
    big = 128
    if r1 - r0 > big:
        r0 = (r0 + r1 - big) // 2
        r1 = r0 + big
    if c1 - c0 > big:
        c0 = (c0 + c1 - big) // 2
        c1 = c0 + big
    # a subsample of the blocks is enough for the texture rule (a few per cent of scatter)
    return (image_noise(ref[r0:r1, c0:c1], max_blocks=_NOISE_BLOCKS),
            image_noise(dfm[r0:r1, c0:c1], max_blocks=_NOISE_BLOCKS))


def _irregular_points(shape, subset, order, px, py, wanted):
    """Points at given integer pixels, in grid topology (used from updated references)."""
    px = np.asarray(px, dtype=np.int64)
    py = np.asarray(py, dtype=np.int64)
    lo = edge_margin(order) + subset // 2
    in_image = (px >= lo) & (px <= shape[1] - 1 - lo) & (py >= lo) & (py <= shape[0] - 1 - lo)
    candidate = np.asarray(wanted, bool) & in_image
    mask = np.zeros(shape, bool)
    mask[np.clip(py, 0, shape[0] - 1), np.clip(px, 0, shape[1] - 1)] = True
    return px, py, candidate, in_image, mask


def _solve(prop, ref, dfm, search, seed_list, initial):
    """Run the initial guesses, seeds and propagation until every point is decided."""
    from scipy import ndimage

    w = prop.w
    start = None
    if initial is not None:
        # an earlier field gives the seeds their starting guesses; the rest of the points
        # still start from their best matched neighbour, which is the more reliable guess
        start = params_from_fields(initial.u.ravel(), initial.v.ravel(),
                                   initial.grad.reshape(-1, 2, 2), prop.m.second)
    for s in seed_list:
        k = _nearest_candidate(prop, s[0], s[1])
        if k is None:
            break
        guess = (s[2], s[3]) if len(s) == 4 else None
        if _try_seed(prop, k, ref, dfm, search, guess):
            prop.propagate(np.array([k], np.int64))
        else:
            log.warning("seed at (%.0f, %.0f) found no reliable match", s[0], s[1])
    def texture(idx):
        # seeds beyond the first tries go to the best-textured subsets (largest SSSIG)
        return sssig(prop.m.gx, prop.m.gy, prop.px[idx], prop.py[idx], prop.m.half)

    # every part of the ROI that is still unmatched gets seeds of its own
    while True:
        todo = (prop.state == w.TODO).reshape(prop.ny, prop.nx)
        if not todo.any():
            break
        labels, n = ndimage.label(todo)
        sizes = np.bincount(labels.ravel())[1:]
        progress = False
        for rank, lab in enumerate(np.argsort(-sizes) + 1):
            comp = np.flatnonzero(labels.ravel() == lab)
            comp = comp[prop.state[comp] == w.TODO]
            if comp.size == 0:
                continue
            if comp.size < _MIN_ISLAND and (rank > 0 or (prop.state == w.GOOD).any()):
                # a small patch cut off from the rest cannot be checked against neighbours:
                # a seed there is as likely to lock onto a false match as a true one
                _unreached(prop, comp)
                continue
            for k in seed_candidates(comp, prop.px, prop.py, texture, 2 * prop.m.half + 1):
                if prop.state[k] != w.TODO:
                    continue
                if _try_seed(prop, k, ref, dfm, search, start=start):
                    before = prop.state == w.GOOD
                    prop.propagate(np.array([k], np.int64))
                    grown = np.count_nonzero(prop.state == w.GOOD) - np.count_nonzero(before)
                    if grown + 1 < min(_MIN_ISLAND, comp.size):
                        # the seed's neighbours do not follow it: a false match; withdraw
                        back = np.append(np.flatnonzero((prop.state == w.GOOD) & ~before), k)
                        prop.state[back] = w.BAD
                        prop.reason[back] = Reason.NOT_REACHED
                        continue
                    progress = True
                    break
                prop.state[k] = w.BAD  # a seed that failed is not retried as a seed
            else:
                # no seed took hold in this part: its points stay unmeasured
                _unreached(prop, comp[prop.state[comp] == w.TODO])
        if not progress and not (prop.state == w.TODO).any():
            break
    retry_failed(prop)
    _explain_unreached(prop, ref.shape)


def _unreached(prop, idx):
    """Points ``idx`` that no match will be tried at: ``FLAT`` where their subset lacks
    texture (a blank image, the inside of a flat patch), otherwise ``NOT_REACHED``."""
    rest = idx[~prop.mark_flat(idx)]
    prop.state[rest] = prop.w.BAD
    prop.reason[rest] = Reason.NOT_REACHED


def _explain_unreached(prop, shape):
    """Unmeasured points whose match, extrapolated from the nearest measured point, would leave
    the image: that is the reason to report, not 'not reached' or a failed seed attempt.
    Conversely a match that wandered out of the image from a start well inside it diverged:
    NO_CONVERGENCE, not OUTSIDE_IMAGE (on the photographed motorcycle pair, a dark patch of
    floor in mid-image, whose subsets hardly correlate at the true disparity, was reported as
    outside the image)."""
    from scipy import ndimage

    nr = np.flatnonzero(np.isin(prop.reason, (Reason.NOT_REACHED, Reason.LOW_ZNCC,
                                              Reason.NO_CONVERGENCE, Reason.DEGENERATE))
                        | ((prop.reason == Reason.OUTSIDE_IMAGE)
                           & (prop.state != prop.w.NOT_CANDIDATE)))
    good = (prop.state == prop.w.GOOD).reshape(prop.ny, prop.nx)
    if nr.size == 0 or not good.any():
        return
    _, (ri, ci) = ndimage.distance_transform_edt(~good, return_indices=True)
    nb = (ri.ravel() * prop.nx + ci.ravel())[nr]
    second = prop.m.second
    iu, iv = index_u_v(second)
    p = prop.params[nb]
    ddx = (prop.px[nr] - prop.px[nb]).astype(float)
    ddy = (prop.py[nr] - prop.py[nb]).astype(float)
    u = p[:, iu] + p[:, iu + 1] * ddx + p[:, iu + 2] * ddy
    v = p[:, iv] + p[:, iv + 1] * ddx + p[:, iv + 2] * ddy
    reach = prop.m.half * (1.0 + np.abs(p[:, [iu + 1, iu + 2, iv + 1, iv + 2]]).sum(axis=1))
    lo = prop.m.border
    xw, yw = prop.px[nr] + u, prop.py[nr] + v
    leaves = ((xw - reach < lo) | (xw + reach > shape[1] - 1 - lo)
              | (yw - reach < lo) | (yw + reach > shape[0] - 1 - lo))
    wandered = (prop.reason[nr] == Reason.OUTSIDE_IMAGE) & ~leaves
    prop.reason[nr[leaves]] = Reason.OUTSIDE_IMAGE
    prop.reason[nr[wandered]] = Reason.NO_CONVERGENCE


def _subset_std(prop, good):
    """Grey-level standard deviation of the reference subsets at the points ``good``."""
    return np.where(good, prop.std, np.nan)


def _integer_valued(*images):
    """Whether the images hold whole grey levels only (judged on a sparse sample)."""
    for img in images:
        sample = img[::7, ::7]
        if not np.array_equal(sample, np.rint(sample)):
            return False
    return True


def _finish(prop, shape_order, noise, order, max_sigma, integer=False):
    """Per-point standard deviations, then the points too uncertain (FLAT) or inconsistent
    with their neighbours (INCONSISTENT) taken out. ``integer``: the images hold whole grey
    levels. Returns (std_u, std_v)."""

    good = prop.state == prop.w.GOOD
    npix = (2 * prop.m.half + 1) ** 2
    std = _subset_std(prop, good)
    npar = np.where(shape_order == 2, 12, 6)
    if noise is None:
        su, sv = posterior_sigma(std, prop.zncc, prop.unc, npix, npar, order)
    else:
        # the user's noise figure: the prediction from it (dic.matching.point_sigma)
        su, sv = point_sigma(prop.unc, noise[0], noise[1], order)
    # a match that crawled to its solution is less sure than its Hessian says
    slow = slow_convergence_factor(prop.near_iters)
    su, sv = su * slow, sv * slow
    if noise is None and integer:
        # rounding to whole grey levels adds noise of variance 1/12 to each image (common
        # practice, no source); under a small shift of a smooth image the two roundings
        # agree, the residual misses them and the match locks towards the samples, so
        # the standard deviations are at least what that noise alone would give
        qu, qv = point_sigma(prop.unc, QUANTUM, QUANTUM, order)
        su, sv = np.fmax(su, qu), np.fmax(sv, qv)
    # the bias of each match from interpolating the deformed image: a systematic error the
    # residual does not show (dic.matching.interpolation_bias)
    idx = np.flatnonzero(good)
    if idx.size:
        m = prop.m
        b = interpolation_bias(m.gx, m.gy, prop.px[idx], prop.py[idx], prop.params[idx],
                               m.half, order, prop.params.shape[1] == 12)
        su[idx] = np.hypot(su[idx], BIAS_SCALE * b[:, 0])
        sv[idx] = np.hypot(sv[idx], BIAS_SCALE * b[:, 1])
    su, sv = near_border(prop, good, su, sv, order)
    too_wide = good & ~((su <= max_sigma) & (sv <= max_sigma))
    prop.state[too_wide] = prop.w.BAD
    prop.reason[too_wide] = Reason.FLAT
    good = prop.state == prop.w.GOOD
    shape = (prop.ny, prop.nx)
    second = prop.params.shape[1] == 12
    iu, iv = index_u_v(second)
    g = grad_from_params(prop.params, second).reshape(shape + (2, 2))
    g2 = None
    if second:
        g2 = np.stack([prop.params[:, iu + 3:iu + 6], prop.params[:, iv + 3:iv + 6]],
                      axis=1).reshape(shape + (2, 3))
    # again without the outliers found, which may have hidden others next to them (a pair of
    # false matches with one good neighbour is not tested the first time)
    for _ in range(MEDIAN_PASSES):
        out = median_test(prop.px.reshape(shape), prop.py.reshape(shape),
                          prop.params[:, iu].reshape(shape), prop.params[:, iv].reshape(shape),
                          g, good.reshape(shape), grad2=g2, eps=MEDIAN_EPS,
                          threshold=MEDIAN_THRESHOLD).ravel()
        prop.state[out] = prop.w.BAD
        prop.reason[out] = Reason.INCONSISTENT
        good = prop.state == prop.w.GOOD
        if not out.any():
            break
    return np.where(good, su, np.nan), np.where(good, sv, np.nan)


def _warn_flat(field, candidate):
    """A warning when most of the points could not be matched for lack of texture."""
    import warnings

    n = int(np.count_nonzero(candidate))
    flat = int(np.count_nonzero(field.reason == Reason.FLAT))
    if n and flat >= 0.5 * n:
        warnings.warn(f"{flat} of {n} points have too little texture to be measured (FLAT); "
                      f"check the images show a speckle pattern, or raise max_sigma",
                      stacklevel=3)
