"""The report's tensile section: the results table with its basis, and the curve."""

from __future__ import annotations

from collections.abc import Mapping

from dic.figures.lines import stress_strain_figure
from dic.report._blocks import (as_mapping as _as_mapping, figure as _figure, fmt as _fmt,
                               standard_for as _standard_for, with_unit as _with_unit,
                               words as _words)
from dic.report._document import Paragraph, Table
from dic.tensile.results import TensileResults, basis_text, shown_value

__all__ = ["tensile_section"]


def _tensile_content(tensile):
    """``(rows, notes, cautions)``: rows ``(quantity, value, standard, how found)``."""
    rows_attr = getattr(tensile, "rows", None)
    if callable(rows_attr):
        rows_attr = rows_attr()
    if rows_attr is not None and not isinstance(tensile, Mapping):
        rows = []
        for r in rows_attr:
            cells = [_fmt(c) for c in (r if isinstance(r, (list, tuple)) else [r])]
            cells += [""] * (4 - len(cells))
            if not cells[2]:
                cells[2] = _standard_for(cells[0])
            rows.append(tuple(cells[:4]))
        return rows, [], []
    mapping = _as_mapping(tensile, "tensile")
    rows, notes, cautions = [], [], []

    def walk(m, prefix):
        for key, value in m.items():
            label, unit = _words(key)
            label = f"{prefix}{label}"
            lk = str(key).lower()
            if isinstance(value, Mapping) and "value" in value:
                name = str(value.get("name") or value.get("label") or label)
                sym = value.get("key")
                if sym and str(sym) not in name:
                    name += f" ({sym})"
                unit = str(value.get("unit") or unit)
                unit = "" if unit in ("-", "1") else unit
                std = str(value.get("standard") or _standard_for(f"{key} {name}"))
                how = str(value.get("method") or "")
                fr = value.get("fit_range")
                if isinstance(fr, (list, tuple)) and len(fr) == 2 and all(
                        isinstance(v, (int, float)) for v in fr):
                    how += (f" (data from {_fmt(fr[0])} to {_fmt(fr[1])} "
                            f"{value.get('range_unit', '')})").replace(" )", ")")
                if value.get("note"):
                    how += f"; {value['note']}"
                rows.append((name, _with_unit(value["value"], unit), std, how.strip("; ")))
            elif isinstance(value, Mapping):
                walk(value, "" if lk in ("values", "results") else f"{label} / ")
            elif lk in ("caution", "cautions"):
                cautions.extend(value if isinstance(value, (list, tuple)) else [value])
            elif lk in ("notes", "note"):
                notes.extend(value if isinstance(value, (list, tuple)) else [value])
            elif lk == "software":
                continue
            elif isinstance(value, str) and len(value) > 60:
                notes.append(f"{label}: {value}")
            else:
                rows.append((label, _with_unit(value, unit), _standard_for(key), ""))

    walk(mapping, "")
    return rows, [str(n) for n in notes], [str(c) for c in cautions]


def _tensile_figure(tensile):
    """The stress-strain figure of the tensile input; None when the input carries no curve.

    A :class:`~dic.tensile.results.TensileResults` is drawn with
    :func:`~dic.figures.lines.stress_strain_figure`; another object gives its ``figure``
    (a Figure, or a method that takes no arguments and returns one); a plain mapping of values
    has none.
    """
    from matplotlib.figure import Figure

    if isinstance(tensile, Figure):
        return tensile
    if isinstance(tensile, TensileResults):
        fig, _ = stress_strain_figure(tensile)
        return fig
    fig = getattr(tensile, "figure", None)
    if fig is None:
        return None
    if callable(fig) and not isinstance(fig, Figure):
        fig = fig()
    if isinstance(fig, tuple) and fig and isinstance(fig[0], Figure):
        fig = fig[0]
    if not isinstance(fig, Figure):
        raise ValueError(f"tensile: its figure is a {type(fig).__name__}, not a matplotlib "
                         f"Figure; give a Figure (or a figure() method returning one), or "
                         f"leave it out")
    return fig


def _tensile_results_blocks(res):
    """Table, warnings and notes of a :class:`~dic.tensile.results.TensileResults`, in the
    units the command line prints (E in GPa, strengths in MPa, strains in %)."""
    rows = []
    for v in res.values.values():
        text, unit = shown_value(v)
        how = v.method
        if v.fit_range is not None:
            lo, hi = v.fit_range
            how += (f" (data from {100 * lo:.3g} to {100 * hi:.3g} % strain)"
                    if v.range_unit == "mm/mm" else
                    f" (data from {lo:.4g} to {hi:.4g} {v.range_unit})")
        rows.append((f"{v.name} ({v.key})", f"{text} {unit}".strip(), basis_text(v) or "\u2013",
                     v.standard, how))
    blocks = [Table(rows=rows, header=("Quantity", "Value", "Basis and uncertainty",
                                       "Standard", "How found"))]
    blocks += [Paragraph(f"Warning: {w}", "caution") for w in res.warnings]
    blocks += [Paragraph(f"{v.key}: {v.note}", "note") for v in res.values.values() if v.note]
    blocks += [Paragraph(n, "note") for n in res.notes]
    blocks.append(Paragraph(res.caution, "caution"))
    return blocks


def tensile_section(tensile):
    from matplotlib.figure import Figure

    blocks = [Paragraph(
        "Tensile properties computed from the force log and the optical strain. Each "
        "quantity is defined as in the standard named beside it: ISO 6892-1 (proof strength, "
        "tensile strength, uniform elongation), ASTM E111 (modulus), ASTM E132 (Poisson's "
        "ratio), ISO 10275 (strain-hardening exponent n), ISO 10113 (plastic strain ratio r). "
        "Whether the test as a whole meets a standard depends on the specimen, the machine and "
        "the extensometer verification (see Cautions).")]
    notes, cautions = [], []
    if isinstance(tensile, TensileResults):
        blocks += _tensile_results_blocks(tensile)
    elif not isinstance(tensile, Figure):
        rows, notes, cautions = _tensile_content(tensile)
        if rows:
            if any(r[3] for r in rows):
                blocks.append(Table(rows=rows, header=("Quantity", "Value", "Standard",
                                                       "How found")))
            else:
                blocks.append(Table(rows=[r[:3] for r in rows],
                                    header=("Quantity", "Value", "Standard")))
    # the curve right after its table, so that the two stay together on a page
    fig = _tensile_figure(tensile)
    if fig is not None:
        blocks.append(_figure(fig, "Stress-strain curve with the fitted lines.",
                              "Stress-strain curve"))
    else:
        blocks.append(Paragraph("No stress-strain curve is drawn: the tensile input gives "
                                "values only, without the measured curve.", "note"))
    blocks += [Paragraph(n, "note") for n in notes]
    blocks += [Paragraph(c, "caution") for c in cautions]
    return blocks
