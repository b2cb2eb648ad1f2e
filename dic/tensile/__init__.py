"""Results of a test: gauge lines, area gauges, point probes and their histories; the testing
machine's force log and its clock; tensile results (E, nu, Rp, Rm, Ag, n, r); and the workflow
that turns a results file and a force log into them.

Modules
-------
gauges
    Gauge lines, area gauges, point probes, placement helpers and their histories.
histories
    The table of gauge histories (frame, time, force, one column per quantity).
forcelog, forcesync
    Reading the force log; putting force and images on one clock.
results, fits
    Tensile results from a stress-strain record (ISO 6892-1, ASTM E111/E132, ISO 10275/10113).
workflow
    From a results file and a force log to gauge histories and tensile results.

The public names load on first use, so importing this package stays light.
"""

from __future__ import annotations

from dic.lazy import lazy_exports

_NAMES = {
    "gauges": ("GaugeLine", "AreaGauge", "PointProbe", "gauge_histories", "axial_line",
               "transverse_line", "neck_line", "poisson_ratio", "displacement_at"),
    "histories": ("History", "CAUTION"),
    "forcelog": ("ForceLog", "read_force_log"),
    "forcesync": ("ForceAtFrames", "read_frame_times", "image_times_from_files", "synchronise"),
    "results": ("tensile_results", "TensileResults", "Value", "engineering_stress",
                "true_stress_strain"),
    "workflow": ("TensileSetup", "TensileOutcome", "tensile_from_results", "read_sidecar",
                 "sidecar_path"),
}
_WHERE = {name: module for module, names in _NAMES.items() for name in names}
_MODULES = tuple(_NAMES) + ("fits",)

__all__ = sorted(_WHERE)

__getattr__, __dir__ = lazy_exports(__name__, _WHERE, _MODULES)
