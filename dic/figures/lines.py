"""Line plots of a test: gauge readings frame by frame, measured points per frame, and
stress-strain curves (plain arrays, or a :class:`dic.tensile.results.TensileResults` with its
modulus and offset lines).
"""

from __future__ import annotations

import math

import numpy as np

from dic.figures.common import MEASURE_TITLES, check_size, display_unit, is_results

__all__ = ["PLAIN_STRAIN_UNITS", "curve_figure", "gauge_items", "gauge_words", "history_figure",
           "stress_strain_figure", "valid_counts", "valid_points_plot"]

#: units of a gauge history that mean a plain strain number (shown in %)
PLAIN_STRAIN_UNITS = ("", "1", "-", "strain", "mm/mm", "m/m")


def _line_figure(figsize, rows=1, default=(8.0, 4.5), cols=None):
    """A figure with ``rows`` axes sharing x; with ``cols``, a grid (list of rows) instead."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=check_size(default if figsize is None else figsize, "figsize"),
                 layout="constrained")
    FigureCanvasAgg(fig)
    grid = fig.subplots(rows, cols or 1, sharex=True, squeeze=False)
    if cols is None:
        return fig, list(grid[:, 0])
    return fig, [list(r) for r in grid]


def _frame_axis(frames, times):
    """x values and label: the images' times where all are known, else frame numbers."""
    frames = np.asarray(frames)
    if times is not None:
        t = np.asarray(times, dtype=np.float64)
        if frames.size and frames.min() >= 0 and frames.max() < t.size and np.isfinite(
                t[frames]).all():
            return t[frames], "time (s)"
    return frames.astype(np.float64), "frame"


def gauge_items(gauges):
    """Gauge histories as items with ``name``, ``frames``, ``values``, ``unit``.

    A table of histories (an object with ``frame``, ``columns`` and ``units``, such as
    :class:`dic.tensile.histories.History`) becomes one item per column.

    Parameters
    ----------
    gauges : sequence, table of histories or None

    Returns
    -------
    list
        One item per gauge (or per column of a table); empty for None.
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


def gauge_words(name):
    """A history column's code name in words: ``axial.green-lagrange`` -> ``axial gauge,
    Green-Lagrange strain``; ``transverse.length`` -> ``transverse gauge, length``.

    Parameters
    ----------
    name : str

    Returns
    -------
    str
    """
    text = str(name)
    gauge, dot, what = text.partition(".")
    if not dot:
        return text.replace("_", " ")
    what = what.replace("_", " ")
    key = what.lower().strip()
    if key in MEASURE_TITLES:
        what = f"{MEASURE_TITLES[key]} strain"
    elif key in ("xx", "yy", "xy", "major", "minor"):
        what = f"mean strain {key}"
    return f"{gauge.replace('_', ' ')} gauge, {what}"


def history_figure(gauges, *, times=None, title=None, figsize=None):
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
    items = gauge_items(gauges)
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
        plain = unit.lower() in PLAIN_STRAIN_UNITS
        # one panel per gauge and unit: a long and a short gauge on one axis would hide the
        # smaller one's change
        gauge = name.partition(".")[0] if "." in name else ""
        key = (gauge, "strain (%)" if plain else unit)
        groups.setdefault(key, []).append((gauge_words(name), frames,
                                           values * (100.0 if plain else 1.0)))
    names = list(dict.fromkeys(g for g, _ in groups))
    units = list(dict.fromkeys(u for _, u in groups))
    if len(names) > 1 and all(g for g in names) and len(groups) == len(names) * len(units):
        # gauges side by side, one row per quantity: each with its own axis
        fig, grid = _line_figure(figsize, rows=len(units), cols=len(names),
                                 default=(8.0, 1.0 + 2.6 * len(units)))
        axes = [grid[units.index(u)][names.index(g)] for g, u in groups]
    else:
        fig, axes = _line_figure(figsize, rows=len(groups),
                                 default=(8.0, 1.0 + 2.4 * len(groups)))
        grid = [[ax] for ax in axes]
    xlabel = "frame"
    for ax, ((gauge, unit), lines) in zip(axes, groups.items()):
        for name, frames, values in lines:
            x, xlabel = _frame_axis(frames, times)
            ax.plot(x, values, marker="o" if values.size <= 60 else None, markersize=3,
                    linewidth=1.4, label=name.removeprefix(f"{gauge} gauge, ") if gauge
                    else name)
        ax.set_ylabel(unit)
        if gauge:
            ax.set_title(f"{gauge.replace('_', ' ').capitalize()} gauge", fontsize=9,
                         loc="left")
        ax.grid(True, linewidth=0.4, alpha=0.6)
        ax.legend(fontsize=8, loc="best")
    for ax in grid[-1]:
        ax.set_xlabel(xlabel)
    fig.suptitle(title if title is not None else "Gauge readings", fontsize=11)
    return fig


def curve_figure(strain, stress, *, lines=(), points=(), strain_unit="%", stress_unit="MPa",
                 title=None, figsize=None):
    """Plot a stress-strain curve given as plain arrays, with fitted lines and marked points.

    For the results of a tensile test (modulus and offset lines drawn from the fits) use
    :func:`stress_strain_figure`.

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
    strain_unit : {'%', 'microstrain'}, optional
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
    factor, symbol, _ = display_unit(strain_unit, "strain", 1.0)
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
    results : dic.sequence.Results

    Returns
    -------
    counts : ndarray of int, shape (n_frames_done,)
        Measured points in each completed frame.
    total : int
        Points that can be measured: grid points whose subset lies inside the region of
        interest and inside the reference image (read from the reference frame, else frame 0).
    median_zncc : ndarray of float
        Median ZNCC of the measured points per frame (NaN where none).
    """
    from dic.field import Reason

    n = len(results)
    counts = np.zeros(n, dtype=np.int64)
    median = np.full(n, np.nan)
    total = int(np.prod(results.shape))
    st = getattr(results, "settings", {}) or {}
    frames, ref = list(st.get("frames", [])), st.get("reference", 0)
    k_ref = frames.index(ref) if ref in frames and frames.index(ref) < n else 0
    never = (int(Reason.OUTSIDE_ROI), int(Reason.OUTSIDE_IMAGE))
    for k in range(n):
        f = results.field(k)
        counts[k] = f.n_valid
        if k == k_ref:
            total = int(np.count_nonzero(~np.isin(f.reason, never)))
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
    source : dic.sequence.Results or array_like of int
        A results file, or the counts themselves (one per frame, from frame 0).
    total : int, optional
        Points that could have been measured (inside the region of interest and the
        reference image); taken from the results file when ``source`` is one.
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
    if is_results(source):
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
               label=f"points that can be measured ({int(total)})")
    for i, k in enumerate(reference_updates if reference_updates is not None else ()):
        if 0 <= int(k) < counts.size:
            ax.axvline(x[int(k)], color="#b35806", linestyle=":", linewidth=1.2,
                       label="new reference image" if i == 0 else None)
    ax.set_ylim(0, total * 1.08)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("measured points")
    sec = ax.secondary_yaxis("right", functions=(lambda c: 100.0 * c / total,
                                                 lambda p: p * total / 100.0))
    sec.set_ylabel("% of the points that can be measured")
    ax.grid(True, linewidth=0.4, alpha=0.6)
    ax.legend(fontsize=8, loc="lower left")
    ax.set_title(title if title is not None else "Measured points per frame", fontsize=11)
    return fig




# --------------------------------------------------------------------------------------------
# tensile results
# --------------------------------------------------------------------------------------------
def stress_strain_figure(res, *, ax=None, strain_unit="%"):
    """Stress-strain figure of a tensile test: engineering curve, true curve to the maximum
    force, modulus line and offset lines.

    Without ``ax`` the figure has two panels: the whole curve and the start of the curve up to
    the offset crossings.

    Parameters
    ----------
    res : dic.tensile.results.TensileResults
        From :func:`dic.tensile.results.tensile_results`.
    ax : matplotlib.axes.Axes, optional
        Axes to draw the whole curve into; by default a new figure on the Agg canvas.
    strain_unit : {"%", "mm/mm"}, optional
        How strain is shown on the x axis.

    Returns
    -------
    fig : matplotlib.figure.Figure
    ax : matplotlib.axes.Axes
        The axes of the whole curve.

    Raises
    ------
    ValueError
        Unknown ``strain_unit``.
    """
    if strain_unit not in ("%", "mm/mm"):
        raise ValueError(f"strain_unit: use '%' or 'mm/mm', got {strain_unit!r}")
    if ax is None:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        # the whole curve at full width above, its start below: large enough to read on a
        # page, legend included
        fig = Figure(figsize=(8.0, 6.0), layout="constrained")
        FigureCanvasAgg(fig)
        ax, zoom = fig.subplots(2, 1, height_ratios=[3, 2])
        _draw_tensile(res, ax, strain_unit, legend=True)
        _draw_tensile(res, zoom, strain_unit, legend=False)
        _zoom_to_yield(res, zoom, strain_unit)
        zoom.set_title("start of the curve", fontsize="medium")
        fig.suptitle("Stress-strain curve (optical gauge: indicative unless verified as an "
                     "extensometer, ISO 9513 / ASTM E83)", fontsize="medium")
        return fig, ax
    _draw_tensile(res, ax, strain_unit, legend=True)
    return ax.figure, ax


def _zoom_to_yield(res, ax, strain_unit):
    """Limit ``ax`` to the elastic range and the offset crossings."""
    k = 100.0 if strain_unit == "%" else 1.0
    ends = [v.extra.get("strain_at_crossing", math.nan) for key, v in res.values.items()
            if key.startswith("Rp")]
    ends = [x for x in ends if math.isfinite(x)]
    top = max(ends) if ends else float(np.nanmax(res.strain))
    right = 2.0 * top if ends else top
    ax.set_xlim(min(0.0, float(np.nanmin(res.strain))) * k, right * k)
    inside = res.strain <= right
    smax = float(np.nanmax(res.stress[inside])) if inside.any() else float(np.nanmax(res.stress))
    ax.set_ylim(min(0.0, float(np.nanmin(res.stress))), 1.15 * smax)


def _draw_tensile(res, ax, strain_unit, *, legend):
    from matplotlib import colormaps

    k = 100.0 if strain_unit == "%" else 1.0
    cmap = colormaps["cividis"]
    c_curve, c_true, c_mod, c_off = (cmap(v) for v in (0.0, 0.35, 0.6, 0.85))
    e, s = res.strain, res.stress
    ax.plot(e * k, s, color=c_curve, marker=".", lw=1.5, label="engineering stress")
    if np.isfinite(res.true_stress).any():
        ax.plot(res.true_strain * k, res.true_stress, color=c_true, ls="--", lw=1.2,
                label="true stress (to maximum force)")
    E = res["E"].value
    e0 = res["E"].extra.get("strain_at_zero_stress", 0.0) or 0.0
    smax = float(np.nanmax(s))
    top = 1.05 * smax
    # modulus line from zero stress to the curve's top, the fit range drawn solid
    ax.plot(np.array([e0, e0 + top / E]) * k, [0.0, top], color=c_mod, lw=1.0, ls=":",
            label=f"modulus line, E = {E / 1000:.1f} GPa")
    if res["E"].fit_range is not None:
        lo, hi = res["E"].fit_range
        ax.plot(np.array([e0 + lo / E, e0 + hi / E]) * k, [lo, hi], color=c_mod, lw=2.5,
                alpha=0.5, label=f"modulus fit range {lo:.0f}..{hi:.0f} MPa")
    for key, off in res.offsets.items():
        v = res[key]
        ax.plot(np.array([e0 + off, e0 + off + top / E]) * k, [0.0, top], color=c_off, lw=1.0,
                ls="-.", label=f"offset line {100 * off:g} %")
        if math.isfinite(v.value):
            ax.plot([v.extra["strain_at_crossing"] * k], [v.value], "o", color=c_off, ms=6,
                    label=f"{key} = {v.value:.0f} MPa")
    rm, agt = res["Rm"].value, res["Agt"].value
    if math.isfinite(rm) and math.isfinite(agt):
        ax.plot([agt * k], [rm], "s", color=c_true, ms=6,
                label=f"Rm = {rm:.0f} MPa at Agt = {agt * k:.3g} {strain_unit}")
    finite = np.isfinite(e)
    right = max(float(np.nanmax(e[finite])), float(np.nanmax(res.true_strain))
                if np.isfinite(res.true_strain).any() else 0.0)
    ax.set_xlim(min(0.0, float(np.nanmin(e))) * k, 1.05 * right * k)
    ax.set_ylim(min(0.0, float(np.nanmin(s))), 1.15 * max(smax, float(np.nanmax(res.true_stress))
                                                          if np.isfinite(res.true_stress).any()
                                                          else smax))
    ax.set_xlabel(f"Strain ({strain_unit})")
    ax.set_ylabel("Stress (MPa)")
    ax.grid(True, alpha=0.3)
    if legend:
        ax.legend(fontsize=10, loc="lower right")
