"""Tensile-test results from strain and stress: modulus, Poisson's ratio, proof strength, Rm, Ag,
Agt, n and r, each with the standard it follows and the range it was fitted over.

Works on plain arrays (:func:`tensile_results`), so strain may come from the gauges of
:mod:`dic.tensile.gauges` or from anywhere else. Engineering stress comes from force and the specimen's
cross-section (:func:`engineering_stress`); true stress and strain follow by volume constancy,
valid only up to the maximum force (:func:`true_stress_strain`).

Optical gauge results are indicative unless the set-up was verified as an extensometer (ISO 9513
/ ASTM E83); every output says so.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from dic import __version__
from dic.files import atomic_write
from dic.tensile import fits
from dic.tensile.histories import CAUTION

__all__ = ["tensile_results", "TensileResults", "Value", "engineering_stress",
           "true_stress_strain", "CAUTION"]

_STD = {
    "E": "ASTM E111", "nu": "ASTM E132", "Rp": "ISO 6892-1", "Rm": "ISO 6892-1",
    "Ag": "ISO 6892-1", "Agt": "ISO 6892-1", "n": "ISO 10275", "r": "ISO 10113",
}


@dataclass
class Value:
    """One result with its provenance.

    Attributes
    ----------
    key : str
        Short symbol, e.g. ``"E"``, ``"Rp0.2"``.
    name : str
        Plain-words name.
    value : float
        NaN when it could not be found (see ``note``).
    unit : str
        ``"MPa"``, ``"mm/mm"`` or ``"-"``.
    standard : str
        The standard the method follows.
    method : str
        How it was found, in words.
    fit_range : tuple of float or None
        ``(low, high)`` of the data range used, in ``range_unit``.
    range_unit : str
    points : int
        Records used (0 where not applicable).
    r2 : float
        Coefficient of determination of the fit (NaN where no fit).
    note : str
        Why a value is NaN, or a caveat.
    extra : dict
        Further numbers (intercepts, strains at the crossing, ...).
    """

    key: str
    name: str
    value: float
    unit: str
    standard: str
    method: str
    fit_range: tuple | None = None
    range_unit: str = ""
    points: int = 0
    r2: float = math.nan
    note: str = ""
    extra: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        """JSON-ready dict (NaN becomes None)."""
        return {"key": self.key, "name": self.name, "value": _json_num(self.value),
                "unit": self.unit, "standard": self.standard, "method": self.method,
                "fit_range": None if self.fit_range is None else
                [_json_num(v) for v in self.fit_range],
                "range_unit": self.range_unit, "points": int(self.points),
                "r2": _json_num(self.r2), "note": self.note,
                "extra": {k: _json_num(v) if isinstance(v, float) else v
                          for k, v in self.extra.items()}}


def _json_num(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


# --------------------------------------------------------------------------------------------
# stress
# --------------------------------------------------------------------------------------------
def engineering_stress(force, *, width=None, thickness=None, area=None) -> np.ndarray:
    """Engineering stress (MPa) from force (N) and the original cross-section.

    Parameters
    ----------
    force : array_like
        Newtons.
    width, thickness : float, optional
        Millimetres (a rectangular section).
    area : float, optional
        Square millimetres, instead of width and thickness.

    Returns
    -------
    ndarray
        MPa (N/mm^2); NaN where the force is NaN.

    Raises
    ------
    ValueError
        Missing, extra or non-positive dimensions.
    """
    if area is not None:
        if width is not None or thickness is not None:
            raise ValueError("give either area or width and thickness, not both")
        a = _positive(area, "area")
    else:
        if width is None or thickness is None:
            raise ValueError("give the specimen's width and thickness (mm), or its area (mm^2)")
        a = _positive(width, "width") * _positive(thickness, "thickness")
    return np.asarray(force, dtype=np.float64) / a


def _positive(v, what) -> float:
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected a number, got {v!r}") from None
    if not (x > 0 and math.isfinite(x)):
        raise ValueError(f"{what}: must be a positive number, got {v!r}")
    return x


def true_stress_strain(strain, stress):
    """True strain and true stress by volume constancy, up to the maximum force.

    ``eps = ln(1 + e)``, ``sigma = s (1 + e)``; NaN after the largest stress, where necking
    makes the deformation non-uniform.

    Parameters
    ----------
    strain, stress : array_like
        Engineering strain (mm/mm) and stress (MPa), in test order.

    Returns
    -------
    true_strain, true_stress : ndarray
    """
    e, s = _arrays(strain, stress)
    ok = np.isfinite(e) & np.isfinite(s)
    te = np.full(e.size, np.nan)
    ts = np.full(e.size, np.nan)
    if ok.any():
        idx = np.flatnonzero(ok)
        a, b = fits.true_curve(e[ok], s[ok], fits.loading_end(s[ok]))
        te[idx], ts[idx] = a, b
    return te, ts


def _arrays(strain, stress):
    try:
        e = np.asarray(strain, dtype=np.float64).ravel()
        s = np.asarray(stress, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        raise ValueError("strain and stress must be arrays of numbers") from None
    if e.size != s.size:
        raise ValueError(f"strain has {e.size} values but stress has {s.size}; give one stress "
                         "per strain")
    return e, s


# --------------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------------
@dataclass
class TensileResults:
    """Results of a tensile test with their provenance.

    Attributes
    ----------
    values : dict of str -> Value
        ``E``, ``nu`` (with a transverse strain), ``Rp0.2`` (and other offsets), ``Rm``,
        ``Ag``, ``Agt``, ``n``, ``r`` (with a transverse strain).
    strain, stress : ndarray
        The records used (engineering, mm/mm and MPa).
    transverse : ndarray or None
    true_strain, true_stress : ndarray
        NaN after the maximum force.
    offsets : dict of str -> float
        Offset (mm/mm) of each proof strength.
    notes : list of str
    caution : str
    """

    values: dict
    strain: np.ndarray
    stress: np.ndarray
    transverse: np.ndarray | None
    true_strain: np.ndarray
    true_stress: np.ndarray
    offsets: dict
    notes: list = field(default_factory=list)
    caution: str = CAUTION

    def __getitem__(self, key) -> Value:
        try:
            return self.values[key]
        except KeyError:
            raise KeyError(f"no result {key!r}; results: {', '.join(self.values)}") from None

    def __contains__(self, key) -> bool:
        return key in self.values

    def __str__(self) -> str:
        return self.table()

    # -- printing -------------------------------------------------------------------------------
    def table(self) -> str:
        """The results as a plain-text table, with the caution below it."""
        rows = [("result", "symbol", "value", "unit", "standard", "range / method")]
        for v in self.values.values():
            val, unit = _shown(v)
            rows.append((v.name, v.key, val, unit, v.standard, _range_text(v)))
        widths = [max(len(r[i]) for r in rows) for i in range(5)]
        out = []
        for j, r in enumerate(rows):
            out.append("  ".join(c.ljust(w) for c, w in zip(r[:5], widths)) + "  " + r[5])
            if j == 0:
                out.append("-" * (sum(widths) + 10 + len(r[5])))
        notes = [f"{v.key}: {v.note}" for v in self.values.values() if v.note] + self.notes
        if notes:
            out.append("")
            out += [f"note: {n}" for n in notes]
        out.append("")
        out.append(f"caution: {self.caution}")
        return "\n".join(out)

    def to_dict(self) -> dict:
        """JSON-ready dict of every value, the notes and the caution."""
        return {"software": f"dic {__version__}", "caution": self.caution,
                "values": {k: v.as_dict() for k, v in self.values.items()},
                "notes": list(self.notes)}

    def to_json(self, path=None):
        """The results as JSON text, also written to ``path`` when given."""
        text = json.dumps(self.to_dict(), indent=2, allow_nan=False)
        if path is not None:
            _write(path, text + "\n")
        return text

    def to_csv(self, path) -> Path:
        """One row per result: ``key,name,value,unit,standard,range_low,range_high,range_unit,
        points,r2,method,note`` (``value``, the range, ``points`` and ``r2`` are numbers); the
        caution and notes go into a sidecar JSON of the same name (``tensile.json`` beside
        ``tensile.csv`` holds them with every value)."""
        head = ["key", "name", "value", "unit", "standard", "range_low", "range_high",
                "range_unit", "points", "r2", "method", "note"]
        lines = [",".join(head)]
        for v in self.values.values():
            lo, hi = v.fit_range if v.fit_range is not None else (math.nan, math.nan)
            cells = [v.key, v.name, _g(v.value), v.unit, v.standard, _g(lo), _g(hi),
                     v.range_unit, str(int(v.points)), _g(v.r2), v.method, v.note]
            lines.append(",".join(_csv_cell(c) for c in cells))
        return _write(path, "\n".join(lines) + "\n")


def _g(v) -> str:
    v = float(v)
    return "nan" if not math.isfinite(v) else repr(v)


def _csv_cell(text) -> str:
    text = str(text)
    if any(c in text for c in ',"\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


def _write(path, text) -> Path:
    p = Path(os.fspath(path))
    try:
        with atomic_write(p, encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        raise OSError(f"path: cannot write '{p}' ({exc.strerror or exc}); check the folder and "
                      "permissions") from None
    return p


def _shown(v: Value):
    if not math.isfinite(v.value):
        return "n/a", v.unit
    if v.key == "E":
        return f"{v.value / 1000:.2f}", "GPa"
    if v.unit == "MPa":
        return f"{v.value:.1f}", "MPa"
    if v.unit == "mm/mm":
        return f"{100 * v.value:.2f}", "%"
    return f"{v.value:.3f}", v.unit


def _range_text(v: Value) -> str:
    parts = []
    if v.fit_range is not None:
        lo, hi = v.fit_range
        if v.range_unit == "mm/mm":
            parts.append(f"{100 * lo:.3g} .. {100 * hi:.3g} % strain")
        else:
            parts.append(f"{lo:.4g} .. {hi:.4g} {v.range_unit}")
    if v.points:
        parts.append(f"{v.points} points")
    if math.isfinite(v.r2):
        parts.append(f"r^2 {v.r2:.5f}")
    return ", ".join(parts) if parts else v.method


def _pair(value, what, unit):
    try:
        lo, hi = (float(x) for x in value)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected (low, high) in {unit}, got {value!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise ValueError(f"{what}: expected finite low < high in {unit}, got {value!r}")
    return lo, hi


def tensile_results(strain, stress, *, transverse=None, modulus=None, modulus_range=None,
                    offsets=(0.2,), n_range=None, r_range=None,
                    peak_stress=None) -> TensileResults:
    """Tensile properties from engineering strain and stress, each with its fit range.

    Parameters
    ----------
    strain : array_like
        Axial engineering strain (mm/mm), in test order (e.g. a gauge line's ``engineering``
        history).
    stress : array_like
        Engineering stress (MPa) at the same records.
    transverse : array_like, optional
        Engineering strain across the axis (width) at the same records; gives Poisson's ratio
        and the plastic strain ratio ``r``.
    modulus : float, optional
        A known modulus (MPa) used instead of fitting one (the offset line then passes through
        zero strain at zero stress).
    modulus_range : (float, float), optional
        Stress range (MPa) of the modulus fit; default 10 % to 40 % of the largest stress.
    offsets : sequence of float
        Offsets of the proof strengths, in % strain (``0.2`` gives ``Rp0.2``).
    n_range, r_range : (float, float), optional
        Engineering strain range (mm/mm) for ``n`` and ``r``; default from 2 % (or half of
        ``Agt`` when ``Agt`` < 4 %) to ``Agt``.
    peak_stress : float, optional
        Largest engineering stress of the whole force record (MPa), when the strain records
        are sparser than the force log; used for ``Rm`` (``Agt`` still comes from the records).

    Returns
    -------
    TensileResults
        ``E`` (MPa), ``nu``, ``Rp<offset>`` (MPa), ``Rm`` (MPa), ``Ag`` and ``Agt`` (mm/mm),
        ``n`` (with ``K`` in ``extra``), ``r``. A value that cannot be found is NaN with a note.

    Raises
    ------
    ValueError
        Arrays of different lengths or too short; fewer than three records in the modulus range
        (the message lists the stresses there).

    Notes
    -----
    - Modulus: least-squares line of stress on strain over the stress range (loading branch
      only), with ``r^2`` and the slope's relative standard error (ASTM E111's ``V1``).
    - Poisson's ratio: ``-(d e_t / d s) / (d e_a / d s)``, both slopes by least squares over
      the modulus range (ASTM E132).
    - Proof strength: the first crossing of the curve with a line of slope ``E`` offset by the
      given plastic strain from the fitted line's zero-stress strain (which corrects a toe),
      linear between the records (ISO 6892-1).
    - ``Rm`` the largest stress, ``Agt`` the total strain there and ``Ag = Agt - Rm / E``
      (ISO 6892-1).
    - ``n``: least-squares line of ``ln sigma`` on ``ln eps_p`` with the true stress
      ``sigma = s (1 + e)`` and true plastic strain ``eps_p = ln(1 + e) - sigma / E``, over
      ``n_range`` before the maximum force (ISO 10275).
    - ``r``: slope ``m`` of true plastic width strain on true plastic length strain over
      ``r_range``; with volume constancy the thickness strain is ``-(width + length)`` and
      ``r = -m / (1 + m)`` (ISO 10113).

    References
    ----------
    .. [1] ASTM E111, Standard Test Method for Young's Modulus, Tangent Modulus, and Chord
       Modulus.
    .. [2] ASTM E132, Standard Test Method for Poisson's Ratio at Room Temperature.
    .. [3] ISO 6892-1, Metallic materials -- Tensile testing -- Part 1: Method of test at room
       temperature.
    .. [4] ISO 10275, Metallic materials -- Sheet and strip -- Determination of tensile strain
       hardening exponent.
    .. [5] ISO 10113, Metallic materials -- Sheet and strip -- Determination of plastic strain
       ratio.
    .. [6] A. Considere, Annales des Ponts et Chaussees 9 (1885) 574-775 (maximum force where
       d sigma / d eps = sigma).
    """
    e_all, s_all = _arrays(strain, stress)
    t_all = None
    if transverse is not None:
        t_all = np.asarray(transverse, dtype=np.float64).ravel()
        if t_all.size != e_all.size:
            raise ValueError(f"transverse has {t_all.size} values but strain has {e_all.size}; "
                             "give one per record")
    keep = np.isfinite(e_all) & np.isfinite(s_all)
    notes = []
    if not keep.all():
        notes.append(f"{int((~keep).sum())} of {keep.size} records without strain or stress "
                     "were left out")
    e, s = e_all[keep], s_all[keep]
    t = None if t_all is None else t_all[keep]
    if e.size < 4:
        raise ValueError(f"strain, stress: {e.size} complete records; a tensile curve needs at "
                         "least four")
    if not np.nanmax(s) > 0:
        raise ValueError("stress: no positive stress; check the force column and its sign")
    iend = fits.loading_end(s)
    values = {}
    smax = float(s[iend])

    # modulus (ASTM E111)
    if modulus is not None:
        E = _positive(modulus, "modulus")
        e0 = 0.0
        mask = None
        values["E"] = Value("E", "modulus (given)", E, "MPa", "given", "given by the user")
        lo_m, hi_m = _pair(modulus_range, "modulus_range", "MPa") if modulus_range else \
            (0.1 * smax, 0.4 * smax)
    else:
        lo_m, hi_m = (_pair(modulus_range, "modulus_range", "MPa") if modulus_range is not None
                      else (0.1 * smax, 0.4 * smax))
        m = fits.modulus(e, s, lo_m, hi_m)
        E, e0, mask = m["E"], m["strain_at_zero"], m["mask"]
        values["E"] = Value(
            "E", "Young's modulus", E, "MPa", _STD["E"],
            "least-squares line of stress on strain (loading branch)", (lo_m, hi_m), "MPa",
            m["points"], m["r2"],
            extra={"intercept_MPa": m["intercept"], "strain_at_zero_stress": e0,
                   "slope_cv_percent": m["cv"]})
    if mask is None:
        idx = np.arange(e.size)
        mask = (idx <= iend) & (s >= lo_m) & (s <= hi_m)

    # Poisson's ratio (ASTM E132)
    if t is not None:
        p = fits.poisson(e, t, s, mask)
        values["nu"] = Value("nu", "Poisson's ratio", p["nu"], "-", _STD["nu"],
                             "ratio of the slopes of transverse and axial strain on stress",
                             (lo_m, hi_m), "MPa", p["points"], p["r2_transverse"],
                             note=p.get("why", ""),
                             extra={"r2_axial": p["r2_axial"],
                                    "r2_transverse": p["r2_transverse"]})

    # proof strengths (ISO 6892-1)
    offs = {}
    for off in ([offsets] if isinstance(offsets, (int, float)) else list(offsets)):
        o = _positive(off, "offsets")
        key = f"Rp{o:g}"
        offs[key] = o / 100.0
        ps = fits.proof_strength(e, s, E, e0, o / 100.0)
        values[key] = Value(key, f"{o:g} % proof strength", ps["value"], "MPa", _STD["Rp"],
                            f"offset line of slope E through {o:g} % plastic strain",
                            None, "", 0, note=ps.get("why", ""),
                            extra={"strain_at_crossing": ps["strain"]})

    # maximum force (ISO 6892-1)
    mx = fits.maximum(e, s, E)
    rm, rm_note = mx["Rm"], mx.get("why", "")
    if peak_stress is not None:
        rm_rec = rm
        rm = _positive(peak_stress, "peak_stress")
        if rm < rm_rec - 1e-9 * rm_rec:
            raise ValueError(f"peak_stress: {rm:g} MPa is below the largest stress of the "
                             f"records ({rm_rec:g} MPa); give the force record's maximum")
        values["Rm"] = Value("Rm", "tensile strength", rm, "MPa", _STD["Rm"],
                             "largest force of the whole force record / original area",
                             note=rm_note, extra={"largest_at_records_MPa": rm_rec})
    else:
        values["Rm"] = Value("Rm", "tensile strength", rm, "MPa", _STD["Rm"],
                             "largest stress of the records", note=rm_note)
    agt = mx["Agt"]
    ag = agt - rm / E if math.isfinite(agt) else math.nan
    values["Ag"] = Value("Ag", "plastic elongation at maximum force", ag, "mm/mm", _STD["Ag"],
                         "Agt - Rm / E", note=rm_note)
    values["Agt"] = Value("Agt", "total elongation at maximum force", agt, "mm/mm",
                          _STD["Agt"], "strain at the largest recorded stress", note=rm_note)

    # default strain range for n and r: 2 % (or Agt / 2) to Agt
    default_range = None
    if math.isfinite(agt):
        default_range = (0.02, agt) if agt > 0.04 else (0.5 * agt, agt)

    def strain_range(given, what):
        if given is not None:
            return _pair(given, what, "mm/mm")
        return default_range

    # n (ISO 10275)
    nr = strain_range(n_range, "n_range")
    if nr is None:
        values["n"] = Value("n", "strain-hardening exponent", math.nan, "-", _STD["n"],
                            "log-log line of true stress on true plastic strain",
                            note="no maximum force in the records; give n_range")
    else:
        h = fits.hardening(e, s, E, nr[0], nr[1], iend)
        values["n"] = Value("n", "strain-hardening exponent", h["n"], "-", _STD["n"],
                            "log-log line of true stress on true plastic strain", nr, "mm/mm",
                            h["points"], h["r2"], note=h.get("why", ""),
                            extra={"K_MPa": h["K"]})

    # r (ISO 10113)
    if t is not None:
        rr = strain_range(r_range, "r_range")
        nu = values["nu"].value if "nu" in values else math.nan
        if rr is None:
            values["r"] = Value("r", "plastic strain ratio", math.nan, "-", _STD["r"],
                                "width on length true plastic strain, volume constancy",
                                note="no maximum force in the records; give r_range")
        else:
            pr = fits.plastic_ratio(e, t, s, E, nu, rr[0], rr[1], iend)
            values["r"] = Value("r", "plastic strain ratio", pr["r"], "-", _STD["r"],
                                "slope of width on length true plastic strain, volume "
                                "constancy", rr, "mm/mm", pr["points"], pr["r2"],
                                note=pr.get("why", ""), extra={"slope": pr["slope"]})

    te, ts = fits.true_curve(e, s, iend)
    return TensileResults(values=values, strain=e, stress=s, transverse=t, true_strain=te,
                          true_stress=ts, offsets=offs, notes=notes)
