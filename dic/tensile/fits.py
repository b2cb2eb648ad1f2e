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

    Only the loading branch (up to the largest stress) is used. Never raises for weak data:
    a modulus that cannot be found is NaN with the reason under ``why``.

    Returns
    -------
    dict
        ``E``, ``intercept`` (MPa), ``strain_at_zero`` (``-intercept / E``, the toe), ``r2``,
        ``cv`` (relative standard error of the slope, %), ``se`` (standard error of the
        slope, MPa), ``points``, ``mask``, and ``why`` when ``E`` is NaN.
    """
    iend = loading_end(s)
    idx = np.arange(s.size)
    mask = (idx <= iend) & (s >= lo) & (s <= hi)
    n = int(mask.sum())
    out = {"E": math.nan, "intercept": math.nan, "strain_at_zero": math.nan, "r2": math.nan,
           "cv": math.nan, "se": math.nan, "points": n, "mask": mask}
    if n < min_points:
        out["why"] = (f"the modulus range {lo:g} .. {hi:g} MPa holds {n} record(s) of the "
                      f"loading curve (stresses there: {_few(s[:iend + 1])} MPa); widen it "
                      f"(--modulus-range, or modulus_range_mpa in [tensile]) to hold at least "
                      f"{min_points}, or record more images in the elastic range")
        return out
    E, b, r2, _ = line_fit(e[mask], s[mask])
    if not E > 0:
        out["why"] = (f"the fitted slope over {lo:g} .. {hi:g} MPa is {E:g} MPa, not "
                      "positive; check the strain sign and the modulus range")
        return out
    cv = slope_cv(r2, n)
    out.update(E=E, intercept=b, strain_at_zero=-b / E, r2=r2, cv=cv, se=E * cv / 100.0)
    return out


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
        ``value`` (MPa), ``strain`` (mm/mm, total at the crossing), ``gap`` (strain between the
        two records around the crossing), ``step`` (stress change between them, MPa), ``why``
        when NaN.
    """
    nan = {"value": math.nan, "strain": math.nan, "gap": math.nan, "step": math.nan}
    if not (math.isfinite(E) and math.isfinite(e0)):
        return dict(nan, why="needs the modulus, which could not be found")
    iend = loading_end(s)
    g = s[:iend + 1] - E * (e[:iend + 1] - e0 - offset)
    above = g > 0
    for i in range(1, g.size):
        if above[i - 1] and not above[i]:
            f = g[i - 1] / (g[i - 1] - g[i])
            return {"value": float(s[i - 1] + f * (s[i] - s[i - 1])),
                    "strain": float(e[i - 1] + f * (e[i] - e[i - 1])),
                    "gap": float(e[i] - e[i - 1]), "step": float(s[i] - s[i - 1])}
    return dict(nan, why="the curve does not reach the offset line before the maximum force")


def swift_maximum(e, s, E, *, reach=0.05, min_points=8):
    """Strain at maximum force from Swift's law fitted to the rising branch near the top.

    True stress ``s (1 + e)`` against true plastic strain ``ln(1 + e) - sigma / E`` of the
    samples before the maximum whose stress is within ``reach`` (share) of it gets
    ``sigma = K (eps0 + eps_p)^n`` by least squares on the logarithms; the fitted law's
    engineering curve is then largest where ``d sigma / d eps = sigma`` (Considere), which
    gives the total engineering strain at the maximum force. The rising branch is where the
    deformation is still uniform, so its hardening locates the maximum better than the flat
    top itself, whose samples scatter with the force noise.

    Returns
    -------
    dict or None
        ``strain`` (total, mm/mm), ``n``, ``points``; None when the fit is not possible
        (too few samples, no plastic strain, no maximum of the fitted curve).

    References
    ----------
    H. W. Swift, J. Mech. Phys. Solids 1 (1952) 1-18; A. Considere (1885), from memory.
    """
    from scipy.optimize import least_squares

    ok = np.isfinite(e) & np.isfinite(s)
    e, s = np.asarray(e, float)[ok], np.asarray(s, float)[ok]
    if e.size < min_points or not math.isfinite(E) or E <= 0:
        return None
    i = int(np.argmax(s))
    smax = float(s[i])
    first_top = int(np.flatnonzero(s >= smax * (1.0 - 0.003))[0])
    below = np.flatnonzero(s[:first_top + 1] < smax * (1.0 - reach))
    lo = int(below[-1]) + 1 if below.size else 0
    k = slice(lo, first_top + 1)
    eps = np.log1p(e[k])
    sig = s[k] * (1.0 + e[k])
    ep = eps - sig / E
    good = (ep > 1e-4) & (sig > 0)
    if good.sum() < min_points:
        return None
    ep, sig = ep[good], sig[good]

    def resid(p):
        return p[2] * np.log(p[1] + ep) + math.log(max(p[0], 1e-300)) - np.log(sig)

    try:
        fit = least_squares(resid, [1.2 * float(sig.max()), 0.01, 0.15],
                            bounds=([1e-9, 1e-6, 1e-3], [1e7, 1.0, 2.0]))
    except (ValueError, np.linalg.LinAlgError):
        return None
    if not fit.success:
        return None
    K, e0, n = fit.x
    grid = np.linspace(0.5 * float(ep.min()), 3.0 * float(ep.max()), 20001)
    sg = K * (e0 + grid) ** n
    eg = np.expm1(grid + sg / E)
    j = int(np.argmax(sg / (1.0 + eg)))
    if j in (0, grid.size - 1):
        return None
    return {"strain": float(eg[j]), "n": float(n), "points": int(ep.size)}


def maximum_fit(e, s, *, band=None, E=math.nan):
    """Strain at the maximum force from a local fit near the top of the curve.

    First choice: :func:`swift_maximum` (needs ``E``), kept when it falls within the top band.
    Otherwise the records from the first to the last whose stress lies within ``band`` of the
    largest,
    get a least-squares cubic ``s(e)`` (a parabola if too few); its local maximum is the
    strain at maximum force (the cubic term takes up the skew of the curve's top). Where the
    top is flat (no downward curvature, or the vertex outside the run) the strain is the
    middle of that run, as ISO 6892-1 asks for a plateau at maximum force.

    Parameters
    ----------
    e, s : ndarray
        Total strain (mm/mm) and stress (MPa) in test order (records or denser samples).
    E : float, optional
        Modulus, MPa, for the plastic strain of the Swift fit.
    band : float, optional
        Stress band below the largest stress, MPa; default the larger of 0.3 % of it and four
        times the scatter of the stresses about a local line (the noise).

    Returns
    -------
    dict
        ``strain`` (total, mm/mm), ``stress`` (the fitted maximum, MPa), ``halfwidth`` (half the
        strain span of the run: how sharply the maximum is located), ``se`` (standard error of
        the vertex strain from the fit, NaN for a plateau), ``points``, ``how`` (``"cubic"``,
        ``"parabola"`` or ``"plateau middle"``), ``index`` (of the largest stress), ``why``
        when NaN.

    References
    ----------
    ISO 6892-1, elongation at maximum force (the plateau rule; smoothing near the maximum of a
    computer-recorded curve), from memory.
    """
    ok = np.isfinite(e) & np.isfinite(s)
    e, s = np.asarray(e, float)[ok], np.asarray(s, float)[ok]
    out = {"strain": math.nan, "stress": math.nan, "halfwidth": math.nan, "se": math.nan,
           "points": 0, "how": "", "index": -1}
    if e.size < 3:
        return dict(out, why="fewer than three records")
    i = int(np.argmax(s))
    out["index"] = i
    if i == s.size - 1:
        return dict(out, why="the largest stress is the last record: the test may have "
                             "stopped before the maximum force")
    smax = float(s[i])
    if band is None:
        d2 = np.diff(s, 2)
        noise = 1.4826 * float(np.median(np.abs(d2 - np.median(d2)))) / math.sqrt(6.0) \
            if d2.size else 0.0
        band = max(0.003 * smax, 4.0 * noise)
    # the run from the first to the last sample in the band (noise cannot split it)
    inband = np.flatnonzero(s >= smax - band)
    lo, hi = int(inband[0]), int(inband[-1])
    sw = swift_maximum(e, s, E)
    if sw is not None and e[lo] <= sw["strain"] <= e[hi]:
        return dict(out, strain=sw["strain"], stress=smax, points=sw["points"],
                    halfwidth=0.5 * float(e[hi] - e[lo]),
                    how=f"Swift law on the rising branch, n {sw['n']:.3f}")
    # widen to at least two records each side when the run is short
    if hi - lo < 4:
        lo, hi = max(0, min(lo, i - 2)), min(s.size - 1, max(hi, i + 2))
    k = slice(lo, hi + 1)
    x, y = e[k], s[k]
    out["points"] = int(x.size)
    out["halfwidth"] = 0.5 * float(x.max() - x.min())
    mid = 0.5 * float(x.min() + x.max())
    xc = (x - mid) / max(out["halfwidth"], 1e-300)
    if x.size >= 5:
        # a plateau: over the run, a parabola drops less than the scatter (or a quarter of
        # the band) from its top to the ends of the run
        coef2 = np.polyfit(xc, y, 2)
        sd = float(np.std(y - np.polyval(coef2, xc)))
        if -coef2[0] < max(0.25 * band, 2.0 * sd):
            return dict(out, strain=mid, stress=smax, how="plateau middle")
    for deg, how in ((3, "cubic"), (2, "parabola")):
        if x.size < deg + 3:
            continue
        A = np.vander(xc, deg + 1)
        coef, _, rank, _ = np.linalg.lstsq(A, y, rcond=None)
        if rank < deg + 1:
            continue
        d1 = np.polyder(coef)
        d2 = np.polyder(d1)
        roots = [r.real for r in np.atleast_1d(np.roots(d1)) if abs(r.imag) < 1e-12]
        roots = [r for r in roots if -1.0 <= r <= 1.0 and np.polyval(d2, r) < 0]
        if not roots:
            continue
        v = min(roots, key=abs)
        # standard error of the vertex: delta method, d v / d coef = -(d f'/d coef) / f''
        r = y - A @ coef
        cov = np.linalg.pinv(A.T @ A) * float(r @ r) / max(x.size - deg - 1, 1)
        grad = np.array([(deg - j) * v ** (deg - j - 1) if j < deg else 0.0
                         for j in range(deg + 1)]) / -np.polyval(d2, v)
        se = math.sqrt(max(float(grad @ cov @ grad), 0.0)) * out["halfwidth"]
        return dict(out, strain=float(mid + v * out["halfwidth"]),
                    stress=float(np.polyval(coef, v)), se=se, how=how)
    return dict(out, strain=mid, stress=smax, how="plateau middle")


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
    if not math.isfinite(E):
        return {"n": math.nan, "K": math.nan, "r2": math.nan, "points": 0,
                "why": "needs the modulus, which could not be found"}
    te, ts = true_curve(e, s, iend)
    ep = te - ts / E
    idx = np.arange(e.size)
    ok = (idx <= iend) & (e >= lo) & (e <= hi) & (ep > 0) & (ts > 0)
    n = int(ok.sum())
    if n < 3:
        return {"n": math.nan, "K": math.nan, "r2": math.nan, "points": n,
                "why": f"only {n} record(s) with plastic strain in {lo:g} .. {hi:g} before the "
                       "maximum force; widen the strain range (--n-range, or n_range_percent "
                       "in [tensile])"}
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
    if not math.isfinite(nu):
        return {"r": math.nan, "slope": math.nan, "r2": math.nan, "points": 0,
                "why": "Poisson's ratio is unknown, so the elastic part of the width strain "
                       "cannot be taken off; r is not computed"}
    if not math.isfinite(E):
        return {"r": math.nan, "slope": math.nan, "r2": math.nan, "points": 0,
                "why": "needs the modulus, which could not be found"}
    te, ts = true_curve(e, s, iend)
    el = te - ts / E
    eb = np.log1p(t) + nu * ts / E
    idx = np.arange(e.size)
    ok = (idx <= iend) & (e >= lo) & (e <= hi) & np.isfinite(eb) & (el > 0)
    n = int(ok.sum())
    if n < 3:
        return {"r": math.nan, "slope": math.nan, "r2": math.nan, "points": n,
                "why": f"only {n} record(s) with width strain and plastic flow in {lo:g} .. "
                       f"{hi:g} before the maximum force; widen the strain range (--n-range, or "
                       "n_range_percent in [tensile])"}
    m, _, r2, _ = line_fit(el[ok], eb[ok])
    r = -m / (1.0 + m) if m != -1.0 else math.nan
    return {"r": r, "slope": m, "r2": r2, "points": n}
