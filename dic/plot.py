"""Figures of displacement fields drawn over the reference image.

Figures are built with matplotlib's object-oriented API on the Agg canvas (no window system and no
``pyplot`` state), so they work on headless machines and inside other programs. Colours follow
the project's rules: a perceptually uniform map (``cividis``) for magnitudes and a diverging map
(``RdBu_r``) centred on zero for signed components. Points that were not measured are left fully
transparent, so the reference image shows through; nothing is drawn where there is no data.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from .field import DisplacementField

__all__ = ["displacement_map", "save_figure"]

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
        The reference image (2-D grey levels, or anything :func:`dic.io.read_image` accepts),
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
        from .io import read_image

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


def save_figure(fig, path, dpi=150):
    """Save a figure as PNG, SVG or PDF.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure, e.g. from :func:`displacement_map`.
    path : str or os.PathLike
        Output file ending in ``.png``, ``.svg`` or ``.pdf``; its folder must exist.
    dpi : float, optional
        Resolution of raster output, dots per inch.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        ``fig`` is not a figure, or ``dpi`` is not positive.
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
    if not dpi > 0:
        raise ValueError(f"dpi must be a positive number, got {dpi!r}; e.g. 150")
    p = Path(os.fspath(path))
    ext = p.suffix.lower()
    if ext not in FIGURE_FORMATS:
        raise OSError(f"path: cannot write '{p}': unsupported figure type {ext or '(none)'}; use "
                      f"{', '.join(FIGURE_FORMATS)}")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    try:
        fig.savefig(p, dpi=dpi, format=ext[1:])
    except OSError as exc:
        raise OSError(f"path: cannot write '{p}' ({exc.strerror or exc}); check the folder "
                      f"permissions and free space") from None
    return p
