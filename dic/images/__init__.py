"""Ground stage: reading images, ROI masks, B-spline interpolation and exact synthetic speckle.

Modules
-------
io
    Reading 8/16-bit images (and writing them), natural sort, listing a sequence.
roi
    Region-of-interest masks: rectangles, polygons with holes, mask images; erosion.
interp
    B-spline prefilter and interpolation with derivatives (cubic, quintic).
synth
    Analytic speckle images under exactly known displacement fields (tests and the demo).

The modules load on first attribute access, so importing this package stays light.
"""

from __future__ import annotations

from dic.lazy import lazy_exports

_MODULES = ("io", "roi", "interp", "synth")

__getattr__, __dir__ = lazy_exports(__name__, {}, _MODULES)
