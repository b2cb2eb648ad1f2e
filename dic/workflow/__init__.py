"""Workflow: the analysis file (TOML) and the whole run after tracking, from a results file to
gauges, tensile results and the report.

Modules
-------
config
    Reading and checking the analysis file (``load_analysis``, ``scale_from_line``).
run
    ``finish``: tensile results and the report from the analysis settings.
"""

from __future__ import annotations

import importlib

_WHERE = {"load_analysis": "config", "scale_from_line": "config", "finish": "run",
          "tensile_outputs": "run", "settings_self_check": "run"}

__all__ = sorted(_WHERE)


def __getattr__(name):
    if name in _WHERE:
        return getattr(importlib.import_module(f"{__name__}.{_WHERE[name]}"), name)
    if name in ("config", "run"):
        return importlib.import_module(f"{__name__}.{name}")
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
