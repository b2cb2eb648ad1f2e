"""Small pieces the report's sections share: number and unit formatting, plain words for
keys, figure blocks."""

from __future__ import annotations

import dataclasses
import io
import math
from collections.abc import Mapping

import numpy as np

from dic.report._document import FigureBlock

#: resolution of the report's figures, dots per inch
FIGURE_DPI = 120

STANDARDS = (
    (("poisson",), "ASTM E132"),
    (("modulus", "young"), "ASTM E111"),
    (("proof", "rp0", "rp02", "yield", "tensile strength", "tensile_strength", "rm",
      "uniform elongation", "uniform_elongation", "ag", "elongation", "a_percent"),
     "ISO 6892-1"),
    (("n value", "n_value", "hardening", "strain hardening", "swift", "hollomon"), "ISO 10275"),
    (("r value", "r_value", "anisotropy", "lankford"), "ISO 10113"),
    (("extensometer", "class"), "ISO 9513"),
)
# unit suffixes of keys -> unit text
UNIT_SUFFIX = {"px": "px", "mm": "mm", "microstrain": "\u00b5\u03b5", "ue": "\u00b5\u03b5",
                "percent": "%", "pct": "%", "s": "s", "kn": "kN", "n": "N", "mpa": "MPa",
                "gpa": "GPa", "deg": "\u00b0", "mm_per_px": "mm/px"}


# --------------------------------------------------------------------------------------------
# small formatting helpers
# --------------------------------------------------------------------------------------------
def fmt(value, digits=4):
    """A value as short text."""
    if value is None:
        return "\u2013"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return "not known" if math.isnan(v) else str(v)
        if v == 0 or 1e-3 <= abs(v) < 1e6:  # plain notation, ``digits`` significant digits
            return np.format_float_positional(v, precision=digits, unique=False,
                                              fractional=False, trim="-")
        return f"{v:.{digits}g}"
    if isinstance(value, np.ndarray):
        flat = value.ravel()
        if flat.size > 8 and flat.dtype.kind in "fiu":
            return (f"{flat.size} values, {fmt(np.nanmin(flat))} to {fmt(np.nanmax(flat))}"
                    if np.isfinite(flat).any() else f"{flat.size} values, none known")
        value = flat.tolist()
    if isinstance(value, (list, tuple)):
        items = [fmt(v) for v in value[:8]]
        return ", ".join(items) + (f", \u2026 ({len(value)} in all)" if len(value) > 8 else "")
    return str(value)


def words(key):
    """``proof_strength_mpa`` -> (``Proof strength``, ``MPa``)."""
    parts = str(key).strip().split("_")
    unit = ""
    for n in (3, 2, 1):
        tail = "_".join(parts[-n:]).lower()
        if len(parts) > n and tail in UNIT_SUFFIX:
            unit = UNIT_SUFFIX[tail]
            parts = parts[:-n]
            break
    text = " ".join(p for p in parts if p)
    return (text[:1].upper() + text[1:]) if text else str(key), unit


def with_unit(value, unit):
    text = fmt(value)
    return f"{text} {unit}" if unit and text not in ("\u2013", "not known") else text


def standard_for(text):
    t = str(text).lower().replace("-", " ")
    words = set(t.replace("_", " ").split())
    for keys, std in STANDARDS:
        for k in keys:
            if (" " in k or "_" in k) and k.replace("_", " ") in t.replace("_", " "):
                return std
            if k in words or (len(k) > 3 and k in t):
                return std
    return ""


def as_mapping(obj, name):
    """A plain mapping from a ``to_dict()`` / ``as_dict()`` object, a dataclass or a mapping."""
    if obj is None:
        return None
    for attr in ("to_dict", "as_dict"):
        method = getattr(obj, attr, None)
        if callable(method):
            obj = method()
            break
    else:
        if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
            obj = dataclasses.asdict(obj)
    if not isinstance(obj, Mapping):
        raise ValueError(f"{name}: expected an object with to_dict() or a mapping of names to "
                         f"values; got {type(obj).__name__}")
    return dict(obj)


def flatten(mapping, prefix=""):
    out = {}
    for key, value in mapping.items():
        k = f"{prefix}{key}"
        if isinstance(value, Mapping):
            out.update(flatten(value, k + " / "))
        else:
            out[k] = value
    return out


def png(fig):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=FIGURE_DPI)
    data = buf.getvalue()
    # the PNG header holds the true pixel size (IHDR: width, height as big-endian uint32)
    w, h = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    return data, w, h


def figure(fig, caption, alt):
    data, w, h = png(fig)
    return FigureBlock(png=data, width=w, height=h, caption=caption, alt=alt)


def mm(px, scale):
    return f" ({px * scale:.3g} mm)" if scale is not None and px is not None else ""


# --------------------------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------------------------
