"""Sequence stage: frames in order, reference updates, process pool and Dask; the crash-safe results file.

Modules
-------
frames
    Per-frame logic: starting guesses, reference updates, accumulation of displacements.
tracker
    :func:`track`: blocks of frames in order, in a process pool or on Dask, into the file.
layout
    The results file's fixed layout (names, format constants, strain keys) and its design.
writer
    :class:`ResultsWriter` and :func:`open_for_writing`: the file written frame by frame.
reader
    :class:`Results` and :func:`results_info`: the file read back.
checks, h5file
    Argument checks and the opening of HDF5 files with one-line errors (used by the above).

The modules load on first attribute access, so importing this package stays light (no h5py).
"""

from __future__ import annotations

from dic.lazy import lazy_exports

# public name -> module that defines it (PEP 562)
_NAMES = {
    "track": "tracker", "load_results": "tracker", "resolve_images": "tracker",
    "stop_on_interrupt": "tracker", "stop_signal": "tracker",
    "Results": "reader", "results_info": "reader",
    "ResultsWriter": "writer", "open_for_writing": "writer", "set_write_hook": "writer",
    "FORMAT": "layout", "FORMAT_VERSION": "layout", "STRAIN_COMPONENTS": "layout",
    "strain_key": "layout",
}
_MODULES = ("frames", "tracker", "layout", "writer", "reader", "checks", "h5file")

__all__ = list(_NAMES)

__getattr__, __dir__ = lazy_exports(__name__, _NAMES, _MODULES)
