"""The ``dic run`` and ``dic info`` commands: an image sequence into a results file, and a
summary of one.

``register(subparsers)`` adds both commands; with ``--config`` and an output folder, ``dic run``
goes on to what the analysis file's ``[tensile]`` and ``[report]`` tables ask for
(:func:`dic.workflow.run.finish`).
"""

from __future__ import annotations

import argparse
import glob
import logging
import sys
import time
from pathlib import Path

from dic.cli.calibrate import (add_camera_options, camera_settings, camera_summary,
                               write_camera_maps)
from dic.cli.types import numbers, positive_float, positive_int, rectangle
from dic.limits import DEFAULT_MAX_SIGMA
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["register", "RESULTS_NAME"]

EXIT_OK, EXIT_INTERRUPTED = 0, 130

log = logging.getLogger("dic.cli")

#: name of the results file inside an output folder
RESULTS_NAME = "results.h5"
_RESULTS_SUFFIXES = (".h5", ".hdf5")

# defaults of dic.track, shown in --help and used when neither option nor analysis file sets one
_DEFAULTS = dict(subset=21, step=10, shape_function="auto", interpolation="quintic",
                 min_zncc=0.9, max_sigma=DEFAULT_MAX_SIGMA, search=60, block=8, reference=0)
_STRAIN_DEFAULTS = dict(window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE)


# --------------------------------------------------------------------------------------------
# argument parsing
# --------------------------------------------------------------------------------------------


def register(subparsers):
    """Add the ``run`` and ``info`` commands to an argparse sub-parsers object."""
    _add_run(subparsers)
    _add_info(subparsers)


def _scale_line(text):
    values = numbers(text, 5, "X0,Y0,X1,Y1,MM", "69.5,120,569.5,120,40", unit="px and mm")
    from dic.workflow.config import scale_from_line

    try:
        return scale_from_line(values[:4], values[4])
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _frame_range(text):
    """``START:STOP:STRIDE`` (any part may be empty, as in a Python slice) -> slice."""
    parts = str(text).split(":")
    try:
        if not 1 <= len(parts) <= 3 or (len(parts) == 1 and not parts[0].strip()):
            raise ValueError
        values = [int(p) if p.strip() else None for p in parts]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected START:STOP:STRIDE (image positions from 0, STOP not included; parts may "
            f"be left out, e.g. 0:40, 10:, ::2); got {text!r}") from None
    if len(values) == 1:  # one number: that image only
        return slice(values[0], None if values[0] == -1 else values[0] + 1, None)
    values += [None] * (3 - len(values))
    if values[2] is not None and values[2] < 1:
        raise argparse.ArgumentTypeError(f"STRIDE must be at least 1; got {text!r}")
    return slice(*values)


def _measure(text):
    from dic.strain import canonical_measure

    try:
        return canonical_measure(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _add_run(commands):
    d = _DEFAULTS
    run = commands.add_parser(
        "run", help="track an image sequence into a results file",
        description="Track a sequence of images: every image is matched against the reference "
                    "image (the first one, or --reference), each starting from the previous "
                    "image's result; when the match degrades the reference moves on and the "
                    "displacements are carried back to the first reference (Lagrangian). The "
                    "results go into one HDF5 results file, frame by frame: a run that is "
                    "stopped (Ctrl-C, a crash, a full disk) keeps every completed frame, and "
                    "the same command run again carries on after the last one.",
        epilog="Folders and quoted patterns ('frames/*.tif') are listed in natural order "
               "(img2 before img10); separate arguments keep the order given. Points are in "
               "reference-image pixels: x is the column, y the row (downwards). Options "
               "override the analysis file (--config). Exit codes: 0 done, 2 bad input, "
               "130 interrupted (Ctrl-C, SIGTERM or SIGHUP: the run stops after the frame "
               "being written).")
    run.add_argument("images", nargs="*", metavar="IMAGES",
                     help="image files, folders or glob patterns (PNG, TIFF, BMP, JPEG); "
                          "default: 'images' of the analysis file")
    run.add_argument("--config", metavar="TOML", type=Path,
                     help="analysis file with the settings (TOML; see the README)")
    run.add_argument("--out", metavar="PATH",
                     help="results file if it ends in .h5, else an output folder that receives "
                          f"{RESULTS_NAME} plus a table (CSV) and an axial strain map (PNG) "
                          "per image (created if missing); default: 'out' of the analysis "
                          "file")
    run.add_argument("--reference", type=int, metavar="N",
                     help="position of the reference image in the image list, from 0 "
                          f"(default: {d['reference']}, the first)")
    run.add_argument("--frames", type=_frame_range, metavar="START:STOP:STRIDE",
                     help="analyse only these image positions, as a Python slice (STOP not "
                          "included), e.g. 0:100:2 (default: all)")
    m = run.add_argument_group("matching")
    m.add_argument("--subset", type=int, metavar="PX",
                   help=f"subset size in px, odd, at least 7 (default: {d['subset']})")
    m.add_argument("--step", type=int, metavar="PX",
                   help=f"grid spacing in px (default: {d['step']})")
    where = m.add_mutually_exclusive_group()
    where.add_argument("--roi", type=rectangle, metavar="X0,Y0,X1,Y1",
                       help="measure inside this rectangle only (px, corners included)")
    where.add_argument("--roi-mask", metavar="PATH",
                       help="measure where this mask image (same size) is non-zero")
    m.add_argument("--shape-function", choices=("auto", "affine", "quadratic"),
                   help=f"subset shape function (default: {d['shape_function']})")
    m.add_argument("--interpolation", choices=("quintic", "cubic"),
                   help=f"B-spline interpolation of the deformed image (default: "
                        f"{d['interpolation']})")
    m.add_argument("--min-zncc", type=float, metavar="Z",
                   help=f"reject matches with a lower ZNCC (default: {d['min_zncc']})")
    m.add_argument("--max-sigma", type=positive_float, metavar="PX",
                   help=f"leave out points whose standard deviation of u or v exceeds this "
                        f"(px; default: {d['max_sigma']:g}; 0.2 leaves the less certain ones "
                        f"out)")
    m.add_argument("--search", type=int, metavar="PX",
                   help=f"seed search radius in px for the first image (default: {d['search']})")
    m.add_argument("--block", type=positive_int, metavar="N",
                   help=f"images per block of parallel work; part of the settings, since it "
                        f"fixes which image each one starts from (default: {d['block']})")
    s = run.add_argument_group("scale and strain")
    scale = s.add_mutually_exclusive_group()
    scale.add_argument("--scale", type=positive_float, metavar="MM_PER_PX",
                       help="image scale in mm per pixel, stored with the results")
    scale.add_argument("--scale-line", type=_scale_line, metavar="X0,Y0,X1,Y1,MM",
                       help="image scale from two points (px) a known distance (mm) apart")
    s.add_argument("--strain-window", type=int, metavar="N",
                   help="also compute and store strain for every frame, over a window of N x N "
                        f"grid points (odd, at least 3; default with --strain-measure: "
                        f"{_STRAIN_DEFAULTS['window']})")
    s.add_argument("--strain-measure", type=_measure, metavar="NAME",
                   help="strain measure to store: green-lagrange, infinitesimal, "
                        "euler-almansi, hencky or engineering (default with --strain-window: "
                        f"{_STRAIN_DEFAULTS['measure']})")
    add_camera_options(run)
    p = run.add_argument_group("where to run")
    here = p.add_mutually_exclusive_group()
    here.add_argument("--workers", type=positive_int, metavar="N",
                      help="N single-threaded worker processes, each on blocks of images "
                           "(default: this process, the matching on all cores)")
    here.add_argument("--cluster", metavar="ADDRESS",
                      help="run blocks of images on this Dask scheduler, e.g. "
                           "tcp://10.0.0.5:8786 (needs dask.distributed)")
    run.add_argument("--animate", nargs="?", const="gif", choices=("gif", "mp4"),
                     metavar="FORMAT",
                     help="with an output folder: also write an animation of the strain "
                          "(strain_xx.gif; FORMAT gif or mp4; component and speed from the "
                          "analysis file's [animation] table)")
    run.add_argument("--overwrite", action="store_true",
                     help="replace an existing results file instead of resuming it")
    talk = run.add_mutually_exclusive_group()
    talk.add_argument("--quiet", "-q", action="store_true",
                      help="no progress bar, print errors and warnings only")
    talk.add_argument("--verbose", "-v", action="store_true",
                      help="print more detail (one line per frame, reference changes)")
    run.set_defaults(func=_run)


def _add_info(commands):
    info = commands.add_parser(
        "info", help="summarise a results file",
        description="Print a summary of a results file: frames done and planned, point grid, "
                    "settings, reference changes, scale, stored strain, and the share of "
                    "measured points per frame.")
    info.add_argument("results", metavar="RESULTS",
                      help=f"results file, or an output folder holding {RESULTS_NAME}")
    info.set_defaults(func=_info)


# --------------------------------------------------------------------------------------------
# the run command: settings
# --------------------------------------------------------------------------------------------
#: name starts of the per-image maps and tables this command writes into an output folder
OWN_OUTPUTS = ("displacements_", "strain_", "surface_")


def _own_output(path, folder):
    """True for a map or table this command wrote into ``folder``."""
    return (folder is not None and path.parent == folder.resolve()
            and path.name.startswith(OWN_OUTPUTS)
            and path.suffix.lower() in (".png", ".csv", ".json", ".gif", ".mp4"))


def _warn_order(files):
    """Warn when image files named one by one are not in natural order (a shell's glob)."""
    from dic.images.io import natural_sorted

    if len(files) > 2 and natural_sorted(files) != files:
        shown = ", ".join(p.name for p in files[:4])
        log.warning("images: the %d files named one by one are not in natural order (%s, ...), "
                    "so they are analysed in the order given; an unquoted pattern is sorted "
                    "letter by letter by the shell: quote it ('frames/img*.png') for natural "
                    "order (img2 before img10)", len(files), shown)


def _collect_images(arguments, folder=None):
    """Image paths from files, folders and patterns: argument order, natural order within each.

    Paths are made absolute, so that the same images give the same results file (and resume)
    whether named on the command line or in an analysis file. The displacement maps and
    tables a run writes into its output folder ``folder`` are left out.
    """
    from dic.images.io import list_images

    found, seen = [], set()
    files = [Path(a) for a in arguments if Path(a).is_file()]
    if len(files) == len(arguments):
        _warn_order(files)
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
            if _own_output(key, folder) and not p.is_file():
                continue  # this tool's own output, not an image of the test
            if key not in seen:
                seen.add(key)
                found.append(key)
    return found


def _analysis(args):
    """Merged settings: analysis file first, then the options given on the command line.

    Returns ``(images, out, kwargs, after)``: ``kwargs`` for :func:`dic.track`, ``after`` the
    analysis file's ``tensile`` and ``report`` tables (for :func:`dic.workflow.run.finish`).
    """
    from dic.workflow.config import load_analysis

    conf = load_analysis(args.config) if args.config is not None else {}
    source = f"the analysis file '{args.config}'" if args.config is not None else None

    if args.images:
        images = list(args.images)
    elif "images" in conf:
        images = [conf["images"]] if isinstance(conf["images"], str) else list(conf["images"])
    else:
        raise ValueError("images: none given; name image files, a folder or a pattern, or set "
                         "images = \"frames/*.tif\" in the analysis file (--config)")
    out = args.out if args.out is not None else conf.get("out")
    if out is None:
        raise ValueError("--out: not given; pass --out run.h5 (results file) or --out FOLDER, "
                         "or set out = \"run.h5\" in the analysis file (--config)")

    kw = {}
    for key in ("reference", "frames", "subset", "step", "shape_function", "interpolation",
                "min_zncc", "max_sigma", "search", "block", "roi", "scale", "workers",
                "cluster"):
        if key in conf:
            kw[key] = conf[key]
    given = dict(reference=args.reference, frames=args.frames, subset=args.subset,
                 step=args.step, shape_function=args.shape_function,
                 interpolation=args.interpolation, min_zncc=args.min_zncc,
                 max_sigma=args.max_sigma, search=args.search, block=args.block,
                 workers=args.workers, cluster=args.cluster)
    if args.roi is not None or args.roi_mask is not None:
        given["roi"] = args.roi if args.roi is not None else args.roi_mask
    if args.scale is not None or args.scale_line is not None:
        given["scale"] = args.scale if args.scale is not None else args.scale_line
    if args.workers is not None:  # one place to run: the command line's choice wins
        kw.pop("cluster", None)
    if args.cluster is not None:
        kw.pop("workers", None)
    kw.update({k: v for k, v in given.items() if v is not None})

    strain = dict(conf.get("strain", {}))
    if args.strain_window is not None:
        strain["window"] = args.strain_window
    if args.strain_measure is not None:
        strain["measure"] = args.strain_measure
    if strain:
        # every key spelled out, so that the stored settings (compared on resume) are the
        # same however they were given
        strain = {**_STRAIN_DEFAULTS, **strain}
        strain["measure"] = _checked_measure(strain["measure"], source)
        w = strain["window"]
        if isinstance(w, bool) or not isinstance(w, int) or w < 3 or w % 2 == 0:
            raise ValueError(f"strain window: {w!r} is not an odd whole number of at least 3; "
                             f"use e.g. --strain-window 9")
        kw["strain"] = strain
    kw.update(camera_settings(args, conf))
    after = {k: conf[k] for k in ("tensile", "report", "noise", "animation") if k in conf}
    if args.animate is not None:
        after["animation"] = {**after.get("animation", {}), "write": True,
                              "format": args.animate}
    if after:
        after["strain"] = kw.get("strain", {})
    return images, out, kw, after


def _checked_measure(name, source):
    from dic.strain import canonical_measure

    try:
        return canonical_measure(name)
    except ValueError as exc:
        where = f" (in {source})" if source else ""
        raise ValueError(f"strain measure{where}: {exc}") from None


def _outputs(out):
    """(results file, output folder or None) for ``--out``."""
    p = Path(out)
    if p.suffix.lower() in _RESULTS_SUFFIXES:
        if p.is_dir():
            raise ValueError(f"--out: '{p}' is a folder; give a results file name ending in "
                             f".h5 or a folder name without that ending")
        return p, None
    if p.exists() and not p.is_dir():
        raise ValueError(f"--out: '{p}' is a file but not a results file (.h5); give a "
                         f"folder, or a results file name ending in .h5")
    return p / RESULTS_NAME, p


def _check_plan(images, kw, folder):
    """Checks that are cheap and must come before anything is written."""
    n = len(images)
    if n < 2:
        raise ValueError(f"images: found {n} image; give a reference image and at least one "
                         f"image to compare with it")
    ref = kw.get("reference", 0)
    if isinstance(ref, bool) or not isinstance(ref, int) or not 0 <= ref < n:
        raise ValueError(f"--reference: {ref!r} is not a position in the list of {n} images; "
                         f"use 0 to {n - 1}")
    frames = kw.get("frames")
    if frames is not None and not list(range(n))[frames]:
        raise ValueError(f"--frames: {frames.start}:{frames.stop}:{frames.step} selects none "
                         f"of the {n} images; use positions from 0 to {n - 1}")
    if folder is not None:
        chosen = [images[k] for k in (range(n) if frames is None else range(n)[frames])
                  if k != ref]
        stems = {}
        for p in chosen:
            if p.stem in stems:
                raise ValueError(f"images: '{stems[p.stem]}' and '{p}' share the name "
                                 f"'{p.stem}', so their tables and maps would overwrite each "
                                 f"other; rename one, or give --out a results file (.h5)")
            stems[p.stem] = p


# --------------------------------------------------------------------------------------------
# the run command: per-frame exports into the output folder
# --------------------------------------------------------------------------------------------
def _export_names(folder, image):
    stem = Path(image).stem
    return folder / f"displacements_{stem}.csv", folder / f"strain_{stem}.png"


def _default_window(shape, preferred=9):
    """The strain window of the maps when the analysis sets none: ``preferred`` points, or the
    largest odd window (at least 3) that fits a smaller grid of points."""
    fit = min(shape)
    fit -= 1 - fit % 2
    return max(3, min(preferred, fit))


def _export(results, folder, reference_path, *, redo, bar, verbose, out, tensile=None):
    """Table (CSV with its JSON description) and axial strain map of every completed frame
    that lacks them; the maps share one colour scale and show the gauges.

    Returns the number of files written.
    """
    import numpy as np

    from dic.export import frame_to_csv, sidecar_path
    from dic.images.io import read_image
    from dic.figures.common import MEASURE_TITLES, strain_limits
    from dic.figures.series import MapSeries
    from dic.workflow.run import axial_component, gauge_lines

    st = results.settings
    frames, ref = st.get("frames", list(range(results.n_frames))), st.get("reference", 0)
    strain = st.get("strain") or {}
    names = results.image_names
    ref_name = Path(reference_path).name
    todo = []
    for k in range(len(results)):
        if frames[k] == ref:
            continue
        csv, png = _export_names(folder, names[k])
        if redo or not (csv.is_file() and png.is_file() and sidecar_path(csv).is_file()):
            todo.append(k)
    if not todo:
        return 0
    never = None
    measure = strain.get("measure", "green-lagrange")
    window = int(strain["window"]) if "window" in strain else _default_window(results.shape)
    comp = axial_component(results)
    # one colour scale for every map, so that maps of different frames compare
    limits = strain_limits(results, comp, window=window, measure=measure)
    shapes = gauge_lines(results, tensile)
    written = 0
    refs = results.reference_indices
    maps = None  # the maps' shared parts are drawn once (dic.figures.series)
    progress = _bar(total=len(todo), desc="exporting", enabled=bar)
    try:
        for k in todo:
            field = results.field(k)
            if maps is None:
                reference_image = read_image(reference_path, name="reference image")
                maps = MapSeries(reference_image, component=comp, limits=limits,
                                 scale=results.scale, gauges=shapes, alpha=0.85)
            name = Path(names[k]).name
            against = int(refs[k])
            note = dict(image=name, reference_image=ref_name)
            if against != ref:
                note["matched_against"] = f"image {against}"
            csv, png = _export_names(folder, names[k])
            # the columns of dic export's tables; 17 digits give the stored numbers bit for
            # bit; written atomically: never half a file
            st_k = results.strain(k, window=window, measure=measure)
            frame_to_csv(results, k, csv, window=window, measure=measure, digits=17,
                         about=note, field=field, strain=st_k)
            nv = int(np.count_nonzero(np.isfinite(getattr(st_k, comp))))
            maps.save(st_k, png,  # written atomically: never half a file
                      title=f"Axial strain {comp} ({MEASURE_TITLES.get(measure, measure)}), "
                            f"{name} against {ref_name}\n{nv} of {field.n_points} points have "
                            f"a strain; one colour scale for every frame")
            written += 3
            if verbose:
                if never is None:
                    never = _never_measurable(results)
                _write_line(f"frame {k} ({name}): {_summary(field, never)}", out)
            if progress is not None:
                progress.update(1)
    finally:
        if progress is not None:
            progress.close()
    return written


# --------------------------------------------------------------------------------------------
# the run command
# --------------------------------------------------------------------------------------------
def _terminal():
    """True when stderr is a terminal (the progress bars are drawn only there)."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


def _bar(*, total, desc, enabled):
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit="frame", file=sys.stderr, dynamic_ncols=True)


def _write_line(text, out):
    from tqdm import tqdm

    tqdm.write(text, file=out)


def _frames_done(path):
    """Completed frames in a results file, or None if there is no readable one."""
    from dic.sequence import Results

    try:
        with Results.open(path) as r:
            return len(r), r.n_frames
    except (OSError, ValueError, KeyError):
        return None


# stored setting names -> the options that set them (for messages)
_SETTING_OPTIONS = {"strain.window": "--strain-window", "strain.measure": "--strain-measure",
                    "subset": "--subset", "step": "--step", "shape_function": "--shape-function",
                    "interpolation": "--interpolation", "min_zncc": "--min-zncc",
                    "max_sigma": "--max-sigma",
                    "search": "--search", "block": "--block", "reference": "--reference",
                    "frames": "--frames", "roi": "--roi"}


def _with_options(message):
    """A settings mismatch with each differing setting followed by its option."""
    for name, option in _SETTING_OPTIONS.items():
        for lead in ("(", "; "):
            message = message.replace(f"{lead}{name}: ", f"{lead}{name} ({option}): ")
    return message


def _load_kernels(kw):
    """Compile (or load from the cache) the numerical kernels on a small synthetic pair with the
    run's matching settings; returns the seconds it took, reported apart from the frame rate.

    The pair is smoothed random noise and a shifted, slightly bent copy, made with numpy and
    scipy: the analytic speckle of dic.images.synth would compile kernels of its own (about 1 s
    on a fresh install) that the run never uses. The bend makes the default shape function
    ('auto') match some points to second order, so its solver (compiled meanwhile by a second
    process on a fresh install, see dic.matching._ahead) is ready before the clock starts
    too."""
    import numpy as np
    from scipy import ndimage

    from dic.matching import SHAPE_FUNCTIONS, compile_ahead, correlate

    t0 = time.perf_counter()
    shape = str(kw.get("shape_function", _DEFAULTS["shape_function"])).lower()
    # both solvers side by side on a fresh install, unless the run is first order only
    compile_ahead(second_order=SHAPE_FUNCTIONS.get(shape, 0) != 1)
    subset = int(kw.get("subset", _DEFAULTS["subset"]))
    size = max(4 * subset, 64)
    noise = np.random.default_rng(1).normal(size=(size, size))
    ref = ndimage.gaussian_filter(noise, 1.5, mode="wrap")
    ref = 128.0 + 100.0 * ref / np.abs(ref).max()
    yy, xx = np.mgrid[0:size, 0:size].astype(float)
    bend = 64e-3 / size * (xx - size / 2) ** 2
    moved = ndimage.map_coordinates(ref, [yy - 0.3, xx + 0.2 - bend], order=3, mode="grid-wrap")
    try:
        correlate(ref, moved, subset=subset, step=max(subset // 2, 1), shape_function=shape,
                  interpolation=kw.get("interpolation", _DEFAULTS["interpolation"]),
                  search=4)
    except (ValueError, ArithmeticError):  # odd settings: the run itself reports them
        pass
    return time.perf_counter() - t0


def _never_measurable(results):
    """Grid points that no frame can measure: their subset leaves the reference image or the
    region of interest (read from the reference frame, else from frame 0)."""
    import numpy as np

    from dic.field import Reason

    st = results.settings
    frames, ref = st.get("frames", list(range(results.n_frames))), st.get("reference", 0)
    k = frames.index(ref) if ref in frames and frames.index(ref) < len(results) else 0
    reason = np.asarray(results.field(k).reason)
    return np.isin(reason, (int(Reason.OUTSIDE_IMAGE), int(Reason.OUTSIDE_ROI)))


def _summary(field, never):
    """One line on a frame: measured points among those that can be measured."""
    import numpy as np

    from dic.field import Reason

    reason = np.asarray(field.reason)
    can = ~never
    n, nv = int(can.sum()), int(np.count_nonzero((reason == 0) & can))
    parts = [f"{nv} of {n} measurable points measured ({100.0 * nv / max(n, 1):.1f} %)"]
    other = {}
    for code in np.unique(reason[can]):
        if code:
            other[Reason(int(code)).name.lower().replace("_", " ")] = int(
                np.count_nonzero(reason[can] == code))
    if other:
        parts.append(", ".join(f"{k}: {c}" for k, c in sorted(other.items(),
                                                               key=lambda kv: -kv[1])))
    if never.any():
        parts.append(f"{int(never.sum())} more grid points lie too near the image edge or "
                     f"outside the region of interest ever to be measured")
    return "; ".join(parts)


def _run(args, out=None):
    from dic.errors import ResultsMismatch
    from dic.sequence.tracker import track

    out = sys.stdout if out is None else out

    images, target, kw, after = _analysis(args)
    h5, folder = _outputs(target)
    paths = _collect_images(images, folder)
    _check_plan(paths, kw, folder)
    show = not args.quiet
    bar = show and _terminal()

    made_folder = None
    if folder is not None and not folder.is_dir():
        try:
            folder.mkdir(parents=True)
        except OSError as exc:
            raise OSError(f"--out: cannot create folder '{folder}' ({exc.strerror or exc}); "
                          f"choose another folder") from None
        made_folder = folder
    before = None if args.overwrite else _frames_done(h5) if h5.exists() else None
    if before is not None and before[0]:
        log.info("%s holds %d of %d frames; carrying on after frame %d", h5, before[0],
                 before[1], before[0] - 1)
    log.info("%d images, results file %s, settings %s", len(paths), h5,
             {k: v for k, v in kw.items() if k not in ("roi",)})
    finished = before is not None and before[0] >= before[1]
    compile_s = 0.0 if finished else _load_kernels(kw)
    t0 = time.perf_counter()
    try:
        try:
            from dic.sequence.tracker import stop_on_interrupt

            with stop_on_interrupt():
                results = track(paths, h5, overwrite=args.overwrite, progress=bar, **kw)
        except ResultsMismatch as exc:  # another analysis's file: --overwrite replaces it
            raise ResultsMismatch(f"{_with_options(str(exc))}, or add --overwrite to replace "
                                  f"it", fix=f"{exc.fix}, or add --overwrite to replace it") \
                from None
    except KeyboardInterrupt:
        from dic.sequence.tracker import stop_signal

        done = _frames_done(h5)
        kept = (f"{done[0]} of {done[1]} frames are saved in '{h5}'; run the same command "
                f"again to carry on" if done else "nothing was saved")
        by = stop_signal()
        how = f"stopped by {by}" if by and by != "SIGINT" else "interrupted"
        print(f"dic: {how}; {kept}", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BaseException:
        if made_folder is not None:
            try:
                made_folder.rmdir()  # only if still empty: leave no empty folder behind
            except OSError:
                pass
        raise
    elapsed = time.perf_counter() - t0
    try:
        n, nf = len(results), results.n_frames
        new = n - (before[0] if before else 0)
        updates = [int(u) for u in results.reference_updates]
        written = 0
        if folder is not None:
            written = _export(results, folder, paths[kw.get("reference", 0)],
                              redo=before is None, bar=bar,
                              verbose=args.verbose and show, out=out,
                              tensile=after.get("tensile"))
            written += len(write_camera_maps(h5, folder, paths[kw.get("reference", 0)]))
        elif args.verbose and show:
            never = _never_measurable(results)
            for k in range(n):
                _write_line(f"frame {k} ({Path(results.image_names[k]).name}): "
                            f"{_summary(results.field(k), never)}", out)
        if show:
            rate = f", {new / elapsed:.2f} frames/s" if new and elapsed > 0 else ""
            kept = f" ({n - new} were already done)" if n - new else ""
            if new:
                print(f"tracked {new} frame(s) in {elapsed:.1f} s{rate}{kept}: {n} of {nf} "
                      f"frames in '{h5}'", file=out)
                print(f"numerical kernels compiled or loaded in {compile_s:.1f} s before "
                      f"tracking (not counted in the rate; a first run compiles them, later "
                      f"runs load them)", file=out)
            else:
                print(f"nothing to track: all {n} of {nf} frames are in '{h5}'" if n == nf
                      else f"tracked 0 frames: {n} of {nf} frames in '{h5}'", file=out)
            if updates:
                print("reference image changed at frames " + ", ".join(map(str, updates)),
                      file=out)
            if n:
                print(f"last frame ({Path(results.image_names[n - 1]).name}): "
                      f"{_summary(results.field(n - 1), _never_measurable(results))}",
                      file=out)
            for line in camera_summary(h5):   # calibrated cameras: 3-D or lens-corrected
                print(line, file=out)
            if folder is not None:
                print(f"wrote {written} files (tables as CSV, each with a JSON description, "
                      f"and strain maps as PNG) to '{folder}'" if written else
                      f"displacement tables and maps in '{folder}' were already up to date",
                      file=out)
    except KeyboardInterrupt:
        print(f"dic: interrupted while writing tables and maps; all {len(results)} frames are "
              f"saved in '{h5}'; run the same command again to finish them", file=sys.stderr)
        return EXIT_INTERRUPTED
    finally:
        results.close()
    if folder is not None and after and n == nf:
        # the analysis file asks for more: tensile results and the report, into the folder
        from dic.workflow.run import finish

        try:
            done = finish(h5, folder, after)
        except KeyboardInterrupt:
            print(f"dic: interrupted while writing the tensile results and report; all {n} "
                  f"frames are saved in '{h5}'", file=sys.stderr)
            return EXIT_INTERRUPTED
        if show:
            for name in ("tensile", "animation", "report_html", "report_pdf"):
                if name in done:
                    print(f"wrote {done[name]}", file=out)
    return EXIT_OK


# --------------------------------------------------------------------------------------------
# the info command
# --------------------------------------------------------------------------------------------
def _measured_share(path):
    """One line: share of measured points per frame (min, median, max), read frame by frame."""
    import h5py
    import numpy as np

    import json

    from dic.field import Reason

    with h5py.File(path, "r", locking=False) as f:
        n = int(f["n_done"][()])
        if not n:
            return None
        reason = f["frames/reason"]
        st = json.loads(f.attrs.get("settings", "{}"))
        frames, ref = list(st.get("frames", [])), st.get("reference", 0)
        k_ref = frames.index(ref) if ref in frames and frames.index(ref) < n else 0
        # grid points whose subset leaves the ROI or the reference image: never measurable
        can = ~np.isin(reason[k_ref], (int(Reason.OUTSIDE_ROI), int(Reason.OUTSIDE_IMAGE)))
        total = max(int(can.sum()), 1)
        never = int(can.size - can.sum())
        share = np.array([np.count_nonzero((reason[k] == 0) & can) / total for k in range(n)])
    lo, hi = int(np.argmin(share)), int(np.argmax(share))
    return (f"measured points per frame (of the {total} that can be measured; {never} more "
            f"grid points never can): lowest {100 * share[lo]:.1f} % "
            f"(frame {lo}), median {100 * np.median(share):.1f} %, highest "
            f"{100 * share[hi]:.1f} % (frame {hi})")


def _info(args, out=None):
    from dic.sequence import results_info

    out = sys.stdout if out is None else out

    p = Path(args.results)
    if p.is_dir():
        if not (p / RESULTS_NAME).is_file():
            raise FileNotFoundError(f"RESULTS: folder '{p}' holds no {RESULTS_NAME}; give a "
                                    f"results file or the --out folder of a run")
        p = p / RESULTS_NAME
    elif not p.exists():
        raise FileNotFoundError(f"RESULTS: no such file '{p}'; check the path")
    text = results_info(p)
    print(text, file=out)
    share = _measured_share(p)
    if share:
        print(share, file=out)
    return EXIT_OK


# --------------------------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------------------------
