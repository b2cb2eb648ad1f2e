"""The strain field: strain tensors on the point grid, with the gradients they came from."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from dic.strain._measures import (area_change, canonical_measure, equivalent_strain, max_shear,
                                  measure_difference, nonlinear_mask, nonlinear_part,
                                  nonlinear_share, out_of_plane as zz_out_of_plane,
                                  principal_strains, rotation_angle, strain_tensor,
                                  symmetric_matrix)
from dic.strain._sample import bilinear

__all__ = ["StrainField", "LineProfile", "COMPONENTS"]

#: names accepted by :meth:`StrainField.component`, :meth:`StrainField.at` and
#: :meth:`StrainField.along`
COMPONENTS = ("xx", "yy", "xy", "zz", "major", "minor", "max_shear", "equivalent", "rotation",
              "area_change")


class LineProfile(NamedTuple):
    """Values sampled along a straight line."""

    #: distance from the start point, px
    distance: np.ndarray
    #: sample positions, px
    x: np.ndarray
    y: np.ndarray
    #: sampled values (NaN where not available)
    value: np.ndarray


@dataclass
class StrainField:
    """Strain tensors on the grid of points of the reference image.

    Shear ``xy`` is TENSOR shear: half the engineering shear angle.

    Attributes
    ----------
    xx, yy, xy : ndarray, shape (ny, nx)
        In-plane components of the chosen measure (``xy`` tensor shear); NaN where invalid.
    F : ndarray, shape (ny, nx, 2, 2)
        Deformation gradient ``I + grad u`` in the reference configuration; NaN where invalid.
    valid : ndarray of bool, shape (ny, nx)
        Points with a strain.
    x, y : ndarray, shape (ny, nx)
        Point positions in reference-image pixels.
    measure : str
        Canonical measure name (see :data:`dic.strain.MEASURES`).
    window : int
        Strain window size in grid points.
    fit : str
        ``"plane"`` or ``"quadratic"``.
    vsg : float
        Virtual strain gauge size in px, ``(window - 1) * step + subset`` (iDICs 2018); NaN if
        the field did not record its subset size.
    step : float
        Grid spacing in px.
    subset : int
        Subset size in px (0 if unknown).
    min_points : int
        Minimum number of measured points per window that was applied.
    n_used : ndarray of int, shape (ny, nx)
        Measured points that entered each point's fit (0 where invalid).
    zz : ndarray or None
        Out-of-plane normal strain, only when requested; an ESTIMATE under the assumption named
        in ``zz_assumption``.
    zz_assumption : str or None
        ``"incompressible"`` when ``zz`` was estimated from volume conservation
        (``lambda_3 = 1 / det F``), else None.

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1.
    """

    xx: np.ndarray
    yy: np.ndarray
    xy: np.ndarray
    F: np.ndarray
    valid: np.ndarray
    x: np.ndarray
    y: np.ndarray
    measure: str
    window: int
    fit: str
    vsg: float
    step: float
    subset: int
    min_points: int
    n_used: np.ndarray
    zz: np.ndarray | None = None
    zz_assumption: str | None = None

    # -- basic facts ------------------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, int]:
        """Grid shape ``(ny, nx)``."""
        return self.xx.shape

    @property
    def n_valid(self) -> int:
        """Number of points with a strain."""
        return int(np.count_nonzero(self.valid))

    @property
    def grad(self) -> np.ndarray:
        """Displacement gradient ``F - I``, shape (ny, nx, 2, 2)."""
        return self.F - np.eye(2)

    def tensor(self) -> np.ndarray:
        """The strain tensors as symmetric matrices, shape (ny, nx, 2, 2)."""
        return symmetric_matrix(self.xx, self.yy, self.xy)

    def summary(self) -> str:
        """One line: measure, window, VSG and valid points (shear is tensor shear)."""
        return (f"{self.measure} strain (xy = tensor shear), {self.fit} fit, window "
                f"{self.window} points, VSG {self.vsg:g} px; {self.n_valid} of {self.xx.size} "
                "points valid")

    # -- other measures from the same F ------------------------------------------------------
    def as_measure(self, name: str) -> StrainField:
        """The same gradients expressed in another strain measure (no refitting).

        Parameters
        ----------
        name : str
            A measure name or alias (see :func:`dic.strain.canonical_measure`).

        Returns
        -------
        StrainField
        """
        canon = canonical_measure(name)
        T = strain_tensor(self.F, canon)
        zz = None if self.zz_assumption is None else zz_out_of_plane(self.F, canon)
        return dataclasses.replace(self, xx=T[..., 0, 0], yy=T[..., 1, 1], xy=T[..., 0, 1],
                                   measure=canon, zz=zz)

    def difference(self, other: str) -> np.ndarray:
        """This measure minus ``other`` from the same gradients, shape (ny, nx, 2, 2)."""
        return measure_difference(self.F, self.measure, other)

    # -- derived quantities -----------------------------------------------------------------
    def principal(self):
        """Principal values and direction: ``(major, minor, angle_deg)``.

        The angle is that of the major direction, in degrees from +x towards +y (image
        coordinates, so clockwise on screen), in (-90, 90].
        """
        return principal_strains(self.xx, self.yy, self.xy)

    def max_shear(self) -> np.ndarray:
        """Maximum in-plane TENSOR shear ``(major - minor) / 2``."""
        return max_shear(self.xx, self.yy, self.xy)

    def equivalent(self, out_of_plane: str = "incompressible") -> np.ndarray:
        """Von Mises equivalent strain ``sqrt(2/3 eps_dev : eps_dev)``.

        ``zz`` is the stored estimate when there is one (see ``zz_assumption``); otherwise
        it is ESTIMATED from incompressibility by default (``lambda_3 = 1 / det F``), or taken
        as zero with ``out_of_plane="zero"``.
        """
        zz = self.zz
        if zz is None and out_of_plane == "incompressible":
            zz = zz_out_of_plane(self.F, self.measure)
        return equivalent_strain(self.xx, self.yy, self.xy, zz, measure=self.measure,
                                   out_of_plane=out_of_plane)

    def rotation(self) -> np.ndarray:
        """Rigid rotation angle from the polar decomposition, degrees (+x towards +y)."""
        return rotation_angle(self.F)

    def area_change(self) -> np.ndarray:
        """Relative in-plane area change ``det F - 1``."""
        return area_change(self.F)

    def nonlinear_part(self) -> np.ndarray:
        """Quadratic term of Green-Lagrange strain ``(grad u)^T grad u / 2``, (ny, nx, 2, 2)."""
        return nonlinear_part(self.F)

    def nonlinear_share(self, *, floor: float = 1e-9) -> np.ndarray:
        """``||Q||_F / ||eps||_F`` per point; NaN where ``||eps||_F <= floor``."""
        return nonlinear_share(self.F, floor=floor)

    def nonlinear_mask(self, *, threshold: float = 0.01, floor: float = 1e-9) -> np.ndarray:
        """Points where the nonlinear share exceeds ``threshold`` (default 1 %)."""
        return nonlinear_mask(self.F, threshold=threshold, floor=floor)

    def component(self, name: str = "xx") -> np.ndarray:
        """A scalar field by name: one of :data:`COMPONENTS` (``xy`` is tensor shear)."""
        key = name.strip().lower() if isinstance(name, str) else None
        if key == "zz" and self.zz is None:
            raise ValueError("component='zz' is not available; call strain_field(..., "
                             "out_of_plane='incompressible')")
        table = {
            "xx": lambda: self.xx, "yy": lambda: self.yy, "xy": lambda: self.xy,
            "zz": lambda: self.zz,
            "major": lambda: self.principal()[0], "minor": lambda: self.principal()[1],
            "max_shear": self.max_shear, "equivalent": self.equivalent,
            "rotation": self.rotation, "area_change": self.area_change,
        }
        if key not in table:
            raise ValueError(f"component {name!r} is not known; use one of: "
                             f"{', '.join(COMPONENTS)}")
        return table[key]()

    # -- sampling ------------------------------------------------------------------------------
    def at(self, x, y, component: str = "xx") -> np.ndarray:
        """Strain at arbitrary positions by bilinear interpolation on the point grid.

        Parameters
        ----------
        x, y : array_like
            Positions in reference-image px, broadcast together.
        component : str
            One of :data:`COMPONENTS`; the scalar field is computed on the grid, then
            interpolated.

        Returns
        -------
        ndarray
            NaN outside the grid and where a grid point with non-zero weight is NaN.
        """
        values = self.component(component)
        sx = (self.x[0, -1] - self.x[0, 0]) / (self.x.shape[1] - 1)
        sy = (self.y[-1, 0] - self.y[0, 0]) / (self.y.shape[0] - 1)
        return bilinear(values, self.x[0, 0], self.y[0, 0], sx, sy, x, y)

    def along(self, p0, p1, n: int = 50, component: str = "xx") -> LineProfile:
        """Strain sampled at ``n`` evenly spaced points from ``p0`` to ``p1`` (both included).

        Parameters
        ----------
        p0, p1 : pair of float
            End points ``(x, y)`` in reference-image px.
        n : int
            Number of samples, >= 2.
        component : str
            One of :data:`COMPONENTS`.

        Returns
        -------
        LineProfile
            ``(distance, x, y, value)``.
        """
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 2:
            raise ValueError(f"n must be an integer >= 2 (got {n!r}); use e.g. n=50")
        try:
            (x0, y0), (x1, y1) = (tuple(map(float, p)) for p in (p0, p1))
        except (TypeError, ValueError):
            raise ValueError("p0 and p1 must be (x, y) pairs of numbers; pass e.g. "
                             "p0=(10, 50), p1=(200, 50)") from None
        t = np.linspace(0.0, 1.0, int(n))
        xs = x0 + t * (x1 - x0)
        ys = y0 + t * (y1 - y0)
        dist = t * np.hypot(x1 - x0, y1 - y0)
        return LineProfile(dist, xs, ys, self.at(xs, ys, component))
