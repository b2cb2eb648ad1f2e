"""The ``dic tensile`` sub-command: tensile results from a results file and a force log.

``register(subparsers)`` adds the sub-command to an argparse sub-parsers object and
``run(args)`` carries it out. Errors are ValueError or OSError with one-line messages (the
command line's ``main`` turns them into exit code 2); nothing is written on an error.
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
                     help="constant time between images, s (image k of the sequence at k times "
                          "this; an analysis of some of the images keeps their times)")
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


def setup_from_args(args):
    """The :class:`dic.tensile.workflow.TensileSetup` from the parsed options."""
    from dic.tensile.workflow import TensileSetup

    return TensileSetup(
        force_log=args.force_log, time_column=args.time_column,
        force_column=args.force_column, crosshead_column=args.crosshead_column,
        force_unit=args.force_unit, time_unit=args.time_unit,
        crosshead_unit=args.crosshead_unit, delimiter=args.delimiter, decimal=args.decimal,
        skip_bad_rows=args.skip_bad_rows, frame_times=args.frame_times,
        frame_interval=args.frame_interval, image_metadata=args.image_metadata,
        by_index=args.by_index, trigger_offset=args.trigger_offset, width=args.width,
        thickness=args.thickness, area=args.area, gauge_length=args.gauge_length,
        transverse_length=args.transverse_length, axis=args.axis, scale=args.scale,
        modulus_range=args.modulus_range, offsets=tuple(args.offsets or (0.2,)),
        n_range=args.n_range)


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
        Bad input, with a one-line message; nothing is written then.
    """
    from dic.workflow.run import tensile_outputs

    out = sys.stdout if out is None else out
    outcome = tensile_outputs(args.results, setup_from_args(args), args.out)
    print(outcome.results.table(), file=out)
    print(f"wrote tensile.json, tensile.csv, stress_strain.png and gauges.csv to "
          f"{outcome.folder}; stored the gauges and results beside the results file "
          f"({outcome.files['sidecar'].name}), where dic report finds them", file=out)
    return 0
