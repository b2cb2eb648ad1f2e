"""Histories: per-frame values of gauges (and force), exported to CSV and plotted.

A :class:`History` is a small table: one row per frame, with the frame number, the image time
(s), the force (N) and named columns, each with its unit. It is what :mod:`dic.tensile.gauges` returns.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from dic import __version__
from dic.errors import InputError
from dic.files import write_sidecar, write_text

__all__ = ["History", "CAUTION", "poisson_ratio"]

#: the caution every gauge or tensile output carries (ISO 9513 / ASTM E83)
CAUTION = ("Optical gauge results are indicative unless the set-up was verified as an "
           "extensometer (ISO 9513 / ASTM E83 class) under the lab's accredited practice.")

_AGAINST = {"frame": ("frame", "Frame"), "time": ("time", "Time (s)"),
            "force": ("force", "Force")}


@dataclass
class History:
    """Per-frame values of gauges.

    Attributes
    ----------
    frame : ndarray of int
        Frame numbers in the results.
    time : ndarray of float64
        Image time, s (NaN where unknown).
    force : ndarray of float64
        Force, N (NaN where unknown).
    columns : dict of str -> ndarray
        Named value columns, e.g. ``"axial.engineering"``.
    units : dict of str -> str
        Unit of each column (``"mm/mm"`` for strain).
    notes : list of str
        How the values were made (strain measure, window, VSG; shear is tensor shear).
    """

    frame: np.ndarray
    time: np.ndarray
    force: np.ndarray
    columns: dict
    units: dict
    notes: list = field(default_factory=list)

    def __len__(self) -> int:
        return int(self.frame.size)

    def __getitem__(self, name) -> np.ndarray:
        if name in ("frame", "time", "force"):
            return getattr(self, name)
        if name in self.columns:
            return self.columns[name]
        # a strain measure may be named by any of its aliases ("axial.true", "axial.log")
        head, _, measure = str(name).rpartition(".")
        if head:
            from dic.strain import canonical_measure

            try:
                key = f"{head}.{canonical_measure(measure)}"
            except ValueError:
                key = None
            if key in self.columns:
                return self.columns[key]
        raise KeyError(f"no column {name!r}; columns: {', '.join(self.columns)}")

    @property
    def names(self) -> list[str]:
        """Column names, in order."""
        return list(self.columns)

    # -- combining ------------------------------------------------------------------------------
    def with_force(self, force) -> History:
        """A copy with the force column set (N, one value per frame)."""
        f = np.asarray(force, dtype=np.float64).ravel()
        if f.size != len(self):
            raise ValueError(f"force: {f.size} values for {len(self)} frames; give one force "
                             "per frame (see dic.tensile.forcesync.synchronise)")
        return replace(self, force=f.copy(), columns=dict(self.columns), units=dict(self.units),
                       notes=list(self.notes))

    def with_time(self, time) -> History:
        """A copy with the time column set (s, one value per frame)."""
        t = np.asarray(time, dtype=np.float64).ravel()
        if t.size != len(self):
            raise ValueError(f"time: {t.size} values for {len(self)} frames; give one time "
                             "per frame")
        return replace(self, time=t.copy(), columns=dict(self.columns), units=dict(self.units),
                       notes=list(self.notes))

    def join(self, other: History) -> History:
        """A new history with the columns of both (same frames, distinct column names)."""
        if not np.array_equal(self.frame, other.frame):
            raise ValueError("other: histories of different frames cannot be joined; use the "
                             "same frames")
        both = set(self.columns) & set(other.columns)
        if both:
            raise ValueError(f"other: column names used twice ({', '.join(sorted(both))}); "
                             "give the gauges distinct names")
        time = np.where(np.isnan(self.time), other.time, self.time)
        force = np.where(np.isnan(self.force), other.force, self.force)
        notes = list(self.notes) + [n for n in other.notes if n not in self.notes]
        return History(self.frame.copy(), time, force, {**self.columns, **other.columns},
                       {**self.units, **other.units}, notes)

    # -- output ---------------------------------------------------------------------------------
    def to_csv(self, path) -> Path:
        """Write a CSV: a header with units, then one row of numbers per frame.

        The header reads ``frame,time [s],force [N],axial.length [mm],...``; NaN is ``nan``, so
        ``pandas.read_csv(path)`` reads every column as numbers. The caution and how the values
        were made go into a sidecar JSON of the same name (``gauges.csv`` -> ``gauges.json``).

        Parameters
        ----------
        path : str or os.PathLike

        Returns
        -------
        pathlib.Path

        Raises
        ------
        OSError
            The file cannot be written.
        """
        p = Path(os.fspath(path))
        head = ["frame", "time [s]", "force [N]"] + [f"{k} [{self.units.get(k, '')}]"
                                                     for k in self.columns]
        lines = [",".join(head)]
        write_sidecar(p, {"content": "gauge histories, one row per frame", "caution": CAUTION,
                          "notes": list(self.notes)}, software=f"dic {__version__}")
        cols = [self.time, self.force, *self.columns.values()]
        for i, k in enumerate(self.frame):
            lines.append(",".join([str(int(k))] + [_num(c[i]) for c in cols]))
        return write_text(p, "\n".join(lines) + "\n")

    def plot(self, columns=None, *, against="frame", ax=None, scale=1.0, ylabel=None):
        """Lines of some columns against frame, time or force.

        Parameters
        ----------
        columns : sequence of str, optional
            Default: the engineering strain of every gauge line and the mean of every area
            gauge component in mm/mm (else every strain column).
        against : {"frame", "time", "force"}
        ax : matplotlib Axes, optional
            Draw here; a new Agg figure otherwise.
        scale : float
            Multiply the values (100 shows strain in %).
        ylabel : str, optional
            Default: built from the columns' unit (and ``scale``).

        Returns
        -------
        fig, ax
        """
        if against not in _AGAINST:
            raise ValueError(f"against: use 'frame', 'time' or 'force', got {against!r}")
        if columns is None:
            strains = [k for k, u in self.units.items() if u == "mm/mm"]
            columns = [k for k in strains if k.endswith((".engineering", ".mean"))] \
                or strains or self.names
        columns = [columns] if isinstance(columns, str) else list(columns)
        for c in columns:
            self[c]  # raises with the list of names
        x = self.frame.astype(float) if against == "frame" else getattr(self, against)
        xlabel = _AGAINST[against][1]
        if against == "force":
            big = np.nanmax(np.abs(x)) >= 1000.0 if np.isfinite(x).any() else False
            x, xlabel = (x / 1000.0, "Force (kN)") if big else (x, "Force (N)")
        if not np.isfinite(x).any():
            raise ValueError(f"against: the history has no {against} values; attach them first "
                             f"(with_{against}) or plot against frame")
        fig, ax = _axes(ax)
        colours = _colours(len(columns))
        for c, colour, style in zip(columns, colours, _styles(len(columns))):
            ax.plot(x, self[c] * scale, color=colour, linestyle=style, marker=".", label=c)
        units = {self.units.get(c, "") for c in columns}
        if ylabel is None:
            unit = units.pop() if len(units) == 1 else "mixed units"
            if unit == "mm/mm" and scale == 100:
                unit = "%"
            elif scale != 1:
                unit = f"{unit} x {scale:g}"
            ylabel = f"Value ({unit})" if unit != "mm/mm" else "Strain (mm/mm)"
            if unit == "%":
                ylabel = "Strain (%)"
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize="small")
        return fig, ax


def _num(v) -> str:
    v = float(v)
    return "nan" if v != v else repr(v)


def _axes(ax):
    if ax is not None:
        return ax.figure, ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.0, 4.5), layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot()


def _colours(n):
    """``n`` colours from the perceptually uniform ``viridis`` map (its light end left out)."""
    from matplotlib import colormaps

    cmap = colormaps["viridis"]
    return [cmap(v) for v in (np.linspace(0.0, 0.8, n) if n > 1 else [0.0])]


def _styles(n):
    base = ["-", "--", "-.", ":"]
    return [base[i % len(base)] for i in range(n)]


def poisson_ratio(history: History, axial="axial", transverse="transverse",
                  quantity="engineering") -> np.ndarray:
    """Frame-by-frame ratio ``-transverse / axial`` of two gauge lines.

    For Poisson's ratio as a material property use the slopes over the elastic range
    (:func:`dic.tensile_results` with ``transverse=``, ASTM E132); this per-frame ratio is
    noisy at small strain and is not Poisson's ratio once the material flows.

    Parameters
    ----------
    history : History
    axial, transverse : str
        Gauge line names.
    quantity : {"engineering", "hencky", "green-lagrange"}
        A strain measure of the gauge lines (aliases such as ``"true"`` are accepted).

    Returns
    -------
    ndarray
        NaN where the axial strain is zero or unknown.
    """
    from dic.strain import canonical_measure

    try:
        quantity = canonical_measure(quantity)
    except ValueError:
        quantity = None
    if quantity not in ("engineering", "hencky", "green-lagrange"):
        raise InputError("quantity: use 'engineering', 'hencky' (true strain) or "
                         "'green-lagrange'")
    a = history[f"{axial}.{quantity}"]
    t = history[f"{transverse}.{quantity}"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out = -t / a
    out[~np.isfinite(out)] = np.nan
    return out
