"""Maps over the specimen image: displacement, strain (any component or derived quantity, in
the reference or the deformed configuration), strain measures side by side, and the ZNCC of
every match.

Points that were not measured are left fully transparent, so the image shows through; nothing
is drawn where there is no data.

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
"""

from __future__ import annotations

import textwrap

import numpy as np

from dic.field import DisplacementField
from dic.figures.common import (MEASURE_TITLES, ROBUST_PERCENTILE, STRAIN_QUANTITIES,
                                check_alpha, check_configuration, check_limits, check_size,
                                check_strain, colormap, display_unit, limits_from_top,
                                quantity_label, quantity_name, quantity_values, robust_top)
from dic.figures.layers import (cell_corners, check_scale, contour_levels, draw_colorbar,
                                draw_contours, draw_gauges, draw_image, gauge_shapes, grid_view,
                                map_view, masked, new_axes, scale_bar, spacing, veil)

__all__ = ["displacement_map", "measure_comparison", "quality_map", "strain_map"]

#: what each component shows: (title, colour-bar label, signed?)
_COMPONENTS = {
    "magnitude": ("Displacement magnitude", "|u| = \u221a(u\u00b2 + v\u00b2) (px)", False),
    "u": ("Displacement u (along x)", "u (px)", True),
    "v": ("Displacement v (along y, downwards)", "v (px)", True),
}
#: strain components that exist in every measure (the measure comparison takes these)
_MEASURE_DEPENDENT = ("xx", "yy", "xy", "zz", "major", "minor", "max_shear", "equivalent")


def _component_values(field, component):
    if component == "magnitude":
        values = np.hypot(field.u, field.v)
    elif component == "u":
        values = np.array(field.u, dtype=np.float64)
    else:
        values = np.array(field.v, dtype=np.float64)
    bad = ~(field.valid & np.isfinite(values))
    return np.ma.masked_array(np.where(bad, 0.0, values), mask=bad)


def _limits(values, signed, limits):
    """Colour limits: given, or from the 99.5th percentile of the measured values."""
    if limits is not None:
        return check_limits(limits)
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
    cm = colormap(cmap, signed)
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

    dx = spacing(field.x, 1, field.step)
    dy = spacing(field.y, 0, field.step)
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


def _background(image):
    if image is None:
        return None
    from dic.images.io import read_image

    return read_image(image, name="image")


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
        From :func:`dic.strain_field` or :meth:`dic.sequence.Results.strain`.
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

    check_strain(strain)
    name = quantity_name(component)
    _, signed, kind = STRAIN_QUANTITIES[name]
    config = check_configuration(configuration)
    if field is not None or config == "deformed":
        if not isinstance(field, DisplacementField):
            raise ValueError("field: the deformed configuration needs the frame's "
                             "DisplacementField (Results.field(k)); pass field=...")
        if field.shape != strain.shape:
            raise ValueError(f"field: grid {field.shape} differs from the strain grid "
                             f"{strain.shape}; pass the same frame's displacement field")
    alpha = check_alpha(alpha)
    scale = check_scale(scale)
    shapes = gauge_shapes(gauges)
    grey = _background(image)
    values = quantity_values(strain, name)
    if limits is not None:
        lo, hi = check_limits(limits)
    else:
        lo, hi = limits_from_top(robust_top(values), signed)
    factor, symbol, _ = display_unit(units, kind, max(abs(lo), abs(hi)))
    levels = contour_levels(contours, lo, hi, factor)
    cm = colormap(cmap, signed)
    shown = masked(values * factor)
    norm = Normalize(lo * factor, hi * factor)

    moved = config == "deformed"
    if moved:
        X, Y = cell_corners(strain.x, strain.y, strain.step, field.u, field.v)
    else:
        X, Y = cell_corners(strain.x, strain.y, strain.step)
    view = map_view(X, Y, ~np.ma.getmaskarray(shown), grey, crop, strain.step)
    horizontal = abs(view[1] - view[0]) >= 1.6 * abs(view[2] - view[3])
    fig, ax = new_axes(ax, view, figsize, horizontal and colorbar)

    if grey is not None:
        draw_image(ax, grey)
    if moved:
        # The mesh is drawn opaque (cells share edges, and semi-transparent cells would show
        # their one-pixel overlaps as lines); the image is laid over it again at 1 - alpha,
        # clipped to the drawn cells, which blends exactly as a semi-transparent map would.
        mappable = ax.pcolormesh(X, Y, shown, cmap=cm, norm=norm, shading="flat",
                                 antialiased=False, edgecolors="none", rasterized=True)
        if grey is not None and alpha < 1.0:
            veil(ax, grey, X, Y, ~np.ma.getmaskarray(shown), 1.0 - alpha,
                 mappable.get_zorder() + 0.1)
        u = np.where(np.isfinite(field.u), field.u, 0.0)
        v = np.where(np.isfinite(field.v), field.v, 0.0)
        px, py = strain.x + u, strain.y + v
    else:
        mappable = ax.imshow(shown, cmap=cm, norm=norm, alpha=alpha, interpolation="nearest",
                             extent=grid_view(strain.x, strain.y, strain.step))
        px, py = strain.x, strain.y
    mappable.set_gid("strain")
    if levels is not None:
        draw_contours(ax, px, py, shown, levels)
    if shapes:
        draw_gauges(ax, shapes, strain, field if moved else None)
    if colorbar:
        draw_colorbar(fig, mappable, ax, quantity_label(name, strain.measure, symbol),
                      shown.compressed(), lo * factor, hi * factor, horizontal)
    ax.set_xlim(view[0], view[1])
    ax.set_ylim(view[2], view[3])
    ax.set_aspect("equal")
    ax.set_xlabel("x (px)")
    ax.set_ylabel("y (px)")
    if scale is not None:
        scale_bar(ax, scale, abs(view[1] - view[0]))
    if title is None:
        n, nv = values.size, int(np.count_nonzero(~np.ma.getmaskarray(shown)))
        title = (f"{quantity_label(name, strain.measure, symbol).rsplit(' (', 1)[0]}, "
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

    check_strain(strain)
    name = quantity_name(component)
    if name not in _MEASURE_DEPENDENT:
        raise ValueError(f"component: the measure comparison needs a strain component that "
                         f"every measure has; use one of: {', '.join(_MEASURE_DEPENDENT)}")
    measures = ("green-lagrange", "infinitesimal", "hencky")
    fields = [strain.as_measure(m) for m in measures]
    signed = STRAIN_QUANTITIES[name][1]
    if limits is not None:
        lo, hi = check_limits(limits)
    else:
        lo, hi = limits_from_top(max(robust_top(quantity_values(s, name)) for s in fields),
                                 signed)
    _, _, unit_name = display_unit(units, "strain", max(abs(lo), abs(hi)))
    grey = _background(image)
    if grey is not None and not crop:
        w, h = grey.shape[1], grey.shape[0]
    else:
        v = grid_view(strain.x, strain.y, strain.step)
        w, h = abs(v[1] - v[0]), abs(v[2] - v[3])
    wide = w >= 1.6 * h
    if figsize is None:
        figsize = (11.0, min(11.0, 3 * 5.2 * h / w + 2.4)) if wide else (
            14.0, min(8.0, 3.2 * h / w + 2.2))
    fig = Figure(figsize=check_size(figsize, "figsize"), layout="constrained")
    FigureCanvasAgg(fig)
    left, right = fig.subfigures(1, 2, width_ratios=(1, 1) if wide else (3, 1), wspace=0.02)
    axes = left.subplots(3, 1) if wide else left.subplots(1, 3)
    common = dict(field=field, configuration=configuration, alpha=alpha, scale=scale,
                  crop=crop)
    mappable = None
    for a, s, m in zip(axes, fields, measures):
        strain_map(s, grey, component=name, ax=a, limits=(lo, hi), units=unit_name,
                   colorbar=False, title=MEASURE_TITLES[m], **common)
        (mappable,) = [c for c in a.get_children() if getattr(c, "get_gid", None)
                       and c.get_gid() == "strain"]
    factor, symbol, _ = display_unit(unit_name, "strain", hi)
    data = np.concatenate([quantity_values(s, name).ravel() for s in fields]) * factor
    data = data[np.isfinite(data)]
    desc = STRAIN_QUANTITIES[name][0]
    draw_colorbar(left, mappable, list(axes),
                  f"{desc} ({symbol}), one scale for the three measures", data, lo * factor,
                  hi * factor, True)
    if wide:
        share_ax, note_ax = right.subplots(2, 1, height_ratios=(1.0, 1.0))
    else:
        share_ax, note_ax = right.subplots(1, 1), None
    strain_map(strain, grey, component="nonlinear_share", ax=share_ax, limits=share_limits,
               title="Nonlinear share of Green-Lagrange strain", **common)
    if note_ax is not None:
        share = quantity_values(strain, "nonlinear_share")
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
    alpha = check_alpha(alpha)
    scale = check_scale(scale)
    values = np.array(field.zncc, dtype=np.float64)
    values[~(field.valid & np.isfinite(values))] = np.nan
    if limits is not None:
        lo, hi = check_limits(limits)
    else:
        data = values[np.isfinite(values)]
        low = float(np.percentile(data, 0.5)) if data.size else 0.9
        lo, hi = min(low, 1.0 - 1e-6), 1.0
    grey = _background(image)
    X, Y = cell_corners(field.x, field.y, field.step)
    view = map_view(X, Y, np.isfinite(values), grey, crop, field.step)
    horizontal = abs(view[1] - view[0]) >= 1.6 * abs(view[2] - view[3])
    fig, ax = new_axes(ax, view, figsize, horizontal)
    if grey is not None:
        draw_image(ax, grey)
    shown = masked(values)
    im = ax.imshow(shown, cmap=colormap("cividis", False), norm=Normalize(lo, hi),
                   alpha=alpha, interpolation="nearest",
                   extent=grid_view(field.x, field.y, field.step))
    im.set_gid("zncc")
    draw_colorbar(fig, im, ax, "ZNCC of the match (1 = identical subsets)", shown.compressed(),
                  lo, hi, horizontal)
    ax.set_xlim(view[0], view[1])
    ax.set_ylim(view[2], view[3])
    ax.set_aspect("equal")
    ax.set_xlabel("x (px)")
    ax.set_ylabel("y (px)")
    if scale is not None:
        scale_bar(ax, scale, abs(view[1] - view[0]))
    if title is None:
        data = shown.compressed()
        title = (f"Correlation quality: median ZNCC {np.median(data):.5f} over {data.size} "
                 f"points" if data.size else "Correlation quality: no point measured")
    ax.set_title(title, fontsize=10)
    return fig, ax


