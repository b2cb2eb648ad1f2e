"""The property algorithms of a tensile test on plain arrays (used by :mod:`dic.tensile.results`).

Conventions: ``e`` engineering strain (mm/mm), ``s`` engineering stress (MPa), in test order.
Every function returns plain numbers and never extrapolates: a value that cannot be found is
NaN with a reason.
"""

from __future__ import annotations

import math

import numpy as np


def line_fit(x, y):
    """Least-squares line ``y = slope x + intercept``.

    Returns
    -------
    slope, intercept, r2, n : float, float, float, int
        ``r2`` is the coefficient of determination ``1 - SS_res / SS_tot``.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = x.size
    xm, ym = x.mean(), y.mean()
    sxx = np.sum((x - xm) ** 2)
    sxy = np.sum((x - xm) * (y - ym))
    syy = np.sum((y - ym) ** 2)
    if n < 2 or sxx == 0:
        return math.nan, math.nan, math.nan, n
    slope = sxy / sxx
    intercept = ym - slope * xm
    r2 = (sxy * sxy) / (sxx * syy) if syy > 0 else 1.0
    return float(slope), float(intercept), float(r2), n


def slope_cv(r2, n):
    """Relative standard error of a fitted slope, % (ASTM E111's coefficient of variation V1).

    ``100 sqrt((1/r^2 - 1) / (n - 2))``; NaN for fewer than three points.
    """
    if n < 3 or not r2 > 0:
        return math.nan
    return 100.0 * math.sqrt(max(1.0 / r2 - 1.0, 0.0) / (n - 2))


def loading_end(s):
    """Index of the largest stress (first occurrence)."""
    return int(np.argmax(s))


def modulus(e, s, lo, hi, *, min_points=3):
    """Modulus by a least-squares line of stress on strain over ``lo <= s <= hi``.

    Only the loading branch (up to the largest stress) is used.

    Returns
    -------
    dict
        ``E``, ``intercept`` (MPa), ``strain_at_zero`` (``-intercept / E``), ``r2``, ``cv``,
        ``points``, ``mask``.

    Raises
    ------
    ValueError
        Fewer than ``min_points`` points in the range.
    """
    iend = loading_end(s)
    idx = np.arange(s.size)
    mask = (idx <= iend) & (s >= lo) & (s <= hi)
    n = int(mask.sum())
    if n < min_points:
        raise ValueError(f"modulus_range: {lo:g} .. {hi:g} MPa holds {n} point(s) of the loading "
                         f"curve (stresses there: {_few(s[:iend + 1])} MPa); widen it to hold at "
                         f"least {min_points}, or give modulus=")
    E, b, r2, _ = line_fit(e[mask], s[mask])
    if not E > 0:
        raise ValueError(f"modulus_range: the fitted slope over {lo:g} .. {hi:g} MPa is {E:g} "
                         "MPa, not positive; check the strain sign and the range")
    return {"E": E, "intercept": b, "strain_at_zero": -b / E, "r2": r2, "cv": slope_cv(r2, n),
            "points": n, "mask": mask}


def _few(values, k=6):
    v = np.round(np.asarray(values, dtype=float), 1)
    shown = ", ".join(f"{x:g}" for x in v[:k])
    return shown + (" ..." if v.size > k else "")


def poisson(e, t, s, mask):
    """Poisson's ratio from the slopes of axial and transverse strain against stress.

    ``nu = -(d e_t / d s) / (d e_a / d s)`` over the points of ``mask`` (ASTM E132).

    Returns
    -------
    dict
        ``nu``, ``r2_axial``, ``r2_transverse``, ``points``.
    """
    ok = mask & np.isfinite(t)
    n = int(ok.sum())
    if n < 3:
        return {"nu": math.nan, "r2_axial": math.nan, "r2_transverse": math.nan, "points": n,
                "why": f"only {n} point(s) with a transverse strain in the modulus range"}
    pa, _, ra, _ = line_fit(s[ok], e[ok])
    pt, _, rt, _ = line_fit(s[ok], t[ok])
    return {"nu": -pt / pa, "r2_axial": ra, "r2_transverse": rt, "points": n}


def proof_strength(e, s, E, e0, offset):
    """Stress where the curve crosses the line of slope ``E`` through ``(e0 + offset, 0)``.

    The first crossing from above on the loading branch, by linear interpolation between the two
    records around it (ISO 6892-1 offset method).

    Returns
    -------
    dict
        ``value`` (MPa), ``strain`` (mm/mm, total at the crossing), ``why`` when NaN.
    """
    iend = loading_end(s)
    g = s[:iend + 1] - E * (e[:iend + 1] - e0 - offset)
    above = g > 0
    for i in range(1, g.size):
        if above[i - 1] and not above[i]:
            f = g[i - 1] / (g[i - 1] - g[i])
            return {"value": float(s[i - 1] + f * (s[i] - s[i - 1])),
                    "strain": float(e[i - 1] + f * (e[i] - e[i - 1]))}
    return {"value": math.nan, "strain": math.nan,
            "why": "the curve does not reach the offset line before the maximum force"}


def maximum(e, s, E):
    """Tensile strength and the elongations at maximum force (ISO 6892-1).

    ``Agt`` is the total strain at the largest stress, ``Ag = Agt - Rm / E`` its plastic part.

    Returns
    -------
    dict
        ``Rm``, ``Agt``, ``Ag``, ``index``, ``why`` when the maximum is the last record.
    """
    i = loading_end(s)
    out = {"Rm": float(s[i]), "Agt": float(e[i]), "Ag": float(e[i] - s[i] / E), "index": i}
    if i == s.size - 1:
        out["Agt"] = out["Ag"] = math.nan
        out["why"] = ("the largest stress is the last record: the test may have stopped before "
                      "the maximum force")
    return out


def true_curve(e, s, iend):
    """True strain ``ln(1 + e)`` and true stress ``s (1 + e)`` up to index ``iend``.

    Volume constancy holds only while the deformation is uniform, so both are NaN after the
    maximum force (necking).
    """
    te = np.full(e.size, np.nan)
    ts = np.full(e.size, np.nan)
    k = slice(0, iend + 1)
    te[k] = np.log1p(e[k])
    ts[k] = s[k] * (1.0 + e[k])
    return te, ts


def hardening(e, s, E, lo, hi, iend):
    """Strain-hardening exponent by a log-log line of true stress on true plastic strain.

    True plastic strain ``ln(1 + e) - sigma / E`` (additive split of true strain), over records
    with ``lo <= e <= hi`` up to the maximum force (ISO 10275).

    Returns
    -------
    dict
        ``n``, ``K`` (MPa), ``r2``, ``points``, ``why`` when NaN.
    """
    te, ts = true_curve(e, s, iend)
    ep = te - ts / E
    idx = np.arange(e.size)
    ok = (idx <= iend) & (e >= lo) & (e <= hi) & (ep > 0) & (ts > 0)
    n = int(ok.sum())
    if n < 3:
        return {"n": math.nan, "K": math.nan, "r2": math.nan, "points": n,
                "why": f"only {n} record(s) with plastic strain in {lo:g} .. {hi:g} before the "
                       "maximum force; widen n_range"}
    slope, icpt, r2, _ = line_fit(np.log(ep[ok]), np.log(ts[ok]))
    return {"n": slope, "K": math.exp(icpt), "r2": r2, "points": n}


def plastic_ratio(e, t, s, E, nu, lo, hi, iend):
    """Plastic strain ratio ``r`` from width and length strains with volume constancy.

    True plastic strains ``eps_l = ln(1 + e) - sigma/E`` and ``eps_b = ln(1 + t) + nu sigma/E``;
    the slope ``m`` of ``eps_b`` on ``eps_l`` over ``lo <= e <= hi`` (up to the maximum force)
    gives ``r = eps_b / eps_a = -m / (1 + m)`` with the thickness strain
    ``eps_a = -(eps_b + eps_l)`` (ISO 10113, regression over a strain range).

    Returns
    -------
    dict
        ``r``, ``slope``, ``r2``, ``points``, ``why`` when NaN.
    """
    te, ts = true_curve(e, s, iend)
    nu_used = nu if math.isfinite(nu) else 0.0
    el = te - ts / E
    eb = np.log1p(t) + nu_used * ts / E
    idx = np.arange(e.size)
    ok = (idx <= iend) & (e >= lo) & (e <= hi) & np.isfinite(eb) & (el > 0)
    n = int(ok.sum())
    if n < 3:
        return {"r": math.nan, "slope": math.nan, "r2": math.nan, "points": n,
                "why": f"only {n} record(s) with width strain and plastic flow in {lo:g} .. "
                       f"{hi:g} before the maximum force; widen r_range"}
    m, _, r2, _ = line_fit(el[ok], eb[ok])
    r = -m / (1.0 + m) if m != -1.0 else math.nan
    return {"r": r, "slope": m, "r2": r2, "points": n}
