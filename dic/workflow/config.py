"""The analysis file: every setting of a sequence analysis in one TOML file.

Example (``analysis.toml``)::

    images = "frames/*.tif"        # folder, glob pattern or list of files
    out = "run.h5"
    reference = 0
    frames = { start = 0, stop = 40, stride = 1 }   # optional

    [matching]
    subset = 21
    step = 10
    shape_function = "auto"        # or "affine", "quadratic"
    interpolation = "quintic"      # or "cubic"
    min_zncc = 0.9
    max_sigma = 2.0                # px: less certain points are not measured (0.2: strict)
    search = 60

    [roi]
    rectangle = [40, 30, 600, 210]  # x0, y0, x1, y1 (px); or polygon = [[x, y], ...];
                                    # or mask = "mask.png"

    [scale]
    mm_per_px = 0.08                # or line = [x0, y0, x1, y1], length_mm = 40.0

    [strain]
    window = 9
    measure = "green-lagrange"

    [run]
    workers = 2                     # or cluster = "tcp://host:8786"
    block = 8

    [tensile]                       # tensile results from gauges and the force log
    force_log = "force_log.csv"
    time_column = "time_s"
    force_column = "force_kN"
    force_unit = "kN"
    frame_times = "frame_times.csv" # or frame_interval = 2.0 (s); trigger_offset = 0.0
    width_mm = 12.5
    thickness_mm = 3.0              # or area_mm2
    gauge_length_mm = 40.0
    modulus_range_mpa = [20, 265]

    [stereo]                        # calibrated cameras (optional)
    calibration = "cameras.toml"    # from 'dic calibrate': one camera is lens-corrected
    right_images = "right/*.tif"    # two cameras: 3-D results and surface strain
    max_view_angle = 45             # degrees from the surface normal (default 45)

    [noise]                         # images of the unloaded specimen: the noise floor
    images = "static/*.tif"

    [report]
    frames = [8, 16, -1]
    title = "Tensile test, coupon 7"
    limits = "shared"               # one colour scale for all frames, or "per-frame"

    [animation]                     # a strain animation (also: dic run ... --animate)
    component = "yy"                # default "xx"; any strain quantity
    format = "gif"                  # or "mp4"
    fps = 4

Relative paths are taken from the folder of the analysis file. Command-line options override the
file. Unknown keys are errors that name the closest valid key.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from pathlib import Path

from dic.errors import InputError

__all__ = ["load_analysis", "scale_from_line", "SCHEMA"]

#: section -> key -> expected Python type(s); None as section means the top level
SCHEMA = {
    None: {"images": (str, list), "out": (str,), "reference": (int,), "frames": (dict,)},
    "frames": {"start": (int,), "stop": (int,), "stride": (int,)},
    "matching": {"subset": (int,), "step": (int,), "shape_function": (str,),
                 "interpolation": (str,), "min_zncc": (float, int),
                 "max_sigma": (float, int), "search": (int,)},
    "roi": {"rectangle": (list,), "polygon": (list,), "mask": (str,)},
    "scale": {"mm_per_px": (float, int), "line": (list,), "length_mm": (float, int)},
    "strain": {"window": (int,), "measure": (str,)},
    "run": {"workers": (int,), "cluster": (str,), "block": (int,)},
    "tensile": {"force_log": (str,), "time_column": (str,), "force_column": (str,),
                "crosshead_column": (str,), "force_unit": (str,), "time_unit": (str,),
                "frame_times": (str,), "frame_interval": (float, int),
                "trigger_offset": (float, int), "width_mm": (float, int),
                "thickness_mm": (float, int), "area_mm2": (float, int),
                "gauge_length_mm": (float, int), "transverse_length_mm": (float, int),
                "modulus_range_mpa": (list,), "offsets_percent": (list,),
                "n_range_percent": (list,)},
    "report": {"frames": (list,), "title": (str,), "write": (bool,), "limits": (str,)},
    "noise": {"images": (str, list)},
    "stereo": {"right_images": (str, list), "calibration": (str,),
               "max_view_angle": (float, int)},
    "animation": {"write": (bool,), "component": (str,), "format": (str,),
                  "fps": (float, int)},
}
_SECTIONS = [s for s in SCHEMA if s is not None and s != "frames"]


def _closest(word, options):
    hit = difflib.get_close_matches(word, options, n=1, cutoff=0.5)
    return f"; did you mean {hit[0]!r}?" if hit else f"; valid keys: {', '.join(options)}"


def _check_table(table, section, where):
    allowed = SCHEMA[section]
    for key, value in table.items():
        if section is None and key in _SECTIONS:
            if not isinstance(value, dict):
                raise ValueError(f"{where}: [{key}] must be a table of settings")
            _check_table(value, key, where)
            continue
        if key not in allowed:
            name = key if section is None else f"{section}.{key}"
            if section is None:
                # a setting written at the top level that belongs in a section
                nested = {k: s for s in _SECTIONS for k in SCHEMA[s]}
                hit = difflib.get_close_matches(key, list(nested) + _SECTIONS, n=1,
                                                cutoff=0.5)
                if hit and hit[0] in nested:
                    raise ValueError(f"{where}: unknown key {name!r}; did you mean "
                                     f"{hit[0]!r} in the [{nested[hit[0]]}] section?")
            options = list(allowed) + (_SECTIONS if section is None else [])
            raise ValueError(f"{where}: unknown key {name!r}{_closest(key, options)}")
        types = allowed[key]
        if (isinstance(value, bool) and bool not in types) or not isinstance(value, types):
            kinds = [t for t in types if not (t is int and float in types)]  # int: a number
            want = " or ".join(_TYPE_WORDS.get(t, t.__name__) for t in kinds)
            name = key if section is None else f"{section}.{key}"
            raise ValueError(f"{where}: {name} must be {want}, got {value!r}")
        if key == "frames":
            _check_table(value, "frames", where)


# plain words for the value types of the analysis file (TOML names in brackets)
_TYPE_WORDS = {int: "a whole number", float: "a number", str: "a text in quotes",
               bool: "true or false", list: "a list [...]", dict: "a table"}


def scale_from_line(line, length_mm) -> float:
    """mm per px from two image points a known distance apart.

    Parameters
    ----------
    line : (x0, y0, x1, y1)
        Two points in px.
    length_mm : float
        Their true distance in mm.
    """
    try:
        x0, y0, x1, y1 = (float(v) for v in line)
    except (TypeError, ValueError):
        raise ValueError(f"scale line must be four numbers x0, y0, x1, y1 (px), got "
                         f"{line!r}") from None
    d = math.hypot(x1 - x0, y1 - y0)
    if not d > 0 or not float(length_mm) > 0:
        raise ValueError("scale line needs two different points and a positive length in mm")
    return float(length_mm) / d


def _decode(raw: bytes, p: Path) -> str:
    """The text of an analysis file: UTF-8, with or without a byte-order mark.

    TOML files are UTF-8 (TOML 1.0.0 specification, "Spec"); a file saved in another encoding
    is refused with a message that names the encoding it seems to be in.
    """
    import codecs

    if raw.startswith(codecs.BOM_UTF8):
        raw = raw[len(codecs.BOM_UTF8):]  # some editors put a byte-order mark first: skip it
    elif raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)) or (
            len(raw) >= 2 and (raw[0] == 0) != (raw[1] == 0)):
        raise InputError(f"analysis file '{p}': saved as UTF-16; save it as UTF-8 (in the "
                         f"editor's 'Save as' encoding choice) and run again")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        try:
            raw.decode("cp1252")
            guess = "a one-byte encoding such as Latin-1 or Windows-1252"
        except UnicodeDecodeError:
            guess = "an encoding other than UTF-8"
        raise InputError(f"analysis file '{p}': line {line} is not UTF-8 (the file seems to "
                         f"be saved in {guess}); save it as UTF-8 and run again") from None


def load_analysis(path) -> dict:
    """Read and check an analysis file.

    Parameters
    ----------
    path : path
        TOML file.

    Returns
    -------
    dict
        Flat settings for :func:`dic.track`: ``images``, ``out``, ``reference``, ``frames``
        (a slice), ``subset``, ``step``, ``shape_function``, ``interpolation``, ``min_zncc``,
        ``search``, ``roi``, ``scale``, ``strain``, ``workers``, ``cluster``, ``block`` -- only
        the keys the file sets.

    Raises
    ------
    OSError
        The file cannot be read.
    ValueError
        Not valid TOML, unknown keys (naming the closest valid one), wrong types.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise OSError(f"cannot read the analysis file {str(p)!r}: {exc.strerror or exc}; "
                      f"check the path") from None
    text = _decode(raw, p)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"{p.name}: not a valid TOML file ({exc}); fix the line it names") \
            from None
    _check_table(data, None, p.name)
    base = p.parent
    out: dict = {}

    def rel(s):
        q = Path(s)
        return str(q if q.is_absolute() else base / q)

    if "images" in data:
        imgs = data["images"]
        out["images"] = rel(imgs) if isinstance(imgs, str) else [rel(i) for i in imgs]
    if "out" in data:
        out["out"] = rel(data["out"])
    if "reference" in data:
        out["reference"] = data["reference"]
    if "frames" in data:
        f = data["frames"]
        out["frames"] = slice(f.get("start"), f.get("stop"), f.get("stride"))
    out.update(data.get("matching", {}))
    roi = data.get("roi", {})
    if len(roi) > 1:
        raise ValueError(f"{p.name}: [roi] takes one of rectangle, polygon or mask, not "
                         f"{' and '.join(roi)}")
    if "rectangle" in roi:
        out["roi"] = tuple(roi["rectangle"])
    elif "polygon" in roi:
        out["roi"] = [tuple(v) for v in roi["polygon"]]
    elif "mask" in roi:
        out["roi"] = rel(roi["mask"])
    sc = data.get("scale", {})
    if "mm_per_px" in sc and ("line" in sc or "length_mm" in sc):
        raise ValueError(f"{p.name}: [scale] takes mm_per_px or line + length_mm, not both")
    if "mm_per_px" in sc:
        if not sc["mm_per_px"] > 0:
            raise ValueError(f"{p.name}: scale.mm_per_px must be positive")
        out["scale"] = float(sc["mm_per_px"])
    elif "line" in sc or "length_mm" in sc:
        if "line" not in sc or "length_mm" not in sc:
            raise ValueError(f"{p.name}: [scale] needs both line = [x0, y0, x1, y1] and "
                             f"length_mm")
        out["scale"] = scale_from_line(sc["line"], sc["length_mm"])
    if "strain" in data:
        out["strain"] = dict(data["strain"])
    out.update(data.get("run", {}))
    if "tensile" in data:
        t = dict(data["tensile"])
        for key in ("force_log", "frame_times"):
            if key in t:
                t[key] = rel(t[key])
        out["tensile"] = t
    if "report" in data:
        out["report"] = dict(data["report"])
    if "stereo" in data:   # calibrated cameras: right images and/or the calibration file
        out["stereo"] = {k: v if k == "max_view_angle" else
                         rel(v) if isinstance(v, str) else [rel(i) for i in v]
                         for k, v in data["stereo"].items()}
    if "animation" in data:
        a = dict(data["animation"])
        if a.get("format", "gif").lower() not in ("gif", "mp4"):
            raise ValueError(f"{p.name}: [animation] format = {a['format']!r} is not known; "
                             f"use \"gif\" or \"mp4\"")
        out["animation"] = a
    if "noise" in data:
        imgs = data["noise"].get("images")
        if imgs is None:
            raise ValueError(f"{p.name}: [noise] needs images = the static images of the "
                             f"unloaded specimen (a glob, folder or list)")
        out["noise"] = {"images": rel(imgs) if isinstance(imgs, str) else [rel(i) for i in imgs]}
    return out
