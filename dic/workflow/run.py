"""After tracking: gauges and tensile results, strain maps and the report, from one settings set.

``dic run`` with an output folder calls :func:`finish` once the results file is complete, so one
command takes a test from images to a report.
"""

from __future__ import annotations

import logging
from pathlib import Path

from dic.files import write_json
from dic.strain.defaults import DEFAULT_WINDOW

__all__ = ["finish", "tensile_outputs", "settings_self_check", "gauge_lines", "axial_component"]

log = logging.getLogger(__name__)


def tensile_outputs(results_path, setup, out_dir=None):
    """Tensile results with their tables and the stress-strain figure.

    Parameters
    ----------
    results_path : path
        Complete results file.
    setup : dic.tensile.workflow.TensileSetup
    out_dir : path, optional
        Output folder (default: the results file's folder).

    Returns
    -------
    dic.tensile.workflow.TensileOutcome
        With ``files["stress_strain"]`` added.
    """
    from dic.figures.common import save_figure
    from dic.figures.lines import stress_strain_figure
    from dic.tensile.workflow import tensile_from_results

    outcome = tensile_from_results(results_path, setup, out_dir)
    fig, _ = stress_strain_figure(outcome.results)
    target = outcome.folder / "stress_strain.png"
    save_figure(fig, target)
    outcome.files["stress_strain"] = target
    return outcome


def axial_component(results) -> str:
    """``"xx"`` or ``"yy"``: the normal strain along the specimen axis, the direction of the
    larger mean normal displacement gradient in the last frame."""
    import numpy as np

    last = results.field(len(results) - 1)
    ok = last.valid
    if not ok.any():
        return "xx"
    exx = np.nanmean(last.grad[..., 0, 0][ok])
    eyy = np.nanmean(last.grad[..., 1, 1][ok])
    return "xx" if abs(exx) >= abs(eyy) else "yy"


def gauge_lines(results, tensile_table=None):
    """The axial and transverse gauge lines of a tensile analysis, ready to draw on a map.

    Parameters
    ----------
    results : dic.sequence.Results
        An open results file.
    tensile_table : dict, optional
        The analysis file's ``[tensile]`` table (gauge lengths, axis, scale).

    Returns
    -------
    list of dict
        ``{"points": (2, 2) array in px, "label": text, "name": "axial" or "transverse",
        "length_mm": float, "ends_mm": ((x0, y0), (x1, y1))}``; empty when the results file
        has no scale or the gauges cannot be placed (the tensile step then says why).
    """
    from dic.tensile import gauges as G
    from dic.tensile.workflow import TensileSetup

    try:
        s = TensileSetup.from_table(tensile_table) if tensile_table else None
        scale = (s.scale if s is not None and s.scale is not None else results.scale)
        if scale is None:
            return []
        axis = s.axis if s is not None else "auto"
        lines = [G.axial_line(results, s.gauge_length if s is not None else None, units="mm",
                              axis=axis, scale=scale),
                 G.transverse_line(results, s.transverse_length if s is not None else None,
                                   units="mm", axis=axis, scale=scale)]
    except (ValueError, OSError) as exc:
        log.info("gauges not drawn: %s", exc)
        return []
    out = []
    for line, word in zip(lines, ("Axial", "Transverse")):
        (x0, y0), (x1, y1) = line.start, line.end
        out.append({"points": line.points_px(scale), "name": line.name,
                    "length_mm": float(line.length), "ends_mm": ((x0, y0), (x1, y1)),
                    "label": f"{word} gauge {line.length:.3g} mm"})
    return out


def settings_self_check(results_path, strain: dict):
    """The self-check of the analysis settings on its own reference image (None if that image
    is not among the analysed files or is no longer readable)."""
    from dic.images.io import read_image
    from dic.metrology import self_check
    from dic.sequence.tracker import load_results

    with load_results(results_path) as res:
        st = res.settings
        frames = list(st.get("frames", []))
        ref = st.get("reference", 0)
        if ref not in frames:
            return None
        name = res.image_names[frames.index(ref)]
        mask = res.roi_mask
    try:
        image = read_image(name)
    except (OSError, ValueError):
        log.warning("self-check skipped: the reference image %s cannot be read", name)
        return None
    return self_check(image, subset=int(st["subset"]), step=int(st["step"]),
                      window=int(strain.get("window", DEFAULT_WINDOW)), roi=mask,
                      shape_function=st.get("shape_function", "affine"),
                      interpolation=st.get("interpolation", "quintic"),
                      measure=strain.get("measure", "green-lagrange"))


def _noise_floor(results_path, out_dir, settings, written):
    """The noise floor from the static images named in ``[noise]``, stored as
    ``noise_floor.json`` beside the results (None without such images)."""
    if not settings.get("noise"):
        return None
    from dic.images.io import list_images
    from dic.metrology import noise_floor
    from dic.sequence.tracker import load_results, resolve_images

    imgs = settings["noise"]["images"]
    paths = resolve_images(imgs) if not isinstance(imgs, str) else list_images(imgs)
    strain = settings.get("strain") or {}
    with load_results(results_path) as res:
        st, mask = res.settings, res.roi_mask
    floor = noise_floor(paths, subset=int(st["subset"]), step=int(st["step"]),
                        window=int(strain.get("window", DEFAULT_WINDOW)), roi=mask,
                        measure=strain.get("measure", "green-lagrange"),
                        shape_function=st.get("shape_function", "affine"),
                        interpolation=st.get("interpolation", "quintic"))
    # strict JSON: a value that could not be measured (NaN) is written as null
    written["noise_floor"] = write_json(Path(out_dir) / "noise_floor.json", floor.as_dict(),
                                        label="out_dir")
    return floor


def _animation(results_path, out_dir, anim: dict, strain: dict):
    """The strain animation asked for by ``[animation]`` (or ``--animate``)."""
    from dic.figures.animation import animate

    component = str(anim.get("component", "xx")).lower()
    fmt = str(anim.get("format", "gif")).lower()
    target = Path(out_dir) / f"strain_{component}.{fmt}"
    return animate(results_path, target, component=component,
                   window=int(strain.get("window", DEFAULT_WINDOW)),
                   measure=strain.get("measure", "green-lagrange"),
                   fps=float(anim.get("fps", 4.0)))


def finish(results_path, out_dir, settings: dict) -> dict:
    """Tensile results (if a force log is set) and the report, into ``out_dir``.

    Parameters
    ----------
    results_path : path
        Complete results file.
    out_dir : path
        Output folder.
    settings : dict
        The analysis settings (as from :func:`dic.workflow.config.load_analysis`); uses ``tensile``,
        ``strain``, ``noise``, ``animation`` and ``report`` (the report is written when the
        settings hold ``report`` or ``tensile``).

    Returns
    -------
    dict
        Paths written, by name (``tensile``, ``animation``, ``report_html``, ``report_pdf``),
        the tensile results object under ``tensile_results`` and the self-check of the settings on the
        reference image under ``self_check`` (a section of the report).
    """
    out_dir = Path(out_dir)
    written: dict = {}
    hist = tens = None
    if settings.get("tensile"):
        from dic.tensile.workflow import TensileSetup

        outcome = tensile_outputs(results_path, TensileSetup.from_table(settings["tensile"]),
                                  out_dir)
        hist, tens = outcome.history, outcome.results
        written["tensile"] = outcome.folder / "tensile.json"
        written["tensile_results"] = tens
    anim = settings.get("animation")
    if anim is not None and anim.get("write", True):
        written["animation"] = _animation(results_path, out_dir, anim,
                                          settings.get("strain") or {})
    rep = settings.get("report", {})
    if rep.get("write", True) and ("report" in settings or "tensile" in settings):
        from dic.report import write_report

        strain = settings.get("strain") or {}
        frames = rep.get("frames")
        check = settings_self_check(results_path, strain)
        metrology = [m for m in (check, _noise_floor(results_path, out_dir, settings, written))
                     if m is not None]
        if check is not None:
            written["self_check"] = check
        lines = []
        if settings.get("tensile"):
            from dic.sequence.tracker import load_results

            with load_results(results_path) as res:
                lines = gauge_lines(res, settings["tensile"])
        html, pdf = write_report(results_path, out_dir, frames=frames, gauge_lines=lines,
                                 limits=rep.get("limits", "shared"),
                                 window=int(strain.get("window", DEFAULT_WINDOW)),
                                 measure=strain.get("measure", "green-lagrange"),
                                 gauges=hist, tensile=tens, metrology=metrology or None,
                                 title=rep.get("title"))
        written["report_html"], written["report_pdf"] = html, pdf
    return written
