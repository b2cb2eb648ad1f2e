"""The calibration file: a plain TOML file of our own layout.

Written by :func:`save_calibration` (TOML text from :mod:`dic.tomlfile`), read by
:func:`load_calibration` with the standard library's ``tomllib``. Layout (lengths in mm, image
positions in pixels; ``x`` column, ``y`` row, origin at the centre of the top-left pixel)::

    kind = "dic camera calibration"
    version = 1
    rms_px = 0.031                 # overall reprojection RMS (stereo fit for two cameras)

    [target]
    kind = "chessboard"
    inner_corners = [9, 6]         # cols, rows
    square_mm = 8.0

    [[camera]]                     # first: left (or the only) camera
    size = [400, 300]              # width, height, px
    matrix = [[fx, 0, cx], [0, fy, cy], [0, 0, 1]]
    distortion = [k1, k2, p1, p2, k3]     # OpenCV's model
    rms_px = 0.031

    [[camera]]                     # second: right camera (two-camera calibration only)
    ...

    [pose]                         # two cameras: right = rotation @ left + translation
    rotation = [[...], [...], [...]]
    translation_mm = [tx, ty, tz]
    baseline_mm = 100.0            # for reading by eye; recomputed on load
    angle_deg = 16.2

    [plane]                        # optional: the specimen plane (one camera), the pose of
    rotation = [[...], [...], [...]]   # a target lying on it: P = rotation @ q + translation
    translation_mm = [tx, ty, tz]

    [[view]]                       # one per target photograph
    name = "left_01.png"
    used = true
    rms_px = 0.03                  # or, for a view left out:
    reason = ""                    # why it was left out
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from dic.errors import FileProblem, InputError
from dic.stereo.calibration import Calibration, CameraFit, Rejected
from dic.tomlfile import toml_text

__all__ = ["save_calibration", "load_calibration", "calibration_text", "calibration_from_text",
           "as_calibration"]

_KIND = "dic camera calibration"
_VERSION = 1


def calibration_text(calibration: Calibration) -> str:
    """The calibration file's text (TOML, layout in the module docstring).

    Parameters
    ----------
    calibration : Calibration

    Returns
    -------
    str
    """
    cal = calibration
    doc = {"kind": _KIND, "version": _VERSION, "rms_px": cal.rms}
    if cal.target:
        doc["target"] = {"kind": cal.target["kind"],
                         "inner_corners": list(cal.target["inner_corners"]),
                         "square_mm": cal.target["square_mm"]}
    if cal.cameras:
        doc["camera"] = [{"size": list(cam.size), "matrix": cam.matrix,
                          "distortion": cam.distortion, "rms_px": cam.rms}
                         for cam in cal.cameras]
    if cal.stereo:
        doc["pose"] = {"rotation": cal.rotation, "translation_mm": cal.translation,
                       "baseline_mm": cal.baseline, "angle_deg": cal.angle_deg}
    if cal.plane is not None:
        doc["plane"] = {"rotation": np.asarray(cal.plane[0]),
                        "translation_mm": np.asarray(cal.plane[1])}
    why = {r.index: r.reason for r in cal.rejected}
    if cal.names:
        doc["view"] = [{"name": name, "used": i not in why,
                        "rms_px": cal.view_rms.get(i, float("nan")), "reason": why.get(i, "")}
                       for i, name in enumerate(cal.names)]
    return toml_text(doc, what="calibration file")


def save_calibration(calibration: Calibration, path):
    """Write a calibration to a TOML file (layout in the module docstring).

    Parameters
    ----------
    calibration : Calibration
    path : str or Path

    Raises
    ------
    OSError
        The file cannot be written: a one-line error naming it and the fix
        (:func:`dic.files.write_error`).
    """
    from dic.files import write_text

    write_text(path, calibration_text(calibration))


def _array(doc, key, shape, where):
    try:
        a = np.asarray(doc[key], dtype=np.float64)
    except KeyError:
        raise InputError(f"calibration file {where}: missing '{key}'; write it with "
                         "dic.stereo.save_calibration") from None
    except (TypeError, ValueError):
        raise InputError(f"calibration file {where}: '{key}' must be numbers") from None
    if a.shape != shape:
        raise InputError(f"calibration file {where}: '{key}' must have shape {shape}; "
                         f"got {a.shape}")
    return a


def load_calibration(path) -> Calibration:
    """Read a calibration written by :func:`save_calibration`.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Calibration

    Raises
    ------
    FileProblem
        When the file cannot be read.
    InputError
        When it is not a calibration file of this layout.
    """

    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise FileProblem(f"cannot read the calibration file {path}: {exc.strerror}") from exc
    return calibration_from_text(text, path)


def calibration_from_text(text, path="(text)") -> Calibration:
    """A :class:`Calibration` from the text of a calibration file (e.g. as stored in a
    results file); ``path`` names it in error messages.

    Raises
    ------
    InputError
        When it is not a calibration of this layout.
    """
    import tomllib

    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"calibration file {path} is not valid TOML: {exc}") from None
    if doc.get("kind") != _KIND:
        raise InputError(f"{path} is not a calibration file (kind = {_KIND!r} missing)")
    if doc.get("version") != _VERSION:
        raise InputError(f"calibration file {path} has version {doc.get('version')!r}; this "
                         f"program reads version {_VERSION}")
    cams = doc.get("camera", [])
    if len(cams) not in (1, 2):
        raise InputError(f"calibration file {path} must hold one or two [[camera]] tables; "
                         f"got {len(cams)}")
    fits = tuple(CameraFit(_array(c, "matrix", (3, 3), path),
                           _array(c, "distortion", (5,), path),
                           tuple(int(n) for n in _array(c, "size", (2,), path)),
                           float(c.get("rms_px", float("nan"))))
                 for c in cams)
    R = T = None
    if len(fits) == 2:
        if "pose" not in doc:
            raise InputError(f"calibration file {path} has two cameras but no [pose] table")
        R = _array(doc["pose"], "rotation", (3, 3), path)
        T = _array(doc["pose"], "translation_mm", (3,), path)
    views = doc.get("view", [])
    names = tuple(str(v.get("name", f"view {i}")) for i, v in enumerate(views))
    rejected = tuple(Rejected(i, names[i], str(v.get("reason", "")))
                     for i, v in enumerate(views) if not v.get("used", True))
    view_rms = {i: float(v["rms_px"]) for i, v in enumerate(views)
                if v.get("used", True) and "rms_px" in v}
    target = {}
    if "target" in doc:
        t = doc["target"]
        target = {"kind": t.get("kind", "chessboard"),
                  "inner_corners": tuple(t.get("inner_corners", ())),
                  "square_mm": float(t.get("square_mm", float("nan")))}
    plane = None
    if "plane" in doc:
        plane = (_array(doc["plane"], "rotation", (3, 3), path),
                 _array(doc["plane"], "translation_mm", (3,), path))
    return Calibration(fits, R, T, float(doc.get("rms_px", float("nan"))), view_rms, rejected,
                       target, names, plane)


def as_calibration(calibration) -> Calibration:
    """A :class:`Calibration` from itself or from the path of a calibration file.

    Raises
    ------
    InputError
        For anything else.
    """
    if isinstance(calibration, Calibration):
        return calibration
    if isinstance(calibration, (str, Path)):
        return load_calibration(calibration)
    raise InputError(f"calibration must be a Calibration (dic.calibrate) or the path of a "
                     f"calibration file; got {type(calibration).__name__}")
