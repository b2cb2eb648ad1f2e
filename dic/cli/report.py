"""The ``report`` and ``export`` commands of the ``dic`` command line.

``dic report RESULTS [--out DIR] [--frames N,N,...] [--strain-window N] [--measure NAME]
[--limits shared|per-frame] [--title T]``
    Write ``report.html`` (one self-contained file) and ``report.pdf`` for a results file.
``dic export RESULTS [--format csv|npz|vtk] [--out DIR] [--components xx,yy,xy] [--frames ...]
[--strain-window N] [--measure NAME]``
    Write the displacements and strain of every frame as CSV tables, one NumPy archive or a VTK
    time series (ParaView).

:func:`register` adds both to an ``argparse`` sub-parser collection; the run functions return
0 and raise ``ValueError`` (bad input) or ``OSError`` (files) with one-line messages that name
the option and the fix, for the main program to turn into exit codes.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from dic.strain.defaults import DEFAULT_WINDOW

__all__ = ["register", "run_export", "run_report"]

#: name of the results file inside an output folder of ``dic run``
RESULTS_NAME = "results.h5"
_EXPORT_FOLDER = "export"
# argument names in library messages -> the options a command-line user types
_OPTION_NAMES = (("out_dir:", "--out:"), ("frames:", "--frames:"), ("window:", "--strain-window:"),
                 ("components:", "--components:"), ("format:", "--format:"),
                 ("results:", "RESULTS:"), ("path:", "--out:"), ("k:", "--frames:"))


def register(subparsers):
    """Add the ``report`` and ``export`` commands to an argparse sub-parser collection.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers(...)``.

    Returns
    -------
    (argparse.ArgumentParser, argparse.ArgumentParser)
        The ``report`` and ``export`` parsers; each sets ``func`` to its run function.
    """
    rep = subparsers.add_parser(
        "report", help="write an HTML and a PDF report of a results file",
        description="Write report.html (one self-contained file: figures embedded, nothing "
                    "loaded from anywhere) and report.pdf for a results file: the analysis "
                    "settings in the iDICs reporting form, strain maps at chosen frames, the "
                    "strain measures compared, the data quality (measured points per frame, "
                    "reference changes, ZNCC), and the cautions.",
        epilog="Shear xy is tensor shear (half the engineering shear angle). Exit codes: 0 "
               "done, 2 bad input.")
    rep.add_argument("results", metavar="RESULTS",
                     help=f"results file, or an output folder of 'dic run' holding "
                          f"{RESULTS_NAME}")
    rep.add_argument("--out", metavar="DIR",
                     help="folder for report.html and report.pdf, created if missing "
                          "(default: the results file's folder)")
    _common(rep, frames_help="frames whose strain maps are shown, e.g. 8,16,-1 (negative "
                             "numbers count from the end; default: a third and two thirds of "
                             "the way, and the last)")
    rep.add_argument("--title", metavar="TEXT", help="report title (default: from the results "
                                                     "file's name)")
    rep.add_argument("--limits", choices=("shared", "per-frame"), default="shared",
                     help="colour scale of the strain maps: one for all frames, so that they "
                          "compare (shared, the default), or one per map, so that small "
                          "strains in early frames show (per-frame)")
    rep.set_defaults(func=run_report)

    exp = subparsers.add_parser(
        "export", help="write displacements and strain as CSV, NumPy or VTK files",
        description="Write the displacement and strain of every frame: one CSV table per "
                    "frame (x, y in px and mm, u, v, strain components, ZNCC, reason code), "
                    "one NumPy archive with every frame stacked (results.npz), or a VTK time "
                    "series that ParaView opens (results.pvd with one structured grid per "
                    "frame).",
        epilog="Unmeasured points are NaN (nan in CSV). Shear xy is tensor shear (half the "
               "engineering shear angle). Exit codes: 0 done, 2 bad input.")
    exp.add_argument("results", metavar="RESULTS",
                     help=f"results file, or an output folder of 'dic run' holding "
                          f"{RESULTS_NAME}")
    exp.add_argument("--format", default="csv", metavar="csv|npz|vtk",
                     help="file format (default: csv)")
    exp.add_argument("--out", metavar="DIR",
                     help=f"folder for the files, created if missing (default: "
                          f"'{_EXPORT_FOLDER}' beside the results file)")
    exp.add_argument("--components", default="xx,yy,xy", metavar="C,C,...",
                     help="strain components: xx, yy, xy, zz, major, minor, max_shear, "
                          "equivalent, rotation, area_change, nonlinear_share (default: "
                          "xx,yy,xy)")
    _common(exp, frames_help="frames to export, e.g. 0,5,10 or 0:24:2 (Python slices, STOP "
                             "not included; default: all)")
    exp.set_defaults(func=run_export)
    return rep, exp


def _common(p, frames_help):
    p.add_argument("--frames", metavar="N,N,...", help=frames_help)
    p.add_argument("--strain-window", dest="window", type=int, default=None, metavar="N",
                   help="strain window in grid points, odd, at least 3 (default: the one "
                        "stored by 'dic run --strain-window', else 9); the same option as in "
                        "'dic run' and 'dic noise'")
    # the former name, still accepted
    p.add_argument("--window", dest="window", type=int, default=argparse.SUPPRESS,
                   help=argparse.SUPPRESS)
    p.add_argument("--measure", default=None, metavar="NAME",
                   help="strain measure: green-lagrange, infinitesimal, euler-almansi, hencky "
                        "or engineering (default: the one stored by 'dic run', else "
                        "green-lagrange)")


def _results_file(text):
    p = Path(text)
    if p.is_dir():
        q = p / RESULTS_NAME
        if not q.is_file():
            raise FileNotFoundError(f"RESULTS: folder '{p}' holds no {RESULTS_NAME}; give a "
                                    f"results file or the output folder of 'dic run'")
        return q
    if not p.is_file():
        raise FileNotFoundError(f"RESULTS: no such file or folder '{p}'; check the path")
    return p


def _frames(text):
    """``"8,16,-1"`` or ``"0:24:2"`` (items may mix) -> list of ints and slices, or None."""
    if text is None:
        return None
    out = []
    for item in str(text).split(","):
        item = item.strip()
        try:
            if ":" in item:
                parts = item.split(":")
                if len(parts) > 3:
                    raise ValueError
                out.append(slice(*[int(q) if q.strip() else None for q in parts]))
            else:
                out.append(int(item))
        except ValueError:
            raise ValueError(f"--frames: {item!r} is not a frame number or START:STOP[:STRIDE]; "
                             f"use e.g. --frames 8,16,-1 or --frames 0:24:2") from None
    return out


def _expand(frames, n):
    """Frame numbers from :func:`_frames` items for a results file of ``n`` frames."""
    if frames is None:
        return None
    out = []
    for f in frames:
        if isinstance(f, slice):
            if f.step is not None and f.step < 1:
                raise ValueError("--frames: STRIDE must be at least 1; use e.g. 0:24:2")
            chosen = list(range(n))[f]
            if not chosen:
                raise ValueError(f"--frames: {f.start}:{f.stop} selects none of the frames 0 "
                                 f"to {n - 1}")
            out.extend(chosen)
        else:
            out.append(f)
    return out


def _as_option(exc, results=None):
    """The same error with library argument names replaced by the command-line options."""
    msg = str(exc)
    if results is not None and msg.startswith("path:") and str(results) in msg:
        msg = "RESULTS:" + msg[len("path:"):]  # the input file, not --out
    for lib, opt in _OPTION_NAMES:
        if msg.startswith(lib):
            msg = opt + msg[len(lib):]
            break
    try:
        return type(exc)(msg)
    except TypeError:  # an exception type with other constructor arguments: keep it
        return exc


def _count(path):
    from dic.sequence import Results

    with Results.open(path) as r:
        return len(r)


def _stored_strain(path, window, measure):
    """``--window`` and ``--measure``, defaulting to the strain stored with the results."""
    from dic.sequence import Results

    stored = {}
    try:
        with Results.open(path) as r:
            st = r.settings.get("strain") or {}
            stored = st if isinstance(st, dict) else {}
    except (OSError, ValueError, KeyError) as exc:
        raise _as_option(exc, path) from None
    if window is None:
        window = stored.get("window", DEFAULT_WINDOW)
    if measure is None:
        measure = stored.get("measure", "green-lagrange")
    return window, measure


def _check_window(window):
    if isinstance(window, bool) or not isinstance(window, int) or window < 3 or window % 2 == 0:
        raise ValueError(f"--strain-window: {window!r} is not an odd whole number of at least "
                         f"3; use e.g. --strain-window 9")
    return window


def run_report(args) -> int:
    """Run ``dic report``: write the HTML and PDF reports; returns 0."""
    from dic.report import write_report
    from dic.strain import canonical_measure

    results = _results_file(args.results)
    window, measure = _stored_strain(results, args.window, args.measure)
    window = _check_window(window)
    measure = canonical_measure(measure)
    out = Path(args.out) if args.out is not None else results.parent
    try:
        n = _count(results)
        if n == 0:
            raise ValueError(f"RESULTS: '{results}' holds no completed frames; run 'dic run' "
                             f"into it first")
        from dic.workflow.run import settings_self_check

        # every report carries the self-check of its settings on its own reference image
        check = settings_self_check(results, {"window": window, "measure": measure})
        html, pdf = write_report(results, out, frames=_expand(_frames(args.frames), n),
                                 window=window, measure=measure, metrology=check,
                                 title=getattr(args, "title", None),
                                 limits=getattr(args, "limits", "shared"))
    except (ValueError, OSError) as exc:
        raise _as_option(exc, results) from None
    print(f"report: {html}")
    print(f"report: {pdf}")
    return 0


def run_export(args) -> int:
    """Run ``dic export``: write CSV, NPZ or VTK files; returns 0."""
    from dic.export import EXPORT_FORMATS, check_components, export_results
    from dic.strain import canonical_measure

    fmt = str(args.format).strip().lower()
    if fmt not in EXPORT_FORMATS:
        raise ValueError(f"--format: unknown {args.format!r}; use one of: "
                         f"{', '.join(EXPORT_FORMATS)}")
    results = _results_file(args.results)
    window, measure = _stored_strain(results, args.window, args.measure)
    window = _check_window(window)
    measure = canonical_measure(measure)
    try:
        components = check_components(args.components)
    except ValueError as exc:
        raise _as_option(exc) from None
    out = Path(args.out) if args.out is not None else results.parent / _EXPORT_FOLDER
    try:
        n = _count(results)
        if n == 0:
            raise ValueError(f"RESULTS: '{results}' holds no completed frames; run 'dic run' "
                             f"into it first")
        written = export_results(results, out, format=fmt,
                                 frames=_expand(_frames(args.frames), n),
                                 components=components, window=window, measure=measure)
    except (ValueError, OSError) as exc:
        raise _as_option(exc, results) from None
    print(f"export: {len(written)} file{'s' if len(written) != 1 else ''} in {out}"
          + (f" (open {written[-1].name} in ParaView)" if fmt == "vtk" else ""))
    return 0

