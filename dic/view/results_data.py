"""What the results page asks for: images, strain maps, point and gauge histories, quality.

Every number comes from the library: strain from :meth:`dic.sequence.Results.strain` (that is
:func:`dic.strain_field`), gauges from :func:`dic.tensile.gauges.gauge_histories`. This module
only picks, caches and packs them for the page.
"""

from __future__ import annotations

import math
import tempfile
import threading
from collections import OrderedDict
from pathlib import Path

import numpy as np

from dic.errors import InputError
from dic.field import Reason
from dic.view.pictures import (colour_map_for, data_url, grey_png, limits_for_top, map_png,
                               robust_limits)
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["ResultsData", "REASONS", "TOO_FEW_NEIGHBOURS", "RESULTS_NAME", "SIDE_TABLE"]

#: name of the results file inside an output folder of ``dic run``
RESULTS_NAME = "results.h5"
#: gauge histories written beside the results by ``dic run --config`` / ``dic tensile``
SIDE_TABLE = "gauges.csv"
#: code of a point whose displacement is measured but whose strain window holds too few points
TOO_FEW_NEIGHBOURS = 9
#: plain words for every code the page may show on hover
REASONS = {int(r): Reason.describe(r) for r in Reason}
REASONS[TOO_FEW_NEIGHBOURS] = "measured, but too few measured neighbours for the strain window"
#: larger grids send no values for the read-out under the pointer (a click still reads them)
_MAX_HOVER_VALUES = 60_000


def _num(v):
    """A float for JSON: None for NaN or infinite values (JSON has no NaN)."""
    v = float(v)
    return v if math.isfinite(v) else None


def _nums(a):
    return [_num(v) for v in np.asarray(a, dtype=np.float64).ravel()]


def results_path(path) -> Path:
    """The results file itself, or the ``results.h5`` of an output folder of ``dic run``."""
    p = Path(path)
    if p.is_dir():
        q = p / RESULTS_NAME
        if not q.is_file():
            raise FileNotFoundError(f"folder '{p}' holds no {RESULTS_NAME}")
        return q
    if not p.is_file():
        raise FileNotFoundError(f"RESULTS: no such file or folder '{p}'; check the path")
    return p


class _Cache:
    """A small least-recently-used store."""

    def __init__(self, size):
        self.size, self.items = size, OrderedDict()

    def get(self, key, make):
        """The stored value of ``key``, made by ``make()`` the first time."""
        if key in self.items:
            self.items.move_to_end(key)
            return self.items[key]
        value = make()
        self.items[key] = value
        while len(self.items) > self.size:
            self.items.popitem(last=False)
        return value


class ResultsData:
    """The results file behind a results page, opened read-only.

    Parameters
    ----------
    path : str or os.PathLike
        A results file, or an output folder of ``dic run`` holding ``results.h5``.
    """

    def __init__(self, path):
        from dic.sequence import Results

        self.path = results_path(path)
        self.results = Results.open(self.path)  # h5py mode "r": never writes
        if len(self.results) == 0:
            self.results.close()
            raise InputError(f"RESULTS: '{self.path}' holds no completed frames; run 'dic run' "
                             "into it first")
        self.n = len(self.results)
        self._lock = threading.RLock()
        self._fields = _Cache(64)
        self._strains = _Cache(128)
        self._images = _Cache(16)
        self._limits = {}
        self._shape = None
        self.time, self.force = self._time_and_force()
        st = self.results.settings.get("strain", {}) or {}
        self.window = int(st.get("window", DEFAULT_WINDOW))
        self.measure = str(st.get("measure", "green-lagrange"))

    def close(self):
        """Close the results file."""
        with self._lock:
            self.results.close()

    def warm_up(self):
        """Prepare what the page shows first (the last frame's map and image), ahead of time.

        Run from a background thread while the browser opens the page; a failure here is left
        for the page's own request to report.
        """
        k = self.n - 1
        try:
            self.image_png(int(self.results.reference_indices[k]))
            self.frame_map(k, "xx", self.measure, self.window, "shared")
        except (ValueError, OSError, KeyError, IndexError):
            pass

    # -- what is known ------------------------------------------------------------------------
    def _time_and_force(self):
        """Image times (s) and force (N) per frame, from the results and its gauge table."""
        t = np.asarray(self.results.image_times[: self.n], dtype=np.float64)
        f = np.full(self.n, np.nan)
        side = self.path.parent / SIDE_TABLE
        if side.is_file():
            try:
                tab = np.genfromtxt(side, delimiter=",", names=True, comments="#",
                                    deletechars="", max_rows=100000)
                names = tab.dtype.names or ()
                fcol = next((c for c in names if c.startswith("force")), None)
                tcol = next((c for c in names if c.startswith("time")), None)
                for k, row in zip(np.atleast_1d(tab["frame"]).astype(int), np.atleast_1d(tab)):
                    if 0 <= k < self.n:
                        if fcol is not None:
                            f[k] = row[fcol]
                        if tcol is not None and not np.isfinite(t[k]):
                            t[k] = row[tcol]
            except (ValueError, KeyError, OSError, IndexError):
                pass  # a table we cannot read: the page simply offers frame numbers
        return t, f

    def info_shape(self):
        """Image size (rows, cols)."""
        from dic.images.io import image_info

        if self._shape is None:
            gx, gy = self.results.grid_x, self.results.grid_y
            try:
                self._shape = tuple(int(v) for v in image_info(self.results.image_names[0])
                                    ["shape"])
            except (OSError, ValueError):  # the image is gone: the page shows the map alone
                self._shape = (int(gy.max() + gy.min() + 1), int(gx.max() + gx.min() + 1))
        return self._shape

    def follow(self, k, points) -> list:
        """Where reference points are in the image of frame ``k`` (None where unknown)."""
        from dic.view.motion import to_current

        P = to_current(self.field(self._frame(int(k))), points)
        return [[_num(x), _num(y)] for x, y in P]

    def reference_point(self, k, x, y) -> dict:
        """The reference position of what lies at ``(x, y)`` in the image of frame ``k``."""
        from dic.view.motion import to_reference

        X, Y = to_reference(self.field(self._frame(int(k))), x, y)
        return {"x": X, "y": Y}

    def info(self) -> dict:
        """Everything the page needs once: frames, grid, image size, choices."""
        from dic.strain import COMPONENTS, MEASURES

        r = self.results
        gx, gy = r.grid_x, r.grid_y
        shape = list(self.info_shape())
        step = float(gx[0, 1] - gx[0, 0]) if gx.shape[1] > 1 else float(
            r.settings.get("step", 1))
        return {
            "mode": "results", "name": self.path.name, "frames": self.n,
            "image_names": [Path(n).name for n in r.image_names[: self.n]],
            "image_shape": shape, "grid": {"x0": float(gx[0, 0]), "y0": float(gy[0, 0]),
                                           "step": step, "nx": int(gx.shape[1]),
                                           "ny": int(gx.shape[0])},
            "reference": [int(i) for i in r.reference_indices],
            "scale": r.scale, "time": _nums(self.time), "force": _nums(self.force),
            "has_time": bool(np.isfinite(self.time).any()),
            "has_force": bool(np.isfinite(self.force).any()),
            "components": [c for c in COMPONENTS if c != "zz"], "measures": list(MEASURES),
            "window": self.window, "measure": self.measure, "reasons": REASONS,
            "settings": {k: v for k, v in r.settings.items() if k in (
                "subset", "step", "shape_function", "interpolation", "min_zncc")},
        }

    # -- pictures -----------------------------------------------------------------------------
    def _image(self, k):
        from dic.images.io import read_image

        names = self.results.image_names
        if not 0 <= k < len(names):
            raise InputError(f"frame: give an image number from 0 to {len(names) - 1}")
        return read_image(names[k], name=f"image {k}")

    def image_png(self, k: int) -> bytes:
        """Image ``k`` of the sequence as an 8-bit PNG."""
        with self._lock:
            return self._images.get(k, lambda: grey_png(self._image(k)))

    def _frame(self, k):
        if not 0 <= k < self.n:
            raise InputError(f"frame: give a frame number from 0 to {self.n - 1}")
        return k

    def field(self, k):
        """The displacement field of frame ``k`` (kept for later requests)."""
        with self._lock:
            return self._fields.get(k, lambda: self.results.field(self._frame(k)))

    def strain(self, k, measure, window):
        """The strain field of frame ``k`` (what ``Results.strain(k, ...)`` returns)."""
        from dic.errors import TooFewPoints
        from dic.strain import canonical_measure

        measure = canonical_measure(measure)
        with self._lock:
            def make():
                try:  # surface strain for two cameras, lens-corrected strain for one
                    return self.results.strain(self._frame(k), window=int(window),
                                               measure=measure)
                except TooFewPoints:
                    return None
            return self._strains.get((self._frame(k), measure, int(window)), make)

    def values(self, k, component, measure, window):
        """One strain component of frame ``k`` on the grid (NaN where blank)."""
        s = self.strain(k, measure, window)
        if s is None:
            return np.full(self.results.shape, np.nan)
        return s.component(component)

    def code_grid(self, k, component, measure, window) -> np.ndarray:
        """Reason code per grid point (``9``: measured, too few neighbours for the window)."""
        reason = np.asarray(self.field(k).reason, dtype=np.int64)
        v = self.values(k, component, measure, window)
        return np.clip(np.where((reason == 0) & ~np.isfinite(v), TOO_FEW_NEIGHBOURS, reason),
                       0, 9)

    def codes(self, k, component, measure, window) -> str:
        """One character per grid point (row by row): the reason code, ``9`` = too few points."""
        return "".join(str(int(q)) for q in self.code_grid(k, component, measure, window).ravel())

    def limits(self, k, component, measure, window, mode):
        """Colour limits over every frame (``"shared"``) or over frame ``k`` (``"frame"``)."""
        if mode == "frame":
            return robust_limits(self.values(k, component, measure, window), component)
        key = (component, measure, window)
        with self._lock:
            if key not in self._limits:
                # the widest of the frames' own scales, as the report's shared scale
                from dic.figures.common import robust_top

                top = max(robust_top(self.values(j, component, measure, window))
                          for j in range(self.n))
                self._limits[key] = limits_for_top(top, component)
            return self._limits[key]

    def frame_map(self, k, component="xx", measure=DEFAULT_MEASURE, window=DEFAULT_WINDOW,
                  mode="shared", lo=None, hi=None, under="ref") -> dict:
        """The colour map of one strain component at frame ``k``, its limits and reason codes.

        ``under="ref"``: one map pixel per grid point, over the reference image. ``"cur"``:
        the map moved with the material over the image of frame ``k``
        (:func:`dic.view.motion.current_grid_map`). ``geom`` gives the centre of the first map
        pixel, its size and the map's size in image px.
        """
        from dic.strain import COMPONENTS

        if component not in COMPONENTS:
            raise InputError(f"component: use one of {', '.join(COMPONENTS)}")
        window = self._window(window)
        if mode == "manual":
            if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi)
                                                and hi > lo):
                raise InputError("limits: give a lower and a higher number")
        else:
            if mode not in ("shared", "frame"):
                raise InputError("limits: use shared, frame or manual")
            lo, hi = self.limits(k, component, measure, window, mode)
        v = self.values(k, component, measure, window)
        gx, gy = self.results.grid_x, self.results.grid_y
        step = float(gx[0, 1] - gx[0, 0]) if gx.shape[1] > 1 else 1.0
        geom = {"x0": float(gx[0, 0]), "y0": float(gy[0, 0]), "step": step,
                "nx": int(gx.shape[1]), "ny": int(gx.shape[0])}
        if under == "cur":
            from dic.view.motion import current_grid_map

            cell = max(1.0, step / 2)
            shape = self.info_shape()
            f = self.field(k)
            codes = current_grid_map(f, self.code_grid(k, component, measure, window), shape,
                                     cell)
            v = current_grid_map(f, v, shape, cell)
            geom = {"x0": cell / 2 - 0.5, "y0": cell / 2 - 0.5, "step": cell,
                    "nx": int(v.shape[1]), "ny": int(v.shape[0])}
            code_text = "".join("-" if not np.isfinite(q) else str(int(q)) for q in codes.ravel())
        elif under == "ref":
            code_text = self.codes(k, component, measure, window)
        else:
            raise InputError("under: use ref (reference image) or cur (image of the frame)")
        cmap = colour_map_for(component)
        small = v.size <= _MAX_HOVER_VALUES
        return {"frame": k, "component": component, "lo": lo, "hi": hi, "cmap": cmap,
                "map": data_url(map_png(v, lo, hi, cmap)),
                "bar": data_url(map_png(np.linspace(lo, hi, 256)[None, :], lo, hi, cmap)),
                # four significant digits for the read-out under the pointer
                "values": [None if not math.isfinite(q) else float(f"{q:.4g}")
                           for q in v.ravel()] if small else None,
                "codes": code_text, "geom": geom, "under": under,
                "n_measured": int(np.isfinite(self.values(k, component, measure,
                                                          window)).sum())}

    @staticmethod
    def _window(window):
        w = int(window)
        if w < 3 or w % 2 == 0:
            raise InputError("window: give an odd number of grid points, at least 3")
        return w

    # -- histories ----------------------------------------------------------------------------
    def nearest(self, x, y):
        """Row and column of the grid point nearest ``(x, y)`` px."""
        gx, gy = self.results.grid_x, self.results.grid_y
        d = (gx - x) ** 2 + (gy - y) ** 2
        i, j = np.unravel_index(int(np.argmin(d)), d.shape)
        return int(i), int(j)

    def point(self, x, y, component="xx", measure=DEFAULT_MEASURE, window=DEFAULT_WINDOW) -> dict:
        """A component's value at the grid point nearest ``(x, y)`` (px) in every frame."""
        window = self._window(window)
        i, j = self.nearest(float(x), float(y))
        vals = [self.values(k, component, measure, window)[i, j] for k in range(self.n)]
        codes = [self.codes(k, component, measure, window)[i * self.results.shape[1] + j]
                 for k in range(self.n)]
        return {"i": i, "j": j, "x": float(self.results.grid_x[i, j]),
                "y": float(self.results.grid_y[i, j]), "component": component,
                "values": _nums(vals), "codes": [int(c) for c in codes]}

    def _gauge(self, g):
        from dic.tensile.gauges import AreaGauge, GaugeLine

        kind, pts, name = g.get("kind"), g.get("points") or [], str(g.get("name") or "")
        if kind == "line":
            if len(pts) != 2:
                raise InputError("gauge line: give two end points")
            return GaugeLine(tuple(pts[0]), tuple(pts[1]), name=name or "line")
        if kind == "area":
            return AreaGauge(tuple(tuple(p) for p in pts), name=name or "area")
        raise InputError("gauge kind: use line or area")

    def gauge(self, g, component="xx", measure=DEFAULT_MEASURE, window=DEFAULT_WINDOW) -> dict:
        """The history of one drawn gauge, from :func:`dic.tensile.gauges.gauge_histories`."""
        from dic.tensile.gauges import gauge_histories

        gauge = self._gauge(g)
        with self._lock:
            h = gauge_histories(self.results, gauge, window=self._window(window),
                                measure=measure, components=(component,))
        return {"name": gauge.name, "kind": g.get("kind"), "frame": [int(k) for k in h.frame],
                "columns": {c: _nums(v) for c, v in h.columns.items()},
                "units": dict(h.units), "notes": list(h.notes)}

    def export(self, gauges, component="xx", measure=DEFAULT_MEASURE,
               window=DEFAULT_WINDOW) -> dict:
        """Kept gauges as an analysis-file snippet and as the CSV of their histories."""
        from dic.tensile.gauges import gauge_histories

        made = [self._gauge(g) for g in gauges]
        if not made:
            raise InputError("gauges: keep at least one gauge first")
        with self._lock:
            h = gauge_histories(self.results, made, window=self._window(window),
                                measure=measure, components=(component,))
        h = h.with_time(self.time[h.frame]).with_force(self.force[h.frame])
        with tempfile.TemporaryDirectory() as tmp:
            csv = h.to_csv(Path(tmp) / "gauges.csv").read_text(encoding="utf-8")
        return {"toml": gauge_snippet(made, self.results.scale), "csv": csv}

    def quality(self) -> dict:
        """Per frame: median and lowest ZNCC, points measured, reference image and updates."""
        med, low, n = [], [], []
        for k in range(self.n):
            f = self.field(k)
            z = np.asarray(f.zncc, dtype=np.float64)[f.valid]
            med.append(_num(np.median(z)) if z.size else None)
            low.append(_num(z.min()) if z.size else None)
            n.append(int(f.n_valid))
        return {"zncc_median": med, "zncc_min": low, "measured": n,
                "points": int(np.prod(self.results.shape)),
                "reference": [int(i) for i in self.results.reference_indices],
                "updates": [int(i) for i in self.results.reference_updates],
                "min_zncc": self.results.settings.get("min_zncc")}


def gauge_snippet(gauges, scale) -> str:
    """Kept gauges as lines to paste into an analysis file.

    The ``[tensile]`` table takes a gauge length (``gauge_length_mm``); the drawn positions
    follow as comments so that the same gauges can be placed again with
    :class:`dic.tensile.GaugeLine` / :class:`dic.tensile.AreaGauge`.
    """
    from dic.tensile.gauges import GaugeLine

    lines = ["# gauges drawn on the review page (positions in px of the reference image)"]
    first = next((g for g in gauges if isinstance(g, GaugeLine)), None)
    if first is not None and scale:
        lines += ["[tensile]", f"gauge_length_mm = {first.length * scale:.4f}"
                  f"   # from gauge line {first.name!r}"]
    for g in gauges:
        if isinstance(g, GaugeLine):
            lines.append(f"# line {g.name}: start = [{g.start[0]:.3f}, {g.start[1]:.3f}], "
                         f"end = [{g.end[0]:.3f}, {g.end[1]:.3f}]")
        else:
            pts = ", ".join(f"[{x:.3f}, {y:.3f}]" for x, y in g.vertices)
            lines.append(f"# area {g.name}: corners = [{pts}]")
    return "\n".join(lines) + "\n"
