"""Checks of the arguments of the results-file writer and reader (one-line errors)."""

from __future__ import annotations

import json
import math
import os
import re
from pathlib import Path

import numpy as np

from dic.errors import InputError
from dic.limits import DEFAULT_MAX_SIGMA
from dic.sequence.h5file import one_line
from dic.sequence.layout import strain_key

#: settings recorded only since a later version, with the value older files were made with
SETTINGS_ADDED = {"max_sigma": DEFAULT_MAX_SIGMA}

__all__ = ["check_path", "settings_json", "strain_spec"]

NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


def json_default(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    raise TypeError(type(obj).__name__)


def settings_json(settings) -> str:
    if not isinstance(settings, dict):
        raise InputError(f"settings: expected a dict of analysis settings, got "
                         f"{type(settings).__name__}; pass a dict")
    for key, value in settings.items():
        if not isinstance(key, str):
            raise InputError(f"settings: key {key!r} is not a string; use string keys")
        try:
            json.dumps(value, default=json_default)
        except (TypeError, ValueError) as exc:
            raise InputError(f"settings: value of {key!r} cannot be stored as JSON "
                             f"({one_line(exc)}); give numbers, strings, lists or dicts") from None
    return json.dumps(settings, sort_keys=True, default=json_default)


def differences(old, new, prefix=""):
    """Dotted names of the keys whose values differ between two JSON-like dicts."""
    out = []
    for key in sorted(set(old) | set(new)):
        name = f"{prefix}{key}"
        if key not in old or key not in new:
            out.append((name, old.get(key, "<absent>"), new.get(key, "<absent>")))
        elif isinstance(old[key], dict) and isinstance(new[key], dict):
            out.extend(differences(old[key], new[key], name + "."))
        elif old[key] != new[key]:
            out.append((name, old[key], new[key]))
    return out


def with_added_settings(old, new):
    """``old`` (a results file's settings) with the settings recorded only since a later
    version filled in as the older files were made with them (their defaults then), where
    ``new`` has them."""
    out = dict(old)
    for key, value in SETTINGS_ADDED.items():
        if key in new and key not in out:
            out[key] = value
    return out


def short(value, width=40) -> str:
    text = json.dumps(value) if not isinstance(value, str) else repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."


def string_list(values, name: str, n: int | None) -> list[str]:
    if isinstance(values, (str, bytes)):
        raise InputError(f"{name}: expected a list of strings, got one string; pass a list")
    try:
        out = [os.fspath(v) if isinstance(v, os.PathLike) else v for v in values]
    except TypeError:
        raise InputError(f"{name}: expected a list of strings; pass a list") from None
    for i, v in enumerate(out):
        if not isinstance(v, str) or not v:
            raise InputError(f"{name}: entry {i} is {v!r}, not a non-empty string; "
                             "pass one string per image")
    if n is not None and len(out) != n:
        raise InputError(f"{name}: {len(out)} entries for {n} frames; pass one per image")
    return out


def check_path(path) -> Path:
    try:
        p = Path(os.fspath(path))
    except TypeError:
        raise InputError(f"path: expected a file path, got {type(path).__name__}; "
                         "pass a str or pathlib.Path") from None
    if not p.name:
        raise InputError(f"path: '{p}' names no file; give a file name such as run.h5")
    return p


def strain_spec(measure, window, attrs):
    """Checked (key, measure, window, extra attributes) of a strain group."""
    if not isinstance(measure, str) or not NAME_RE.match(measure):
        raise InputError(f"measure: {measure!r} is not a plain name (letters, digits, _ . -); "
                         "pass e.g. 'green_lagrange'")
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 1:
        raise InputError(f"window: expected a positive integer, got {window!r}")
    if attrs is not None and not isinstance(attrs, dict):
        raise InputError(f"attrs: expected a dict, got {type(attrs).__name__}")
    extra = {}
    for key, value in (attrs or {}).items():
        if key in ("measure", "window"):
            raise InputError(f"attrs: {key!r} is set from the arguments; leave it out")
        try:
            extra[key] = json.loads(json.dumps(value, default=json_default))
        except (TypeError, ValueError):
            raise InputError(f"attrs: value of {key!r} cannot be stored; give numbers or "
                             "strings") from None
    return strain_key(measure, window), measure, int(window), extra


def same_value(a, b) -> bool:
    """Equal, counting NaN equal to NaN."""
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b
