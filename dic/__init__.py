"""Digital image correlation: displacement and finite-strain fields from speckle images.

The heavy parts (numba kernels, scipy, OpenCV) load on first use, so ``import dic`` is quick.

Public entry points
-------------------
correlate
    Match a deformed image to a reference image: a :class:`DisplacementField`.
read_image
    Read an 8/16-bit grey or colour image into a float array.
strain_field
    Strain tensors (Green-Lagrange and the other usual measures) from a displacement field.
track, load_results
    A whole image sequence into a results file, and that file read back.
"""

from __future__ import annotations

import importlib

from ._version import __version__
from .field import DisplacementField, Reason

# name -> module that defines it; loaded on first attribute access (PEP 562)
_LAZY = {
    "correlate": "dic.matching",
    "read_image": "dic.io",
    "make_roi": "dic.roi",
    "strain_field": "dic.strain",
    "StrainField": "dic.strain",
    "synth": "dic.synth",
    "track": "dic.tracker",
    "load_results": "dic.tracker",
    "tensile_results": "dic.tensile",
}

# sub-modules reachable as attributes (``dic.io``) without an explicit import
_SUBMODULES = {"io", "roi", "synth", "interp", "strain", "matching", "plot", "export", "cli",
               "store", "sequence", "tracker", "animate", "report", "gauges", "tensile",
               "forcelog", "config", "metrology"}

__all__ = ["__version__", "DisplacementField", "Reason", *_LAZY]


def __getattr__(name):
    mod = _LAZY.get(name)
    if mod is None and name in _SUBMODULES:
        mod = f"dic.{name}"
    if mod is None:
        raise AttributeError(f"module 'dic' has no attribute {name!r}")
    module = importlib.import_module(mod)
    value = module if mod == f"dic.{name}" and not hasattr(module, name) else getattr(module, name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY) | _SUBMODULES)
