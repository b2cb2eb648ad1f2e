"""The report: one self-contained HTML file and a PDF version of the same content.

Sections (left out when there is nothing to say): overview; analysis settings in the iDICs
reporting form; measurement uncertainty (from a metrology self-check, if given); strain maps at
chosen frames; the strain measures compared; gauge readings (if given); tensile results with
the standards that define them (if given); data quality (measured points per frame, reference
changes, ZNCC map); cautions.

Public API
----------
write_report
    Results file in, ``report.html`` and ``report.pdf`` out.
"""

from __future__ import annotations


from dic.export import out_folder
from dic.report._content import CAUTIONS, SECTION_TITLES, build_document
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["CAUTIONS", "REPORT_NAMES", "SECTION_TITLES", "write_report"]

#: file names written into the output folder
REPORT_NAMES = ("report.html", "report.pdf")


def _replace(target, write):
    from dic.files import writing

    with writing(target, None, label="out_dir") as tmp:
        write(tmp)
    return target


def write_report(results_path, out_dir, *, frames=None, window=DEFAULT_WINDOW,
                 measure=DEFAULT_MEASURE, gauges=None, tensile=None, metrology=None,
                 title=None, gauge_lines=None, limits="shared"):
    """Write the report of a results file as one HTML file and one PDF file.

    The HTML file is self-contained: styles inline, figures embedded as PNG data, no address
    outside the file (a Content-Security-Policy in the page forbids any loading), so it reads
    the same offline and can be mailed as it is. The PDF holds the same text, tables and
    figures on A4 pages.

    Parameters
    ----------
    results_path : str or os.PathLike
        A results file (HDF5) from :func:`dic.track` or ``dic run``.
    out_dir : str or os.PathLike
        Folder for ``report.html`` and ``report.pdf`` (created if missing; existing reports
        there are replaced).
    frames : sequence of int, optional
        Frames whose strain maps are shown (negative numbers count from the end); by default
        about a third and two thirds of the way through and the last frame.
    window : int, optional
        Strain window in grid points (odd, at least 3).
    measure : str, optional
        Strain measure of the maps (see :func:`dic.strain.canonical_measure`).
    gauges : sequence, optional
        Gauge histories, each with ``name``, ``frames``, ``values`` and ``unit`` (see
        :func:`dic.figures.lines.history_figure`); those that also carry their geometry
        (``points``, or ``p0`` and ``p1``) are drawn on the maps.
    tensile : object, optional
        Tensile results: an object with ``to_dict()`` (or ``rows``, a sequence of
        ``(quantity, value[, standard])``), or a mapping; values may be plain numbers (units
        read from key endings such as ``_mpa``, ``_gpa``, ``_percent``) or mappings with
        ``value``, ``unit``, ``label`` and ``standard``. The stress-strain figure of a
        :class:`dic.tensile.results.TensileResults` is drawn; another object gives its
        ``figure`` (a Figure, or a method without arguments that returns one) when it has one.
    metrology : object, optional
        Self-check and noise results with ``to_dict()`` (or a mapping); shown in full, and
        noise floors and spatial resolution are picked out by their key names for the
        settings table.
    title : str, optional
        Report title; by default from the results file's name.
    gauge_lines : sequence of dict, optional
        Gauges to draw on the maps: ``{"points": (n, 2) px, "label": text}``, with
        ``"ends_mm"`` (end points in mm) for the caption (see
        :func:`dic.workflow.run.gauge_lines`).
    limits : {"shared", "per-frame"}, optional
        Colour scale of the strain maps: one per component for all frames (frames compare
        side by side), or one per map (small strains in early frames show).

    When neither ``gauges`` nor ``tensile`` is given, the gauge histories and tensile results
    stored beside the results file by ``dic tensile`` or ``dic run --config``
    (:func:`dic.tensile.workflow.sidecar_path`) are shown, when they exist.

    Returns
    -------
    html_path, pdf_path : pathlib.Path

    Raises
    ------
    ValueError
        An empty or foreign results file, a frame that does not exist, an unknown measure,
        a bad window, or optional inputs of the wrong shape.
    OSError
        A missing or unreadable results file, or an output folder that cannot be written.

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1 (reporting of analysis settings,
       VSG, noise floor, spatial resolution).
    """
    from dic.sequence import Results
    from dic.report._html import render_html
    from dic.report._pdf import render_pdf

    if gauges is None and tensile is None:
        from dic.tensile.workflow import read_sidecar

        stored = read_sidecar(results_path)
        if stored is not None:
            gauges, tensile = stored
    res = Results.open(results_path)
    try:
        if len(res) == 0:
            raise ValueError(f"results: '{res.path}' holds no completed frames; track images "
                             f"into it first")
        out = out_folder(out_dir, "the report")
        doc = build_document(res, frames=frames, window=window, measure=measure,
                             gauges=gauges, tensile=tensile, metrology=metrology, title=title,
                             gauge_lines=gauge_lines, map_scale=limits)
    finally:
        res.close()
    text = render_html(doc)
    html_path = _replace(out / REPORT_NAMES[0],
                         lambda p: p.write_text(text, encoding="utf-8", newline="\n"))
    pdf_path = _replace(out / REPORT_NAMES[1], lambda p: render_pdf(doc, p))
    return html_path, pdf_path
