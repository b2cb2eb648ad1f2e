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

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from dic import __version__
from dic.files import json_text, write_text
from dic.tensile import fits
from dic.tensile.histories import CAUTION

__all__ = ["tensile_results", "TensileResults", "Value", "engineering_stress",
           "true_stress_strain", "CAUTION", "shown_value", "basis_text"]

#: warn when E rests on fewer records than this, or fits worse (common practice, no source)
MIN_MODULUS_RECORDS = 8
MIN_MODULUS_R2 = 0.999
#: warn when the records around a proof-strength crossing are further apart than this share of
#: the offset, or differ in stress by more than this share of the value (no source)
WIDE_GAP = 1.0
WIDE_STEP = 0.02

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
    warnings : list of str
        Results that rest on thin ground (few records, a poor fit, a wide gap, the maximum at
        the last record); also printed with the table and shown in the report.
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
    warnings: list = field(default_factory=list)

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
        rows = [("result", "symbol", "value", "unit", "standard", "basis")]
        for v in self.values.values():
            val, unit = shown_value(v)
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
        if self.warnings:
            out.append("")
            out += [f"WARNING: {w}" for w in self.warnings]
        out.append("")
        out.append(f"caution: {self.caution}")
        return "\n".join(out)

    def to_dict(self) -> dict:
        """JSON-ready dict of every value, the notes and the caution."""
        return {"software": f"dic {__version__}", "caution": self.caution,
                "values": {k: v.as_dict() for k, v in self.values.items()},
                "notes": list(self.notes), "warnings": list(self.warnings)}

    def to_record(self) -> dict:
        """Everything, the records included, as a JSON-ready dict (see :meth:`from_record`)."""
        d = self.to_dict()
        d["offsets"] = dict(self.offsets)
        d["records"] = {k: _json_list(getattr(self, k)) for k in
                        ("strain", "stress", "transverse", "true_strain", "true_stress")}
        return d

    @classmethod
    def from_record(cls, d: dict) -> "TensileResults":
        """The results back from :meth:`to_record`."""
        def arr(v):
            return None if v is None else np.array([math.nan if x is None else x for x in v],
                                                   dtype=np.float64)

        values = {}
        for k, v in d["values"].items():
            fr = v.get("fit_range")
            values[k] = Value(
                v["key"], v["name"], _num_back(v["value"]), v["unit"], v["standard"],
                v["method"], None if fr is None else tuple(_num_back(x) for x in fr),
                v.get("range_unit", ""), int(v.get("points", 0)), _num_back(v.get("r2")),
                v.get("note", ""), {kk: (_num_back(vv) if vv is None or isinstance(vv, float)
                                         else vv) for kk, vv in v.get("extra", {}).items()})
        r = d["records"]
        return cls(values=values, strain=arr(r["strain"]), stress=arr(r["stress"]),
                   transverse=arr(r.get("transverse")), true_strain=arr(r["true_strain"]),
                   true_stress=arr(r["true_stress"]), offsets=dict(d.get("offsets", {})),
                   notes=list(d.get("notes", [])), caution=d.get("caution", CAUTION),
                   warnings=list(d.get("warnings", [])))

    def to_json(self, path=None):
        """The results as strict JSON text (NaN as null), also written to ``path`` when
        given."""
        text = json_text(self.to_dict())
        if path is not None:
            write_text(path, text)
        return text.rstrip("\n")

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
        return write_text(path, "\n".join(lines) + "\n")


def _json_list(a):
    if a is None:
        return None
    return [None if not math.isfinite(x) else float(x) for x in np.asarray(a, float).ravel()]


def _num_back(v):
    return math.nan if v is None else float(v)


def _g(v) -> str:
    v = float(v)
    return "nan" if not math.isfinite(v) else repr(v)


def _csv_cell(text) -> str:
    text = str(text)
    if any(c in text for c in ',"\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


def shown_value(v: Value):
    """``(text, unit)`` of a result as every output shows it: E in GPa, strengths in MPa,
    strains in %, ratios without a unit."""
    unit = {"mm/mm": "%", "-": ""}.get(v.unit, v.unit)
    if v.key == "E":
        unit = "GPa"
    if not math.isfinite(v.value):
        return "n/a", unit
    if v.key == "E":
        return f"{v.value / 1000:.2f}", "GPa"
    if v.unit == "MPa":
        return f"{v.value:.1f}", "MPa"
    if v.unit == "mm/mm":
        return f"{100 * v.value:.2f}", "%"
    return f"{v.value:.3f}", ""


def basis_text(v: Value) -> str:
    """What a result rests on and how uncertain it is, in words (the same in every output)."""
    x = v.extra
    parts = []

    def fin(k):
        return isinstance(x.get(k), float) and math.isfinite(x[k])

    if v.key == "E" and math.isfinite(v.value):
        parts.append(f"{v.points} records, R^2 {v.r2:.5f}")
        if fin("slope_se_MPa"):
            parts.append(f"standard error {x['slope_se_MPa'] / 1000:.2g} GPa")
    elif v.key.startswith("Rp") and fin("gap_strain"):
        parts.append(f"records {100 * x['gap_strain']:.3g} % strain apart around the crossing, "
                     f"{x['gap_stress_MPa']:.3g} MPa across")
    elif v.key in ("Ag", "Agt") and fin("halfwidth_strain") and math.isfinite(v.value):
        parts.append(f"maximum within +/-{100 * x['halfwidth_strain']:.2g} % strain "
                     f"({x.get('local_fit', '')} over {v.points} samples")
        if fin("vertex_se_strain"):
            parts[-1] += f", standard error {100 * x['vertex_se_strain']:.2g} %"
        parts[-1] += ")"
    elif v.points and math.isfinite(v.value):
        parts.append(f"{v.points} records")
        if math.isfinite(v.r2):
            parts[-1] += f", R^2 {v.r2:.5f}"
    return "; ".join(parts)


def _range_text(v: Value) -> str:
    parts = []
    if v.fit_range is not None:
        lo, hi = v.fit_range
        if v.range_unit == "mm/mm":
            parts.append(f"{100 * lo:.3g} .. {100 * hi:.3g} % strain")
        else:
            parts.append(f"{lo:.4g} .. {hi:.4g} {v.range_unit}")
    b = basis_text(v)
    if b:
        parts.append(b)
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
                    peak_stress=None, dense=None, dense_method=None) -> TensileResults:
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
        are sparser than the force log; used for ``Rm``.
    dense : (array_like, array_like), optional
        Strain and stress sampled more densely than the records (e.g. at the force log's rate,
        with the gauge strain interpolated in time between images); used to locate the
        maximum force for ``Agt`` and ``Ag``. Without it the records are used.
    dense_method : str, optional
        How ``dense`` was made, in words (shown with ``Ag``).

    Returns
    -------
    TensileResults
        ``E`` (MPa), ``nu``, ``Rp<offset>`` (MPa), ``Rm`` (MPa), ``Ag`` and ``Agt`` (mm/mm),
        ``n`` (with ``K`` in ``extra``), ``r``. A value that cannot be found is NaN with a note.

    Raises
    ------
    ValueError
        Arrays of different lengths or too short. Weak data never raise: a modulus range
        holding fewer than three records gives ``E`` = NaN with its reason, and the results
        that do not need ``E`` (``Rm``) are still given.

    Notes
    -----
    - Modulus: least-squares line of stress on strain over the stress range (loading branch
      only), with ``r^2`` and the slope's relative standard error (ASTM E111's ``V1``).
    - Poisson's ratio: ``-(d e_t / d s) / (d e_a / d s)``, both slopes by least squares over
      the modulus range (ASTM E132).
    - Proof strength: the first crossing of the curve with a line of slope ``E`` offset by the
      given plastic strain from the fitted line's zero-stress strain (which corrects a toe),
      linear between the records (ISO 6892-1).
    - ``Rm`` the largest stress; ``Agt`` the total strain at the maximum force, located by
      Swift's law fitted to the rising branch within 5 % of the maximum (Considere's
      condition), else by a cubic fitted near the top (the middle of a plateau), measured from
      the toe;
      ``Ag = Agt - Rm / E`` (ISO 6892-1).
    - Warnings (``warnings``): E on fewer than 8 records or R^2 below 0.999, a proof strength
      read across a wide gap between records, the maximum at the last record.
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
    warnings = []
    smax = float(s[iend])

    # modulus (ASTM E111); a modulus that cannot be found is NaN and the rest still follows
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
            "least-squares line of stress on strain over the records (loading branch)",
            (lo_m, hi_m), "MPa", m["points"], m["r2"], note=m.get("why", ""),
            extra={"intercept_MPa": m["intercept"], "strain_at_zero_stress": e0,
                   "slope_se_MPa": m["se"], "slope_cv_percent": m["cv"]})
        if math.isfinite(E):
            if m["points"] < MIN_MODULUS_RECORDS:
                warnings.append(f"E rests on {m['points']} records (fewer than "
                                f"{MIN_MODULUS_RECORDS}): record more images in the elastic "
                                "range or widen the modulus range")
            if m["r2"] < MIN_MODULUS_R2:
                warnings.append(f"E: the line fits poorly (R^2 {m['r2']:.4f} < "
                                f"{MIN_MODULUS_R2}); check the modulus range for the toe or "
                                "the onset of yield")
        else:
            warnings.append(f"E could not be found: {m['why']}")
    if mask is None:
        idx = np.arange(e.size)
        mask = (idx <= iend) & (s >= lo_m) & (s <= hi_m)
    toe = e0 if math.isfinite(e0) else 0.0
    ec = e - toe  # strain with the toe taken off (ISO 6892-1 toe correction)

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
        note = ps.get("why", "")
        wide = math.isfinite(ps["gap"]) and (ps["gap"] > WIDE_GAP * o / 100.0 or
                                             abs(ps["step"]) > WIDE_STEP * ps["value"])
        if wide:
            note = (f"the offset line crosses a wide gap between records ({100 * ps['gap']:.3g} "
                    f"% strain, {ps['step']:.3g} MPa apart): the value is a chord and may be "
                    "off; record more images around yield")
            warnings.append(f"{key}: {note}")
        values[key] = Value(key, f"{o:g} % proof strength", ps["value"], "MPa", _STD["Rp"],
                            f"offset line of slope E through {o:g} % plastic strain (toe "
                            "corrected), linear between the two records around the crossing",
                            None, "", 0, note=note,
                            extra={"strain_at_crossing": ps["strain"],
                                   "gap_strain": ps["gap"], "gap_stress_MPa": ps["step"]})

    # maximum force (ISO 6892-1)
    rm_rec = smax
    if peak_stress is not None:
        rm = _positive(peak_stress, "peak_stress")
        if rm < rm_rec - 1e-9 * rm_rec:
            raise ValueError(f"peak_stress: {rm:g} MPa is below the largest stress of the "
                             f"records ({rm_rec:g} MPa); give the force record's maximum")
        values["Rm"] = Value("Rm", "tensile strength", rm, "MPa", _STD["Rm"],
                             "largest force of the whole force record / original area",
                             extra={"largest_at_records_MPa": rm_rec})
    else:
        rm = rm_rec
        values["Rm"] = Value("Rm", "tensile strength", rm, "MPa", _STD["Rm"],
                             "largest stress of the records")
    if dense is not None:
        de, ds = (np.asarray(a, dtype=np.float64).ravel() for a in dense)
        mx = fits.maximum_fit(de - toe, ds, E=E)
        basis = dense_method or "dense samples"
    else:
        mx = fits.maximum_fit(ec, s, E=E)
        basis = "the records"
    if iend == e.size - 1 and "why" not in mx:
        mx = dict(mx, strain=math.nan, why="the largest stress is the last record: the test "
                                           "may have stopped before the maximum force")
    am_note = mx.get("why", "")
    if am_note:
        warnings.append(f"Ag, Agt: {am_note}")
    agt = mx["strain"]  # already measured from the toe
    ag = agt - rm / E if math.isfinite(agt) and math.isfinite(E) else math.nan
    if math.isfinite(agt) and not math.isfinite(E):
        am_note = "Ag needs the modulus, which could not be found"
    extra = {"halfwidth_strain": mx["halfwidth"], "vertex_se_strain": mx["se"],
             "local_fit": mx["how"], "toe_strain": toe}
    how = (f"local fit near the maximum force ({mx['how']}, {mx['points']} samples of "
           f"{basis}), toe corrected" if math.isfinite(agt) else "not found")
    values["Ag"] = Value("Ag", "plastic elongation at maximum force", ag, "mm/mm", _STD["Ag"],
                         "Agt - Rm / E; " + how, None, "", mx["points"], note=am_note,
                         extra=dict(extra))
    values["Agt"] = Value("Agt", "total elongation at maximum force", agt, "mm/mm",
                          _STD["Agt"], how, None, "", mx["points"], note=mx.get("why", ""),
                          extra=dict(extra))

    # default strain range for n and r: 2 % (or Agt / 2) to Agt (toe-corrected strain)
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
                            note="no maximum force in the records; give the strain range "
                                 "(--n-range, or n_range_percent in [tensile])")
    else:
        h = fits.hardening(ec, s, E, nr[0], nr[1], iend)
        values["n"] = Value("n", "strain-hardening exponent", h["n"], "-", _STD["n"],
                            "log-log line of true stress on true plastic strain (toe "
                            "corrected)", nr, "mm/mm", h["points"], h["r2"],
                            note=h.get("why", ""), extra={"K_MPa": h["K"]})

    # r (ISO 10113)
    if t is not None:
        rr = strain_range(r_range, "r_range")
        nu = values["nu"].value if "nu" in values else math.nan
        if rr is None:
            values["r"] = Value("r", "plastic strain ratio", math.nan, "-", _STD["r"],
                                "width on length true plastic strain, volume constancy",
                                note="no maximum force in the records; give the strain range "
                                     "(--n-range, or n_range_percent in [tensile])")
        else:
            pr = fits.plastic_ratio(ec, t, s, E, nu, rr[0], rr[1], iend)
            values["r"] = Value("r", "plastic strain ratio", pr["r"], "-", _STD["r"],
                                "slope of width on length true plastic strain, volume "
                                "constancy (toe corrected)", rr, "mm/mm", pr["points"],
                                pr["r2"], note=pr.get("why", ""), extra={"slope": pr["slope"]})

    if abs(toe) >= 5e-6:
        notes.append(f"toe correction: the modulus line meets zero stress at "
                     f"{100 * toe:.4f} % strain; every strain-based result (Rp, Agt, Ag, the "
                     "true curve, the n and r ranges) is measured from there")
    te, ts = fits.true_curve(ec, s, iend)
    return TensileResults(values=values, strain=e, stress=s, transverse=t, true_strain=te,
                          true_stress=ts, offsets=offs, notes=notes, warnings=warnings)
