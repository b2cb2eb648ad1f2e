r"""Virtual gauges placed on tracked results: gauge lines, area gauges and point probes.

A **gauge line** joins two material points of the reference image. In every frame each end point
moves by the displacement interpolated there, and the current length ``L`` against the
reference length ``L0`` gives the stretch ``lambda = L / L0``: engineering strain
``lambda - 1``, true (logarithmic) strain ``ln lambda`` and Green-Lagrange strain
``(lambda^2 - 1) / 2``. It is the optical counterpart of a clip-on extensometer.

An **area gauge** averages a strain component over the grid points inside a rectangle or
polygon (mean, standard deviation, minimum, maximum and the number of points), and a **point
probe** reads every strain component at one material point. Both use the strain field of each
frame (:func:`dic.strain_field`), so they carry its strain window and measure.

Where gauges are placed, and what the results mean, follow the Lagrangian convention of the
project: positions are reference-image positions (px, or mm with the results' scale), so a
gauge follows the same material in every frame.

How the end points of a gauge line are interpolated
---------------------------------------------------
Each grid point's subset match gives the displacement *and* its gradient. Two simple ways to
get the displacement at an end point ``X`` between grid points are (a) bilinear interpolation of
``u`` and ``v`` (what ``scipy.interpolate.RegularGridInterpolator`` does) and (b) the bilinear
blend of the four surrounding grid points' first-order Taylor expansions
``u_i + grad u_i . (X - X_i)``. Both are exact for homogeneous deformation; for a curved field
(1-D, ``u'' = a``, cell size ``h``, ``X`` at ``t h`` in the cell) their errors are
``+a t(1-t) h^2 / 2`` and ``-a t(1-t) h^2 / 2``: equal and opposite. This module uses their mean,

.. math:: u(X) = \sum_i w_i \left(u_i + \tfrac12 \nabla u_i \cdot (X - X_i)\right)

with the bilinear weights ``w_i``, which is exact for every quadratic displacement field in 2-D
(the ``XY`` term included), so a gauge end in the curved field of a neck has no interpolation
bias to second order (for a cubic with third derivative ``c`` the 1-D error is
``c h^3 t(1-t)(2t-1) / 12``, at most ``0.008 |c| h^3``), and it weighs the (noisier) subset
gradients by at most ``h / 8`` rather than the ``h / 4`` of the plain Taylor blend. An end
point with an unmeasured grid point among its four neighbours is NaN in that frame (never filled
in from farther away).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dic.errors import InputError, TooFewPoints
from dic.field import DisplacementField
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW
from dic.tensile.histories import CAUTION, History, poisson_ratio

__all__ = ["GaugeLine", "AreaGauge", "PointProbe", "gauge_histories", "axial_line",
           "transverse_line", "neck_line", "poisson_ratio", "displacement_at", "History",
           "CAUTION", "PROBE_COMPONENTS"]

#: strain components a point probe reads (``xy`` is TENSOR shear, half the engineering angle)
PROBE_COMPONENTS = ("xx", "yy", "xy", "major", "minor", "max_shear", "equivalent", "rotation",
                    "area_change")
_UNITS = {"rotation": "deg", "area_change": "mm2/mm2"}


# --------------------------------------------------------------------------------------------
# the gauges
# --------------------------------------------------------------------------------------------
def _pair(p, what):
    try:
        x, y = (float(v) for v in p)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected an (x, y) pair of numbers, got {p!r}") from None
    if not (math.isfinite(x) and math.isfinite(y)):
        raise ValueError(f"{what}: expected finite numbers, got {p!r}")
    return x, y


def _units(units):
    if units not in ("px", "mm"):
        raise ValueError(f"units: use 'px' or 'mm', got {units!r}")
    return units


def _name(name):
    if not isinstance(name, str) or not name.strip() or any(c in name for c in ",\n\"["):
        raise ValueError(f"name: give a short name without commas, quotes or brackets, got "
                         f"{name!r}")
    return name.strip()


@dataclass(frozen=True)
class GaugeLine:
    """A straight gauge between two material points of the reference image.

    Parameters
    ----------
    start, end : (float, float)
        End points ``(x, y)`` in the reference image.
    units : {"px", "mm"}
        Units of the end points (mm use the results' scale, origin at the centre of the
        top-left pixel).
    name : str
        Column prefix in the history.
    """

    start: tuple
    end: tuple
    units: str = "px"
    name: str = "line"

    def __post_init__(self):
        object.__setattr__(self, "start", _pair(self.start, "start"))
        object.__setattr__(self, "end", _pair(self.end, "end"))
        object.__setattr__(self, "units", _units(self.units))
        object.__setattr__(self, "name", _name(self.name))
        if self.start == self.end:
            raise ValueError(f"gauge line {self.name!r}: start and end are the same point; give "
                             "two distinct points")

    @property
    def length(self) -> float:
        """Reference length in the gauge's units."""
        return math.dist(self.start, self.end)

    def points_px(self, scale):
        """End points in px as an array of shape (2, 2)."""
        return np.array([self.start, self.end]) / _factor(self.units, scale, self.name)


@dataclass(frozen=True)
class AreaGauge:
    """A polygon (or rectangle) of the reference image over which strain is averaged.

    Parameters
    ----------
    vertices : sequence of (float, float)
        At least three corners ``(x, y)``; see :meth:`rectangle`.
    units : {"px", "mm"}
    name : str
    """

    vertices: tuple
    units: str = "px"
    name: str = "area"

    def __post_init__(self):
        try:
            verts = tuple(_pair(v, "vertices") for v in self.vertices)
        except TypeError:
            raise ValueError(f"vertices: expected a list of (x, y) pairs, got "
                             f"{self.vertices!r}") from None
        if len(verts) < 3:
            raise ValueError(f"vertices: an area needs at least 3 corners, got {len(verts)}")
        object.__setattr__(self, "vertices", verts)
        object.__setattr__(self, "units", _units(self.units))
        object.__setattr__(self, "name", _name(self.name))

    @classmethod
    def rectangle(cls, x0, y0, x1, y1, *, units="px", name="area") -> AreaGauge:
        """An axis-aligned rectangle between corners ``(x0, y0)`` and ``(x1, y1)``."""
        (x0, y0), (x1, y1) = _pair((x0, y0), "x0, y0"), _pair((x1, y1), "x1, y1")
        if x0 == x1 or y0 == y1:
            raise ValueError("rectangle: the corners must differ in x and in y")
        return cls(((x0, y0), (x1, y0), (x1, y1), (x0, y1)), units=units, name=name)

    def contains(self, x, y, scale=None) -> np.ndarray:
        """Which reference positions (px) lie inside (even-odd rule; edges count as inside)."""
        v = np.array(self.vertices) / _factor(self.units, scale, self.name)
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        inside = np.zeros(np.broadcast_shapes(x.shape, y.shape), dtype=bool)
        on_edge = np.zeros_like(inside)
        for (xa, ya), (xb, yb) in zip(v, np.roll(v, -1, axis=0)):
            cond = (ya > y) != (yb > y)
            with np.errstate(divide="ignore", invalid="ignore"):
                xc = xa + (y - ya) * (xb - xa) / (yb - ya)
            inside ^= cond & (x < xc)
            # points on this edge (within 1e-9 px)
            ex, ey = xb - xa, yb - ya
            tt = ((x - xa) * ex + (y - ya) * ey) / (ex * ex + ey * ey)
            d = np.hypot(xa + np.clip(tt, 0, 1) * ex - x, ya + np.clip(tt, 0, 1) * ey - y)
            on_edge |= d <= 1e-9
        return inside | on_edge


@dataclass(frozen=True)
class PointProbe:
    """A material point of the reference image at which every strain component is read.

    Parameters
    ----------
    point : (float, float)
    units : {"px", "mm"}
    name : str
    """

    point: tuple
    units: str = "px"
    name: str = "point"

    def __post_init__(self):
        object.__setattr__(self, "point", _pair(self.point, "point"))
        object.__setattr__(self, "units", _units(self.units))
        object.__setattr__(self, "name", _name(self.name))

    def point_px(self, scale):
        """The point in px, array of shape (2,)."""
        return np.array(self.point) / _factor(self.units, scale, self.name)


def _factor(units, scale, name):
    """mm per px for ``units="mm"``, 1 for px."""
    if units == "px":
        return 1.0
    if scale is None or not (isinstance(scale, (int, float, np.floating)) and scale > 0
                             and math.isfinite(scale)):
        raise ValueError(f"gauge {name!r}: positions in mm need the scale (mm/px), which the "
                         "results do not have; give scale= or positions in px")
    return float(scale)


# --------------------------------------------------------------------------------------------
# what the gauges read from: a results file or displacement fields
# --------------------------------------------------------------------------------------------
class _Frames:
    """Uniform access to a results file, one displacement field or a list of them."""

    def __init__(self, source, scale=None):
        self.stereo = False
        if isinstance(source, DisplacementField):
            source = [source]
        if isinstance(source, (list, tuple)):
            if not source or not all(isinstance(f, DisplacementField) for f in source):
                raise ValueError("source: expected a results file (dic.load_results), a "
                                 "DisplacementField or a list of them")
            self._fields = list(source)
            self.n = len(self._fields)
            self.times = np.full(self.n, np.nan)
            self.scale = scale
            self.roi_mask = None
            first = self._fields[0]
            self.grid_x, self.grid_y = first.x, first.y
        elif hasattr(source, "field") and hasattr(source, "grid_x"):
            self._fields = None
            self._results = source
            self.n = len(source)
            if self.n == 0:
                raise ValueError("source: the results file holds no completed frame yet")
            t = np.asarray(getattr(source, "image_times", np.full(self.n, np.nan)), float)
            self.times = t[: self.n] if t.size >= self.n else np.full(self.n, np.nan)
            self.scale = scale if scale is not None else getattr(source, "scale", None)
            self.roi_mask = getattr(source, "roi_mask", None)
            self.grid_x, self.grid_y = source.grid_x, source.grid_y
            if hasattr(source, "path"):       # two cameras: gauges read 3-D positions
                from dic.sequence.stereofile import has_stereo, mean_scale

                self.stereo = has_stereo(source.path)
                if self.stereo and self.scale is None:   # to place gauges given in mm
                    self.scale = mean_scale(source)
        else:
            raise ValueError(f"source: expected a results file (dic.load_results), a "
                             f"DisplacementField or a list of them, got {type(source).__name__}")
        if self.scale is not None and math.isnan(float(self.scale)):
            self.scale = None
        ny, nx = self.grid_x.shape
        if ny < 2 or nx < 2:
            raise ValueError("source: gauges need a grid of at least 2 x 2 points")
        self._first = None

    def field(self, k) -> DisplacementField:
        if self._fields is not None:
            return self._fields[k]
        return self._results.field(int(k))

    @property
    def first(self) -> DisplacementField:
        if self._first is None:
            self._first = self.field(0)
        return self._first

    def frames(self, frames):
        if frames is None:
            return np.arange(self.n)
        ks = np.array([int(k) for k in (range(self.n)[frames] if isinstance(frames, slice)
                                        else frames)], dtype=np.int64)
        bad = ks[(ks < -self.n) | (ks >= self.n)]
        if ks.size == 0 or bad.size:
            raise ValueError(f"frames: give frame numbers from 0 to {self.n - 1}, got "
                             f"{bad.tolist() or 'none'}")
        return np.where(ks < 0, ks + self.n, ks)

    def describe_extent(self) -> str:
        ok = self.first.valid
        xs, ys = self.grid_x[ok], self.grid_y[ok]
        if xs.size == 0:
            return "no measured points"
        text = f"x {xs.min():g}..{xs.max():g} px, y {ys.min():g}..{ys.max():g} px"
        if self.scale:
            s = self.scale
            text += f" (x {xs.min() * s:g}..{xs.max() * s:g} mm, y {ys.min() * s:g}.." \
                    f"{ys.max() * s:g} mm)"
        return text


# --------------------------------------------------------------------------------------------
# interpolation of displacements at arbitrary reference positions
# --------------------------------------------------------------------------------------------
def displacement_at(field: DisplacementField, x, y):
    """Displacement at reference positions, exact for quadratic fields.

    ``u(X) = sum_i w_i (u_i + grad u_i . (X - X_i) / 2)`` over the four grid points around
    ``X`` with bilinear weights ``w_i``: the mean of bilinear interpolation and of the bilinear
    blend of first-order Taylor expansions (see the module notes for why).

    Parameters
    ----------
    field : DisplacementField
        On a regular grid.
    x, y : array_like
        Reference positions, px (broadcast together).

    Returns
    -------
    u, v : ndarray
        NaN outside the grid and where a grid point with non-zero weight is not measured.
    """
    X, Y = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
    gx, gy = field.x, field.y
    ny, nx = gx.shape
    sx = (gx[0, -1] - gx[0, 0]) / (nx - 1)
    sy = (gy[-1, 0] - gy[0, 0]) / (ny - 1)
    fj = (X - gx[0, 0]) / sx
    fi = (Y - gy[0, 0]) / sy
    eps = 1e-9
    inside = (fj >= -eps) & (fj <= nx - 1 + eps) & (fi >= -eps) & (fi <= ny - 1 + eps)
    fj = np.clip(np.where(inside, fj, 0.0), 0.0, nx - 1)
    fi = np.clip(np.where(inside, fi, 0.0), 0.0, ny - 1)
    j0 = np.minimum(np.floor(fj).astype(np.intp), nx - 2)
    i0 = np.minimum(np.floor(fi).astype(np.intp), ny - 2)
    t, s = fj - j0, fi - i0
    u = np.zeros(X.shape)
    v = np.zeros(X.shape)
    bad = ~inside
    g = field.grad
    for di, dj, w in ((0, 0, (1 - s) * (1 - t)), (0, 1, (1 - s) * t), (1, 0, s * (1 - t)),
                      (1, 1, s * t)):
        i, j = i0 + di, j0 + dj
        dx, dy = X - gx[i, j], Y - gy[i, j]
        pu = field.u[i, j] + 0.5 * (g[i, j, 0, 0] * dx + g[i, j, 0, 1] * dy)
        pv = field.v[i, j] + 0.5 * (g[i, j, 1, 0] * dx + g[i, j, 1, 1] * dy)
        used = w > 0
        bad |= used & ~(np.isfinite(pu) & np.isfinite(pv))
        u += np.where(used, w * np.where(used, pu, 0.0), 0.0)
        v += np.where(used, w * np.where(used, pv, 0.0), 0.0)
    u[bad] = np.nan
    v[bad] = np.nan
    return u, v


# --------------------------------------------------------------------------------------------
# histories
# --------------------------------------------------------------------------------------------
def gauge_histories(source, gauges, *, frames=None, window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE,
                    components=("xx", "yy", "xy"), scale=None) -> History:
    """Follow gauges through the frames.

    Parameters
    ----------
    source : dic.sequence.Results, DisplacementField or list of DisplacementField
        Tracked results (Lagrangian: every frame on the reference grid).
    gauges : GaugeLine, AreaGauge, PointProbe or a list of them
        Names must be distinct.
    frames : sequence of int or slice, optional
        Frames to follow (default: every completed frame).
    window, measure : optional
        Strain window and measure for area gauges and point probes (see
        :func:`dic.strain_field`); gauge lines do not use them.
    components : sequence of str
        Strain components averaged by area gauges (from :data:`dic.strain.COMPONENTS`;
        ``xy`` is tensor shear).
    scale : float, optional
        mm per px, overriding the results' own scale.

    Returns
    -------
    History
        Columns ``NAME.length`` (mm, or px without a scale), ``NAME.engineering``,
        ``NAME.hencky`` (true strain) and ``NAME.green-lagrange`` for lines; ``NAME.COMP.mean|std|min|max``
        and ``NAME.n`` for areas; ``NAME.COMP`` for every component in
        :data:`PROBE_COMPONENTS` for probes.

    Raises
    ------
    ValueError
        A gauge point outside the region measured in the first frame (the message gives the
        measured extent), an area holding no measured grid point, names used twice, bad frames.

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1 (virtual extensometers and VSG).
    """
    src = _Frames(source, scale)
    gauges = [gauges] if isinstance(gauges, (GaugeLine, AreaGauge, PointProbe)) else list(gauges)
    if not gauges:
        raise ValueError("gauges: give at least one GaugeLine, AreaGauge or PointProbe")
    names = [getattr(g, "name", None) for g in gauges]
    for g in gauges:
        if not isinstance(g, (GaugeLine, AreaGauge, PointProbe)):
            raise ValueError(f"gauges: expected GaugeLine, AreaGauge or PointProbe, got "
                             f"{type(g).__name__}")
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ValueError(f"gauges: names used more than once ({', '.join(dup)}); give each "
                         "gauge its own name")
    comps = [components] if isinstance(components, str) else list(components)
    ks = src.frames(frames)
    # check every gauge against the first frame before any work
    lines = [g for g in gauges if isinstance(g, GaugeLine)]
    areas = [g for g in gauges if isinstance(g, AreaGauge)]
    probes = [g for g in gauges if isinstance(g, PointProbe)]
    line_px = {g.name: g.points_px(src.scale) for g in lines}
    for g in lines:
        _check_points(src, line_px[g.name], g.name)
    probe_px = {g.name: g.point_px(src.scale) for g in probes}
    for g in probes:
        _check_points(src, probe_px[g.name][None, :], g.name)
    area_mask = {}
    for g in areas:
        m = g.contains(src.grid_x, src.grid_y, src.scale)
        if not (m & src.first.valid).any():
            raise ValueError(f"area gauge {g.name!r} holds no grid point measured in the first "
                             f"frame (measured: {src.describe_extent()}); move it or make it "
                             "larger than the grid step")
        area_mask[g.name] = m
    if (areas or probes):
        from dic.strain import COMPONENTS

        bad = [c for c in comps if c not in COMPONENTS]
        if bad:
            raise ValueError(f"components: unknown {', '.join(map(repr, bad))}; use some of "
                             f"{', '.join(COMPONENTS)}")

    length_unit = "mm" if src.scale or src.stereo else "px"
    lscale = src.scale or 1.0
    cols, units = {}, {}
    for g in lines:
        for q, u in (("length", length_unit), ("engineering", "mm/mm"), ("hencky", "mm/mm"),
                     ("green-lagrange", "mm/mm")):
            cols[f"{g.name}.{q}"] = np.full(ks.size, np.nan)
            units[f"{g.name}.{q}"] = u
    for g in areas:
        for c in comps:
            for q in ("mean", "std", "min", "max"):
                cols[f"{g.name}.{c}.{q}"] = np.full(ks.size, np.nan)
                units[f"{g.name}.{c}.{q}"] = _UNITS.get(c, "mm/mm")
        cols[f"{g.name}.n"] = np.zeros(ks.size)
        units[f"{g.name}.n"] = "points"
    for g in probes:
        for c in PROBE_COMPONENTS:
            cols[f"{g.name}.{c}"] = np.full(ks.size, np.nan)
            units[f"{g.name}.{c}"] = _UNITS.get(c, "mm/mm")

    vsg = None
    if src.stereo:    # two cameras: lengths between the end points in 3-D, mm
        from dic.sequence.stereofile import positions_at
        length0 = {g.name: math.dist(*positions_at(src._results, 0, *line_px[g.name].T))
                   for g in lines}
    for row, k in enumerate(ks):
        f = src.field(k)
        for g in lines:
            P = line_px[g.name]
            if src.stereo:
                L0, L = length0[g.name], math.dist(*positions_at(src._results, int(k), *P.T))
                cols[f"{g.name}.length"][row] = L
            else:
                u, v = displacement_at(f, P[:, 0], P[:, 1])
                L0 = math.dist(P[0], P[1])
                L = math.hypot(P[1, 0] + u[1] - P[0, 0] - u[0], P[1, 1] + v[1] - P[0, 1] - v[0])
                cols[f"{g.name}.length"][row] = L * lscale
            lam = L / L0
            cols[f"{g.name}.engineering"][row] = lam - 1.0
            cols[f"{g.name}.hencky"][row] = math.log(lam) if lam > 0 else math.nan
            cols[f"{g.name}.green-lagrange"][row] = 0.5 * (lam * lam - 1.0)
        if areas or probes:
            from dic.strain import strain_field

            if f.n_valid == 0:
                continue
            try:
                s = (src._results.strain(int(k), window=window, measure=measure) if src.stereo
                     else strain_field(f, window=window, measure=measure))
            except TooFewPoints:
                continue  # too little measured in this frame: leave NaN
            vsg = s.vsg
            for g in areas:
                m = area_mask[g.name] & s.valid
                cols[f"{g.name}.n"][row] = int(m.sum())
                for c in comps:
                    vals = s.component(c)[m]
                    vals = vals[np.isfinite(vals)]
                    if vals.size:
                        cols[f"{g.name}.{c}.mean"][row] = vals.mean()
                        cols[f"{g.name}.{c}.std"][row] = vals.std(ddof=1) if vals.size > 1 \
                            else math.nan
                        cols[f"{g.name}.{c}.min"][row] = vals.min()
                        cols[f"{g.name}.{c}.max"][row] = vals.max()
            for g in probes:
                x, y = probe_px[g.name]
                for c in PROBE_COMPONENTS:
                    cols[f"{g.name}.{c}"][row] = float(s.at(x, y, c))
    notes = []
    if lines and src.stereo:
        notes.append("gauge lines (two cameras): L is the 3-D distance in mm between the end "
                     "points' positions (bilinear in the grid of triangulated points)")
    elif lines:
        notes.append("gauge lines: end points follow the tracked displacements (bilinear blend "
                     "of the grid points' half-step Taylor expansions; exact for quadratic "
                     "fields); engineering = L/L0 - 1, hencky (true strain) = ln(L/L0), green-lagrange = "
                     "((L/L0)^2 - 1)/2")
    if areas or probes:
        from dic.strain import canonical_measure

        notes.append(f"area gauges and point probes: {canonical_measure(measure)} strain, "
                     f"window {window} points" + (f", VSG {vsg:g} px" if vsg and
                                                  math.isfinite(vsg) else "")
                     + "; xy is TENSOR shear (half the engineering shear angle)")
    return History(frame=ks.copy(), time=src.times[ks].copy(), force=np.full(ks.size, np.nan),
                   columns=cols, units=units, notes=notes)


def _check_points(src, P, name):
    """Every point inside the grid, the ROI, and among measured points of the first frame."""
    u, _ = displacement_at(src.first, P[:, 0], P[:, 1])
    for (x, y), ok in zip(P, np.isfinite(u)):
        inroi = True
        if src.roi_mask is not None:
            r, c = int(round(y)), int(round(x))
            h, w = src.roi_mask.shape
            inroi = 0 <= r < h and 0 <= c < w and bool(src.roi_mask[r, c])
        if not (ok and inroi):
            where = f"({x:g}, {y:g}) px" + (f" = ({x * src.scale:g}, {y * src.scale:g}) mm"
                                             if src.scale else "")
            raise ValueError(f"gauge {name!r}: point {where} lies outside the region of interest "
                             f"measured in the first frame ({src.describe_extent()}); move it "
                             "inside or shorten the gauge")


# --------------------------------------------------------------------------------------------
# placement helpers
# --------------------------------------------------------------------------------------------
def _resolve_axis(src, axis):
    if axis in ("x", "y"):
        return axis
    if axis != "auto":
        raise ValueError(f"axis: use 'x', 'y' or 'auto', got {axis!r}")
    last = src.field(src.n - 1)
    ok = last.valid
    if not ok.any():
        return "x"
    exx = np.nanmean(last.grad[..., 0, 0][ok])
    eyy = np.nanmean(last.grad[..., 1, 1][ok])
    return "x" if abs(exx) >= abs(eyy) else "y"


def _roi_box(src):
    """(x0, x1, y0, y1) of the region of interest (measured points of the first frame if no
    mask), px."""
    if src.roi_mask is not None and src.roi_mask.any():
        rows = np.flatnonzero(src.roi_mask.any(axis=1))
        cols = np.flatnonzero(src.roi_mask.any(axis=0))
        return float(cols[0]), float(cols[-1]), float(rows[0]), float(rows[-1])
    ok = src.first.valid
    if not ok.any():
        raise ValueError("source: the first frame has no measured point to place a gauge on")
    xs, ys = src.grid_x[ok], src.grid_y[ok]
    return float(xs.min()), float(xs.max()), float(ys.min()), float(ys.max())


def _measured_span(src, axis, through):
    """Extent (px) of measured first-frame points along ``axis`` on the grid line nearest
    ``through`` (the other coordinate)."""
    ok = src.first.valid
    if axis == "x":
        row = int(np.argmin(np.abs(src.grid_y[:, 0] - through)))
        xs = src.grid_x[row][ok[row]]
    else:
        col = int(np.argmin(np.abs(src.grid_x[0] - through)))
        xs = src.grid_y[:, col][ok[:, col]]
    if xs.size < 2:
        raise ValueError("source: too few measured points to place the gauge; check the ROI")
    return float(xs.min()), float(xs.max())


def _length_px(length, units, scale, name):
    try:
        L = float(length)
    except (TypeError, ValueError):
        raise ValueError(f"gauge_length: expected a number, got {length!r}") from None
    if not (L > 0 and math.isfinite(L)):
        raise ValueError(f"gauge_length: must be a positive number, got {length!r}")
    return L / _factor(_units(units), scale, name)


def _line(cx, cy, half, axis, units, scale, name):
    f = _factor(units, scale, name)
    if axis == "x":
        a, b = (cx - half, cy), (cx + half, cy)
    else:
        a, b = (cx, cy - half), (cx, cy + half)
    return GaugeLine((a[0] * f, a[1] * f), (b[0] * f, b[1] * f), units=units, name=name)


def axial_line(source, gauge_length, *, units="mm", axis="auto", name="axial",
               scale=None) -> GaugeLine:
    """A gauge line along the specimen axis, centred on the region of interest.

    Parameters
    ----------
    source : Results, DisplacementField or list of them
    gauge_length : float or None
        In ``units``; None takes 80 % of the length measured along the axis through the centre
        of the region of interest.
    units : {"mm", "px"}
    axis : {"auto", "x", "y"}
        Specimen axis; ``"auto"`` takes the direction of the larger mean normal strain in the
        last frame.
    name : str
    scale : float, optional
        mm per px, overriding the results' scale.

    Returns
    -------
    GaugeLine

    Raises
    ------
    ValueError
        The line would leave the region measured in the first frame.
    """
    src = _Frames(source, scale)
    ax = _resolve_axis(src, axis)
    x0, x1, y0, y1 = _roi_box(src)
    cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    if gauge_length is None:
        # 80 % of the length measured along the axis through the centre of the ROI
        along, through = (cx, cy) if ax == "x" else (cy, cx)
        lo, hi = _measured_span(src, ax, through)
        half = 0.8 * min(along - lo, hi - along)
        if not half > 0:
            raise InputError(f"{name}: the region of interest is not measured around its "
                             "centre; give the gauge length")
    else:
        half = 0.5 * _length_px(gauge_length, units, src.scale, name)
    line = _line(cx, cy, half, ax, units, src.scale, name)
    _check_points(src, line.points_px(src.scale), name)
    return line


def transverse_line(source, length=None, *, units="mm", axis="auto", name="transverse",
                    fraction=0.8, scale=None) -> GaugeLine:
    """A gauge line across the specimen axis through the centre of the region of interest.

    Parameters
    ----------
    source : Results, DisplacementField or list of them
    length : float, optional
        In ``units``; default ``fraction`` of the measured width across the axis.
    units : {"mm", "px"}
    axis : {"auto", "x", "y"}
        The specimen axis (the line is perpendicular to it).
    name : str
    fraction : float
        Share of the measured width used when ``length`` is None.
    scale : float, optional

    Returns
    -------
    GaugeLine
    """
    src = _Frames(source, scale)
    ax = _resolve_axis(src, axis)
    across = "y" if ax == "x" else "x"
    x0, x1, y0, y1 = _roi_box(src)
    cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    if length is None:
        if not 0 < fraction <= 1:
            raise ValueError(f"fraction: must be in (0, 1], got {fraction!r}")
        lo, hi = _measured_span(src, across, cy if across == "x" else cx)
        c = 0.5 * (lo + hi)
        half = 0.5 * fraction * (hi - lo)
        if across == "y":
            cy = c
        else:
            cx = c
    else:
        half = 0.5 * _length_px(length, units, src.scale, name)
    line = _line(cx, cy, half, across, units, src.scale, name)
    _check_points(src, line.points_px(src.scale), name)
    return line


def neck_line(source, gauge_length, *, units="mm", axis="auto", component="major",
              window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE, frame=-1, through="section",
              name="neck", scale=None) -> GaugeLine:
    """A gauge line along the axis, centred on the neck: the largest strain in the last frame.

    Parameters
    ----------
    source : Results, DisplacementField or list of them
    gauge_length : float
        In ``units``.
    units : {"mm", "px"}
    axis : {"auto", "x", "y"}
    component : str
        Strain component whose maximum marks the neck (default the major principal strain).
    window, measure
        Strain window and measure (see :func:`dic.strain_field`).
    frame : int
        Frame searched (default the last).
    through : {"section", "point"}
        ``"section"``: centred, on the centre line of the region of interest, at the
        cross-section (grid line across the axis) whose mean strain is largest -- robust to
        noise and to the raised strain at the specimen's edges; ``"point"``: centred on the
        single grid point of largest strain.
    name : str
    scale : float, optional

    Returns
    -------
    GaugeLine

    Raises
    ------
    ValueError
        The frame has no strain, or the line centred on the neck would leave the measured
        region (shorten the gauge).
    """
    if through not in ("section", "point"):
        raise ValueError(f"through: use 'section' or 'point', got {through!r}")
    from dic.strain import strain_field

    src = _Frames(source, scale)
    ax = _resolve_axis(src, axis)
    k = int(src.frames([frame])[0])
    s = strain_field(src.field(k), window=window, measure=measure)
    vals = np.where(s.valid, s.component(component), np.nan)
    if not np.isfinite(vals).any():
        raise ValueError(f"frame: frame {k} has no strain to find a neck in; pick another frame")
    half = 0.5 * _length_px(gauge_length, units, src.scale, name)
    if through == "point":
        i, j = np.unravel_index(int(np.nanargmax(vals)), vals.shape)
        cx, cy = float(src.grid_x[i, j]), float(src.grid_y[i, j])
    else:
        x0, x1, y0, y1 = _roi_box(src)
        counts = np.isfinite(vals).sum(axis=0 if ax == "x" else 1)
        sums = np.nansum(vals, axis=0 if ax == "x" else 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            profile = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
        at = int(np.nanargmax(profile))
        if ax == "x":
            cx, cy = float(src.grid_x[0, at]), 0.5 * (y0 + y1)
        else:
            cx, cy = 0.5 * (x0 + x1), float(src.grid_y[at, 0])
    line = _line(cx, cy, half, ax, units, src.scale, name)
    _check_points(src, line.points_px(src.scale), name)
    return line
