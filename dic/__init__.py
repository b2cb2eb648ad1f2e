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

from dic.lazy import lazy_exports

from dic._version import __version__
from dic.field import DisplacementField, Reason

# name -> module that defines it; loaded on first attribute access (PEP 562)
_LAZY = {
    "correlate": "dic.matching",
    "read_image": "dic.images.io",
    "make_roi": "dic.images.roi",
    "strain_field": "dic.strain",
    "StrainField": "dic.strain",
    "track": "dic.sequence.tracker",
    "load_results": "dic.sequence.tracker",
    "tensile_results": "dic.tensile.results",
    "gauge_histories": "dic.tensile.gauges",
    "calibrate": "dic.stereo.calibration",
}

# sub-packages and modules reachable as attributes (``dic.synth``) without an explicit import
_SUBMODULES = {
    "images": "dic.images", "io": "dic.images.io", "roi": "dic.images.roi",
    "interp": "dic.images.interp", "synth": "dic.images.synth",
    "matching": "dic.matching", "strain": "dic.strain", "sequence": "dic.sequence",
    "metrology": "dic.metrology", "tensile": "dic.tensile", "figures": "dic.figures",
    "report": "dic.report", "export": "dic.export", "workflow": "dic.workflow",
    "stereo": "dic.stereo", "view": "dic.view",
}

__all__ = ["__version__", "DisplacementField", "Reason", *_LAZY]

__getattr__, __dir__ = lazy_exports(__name__, _LAZY, _SUBMODULES)
