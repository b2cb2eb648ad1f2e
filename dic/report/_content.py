"""What the report says: sections built from a results file and the optional inputs."""

from __future__ import annotations

import datetime as _dt
import math
import re
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from dic import __version__
from dic.figures.common import (MEASURE_TITLES, display_unit, find_image, frame_indices,
                                limits_from_top, quantity_values, robust_top)
from dic.figures.layers import gauge_shapes, grid_view
from dic.figures.lines import (PLAIN_STRAIN_UNITS, gauge_items, gauge_words, history_figure,
                               valid_counts, valid_points_plot)
from dic.figures.maps import measure_comparison, quality_map, strain_map
from dic.report._blocks import (as_mapping as _as_mapping, figure as _figure,
                               flatten as _flatten, fmt as _fmt, mm as _mm, with_unit as _with_unit,
                               words as _words)
from dic.report._cameras import camera_blocks
from dic.report._tensile import tensile_section
from dic.report._document import Document, Paragraph, Section, Table
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["CAUTIONS", "SECTION_TITLES", "build_document"]

#: section ids and titles, in report order (sections without content are left out)
SECTION_TITLES = {
    "overview": "Overview",
    "settings": "Analysis settings",
    "cameras": "Cameras and calibration",
    "uncertainty": "Measurement uncertainty",
    "maps": "Strain maps",
    "measures": "Strain measures compared",
    "gauges": "Gauge readings",
    "tensile": "Tensile results",
    "quality": "Data quality",
    "cautions": "Cautions",
}

#: the cautions every report carries (project design, section 9)
CAUTIONS = (
    "Optical strain from this software is not a certified extensometer reading. Where strain "
    "results are used for certification or acceptance, verify the optical set-up as an "
    "extensometer under the applicable standard (ISO 9513 or ASTM E83 class) and the "
    "laboratory's accredited practice.",
    "Without that verification the results are indicative only.",
    "Test-machine safety (guards, eye protection, the energy released at fracture, intense "
    "lighting) follows local rules and the machine maker's instructions, not this report.",
)

#: largest number of frames listed one by one in the data-quality table
_MAX_ROWS = 60
#: opacity of the strain maps over the specimen image: strain reads first, the image faintly
MAP_OPACITY = 0.9
#: strain components drawn at every chosen frame (xy is tensor shear)
MAP_COMPONENTS = ("xx", "yy", "xy")

# quantity keywords -> the standard that defines them
def _overview(res, info):
    n, nf = len(res), res.n_frames
    names = res.image_names
    times = np.asarray(res.image_times[:n], dtype=np.float64)
    blocks = [Paragraph(
        f"Displacement and strain fields measured by digital image correlation on {n} "
        f"image{'s' if n != 1 else ''} ({Path(names[0]).name} to {Path(names[n - 1]).name}) "
        f"of the results file {res.path.name}. Strain is {info['measure_title']} strain from "
        f"pointwise least-squares fits over {info['window']} \u00d7 {info['window']} grid "
        f"points; shear xy is tensor shear, half the engineering shear angle.")]
    if n < nf:
        blocks.append(Paragraph(
            f"The results file is incomplete: {n} of {nf} planned frames were analysed. This "
            f"report covers the completed frames only.", "caution"))
    rows = [("Results file", str(res.path)),
            ("Results file made", f"{res.created} by dic {res.package_version}"),
            ("Frames analysed", f"{n} of {nf}"),
            ("Images", f"{Path(names[0]).name} \u2026 {Path(names[n - 1]).name}")]
    if np.isfinite(times).any():
        rows.append(("Image times", f"{_fmt(np.nanmin(times))} s to {_fmt(np.nanmax(times))} s"))
    ny, nx = res.shape
    rows.append(("Grid of points", f"{ny} \u00d7 {nx} points, step {res.settings.get('step')} "
                                   f"px{_mm(res.settings.get('step'), res.scale)}"))
    rows.append(("Scale", f"{res.scale:g} mm/px" if res.scale is not None else
                 "not known: lengths are in pixels"))
    for comp in MAP_COMPONENTS:
        lo, hi = info["limits"][comp]
        factor, symbol, _ = display_unit(info["units"][comp], "strain", max(abs(lo), abs(hi)))
        rows.append((f"Strain {comp}, range shown",
                     f"\u00b1{hi * factor:.3g} {symbol} (99.5th percentile of |{comp}| over "
                     f"the frames analysed)"))
    blocks.append(Table(rows=rows))
    return blocks


def _settings(res, info, metro):
    s = res.settings
    scale = res.scale
    subset, step = s.get("subset"), s.get("step")
    vsg = info["vsg"]
    shape = s.get("shape_function", "not recorded")
    shape_text = {"affine": "affine (first order: translation and displacement gradients)",
                  "quadratic": "quadratic (second order)",
                  "auto": "chosen per point: first order, second order where the neighbours' "
                          "gradients show a curvature that would bias first order"
                  }.get(shape, str(shape))
    n_done = len(res)
    order = res.field(n_done - 1).shape_order if n_done else None
    if order is not None and shape == "auto":
        order = np.asarray(order)
        shape_text += (f" (last frame: first order at {int(np.count_nonzero(order == 1))}, "
                       f"second order at {int(np.count_nonzero(order == 2))} points)")
    interp = s.get("interpolation", "not recorded")
    updates = info["updates"]
    ref = s.get("reference", 0)
    rows = [
        ("Software", f"dic {__version__} (results written by dic {res.package_version})"),
        ("Image filtering", "none (images used as recorded)"),
        ("Subset size", f"{subset} px{_mm(subset, scale)}" if subset else "not recorded"),
        ("Step (grid spacing)", f"{step} px{_mm(step, scale)}" if step else "not recorded"),
        ("Subset shape function", shape_text),
        ("Matching criterion", f"{s.get('criterion', 'ZNSSD')} solved by "
                               f"{s.get('solver', 'IC-GN')}; points with ZNCC below "
                               f"{_fmt(s.get('min_zncc'))} rejected"),
        ("Uncertain points", _uncertain_text(s)),
        ("Interpolation", f"{interp} B-spline" if interp in ("cubic", "quintic") else
         str(interp)),
        ("Reference image", f"image {ref} ({Path(info['reference_name']).name})"
         if info["reference_name"] else f"image {ref}"),
        ("Reference updates", ("none" if updates.size == 0 else
                               f"at frame{'s' if updates.size > 1 else ''} "
                               f"{_fmt(updates.tolist())}; displacements carried back to the "
                               f"first reference (Lagrangian)")),
        ("Strain calculation", f"pointwise least squares, {info['fit']} fit of the "
                               f"displacements"),
        ("Strain window", f"{info['window']} \u00d7 {info['window']} points"),
        ("Virtual strain gauge (VSG)", (f"{vsg:g} px{_mm(vsg, scale)} = (window \u2212 1) "
                                        f"\u00d7 step + subset" if np.isfinite(vsg) else
                                        "not known (subset size not recorded)")),
        ("Strain measure", f"{info['measure_title']}; xy is tensor shear (half the "
                           f"engineering shear angle)"),
        ("Strain post-filtering", "none"),
        ("Region of interest", "whole image" if res.roi_mask is None else
         f"mask of {int(res.roi_mask.sum())} of {res.roi_mask.size} pixels"),
        ("Image scale", f"{scale:g} mm/px" if scale is not None else "not known"),
    ]
    found = _uncertainty_figures(metro)
    for label in ("Displacement noise floor", "Strain noise floor", "Spatial resolution"):
        rows.append((label, found.get(label, "not assessed for this analysis")))
    rows.append(("Camera, lens, lighting, pattern", "not recorded in the results file; add "
                                                    "them to the test record"))
    return [Paragraph("The settings below follow the reporting form of the iDICs Good "
                      "Practices Guide for Digital Image Correlation (2018, "
                      "doi:10.32720/idics/gpg.ed1)."),
            Table(rows=rows, header=("Parameter", "Value"))]


def _uncertain_text(settings):
    """The settings row on how sure a point must be to be measured (dic.correlate's
    max_sigma, its default where the results file does not record it)."""
    from dic.limits import DEFAULT_MAX_SIGMA, GROW_SIGMA
    from dic.strain.defaults import FULL_WEIGHT_SIGMA

    try:
        limit = float(settings.get("max_sigma", DEFAULT_MAX_SIGMA))
    except (TypeError, ValueError):
        limit = DEFAULT_MAX_SIGMA
    text = (f"points whose standard deviation exceeds {limit:g} px are left out (it is widened "
            f"where a match converged slowly)")
    if limit > GROW_SIGMA:
        text += (f"; matches less sure than {GROW_SIGMA:g} px are made from well-determined "
                 f"neighbours only and lead no other point; points above {GROW_SIGMA:g} px "
                 f"weigh (sigma / {FULL_WEIGHT_SIGMA:g} px)\u207b\u00b2 in the strain fit")
    return text


def _is_short(value):
    if isinstance(value, np.ndarray):
        return value.size <= 3
    if isinstance(value, (list, tuple)):
        return len(value) <= 3 and all(not isinstance(v, (list, tuple, dict, np.ndarray))
                                       for v in value)
    return True


def _number_text(key, value):
    """A metrology value as text, with a unit guessed from its key where it has none."""
    label, unit = _words(key.rsplit(" / ", 1)[-1])
    k = key.lower()
    nums = np.atleast_1d(np.asarray(value, dtype=object))
    numeric = all(isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(
        v, bool) for v in nums)
    if numeric and not unit:
        arr = np.asarray(nums, dtype=np.float64)
        if "strain" in k and "resolution" not in k and np.all(np.abs(arr[np.isfinite(arr)])
                                                              < 0.05):
            return ", ".join(_fmt(v * 1e6) for v in arr) + " \u00b5\u03b5"
        if any(w in k for w in ("displacement", "resolution", "bias", "vsg", "period")):
            return _fmt(value) + " px"
    return _with_unit(value, unit)


def _uncertainty_figures(items):
    """Noise floors and spatial resolutions: from the tagged rows of metrology results, or picked
    out of plain mappings by key words; each value followed by where it comes from."""
    kinds = {"displacement noise": "Displacement noise floor",
             "strain noise": "Strain noise floor", "spatial resolution": "Spatial resolution"}
    found = {}
    for item in items:
        source = item["title"].lower() or "metrology"
        for row in item["report_rows"]:
            if row.kind in kinds:
                q, label = row.quantity.lower(), kinds[row.kind].lower()
                rest = q.removeprefix(label).removeprefix(label.removesuffix(" floor"))
                rest = rest.strip(" ,")
                text = f"{rest}: {row.value}" if rest else row.value
                found.setdefault(kinds[row.kind], []).append(f"{text} ({source})")
        if item["report_rows"]:
            continue
        for key, value in item["rows"].items():
            k = key.lower()
            if not isinstance(value, (int, float, np.integer, np.floating, list, tuple,
                                      np.ndarray)) or isinstance(value, bool):
                continue
            if "resolution" in k and "flag" not in k:
                label = "Spatial resolution"
            elif "noise" in k and "strain" in k and "predicted" not in k:
                label = "Strain noise floor"
            elif "noise" in k and ("disp" in k or "_px" in k) and "predicted" not in k:
                label = "Displacement noise floor"
            else:
                continue
            found.setdefault(label, []).append(f"{_number_text(key, value)} ({_label(key)}, "
                                               f"{source})")
    return {label: "; ".join(texts) for label, texts in found.items()}


def _label(key):
    """A flattened mapping key (``strain_noise / xx``) in words (``Strain noise, xx``)."""
    parts = [_words(p)[0].replace("_", " ") for p in str(key).split(" / ")]
    return ", ".join(p if i == 0 else p[:1].lower() + p[1:] for i, p in enumerate(parts))


def _metrology_items(metrology, scale=None):
    """Each metrology input as ``{title, rows, report_rows, method, summary, figure}``."""
    from matplotlib.figure import Figure

    objs = list(metrology) if isinstance(metrology, (list, tuple)) else [metrology]
    items = []
    for obj in objs:
        summary = getattr(obj, "summary", None)
        summary = summary() if callable(summary) else summary
        try:
            mapping = _as_mapping(obj, "metrology")
        except ValueError:
            if not isinstance(summary, str):
                raise
            mapping = {}
        rows = {k: v for k, v in _flatten(mapping).items() if _is_short(v)}
        described = getattr(obj, "report_rows", None)
        described = list(described(scale=scale)) if callable(described) else []
        fig = getattr(obj, "figure", None)
        if callable(fig) and not isinstance(fig, Figure):
            fig = fig()  # a metrology result's figure() takes no arguments
        name = type(obj).__name__
        title = "" if isinstance(obj, Mapping) else str(getattr(obj, "TITLE", "") or " ".join(
            re.findall(r"[A-Z][a-z]*|[a-z]+", name)).capitalize())
        items.append({"title": title, "rows": rows, "report_rows": described,
                      "method": str(getattr(obj, "METHOD", "")),
                      "summary": summary if isinstance(summary, str) else "",
                      "figure": fig if isinstance(fig, Figure) else None})
    return items


def _plain_value(key, value):
    """A value of a plain metrology mapping as text, or None when there is nothing to show."""
    if isinstance(value, str):
        value = value.strip()
        return value if value.strip(" ,;<>=-") else None
    if isinstance(value, (list, tuple)) and all(isinstance(v, str) for v in value):
        kept = [v.strip() for v in value if v.strip(" ,;<>=-")]
        return ", ".join(kept) if kept else None
    return _number_text(key, value)


def _uncertainty(items):
    blocks = [Paragraph("The noise floor is the scatter of a quantity measured with no "
                        "deformation; the spatial resolution is the shortest wavelength of a "
                        "displacement or strain pattern that is still measured with at most "
                        "10 % loss of amplitude.")]
    for item in items:
        if item["report_rows"]:
            if item["method"]:
                blocks.append(Paragraph(item["method"], "note"))
            blocks.append(Table(rows=[(r.quantity, r.value, r.meaning)
                                      for r in item["report_rows"]],
                                header=("Quantity", "Value", "What it means"),
                                caption=item["title"]))
        else:
            if item["summary"]:
                for line in item["summary"].splitlines():
                    if line.strip():
                        blocks.append(Paragraph(line.strip(), "note"))
            rows = []
            for key, value in item["rows"].items():
                text = _plain_value(key, value)
                if text:
                    rows.append((_label(key), text))
            if rows:
                blocks.append(Table(rows=rows, header=("Quantity", "Value"),
                                    caption=item["title"]))
        if item["figure"] is not None:
            blocks.append(_figure(item["figure"], f"{item['title'] or 'Metrology'}: measured "
                                                  f"and expected behaviour.",
                                  item["title"] or "Metrology figure"))
    return blocks


def _frame_label(res, k):
    name = Path(res.image_names[k]).name
    t = float(res.image_times[k])
    return f"frame {k} ({name}" + (f", t = {t:.4g} s" if math.isfinite(t) else "") + ")"


def _maps(res, info, chosen, shapes, shared=True):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    scale_text = ("Each component keeps the same colour scale in every frame (the 99.5th "
                  "percentile of its absolute value over all frames analysed), so frames "
                  "compare; values beyond it take the end colours." if shared else
                  "Each map has its own colour scale (the 99.5th percentile of its absolute "
                  "value), so that small strains in early frames show; compare frames by "
                  "their colour bars, not their colours.")
    blocks = [Paragraph(
        f"Strain components xx, yy and xy (tensor shear) at {len(chosen)} frame"
        f"{'s' if len(chosen) > 1 else ''}, {info['measure_title']} strain, VSG "
        f"{_fmt(info['vsg'])} px. {scale_text} Red is extension, blue contraction; the "
        f"specimen image shows faintly underneath. Areas left blank were not measured.")]
    ref_image = find_image(res, None)
    for k in chosen:
        s = res.strain(k, window=info["window"], measure=info["measure"])
        img = find_image(res, k)
        config = "deformed" if img is not None else "reference"
        if img is None:
            img = ref_image
        field = res.field(k)
        view = grid_view(res.grid_x, res.grid_y, res.settings.get("step") or 1)
        w, h = abs(view[1] - view[0]), abs(view[2] - view[3])
        wide = w >= 1.6 * h
        if wide:
            map_h = 7.2 * h / w
            size = (8.0, 3 * (map_h + 1.7) + 0.45)
        else:
            size = (13.0, 3.6 * h / w + 1.6)
        fig = Figure(figsize=size, layout="constrained")
        FigureCanvasAgg(fig)
        axes = fig.subplots(3, 1) if wide else fig.subplots(1, 3)
        for ax, comp in zip(axes, MAP_COMPONENTS):
            strain_map(s, img, component=comp, field=field, configuration=config, ax=ax,
                       limits=info["limits"][comp] if shared else None,
                       units=info["units"][comp] if shared else "auto", alpha=MAP_OPACITY,
                       scale=res.scale, gauges=shapes, crop=True,
                       title=f"{comp}" + (" (tensor shear)" if comp == "xy" else ""))
        fig.suptitle(f"{info['measure_title']} strain, {_frame_label(res, k)}", fontsize=11)
        where = ("drawn on the frame's own image, following the specimen (deformed "
                 "configuration)" if config == "deformed" else
                 "drawn on the reference grid" + (" over the reference image"
                                                  if img is not None else ""))
        blocks.append(_figure(
            fig, f"Strain xx, yy and xy at {_frame_label(res, k)}, {where}; "
                 f"{s.n_valid} of {s.xx.size} points have a strain.",
            f"Maps of strain xx, yy and xy at frame {k}"))
    return blocks


def _measures(res, info, k):
    s = res.strain(k, window=info["window"], measure=info["measure"])
    tops = {c: robust_top(quantity_values(s, c)) for c in ("xx", "yy")}
    comp = max(tops, key=tops.get)
    img = find_image(res, k)
    config = "deformed" if img is not None else "reference"
    if img is None:
        img = find_image(res, None)
    fig = measure_comparison(s, img, component=comp, field=res.field(k),
                             configuration=config, scale=res.scale, crop=True)
    share = quantity_values(s, "nonlinear_share")
    share = share[np.isfinite(share)]
    text = (f"Strain {comp} (the larger normal component) at {_frame_label(res, k)} as "
            f"Green-Lagrange, infinitesimal and Hencky strain from the same deformation "
            f"gradients, on one colour scale, and the nonlinear share of Green-Lagrange strain.")
    if share.size:
        med = float(np.median(share))
        text += (f" The median nonlinear share is {100 * med:.2g} %: "
                 + ("the small-strain (infinitesimal) measure would misstate the strain by "
                    "more than 1 % of its value, so use a finite-strain measure."
                    if med > 0.01 else "small strains, where the measures agree closely."))
    return [_figure(fig, text, f"Strain {comp} in three measures and the nonlinear share")]


def _gauges(res, gauges, shapes=()):
    fig = history_figure(gauges, times=np.asarray(res.image_times[:len(res)]))
    rows = []
    for g in gauges:
        values = np.asarray(g.values, dtype=np.float64).ravel()
        frames = np.asarray(g.frames).ravel()
        unit = str(getattr(g, "unit", "") or "").strip()
        plain = unit.lower() in PLAIN_STRAIN_UNITS
        f, u = (100.0, "%") if plain else (1.0, unit)
        ok = np.isfinite(values)
        last = _with_unit(values[ok][-1] * f, u) if ok.any() else "no reading"
        big = _with_unit(np.max(np.abs(values[ok])) * f, u) if ok.any() else "\u2013"
        name = gauge_words(g.name)
        rows.append((name[:1].upper() + name[1:], f"{int(ok.sum())} of {frames.size}", last,
                     big))
    where = "; ".join(
        f"{s['label'].split(' ')[0].lower()} gauge from ({_fmt(s['ends_mm'][0][0])}, "
        f"{_fmt(s['ends_mm'][0][1])}) to ({_fmt(s['ends_mm'][1][0])}, "
        f"{_fmt(s['ends_mm'][1][1])}) mm" for s in shapes if s.get("ends_mm"))
    caption = ("Gauge readings frame by frame, one panel per gauge and quantity"
               + (f"; {where} (x to the right, y down, from the top-left pixel), drawn on "
                  f"the strain maps." if where else "."))
    return [_figure(fig, caption, "Gauge readings"),
            Table(rows=rows, header=("Gauge", "Frames read", "Last reading",
                                     "Largest magnitude"))]


def _how_sure(field, k):
    """One sentence on the standard deviations of the points measured at frame ``k`` (the
    larger of u and v per point), or "" where the file holds none."""
    from dic.strain.defaults import FULL_WEIGHT_SIGMA

    s = field.sigma_summary(FULL_WEIGHT_SIGMA)
    if s is None:
        return ""
    text = (f"How sure the points measured at frame {k} are: the standard deviation of their "
            f"displacement (the larger of u and v) has a median of {s['median']:.3g} px, "
            f"95 % of them are within {s['p95']:.3g} px and the largest is "
            f"{s['largest']:.3g} px")
    if s["above"]:
        text += (f"; {s['above']} ({100.0 * s['above'] / s['n']:.1f} %) are less sure than "
                 f"{FULL_WEIGHT_SIGMA:g} px and weigh less in the strain fit")
    return text + "."


def _quality(res, info, k_last):
    counts, total, median = valid_counts(res)
    n = len(res)
    times = np.asarray(res.image_times[:n], dtype=np.float64)
    fig = valid_points_plot(counts, total=total, reference_updates=info["updates"],
                            times=times)
    share = 100.0 * counts / total
    worst = int(np.argmin(counts))
    blocks = [Paragraph(
        f"Measured points per frame out of the {total} that can be measured (grid points "
        f"whose subset lies inside the region of interest and the reference image; "
        f"{int(np.prod(res.shape)) - total} others never can): "
        f"{int(counts.min())} to {int(counts.max())} ({share.min():.1f} % to "
        f"{share.max():.1f} %), fewest at frame {worst}. A point counts as measured when its "
        f"subset matched with a ZNCC of at least {_fmt(res.settings.get('min_zncc'))} (or a "
        f"lower one with a well-determined match), agrees with its neighbours and is sure "
        f"enough (see Uncertain points in the settings); every other point is left empty (NaN) "
        f"in the results, never filled in."),
        _figure(fig, "Measured points per frame; dotted lines mark a change of reference "
                     "image.", "Measured points per frame")]
    field = res.field(k_last)
    sure = _how_sure(field, k_last)
    if sure:
        blocks.append(Paragraph(sure))
    fig_q, _ = quality_map(field, find_image(res, None), scale=res.scale, crop=True)
    blocks.append(_figure(fig_q, f"ZNCC of every match at {_frame_label(res, k_last)}, on "
                                 f"the reference grid.", f"ZNCC map at frame {k_last}"))
    reasons = {k: v for k, v in field.reason_counts().items() if k not in ("measured",
                                                                           "outside_roi")}
    if reasons:
        from dic.field import Reason

        text = "; ".join(f"{Reason.describe(Reason[k.upper()])}: {v}"
                         for k, v in reasons.items())
        blocks.append(Paragraph(f"Points not measured at frame {k_last} (inside the region of "
                                f"interest), by reason: {text}. Points whose subset leaves the "
                                f"reference image are among them in every frame.", "note"))
    shown = range(n) if n <= _MAX_ROWS else sorted(
        set(np.argsort(counts)[:_MAX_ROWS // 2].tolist()) | set(info["updates"].tolist()))
    refs = np.asarray(res.reference_indices)
    rows = [(str(k), Path(res.image_names[k]).name, f"{int(counts[k])}",
             f"{share[k]:.1f}", f"{median[k]:.5f}" if np.isfinite(median[k]) else "\u2013",
             str(int(refs[k])))
            for k in shown]
    caption = ("" if n <= _MAX_ROWS else
               f"The {len(rows)} frames with the fewest measured points and the reference "
               f"changes, of {n}.")
    blocks.append(Table(rows=rows, header=("Frame", "Image", "Measured points", "%",
                                           "Median ZNCC", "Reference image"),
                        caption=caption))
    return blocks


# --------------------------------------------------------------------------------------------
# the whole document
# --------------------------------------------------------------------------------------------
def _default_frames(n):
    if n <= 1:
        return [0]
    if n <= 4:
        return list(range(1, n))
    return sorted({round(n / 3), round(2 * n / 3), n - 1})


def _gauge_geometry(gauges):
    shapes = []
    for g in gauges or ():
        try:
            shapes.extend({"points": pts, "label": label, "closed": closed}
                          for pts, label, closed in gauge_shapes([g]))
        except ValueError:
            continue  # a point probe or a gauge without a drawable geometry
    return shapes


def build_document(res, *, frames=None, window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE,
                   gauges=None, tensile=None, metrology=None, title=None, gauge_lines=None,
                   map_scale="shared"):
    """The report of an open results file as a :class:`Document`.

    Parameters are those of :func:`dic.report.write_report` (``res`` opened).
    """
    from dic.strain import canonical_measure, vsg_size

    n = len(res)
    if n == 0:
        raise ValueError(f"results: '{res.path}' holds no completed frames; track images into "
                         f"it first")
    measure = canonical_measure(measure)
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 3 \
            or window % 2 == 0:
        raise ValueError(f"window: {window!r} is not an odd whole number of at least 3; use "
                         f"e.g. window=9")
    if map_scale not in ("shared", "per-frame"):
        raise ValueError(f"limits: {map_scale!r} is not known; use 'shared' (one colour scale "
                         f"for all frames) or 'per-frame'")
    chosen = frame_indices(_default_frames(n) if frames is None else frames, n)
    gauges = gauge_items(gauges) if gauges is not None else None
    metro = _metrology_items(metrology, res.scale) if metrology is not None else []

    # one pass over the frames: colour limits of every map component
    tops = {c: 0.0 for c in MAP_COMPONENTS}
    fit = "plane"
    for k in range(n):
        s = res.strain(k, window=int(window), measure=measure)
        fit = s.fit
        for c in MAP_COMPONENTS:
            tops[c] = max(tops[c], robust_top(quantity_values(s, c)))
    limits = {c: limits_from_top(t, True) for c, t in tops.items()}
    units = {c: display_unit("auto", "strain", limits[c][1])[2] for c in MAP_COMPONENTS}
    s_settings = res.settings
    subset, step = s_settings.get("subset"), s_settings.get("step")
    vsg = vsg_size(int(window), float(step), float(subset)) if subset and step else float("nan")
    settings_frames = list(s_settings.get("frames", range(n)))
    ref = s_settings.get("reference", 0)
    ref_name = (res.image_names[settings_frames.index(ref)] if ref in settings_frames
                and settings_frames.index(ref) < len(res.image_names) else "")
    info = dict(window=int(window), measure=measure,
                measure_title=MEASURE_TITLES[measure], limits=limits, units=units,
                vsg=vsg, fit=fit, updates=np.asarray(res.reference_updates, dtype=np.int64),
                reference_name=ref_name)
    shapes = _gauge_geometry(gauges) + [dict(g) for g in (gauge_lines or ())]

    if title is None:
        stem = res.path.stem
        if stem == "results" and res.path.resolve().parent.name:
            stem = res.path.resolve().parent.name
        title = f"Strain measurement report: {stem}"
    now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0)
    doc = Document(title=str(title),
                   subtitle=f"Digital image correlation of {n} images, {res.path.name}",
                   generated=now.strftime("%Y-%m-%d %H:%M UTC"),
                   footer=f"Made by dic {__version__} on {now.strftime('%Y-%m-%d %H:%M UTC')} "
                          f"from {res.path.name}.")

    def add(key, blocks):
        doc.sections.append(Section(id=key, title=SECTION_TITLES[key], blocks=blocks))

    add("overview", _overview(res, info))
    add("settings", _settings(res, info, metro))
    cameras = camera_blocks(res)          # only with a calibration (dic.report._cameras)
    if cameras:
        add("cameras", cameras)
    if metro:
        add("uncertainty", _uncertainty(metro))
    add("maps", _maps(res, info, chosen, shapes, shared=map_scale == "shared"))
    add("measures", _measures(res, info, chosen[-1]))
    if gauges:
        add("gauges", _gauges(res, gauges, shapes))
    if tensile is not None:
        add("tensile", tensile_section(tensile))
    add("quality", _quality(res, info, chosen[-1]))
    add("cautions", [Paragraph(t, "caution") for t in CAUTIONS])
    return doc
