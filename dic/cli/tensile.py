"""The ``dic tensile`` sub-command: tensile results from a results file and a force log.

``register(subparsers)`` adds the sub-command to an argparse sub-parsers object and
``run(args)`` carries it out. Errors are ValueError or OSError with one-line messages (the
command line's ``main`` turns them into exit code 2); files written before an error are kept.
"""

from __future__ import annotations

import logging
import sys
from pathlib import Path

from dic.cli.types import number, pair, positive_float

__all__ = ["register", "run"]

log = logging.getLogger("dic.cli")


def register(subparsers):
    """Add the ``tensile`` sub-command to an argparse sub-parsers object.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers()``.

    Returns
    -------
    argparse.ArgumentParser
        The sub-command's parser (its ``func`` default is :func:`run`).
    """
    p = subparsers.add_parser(
        "tensile",
        help="tensile results (E, Poisson's ratio, Rp0.2, Rm, Ag, n, r) from a results file "
             "and the force log",
        description="Place a gauge line along the specimen axis and one across it on a "
                    "results file, read the testing machine's force log, put both on one "
                    "clock, and compute the tensile results. Prints a table and writes "
                    "tensile.json, tensile.csv, stress_strain.png and gauges.csv (gauge "
                    "histories with time and force) into the output folder.",
        epilog="Optical gauge results are indicative unless the set-up was verified as an "
               "extensometer (ISO 9513 / ASTM E83). Columns are header names "
               "(case-insensitive) or numbers counted from 0.")
    p.add_argument("results", metavar="RESULTS", type=Path, help="results file (HDF5) "
                   "written by tracking")
    g = p.add_argument_group("force log")
    g.add_argument("--force-log", required=True, type=Path, metavar="CSV",
                   help="the testing machine's CSV export")
    g.add_argument("--time-column", required=True, metavar="COLUMN", help="time column")
    g.add_argument("--force-column", required=True, metavar="COLUMN", help="force column")
    g.add_argument("--crosshead-column", metavar="COLUMN",
                   help="crosshead travel column (optional, kept in gauges.csv)")
    g.add_argument("--force-unit", default="N", metavar="UNIT",
                   help="N, kN or lbf (default: N)")
    g.add_argument("--time-unit", default="s", metavar="UNIT", help="s, ms or min (default: s)")
    g.add_argument("--crosshead-unit", default="mm", metavar="UNIT",
                   help="mm, um or in (default: mm)")
    g.add_argument("--delimiter", metavar="CHAR", help="field delimiter (default: detected)")
    g.add_argument("--decimal", choices=(".", ","), help="decimal mark (default: detected)")
    g.add_argument("--skip-bad-rows", action="store_true",
                   help="drop rows with empty or non-numeric values instead of stopping")
    s = p.add_argument_group("images and force on one clock (default: the image times stored "
                             "in the results file)")
    how = s.add_mutually_exclusive_group()
    how.add_argument("--frame-times", type=Path, metavar="CSV",
                     help="per-image times, e.g. columns file,time_s")
    how.add_argument("--frame-interval", type=positive_float, metavar="S",
                     help="constant time between images, s")
    how.add_argument("--image-metadata", action="store_true",
                     help="capture times from the image files (EXIF), else their modification "
                          "times")
    how.add_argument("--by-index", action="store_true",
                     help="log row k belongs to image k (one row per camera trigger)")
    s.add_argument("--trigger-offset", type=number, default=0.0, metavar="S",
                   help="time on the force log's clock at the camera's time zero, s "
                        "(default: 0)")
    sp = p.add_argument_group("specimen")
    sp.add_argument("--width", type=positive_float, metavar="MM", help="width of the section, mm")
    sp.add_argument("--thickness", type=positive_float, metavar="MM", help="thickness, mm")
    sp.add_argument("--area", type=positive_float, metavar="MM2",
                    help="area of the section, mm^2 (instead of width and thickness)")
    ga = p.add_argument_group("gauges")
    ga.add_argument("--gauge-length", type=positive_float, metavar="MM",
                    help="axial gauge length, mm (default: 80 %% of the measured length)")
    ga.add_argument("--transverse-length", type=positive_float, metavar="MM",
                    help="transverse gauge length, mm (default: 80 %% of the measured width)")
    ga.add_argument("--axis", choices=("auto", "x", "y"), default="auto",
                    help="specimen axis in the image (default: auto, from the last frame)")
    ga.add_argument("--scale", type=positive_float, metavar="MM_PER_PX",
                    help="image scale, when the results file has none")
    r = p.add_argument_group("results")
    r.add_argument("--modulus-range", type=pair, metavar="LO,HI",
                   help="stress range of the modulus fit, MPa (default: 10 %% to 40 %% of the "
                        "largest stress)")
    r.add_argument("--offset", type=positive_float, action="append", metavar="PCT", dest="offsets",
                   help="proof-strength offset, %% strain (repeat for several; default 0.2)")
    r.add_argument("--n-range", type=pair, metavar="LO,HI",
                   help="strain range for n and r, %% (default: 2 %% to Agt)")
    p.add_argument("--out", type=Path, metavar="DIR",
                   help="output folder (created if missing; default: the results file's "
                        "folder)")
    p.set_defaults(func=run)
    return p


def _check_early(args):
    """Checks that need no file, so a typo fails before any work."""
    from dic.tensile.forcelog import FORCE_UNITS, LENGTH_UNITS, TIME_UNITS, unit_factor

    unit_factor(args.force_unit, FORCE_UNITS, "--force-unit")
    unit_factor(args.time_unit, TIME_UNITS, "--time-unit")
    if args.crosshead_column is not None:
        unit_factor(args.crosshead_unit, LENGTH_UNITS, "--crosshead-unit")
    if args.area is not None and (args.width is not None or args.thickness is not None):
        raise ValueError("--area: give either --area or --width and --thickness, not both")
    if args.area is None and (args.width is None or args.thickness is None):
        raise ValueError("--width/--thickness: give the specimen's width and thickness in mm "
                         "(or --area in mm^2)")


def run(args, out=None) -> int:
    """Carry out ``dic tensile`` (see :func:`register` for the options).

    Parameters
    ----------
    args : argparse.Namespace
    out : text stream, optional
        Where the table goes (default stdout).

    Returns
    -------
    int
        0 on success.

    Raises
    ------
    ValueError, OSError
        Bad input, with a one-line message; files written before the error are kept.
    """
    out = sys.stdout if out is None else out
    _hist, results, folder = compute(args)
    print(results.table(), file=out)
    print(f"wrote tensile.json, tensile.csv, stress_strain.png and gauges.csv to {folder}",
          file=out)
    return 0


def compute(args):
    """Gauges, force synchronisation and tensile results; writes the files.

    Returns ``(history, results, folder)``: the gauge histories (with time and force), the
    :class:`dic.tensile.results.TensileResults` and the folder written to.
    """
    import numpy as np

    from dic.tensile import gauges as G
    from dic.tensile.forcelog import read_force_log
    from dic.tensile.forcesync import image_times_from_files, read_frame_times, synchronise
    from dic.tensile.results import engineering_stress, tensile_results
    from dic.sequence.tracker import load_results

    _check_early(args)
    folder = args.out if args.out is not None else Path(args.results).resolve().parent
    with load_results(args.results) as res:
        if len(res) < 4:
            raise ValueError(f"RESULTS: '{args.results}' holds {len(res)} completed frames; a "
                             "tensile curve needs at least four")
        scale = args.scale if args.scale is not None else res.scale
        if scale is None:
            raise ValueError(f"--scale: '{args.results}' has no image scale (mm/px); give "
                             "--scale MM_PER_PX")
        # 1. gauges (kept on disk even if the force log turns out bad)
        axial = _axial(G, res, args, scale)
        across = G.transverse_line(res, args.transverse_length, units="mm", axis=args.axis,
                                   scale=scale)
        hist = G.gauge_histories(res, [axial, across], scale=scale)
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OSError(f"--out: cannot create folder '{folder}' ({exc.strerror or exc})"
                          ) from None
        hist.to_csv(folder / "gauges.csv")
        # 2. force log on the images' clock
        flog = read_force_log(args.force_log, time_column=args.time_column,
                              force_column=args.force_column,
                              crosshead_column=args.crosshead_column,
                              time_unit=args.time_unit, force_unit=args.force_unit,
                              crosshead_unit=args.crosshead_unit, delimiter=args.delimiter,
                              decimal=args.decimal, skip_bad_rows=args.skip_bad_rows)
        n = len(res)
        names = res.image_names[:n]
        if args.by_index:
            sync = synchronise(flog, n, by_index=True)
        elif args.frame_interval is not None:
            sync = synchronise(flog, n, frame_interval=args.frame_interval,
                               trigger_offset=args.trigger_offset)
        else:
            if args.frame_times is not None:
                times = read_frame_times(args.frame_times, names=names)
            elif args.image_metadata:
                times, used = image_times_from_files(names)
                log.info("image times from the files' %s", used)
            else:
                times = np.asarray(res.image_times[:n], dtype=float)
                if not np.all(np.isfinite(times)):
                    raise ValueError("the results file holds no image times; give "
                                     "--frame-times, --frame-interval, --image-metadata or "
                                     "--by-index")
            sync = synchronise(flog, n, image_times=times, trigger_offset=args.trigger_offset)
        hist = hist.with_time(sync.time).with_force(sync.force)
        if sync.crosshead is not None:
            hist.columns["crosshead"] = sync.crosshead
            hist.units["crosshead"] = "mm"
        hist.notes.append(f"force from '{flog.path.name}' ({sync.method})")
        hist.to_csv(folder / "gauges.csv")
    # 3. stress and results
    stress = engineering_stress(sync.force, width=args.width, thickness=args.thickness,
                                area=args.area)
    area = args.area if args.area is not None else args.width * args.thickness
    peak = float(np.max(flog.force)) / area
    n_range = None if args.n_range is None else (args.n_range[0] / 100, args.n_range[1] / 100)
    results = tensile_results(hist[f"{axial.name}.engineering"], stress,
                              transverse=hist[f"{across.name}.engineering"],
                              modulus_range=args.modulus_range,
                              offsets=tuple(args.offsets or (0.2,)), n_range=n_range,
                              r_range=n_range, peak_stress=peak)
    results.notes.extend(sync.notes)
    results.notes.append(f"strain: gauge line {axial.length:g} mm along the axis, "
                         f"{across.length:g} mm across; force log synchronised "
                         f"{sync.method}; area {area:g} mm^2")
    results.to_json(folder / "tensile.json")
    results.to_csv(folder / "tensile.csv")
    fig, _ = results.plot()
    from dic.figures.plot import save_figure

    save_figure(fig, folder / "stress_strain.png")
    return hist, results, folder


def _axial(G, res, args, scale):
    if args.gauge_length is not None:
        return G.axial_line(res, args.gauge_length, units="mm", axis=args.axis, scale=scale)
    # default: 80 % of the measured length along the axis, through the centre
    src = G._Frames(res, scale)
    ax = G._resolve_axis(src, args.axis)
    x0, x1, y0, y1 = G._roi_box(src)
    centre = (0.5 * (x0 + x1), 0.5 * (y0 + y1)) if ax == "x" else (0.5 * (y0 + y1),
                                                                    0.5 * (x0 + x1))
    lo, hi = G._measured_span(src, ax, centre[1])
    half = min(centre[0] - lo, hi - centre[0])
    if not half > 0:
        raise ValueError("--gauge-length: the region of interest is not measured around its "
                         "centre; give --gauge-length")
    return G.axial_line(res, 1.6 * half * scale, units="mm", axis=ax, scale=scale)
