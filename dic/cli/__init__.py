"""The ``dic`` command line: a thin layer that parses options, calls the library, writes files.

Commands
--------
``dic run [IMAGES...] [--config analysis.toml] --out PATH [options]``
    Track an image sequence with :func:`dic.track` into a results file (HDF5). ``--out`` ending
    in ``.h5`` (or ``.hdf5``) is the results file itself; any other path is an output folder
    that receives ``results.h5`` and, for every frame but the reference image,
    ``displacements_<stem>.csv`` (one row per grid point, with a ``.json`` description) and
    ``strain_<stem>.png`` (the axial strain over the reference image, one colour scale for all
    frames, gauges drawn). Options override the analysis file.
    Running the same command again resumes after the last completed frame.
``dic info RESULTS``
    Summarise a results file (or the ``results.h5`` of an output folder).
``dic tensile``, ``dic report``, ``dic export``, ``dic pattern``, ``dic noise``, ``dic advise``,
``dic view``, ``dic calibrate``
    Defined in ``dic.cli.tensile``, ``dic.cli.report``, ``dic.cli.metrology``, ``dic.cli.view``
    and ``dic.cli.calibrate``.

With ``--config`` and an output folder, ``dic run`` goes on, once every frame is done, to what
the analysis file's ``[tensile]`` and ``[report]`` tables ask for (:func:`dic.workflow.run.finish`).

Exit codes: 0 success, 2 bad input (unreadable or missing files, bad options, images of
another size or bit depth, a results file made with other settings, a full disk; one line
``dic: error: ...`` on stderr, no traceback), 130 interrupted (Ctrl-C, SIGTERM, SIGHUP).
Whatever was completed before an error or an interruption stays in the results file.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys

from dic import __version__

__all__ = ["main"]

log = logging.getLogger("dic.cli")

EXIT_OK, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 2, 130


class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line on stderr (exit code 2)."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"dic: error: {_one_line(message)}; see '{self.prog} --help'\n")



def _build_parser():
    parser = _Parser(
        prog="dic",
        description="Displacement and strain fields from speckle images of mechanical tests.",
        epilog="Run 'dic COMMAND --help' for the options of a command.")
    parser.add_argument("--version", action="version", version=f"dic {__version__}")
    commands = parser.add_subparsers(title="commands", dest="command", metavar="COMMAND",
                                     required=True)
    # each command group in a module of its own
    from dic.cli import calibrate as _cli_calibrate
    from dic.cli import metrology as _cli_metrology
    from dic.cli import report as _cli_report
    from dic.cli import run as _cli_run
    from dic.cli import tensile as _cli_tensile
    from dic.cli import view as _cli_view

    for module in (_cli_run, _cli_tensile, _cli_report, _cli_metrology, _cli_view,
                   _cli_calibrate):
        module.register(commands)
    return parser


def _one_line(message):
    return " ".join(str(message).split())


def _describe(exc):
    """An exception as one line of text for the user."""
    if isinstance(exc, OSError) and exc.strerror and exc.filename:  # raised by the system
        return _one_line(f"'{exc.filename}': {exc.strerror}")
    return _one_line(exc) or type(exc).__name__


class _LineHandler(logging.Handler):
    """Log records on stderr, printed so that a progress bar there stays intact."""

    def emit(self, record):
        try:
            from tqdm import tqdm

            tqdm.write(self.format(record), file=sys.stderr)
        except Exception:  # noqa: BLE001 -- logging must never stop the run
            self.handleError(record)


def _setup_logging(args):
    """Send the package's log records to stderr; returns what to undo afterwards."""
    level = (logging.ERROR if getattr(args, "quiet", False)
             else logging.INFO if getattr(args, "verbose", False) else logging.WARNING)
    logger = logging.getLogger("dic")
    handler = _LineHandler()
    handler.setFormatter(logging.Formatter("dic: %(levelname)s: %(message)s"))
    old_level = logger.level
    logger.addHandler(handler)
    logger.setLevel(level)
    return logger, handler, old_level


def main(argv=None) -> int:
    """Run the ``dic`` command line.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name; ``sys.argv[1:]`` by default.

    Returns
    -------
    int
        Exit code: 0 success, 2 bad input or options, 130 interrupted.
    """
    parser = _build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, or a usage error already reported
        return exc.code if isinstance(exc.code, int) else EXIT_BAD_INPUT
    logger, handler, old_level = _setup_logging(args)
    try:
        return args.func(args)
    except BrokenPipeError:
        # the reader of the output went away (``dic info run.h5 | head``): stop quietly, as
        # command-line tools do; what follows on stdout is discarded (Python docs, signal
        # module, "Note on SIGPIPE")
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except (ValueError, OSError) as exc:
        print(f"dic: error: {_describe(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("dic: interrupted; outputs written so far are kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    finally:
        logger.removeHandler(handler)
        logger.setLevel(old_level)


if __name__ == "__main__":
    sys.exit(main())
