"""Tracking a whole image sequence through large strain.

Every image is matched against a reference image on the same grid of reference points. Guesses
are carried from image to image, so no seed search is needed once a sequence is under way. When
the correlation against the reference degrades (large strain changes the speckles' look), the
reference moves to the last good image and displacements are accumulated in the original
reference configuration (Lagrangian) by interpolating the incremental field at the points'
current positions.

Frames are processed in fixed blocks: the first image of each block starts from the first image
of the previous block (extrapolated), every other image from the one before it. Blocks are
independent once their starts are known, so they can run in a process pool or on a Dask cluster
and give exactly the same numbers as a run on one core.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field as dc_field, replace

import numpy as np

from dic.field import DisplacementField, Reason
from dic.limits import DEFAULT_MAX_SIGMA

__all__ = ["TrackSettings", "FrameMatcher", "compose_increment", "needs_new_reference",
           "current_points"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class TrackSettings:
    """Settings of a sequence analysis (everything that changes the numbers).

    Attributes
    ----------
    subset, step : int
        Subset size and grid spacing (px).
    shape_function, interpolation : str
        See :func:`dic.correlate`.
    min_zncc : float
        Points matching worse are rejected.
    max_sigma : float
        Points whose standard deviation of u or v exceeds this many px are not measured
        (``FLAT``; see :func:`dic.correlate`).
    search : int
        Seed search radius (px).
    block : int
        Frames per block (see the module docstring).
    update_valid : float
        A new reference is taken when fewer than this share of the points measured in the first
        frame against the current reference are still measured...
    update_zncc : float
        ...or when the median ZNCC falls below this.
    """

    subset: int = 21
    step: int = 10
    shape_function: str = "auto"
    interpolation: str = "quintic"
    min_zncc: float = 0.9
    max_sigma: float = DEFAULT_MAX_SIGMA
    search: int = 60
    block: int = 8
    update_valid: float = 0.95
    update_zncc: float = 0.97

    def correlate_options(self) -> dict:
        return dict(subset=self.subset, step=self.step, shape_function=self.shape_function,
                    interpolation=self.interpolation, min_zncc=self.min_zncc,
                    max_sigma=self.max_sigma, search=self.search)

    def as_dict(self) -> dict:
        return dict(self.__dict__)


def accounted(field: DisplacementField) -> int:
    """Points measured, plus points whose material has left the image (not a loss of
    correlation, so no reason to change the reference)."""
    return field.n_valid + int(np.count_nonzero(field.reason == Reason.OUTSIDE_IMAGE))


def needs_new_reference(field: DisplacementField, n_expected: int,
                        settings: TrackSettings) -> bool:
    """True when a frame's match against the current reference has degraded.

    Parameters
    ----------
    field : DisplacementField
        The frame's field (in the original reference configuration).
    n_expected : int
        :func:`accounted` points of the first frame matched against the current reference.
    settings : TrackSettings
        Thresholds.
    """
    if n_expected <= 0:
        return False
    if accounted(field) < settings.update_valid * n_expected:
        return True
    z = field.zncc[field.valid]
    return bool(z.size and np.median(z) < settings.update_zncc)


def current_points(base: DisplacementField):
    """Integer pixels nearest to where the original points are in an updated reference image.

    Returns ``(px, py, dx, dy, wanted)``: the rounded positions, the sub-pixel remainders
    (true position minus rounded) and which points can be followed (those measured in
    ``base``).
    """
    ok = base.valid
    x = np.where(ok, base.x + base.u, base.x)
    y = np.where(ok, base.y + base.v, base.y)
    px, py = np.rint(x), np.rint(y)
    return px.astype(np.int64), py.astype(np.int64), x - px, y - py, ok


def compose_increment(base: DisplacementField, inc: DisplacementField, dx, dy):
    """Accumulate an increment measured from an updated reference image.

    ``base`` holds the original points' displacements at the updated reference image; ``inc``
    was measured there, on the same points moved to the nearest pixels (see
    :func:`current_points`), so each increment is carried over the sub-pixel remainder
    ``(dx, dy)`` by its own gradient. Then ``u = u_base + du`` and ``F = dF F_base``
    (deformation gradients compose by multiplication).

    Parameters
    ----------
    base, inc : DisplacementField
        On the same grid topology.
    dx, dy : ndarray
        Sub-pixel remainders from :func:`current_points`.

    Returns
    -------
    DisplacementField
        In the original reference configuration, on the grid of ``base``.
    """
    ok = base.valid & inc.valid
    g = inc.grad
    du = inc.u + g[..., 0, 0] * dx + g[..., 0, 1] * dy
    dv = inc.v + g[..., 1, 0] * dx + g[..., 1, 1] * dy
    eye = np.eye(2)
    F = np.einsum("...ij,...jk->...ik", eye + g, eye + base.grad)
    reason = np.where(base.valid, inc.reason, base.reason).astype(np.int8)
    nan = np.nan
    sig = {}
    for name in ("std_u", "std_v"):
        a, b = getattr(base, name), getattr(inc, name)
        if a is not None and b is not None:
            # independent errors of the base and of the increment add in quadrature
            sig[name] = np.where(ok, np.hypot(a, b), nan)
    return DisplacementField(
        x=base.x, y=base.y,
        u=np.where(ok, base.u + du, nan), v=np.where(ok, base.v + dv, nan),
        grad=np.where(ok[..., None, None], F - eye, nan),
        zncc=np.where(ok, inc.zncc, nan), reason=reason,
        iterations=inc.iterations.copy(), grad2=None, settings=dict(inc.settings),
        shape_order=(None if inc.shape_order is None
                     else np.where(ok, inc.shape_order, 0).astype(np.int8)), **sig)


@dataclass
class FrameMatcher:
    """Matches images against one reference image, reusing its prepared data.

    Parameters
    ----------
    reference : ndarray
        The reference image of the current stage.
    settings : TrackSettings
    roi : mask or None
        Region of interest in the (original) reference image.
    base : DisplacementField or None
        For an updated reference: the original points' displacements at this image. The
        points are then matched where they now are, and the increments carried back to the
        original configuration.
    """

    reference: np.ndarray
    settings: TrackSettings
    roi: object = None
    base: DisplacementField | None = None
    _grads: tuple | None = dc_field(default=None, repr=False)

    def __post_init__(self):
        from dic.images import interp
        from dic.matching import INTERPOLATIONS

        order = INTERPOLATIONS[self.settings.interpolation]
        self._grads = interp.image_gradients(self.reference, order)

    def match(self, image, initial: DisplacementField | None) -> tuple:
        """Match one image. Returns ``(field_in_original_configuration, raw_field)``.

        ``initial`` is a raw field (on this matcher's grid) to start from, or None.
        """
        from dic.matching import correlate

        if self.base is None:
            raw = correlate(self.reference, image, roi=self.roi, initial=initial,
                            _prepared=self._grads, **self.settings.correlate_options())
            return raw, raw
        px, py, dx, dy, wanted = current_points(self.base)
        raw = correlate(self.reference, image, initial=initial, _prepared=self._grads,
                        _points=(px, py, wanted), **self.settings.correlate_options())
        return compose_increment(self.base, raw, dx, dy), raw


def as_stored(field: DisplacementField) -> DisplacementField:
    """The field as the results file holds it (``std_u``, ``std_v`` in float32).

    A new reference stage starts from this, so that a run resumed from the file (which reads
    the base field back) carries on with exactly the numbers an uninterrupted run uses.
    """
    out = replace(field)
    for name in ("std_u", "std_v"):
        a = getattr(field, name)
        if a is not None:
            setattr(out, name, np.asarray(a).astype(np.float32).astype(np.float64))
    return out


def extrapolate(prev: DisplacementField | None, last: DisplacementField) -> DisplacementField:
    """Linear extrapolation of a raw field one interval ahead (a starting guess only)."""
    if prev is None:
        return last
    ok = last.valid & prev.valid
    guess = replace(last)
    guess.u = np.where(ok, 2 * last.u - prev.u, last.u)
    guess.v = np.where(ok, 2 * last.v - prev.v, last.v)
    guess.grad = np.where(ok[..., None, None], 2 * last.grad - prev.grad, last.grad)
    return guess
