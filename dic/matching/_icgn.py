"""Checked Python front of the compiled IC-GN kernel.

References
----------
.. [1] S. Baker, I. Matthews, "Lucas-Kanade 20 years on: a unifying framework", International
   Journal of Computer Vision 56 (2004) 221-255.
.. [2] B. Pan, K. Li, W. Tong, "Fast, robust and accurate digital image correlation calculation
   without redundant computations", Experimental Mechanics 53 (2013) 1277-1289.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from dic.images import interp

#: 0: chosen per point from the data (first order, second order where curvature needs it)
SHAPE_FUNCTIONS = {"auto": 0, "affine": 1, "first": 1, "first-order": 1,
                   "quadratic": 2, "second": 2, "second-order": 2}
INTERPOLATIONS = {"cubic": 3, "quintic": 5}


def edge_margin(order: int) -> int:
    """Pixels next to the image border that subsets must avoid.

    The spline interpolant (and its derivative) is only reliable a few pixels inside the image:
    at the border it is fixed by the mirror boundary condition, not by the image, and the
    recursive prefilter carries that error inwards by a factor of its pole (0.27 for the cubic,
    0.43 for the quintic spline) per pixel.
    """
    return 4 if order == 3 else 6


def n_params(second: bool) -> int:
    """Number of shape-function parameters."""
    return 12 if second else 6


def index_u_v(second: bool) -> tuple[int, int]:
    """Positions of u and v in the parameter vector."""
    return (0, 6) if second else (0, 3)


def grad_from_params(p: np.ndarray, second: bool) -> np.ndarray:
    """Displacement gradient ``[[ux, uy], [vx, vy]]`` from parameter vectors (..., npar)."""
    iu, iv = index_u_v(second)
    g = np.empty(p.shape[:-1] + (2, 2))
    g[..., 0, 0] = p[..., iu + 1]
    g[..., 0, 1] = p[..., iu + 2]
    g[..., 1, 0] = p[..., iv + 1]
    g[..., 1, 1] = p[..., iv + 2]
    return g


def shape_outer_sum(half: int, second: bool) -> np.ndarray:
    """Subset sum of ``s s^T`` over the shape-function vectors ``s`` of one displacement
    component: ``(1, dx, dy)`` (first order) or ``(1, dx, dy, dx^2/2, dx dy, dy^2/2)``."""
    d = np.arange(-half, half + 1, dtype=np.float64)
    dx, dy = (a.ravel() for a in np.meshgrid(d, d))
    cols = [np.ones_like(dx), dx, dy]
    if second:
        cols += [0.5 * dx * dx, dx * dy, 0.5 * dy * dy]
    s = np.column_stack(cols)
    return np.ascontiguousarray(s.T @ s)


def params_from_fields(u, v, grad, second: bool) -> np.ndarray:
    """Parameter vectors from displacements and gradients (second derivatives set to zero)."""
    iu, iv = index_u_v(second)
    p = np.zeros(np.shape(u) + (n_params(second),))
    p[..., iu] = u
    p[..., iv] = v
    p[..., iu + 1] = grad[..., 0, 0]
    p[..., iu + 2] = grad[..., 0, 1]
    p[..., iv + 1] = grad[..., 1, 0]
    p[..., iv + 2] = grad[..., 1, 1]
    return p


@dataclass
class MatchResult:
    """Raw per-point output of the kernel."""

    params: np.ndarray
    status: np.ndarray
    zncc: np.ndarray
    iterations: np.ndarray
    sigma_factor: np.ndarray
    #: per point the u and v diagonal entries of H^-1, H^-1 M H^-1 and H^-1 M H^-1 M H^-1
    #: (6 numbers), see :func:`dic.metrology.point_sigma`; NaN where H was not inverted
    uncertainty: np.ndarray | None = None
    #: grey-level standard deviation of each reference subset (NaN where not computed)
    std: np.ndarray | None = None
    #: iterations whose update was below NEAR_STEP (0.1 px): how slowly the match converged
    #: near its solution, whatever its starting guess (dic.matching.slow_convergence_factor)
    near_iterations: np.ndarray | None = None


class SubsetMatcher:
    """A reference image and a deformed image, prepared for repeated subset matching.

    The reference gradients and the deformed image's B-spline coefficients are computed once.

    Parameters
    ----------
    reference, deformed : ndarray
        Float64 images of equal shape.
    subset : int
        Odd subset size in pixels.
    second_order : bool
        Use the second-order shape function.
    order : {3, 5}
        B-spline degree for the deformed image.
    max_iterations : int
        Iteration cap.
    tolerance : float
        Convergence threshold on the norm of the parameter update, with gradient terms scaled
        by the subset half-width (a displacement at the subset edge, in px).
    min_std : float
        Subsets whose grey-level standard deviation is below this are flat (not matched).
    min_grad2 : float
        Subsets whose smaller sum of squared x or y grey-level gradients (SSSIG) is at most
        this are flat: ``noise^2 / max_sigma^2`` turns the translation-only prediction
        ``sqrt(noise^2 / SSSIG)`` into this rule (see :func:`dic.matching.translation_sigma`).
        Subsets with a standard deviation at the rounding level of the image's grey values are
        always flat.
    reference_spline : BSplineImage, optional
        Already computed coefficients of the reference image (reused along a sequence).
    border : int, optional
        Pixels next to the image border that warped subsets must avoid (default:
        :func:`edge_margin`; :func:`dic.correlate` lets them come closer and judges such
        matches by :func:`dic.matching.edge_bias`).
    """

    def __init__(self, reference, deformed, *, subset, second_order=False, order=3,
                 max_iterations=50, tolerance=1e-3, min_std=0.0, min_grad2=0.0,
                 reference_gradients=None, deformed_spline=None, border=None):
        from dic.matching._ahead import start

        # on a fresh install, the kernels a run needs later compile meanwhile in a second
        # process (once per process; see dic.matching._ahead)
        start()
        self.reference = np.ascontiguousarray(reference, dtype=np.float64)
        self.half = int(subset) // 2
        self.second = bool(second_order)
        self.order = int(order)
        self.max_iterations = int(max_iterations)
        self.tolerance = float(tolerance)
        self.min_std = float(min_std)
        self.min_grad2 = float(min_grad2)
        # a constant subset (std at rounding level of its grey values) is flat whatever noise
        top = max(np.max(self.reference, initial=0.0), -np.min(self.reference, initial=0.0))
        self.std_floor = 1e-6 * max(float(top), 1e-300)
        self.border = edge_margin(self.order) if border is None else int(border)
        self.fast = True
        if reference_gradients is None:
            reference_gradients = interp.image_gradients(self.reference, self.order)
        self.gx, self.gy = reference_gradients
        if deformed_spline is None:
            deformed_spline = interp.prefilter(deformed, self.order)
        self.spline = deformed_spline
        self.smat = shape_outer_sum(self.half, self.second)
        #: seconds spent in the compiled solver (all calls of :meth:`match`)
        self.kernel_time = 0.0

    def flat_rule(self) -> np.ndarray:
        """Thresholds of the texture rule the solver applies before iterating: ``min_std``,
        the rounding-level floor of the standard deviation, ``min_grad2``."""
        return np.array([self.min_std, self.std_floor, self.min_grad2])

    def match(self, xs, ys, p0, tolerance=None) -> MatchResult:
        """Match subsets centred on integer pixels ``(xs, ys)`` from starting parameters ``p0``
        (to ``tolerance`` when given instead of the matcher's own)."""
        from dic.matching._icgn_kernel import match_first, match_general

        xs = np.ascontiguousarray(xs, dtype=np.int64)
        ys = np.ascontiguousarray(ys, dtype=np.int64)
        n = xs.shape[0]
        npar = n_params(self.second)
        p0 = np.ascontiguousarray(np.broadcast_to(p0, (n, npar)), dtype=np.float64)
        out = MatchResult(np.empty((n, npar)), np.empty(n, np.int8), np.empty(n),
                          np.empty(n, np.int16), np.empty(n), np.full((n, 6), np.nan),
                          np.full(n, np.nan), np.zeros(n, np.int16))
        flat = self.flat_rule()
        import time

        t0 = time.perf_counter()
        if n:
            from dic.images.parallel import run_chunks

            common = (self.reference, self.gx, self.gy, self.spline.coef, self.spline.pad,
                      self.order, xs, ys, p0, self.half)
            tol = self.tolerance if tolerance is None else float(tolerance)
            tail = (self.max_iterations, tol, flat, float(self.border),
                    out.params, out.status, out.zncc, out.iterations, out.sigma_factor,
                    self.smat, out.uncertainty, out.std, out.near_iterations)
            # only the solver a run uses gets compiled (first-order moment sums by default)
            from dic.matching._ahead import ready

            if self.fast and not self.second:
                ready("first_order")
                run_chunks(match_first, n, *common, *tail, min_chunk=8)
            else:
                ready("second_order")
                run_chunks(match_general, n, *common, self.second, *tail, min_chunk=8)
        self.kernel_time += time.perf_counter() - t0
        return out
