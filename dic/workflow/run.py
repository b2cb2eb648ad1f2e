"""After tracking: gauges and tensile results, strain maps and the report, from one settings set.

``dic run`` with an output folder calls :func:`finish` once the results file is complete, so one
command takes a test from images to a report.
"""

from __future__ import annotations

import logging
from pathlib import Path

from dic.files import atomic_write

__all__ = ["finish", "tensile_outputs", "settings_self_check"]

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
                      window=int(strain.get("window", 9)), roi=mask,
                      shape_function=st.get("shape_function", "affine"),
                      interpolation=st.get("interpolation", "quintic"),
                      measure=strain.get("measure", "green-lagrange"))


def _noise_floor(results_path, out_dir, settings, written):
    """The noise floor from the static images named in ``[noise]``, stored as
    ``noise_floor.json`` beside the results (None without such images)."""
    if not settings.get("noise"):
        return None
    import json

    from dic.images.io import list_images
    from dic.metrology import noise_floor
    from dic.sequence.tracker import load_results, resolve_images

    imgs = settings["noise"]["images"]
    paths = resolve_images(imgs) if not isinstance(imgs, str) else list_images(imgs)
    strain = settings.get("strain") or {}
    with load_results(results_path) as res:
        st, mask = res.settings, res.roi_mask
    floor = noise_floor(paths, subset=int(st["subset"]), step=int(st["step"]),
                        window=int(strain.get("window", 9)), roi=mask,
                        measure=strain.get("measure", "green-lagrange"),
                        shape_function=st.get("shape_function", "affine"),
                        interpolation=st.get("interpolation", "quintic"))
    target = Path(out_dir) / "noise_floor.json"
    text = json.dumps(floor.as_dict(), indent=2, default=str)
    with atomic_write(target, encoding="utf-8") as fh:
        fh.write(text)
    written["noise_floor"] = target
    return floor


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
        ``strain``, ``noise`` and ``report``.

    Returns
    -------
    dict
        Paths written, by name (``tensile``, ``report_html``, ``report_pdf``), the tensile
        results object under ``tensile_results`` and the self-check of the settings on the
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
    rep = settings.get("report", {})
    if rep.get("write", True):
        from dic.report import write_report

        strain = settings.get("strain") or {}
        frames = rep.get("frames")
        check = settings_self_check(results_path, strain)
        metrology = [m for m in (check, _noise_floor(results_path, out_dir, settings, written))
                     if m is not None]
        if check is not None:
            written["self_check"] = check
        html, pdf = write_report(results_path, out_dir, frames=frames,
                                 window=int(strain.get("window", 9)),
                                 measure=strain.get("measure", "green-lagrange"),
                                 gauges=hist, tensile=tens, metrology=metrology or None,
                                 title=rep.get("title"))
        written["report_html"], written["report_pdf"] = html, pdf
    return written
