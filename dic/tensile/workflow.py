"""From a results file and the testing machine's force log to tensile results.

One library path used by ``dic tensile``, by ``dic run --config`` (its ``[tensile]`` table) and by
the report: gauges placed on the results, the force log read and put on the images' clock, the
gauge histories with time and force, and the tensile results. The stress-strain figure is drawn
by the caller (the outputs stage), so this module writes only tables.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field, fields
from pathlib import Path

import numpy as np

from dic.errors import InputError

__all__ = ["TensileSetup", "TensileOutcome", "tensile_from_results", "dense_curve", "peak_force",
           "sidecar_path", "write_sidecar", "read_sidecar"]

log = logging.getLogger(__name__)


@dataclass
class TensileSetup:
    """Everything besides the results file that tensile results need.

    Attributes
    ----------
    force_log : path
        The testing machine's CSV export.
    time_column, force_column : str or int
        Header names (case-insensitive) or column numbers counted from 0.
    crosshead_column : str or int, optional
        Crosshead travel, kept in the gauge histories.
    force_unit, time_unit, crosshead_unit : str
        ``N``/``kN``/``lbf``; ``s``/``ms``/``min``; ``mm``/``um``/``in``.
    delimiter, decimal : str, optional
        Field delimiter and decimal mark of the log (detected when None).
    skip_bad_rows : bool
        Drop rows with empty or non-numeric values instead of stopping.
    frame_times : path, optional
        Per-image times (CSV). At most one of ``frame_times``, ``frame_interval``,
        ``image_metadata`` and ``by_index``; with none, the image times stored in the results
        file are used.
    frame_interval : float, optional
        Constant time between images, s.
    image_metadata : bool
        Capture times from the image files.
    by_index : bool
        Log row k belongs to image k.
    trigger_offset : float
        Time on the force log's clock at the camera's time zero, s.
    width, thickness, area : float, optional
        The specimen's section: width and thickness in mm, or the area in mm^2.
    gauge_length, transverse_length : float, optional
        Gauge lengths in mm (default: 80 % of the measured length and width).
    axis : {"auto", "x", "y"}
        Specimen axis in the image.
    scale : float, optional
        mm per px, when the results file has none.
    modulus_range : (float, float), optional
        Stress range of the modulus fit, MPa.
    offsets : tuple of float
        Proof-strength offsets, % strain.
    n_range : (float, float), optional
        Strain range of n and r, %.
    """

    force_log: Path
    time_column: str | int
    force_column: str | int
    crosshead_column: str | int | None = None
    force_unit: str = "N"
    time_unit: str = "s"
    crosshead_unit: str = "mm"
    delimiter: str | None = None
    decimal: str | None = None
    skip_bad_rows: bool = False
    frame_times: Path | None = None
    frame_interval: float | None = None
    image_metadata: bool = False
    by_index: bool = False
    trigger_offset: float = 0.0
    width: float | None = None
    thickness: float | None = None
    area: float | None = None
    gauge_length: float | None = None
    transverse_length: float | None = None
    axis: str = "auto"
    scale: float | None = None
    modulus_range: tuple | None = None
    offsets: tuple = (0.2,)
    n_range: tuple | None = None

    @classmethod
    def from_table(cls, t: dict) -> "TensileSetup":
        """The set-up from the ``[tensile]`` table of an analysis file (see
        :mod:`dic.workflow.config` for its keys)."""
        missing = [k for k in ("force_log", "time_column", "force_column") if k not in t]
        if missing:
            raise InputError(f"[tensile] needs {', '.join(missing)} (the force log and its "
                             "time and force columns)")

        def pair(key):
            v = t.get(key)
            if v is None:
                return None
            if len(v) != 2:
                raise InputError(f"tensile.{key} must be two numbers [low, high]")
            return (float(v[0]), float(v[1]))

        return cls(
            force_log=Path(t["force_log"]), time_column=t["time_column"],
            force_column=t["force_column"], crosshead_column=t.get("crosshead_column"),
            force_unit=t.get("force_unit", "N"), time_unit=t.get("time_unit", "s"),
            frame_times=Path(t["frame_times"]) if "frame_times" in t else None,
            frame_interval=t.get("frame_interval"),
            trigger_offset=float(t.get("trigger_offset", 0.0)),
            width=t.get("width_mm"), thickness=t.get("thickness_mm"), area=t.get("area_mm2"),
            gauge_length=t.get("gauge_length_mm"),
            transverse_length=t.get("transverse_length_mm"),
            modulus_range=pair("modulus_range_mpa"),
            offsets=tuple(float(v) for v in t.get("offsets_percent", [0.2])),
            n_range=pair("n_range_percent"))

    def check(self) -> None:
        """Checks that need no file, so a typo fails before any work.

        Raises
        ------
        dic.errors.InputError
            Unknown unit, or the section given both ways or not at all.
        """
        from dic.tensile.forcelog import FORCE_UNITS, LENGTH_UNITS, TIME_UNITS, unit_factor

        unit_factor(self.force_unit, FORCE_UNITS, "--force-unit")
        unit_factor(self.time_unit, TIME_UNITS, "--time-unit")
        if self.crosshead_column is not None:
            unit_factor(self.crosshead_unit, LENGTH_UNITS, "--crosshead-unit")
        if self.area is not None and (self.width is not None or self.thickness is not None):
            raise InputError("--area: give either --area or --width and --thickness, not both")
        if self.area is None and (self.width is None or self.thickness is None):
            raise InputError("--width/--thickness: give the specimen's width and thickness in "
                             "mm (or --area in mm^2)")

    def replace(self, **changes) -> "TensileSetup":
        """A copy with some fields changed."""
        known = {f.name for f in fields(self)}
        bad = sorted(set(changes) - known)
        if bad:
            raise InputError(f"TensileSetup has no field {bad[0]!r}")
        values = {f.name: getattr(self, f.name) for f in fields(self)}
        values.update(changes)
        return type(self)(**values)


@dataclass
class TensileOutcome:
    """What :func:`tensile_from_results` made.

    Attributes
    ----------
    history : dic.tensile.histories.History
        Gauge histories with time and force.
    results : dic.tensile.results.TensileResults
    folder : Path
        Where the tables were written.
    files : dict
        Paths written, by name (``gauges``, ``tensile_json``, ``tensile_csv``).
    """

    history: object
    results: object
    folder: Path
    files: dict = field(default_factory=dict)


def tensile_from_results(results_path, setup: TensileSetup, out_dir=None) -> TensileOutcome:
    """Gauges, force synchronisation and tensile results from a results file; writes the tables.

    Parameters
    ----------
    results_path : path
        A results file of at least four completed frames.
    setup : TensileSetup
    out_dir : path, optional
        Output folder (created if missing; default: the results file's folder). It receives
        ``gauges.csv``, ``tensile.json`` and ``tensile.csv``, written only once everything
        has worked; the gauge histories and results are also stored beside the results file
        (:func:`sidecar_path`), where ``dic report`` finds them.

    Returns
    -------
    TensileOutcome

    Raises
    ------
    dic.errors.InputError, OSError
        Bad input, with a one-line message; nothing is written then.

    References
    ----------
    ISO 6892-1 (proof strength, Rm, Ag), ASTM E111 (modulus), ASTM E132 (Poisson's ratio),
    ISO 10275 (n), ISO 10113 (r): see :func:`dic.tensile.results.tensile_results`.
    """
    from dic.sequence.tracker import load_results
    from dic.tensile import gauges as G
    from dic.tensile.forcelog import read_force_log
    from dic.tensile.forcesync import image_times_from_files, read_frame_times, synchronise
    from dic.tensile.results import engineering_stress, tensile_results

    s = setup
    s.check()
    folder = Path(out_dir) if out_dir is not None else Path(results_path).resolve().parent
    files: dict = {}
    with load_results(results_path) as res:
        if len(res) < 4:
            raise InputError(f"RESULTS: '{results_path}' holds {len(res)} completed frames; a "
                             "tensile curve needs at least four")
        scale = s.scale if s.scale is not None else res.scale
        if scale is None:
            raise InputError(f"--scale: '{results_path}' has no image scale (mm/px); give "
                             "--scale MM_PER_PX")
        # 1. gauges
        axial = G.axial_line(res, s.gauge_length, units="mm", axis=s.axis, scale=scale)
        across = G.transverse_line(res, s.transverse_length, units="mm", axis=s.axis,
                                   scale=scale)
        hist = G.gauge_histories(res, [axial, across], scale=scale)
        n = len(res)
        names = res.image_names[:n]
        # times belong to images: frame k is image number image_index[k] of the sequence
        image_index = np.asarray(res.settings.get("frames", range(n)), dtype=np.int64)[:n]
        stored_times = np.asarray(res.image_times[:n], dtype=float)
    # 2. force log on the images' clock
    flog = read_force_log(s.force_log, time_column=s.time_column,
                          force_column=s.force_column, crosshead_column=s.crosshead_column,
                          time_unit=s.time_unit, force_unit=s.force_unit,
                          crosshead_unit=s.crosshead_unit, delimiter=s.delimiter,
                          decimal=s.decimal, skip_bad_rows=s.skip_bad_rows)
    subset = image_index.size != n or np.any(image_index != np.arange(n))
    if s.by_index and not subset:
        sync = synchronise(flog, n, by_index=True)
    elif s.by_index:
        if image_index.max() >= len(flog):
            raise InputError(f"--by-index: the force log has {len(flog)} rows but the results "
                             f"use image {int(image_index.max())}; give one row per image or "
                             "use --frame-times")
        sync = synchronise(flog, n, image_times=flog.time[image_index])
        sync.method = "by image index (log row k = image k)"
    elif s.frame_interval is not None:
        dt = float(s.frame_interval)
        sync = synchronise(flog, n, image_times=image_index * dt,
                           trigger_offset=s.trigger_offset)
        sync.method = (f"constant time between images {dt:g} s (image number times the "
                       f"interval), trigger offset {s.trigger_offset:g} s")
    else:
        if s.frame_times is not None:
            times = read_frame_times(s.frame_times, names=names)
        elif s.image_metadata:
            times, used = image_times_from_files(names)
            log.info("image times from the files' %s", used)
        else:
            times = stored_times
            if not np.all(np.isfinite(times)):
                raise InputError("the results file holds no image times; give "
                                 "--frame-times, --frame-interval, --image-metadata or "
                                 "--by-index")
        sync = synchronise(flog, n, image_times=times, trigger_offset=s.trigger_offset)
    if subset:
        sync.notes.append(f"the results hold {n} of the images (image numbers "
                          f"{int(image_index[0])}..{int(image_index[-1])}); times are those "
                          "of the images")
    hist = hist.with_time(sync.time).with_force(sync.force)
    if sync.crosshead is not None:
        hist.columns["crosshead"] = sync.crosshead
        hist.units["crosshead"] = "mm"
    hist.notes.append(f"force from '{flog.path.name}' ({sync.method})")
    # 3. stress and results
    stress = engineering_stress(sync.force, width=s.width, thickness=s.thickness, area=s.area)
    area = s.area if s.area is not None else s.width * s.thickness
    peak, peak_how = peak_force(flog)
    peak /= area
    n_range = None if s.n_range is None else (s.n_range[0] / 100, s.n_range[1] / 100)
    strain = hist[f"{axial.name}.engineering"]
    dense, dense_method = dense_curve(sync.time, strain, flog, area)
    results = tensile_results(strain, stress,
                              transverse=hist[f"{across.name}.engineering"],
                              modulus_range=s.modulus_range,
                              offsets=tuple(s.offsets or (0.2,)), n_range=n_range,
                              r_range=n_range, peak_stress=max(peak, float(np.nanmax(stress))),
                              dense=dense, dense_method=dense_method)
    results.notes.extend(sync.notes)
    results.notes.append(f"Rm: {peak_how}")
    results.notes.append(f"strain: gauge line {axial.length:g} mm along the axis, "
                         f"{across.length:g} mm across; force log synchronised "
                         f"{sync.method}; area {area:g} mm^2")
    for w in results.warnings:
        log.warning("%s", w)
    # 4. the tables, written only now, so a failed run leaves none behind
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OSError(f"--out: cannot create folder '{folder}' ({exc.strerror or exc})"
                      ) from None
    files["gauges"] = folder / "gauges.csv"
    hist.to_csv(files["gauges"])
    files["tensile_json"] = folder / "tensile.json"
    files["tensile_csv"] = folder / "tensile.csv"
    results.to_json(files["tensile_json"])
    results.to_csv(files["tensile_csv"])
    files["sidecar"] = write_sidecar(results_path, hist, results)
    return TensileOutcome(history=hist, results=results, folder=folder, files=files)


def peak_force(flog, span=0.25):
    """The largest force of the log after a moving mean over about ``span`` seconds.

    The raw largest sample of a noisy log sits a few noise standard deviations above the
    force it scatters about; a short moving mean (an odd number of samples, at most
    ``span`` s, none for a log slower than that) takes most of that bias away while the top
    of the curve barely changes over so short a time.

    Returns
    -------
    float, str
        Force (N) and how it was found, in words.
    """
    f = np.asarray(flog.force, dtype=float)
    t = np.asarray(flog.time, dtype=float)
    dt = float(np.median(np.diff(t))) if t.size > 1 else math.inf
    k = int(span / dt) + 1 if dt > 0 and math.isfinite(dt) else 1
    k = max(1, k - (1 - k % 2))  # odd
    if k < 3 or f.size < 3 * k:
        return float(np.nanmax(f)), "largest sample of the force log"
    smooth = np.convolve(f, np.ones(k) / k, mode="valid")
    return (float(np.nanmax(smooth)),
            f"largest force of the log after a moving mean over {k} samples "
            f"({k * dt:.3g} s)")


def dense_curve(image_time, strain, flog, area):
    """Strain and stress at the force log's own rate, the strain interpolated in time.

    Between two images the gauge strain is taken linear in time; the force log's samples
    inside the images' time span then give a curve as dense as the log (used to locate the
    maximum force). Not done (None) when fewer than four images have a time and a strain.

    Returns
    -------
    (strain, stress) or None, str
        The dense curve and the method in words.
    """
    t = np.asarray(image_time, dtype=float)
    e = np.asarray(strain, dtype=float)
    ok = np.isfinite(t) & np.isfinite(e)
    if ok.sum() < 4 or np.any(np.diff(t[ok]) <= 0):
        return None, "the records (image times unusable for interpolation)"
    t, e = t[ok], e[ok]
    inside = (flog.time >= t[0]) & (flog.time <= t[-1])
    if inside.sum() <= ok.sum():
        return None, "the records (the force log is not denser than the images)"
    lt = flog.time[inside]
    rate = (lt.size - 1) / (lt[-1] - lt[0]) if lt[-1] > lt[0] else math.nan
    return ((np.interp(lt, t, e), flog.force[inside] / area),
            f"the force log at its own rate ({rate:.3g} Hz) with the gauge strain "
            "interpolated linearly in time between images")


def sidecar_path(results_path) -> Path:
    """Where the gauge histories and tensile results of a results file are stored:
    ``<results file>.tensile.json`` beside it (found by :func:`read_sidecar`)."""
    p = Path(results_path)
    return p.with_name(p.name + ".tensile.json")


def write_sidecar(results_path, history, results) -> Path:
    """Store gauge histories and tensile results beside the results file (see
    :func:`sidecar_path`); the report finds them there by itself."""
    from dic.files import write_json

    def col(a):
        return np.asarray(a, float)  # written as a list, NaN as null

    d = {"kind": "dic tensile sidecar", "results_file": Path(results_path).name,
         "history": {"frame": [int(k) for k in history.frame], "time": col(history.time),
                     "force": col(history.force),
                     "columns": {k: col(v) for k, v in history.columns.items()},
                     "units": dict(history.units), "notes": list(history.notes)},
         "tensile": results.to_record()}
    return write_json(sidecar_path(results_path), d, label=None, indent=None)


def read_sidecar(results_path):
    """Gauge histories and tensile results stored beside a results file.

    Returns
    -------
    (History, TensileResults) or None
        None when there is no sidecar or it belongs to another file (it is never an error
        to have none).
    """
    import json

    from dic.tensile.histories import History
    from dic.tensile.results import TensileResults

    target = sidecar_path(results_path)
    if not target.is_file():
        return None
    try:
        d = json.loads(target.read_text(encoding="utf-8"))
        h = d["history"]

        def arr(v):
            return np.array([math.nan if x is None else x for x in v], dtype=np.float64)

        hist = History(frame=np.asarray(h["frame"], dtype=np.int64), time=arr(h["time"]),
                       force=arr(h["force"]),
                       columns={k: arr(v) for k, v in h["columns"].items()},
                       units=dict(h["units"]), notes=list(h["notes"]))
        return hist, TensileResults.from_record(d["tensile"])
    except (OSError, ValueError, KeyError, TypeError) as exc:
        log.warning("ignored '%s': not a readable tensile sidecar (%s)", target, exc)
        return None
