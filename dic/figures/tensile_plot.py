"""The stress-strain figure of :class:`dic.tensile.results.TensileResults` (Agg canvas, no pyplot)."""

from __future__ import annotations

import math

import numpy as np


def stress_strain_figure(res, *, ax=None, strain_unit="%"):
    """Engineering curve, true curve to the maximum force, modulus line and offset lines.

    Parameters
    ----------
    res : TensileResults
    ax : matplotlib Axes, optional
    strain_unit : {"%", "mm/mm"}

    Returns
    -------
    fig, ax
    """
    if strain_unit not in ("%", "mm/mm"):
        raise ValueError(f"strain_unit: use '%' or 'mm/mm', got {strain_unit!r}")
    if ax is None:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        fig = Figure(figsize=(11.0, 5.0), layout="constrained")
        FigureCanvasAgg(fig)
        ax, zoom = fig.subplots(1, 2, width_ratios=[3, 2])
        _draw(res, ax, strain_unit, legend=True)
        _draw(res, zoom, strain_unit, legend=False)
        _zoom_to_yield(res, zoom, strain_unit)
        zoom.set_title("start of the curve", fontsize="medium")
        fig.suptitle("Stress-strain curve (optical gauge: indicative unless verified as an "
                     "extensometer, ISO 9513 / ASTM E83)", fontsize="medium")
        return fig, ax
    _draw(res, ax, strain_unit, legend=True)
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


def _draw(res, ax, strain_unit, *, legend):
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
        ax.legend(fontsize="small", loc="lower right")
