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

from dic.lazy import lazy_exports

_WHERE = {"load_analysis": "config", "scale_from_line": "config", "finish": "run",
          "tensile_outputs": "run", "settings_self_check": "run"}

__all__ = sorted(_WHERE)

__getattr__, __dir__ = lazy_exports(__name__, _WHERE, ("config", "run"))
