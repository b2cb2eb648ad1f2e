"""The ``dic calibrate`` sub-command: cameras from photographs of a chessboard target.

``register(subparsers)`` adds the sub-command, ``run(args)`` carries it out: it calibrates one
camera (or two cameras and their relative pose) with :func:`dic.calibrate`, prints a short
quality verdict and writes the calibration file (TOML, layout in :mod:`dic.stereo.calfile`).
Errors are ValueError or OSError with one-line messages (exit code 2 from ``main``).
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from dic.cli.types import positive_float

__all__ = ["register", "run", "verdict"]

#: reprojection RMS (px) up to which a calibration is called good, and usable
GOOD_RMS, USABLE_RMS = 0.1, 0.3
#: fewer views than this give a weakly determined lens model
FEW_VIEWS = 8


def _corners(text):
    parts = str(text).lower().replace(",", "x").split("x")
    try:
        cols, rows = (int(p) for p in parts)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected the inner corners as COLSxROWS, e.g. 9x6; got {text!r}") from None
    if cols < 3 or rows < 3:
        raise argparse.ArgumentTypeError(f"expected at least 3 inner corners each way, e.g. "
                                         f"9x6; got {text!r}")
    return cols, rows


def register(subparsers):
    """Add the ``calibrate`` sub-command to an argparse sub-parsers object.

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
        "calibrate",
        help="calibrate one camera, or two cameras and their relative pose, from photographs "
             "of a chessboard target",
        description="Find the chessboard's inner corners in every photograph, fit each "
                    "camera's matrix and lens distortion and, with --right-images, the pose "
                    "of the right camera relative to the left. Prints the reprojection error "
                    "overall and per photograph, the photographs left out and why, and for "
                    "two cameras the baseline and the angle between them; writes the "
                    "calibration file (TOML) for 'dic run --calibration'.")
    p.add_argument("images", nargs="+", metavar="IMAGES",
                   help="the (left) camera's target photographs: files, a folder or a glob "
                        "pattern")
    p.add_argument("--right-images", nargs="+", metavar="IMAGES",
                   help="the right camera's photographs of the same poses, in the same order")
    p.add_argument("--inner-corners", required=True, type=_corners, metavar="COLSxROWS",
                   help="inner corners of the chessboard (squares minus one each way), e.g. 9x6")
    p.add_argument("--square", required=True, type=positive_float, metavar="MM",
                   help="side of one square, mm")
    p.add_argument("--out", required=True, type=Path, metavar="TOML",
                   help="calibration file to write, e.g. cameras.toml")
    p.add_argument("--fit-k3", action="store_true",
                   help="also fit the sixth-order radial distortion term (wide-angle lenses "
                        "with targets reaching the image corners)")
    p.add_argument("--plane-image", type=Path, metavar="IMAGE",
                   help="one camera: a photograph of the target lying flat on the specimen; "
                        "locates the specimen plane, so 'dic run --calibration' gives the scale "
                        "and displacements in mm on it")
    p.add_argument("--max-error", type=positive_float, default=0.5, metavar="PX",
                   help="leave out photographs whose reprojection RMS exceeds this and three "
                        "times the median (default: 0.5 px)")
    p.set_defaults(func=run)
    return p


def verdict(cal) -> str:
    """A multi-line plain-words quality summary of a calibration.

    Parameters
    ----------
    cal : dic.stereo.Calibration

    Returns
    -------
    str
        Several lines, no trailing newline.
    """
    used = len(cal.view_rms)
    if cal.rms <= GOOD_RMS:
        word = "good"
    elif cal.rms <= USABLE_RMS:
        word = "usable"
    else:
        word = "poor: check focus, target flatness and the corner count"
    lines = [f"calibration: {'two cameras' if cal.stereo else 'one camera'}, {used} of "
             f"{len(cal.names)} photographs used",
             f"reprojection error: {cal.rms:.3f} px RMS: {word} (good up to {GOOD_RMS:g} px, "
             f"usable up to {USABLE_RMS:g} px)"]
    if used < FEW_VIEWS:
        lines.append(f"warning: only {used} photographs used; take {FEW_VIEWS} or more, tilted "
                     "in different directions, for a well-determined lens model")
    for which, fit in zip(("left", "right") if cal.stereo else ("camera",), cal.cameras):
        k = fit.matrix
        d = fit.distortion
        lines.append(f"{which}: focal {k[0, 0]:.1f} x {k[1, 1]:.1f} px, centre "
                     f"({k[0, 2]:.1f}, {k[1, 2]:.1f}) px, k1 {d[0]:.4g}, k2 {d[1]:.4g}, "
                     f"reprojection {fit.rms:.3f} px RMS")
    if cal.stereo:
        lines.append(f"baseline: {cal.baseline:.2f} mm; angle between the cameras: "
                     f"{cal.angle_deg:.2f} degrees")
    if cal.plane is not None:
        from dic.stereo.plane import plane_scale

        w, h = cal.cameras[0].size
        lines.append(f"specimen plane: {float(np.linalg.norm(cal.plane[1])):.1f} mm from the "
                     f"camera; scale at the image centre "
                     f"{float(plane_scale(cal, (w - 1) / 2, (h - 1) / 2)):.5f} mm/px")
    for i, name in enumerate(cal.names):
        if i in cal.view_rms:
            lines.append(f"  {name}: {cal.view_rms[i]:.3f} px")
    for r in cal.rejected:
        lines.append(f"  {r.name}: left out ({r.reason})")
    return "\n".join(lines)


def run(args) -> int:
    """Carry out ``dic calibrate``; returns the exit code."""
    from dic.sequence.tracker import resolve_images
    from dic.stereo import calibrate, save_calibration

    left = resolve_images(args.images)
    right = None if args.right_images is None else resolve_images(args.right_images)
    if right is not None and len(right) != len(left):
        raise ValueError(f"--right-images: {len(right)} right and {len(left)} left photographs; "
                         "give both cameras' photographs of the same poses")
    if args.out.suffix.lower() != ".toml":
        raise ValueError(f"--out: {args.out} does not end in .toml; name the calibration file "
                         "e.g. cameras.toml")
    names = [Path(p).name if right is None else f"{Path(p).name} + {Path(q).name}"
             for p, q in zip(left, right or left)]
    cal = calibrate(left, right, inner_corners=args.inner_corners, square_mm=args.square,
                    fit_k3=args.fit_k3, max_error=args.max_error, names=names)
    if args.plane_image is not None:
        from dic.stereo import locate_plane

        cal = locate_plane(cal, args.plane_image)
    save_calibration(cal, args.out)
    print(verdict(cal))
    print(f"calibration file: {args.out}")
    return 0


# --------------------------------------------------------------------------------------------
# the camera options of 'dic run' (kept here so that the run command changes by two lines)
# --------------------------------------------------------------------------------------------
def add_camera_options(run_parser):
    """Add ``--right-images`` and ``--calibration`` to the ``dic run`` parser."""
    c = run_parser.add_argument_group(
        "calibrated cameras",
        "with a calibration file from 'dic calibrate': one camera is corrected for lens "
        "distortion; with --right-images as well, two cameras give 3-D positions, "
        "displacements U, V, W in mm (left camera's frame) and surface strain")
    c.add_argument("--right-images", nargs="+", metavar="IMAGES",
                   help="the right camera's images, one per left image taken at the same "
                        "instant (files, a folder or a glob pattern)")
    c.add_argument("--calibration", type=Path, metavar="TOML",
                   help="calibration file written by 'dic calibrate'")
    c.add_argument("--max-view-angle", type=float, metavar="DEG",
                   help="two cameras: points where a camera sees the surface at more than DEG "
                        "degrees from its normal get no 3-D position (reason 'oblique'; "
                        "default 45, 90 turns the limit off)")


def camera_settings(args, conf) -> dict:
    """``right_images`` and ``calibration`` for :func:`dic.track` from the options and the
    analysis file's ``[stereo]`` table (options win)."""
    table = conf.get("stereo", {})
    right = args.right_images if args.right_images is not None else table.get("right_images")
    cal = args.calibration if args.calibration is not None else table.get("calibration")
    if right is not None and cal is None:
        raise ValueError("--right-images: two cameras need --calibration cameras.toml (from "
                         "'dic calibrate ... --right-images ...')")
    out = {}
    angle = getattr(args, "max_view_angle", None)
    name = "--max-view-angle"
    if angle is None and table.get("max_view_angle") is not None:
        angle, name = table["max_view_angle"], "[stereo] max_view_angle"
    if angle is not None and right is None:
        raise ValueError(f"{name}: it applies to two cameras; give the right camera's images "
                         "and the calibration as well, or leave it out")
    if angle is not None:
        if not 0 < angle <= 90:
            raise ValueError(f"{name}: {angle:g} is not an angle between 0 and 90 "
                             "degrees; give e.g. 45 (90 turns the limit off)")
        out["max_view_angle"] = float(angle)
    if right is not None:
        out["right_images"] = [right] if isinstance(right, str) else list(right)
    if cal is not None:
        out["calibration"] = Path(cal)
    return out


def camera_summary(results_path) -> list:
    """Lines about the 3-D or lens-corrected results of a results file (none without them)."""
    from dic.sequence.h5file import open_h5
    from dic.sequence.stereofile import info_lines

    with open_h5(Path(results_path), "r", "read", locking=False) as f:
        return info_lines(f)


def write_camera_maps(results_path, folder, reference_path) -> list:
    """Two cameras: ``surface_W.png`` (last frame) and ``surface_shape.png`` into the output
    folder; nothing for other results files. Returns the files written."""
    from dic.figures import save_figure
    from dic.figures.surface import surface_map
    from dic.images.io import read_image
    from dic.sequence.stereofile import has_stereo

    if not has_stereo(results_path):
        return []
    image = read_image(reference_path, name="reference image")
    written = []
    for quantity, name in (("W", "surface_W.png"), ("shape", "surface_shape.png")):
        fig, _ = surface_map(results_path, -1, quantity, image=image)
        save_figure(fig, Path(folder) / name)   # written atomically: never half a file
        written.append(Path(folder) / name)
    return written
