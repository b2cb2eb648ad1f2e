"""After tracking: gauges and tensile results, strain maps and the report, from one settings set.

``dic run`` with an output folder calls :func:`finish` once the results file is complete, so one
command takes a test from images to a report.
"""

from __future__ import annotations

import argparse
import logging
from pathlib import Path

from dic.files import atomic_write

__all__ = ["finish", "tensile_namespace"]

log = logging.getLogger(__name__)


def tensile_namespace(t: dict, results_path, out_dir) -> argparse.Namespace:
    """The ``dic tensile`` options from the ``[tensile]`` table of an analysis file."""
    missing = [k for k in ("force_log", "time_column", "force_column") if k not in t]
    if missing:
        raise ValueError(f"[tensile] needs {', '.join(missing)} (the force log and its time "
                         f"and force columns)")

    def pair(key):
        v = t.get(key)
        if v is None:
            return None
        if len(v) != 2:
            raise ValueError(f"tensile.{key} must be two numbers [low, high]")
        return (float(v[0]), float(v[1]))

    return argparse.Namespace(
        results=Path(results_path), force_log=Path(t["force_log"]),
        time_column=t["time_column"], force_column=t["force_column"],
        crosshead_column=t.get("crosshead_column"), force_unit=t.get("force_unit", "N"),
        time_unit=t.get("time_unit", "s"), crosshead_unit="mm", delimiter=None, decimal=None,
        skip_bad_rows=False,
        frame_times=Path(t["frame_times"]) if "frame_times" in t else None,
        frame_interval=t.get("frame_interval"), image_metadata=False, by_index=False,
        trigger_offset=float(t.get("trigger_offset", 0.0)),
        width=t.get("width_mm"), thickness=t.get("thickness_mm"), area=t.get("area_mm2"),
        gauge_length=t.get("gauge_length_mm"), transverse_length=t.get("transverse_length_mm"),
        axis="auto", scale=None, modulus_range=pair("modulus_range_mpa"),
        offsets=[float(v) for v in t.get("offsets_percent", [0.2])],
        n_range=pair("n_range_percent"), out=Path(out_dir))


def _self_check(results_path, strain: dict):
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
        from dic.cli.tensile import compute

        hist, tens, folder = compute(tensile_namespace(settings["tensile"], results_path,
                                                       out_dir))
        written["tensile"] = folder / "tensile.json"
        written["tensile_results"] = tens
    rep = settings.get("report", {})
    if rep.get("write", True):
        from dic.report import write_report

        strain = settings.get("strain") or {}
        frames = rep.get("frames")
        check = _self_check(results_path, strain)
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
