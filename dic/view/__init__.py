"""The review page: a small local web server that shows results and helps set up an analysis.

``dic view RESULTS`` serves a page on 127.0.0.1 that shows the strain maps over the images, the
history of a clicked point, gauge lines and area gauges drawn by hand, and the data quality.
``dic view FOLDER`` (images without results) serves the set-up page: draw the region of
interest and a scale line, see the pattern quality and settings advice, save an analysis file.

The page only looks things up; every number comes from the library (:mod:`dic.tensile.gauges`,
:mod:`dic.metrology`, :mod:`dic.strain`). The server binds to 127.0.0.1 only, needs a random
token on every request, serves nothing but the analysis's own images and results (requests
name frames and quantities, never paths), opens the results file read-only and sends a
Content-Security-Policy that forbids loading anything from elsewhere.

Modules
-------
results_data
    What the results page asks for: images, strain maps, point and gauge histories, quality.
setup_data
    What the set-up page asks for: images, pattern quality, advice, saving the analysis file.
server
    The HTTP server, its token and its routes.

The public names load on first use, so importing this package stays light.
"""

from __future__ import annotations

from dic.lazy import lazy_exports

_NAMES = {
    "server": ("ViewServer", "start_server", "source_for"),
    "results_data": ("ResultsData",),
    "setup_data": ("SetupData", "toml_text"),
}
_WHERE = {name: module for module, names in _NAMES.items() for name in names}

__all__ = sorted(_WHERE)

__getattr__, __dir__ = lazy_exports(__name__, _WHERE, tuple(_NAMES))
