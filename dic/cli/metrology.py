"""Command-line sub-commands for measurement quality: ``pattern``, ``noise`` and ``advise``.

:func:`register` adds them to the ``dic`` command's sub-parsers; each sets ``func`` to its
``run_*`` function, which takes the parsed arguments (and optionally a text stream) and returns
an exit code. Bad input raises ValueError or OSError with a one-line message, for the caller to
print and map to an exit code.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from dic.cli.types import positive_float, positive_int, rectangle
from dic.files import write_json, writing

__all__ = ["register", "run_pattern", "run_noise", "run_advise"]


# --------------------------------------------------------------------------------------------
# option types
# --------------------------------------------------------------------------------------------
def _odd(text):
    value = positive_int(text)
    if value % 2 == 0:
        raise argparse.ArgumentTypeError(f"expected an odd whole number, got {text!r}")
    return value


def _odd_list(text):
    try:
        values = [int(p) for p in str(text).split(",") if p.strip()]
    except ValueError:
        values = []
    if not values or any(v < 3 or v % 2 == 0 for v in values):
        raise argparse.ArgumentTypeError(f"expected comma-separated odd whole numbers, e.g. "
                                         f"15,21,31; got {text!r}")
    return values


def _add_roi(parser):
    where = parser.add_mutually_exclusive_group()
    where.add_argument("--roi", type=rectangle, metavar="X0,Y0,X1,Y1",
                       help="region of interest: rectangle corners in px (inclusive)")
    where.add_argument("--roi-mask", metavar="PATH",
                       help="region of interest: a mask image (non-zero inside)")


def _roi(args):
    return args.roi if args.roi is not None else args.roi_mask


def _save_figure(fig, path):
    p = Path(path)
    if p.suffix.lower() not in (".png", ".svg", ".pdf"):
        raise ValueError(f"--figure: '{p}' must end in .png, .svg or .pdf")
    with writing(p, None, label="--figure") as tmp:
        fig.savefig(tmp, dpi=150, format=p.suffix.lower()[1:])


# --------------------------------------------------------------------------------------------
# sub-commands
# --------------------------------------------------------------------------------------------
def register(subparsers):
    """Add the ``pattern``, ``noise`` and ``advise`` sub-commands.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers()``.
    """
    p = subparsers.add_parser(
        "pattern", help="speckle-pattern quality of a reference image",
        description="Speckle size, mean intensity gradient, grey-level use, saturation, image "
                    "noise and the predicted displacement noise per subset size, with a verdict.")
    p.add_argument("image", metavar="IMAGE", help="the reference image")
    p.add_argument("--subset", type=_odd, default=21, metavar="PX",
                   help="subset size for the SSSIG and the verdict (default 21)")
    p.add_argument("--second-image", metavar="PATH",
                   help="a second image of the static specimen, for the image noise")
    p.add_argument("--noise", type=positive_float, metavar="GREY",
                   help="image noise standard deviation, grey levels (default: estimated)")
    p.add_argument("--bits", type=positive_int, metavar="N",
                   help="camera bit depth, e.g. 12 (default: from the largest grey level)")
    _add_roi(p)
    p.add_argument("--json", metavar="PATH", help="also write the numbers to a JSON file")
    p.set_defaults(func=run_pattern)

    n = subparsers.add_parser(
        "noise", help="noise floor from images of the unloaded specimen",
        description="Spatial and temporal standard deviations of displacement and strain on "
                    "images of the static, unloaded specimen (the first is the reference).")
    n.add_argument("images", nargs="+", metavar="IMAGES",
                   help="two or more images, a folder, or a glob pattern")
    n.add_argument("--subset", type=_odd, default=21, metavar="PX", help="subset (default 21)")
    n.add_argument("--step", type=positive_int, default=10, metavar="PX",
                   help="grid step (default 10)")
    n.add_argument("--strain-window", type=_odd, default=9, metavar="N",
                   help="strain window in points (default 9)")
    n.add_argument("--strain-measure", default="green-lagrange", metavar="NAME",
                   help="strain measure (default green-lagrange)")
    n.add_argument("--shape-function", choices=("affine", "quadratic"), default="affine")
    _add_roi(n)
    n.add_argument("--json", metavar="PATH", help="also write the numbers to a JSON file")
    n.set_defaults(func=run_noise)

    a = subparsers.add_parser(
        "advise", help="subset, step and strain window for a noise or resolution target",
        description="Runs many settings on the self-check of the reference image and proposes "
                    "the one that meets the target (strain noise: with the smallest virtual "
                    "strain gauge; resolution only: with the least noise).")
    a.add_argument("image", metavar="IMAGE", help="the reference image")
    a.add_argument("--target-noise", type=positive_float, metavar="UE",
                   help="strain noise target, microstrain")
    a.add_argument("--target-resolution", type=positive_float, metavar="PX",
                   help="strain spatial resolution target, px (mm with --pixel-size)")
    a.add_argument("--pixel-size", type=positive_float, metavar="MM",
                   help="mm per px; then --target-resolution is in mm")
    a.add_argument("--subsets", type=_odd_list, metavar="LIST",
                   help="subset sizes to try, e.g. 15,21,31 (default 15,21,27,31,41)")
    a.add_argument("--windows", type=_odd_list, metavar="LIST",
                   help="strain windows to try, e.g. 5,9,15 (default 5,7,9,11,15)")
    a.add_argument("--shape-function", choices=("affine", "quadratic"), default="affine")
    a.add_argument("--noise", type=positive_float, metavar="GREY",
                   help="image noise standard deviation, grey levels (default: estimated)")
    _add_roi(a)
    a.add_argument("--figure", metavar="PATH",
                   help="save the noise / resolution trade-off (.png, .svg or .pdf)")
    a.add_argument("--json", metavar="PATH", help="also write every setting tried to JSON")
    a.set_defaults(func=run_advise)


def run_pattern(args, out=None) -> int:
    """``dic pattern``: print the pattern quality; 0 on success."""
    from dic.metrology import pattern_quality

    out = sys.stdout if out is None else out
    roi, found = _roi(args), None
    if roi is None:
        # judge the paint, not the background: find the speckled region by itself
        from dic.images.io import read_image
        from dic.metrology import find_speckled_region

        found = find_speckled_region(read_image(args.image, name="IMAGE"), size=args.subset)
        roi = found
    q = pattern_quality(args.image, subset=args.subset, noise=args.noise,
                        second_image=args.second_image, roi=roi, bits=args.bits)
    print(q.summary(), file=out)
    if found is not None:
        import numpy as np

        rows, cols = np.flatnonzero(found.any(axis=1)), np.flatnonzero(found.any(axis=0))
        print(f"region: no ROI given, so only the speckled region found in the image was "
              f"judged: x {cols[0]}-{cols[-1]}, y {rows[0]}-{rows[-1]} px "
              f"({100 * found.mean():.0f} % of the image); give --roi to choose another",
              file=out)
    elif _roi(args) is None:
        print("region: no ROI given and no plain background found, so the whole image was "
              "judged", file=out)
    if args.json:
        write_json(args.json, q.as_dict(), label="--json")
    return 0


def run_noise(args, out=None) -> int:
    """``dic noise``: print the noise floor; 0 on success."""
    from dic.metrology import noise_floor

    out = sys.stdout if out is None else out
    images = args.images[0] if len(args.images) == 1 else args.images
    nf = noise_floor(images, subset=args.subset, step=args.step, window=args.strain_window,
                     roi=_roi(args), measure=args.strain_measure,
                     shape_function=args.shape_function)
    print(nf.summary(), file=out)
    if args.json:
        write_json(args.json, nf.as_dict(), label="--json")
    return 0


def run_advise(args, out=None) -> int:
    """``dic advise``: print the proposed settings; 0 on success (also when no setting
    reaches the target: the advice then says so and shows the best reachable)."""
    from dic.metrology import advise
    from dic.metrology import ADVICE_SUBSETS as SUBSETS, ADVICE_WINDOWS as WINDOWS

    out = sys.stdout if out is None else out
    if args.target_noise is None and args.target_resolution is None:
        raise ValueError("advise needs a target: --target-noise UE (microstrain) or "
                         "--target-resolution PX")
    a = advise(args.image, target_strain_noise=args.target_noise,
               target_resolution=args.target_resolution, pixel_size=args.pixel_size,
               roi=_roi(args), subsets=args.subsets or SUBSETS, windows=args.windows or WINDOWS,
               shape_function=args.shape_function, noise=args.noise)
    print(a.summary(), file=out)
    if args.figure:
        _save_figure(a.figure(), args.figure)
        print(f"trade-off figure: {args.figure}", file=out)
    if args.json:
        write_json(args.json, a.as_dict(), label="--json")
    return 0
