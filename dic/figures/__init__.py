"""Figures: strain and displacement maps, line plots, animations, the stress-strain figure.

Modules
-------
common
    What every figure shares: strain quantities and units, colour limits over a sequence
    (:func:`strain_limits`), frame numbers, the images of a results file, saving
    (:func:`save_figure`).
layers
    The layers a map is built from: cells, image veil, colour bar, scale bar, gauges, contours.
maps
    :func:`displacement_map`, :func:`strain_map`, :func:`measure_comparison`,
    :func:`quality_map`.
lines
    :func:`history_figure` (gauge readings), :func:`valid_points_plot`, :func:`curve_figure`
    and :func:`stress_strain_figure` (a tensile test's results).
animation
    :func:`animate`: GIF and MP4 of a strain component through a sequence.
series
    :class:`MapSeries`: the strain maps of many frames as PNG files, the parts every map
    shares drawn once.

Names load on first attribute access (PEP 562), so importing this package stays light.
"""

from __future__ import annotations

from dic.lazy import lazy_exports

# public name -> module that defines it
_NAMES = {
    "FIGURE_FORMATS": "common", "ROBUST_PERCENTILE": "common", "STRAIN_QUANTITIES": "common",
    "STRAIN_UNITS": "common", "save_figure": "common", "strain_limits": "common",
    "displacement_map": "maps", "measure_comparison": "maps", "quality_map": "maps",
    "strain_map": "maps",
    "curve_figure": "lines", "history_figure": "lines", "stress_strain_figure": "lines",
    "valid_counts": "lines", "valid_points_plot": "lines",
    "ANIMATION_FORMATS": "animation", "animate": "animation",
    "MapSeries": "series",
}
_MODULES = ("common", "layers", "maps", "lines", "animation", "series")

__all__ = sorted(_NAMES)

__getattr__, __dir__ = lazy_exports(__name__, _NAMES, _MODULES)
