"""The layers of a map: image underneath, grid cells (moved with the specimen), the image veil
over a deformed mesh, colour bar, scale bar, gauges, contour lines and the view limits.

The map functions of :mod:`dic.figures.maps` put these together; the report and the animation
use some of them directly.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np

from dic.figures.common import check_size

__all__ = ["cell_corners", "check_scale", "contour_levels", "draw_colorbar", "draw_contours",
           "draw_gauges", "draw_image", "extend_of", "gauge_shapes", "grid_view", "map_view",
           "masked", "new_axes", "scale_bar", "spacing", "veil"]


def spacing(coords, axis, fallback):
    """Grid spacing along ``axis`` of a coordinate array; ``fallback`` for a single line.

    Parameters
    ----------
    coords : ndarray, shape (ny, nx)
    axis : {0, 1}
    fallback : float or None
        Used when the grid has one line along ``axis`` (1 if it is not positive either).

    Returns
    -------
    float
    """
    if coords.shape[axis] > 1:
        d = float(np.take(coords, 1, axis=axis).flat[0] - np.take(coords, 0, axis=axis).flat[0])
        if d > 0:
            return d
    return float(fallback) if fallback and fallback > 0 else 1.0


def masked(values):
    """A masked array that hides the non-finite values.

    Parameters
    ----------
    values : ndarray

    Returns
    -------
    numpy.ma.MaskedArray
    """
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


def cell_corners(x, y, step, u=None, v=None):
    """Corners (ny+1, nx+1) of the cells around the grid points, moved by ``u, v`` if given.

    A corner moves by the mean displacement of the measured points around it, so the cells of
    neighbouring points share their corners and tile the deformed specimen without gaps.
    Corners that touch no measured point stay in place (they only bound unmeasured cells,
    which are not drawn).

    Parameters
    ----------
    x, y : ndarray, shape (ny, nx)
        Grid point positions in px.
    step : float
        Grid step in px (used for a grid of a single line).
    u, v : ndarray, shape (ny, nx), optional
        Displacements that move the corners.

    Returns
    -------
    X, Y : ndarray, shape (ny + 1, nx + 1)
    """
    dx = spacing(x, 1, step)
    dy = spacing(y, 0, step)
    xc = np.concatenate([x[0, :] - dx / 2, [x[0, -1] + dx / 2]])
    yc = np.concatenate([y[:, 0] - dy / 2, [y[-1, 0] + dy / 2]])
    X, Y = np.meshgrid(xc, yc)
    if u is not None:
        U, V = _corner_average(np.asarray(u, float)), _corner_average(np.asarray(v, float))
        X = X + np.where(np.isfinite(U), U, 0.0)
        Y = Y + np.where(np.isfinite(V), V, 0.0)
    return X, Y


def veil(ax, grey, X, Y, drawn, opacity, zorder):
    """The image again, at ``opacity``, over the drawn cells of a deformed mesh only.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    grey : ndarray
        The image.
    X, Y : ndarray, shape (ny + 1, nx + 1)
        Cell corners, from :func:`cell_corners`.
    drawn : ndarray of bool, shape (ny, nx)
        Cells that were drawn.
    opacity : float
    zorder : float

    Returns
    -------
    matplotlib.image.AxesImage or None
        The veil (gid ``"veil"``); None when no cell is drawn.
    """
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


def new_axes(ax, view, figsize, horizontal_bar):
    """The axes to draw into: ``ax``, or a new figure sized for a view (x0, x1, y0, y1).

    Parameters
    ----------
    ax : matplotlib.axes.Axes or None
    view : (float, float, float, float)
    figsize : (float, float) or None
        Size of a new figure; by default from the view's aspect ratio.
    horizontal_bar : bool
        Leave room for a colour bar below the map instead of beside it.

    Returns
    -------
    fig : matplotlib.figure.Figure
    ax : matplotlib.axes.Axes
    """
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
    fig = Figure(figsize=check_size(figsize, "figsize"), layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot()


def draw_image(ax, grey):
    """Draw the image in grey, pixel centres on whole coordinates.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    grey : ndarray, shape (h, w)
    """
    lo, hi = float(grey.min()), float(grey.max())
    ax.imshow(grey, cmap="gray", vmin=lo, vmax=hi if hi > lo else lo + 1.0,
              interpolation="nearest",
              extent=(-0.5, grey.shape[1] - 0.5, grey.shape[0] - 0.5, -0.5))


def extend_of(data, lo, hi):
    """Which ends of a colour bar need arrows: ``'neither'``, ``'min'``, ``'max'`` or
    ``'both'``, as ``data`` reach below ``lo`` or above ``hi``."""
    below, above = bool(np.any(data < lo)), bool(np.any(data > hi))
    return {(False, False): "neither", (True, False): "min", (False, True): "max",
            (True, True): "both"}[below, above]


def draw_colorbar(fig, mappable, axes, label, data, lo, hi, horizontal):
    """A colour bar with a wrapped label, opaque colours and arrows where data leave the scale.

    Parameters
    ----------
    fig : matplotlib.figure.Figure or matplotlib.figure.SubFigure
    mappable : matplotlib.cm.ScalarMappable
    axes : matplotlib.axes.Axes or list of Axes
        Axes the bar takes its room from.
    label : str
    data : ndarray
        Values shown (display units), to tell whether they reach past the limits.
    lo, hi : float
        Colour limits in display units.
    horizontal : bool

    Returns
    -------
    matplotlib.colorbar.Colorbar
    """
    cbar = fig.colorbar(mappable, ax=axes, extend=extend_of(data, lo, hi),
                        orientation="horizontal" if horizontal else "vertical",
                        shrink=0.9 if horizontal else 1.0, aspect=40 if horizontal else 20)
    cbar.set_label("\n".join(textwrap.wrap(label, 70 if horizontal else 45)))
    from matplotlib.ticker import ScalarFormatter

    from matplotlib.ticker import MaxNLocator

    plain = ScalarFormatter(useOffset=False)  # no "+9.999e-1" offsets on the key
    axis = cbar.ax.xaxis if horizontal else cbar.ax.yaxis
    axis.set_major_formatter(plain)
    if horizontal:
        # long labels (0.99980 ... 1.00000) side by side: few enough ticks that they never touch
        axis.set_major_locator(MaxNLocator(nbins=4, min_n_ticks=2))
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


def scale_bar(ax, scale, view_width_px):
    """A scale bar in mm, about a fifth of the view wide, in the lower left corner.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    scale : float
        Millimetres per pixel.
    view_width_px : float
        Width of the view in px.

    Returns
    -------
    mpl_toolkits.axes_grid1.anchored_artists.AnchoredSizeBar
        The bar (gid ``"scale_bar"``).
    """
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


def check_scale(scale):
    """Checked image scale in mm per px; None (no scale bar) for None or NaN.

    Parameters
    ----------
    scale : float or None

    Returns
    -------
    float or None

    Raises
    ------
    ValueError
        Not a positive finite number.
    """
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


def gauge_shapes(gauges):
    """Normalise gauges to ``[(points (n, 2), label, closed)]``.

    Accepted items: a mapping with ``points`` (and optional ``label``/``name``, ``closed``);
    an object with ``points`` (or ``p0``/``p1``, or ``start``/``end``) and optional ``label``
    or ``name``; a pair ``(points, label)``; or plain points. Items without a geometry are
    skipped (a gauge history may carry none).

    Parameters
    ----------
    gauges : sequence or None

    Returns
    -------
    list of (ndarray, str or None, bool)

    Raises
    ------
    ValueError
        A gauge whose points are not at least two finite (x, y) pairs.
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


def draw_gauges(ax, shapes, strain=None, field=None):
    """Gauges on top of a map; in the deformed configuration their points move with the field.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    shapes : list
        From :func:`gauge_shapes`.
    strain : dic.strain.StrainField, optional
        Its grid locates ``field`` (needed with ``field``).
    field : dic.field.DisplacementField, optional
        Moves the gauge points (deformed configuration).
    """
    from matplotlib import patheffects

    outline = [patheffects.withStroke(linewidth=3.2, foreground="black")]
    for pts, label, closed in shapes:
        p = pts
        if field is not None:
            from dic.strain import bilinear

            x, y = strain.x, strain.y
            sx = spacing(x, 1, strain.step)
            sy = spacing(y, 0, strain.step)
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
                note = ax.annotate(label, where, xytext=(4, 4), textcoords="offset points",
                                   fontsize=8, color="black", zorder=6,
                                   bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none",
                                             alpha=0.85))
                note.set_gid("gauge label")


def contour_levels(contours, lo, hi, factor):
    """Contour levels in display units, or a number of levels to pick from the data.

    Parameters
    ----------
    contours : bool, int, sequence of float or None
        True: 6 levels; an int: that many; a sequence: the levels as plain numbers.
    lo, hi : float
        Colour limits (not used to pick levels; kept for the callers' symmetry).
    factor : float
        Plain number to display units.

    Returns
    -------
    None, int or ndarray

    Raises
    ------
    ValueError
        Fewer than one level, or levels that are not finite numbers.
    """
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


def draw_contours(ax, X, Y, shown, levels):
    """Labelled black contour lines at the levels inside the range of the data.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    X, Y : ndarray
        Positions of the grid points.
    shown : numpy.ma.MaskedArray
        Values in display units.
    levels : int or ndarray
        From :func:`contour_levels`.

    Returns
    -------
    matplotlib.contour.QuadContourSet or None
        The lines (gid ``"contours"``); None when no level lies inside the data.
    """
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


def map_view(X, Y, drawn, grey, crop, step):
    """Axes limits (x0, x1, y_bottom, y_top): the whole image (or without one, every cell);
    with ``crop`` the drawn cells with a margin of two grid steps, inside the image.

    Parameters
    ----------
    X, Y : ndarray, shape (ny + 1, nx + 1)
        Cell corners.
    drawn : ndarray of bool, shape (ny, nx)
    grey : ndarray or None
        The image underneath.
    crop : bool
    step : float

    Returns
    -------
    (float, float, float, float)
    """
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


def grid_view(x, y, step):
    """Extent (x0, x1, y_bottom, y_top) of the cells around a grid of points.

    Parameters
    ----------
    x, y : ndarray, shape (ny, nx)
    step : float

    Returns
    -------
    (float, float, float, float)
    """
    dx = spacing(x, 1, step)
    dy = spacing(y, 0, step)
    return (float(x[0, 0]) - dx / 2, float(x[0, -1]) + dx / 2, float(y[-1, 0]) + dy / 2,
            float(y[0, 0]) - dy / 2)


