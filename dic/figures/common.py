"""What every figure shares: strain quantities and their units, colour limits, frame numbers,
the images of a results file, argument checks, colour maps, and saving a figure.

Figures are built with matplotlib's object-oriented API on the Agg canvas (no window system and
no ``pyplot`` state); matplotlib loads only when a function draws. Colours follow the project's
rules: a perceptually uniform map (``cividis``) for magnitudes and a diverging map (``RdBu_r``)
centred on zero for signed components; no rainbow maps.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from dic.files import writing
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["FIGURE_FORMATS", "MEASURE_TITLES", "ROBUST_PERCENTILE", "STRAIN_QUANTITIES",
           "STRAIN_UNITS", "check_alpha", "check_configuration", "check_limits", "check_size",
           "check_strain", "colormap", "display_unit", "find_image", "frame_indices",
           "is_results", "limits_from_top", "open_results", "quantity_label", "quantity_name",
           "quantity_values", "robust_top", "save_figure", "strain_limits"]

#: figure file types :func:`save_figure` writes (open formats only)
FIGURE_FORMATS = (".png", ".svg", ".pdf")
#: default colour-scale top: this percentile of the absolute measured values
ROBUST_PERCENTILE = 99.5

#: default colour maps: magnitudes (False) and signed quantities (True)
_DEFAULT_CMAP = {False: "cividis", True: "RdBu_r"}
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
    "equivalent": ("equivalent strain (von Mises, zz from incompressibility)", False, "strain"),
    "rotation": ("rigid rotation", True, "angle"),
    "area_change": ("relative area change", True, "strain"),
    "nonlinear_share": ("nonlinear share of Green-Lagrange strain", False, "share"),
}
#: display units of strain: name -> (factor from a plain number, symbol)
STRAIN_UNITS = {"microstrain": (1e6, "\u00b5\u03b5"), "%": (100.0, "%")}
_UNIT_ALIASES = {"microstrain": "microstrain", "\u00b5\u03b5": "microstrain", "ue": "microstrain",
                 "%": "%", "percent": "%"}
#: strain measure -> its name in titles and labels
MEASURE_TITLES = {"green-lagrange": "Green-Lagrange", "infinitesimal": "Infinitesimal",
                  "euler-almansi": "Euler-Almansi", "hencky": "Hencky",
                  "engineering": "Engineering (Biot)"}
#: with units="auto", strain limits reaching 1 % are shown in %, smaller ones in microstrain
_PERCENT_FROM = 0.01
#: the colour scale never gets narrower than this (a field of exact zeros still gets a scale)
_SMALLEST_TOP = 1e-6


def quantity_name(component):
    """The checked name of a strain quantity.

    Parameters
    ----------
    component : str
        A key of :data:`STRAIN_QUANTITIES`; case, ``-`` and spaces are forgiven.

    Returns
    -------
    str

    Raises
    ------
    ValueError
        Unknown quantity.
    """
    key = (component.strip().lower().replace("-", "_").replace(" ", "_")
           if isinstance(component, str) else None)
    if key not in STRAIN_QUANTITIES:
        raise ValueError(f"component: unknown {component!r}; use one of: "
                         f"{', '.join(STRAIN_QUANTITIES)}")
    return key


def check_strain(strain, name="strain"):
    """Check that ``strain`` is a :class:`dic.strain.StrainField`.

    Parameters
    ----------
    strain : object
    name : str, optional
        Argument name used in the error message.

    Raises
    ------
    ValueError
        ``strain`` is something else.
    """
    from dic.strain import StrainField

    if not isinstance(strain, StrainField):
        raise ValueError(f"{name} must be a StrainField (from dic.strain_field or "
                         f"Results.strain); got {type(strain).__name__}")


def quantity_values(strain, name):
    """The quantity as float64, NaN wherever the strain is not valid.

    Parameters
    ----------
    strain : dic.strain.StrainField
    name : str
        A key of :data:`STRAIN_QUANTITIES` (as from :func:`quantity_name`).

    Returns
    -------
    ndarray of float64, shape of the strain grid
        Strain as plain numbers, rotation in degrees, the nonlinear share as a ratio.
    """
    if name == "nonlinear_share":
        values = strain.nonlinear_share()
    else:
        values = strain.component(name)
    values = np.array(values, dtype=np.float64)
    values[~(np.asarray(strain.valid, dtype=bool) & np.isfinite(values))] = np.nan
    return values


def display_unit(units, kind, top):
    """How a quantity is shown: ``(factor, symbol, units name)``.

    Parameters
    ----------
    units : {'auto', 'microstrain', '%'} or None
        Wanted display units of strain; ``'auto'`` (or None) picks % when ``top`` reaches 1 %,
        microstrain below. Angles are always in degrees and shares in %.
    kind : {'strain', 'angle', 'share'}
        The quantity's kind (third item of :data:`STRAIN_QUANTITIES`).
    top : float
        Largest absolute value the scale reaches, as a plain number.

    Returns
    -------
    factor : float
        Multiplies a plain value into the display units.
    symbol : str
    name : str
        Units name, accepted back as ``units``.

    Raises
    ------
    ValueError
        Unknown ``units``.
    """
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


def check_limits(limits, name="limits"):
    """Checked colour limits ``(low, high)``.

    Parameters
    ----------
    limits : (float, float)
    name : str, optional
        Argument name used in the error message.

    Returns
    -------
    (float, float)

    Raises
    ------
    ValueError
        Not two finite numbers with low < high.
    """
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


def robust_top(values, percentile=ROBUST_PERCENTILE):
    """The ``percentile``-th percentile of the finite absolute values (0 when there are none).

    Parameters
    ----------
    values : array_like
    percentile : float, optional

    Returns
    -------
    float
    """
    data = np.abs(np.asarray(values, dtype=np.float64))
    data = data[np.isfinite(data)]
    return float(np.percentile(data, percentile)) if data.size else 0.0


def limits_from_top(top, signed):
    """Colour limits from a scale top: ``(-top, top)`` if signed, else ``(0, top)``.

    The top is never below 1e-6, so a field of exact zeros still gets a scale.

    Parameters
    ----------
    top : float
    signed : bool

    Returns
    -------
    (float, float)
    """
    top = top if top > _SMALLEST_TOP else _SMALLEST_TOP
    return (-top, top) if signed else (0.0, top)


def frame_indices(frames, n, name="frames"):
    """Checked list of frame indices (negative ones count from the end) out of ``n``.

    Parameters
    ----------
    frames : int, sequence of int, slice or None
        None selects every frame.
    n : int
        Number of completed frames.
    name : str, optional
        Argument name used in the error messages.

    Returns
    -------
    list of int
        Indices from 0 to ``n - 1``.

    Raises
    ------
    ValueError
        No frames at all, none selected, or a frame that does not exist.
    """
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


def find_image(results, k):
    """The image of frame ``k`` of a results file (``None``: the reference image), or None.

    Looks for the stored image name as given, then relative to the results file's folder, then
    for the bare file name in that folder. Images given as arrays (stored as ``array N``) and
    files that cannot be found or read give None: the map is then drawn without a picture.

    Parameters
    ----------
    results : dic.sequence.Results
    k : int or None

    Returns
    -------
    ndarray or None
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


def is_results(obj):
    """Whether ``obj`` behaves as a results file (has ``field``, ``strain`` and a length).

    Parameters
    ----------
    obj : object

    Returns
    -------
    bool
    """
    return all(hasattr(obj, a) for a in ("field", "strain", "__len__"))


def open_results(results):
    """A results file, opened here from a path or taken as it is.

    Parameters
    ----------
    results : str, os.PathLike or dic.sequence.Results

    Returns
    -------
    res : dic.sequence.Results
    opened_here : bool
        True when ``res`` was opened from a path: the caller closes it.

    Raises
    ------
    ValueError
        Neither a path nor a results file.
    OSError
        The file cannot be opened.
    """
    if is_results(results):
        return results, False
    from dic.sequence import Results

    if not isinstance(results, (str, os.PathLike)):
        raise ValueError(f"results must be a results file path or dic.sequence.Results; got "
                         f"{type(results).__name__}")
    return Results.open(results), True


def strain_limits(source, component="xx", *, frames=None, window=DEFAULT_WINDOW,
                  measure=DEFAULT_MEASURE, percentile=ROBUST_PERCENTILE):
    """Colour limits for one quantity that hold for a whole sequence.

    The top of the scale is the largest, over the frames, of each frame's ``percentile``-th
    percentile of the absolute values: a few stray points in any frame cannot stretch the
    scale, the most strained frame still fits, and only one frame is in memory at a time.

    Parameters
    ----------
    source : dic.sequence.Results or iterable of dic.strain.StrainField
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
        as a ratio. Pass them to ``limits=`` of :func:`dic.figures.maps.strain_map` or
        :func:`dic.figures.animation.animate`.

    Raises
    ------
    ValueError
        Unknown component, bad percentile, no frames, or a frame that does not exist.
    """
    name = quantity_name(component)
    p = _check_percentile(percentile)
    signed = STRAIN_QUANTITIES[name][1]
    top = 0.0
    if is_results(source):
        for k in frame_indices(frames, len(source)):
            top = max(top, robust_top(quantity_values(
                source.strain(k, window=window, measure=measure), name), p))
    else:
        count = 0
        for s in source:
            check_strain(s, "source item")
            top = max(top, robust_top(quantity_values(s, name), p))
            count += 1
        if count == 0:
            raise ValueError("source: no strain fields given; pass a results file or a list of "
                             "StrainField")
    return limits_from_top(top, signed)


def check_alpha(alpha):
    """Checked opacity between 0 and 1.

    Parameters
    ----------
    alpha : float

    Returns
    -------
    float

    Raises
    ------
    ValueError
        Not a number in [0, 1].
    """
    try:
        alpha = float(alpha)
    except (TypeError, ValueError):
        alpha = float("nan")
    if not 0.0 <= alpha <= 1.0:
        raise ValueError(f"alpha must lie between 0 and 1, got {alpha!r}; e.g. 0.7")
    return alpha


def check_configuration(configuration):
    """Checked configuration name: ``'reference'`` or ``'deformed'``.

    Parameters
    ----------
    configuration : str

    Returns
    -------
    str

    Raises
    ------
    ValueError
        Another name.
    """
    key = configuration.strip().lower() if isinstance(configuration, str) else None
    if key not in ("reference", "deformed"):
        raise ValueError(f"configuration: unknown {configuration!r}; use 'reference' or "
                         f"'deformed'")
    return key


def check_size(size, name="size"):
    """Checked figure size ``(width, height)`` in inches.

    Parameters
    ----------
    size : (float, float)
    name : str, optional
        Argument name used in the error message.

    Returns
    -------
    (float, float)

    Raises
    ------
    ValueError
        Not two positive finite numbers.
    """
    try:
        w, h = (float(t) for t in size)
    except (TypeError, ValueError):
        w = h = float("nan")
    if not (w > 0 and h > 0 and math.isfinite(w) and math.isfinite(h)):
        raise ValueError(f"{name} must be (width, height) in inches, both positive, got "
                         f"{size!r}; e.g. {name}=(8, 4.5)")
    return w, h


def colormap(cmap, signed):
    """A colour map whose "bad" colour (unmeasured points) is fully transparent.

    Parameters
    ----------
    cmap : str, matplotlib.colors.Colormap or None
        None: ``RdBu_r`` for signed quantities, ``cividis`` for magnitudes.
    signed : bool

    Returns
    -------
    matplotlib.colors.Colormap

    Raises
    ------
    ValueError
        Unknown colour map name.
    """
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


def quantity_label(name, measure, symbol):
    """Colour-bar label of a quantity: description, measure (for strain) and units.

    Parameters
    ----------
    name : str
        A key of :data:`STRAIN_QUANTITIES`.
    measure : str
        Strain measure (a key of :data:`MEASURE_TITLES`).
    symbol : str
        Units symbol, e.g. from :func:`display_unit`.

    Returns
    -------
    str
    """
    desc, _, kind = STRAIN_QUANTITIES[name]
    if kind == "strain" and name != "area_change":
        return f"{MEASURE_TITLES.get(measure, measure)} {desc} ({symbol})"
    return f"{desc[0].upper()}{desc[1:]} ({symbol})"


def save_figure(fig, path, dpi=150, *, size=None):
    """Save a figure as PNG, SVG or PDF (atomically: never half a file).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure, e.g. from :func:`dic.figures.maps.strain_map`.
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
        size = check_size(size, "size")
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
    with writing(p, None) as tmp:  # never half a figure
        fig.savefig(tmp, dpi=dpi, format=ext[1:])
    return p
