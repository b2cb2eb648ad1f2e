"""The displacement field: the result of matching one deformed image to a reference image.

Coordinates follow the project convention: ``x`` is the column, ``y`` the row (downwards), with
the origin at the centre of the top-left pixel. ``u`` is the displacement along ``x`` and ``v``
along ``y``, in pixels. The field is Lagrangian: it lives on a grid of points of the reference
image.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field as _dc_field

import numpy as np

__all__ = ["DisplacementField", "Reason"]


class Reason(enum.IntEnum):
    """Why a point of a displacement field is (not) measured.

    Every point carries one of these codes; only ``MEASURED`` points hold numbers, all others are
    NaN in every field.
    """

    MEASURED = 0
    #: the subset around the point is not wholly inside the region of interest
    OUTSIDE_ROI = 1
    #: the subset is not wholly inside the reference image, or its match left the deformed image
    OUTSIDE_IMAGE = 2
    #: too little texture in the reference subset to match it
    FLAT = 3
    #: the Gauss-Newton iteration did not converge within the iteration cap
    NO_CONVERGENCE = 4
    #: converged, but the zero-normalised cross-correlation is below the threshold
    LOW_ZNCC = 5
    #: inside the region of interest, but no seed or neighbour led to a match
    NOT_REACHED = 6
    #: the matching produced a degenerate warp (folded or non-finite)
    DEGENERATE = 7
    #: matched, but disagrees with its neighbours (normalised median test)
    INCONSISTENT = 8
    #: two cameras: matched in one camera's images only, so no 3-D position
    ONE_CAMERA = 9
    #: two cameras: the two rays pass too far apart (a false match or a calibration off)
    POOR_TRIANGULATION = 10
    #: two cameras: a camera sees the surface there at a grazing angle (beyond the set limit)
    OBLIQUE = 11

    @classmethod
    def describe(cls, code: int) -> str:
        """Plain-words description of a reason code."""
        return _DESCRIPTIONS[cls(int(code))]


_DESCRIPTIONS = {
    Reason.MEASURED: "measured",
    Reason.OUTSIDE_ROI: "subset not wholly inside the region of interest",
    Reason.OUTSIDE_IMAGE: "subset or its match outside the image",
    Reason.FLAT: "too little texture to match",
    Reason.NO_CONVERGENCE: "matching did not converge",
    Reason.LOW_ZNCC: "match too poor (ZNCC below threshold)",
    Reason.NOT_REACHED: "not reached from any seed",
    Reason.DEGENERATE: "degenerate (folded) match",
    Reason.INCONSISTENT: "disagrees with its neighbours (median test)",
    Reason.ONE_CAMERA: "seen by one camera only (no 3-D position)",
    Reason.POOR_TRIANGULATION: "the two cameras' rays pass too far apart",
    Reason.OBLIQUE: "seen at too grazing an angle by a camera (no 3-D position)",
}


@dataclass
class DisplacementField:
    """Displacements and their gradients on a grid of points of the reference image.

    Attributes
    ----------
    x, y : ndarray, shape (ny, nx)
        Point positions in reference-image pixels (``x`` column, ``y`` row).
    u, v : ndarray, shape (ny, nx)
        Displacements in pixels; NaN where the point is not measured.
    grad : ndarray, shape (ny, nx, 2, 2)
        Displacement gradient from the subset shape function,
        ``grad[..., i, j] = d u_i / d X_j`` with ``u_0 = u``, ``u_1 = v``, ``X_0 = x``,
        ``X_1 = y``; so ``grad[..., 0, 1]`` is du/dy. ``F = I + grad``.
    zncc : ndarray, shape (ny, nx)
        Zero-normalised cross-correlation of the final match (1 is perfect); NaN where not
        measured.
    reason : ndarray of int8, shape (ny, nx)
        A :class:`Reason` code for every point; ``Reason.MEASURED`` for measured points.
    iterations : ndarray of int16, shape (ny, nx)
        Gauss-Newton iterations used (0 where not attempted).
    grad2 : ndarray, shape (ny, nx, 2, 3) or None
        Second derivatives ``d2u_i/dx2, d2u_i/dxdy, d2u_i/dy2`` when the second-order shape
        function was used, else None.
    settings : dict
        The settings that produced the field (subset, step, shape function, criterion, ...).
    std_u, std_v : ndarray, shape (ny, nx), or None
        Predicted standard deviation (px) of ``u`` and ``v`` at every point: from the residual of the
        converged match (a-posteriori Gauss-Newton covariance,
        :func:`dic.matching.posterior_sigma`), or, when the image noise was given, predicted
        from it and each subset's Hessian (:func:`dic.matching.point_sigma`);
        ``settings["sigma_from"]`` says which. NaN where not measured. None when the field was
        not made by :func:`dic.correlate`. (``sigma_u``, ``sigma_v`` are former names of these
        attributes, still readable.)
    shape_order : ndarray of int8, shape (ny, nx), or None
        Order of the subset shape function used at each point (1 first, 2 second order; 0
        where not measured). None when not recorded.
    """

    x: np.ndarray
    y: np.ndarray
    u: np.ndarray
    v: np.ndarray
    grad: np.ndarray
    zncc: np.ndarray
    reason: np.ndarray
    iterations: np.ndarray
    grad2: np.ndarray | None = None
    settings: dict = _dc_field(default_factory=dict)
    std_u: np.ndarray | None = None
    std_v: np.ndarray | None = None
    shape_order: np.ndarray | None = None

    @property
    def sigma_u(self) -> np.ndarray | None:
        """Former name of :attr:`std_u`."""
        return self.std_u

    @property
    def sigma_v(self) -> np.ndarray | None:
        """Former name of :attr:`std_v`."""
        return self.std_v

    @property
    def valid(self) -> np.ndarray:
        """Boolean mask of measured points."""
        return self.reason == Reason.MEASURED

    @property
    def shape(self) -> tuple[int, int]:
        """Grid shape ``(ny, nx)``."""
        return self.u.shape

    @property
    def n_points(self) -> int:
        """Number of grid points."""
        return int(self.u.size)

    @property
    def n_valid(self) -> int:
        """Number of measured points."""
        return int(np.count_nonzero(self.valid))

    @property
    def step(self) -> int:
        """Grid spacing in pixels."""
        return int(self.settings.get("step", 0))

    @property
    def subset(self) -> int:
        """Subset size in pixels."""
        return int(self.settings.get("subset", 0))

    def reason_counts(self) -> dict[str, int]:
        """Number of points per reason code, by name, omitting codes that do not occur."""
        codes, counts = np.unique(self.reason, return_counts=True)
        return {Reason(int(c)).name.lower(): int(n) for c, n in zip(codes, counts)}

    def sigma_summary(self, limit: float) -> dict | None:
        """How sure the measured points are: of the larger standard deviation of u and v per
        point, the median, 95th percentile and largest (px), and how many exceed ``limit``
        (px); None where the field holds no standard deviations."""
        if self.std_u is None or self.std_v is None:
            return None
        s = np.fmax(self.std_u, self.std_v)[self.valid]
        s = s[np.isfinite(s)]
        if s.size == 0:
            return None
        return {"median": float(np.median(s)), "p95": float(np.percentile(s, 95)),
                "largest": float(s.max()), "above": int(np.count_nonzero(s > limit)),
                "n": int(s.size)}

    def summary(self) -> str:
        """One line: valid points, their share, and the commonest reasons for the rest."""
        n, nv = self.n_points, self.n_valid
        parts = [f"{nv} of {n} points measured ({100.0 * nv / max(n, 1):.1f} %)"]
        other = {k: c for k, c in self.reason_counts().items() if k != "measured"}
        if other:
            parts.append(", ".join(f"{k.replace('_', ' ')}: {c}" for k, c in
                                   sorted(other.items(), key=lambda kv: -kv[1])))
        return "; ".join(parts)
