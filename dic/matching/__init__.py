"""Subset matching: the displacement field between a reference and a deformed image.

The public function is :func:`correlate`. Its stages live in private modules: ``_seed`` (FFT
starting guess), ``_icgn`` / ``_icgn_kernel`` (IC-GN solver), ``_waves`` (propagation
bookkeeping), ``_reference`` (a plain, slow solver the tests compare the kernel against).
"""

from __future__ import annotations

import logging
from collections.abc import Sequence

import numpy as np

from dic.field import DisplacementField, Reason
from dic.matching._icgn import (INTERPOLATIONS, SHAPE_FUNCTIONS, SubsetMatcher, edge_margin,
                    grad_from_params, index_u_v, n_params, params_from_fields)

__all__ = ["correlate", "prepare_grid"]

log = logging.getLogger(__name__)

_SEED_TRIES = 7
# separate parts of the ROI smaller than this many points are not seeded on their own
_MIN_ISLAND = 10
# grids at least this many points across propagate over a coarse lattice first
_COARSE_MIN = 12


def _check_int(name, value, low, hint):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{name} must be an integer, got {value!r}; {hint}")
    if value < low:
        raise ValueError(f"{name} must be at least {low}, got {value}; {hint}")
    return int(value)


def _check_options(subset, step, shape_function, interpolation, search, min_zncc,
                   max_iterations, tolerance, min_texture):
    subset = _check_int("subset", subset, 7, "use an odd size of 7 px or more, e.g. 21")
    if subset % 2 == 0:
        raise ValueError(f"subset must be odd so it has a centre pixel, got {subset}; "
                         f"use {subset + 1}")
    step = _check_int("step", step, 1, "use a grid spacing of 1 px or more, e.g. 10")
    sf = str(shape_function).lower()
    if sf not in SHAPE_FUNCTIONS:
        raise ValueError(f"unknown shape_function {shape_function!r}; use 'affine' or "
                         f"'quadratic'")
    it = str(interpolation).lower()
    if it not in INTERPOLATIONS:
        raise ValueError(f"unknown interpolation {interpolation!r}; use 'cubic' or 'quintic'")
    search = _check_int("search", search, 0, "give the search radius in px, e.g. 60")
    if not (-1.0 < float(min_zncc) < 1.0):
        raise ValueError(f"min_zncc must lie between -1 and 1, got {min_zncc}; e.g. 0.9")
    max_iterations = _check_int("max_iterations", max_iterations, 1, "e.g. 50")
    if not float(tolerance) > 0:
        raise ValueError(f"tolerance must be positive, got {tolerance}; e.g. 0.001 px")
    if not 0.0 <= float(min_texture) < 1.0:
        raise ValueError(f"min_texture must lie in [0, 1), got {min_texture}; e.g. 0.02")
    return (subset, step, SHAPE_FUNCTIONS[sf] == 2, INTERPOLATIONS[it], search,
            float(min_zncc), max_iterations, float(tolerance), float(min_texture))


#: the checks of :func:`correlate`'s options, public for drivers that lay out the grid of
#: points themselves (:func:`dic.sequence.track`); returns the checked values
check_options = _check_options


def prepare_grid(shape, roi, subset, step, border=0):
    """Point grid over the ROI and the points whose whole subset lies inside it.

    Parameters
    ----------
    shape : tuple
        Image shape ``(rows, cols)``.
    roi : None, bool array, rectangle or polygon
        See :func:`dic.images.roi.make_roi`.
    subset, step : int
        Subset size and grid spacing (px).
    border : int, optional
        Width of the image margin that subsets must not touch (px).

    Returns
    -------
    xs, ys : ndarray of int
        Column and row positions of the grid lines.
    candidate : ndarray of bool, shape (len(ys), len(xs))
        Points whose subset is wholly inside the ROI and clear of the image margin.
    mask : ndarray of bool
        The ROI as a pixel mask.
    in_image : ndarray of bool, shape (len(ys), len(xs))
        Points whose subset is clear of the image margin.
    """
    from dic.images.roi import erode_for_subset, make_roi, roi_bbox

    mask = make_roi(roi, shape)
    half = subset // 2
    x0, y0, x1, y1 = roi_bbox(mask)
    xs = np.arange(x0 + half, x1 - half + 1, step, dtype=np.int64)
    ys = np.arange(y0 + half, y1 - half + 1, step, dtype=np.int64)
    if xs.size == 0 or ys.size == 0:
        raise ValueError(f"roi is too small for subset {subset} px (its bounding box is "
                         f"{x1 - x0 + 1} x {y1 - y0 + 1} px); enlarge the ROI or use a smaller "
                         f"subset")
    rows, cols = shape
    lo_x, hi_x = border + half, cols - 1 - border - half
    lo_y, hi_y = border + half, rows - 1 - border - half
    in_image = (((xs >= lo_x) & (xs <= hi_x))[None, :] & ((ys >= lo_y) & (ys <= hi_y))[:, None])
    if mask[y0:y1 + 1, x0:x1 + 1].all():
        # a rectangular ROI: every subset inside the bounding box is inside the ROI
        candidate = in_image
    else:
        candidate = erode_for_subset(mask, subset)[np.ix_(ys, xs)] & in_image
    if not candidate.any():
        raise ValueError(f"roi holds no point whose {subset} px subset fits inside it; enlarge "
                         f"the ROI or use a smaller subset")
    return xs, ys, candidate, mask, in_image


class _Propagation:
    """State of one reliability-guided propagation over the point grid."""

    def __init__(self, matcher, gx, gy, candidate, in_image, min_zncc):
        from dic.matching import _waves

        self.w = _waves
        self.m = matcher
        self.ny, self.nx = candidate.shape
        self.px = np.ascontiguousarray(gx, dtype=np.int64).ravel()
        self.py = np.ascontiguousarray(gy, dtype=np.int64).ravel()
        self.min_zncc = min_zncc
        n = candidate.size
        self.state = np.where(candidate.ravel(), _waves.TODO, _waves.NOT_CANDIDATE).astype(
            np.int8)
        self.reason = np.select([candidate.ravel(), ~in_image.ravel()],
                                [Reason.NOT_REACHED, Reason.OUTSIDE_IMAGE],
                                Reason.OUTSIDE_ROI).astype(np.int8)
        self.params = np.full((n, n_params(matcher.second)), np.nan)
        self.zncc = np.full(n, np.nan)
        self.iters = np.zeros(n, np.int16)
        self.sigma = np.full(n, np.nan)
        self.unc = np.full((n, 6), np.nan)
        self.n_matched = 0

    def mark_flat(self, min_std):
        """Mark points whose reference subset has too little texture before any matching."""
        from dic.matching._icgn_kernel import subset_std

        todo = np.flatnonzero(self.state == self.w.TODO)
        std = np.empty(todo.size)
        subset_std(self.m.reference, self.px[todo], self.py[todo], self.m.half, std)
        flat = todo[std < min_std]
        self.state[flat] = self.w.BAD
        self.reason[flat] = Reason.FLAT

    def run(self, idx, p0, *, retry_later=False):
        """Match points ``idx`` from ``p0``; return the indices that matched well."""
        res = self.m.match(self.px[idx], self.py[idx], p0)
        self.n_matched += len(idx)
        good = (res.status == Reason.MEASURED) & (res.zncc >= self.min_zncc)
        status = np.where((res.status == Reason.MEASURED) & ~good, Reason.LOW_ZNCC,
                          res.status).astype(np.int8)
        self.params[idx] = res.params
        self.zncc[idx] = res.zncc
        self.iters[idx] = res.iterations
        self.sigma[idx] = res.sigma_factor
        self.unc[idx] = res.uncertainty
        self.reason[idx] = status
        if retry_later:
            # a failed start from an outside guess is no verdict: neighbours may still reach it
            self.state[idx] = np.where(good, self.w.GOOD, self.w.TODO)
        else:
            self.state[idx] = np.where(good, self.w.GOOD, self.w.BAD)
        return idx[good]

    def propagate(self, new_good):
        """Grow outwards from ``new_good`` until no neighbour is left to match.

        On larger grids the growth first runs over the lattice of every second point (a quarter
        of the points, in half the number of waves); the points in between are then matched in
        one row-ordered batch from their best matched neighbour, which keeps both cores busy
        and the image data in cache. Points that fail there get one more try from a
        4-neighbour before the final waves over the full grid.
        """
        if self.ny >= _COARSE_MIN and self.nx >= _COARSE_MIN and new_good.size:
            self._waves(new_good, 2)
            idx, p0 = self.w.fill_between(self.state, self.zncc, self.params, self.nx,
                                          self.ny, self.px, self.py, self.m.second)
            if idx.size:
                self.run(idx, p0, retry_later=True)
                tried = idx[self.state[idx] == self.w.TODO]
                new_good = np.flatnonzero(self.state == self.w.GOOD)
                self._waves(new_good, 1)
                # a point that failed from two different neighbours is not tried again
                left = tried[self.state[tried] == self.w.TODO]
                self.state[left] = self.w.BAD
                return
        self._waves(new_good, 1)

    def _waves(self, new_good, stride):
        while new_good.size:
            idx, p0 = self.w.next_wave(self.state, self.zncc, self.params, self.nx, self.ny,
                                       self.px, self.py, self.m.second,
                                       new_good.astype(np.int64), stride)
            if idx.size == 0:
                break
            new_good = self.run(idx, p0)


def _seed_candidates(comp_idx, px, py):
    """Seed trial order for a component: nearest its centroid first, then spread out."""
    cx, cy = px[comp_idx].mean(), py[comp_idx].mean()
    order = comp_idx[np.argsort((px[comp_idx] - cx) ** 2 + (py[comp_idx] - cy) ** 2,
                                kind="stable")]
    if order.size <= _SEED_TRIES:
        return order
    # the centre first, then points at growing distance from it
    picks = np.unique(np.linspace(0, order.size - 1, _SEED_TRIES).astype(int))
    return order[picks]


def _try_seed(prop, k, ref, deformed, search, guess=None, start=None):
    """Match grid point ``k`` from a full parameter vector ``start``, a user's ``(u, v)``
    guess, or an FFT search; True if it is a good seed."""
    from dic.matching._seed import fft_guess

    if start is not None and np.all(np.isfinite(start[k])):
        if prop.run(np.array([k], np.int64), start[k][None, :], retry_later=True).size:
            return True
    x, y = int(prop.px[k]), int(prop.py[k])
    if guess is None:
        rows, cols = ref.shape
        half = prop.m.half
        # a larger template than the subset makes the whole-pixel search more robust
        big = min(max(half, 15), x, y, cols - 1 - x, rows - 1 - y)
        du, dv, score = fft_guess(ref, deformed, x, y, half=max(big, half), search=search)
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
              shape_function: str = "affine", interpolation: str = "quintic",
              seeds: Sequence | None = None, search: int = 60, min_zncc: float = 0.9,
              max_iterations: int = 50, tolerance: float = 3e-3, min_texture: float = 0.02,
              initial: DisplacementField | None = None, workers: int | None = None,
              image_noise=None, _prepared=None, _points=None) -> DisplacementField:
    """Measure the displacement field between a reference and a deformed image.

    Square subsets of the reference image, centred on a regular grid of points, are matched in
    the deformed image by inverse-compositional Gauss-Newton (IC-GN) iteration on the zero-
    normalised sum of squared differences (ZNSSD), which is insensitive to offset and gain
    changes of the lighting. The deformed image is interpolated by a prefiltered B-spline.
    Starting guesses come from a zero-normalised FFT cross-correlation at one or more seed
    points, then spread by reliability-guided propagation: each point starts from its
    best-correlated matched neighbour. Propagation runs in parallel waves (all points bordering
    the matched region at once), a parallel variant of the ZNCC-ordered queue of [3]_.

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
    shape_function : {'affine', 'quadratic'}, optional
        First-order (6 parameters) or second-order (12 parameters) subset shape function.
    interpolation : {'cubic', 'quintic'}, optional
        B-spline degree for the deformed image.
    seeds : list of (x, y) or (x, y, u, v), optional
        Seed points in reference px, optionally with a displacement guess. By default one seed
        is placed near the centre of every connected part of the ROI.
    search : int, optional
        Search radius (px) of the FFT starting guess at seed points.
    min_zncc : float, optional
        Matches with a lower zero-normalised cross-correlation are rejected.
    max_iterations : int, optional
        Gauss-Newton iteration cap.
    tolerance : float, optional
        Convergence threshold on the norm of the parameter update (px at the subset edge).
    min_texture : float, optional
        Subsets whose grey-level standard deviation is below this fraction of the image's
        1-99 percentile range are flat and not matched.
    initial : DisplacementField, optional
        A field on the same grid (for example from the previous image of a sequence) that
        gives the seed points their starting guesses instead of the FFT search; the other
        points start from their best matched neighbour as usual.
    workers : int, optional
        Threads for the matching kernel (default: all cores).
    image_noise : float or (float, float), optional
        Noise standard deviation of the images in grey levels (one value for both, or
        reference and deformed), used for the predicted uncertainty ``sigma_u``, ``sigma_v``.
        By default each image's noise is estimated from the image itself over the points' area
        (:func:`dic.metrology.image_noise`).

    Returns
    -------
    DisplacementField
        Displacements, gradients, ZNCC and a reason code for every point, and the predicted
        standard deviations ``sigma_u``, ``sigma_v`` (:func:`dic.metrology.point_sigma`); the
        noise used is in ``settings["image_noise"]`` (reference, deformed).

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
     min_texture) = _check_options(subset, step, shape_function, interpolation, search,
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

    # the grey-level range of the ROI, from a sparse sample (exactness is not needed here)
    sample = ref[::3, ::3][mask[::3, ::3]]
    lo, hi = np.percentile(sample if sample.size > 100 else ref[mask], [1, 99])
    min_std = min_texture * float(hi - lo)
    prev_threads = None
    if workers is not None:
        import numba

        workers = _check_int("workers", workers, 1, "e.g. 2")
        prev_threads = numba.get_num_threads()
        numba.set_num_threads(min(workers, numba.config.NUMBA_NUM_THREADS))
    try:
        matcher = SubsetMatcher(ref, dfm, subset=subset, second_order=second, order=order,
                                max_iterations=max_iterations, tolerance=tolerance,
                                min_std=min_std, reference_gradients=_prepared)
        prop = _Propagation(matcher, gx, gy, candidate, in_image, min_zncc)
        prop.mark_flat(min_std)
        _solve(prop, ref, dfm, search, seed_list, initial)
    finally:
        if prev_threads is not None:
            import numba

            numba.set_num_threads(prev_threads)

    shape = candidate.shape
    good = prop.state == prop.w.GOOD
    p = np.where(good[:, None], prop.params, np.nan)
    iu, iv = index_u_v(second)
    grad = grad_from_params(p, second).reshape(shape + (2, 2))
    grad2 = None
    if second:
        grad2 = np.stack([p[:, iu + 3:iu + 6], p[:, iv + 3:iv + 6]], axis=1).reshape(
            shape + (2, 3))
    settings = {
        "subset": subset, "step": step,
        "shape_function": "quadratic" if second else "affine",
        "interpolation": "quintic" if order == 5 else "cubic",
        "criterion": "ZNSSD", "solver": "IC-GN", "min_zncc": min_zncc,
        "max_iterations": max_iterations, "tolerance": tolerance,
        "min_texture": min_texture, "search": search,
        "image_shape": tuple(int(s) for s in ref.shape),
        "image_noise": noise,
    }
    from dic.metrology._uncertainty import point_sigma

    sig_u, sig_v = point_sigma(np.where(good[:, None], prop.unc, np.nan), noise[0], noise[1],
                               order)
    field = DisplacementField(
        x=gx.astype(np.float64), y=gy.astype(np.float64),
        u=p[:, iu].reshape(shape), v=p[:, iv].reshape(shape), grad=grad,
        zncc=np.where(good, prop.zncc, np.nan).reshape(shape),
        reason=prop.reason.reshape(shape), iterations=prop.iters.reshape(shape),
        grad2=grad2, settings=settings, sigma_u=sig_u.reshape(shape),
        sigma_v=sig_v.reshape(shape))
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
    from dic.metrology._noise import image_noise

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
    return (image_noise(ref[r0:r1, c0:c1]), image_noise(dfm[r0:r1, c0:c1]))


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
                prop.state[comp] = w.BAD
                prop.reason[comp] = Reason.NOT_REACHED
                continue
            for k in _seed_candidates(comp, prop.px, prop.py):
                if prop.state[k] != w.TODO:
                    continue
                if _try_seed(prop, k, ref, dfm, search, start=start):
                    before = np.flatnonzero(prop.state == w.GOOD)
                    prop.propagate(np.array([k], np.int64))
                    grown = np.setdiff1d(np.flatnonzero(prop.state == w.GOOD), before)
                    if grown.size + 1 < min(_MIN_ISLAND, comp.size):
                        # the seed's neighbours do not follow it: a false match; withdraw
                        back = np.append(grown, k)
                        prop.state[back] = w.BAD
                        prop.reason[back] = Reason.NOT_REACHED
                        continue
                    progress = True
                    break
                prop.state[k] = w.BAD  # a seed that failed is not retried as a seed
            else:
                # no seed took hold in this part: its points stay unmeasured
                rest = comp[prop.state[comp] == w.TODO]
                prop.state[rest] = w.BAD
                prop.reason[rest] = Reason.NOT_REACHED
        if not progress and not (prop.state == w.TODO).any():
            break
    _explain_unreached(prop, ref.shape)


def _explain_unreached(prop, shape):
    """Unmeasured points whose match, extrapolated from the nearest measured point, would leave
    the image: that is the reason to report, not 'not reached' or a failed seed attempt."""
    from scipy import ndimage

    nr = np.flatnonzero(np.isin(prop.reason, (Reason.NOT_REACHED, Reason.LOW_ZNCC,
                                              Reason.NO_CONVERGENCE, Reason.DEGENERATE)))
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
    prop.reason[nr[leaves]] = Reason.OUTSIDE_IMAGE
