"""The ``dic`` command line: a thin layer that parses options, calls the library, writes files.

Commands
--------
``dic run IMAGES... --out DIR``
    Match every image against a reference image and write, per image, a displacement table
    (CSV) and a displacement-magnitude map (PNG).

Exit codes: 0 success, 2 bad input (unreadable or missing files, bad options, images of another
size; one line ``dic: error: ...`` on stderr, no traceback), 130 interrupted. Outputs written
before an error are kept.
"""

from __future__ import annotations

import argparse
import glob
import logging
import sys
import time
from pathlib import Path

from ._version import __version__

__all__ = ["main"]

log = logging.getLogger("dic.cli")

EXIT_OK, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 2, 130


# --------------------------------------------------------------------------------------------
# argument parsing
# --------------------------------------------------------------------------------------------
class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line on stderr (exit code 2)."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"dic: error: {_one_line(message)}; see '{self.prog} --help'\n")


def _numbers(text, count, what, example):
    parts = [p.strip() for p in str(text).split(",")]
    try:
        if len(parts) != count:
            raise ValueError
        values = tuple(float(p) for p in parts)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected {what} as {count} comma-separated numbers (px), e.g. {example}; got "
            f"{text!r}") from None
    if not all(v == v and abs(v) != float("inf") for v in values):
        raise argparse.ArgumentTypeError(f"expected finite numbers, e.g. {example}; got {text!r}")
    return values


def _rectangle(text):
    return _numbers(text, 4, "X0,Y0,X1,Y1", "20,30,580,270")


def _point(text):
    return _numbers(text, 2, "X,Y", "300,150")


def _build_parser():
    parser = _Parser(
        prog="dic",
        description="Displacement and strain fields from speckle images of mechanical tests.",
        epilog="Run 'dic COMMAND --help' for the options of a command.")
    parser.add_argument("--version", action="version", version=f"dic {__version__}")
    commands = parser.add_subparsers(title="commands", dest="command", metavar="COMMAND",
                                     required=True)

    run = commands.add_parser(
        "run", help="match images against a reference image; write displacement tables and maps",
        description="Match every image against the reference image (the first one, or "
                    "--reference) and write, for each image STEM, displacements_STEM.csv (one row "
                    "per grid point, NaN where not measured) and displacements_STEM.png (the "
                    "displacement magnitude over the reference image) into the output folder.",
        epilog="Folders and quoted patterns ('frames/*.tif') are listed in natural order "
               "(img2 before img10); separate arguments keep the order given. Points are in "
               "reference-image pixels: x is the column, y the row (downwards).")
    run.add_argument("images", nargs="+", metavar="IMAGES",
                     help="image files, folders or glob patterns (PNG, TIFF, BMP, JPEG)")
    run.add_argument("--out", required=True, metavar="DIR", type=Path,
                     help="output folder (created if missing)")
    run.add_argument("--reference", type=int, default=0, metavar="N",
                     help="position of the reference image in the image list, from 0 "
                          "(default: 0, the first)")
    m = run.add_argument_group("matching")
    m.add_argument("--subset", type=int, default=21, metavar="PX",
                   help="subset size in px, odd, at least 7 (default: 21)")
    m.add_argument("--step", type=int, default=10, metavar="PX",
                   help="grid spacing in px (default: 10)")
    where = m.add_mutually_exclusive_group()
    where.add_argument("--roi", type=_rectangle, metavar="X0,Y0,X1,Y1",
                       help="measure inside this rectangle only (px, corners included)")
    where.add_argument("--roi-mask", metavar="PATH",
                       help="measure where this mask image (same size) is non-zero")
    m.add_argument("--shape-function", choices=("affine", "quadratic"), default="affine",
                   help="subset shape function (default: affine)")
    m.add_argument("--interpolation", choices=("quintic", "cubic"), default="quintic",
                   help="B-spline interpolation of the deformed image (default: quintic)")
    m.add_argument("--seed", type=_point, action="append", metavar="X,Y", dest="seeds",
                   help="seed point in reference px (repeat for several; default: the centre "
                        "of each part of the region)")
    m.add_argument("--min-zncc", type=float, default=0.9, metavar="Z",
                   help="reject matches with a lower ZNCC (default: 0.9)")
    talk = run.add_mutually_exclusive_group()
    talk.add_argument("--quiet", "-q", action="store_true",
                      help="print errors and warnings only")
    talk.add_argument("--verbose", "-v", action="store_true", help="print more detail")
    run.set_defaults(func=_run)
    return parser


# --------------------------------------------------------------------------------------------
# the run command
# --------------------------------------------------------------------------------------------
def _collect_images(arguments):
    """Image paths from files, folders and patterns: argument order, natural order within each."""
    from .io import list_images

    found, seen = [], set()
    for arg in arguments:
        p = Path(arg)
        if p.is_file():
            paths = [p]
        elif p.is_dir() or glob.has_magic(str(arg)):
            try:
                paths = list_images(arg)
            except FileNotFoundError as exc:
                raise FileNotFoundError(
                    "images: " + str(exc).removeprefix("pattern_or_folder: ")) from None
        else:
            raise FileNotFoundError(f"images: no such file or folder '{arg}'; check the path")
        for q in paths:
            key = q.resolve()
            if key not in seen:
                seen.add(key)
                found.append(q)
    return found


def _plan(args):
    """Reference and deformed images of a run, checked before any matching starts."""
    images = _collect_images(args.images)
    if len(images) < 2:
        raise ValueError(f"images: found {len(images)} image; give a reference image and at "
                         f"least one image to compare with it")
    n = len(images)
    if not 0 <= args.reference < n:
        raise ValueError(f"--reference: {args.reference} is not a position in the list of {n} "
                         f"images; use 0 to {n - 1}")
    reference = images[args.reference]
    others = [p for i, p in enumerate(images) if i != args.reference]
    stems = {}
    for p in others:
        if p.stem in stems:
            raise ValueError(f"images: '{stems[p.stem]}' and '{p}' share the name "
                             f"'{p.stem}', so their outputs would overwrite each other; rename "
                             f"one or run them separately")
        stems[p.stem] = p
    # headers only: a wrong size or an unreadable file stops the run before any work
    size = _shape_of(reference)
    for p in others:
        other = _shape_of(p)
        if other != size:
            raise ValueError(f"image '{p}' is {other[1]} x {other[0]} px but the reference "
                             f"'{reference}' is {size[1]} x {size[0]} px; use images of one "
                             f"camera and crop")
    return reference, others


def _shape_of(path):
    from .io import image_info

    try:
        return image_info(path)["shape"]
    except OSError as exc:
        raise OSError("image: " + str(exc).removeprefix("path: ")) from None


def _match_options(args):
    """Keyword arguments for :func:`dic.correlate` from the command line."""
    roi = args.roi if args.roi is not None else args.roi_mask
    return dict(subset=args.subset, step=args.step, roi=roi,
                shape_function=args.shape_function, interpolation=args.interpolation,
                seeds=args.seeds, min_zncc=args.min_zncc)


class _FolderOutput:
    """Writes each field as ``displacements_<stem>.csv`` and ``.png`` into one folder.

    One object per run; a results-file writer with the same ``add``/``close`` methods can take
    its place or sit beside it.
    """

    def __init__(self, folder, reference_path, reference_image):
        self.folder = Path(folder)
        self.reference_path = reference_path
        self.reference_image = reference_image
        self.written = []
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OSError(f"--out: cannot create folder '{self.folder}' "
                          f"({exc.strerror or exc}); choose another folder") from None

    def add(self, path, field):
        from .export import field_to_csv
        from .plot import displacement_map, save_figure

        stem = Path(path).stem
        csv = field_to_csv(field, self.folder / f"displacements_{stem}.csv")
        n, nv = field.n_points, field.n_valid
        fig, _ = displacement_map(
            field, self.reference_image, component="magnitude",
            title=f"Displacement magnitude, {Path(path).name} against "
                  f"{self.reference_path.name}\n{nv} of {n} points measured "
                  f"({100.0 * nv / max(n, 1):.1f} %)")
        png = save_figure(fig, self.folder / f"displacements_{stem}.png")
        self.written += [csv, png]

    def close(self):
        pass


def _run(args, out):
    from tqdm import tqdm

    from .matching import correlate
    from .io import read_image

    reference_path, others = _plan(args)
    options = _match_options(args)
    reference = read_image(reference_path, name="reference image")
    sink = _FolderOutput(args.out, reference_path, reference)
    log.info("reference image %s, %d image(s) to match", reference_path, len(others))
    show = not args.quiet
    bar = tqdm(others, desc="matching", unit="image", file=sys.stderr, leave=False,
               disable=args.quiet or not sys.stderr.isatty())
    try:
        for path in bar:
            t0 = time.perf_counter()
            deformed = read_image(path, name="image")
            field = correlate(reference, deformed, **options)
            field.settings.update(reference_image=reference_path.name, image=path.name)
            sink.add(path, field)
            if field.n_valid == 0:
                log.warning("%s: no point measured; check the region of interest, seed and "
                            "subset size", path.name)
            if show:
                tqdm.write(f"{path.name}: {field.summary()} [{time.perf_counter() - t0:.1f} s]",
                           file=out)
    finally:
        bar.close()
        sink.close()
    if show:
        print(f"wrote {len(sink.written)} files ({len(others)} displacement tables as CSV and "
              f"maps as PNG) to {sink.folder}", file=out)
    return EXIT_OK


# --------------------------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------------------------
def _one_line(message):
    return " ".join(str(message).split())


def _describe(exc):
    """An exception as one line of text for the user."""
    if isinstance(exc, OSError) and exc.strerror and exc.filename:  # raised by the system
        return _one_line(f"'{exc.filename}': {exc.strerror}")
    return _one_line(exc) or type(exc).__name__


def _setup_logging(args):
    """Send the package's log records to stderr; returns what to undo afterwards."""
    level = (logging.ERROR if getattr(args, "quiet", False)
             else logging.INFO if getattr(args, "verbose", False) else logging.WARNING)
    logger = logging.getLogger("dic")
    handler = logging.StreamHandler(sys.stderr)
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
        return args.func(args, sys.stdout)
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
