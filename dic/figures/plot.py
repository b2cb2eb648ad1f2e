"""Figures: displacement and strain maps over the specimen image, and line plots of a test.

Figures are built with matplotlib's object-oriented API on the Agg canvas (no window system and no
``pyplot`` state), so they work on headless machines and inside other programs. Colours follow
the project's rules: a perceptually uniform map (``cividis``) for magnitudes and a diverging map
(``RdBu_r``) centred on zero for signed components; no rainbow maps. Points that were not
measured are left fully transparent, so the image shows through; nothing is drawn where there
is no data.

Maps
----
displacement_map
    One displacement component of a :class:`~dic.field.DisplacementField`.
strain_map
    Any strain component or derived quantity of a :class:`~dic.strain.StrainField`, in the
    reference or the deformed configuration, with optional contour lines, gauges and a scale
    bar.
measure_comparison
    One component as Green-Lagrange, infinitesimal and Hencky strain side by side, plus the
    nonlinear share of Green-Lagrange strain.
quality_map
    The ZNCC of every match.
strain_limits
    Colour limits that stay fixed over a whole sequence.

Line plots
----------
gauge_histories, stress_strain_plot, valid_points_plot

Saving
------
save_figure
    PNG, SVG or PDF at a chosen size and resolution.
"""

from __future__ import annotations

import math
import os
import textwrap
from pathlib import Path

import numpy as np

from dic.field import DisplacementField

__all__ = ["FIGURE_FORMATS", "ROBUST_PERCENTILE", "STRAIN_QUANTITIES", "STRAIN_UNITS",
           "displacement_map", "gauge_histories", "measure_comparison", "quality_map",
           "save_figure", "strain_limits", "strain_map", "stress_strain_plot",
           "valid_counts", "valid_points_plot"]

#: what each component shows: (title, colour-bar label, signed?)
_COMPONENTS = {
    "magnitude": ("Displacement magnitude", "|u| = \u221a(u\u00b2 + v\u00b2) (px)", False),
    "u": ("Displacement u (along x)", "u (px)", True),
    "v": ("Displacement v (along y, downwards)", "v (px)", True),
}
_DEFAULT_CMAP = {False: "cividis", True: "RdBu_r"}
#: figure file types :func:`save_figure` writes (open formats only)
FIGURE_FORMATS = (".png", ".svg", ".pdf")
#: default colour-scale top: this percentile of the absolute measured values
ROBUST_PERCENTILE = 99.5


def _component_values(field, component):
    if component == "magnitude":
        values = np.hypot(field.u, field.v)
    elif component == "u":
        values = np.array(field.u, dtype=np.float64)
    else:
        values = np.array(field.v, dtype=np.float64)
    bad = ~(field.valid & np.isfinite(values))
    return np.ma.masked_array(np.where(bad, 0.0, values), mask=bad)


def _spacing(coords, axis, fallback):
    """Grid spacing along ``axis`` of a coordinate array; ``fallback`` for a single line."""
    if coords.shape[axis] > 1:
        d = float(np.take(coords, 1, axis=axis).flat[0] - np.take(coords, 0, axis=axis).flat[0])
        if d > 0:
            return d
    return float(fallback) if fallback and fallback > 0 else 1.0


def _colormap(cmap, signed):
    from matplotlib import colormaps
    from matplotlib.colors import Colormap

    if cmap is None:
        cmap = _DEFAULT_CMAP[signed]
    if isinstance(cmap, Colormap):
        base = cmap
    else:
        try:
            base = colormaps[str(cmap)]
        except KeyError:
            raise ValueError(f"cmap: unknown colour map {cmap!r}; use e.g. 'cividis' or "
                             f"'RdBu_r'") from None
    return base.with_extremes(bad=(0.0, 0.0, 0.0, 0.0))  # unmeasured points: fully transparent


def _limits(values, signed, limits):
    """Colour limits: given, or from the 99.5th percentile of the measured values."""
    if limits is not None:
        try:
            lo, hi = (float(t) for t in limits)
        except (TypeError, ValueError):
            lo = hi = float("nan")
        if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
            raise ValueError(f"limits must be two finite numbers (low, high) with low < high, "
                             f"got {limits!r}; e.g. limits=(0, 5)")
        return lo, hi
    data = np.abs(values.compressed())
    top = float(np.percentile(data, ROBUST_PERCENTILE)) if data.size else 0.0
    if not top > 0.0:
        top = float(data.max()) if data.size and data.max() > 0 else 1.0
    return (-top, top) if signed else (0.0, top)


def displacement_map(field, image=None, *, component="magnitude", ax=None, alpha=0.7, cmap=None,
                     limits=None, title=None):
    """Draw one displacement component over the reference image.

    Each grid point is drawn as a cell of the grid spacing centred on it, in image pixels. Points
    that were not measured stay transparent.

    Parameters
    ----------
    field : DisplacementField
        From :func:`dic.correlate`.
    image : array_like, optional
        The reference image (2-D grey levels, or anything :func:`dic.images.io.read_image` accepts),
        drawn in grey underneath. Without it the field is drawn on a white background.
    component : {'magnitude', 'u', 'v'}, optional
        ``'magnitude'`` is ``sqrt(u**2 + v**2)`` on ``cividis`` from 0; ``'u'`` and ``'v'`` are
        signed, on ``RdBu_r`` with limits symmetric about zero, so zero is the neutral middle
        colour.
    ax : matplotlib.axes.Axes, optional
        Axes to draw into. By default a new figure on the Agg canvas is made.
    alpha : float, optional
        Opacity of the field over the image, 0..1.
    cmap : str or matplotlib.colors.Colormap, optional
        Colour map instead of the default (avoid rainbow maps: they mislead the eye).
    limits : (float, float), optional
        Colour-scale limits in px. By default ``0 .. m`` for the magnitude and ``-m .. m`` for
        ``u`` and ``v``, where ``m`` is the 99.5th percentile of the absolute measured values,
        so a few stray points cannot flatten the map; values beyond the limits take the end
        colours and the colour bar gets an arrow at that end.
    title : str, optional
        Axes title; by default the component and the count of measured points.

    Returns
    -------
    fig : matplotlib.figure.Figure
    ax : matplotlib.axes.Axes

    Raises
    ------
    ValueError
        Bad ``field``, ``component``, ``alpha``, ``cmap``, ``limits`` or an image of another size
        than the one the field was measured on.
    """
    from matplotlib.colors import Normalize

    if not isinstance(field, DisplacementField):
        raise ValueError(f"field must be a DisplacementField (from dic.correlate); got "
                         f"{type(field).__name__}")
    comp = str(component).lower()
    if comp not in _COMPONENTS:
        raise ValueError(f"component: unknown {component!r}; use 'magnitude', 'u' or 'v'")
    try:
        alpha = float(alpha)
    except (TypeError, ValueError):
        alpha = float("nan")
    if not 0.0 <= alpha <= 1.0:
        raise ValueError(f"alpha must lie between 0 and 1, got {alpha!r}; e.g. 0.7")
    grey = None
    if image is not None:
        from dic.images.io import read_image

        grey = read_image(image, name="image")
        expected = field.settings.get("image_shape")
        if expected is not None and tuple(expected) != grey.shape:
            raise ValueError(f"image is {grey.shape[1]} x {grey.shape[0]} px but the field was "
                             f"measured on {expected[1]} x {expected[0]} px; pass its reference "
                             f"image")
    heading, label, signed = _COMPONENTS[comp]
    cm = _colormap(cmap, signed)
    values = _component_values(field, comp)

    if ax is None:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        rows, cols = grey.shape if grey is not None else (
            float(np.max(field.y)) + 1, float(np.max(field.x)) + 1)
        height = min(8.0, max(3.0, 7.0 * rows / max(cols, 1.0) + 1.2))
        fig = Figure(figsize=(8.0, height), layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
    else:
        fig = ax.figure

    if grey is not None:
        lo, hi = float(grey.min()), float(grey.max())
        ax.imshow(grey, cmap="gray", vmin=lo, vmax=hi if hi > lo else lo + 1.0,
                  interpolation="nearest", extent=(-0.5, grey.shape[1] - 0.5,
                                                   grey.shape[0] - 0.5, -0.5))

    dx = _spacing(field.x, 1, field.step)
    dy = _spacing(field.y, 0, field.step)
    x0, x1 = float(field.x[0, 0]), float(field.x[0, -1])
    y0, y1 = float(field.y[0, 0]), float(field.y[-1, 0])
    extent = (x0 - dx / 2, x1 + dx / 2, y1 + dy / 2, y0 - dy / 2)

    lo, hi = _limits(values, signed, limits)
    im = ax.imshow(values, cmap=cm, norm=Normalize(lo, hi), alpha=alpha,
                   interpolation="nearest", extent=extent)
    im.set_gid("displacement")
    data = values.compressed()
    below, above = bool(np.any(data < lo)), bool(np.any(data > hi))
    extend = {(False, False): "neither", (True, False): "min", (False, True): "max",
              (True, True): "both"}[below, above]
    cbar = fig.colorbar(im, ax=ax, extend=extend)
    cbar.set_label(label)
    if cbar.solids is not None:
        cbar.solids.set_alpha(1.0)  # the key itself opaque, so its colours read true

    if grey is not None:
        ax.set_xlim(-0.5, grey.shape[1] - 0.5)
        ax.set_ylim(grey.shape[0] - 0.5, -0.5)
    else:
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
    ax.set_aspect("equal")
    ax.set_xlabel("x (px)")
    ax.set_ylabel("y (px)")
    if title is None:
        n, nv = field.n_points, field.n_valid
        title = f"{heading}: {nv} of {n} points measured ({100.0 * nv / max(n, 1):.1f} %)"
    ax.set_title(title)
    return fig, ax


# --------------------------------------------------------------------------------------------
# strain maps: quantities, units, limits
# --------------------------------------------------------------------------------------------
#: quantities :func:`strain_map` draws: name -> (description, signed?, kind). ``kind`` is
#: ``"strain"`` (shown in microstrain or %), ``"angle"`` (degrees) or ``"share"`` (%).
STRAIN_QUANTITIES = {
    "xx": ("strain xx, along x", True, "strain"),
    "yy": ("strain yy, along y", True, "strain"),
    "xy": ("shear strain xy, tensor shear = half the engineering shear angle", True, "strain"),
    "zz": ("strain zz, out of plane, estimated at constant volume", True, "strain"),
    "major": ("major principal strain", True, "strain"),
    "minor": ("minor principal strain", True, "strain"),
    "max_shear": ("largest in-plane tensor shear strain", False, "strain"),
    "equivalent": ("equivalent strain (von Mises)", False, "strain"),
    "rotation": ("rigid rotation", True, "angle"),
    "area_change": ("relative area change", True, "strain"),
    "nonlinear_share": ("nonlinear share of Green-Lagrange strain", False, "share"),
}
#: display units of strain: name -> (factor from a plain number, symbol)
STRAIN_UNITS = {"microstrain": (1e6, "\u00b5\u03b5"), "%": (100.0, "%")}
_UNIT_ALIASES = {"microstrain": "microstrain", "\u00b5\u03b5": "microstrain", "ue": "microstrain",
                 "%": "%", "percent": "%"}
_MEASURE_TITLES = {"green-lagrange": "Green-Lagrange", "infinitesimal": "Infinitesimal",
                   "euler-almansi": "Euler-Almansi", "hencky": "Hencky",
                   "engineering": "Engineering (Biot)"}
#: strain components that exist in every measure (the measure comparison takes these)
_MEASURE_DEPENDENT = ("xx", "yy", "xy", "zz", "major", "minor", "max_shear", "equivalent")
#: with units="auto", strain limits reaching 1 % are shown in %, smaller ones in microstrain
_PERCENT_FROM = 0.01
#: the colour scale never gets narrower than this (a field of exact zeros still gets a scale)
_SMALLEST_TOP = 1e-6


def _quantity_name(component):
    key = (component.strip().lower().replace("-", "_").replace(" ", "_")
           if isinstance(component, str) else None)
    if key not in STRAIN_QUANTITIES:
        raise ValueError(f"component: unknown {component!r}; use one of: "
                         f"{', '.join(STRAIN_QUANTITIES)}")
    return key


def _check_strain(strain, name="strain"):
    from dic.strain import StrainField

    if not isinstance(strain, StrainField):
        raise ValueError(f"{name} must be a StrainField (from dic.strain_field or "
                         f"Results.strain); got {type(strain).__name__}")


def _quantity_values(strain, name):
    """The quantity as float64, NaN wherever the strain is not valid."""
    if name == "nonlinear_share":
        values = strain.nonlinear_share()
    else:
        values = strain.component(name)
    values = np.array(values, dtype=np.float64)
    values[~(np.asarray(strain.valid, dtype=bool) & np.isfinite(values))] = np.nan
    return values


def _unit(units, kind, top):
    """``(factor, symbol, units name)`` of a quantity of ``kind`` whose colour scale reaches
    ``top`` (a plain number)."""
    if kind == "angle":
        return 1.0, "\u00b0", "degree"
    if kind == "share":
        return 100.0, "%", "%"
    if units is None or (isinstance(units, str) and units.strip().lower() == "auto"):
        name = "%" if top >= _PERCENT_FROM else "microstrain"
    else:
        name = _UNIT_ALIASES.get(units.strip().lower() if isinstance(units, str) else None)
        if name is None:
            raise ValueError(f"units: unknown {units!r}; use 'microstrain', '%' or 'auto'")
    factor, symbol = STRAIN_UNITS[name]
    return factor, symbol, name


def _check_limits(limits, name="limits"):
    try:
        lo, hi = (float(t) for t in limits)
    except (TypeError, ValueError):
        lo = hi = float("nan")
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise ValueError(f"{name} must be two finite numbers (low, high) with low < high, "
                         f"got {limits!r}; e.g. {name}=(-0.01, 0.01)")
    return lo, hi


def _check_percentile(percentile):
    try:
        p = float(percentile)
    except (TypeError, ValueError):
        p = float("nan")
    if not 0.0 < p <= 100.0:
        raise ValueError(f"percentile must lie in (0, 100], got {percentile!r}; e.g. 99.5")
    return p


def _robust_top(values, percentile=ROBUST_PERCENTILE):
    data = np.abs(np.asarray(values, dtype=np.float64))
    data = data[np.isfinite(data)]
    return float(np.percentile(data, percentile)) if data.size else 0.0


def _limits_from_top(top, signed):
    top = top if top > _SMALLEST_TOP else _SMALLEST_TOP
    return (-top, top) if signed else (0.0, top)


def _frame_indices(frames, n, name="frames"):
    """Checked list of frame indices (negative ones count from the end) out of ``n``."""
    if n == 0:
        raise ValueError("results: the results file holds no completed frames; track images "
                         "into it first")
    if frames is None:
        return list(range(n))
    if isinstance(frames, slice):
        out = list(range(n))[frames]
        if not out:
            raise ValueError(f"{name}: {frames!r} selects none of the frames 0 to {n - 1}")
        return out
    if isinstance(frames, (int, np.integer)) and not isinstance(frames, bool):
        frames = [frames]
    try:
        items = list(frames)
    except TypeError:
        raise ValueError(f"{name}: expected frame numbers, e.g. [0, 5, 10]; got "
                         f"{frames!r}") from None
    out = []
    for k in items:
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)):
            raise ValueError(f"{name}: {k!r} is not a frame number; give whole numbers from 0 "
                             f"to {n - 1}")
        if not -n <= int(k) < n:
            raise ValueError(f"{name}: frame {int(k)} does not exist; the results file has "
                             f"frames 0 to {n - 1}")
        out.append(int(k) % n)
    if not out:
        raise ValueError(f"{name}: no frames given; give frame numbers from 0 to {n - 1}")
    return out


def _find_image(results, k):
    """The image of frame ``k`` of a results file (``None``: the reference image), or None.

    Looks for the stored image name as given, then relative to the results file's folder, then
    for the bare file name in that folder. Images given as arrays (stored as ``array N``) and
    files that cannot be found or read give None: the map is then drawn without a picture.
    """
    names = list(getattr(results, "image_names", []) or [])
    if k is None:
        settings = getattr(results, "settings", {}) or {}
        order = list(settings.get("frames", range(len(names))))
        ref = settings.get("reference", order[0] if order else 0)
        if ref not in order:
            return None
        k = order.index(ref)
    if not 0 <= k < len(names):
        return None
    name = str(names[k])
    folder = Path(getattr(results, "path", ".")).parent
    for cand in (Path(name), folder / name, folder / Path(name).name):
        try:
            if cand.is_file():
                from dic.images.io import read_image

                return read_image(cand, name="image")
        except (OSError, ValueError):
            return None
    return None


def _is_results(obj):
    return all(hasattr(obj, a) for a in ("field", "strain", "__len__"))


def strain_limits(source, component="xx", *, frames=None, window=9, measure="green-lagrange",
                  percentile=ROBUST_PERCENTILE):
    """Colour limits for one quantity that hold for a whole sequence.

    The top of the scale is the largest, over the frames, of each frame's ``percentile``-th
    percentile of the absolute values: a few stray points in any frame cannot stretch the
    scale, the most strained frame still fits, and only one frame is in memory at a time.

    Parameters
    ----------
    source : dic.sequence.store.Results or iterable of dic.strain.StrainField
        A results file opened with :func:`dic.load_results` (strain is computed frame by frame
        with ``window`` and ``measure``), or strain fields already computed.
    component : str, optional
        One of :data:`STRAIN_QUANTITIES`.
    frames : sequence of int or slice, optional
        Frames of the results to use (default all).
    window : int, optional
        Strain window, as for :func:`dic.strain_field`.
    measure : str, optional
        Strain measure, as for :func:`dic.strain_field`.
    percentile : float, optional
        Percentile of the absolute values taken per frame.

    Returns
    -------
    (float, float)
        ``(-top, top)`` for signed quantities, ``(0, top)`` for magnitudes, in the quantity's own
        units: strain as a plain number (0.01 = 1 %), rotation in degrees, the nonlinear share
        as a ratio. Pass them to ``limits=`` of :func:`strain_map` or :func:`dic.figures.animate.animate`.

    Raises
    ------
    ValueError
        Unknown component, bad percentile, no frames, or a frame that does not exist.
    """
    name = _quantity_name(component)
    p = _check_percentile(percentile)
    signed = STRAIN_QUANTITIES[name][1]
    top = 0.0
    if _is_results(source):
        for k in _frame_indices(frames, len(source)):
            top = max(top, _robust_top(_quantity_values(
                source.strain(k, window=window, measure=measure), name), p))
    else:
        count = 0
        for s in source:
            _check_strain(s, "source item")
            top = max(top, _robust_top(_quantity_values(s, name), p))
            count += 1
        if count == 0:
            raise ValueError("source: no strain fields given; pass a results file or a list of "
                             "StrainField")
    return _limits_from_top(top, signed)


# --------------------------------------------------------------------------------------------
# strain maps: drawing
# --------------------------------------------------------------------------------------------
def _check_alpha(alpha):
    try:
        alpha = float(alpha)
    except (TypeError, ValueError):
        alpha = float("nan")
    if not 0.0 <= alpha <= 1.0:
        raise ValueError(f"alpha must lie between 0 and 1, got {alpha!r}; e.g. 0.7")
    return alpha


def _configuration(configuration):
    key = configuration.strip().lower() if isinstance(configuration, str) else None
    if key not in ("reference", "deformed"):
        raise ValueError(f"configuration: unknown {configuration!r}; use 'reference' or "
                         f"'deformed'")
    return key


def _background(image):
    if image is None:
        return None
    from dic.images.io import read_image

    return read_image(image, name="image")


def _masked(values):
    bad = ~np.isfinite(values)
    return np.ma.masked_array(np.where(bad, 0.0, values), mask=bad)


def _corner_average(a):
    """Mean of the finite values of the up to four grid points around each cell corner."""
    ny, nx = a.shape
    ok = np.isfinite(a)
    vals = np.where(ok, a, 0.0)
    total = np.zeros((ny + 1, nx + 1))
    count = np.zeros((ny + 1, nx + 1))
    for dj in (0, 1):
        for di in (0, 1):
            total[dj:dj + ny, di:di + nx] += vals
            count[dj:dj + ny, di:di + nx] += ok
    out = np.full(total.shape, np.nan)
    np.divide(total, count, out=out, where=count > 0)
    return out


def _cell_corners(x, y, step, u=None, v=None):
    """Corners (ny+1, nx+1) of the cells around the grid points, moved by ``u, v`` if given.

    A corner moves by the mean displacement of the measured points around it, so the cells of
    neighbouring points share their corners and tile the deformed specimen without gaps.
    Corners that touch no measured point stay in place (they only bound unmeasured cells,
    which are not drawn).
    """
    dx = _spacing(x, 1, step)
    dy = _spacing(y, 0, step)
    xc = np.concatenate([x[0, :] - dx / 2, [x[0, -1] + dx / 2]])
    yc = np.concatenate([y[:, 0] - dy / 2, [y[-1, 0] + dy / 2]])
    X, Y = np.meshgrid(xc, yc)
    if u is not None:
        U, V = _corner_average(np.asarray(u, float)), _corner_average(np.asarray(v, float))
        X = X + np.where(np.isfinite(U), U, 0.0)
        Y = Y + np.where(np.isfinite(V), V, 0.0)
    return X, Y


def _veil(ax, grey, X, Y, drawn, opacity, zorder):
    """The image again, at ``opacity``, over the drawn cells of a deformed mesh only."""
    from matplotlib.path import Path as MplPath

    if not drawn.any():
        return None
    quads = np.stack([np.stack([X[:-1, :-1], Y[:-1, :-1]], -1)[drawn],
                      np.stack([X[:-1, 1:], Y[:-1, 1:]], -1)[drawn],
                      np.stack([X[1:, 1:], Y[1:, 1:]], -1)[drawn],
                      np.stack([X[1:, :-1], Y[1:, :-1]], -1)[drawn]], axis=1)
    lo, hi = float(grey.min()), float(grey.max())
    top = ax.imshow(grey, cmap="gray", vmin=lo, vmax=hi if hi > lo else lo + 1.0,
                    interpolation="nearest", alpha=opacity, zorder=zorder,
                    extent=(-0.5, grey.shape[1] - 0.5, grey.shape[0] - 0.5, -0.5))
    top.set_clip_path(MplPath.make_compound_path_from_polys(quads), ax.transData)
    top.set_gid("veil")
    return top


def _new_axes(ax, view, figsize, horizontal_bar):
    """The axes to draw into: ``ax``, or a new figure sized for a view (x0, x1, y0, y1)."""
    if ax is not None:
        return ax.figure, ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if figsize is None:
        w = max(abs(view[1] - view[0]), 1.0)
        h = max(abs(view[3] - view[2]), 1.0)
        width = 8.0
        height = min(9.0, max(2.5, (width - (0.8 if horizontal_bar else 2.2)) * h / w + 0.8
                              + (1.0 if horizontal_bar else 0.0)))
        figsize = (width, height)
    fig = Figure(figsize=_check_size(figsize, "figsize"), layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot()


def _check_size(size, name="size"):
    try:
        w, h = (float(t) for t in size)
    except (TypeError, ValueError):
        w = h = float("nan")
    if not (w > 0 and h > 0 and math.isfinite(w) and math.isfinite(h)):
        raise ValueError(f"{name} must be (width, height) in inches, both positive, got "
                         f"{size!r}; e.g. {name}=(8, 4.5)")
    return w, h


def _draw_image(ax, grey):
    lo, hi = float(grey.min()), float(grey.max())
    ax.imshow(grey, cmap="gray", vmin=lo, vmax=hi if hi > lo else lo + 1.0,
              interpolation="nearest",
              extent=(-0.5, grey.shape[1] - 0.5, grey.shape[0] - 0.5, -0.5))


def _extend(data, lo, hi):
    below, above = bool(np.any(data < lo)), bool(np.any(data > hi))
    return {(False, False): "neither", (True, False): "min", (False, True): "max",
            (True, True): "both"}[below, above]


def _colorbar(fig, mappable, axes, label, data, lo, hi, horizontal):
    cbar = fig.colorbar(mappable, ax=axes, extend=_extend(data, lo, hi),
                        orientation="horizontal" if horizontal else "vertical",
                        shrink=0.9 if horizontal else 1.0, aspect=40 if horizontal else 20)
    cbar.set_label("\n".join(textwrap.wrap(label, 70 if horizontal else 45)))
    from matplotlib.ticker import ScalarFormatter

    plain = ScalarFormatter(useOffset=False)  # no "+9.999e-1" offsets on the key
    (cbar.ax.xaxis if horizontal else cbar.ax.yaxis).set_major_formatter(plain)
    if cbar.solids is not None:
        cbar.solids.set_alpha(1.0)  # the key itself opaque, so its colours read true
    return cbar


def _nice_length(target):
    """The largest 1, 2 or 5 times a power of ten not above ``target`` (> 0)."""
    power = 10.0 ** math.floor(math.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * power <= target:
            return m * power
    return power


def _scale_bar(ax, scale, view_width_px):
    """A scale bar in mm, about a fifth of the view wide, in the lower left corner."""
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    length_mm = _nice_length(0.2 * view_width_px * scale)
    bar = AnchoredSizeBar(ax.transData, length_mm / scale, f"{length_mm:g} mm", "lower left",
                          pad=0.4, borderpad=0.5, sep=3, color="black", frameon=True,
                          size_vertical=max(view_width_px / 250.0, 1.0), fontproperties={
                              "size": 8})
    bar.patch.set_facecolor("white")
    bar.patch.set_alpha(0.85)
    bar.patch.set_edgecolor("none")
    bar.set_gid("scale_bar")
    ax.add_artist(bar)
    return bar


def _check_scale(scale):
    if scale is None:
        return None
    try:
        s = float(scale)
    except (TypeError, ValueError):
        s = float("nan")
    if math.isnan(s):
        return None  # unknown scale: no bar
    if not (s > 0 and math.isfinite(s)):
        raise ValueError(f"scale must be a positive number of mm per px (or None), got "
                         f"{scale!r}; e.g. scale=0.08")
    return s


def _gauge_shapes(gauges):
    """Normalise gauges to ``[(points (n, 2), label, closed)]``.

    Accepted items: a mapping with ``points`` (and optional ``label``/``name``, ``closed``);
    an object with ``points`` (or ``p0``/``p1``, or ``start``/``end``) and optional ``label``
    or ``name``; a pair ``(points, label)``; or plain points. Items without a geometry are
    skipped (a gauge history may carry none).
    """
    if gauges is None:
        return []
    out = []
    for item in gauges:
        label, closed, pts = None, None, None
        if isinstance(item, dict):
            pts = item.get("points")
            label = item.get("label", item.get("name"))
            closed = item.get("closed")
        elif (isinstance(item, (tuple, list)) and len(item) == 2
              and isinstance(item[1], str)):
            pts, label = item
        elif isinstance(item, (tuple, list, np.ndarray)):
            pts = item
        else:
            for a, b in (("p0", "p1"), ("start", "end")):
                if getattr(item, a, None) is not None and getattr(item, b, None) is not None:
                    pts = [getattr(item, a), getattr(item, b)]
                    break
            else:
                pts = getattr(item, "points", None)
            label = getattr(item, "label", None) or getattr(item, "name", None)
            closed = getattr(item, "closed", None)
        if pts is None:
            continue
        try:
            arr = np.asarray(pts, dtype=np.float64)
        except (TypeError, ValueError):
            arr = np.empty((0,))
        if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 2 or not np.isfinite(
                arr).all():
            raise ValueError(f"gauges: {item!r} has no usable points; give at least two (x, y) "
                             f"pairs in px, e.g. {{'points': [(70, 120), (570, 120)], "
                             f"'label': 'L0'}}")
        if closed is None:
            closed = arr.shape[0] >= 3
        out.append((arr, None if label is None else str(label), bool(closed)))
    return out


def _draw_gauges(ax, shapes, strain=None, field=None):
    """Gauges on top of a map; in the deformed configuration their points move with the field."""
    from matplotlib import patheffects

    outline = [patheffects.withStroke(linewidth=3.2, foreground="black")]
    for pts, label, closed in shapes:
        p = pts
        if field is not None:
            from dic.strain._sample import bilinear

            x, y = strain.x, strain.y
            sx = _spacing(x, 1, strain.step)
            sy = _spacing(y, 0, strain.step)
            du = bilinear(np.asarray(field.u, float), x[0, 0], y[0, 0], sx, sy, p[:, 0], p[:, 1])
            dv = bilinear(np.asarray(field.v, float), x[0, 0], y[0, 0], sx, sy, p[:, 0], p[:, 1])
            p = p + np.column_stack([du, dv])  # NaN where the field is unknown: a gap
        if closed:
            p = np.vstack([p, p[:1]])
        (line,) = ax.plot(p[:, 0], p[:, 1], color="white", linewidth=1.6,
                          marker="|" if not closed and len(pts) == 2 else None, markersize=9,
                          path_effects=outline, zorder=5)
        line.set_gid("gauge")
        if label:
            ok = np.isfinite(p).all(axis=1)
            if ok.any():
                where = p[ok][0] if not closed else p[ok].mean(axis=0)
                ax.annotate(label, where, xytext=(4, 4), textcoords="offset points",
                            fontsize=8, color="black", zorder=6,
                            bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none",
                                      alpha=0.85))


def _contour_levels(contours, lo, hi, factor):
    if isinstance(contours, bool):
        contours = 6 if contours else None
    if contours is None:
        return None
    if isinstance(contours, (int, np.integer)):
        if contours < 1:
            raise ValueError(f"contours must be a number of levels (at least 1) or a list of "
                             f"values, got {contours!r}; e.g. contours=5")
        return int(contours)  # levels picked from the data once they are known
    try:
        levels = np.sort(np.asarray(contours, dtype=np.float64).ravel())
    except (TypeError, ValueError):
        levels = np.array([np.nan])
    if levels.size == 0 or not np.isfinite(levels).all():
        raise ValueError(f"contours must be a number of levels or a list of finite values "
                         f"(plain strain numbers, e.g. [0.01, 0.02]), got {contours!r}")
    return levels * factor


def _draw_contours(ax, X, Y, shown, levels):
    from matplotlib.ticker import MaxNLocator

    data = shown.compressed()
    if data.size < 4 or not data.max() > data.min():
        return None
    if isinstance(levels, int):  # about that many round values inside the data's range
        levels = MaxNLocator(levels + 1).tick_values(float(data.min()), float(data.max()))
    levels = levels[(levels > data.min()) & (levels < data.max())]
    if levels.size == 0:
        return None
    cs = ax.contour(X, Y, shown, levels=np.unique(levels), colors="black", linewidths=0.7)
    cs.set_gid("contours")
    ax.clabel(cs, fmt=lambda v: f"{v:.3g}", fontsize=7, inline=True)
    return cs


def _view(X, Y, drawn, grey, crop, step):
    """Axes limits (x0, x1, y_bottom, y_top): the whole image (or without one, every cell);
    with ``crop`` the drawn cells with a margin of two grid steps, inside the image."""
    if grey is not None and not crop:
        return (-0.5, grey.shape[1] - 0.5, grey.shape[0] - 0.5, -0.5)
    if crop and drawn.any():
        cx = np.concatenate([X[:-1, :-1][drawn], X[1:, 1:][drawn], X[:-1, 1:][drawn],
                             X[1:, :-1][drawn]])
        cy = np.concatenate([Y[:-1, :-1][drawn], Y[1:, 1:][drawn], Y[:-1, 1:][drawn],
                             Y[1:, :-1][drawn]])
    else:
        cx, cy = X.ravel(), Y.ravel()
    m = 2.0 * float(step) if crop and step else 0.0
    x0, x1, y0, y1 = cx.min() - m, cx.max() + m, cy.min() - m, cy.max() + m
    if grey is not None:
        x0, y0 = max(x0, -0.5), max(y0, -0.5)
        x1, y1 = min(x1, grey.shape[1] - 0.5), min(y1, grey.shape[0] - 0.5)
    return (float(x0), float(x1), float(y1), float(y0))


def _grid_view(x, y, step):
    dx = _spacing(x, 1, step)
    dy = _spacing(y, 0, step)
    return (float(x[0, 0]) - dx / 2, float(x[0, -1]) + dx / 2, float(y[-1, 0]) + dy / 2,
            float(y[0, 0]) - dy / 2)


def _label(name, measure, symbol):
    desc, _, kind = STRAIN_QUANTITIES[name]
    if kind == "strain" and name != "area_change":
        return f"{_MEASURE_TITLES.get(measure, measure)} {desc} ({symbol})"
    return f"{desc[0].upper()}{desc[1:]} ({symbol})"


def strain_map(strain, image=None, *, component="xx", field=None, configuration="reference",
               ax=None, alpha=0.7, cmap=None, limits=None, units="auto", scale=None,
               contours=None, gauges=None, title=None, colorbar=True, figsize=None,
               crop=False):
    """Draw a strain component (or a quantity derived from it) over the specimen image.

    Each grid point is drawn as a cell one grid step wide centred on it. In the reference
    configuration the cells sit on the reference grid (the field's own, Lagrangian,
    description); in the deformed configuration every cell corner moves with the mean
    displacement of the measured points around it, so the map follows the specimen in the
    deformed image. Points without a strain stay transparent: nothing is drawn there.

    Parameters
    ----------
    strain : dic.strain.StrainField
        From :func:`dic.strain_field` or :meth:`dic.sequence.store.Results.strain`.
    image : array_like or path, optional
        Drawn in grey underneath: the reference image for ``configuration="reference"``, the
        frame's own (deformed) image for ``"deformed"``.
    component : str, optional
        One of :data:`STRAIN_QUANTITIES`: ``xx``, ``yy``, ``xy`` (TENSOR shear, half the
        engineering shear angle), ``zz`` (only if the strain was computed with an out-of-plane
        estimate), ``major``, ``minor``, ``max_shear``, ``equivalent``, ``rotation``,
        ``area_change`` or ``nonlinear_share``.
    field : dic.field.DisplacementField, optional
        The frame's displacement field; needed for ``configuration="deformed"`` (and moves the
        gauges there).
    configuration : {'reference', 'deformed'}, optional
    ax : matplotlib.axes.Axes, optional
        Axes to draw into; by default a new figure on the Agg canvas.
    alpha : float, optional
        Opacity of the map over the image, 0..1 (without an image, a map in the deformed
        configuration is drawn opaque).
    cmap : str or matplotlib.colors.Colormap, optional
        Instead of the default ``RdBu_r`` (signed, centred on zero) or ``cividis``
        (magnitudes). Avoid rainbow maps.
    limits : (float, float), optional
        Colour limits in the quantity's own units (strain as a plain number: 0.01 = 1 %;
        rotation in degrees; the nonlinear share as a ratio), e.g. from :func:`strain_limits`
        to keep them fixed over a sequence. By default ``-m .. m`` (signed) or ``0 .. m`` with
        ``m`` the 99.5th percentile of the absolute values of this map.
    units : {'auto', 'microstrain', '%'}, optional
        How strain is shown on the colour bar; ``'auto'`` picks % when the limits reach 1 %,
        microstrain below. Rotation is always in degrees and the nonlinear share in %.
    scale : float, optional
        Millimetres per pixel; draws a scale bar in mm (none when None or NaN).
    contours : int or sequence of float, optional
        Contour lines: about this many levels at round values between the smallest and the
        largest value shown, or the levels themselves (in the quantity's own units).
    gauges : sequence, optional
        Gauge lines and areas drawn on top: mappings ``{"points": [(x, y), ...], "label":
        ...}``, objects with ``points`` (or ``p0``/``p1``) and ``label``/``name``, or pairs
        ``(points, label)``; points in reference-image px. Two points make a line, three or more
        a closed outline.
    title : str, optional
        Axes title; by default the quantity and the count of points with a strain.
    colorbar : bool, optional
        Add a colour bar (with the quantity, the measure and the units).
    figsize : (float, float), optional
        Size of a new figure in inches.
    crop : bool, optional
        Show only the measured area (plus two grid steps) instead of the whole image.

    Returns
    -------
    fig : matplotlib.figure.Figure
    ax : matplotlib.axes.Axes
        The map is the artist with gid ``"strain"`` (an image in the reference configuration, a
        mesh in the deformed one).

    Raises
    ------
    ValueError
        Bad strain, component, configuration, field, alpha, cmap, limits, units, scale,
        contours or gauges.
    """
    from matplotlib.colors import Normalize

    _check_strain(strain)
    name = _quantity_name(component)
    _, signed, kind = STRAIN_QUANTITIES[name]
    config = _configuration(configuration)
    if field is not None or config == "deformed":
        if not isinstance(field, DisplacementField):
            raise ValueError("field: the deformed configuration needs the frame's "
                             "DisplacementField (Results.field(k)); pass field=...")
        if field.shape != strain.shape:
            raise ValueError(f"field: grid {field.shape} differs from the strain grid "
                             f"{strain.shape}; pass the same frame's displacement field")
    alpha = _check_alpha(alpha)
    scale = _check_scale(scale)
    shapes = _gauge_shapes(gauges)
    grey = _background(image)
    values = _quantity_values(strain, name)
    if limits is not None:
        lo, hi = _check_limits(limits)
    else:
        lo, hi = _limits_from_top(_robust_top(values), signed)
    factor, symbol, _ = _unit(units, kind, max(abs(lo), abs(hi)))
    levels = _contour_levels(contours, lo, hi, factor)
    cm = _colormap(cmap, signed)
    shown = _masked(values * factor)
    norm = Normalize(lo * factor, hi * factor)

    moved = config == "deformed"
    if moved:
        X, Y = _cell_corners(strain.x, strain.y, strain.step, field.u, field.v)
    else:
        X, Y = _cell_corners(strain.x, strain.y, strain.step)
    view = _view(X, Y, ~np.ma.getmaskarray(shown), grey, crop, strain.step)
    horizontal = abs(view[1] - view[0]) >= 1.6 * abs(view[2] - view[3])
    fig, ax = _new_axes(ax, view, figsize, horizontal and colorbar)

    if grey is not None:
        _draw_image(ax, grey)
    if moved:
        # The mesh is drawn opaque (cells share edges, and semi-transparent cells would show
        # their one-pixel overlaps as lines); the image is laid over it again at 1 - alpha,
        # clipped to the drawn cells, which blends exactly as a semi-transparent map would.
        mappable = ax.pcolormesh(X, Y, shown, cmap=cm, norm=norm, shading="flat",
                                 antialiased=False, edgecolors="none", rasterized=True)
        if grey is not None and alpha < 1.0:
            _veil(ax, grey, X, Y, ~np.ma.getmaskarray(shown), 1.0 - alpha,
                  mappable.get_zorder() + 0.1)
        u = np.where(np.isfinite(field.u), field.u, 0.0)
        v = np.where(np.isfinite(field.v), field.v, 0.0)
        px, py = strain.x + u, strain.y + v
    else:
        mappable = ax.imshow(shown, cmap=cm, norm=norm, alpha=alpha, interpolation="nearest",
                             extent=_grid_view(strain.x, strain.y, strain.step))
        px, py = strain.x, strain.y
    mappable.set_gid("strain")
    if levels is not None:
        _draw_contours(ax, px, py, shown, levels)
    if shapes:
        _draw_gauges(ax, shapes, strain, field if moved else None)
    if colorbar:
        _colorbar(fig, mappable, ax, _label(name, strain.measure, symbol), shown.compressed(),
                  lo * factor, hi * factor, horizontal)
    ax.set_xlim(view[0], view[1])
    ax.set_ylim(view[2], view[3])
    ax.set_aspect("equal")
    ax.set_xlabel("x (px)")
    ax.set_ylabel("y (px)")
    if scale is not None:
        _scale_bar(ax, scale, abs(view[1] - view[0]))
    if title is None:
        n, nv = values.size, int(np.count_nonzero(~np.ma.getmaskarray(shown)))
        title = (f"{_label(name, strain.measure, symbol).rsplit(' (', 1)[0]}, "
                 f"{'deformed' if moved else 'reference'} configuration: {nv} of {n} points "
                 f"({100.0 * nv / max(n, 1):.1f} %)")
        title = "\n".join(textwrap.wrap(title, 90))
    ax.set_title(title, fontsize=10)
    return fig, ax


def measure_comparison(strain, image=None, *, component="xx", field=None,
                       configuration="reference", limits=None, units="auto", share_limits=None,
                       alpha=0.7, scale=None, figsize=None, title=None, crop=False):
    """One strain component as Green-Lagrange, infinitesimal and Hencky strain, and the
    nonlinear share of Green-Lagrange strain, side by side.

    The three measures come from the same deformation gradients and share one colour scale, so
    differences in colour are differences of the measures. The fourth map is
    ``||Q|| / ||eps||`` (see :func:`dic.strain.nonlinear_share`): how much of Green-Lagrange
    strain the quadratic term makes up.

    Parameters
    ----------
    strain : dic.strain.StrainField
        In any measure; it is re-expressed (no refitting).
    image, field, configuration, alpha, scale, crop
        As for :func:`strain_map`.
    component : str, optional
        A component that exists in every measure: ``xx``, ``yy``, ``xy`` (tensor shear),
        ``zz``, ``major``, ``minor``, ``max_shear`` or ``equivalent``.
    limits : (float, float), optional
        Shared colour limits of the three measures (plain strain numbers); by default from the
        99.5th percentile of the absolute values of all three.
    units : {'auto', 'microstrain', '%'}, optional
    share_limits : (float, float), optional
        Colour limits of the nonlinear share (ratio); by default ``0 ..`` its 99.5th percentile.
    figsize : (float, float), optional
    title : str, optional
        Figure title.

    Returns
    -------
    matplotlib.figure.Figure
        Four map axes in the order Green-Lagrange, infinitesimal, Hencky, nonlinear share.

    References
    ----------
    .. [1] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000 (strain measures).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    _check_strain(strain)
    name = _quantity_name(component)
    if name not in _MEASURE_DEPENDENT:
        raise ValueError(f"component: the measure comparison needs a strain component that "
                         f"every measure has; use one of: {', '.join(_MEASURE_DEPENDENT)}")
    measures = ("green-lagrange", "infinitesimal", "hencky")
    fields = [strain.as_measure(m) for m in measures]
    signed = STRAIN_QUANTITIES[name][1]
    if limits is not None:
        lo, hi = _check_limits(limits)
    else:
        lo, hi = _limits_from_top(max(_robust_top(_quantity_values(s, name)) for s in fields),
                                  signed)
    _, _, unit_name = _unit(units, "strain", max(abs(lo), abs(hi)))
    grey = _background(image)
    if grey is not None and not crop:
        w, h = grey.shape[1], grey.shape[0]
    else:
        v = _grid_view(strain.x, strain.y, strain.step)
        w, h = abs(v[1] - v[0]), abs(v[2] - v[3])
    wide = w >= 1.6 * h
    if figsize is None:
        figsize = (11.0, min(11.0, 3 * 5.2 * h / w + 2.4)) if wide else (
            14.0, min(8.0, 3.2 * h / w + 2.2))
    fig = Figure(figsize=_check_size(figsize, "figsize"), layout="constrained")
    FigureCanvasAgg(fig)
    left, right = fig.subfigures(1, 2, width_ratios=(1, 1) if wide else (3, 1), wspace=0.02)
    axes = left.subplots(3, 1) if wide else left.subplots(1, 3)
    common = dict(field=field, configuration=configuration, alpha=alpha, scale=scale,
                  crop=crop)
    mappable = None
    for a, s, m in zip(axes, fields, measures):
        strain_map(s, grey, component=name, ax=a, limits=(lo, hi), units=unit_name,
                   colorbar=False, title=_MEASURE_TITLES[m], **common)
        (mappable,) = [c for c in a.get_children() if getattr(c, "get_gid", None)
                       and c.get_gid() == "strain"]
    factor, symbol, _ = _unit(unit_name, "strain", hi)
    data = np.concatenate([_quantity_values(s, name).ravel() for s in fields]) * factor
    data = data[np.isfinite(data)]
    desc = STRAIN_QUANTITIES[name][0]
    _colorbar(left, mappable, list(axes), f"{desc} ({symbol}), one scale for the three measures",
              data, lo * factor, hi * factor, True)
    if wide:
        share_ax, note_ax = right.subplots(2, 1, height_ratios=(1.0, 1.0))
    else:
        share_ax, note_ax = right.subplots(1, 1), None
    strain_map(strain, grey, component="nonlinear_share", ax=share_ax, limits=share_limits,
               title="Nonlinear share of Green-Lagrange strain", **common)
    if note_ax is not None:
        share = _quantity_values(strain, "nonlinear_share")
        share = share[np.isfinite(share)]
        note_ax.axis("off")
        note = ("The three maps show the same deformation gradients F = I + H in three "
                "measures: Green-Lagrange E = (F\u1d40F \u2212 I)/2, infinitesimal "
                "\u03b5 = (H + H\u1d40)/2 and Hencky ln U (F = RU). Where they differ, the "
                "strain is too large for the small-strain approximation. The nonlinear share "
                "is |H\u1d40H/2| / |\u03b5|, the part of Green-Lagrange strain that the "
                "infinitesimal measure leaves out.")
        if share.size:
            note += (f" Here its median is {100 * np.median(share):.2g} % and its "
                     f"99.5th percentile {100 * np.percentile(share, 99.5):.2g} %.")
        note_ax.text(0.0, 1.0, "\n".join(textwrap.wrap(note, 58)), va="top", ha="left",
                     fontsize=8.5, transform=note_ax.transAxes)
    left.suptitle(f"Strain {name} in three measures" + (
        " (xy is tensor shear)" if name == "xy" else ""), fontsize=11)
    if title:
        fig.suptitle(title, fontsize=12)
    return fig


# --------------------------------------------------------------------------------------------
# correlation quality
# --------------------------------------------------------------------------------------------
def quality_map(field, image=None, *, ax=None, alpha=0.8, limits=None, scale=None, title=None,
                figsize=None, crop=False):
    """Draw the ZNCC of every match over the reference image.

    ZNCC (zero-normalised cross-correlation) is 1 for identical subsets and falls with noise,
    blur, decorrelation or a poor shape function; points that were not measured stay
    transparent.

    Parameters
    ----------
    field : dic.field.DisplacementField
    image : array_like or path, optional
        The reference image, drawn in grey underneath.
    ax : matplotlib.axes.Axes, optional
    alpha : float, optional
    limits : (float, float), optional
        Colour limits; by default from the 0.5th percentile of the values to 1 (pass e.g.
        ``(min_zncc, 1)`` to compare maps of several frames on one scale).
    scale : float, optional
        Millimetres per pixel for a scale bar.
    title : str, optional
    figsize : (float, float), optional
    crop : bool, optional
        Show only the measured area (plus two grid steps) instead of the whole image.

    Returns
    -------
    fig : matplotlib.figure.Figure
    ax : matplotlib.axes.Axes
        The map is the image with gid ``"zncc"``.

    References
    ----------
    .. [1] B. Pan, H. Xie, Z. Wang, Equivalence of digital image correlation criteria for
       pattern matching, Applied Optics 49 (2010) 5501-5509.
    """
    from matplotlib.colors import Normalize

    if not isinstance(field, DisplacementField):
        raise ValueError(f"field must be a DisplacementField (from dic.correlate or "
                         f"Results.field); got {type(field).__name__}")
    alpha = _check_alpha(alpha)
    scale = _check_scale(scale)
    values = np.array(field.zncc, dtype=np.float64)
    values[~(field.valid & np.isfinite(values))] = np.nan
    if limits is not None:
        lo, hi = _check_limits(limits)
    else:
        data = values[np.isfinite(values)]
        low = float(np.percentile(data, 0.5)) if data.size else 0.9
        lo, hi = min(low, 1.0 - 1e-6), 1.0
    grey = _background(image)
    X, Y = _cell_corners(field.x, field.y, field.step)
    view = _view(X, Y, np.isfinite(values), grey, crop, field.step)
    horizontal = abs(view[1] - view[0]) >= 1.6 * abs(view[2] - view[3])
    fig, ax = _new_axes(ax, view, figsize, horizontal)
    if grey is not None:
        _draw_image(ax, grey)
    shown = _masked(values)
    im = ax.imshow(shown, cmap=_colormap("cividis", False), norm=Normalize(lo, hi),
                   alpha=alpha, interpolation="nearest",
                   extent=_grid_view(field.x, field.y, field.step))
    im.set_gid("zncc")
    _colorbar(fig, im, ax, "ZNCC of the match (1 = identical subsets)", shown.compressed(), lo,
              hi, horizontal)
    ax.set_xlim(view[0], view[1])
    ax.set_ylim(view[2], view[3])
    ax.set_aspect("equal")
    ax.set_xlabel("x (px)")
    ax.set_ylabel("y (px)")
    if scale is not None:
        _scale_bar(ax, scale, abs(view[1] - view[0]))
    if title is None:
        data = shown.compressed()
        title = (f"Correlation quality: median ZNCC {np.median(data):.5f} over {data.size} "
                 f"points" if data.size else "Correlation quality: no point measured")
    ax.set_title(title, fontsize=10)
    return fig, ax


# --------------------------------------------------------------------------------------------
# line plots
# --------------------------------------------------------------------------------------------
#: units of a gauge history that mean a plain strain number (shown in %)
_PLAIN_STRAIN_UNITS = ("", "1", "-", "strain", "mm/mm", "m/m")


def _line_figure(figsize, rows=1, default=(8.0, 4.5)):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=_check_size(default if figsize is None else figsize, "figsize"),
                 layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(rows, 1, sharex=True, squeeze=False)[:, 0]
    return fig, list(axes)


def _frame_axis(frames, times):
    """x values and label: the images' times where all are known, else frame numbers."""
    frames = np.asarray(frames)
    if times is not None:
        t = np.asarray(times, dtype=np.float64)
        if frames.size and frames.min() >= 0 and frames.max() < t.size and np.isfinite(
                t[frames]).all():
            return t[frames], "time (s)"
    return frames.astype(np.float64), "frame"


def _gauge_items(gauges):
    """Gauge histories as items with ``name``, ``frames``, ``values``, ``unit``.

    A table of histories (an object with ``frame``, ``columns`` and ``units``, such as
    :class:`dic.tensile.histories.History`) becomes one item per column.
    """
    from types import SimpleNamespace

    if gauges is None:
        return []
    table = hasattr(gauges, "columns") and hasattr(gauges, "frame")
    out = []
    for g in [gauges] if table else list(gauges):
        if hasattr(g, "columns") and hasattr(g, "frame"):
            units = getattr(g, "units", None) or {}
            out.extend(SimpleNamespace(name=str(name), frames=g.frame, values=values,
                                       unit=units.get(name, ""))
                       for name, values in g.columns.items())
        else:
            out.append(g)
    return out


def gauge_histories(gauges, *, times=None, title=None, figsize=None):
    """Plot the readings of gauges (lines, areas, point probes) frame by frame.

    Parameters
    ----------
    gauges : sequence
        Gauge histories, each with ``name`` (str), ``frames`` (frame numbers), ``values`` (one
        number per frame, NaN where the gauge could not be read) and optionally ``unit``
        (str); or tables of histories with ``frame``, ``columns`` and ``units`` (one line per
        column). Values with no unit or a unit of ``"strain"``, ``"mm/mm"``, ``"1"`` are plain
        strain numbers and are shown in %; other units are shown as given, one panel per unit.
    times : array_like, optional
        Time of every frame in s (e.g. ``Results.image_times``); the x axis is time where all
        the needed times are known, else the frame number.
    title : str, optional
    figsize : (float, float), optional

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ValueError
        No gauges, or a gauge whose frames and values differ in length.
    """
    items = _gauge_items(gauges)
    if not items:
        raise ValueError("gauges: none given; pass gauge histories with name, frames, values "
                         "and unit")
    groups = {}
    for g in items:
        try:
            name = str(g.name)
            frames = np.asarray(g.frames, dtype=np.int64).ravel()
            values = np.asarray(g.values, dtype=np.float64).ravel()
        except (AttributeError, TypeError, ValueError):
            raise ValueError(f"gauges: {g!r} is not a gauge history; it needs name, frames "
                             f"(whole numbers) and values (numbers)") from None
        if frames.shape != values.shape:
            raise ValueError(f"gauges: '{name}' has {frames.size} frames but {values.size} "
                             f"values; give one value per frame")
        unit = str(getattr(g, "unit", "") or "").strip()
        plain = unit.lower() in _PLAIN_STRAIN_UNITS
        key = "strain (%)" if plain else unit
        groups.setdefault(key, []).append((name, frames, values * (100.0 if plain else 1.0)))
    fig, axes = _line_figure(figsize, rows=len(groups),
                             default=(8.0, 1.0 + 3.2 * len(groups)))
    xlabel = "frame"
    for ax, (unit, lines) in zip(axes, groups.items()):
        for name, frames, values in lines:
            x, xlabel = _frame_axis(frames, times)
            ax.plot(x, values, marker="o" if values.size <= 60 else None, markersize=3,
                    linewidth=1.4, label=name)
        ax.set_ylabel(unit)
        ax.grid(True, linewidth=0.4, alpha=0.6)
        ax.legend(fontsize=8, loc="best")
    axes[-1].set_xlabel(xlabel)
    axes[0].set_title(title if title is not None else "Gauge readings", fontsize=11)
    return fig


def stress_strain_plot(strain, stress, *, lines=(), points=(), strain_units="%",
                       stress_unit="MPa", title=None, figsize=None):
    """Plot a stress-strain curve with fitted lines and marked points.

    Parameters
    ----------
    strain : array_like
        Strain as plain numbers (0.01 = 1 %).
    stress : array_like
        Stress, same length, in ``stress_unit``.
    lines : sequence of (label, strain, stress), optional
        Fitted lines or curves drawn dashed (e.g. the modulus line and its 0.2 % offset).
    points : sequence of (label, strain, stress), optional
        Points marked and labelled (e.g. proof strength, tensile strength).
    strain_units : {'%', 'microstrain'}, optional
    stress_unit : str, optional
    title : str, optional
    figsize : (float, float), optional

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ValueError
        Curves of different lengths, or unknown strain units.
    """
    factor, symbol, _ = _unit(strain_units, "strain", 1.0)
    e = np.asarray(strain, dtype=np.float64).ravel()
    s = np.asarray(stress, dtype=np.float64).ravel()
    if e.shape != s.shape:
        raise ValueError(f"strain and stress differ in length ({e.size} and {s.size}); give "
                         f"one stress per strain")
    fig, (ax,) = _line_figure(figsize)
    ax.plot(e * factor, s, color="black", linewidth=1.5, label="measured")
    for label, le, ls in lines:
        ax.plot(np.asarray(le, float) * factor, np.asarray(ls, float), linestyle="--",
                linewidth=1.1, label=str(label))
    for label, pe, ps in points:
        ax.plot([float(pe) * factor], [float(ps)], marker="o", markersize=6, linestyle="none",
                label=str(label))
    ax.set_xlabel(f"strain ({symbol})")
    ax.set_ylabel(f"stress ({stress_unit})")
    ax.grid(True, linewidth=0.4, alpha=0.6)
    ax.set_xlim(left=min(0.0, float(np.nanmin(e * factor)) if e.size else 0.0))
    ax.set_ylim(bottom=min(0.0, float(np.nanmin(s)) if s.size else 0.0))
    ax.legend(fontsize=8, loc="lower right")
    ax.set_title(title if title is not None else "Stress-strain curve", fontsize=11)
    return fig


def valid_counts(results):
    """Measured points per frame of a results file.

    Parameters
    ----------
    results : dic.sequence.store.Results

    Returns
    -------
    counts : ndarray of int, shape (n_frames_done,)
        Measured points in each completed frame.
    total : int
        Points inside the region of interest (grid points whose subset lies in it).
    median_zncc : ndarray of float
        Median ZNCC of the measured points per frame (NaN where none).
    """
    from dic.field import Reason

    n = len(results)
    counts = np.zeros(n, dtype=np.int64)
    median = np.full(n, np.nan)
    total = int(np.prod(results.shape))
    for k in range(n):
        f = results.field(k)
        counts[k] = f.n_valid
        if k == 0:
            total = int(np.count_nonzero(f.reason != Reason.OUTSIDE_ROI))
        z = f.zncc[f.valid]
        z = z[np.isfinite(z)]
        if z.size:
            median[k] = float(np.median(z))
    return counts, max(total, 1), median


def valid_points_plot(source, *, total=None, reference_updates=None, times=None, title=None,
                      figsize=None):
    """Plot the number of measured points frame by frame.

    Parameters
    ----------
    source : dic.sequence.store.Results or array_like of int
        A results file, or the counts themselves (one per frame, from frame 0).
    total : int, optional
        Points that could have been measured (inside the region of interest); taken from the
        results file when ``source`` is one.
    reference_updates : sequence of int, optional
        Frames where the reference image changed, marked with dotted lines; taken from the
        results file when ``source`` is one.
    times : array_like, optional
        Time of every frame in s; used for the x axis where all are known.
    title : str, optional
    figsize : (float, float), optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    if _is_results(source):
        counts, n_total, _ = valid_counts(source)
        total = n_total if total is None else total
        if reference_updates is None:
            reference_updates = source.reference_updates
    else:
        counts = np.asarray(source, dtype=np.float64).ravel()
    if counts.size == 0:
        raise ValueError("source: no frames; the results file holds no completed frames")
    if total is None:
        total = float(np.max(counts)) or 1.0
    total = float(total)
    if not total > 0:
        raise ValueError(f"total must be a positive number of points, got {total!r}")
    frames = np.arange(counts.size)
    x, xlabel = _frame_axis(frames, times)
    fig, (ax,) = _line_figure(figsize, default=(8.0, 3.6))
    ax.plot(x, counts, marker="o" if counts.size <= 60 else None, markersize=3,
            color="#1f4e79", linewidth=1.4, label="measured points")
    ax.axhline(total, color="0.4", linewidth=0.9, linestyle="-",
               label=f"inside the region of interest ({int(total)})")
    for i, k in enumerate(reference_updates if reference_updates is not None else ()):
        if 0 <= int(k) < counts.size:
            ax.axvline(x[int(k)], color="#b35806", linestyle=":", linewidth=1.2,
                       label="new reference image" if i == 0 else None)
    ax.set_ylim(0, total * 1.08)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("measured points")
    sec = ax.secondary_yaxis("right", functions=(lambda c: 100.0 * c / total,
                                                 lambda p: p * total / 100.0))
    sec.set_ylabel("% of the region of interest")
    ax.grid(True, linewidth=0.4, alpha=0.6)
    ax.legend(fontsize=8, loc="lower left")
    ax.set_title(title if title is not None else "Measured points per frame", fontsize=11)
    return fig


# --------------------------------------------------------------------------------------------
# saving
# --------------------------------------------------------------------------------------------
def save_figure(fig, path, dpi=150, *, size=None):
    """Save a figure as PNG, SVG or PDF.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure, e.g. from :func:`displacement_map` or :func:`strain_map`.
    path : str or os.PathLike
        Output file ending in ``.png``, ``.svg`` or ``.pdf``; its folder must exist.
    dpi : float, optional
        Resolution of raster output (PNG, and the raster parts of SVG and PDF), dots per inch.
    size : (float, float), optional
        Figure size (width, height) in inches to save at; by default the figure's own.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        ``fig`` is not a figure, or ``dpi`` or ``size`` is not positive.
    OSError
        Unsupported file type, missing folder, or the file cannot be written.
    """
    from matplotlib.figure import Figure

    if not isinstance(fig, Figure):
        raise ValueError(f"fig must be a matplotlib Figure; got {type(fig).__name__}")
    try:
        dpi = float(dpi)
    except (TypeError, ValueError):
        dpi = float("nan")
    if not (dpi > 0 and math.isfinite(dpi)):
        raise ValueError(f"dpi must be a positive number, got {dpi!r}; e.g. 150")
    if size is not None:
        size = _check_size(size, "size")
    p = Path(os.fspath(path))
    ext = p.suffix.lower()
    if ext not in FIGURE_FORMATS:
        raise OSError(f"path: cannot write '{p}': unsupported figure type {ext or '(none)'}; use "
                      f"{', '.join(FIGURE_FORMATS)}")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    if size is not None:
        fig.set_size_inches(*size)
    try:
        fig.savefig(p, dpi=dpi, format=ext[1:])
    except OSError as exc:
        raise OSError(f"path: cannot write '{p}' ({exc.strerror or exc}); check the folder "
                      f"permissions and free space") from None
    return p
