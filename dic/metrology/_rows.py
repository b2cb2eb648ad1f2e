"""Rows of a metrology result as a person reads them: a plain name, a value with its unit, and a
sentence on what the value means (for reports)."""

from __future__ import annotations

import math
from typing import NamedTuple

__all__ = ["Row", "number", "microstrain", "pixels"]


class Row(NamedTuple):
    """One reported quantity.

    ``kind`` tags the few values other sections pick out (``"displacement noise"``,
    ``"strain noise"``, ``"spatial resolution"``) and is ``""`` otherwise.
    """

    quantity: str
    value: str
    meaning: str
    kind: str = ""


def number(value, digits=3):
    """``value`` with ``digits`` significant digits, never ``-0``; ``not known`` for NaN."""
    v = float(value)
    if not math.isfinite(v):
        return "not known" if math.isnan(v) else ("more than any tried" if v > 0 else
                                                  "less than any tried")
    if v != 0 and 1e-7 <= abs(v) < 1e7:  # plain decimals, as a person writes them
        text = f"{float(f'{v:.{digits}g}'):.{max(digits - 1 - math.floor(math.log10(abs(v))), 0)}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
    else:
        text = f"{v:.{digits}g}"
        if "e" in text:
            mant, exp = text.split("e")
            text = f"{mant} \u00d7 10^{int(exp)}"
    if text.lstrip("-").strip("0.") == "":
        return "0"
    return text


def microstrain(value, digits=3):
    """A strain (plain number) as microstrain text, e.g. ``"85 \u00b5\u03b5"``."""
    v = float(value)
    if not math.isfinite(v):
        return number(v)
    v = round(v * 1e6, 0 if abs(v * 1e6) >= 10 else 1)
    return f"{number(v, digits)} \u00b5\u03b5"


def pixels(value, digits=3, scale=None):
    """A length in px (with mm when ``scale``, mm per px, is known)."""
    if not math.isfinite(float(value)):
        return number(value)
    text = f"{number(value, digits)} px"
    if scale is not None and math.isfinite(float(value)):
        text += f" ({number(float(value) * scale, digits)} mm)"
    return text
