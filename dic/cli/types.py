"""Option types shared by the command-line modules: parse a string or raise
``argparse.ArgumentTypeError`` with a one-line message and an example."""

from __future__ import annotations

import argparse
import math


def numbers(text, count, what, example, unit="px"):
    """``count`` finite comma-separated numbers, e.g. ``"20,30,580,270"``."""
    parts = [p.strip() for p in str(text).split(",")]
    try:
        if len(parts) != count:
            raise ValueError
        values = tuple(float(p) for p in parts)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected {what} as {count} comma-separated numbers ({unit}), e.g. {example}; got "
            f"{text!r}") from None
    if not all(math.isfinite(v) for v in values):
        raise argparse.ArgumentTypeError(f"expected finite numbers, e.g. {example}; got {text!r}")
    return values


def rectangle(text):
    """``X0,Y0,X1,Y1`` in px."""
    return numbers(text, 4, "X0,Y0,X1,Y1", "20,30,580,270")


def pair(text):
    """``LOW,HIGH`` with LOW < HIGH."""
    lo, hi = numbers(text, 2, "LOW,HIGH", "20,260", unit="numbers")
    if not lo < hi:
        raise argparse.ArgumentTypeError(f"expected LOW < HIGH, got {text!r}")
    return lo, hi


def number(text):
    """A finite number."""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return v


def positive_float(text):
    """A finite number > 0."""
    v = number(text)
    if not v > 0:
        raise argparse.ArgumentTypeError(f"expected a positive number, e.g. 0.08; got {text!r}")
    return v


def positive_int(text):
    """A whole number >= 1."""
    try:
        v = int(text)
    except ValueError:
        v = 0
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number of at least 1; got {text!r}")
    return v
