"""Settings advice: subset, step and strain window that meet a noise or resolution target."""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from dic.errors import RegionTooSmall, TooFewPoints

from dic.metrology._selfcheck import (AMPLITUDE, MAX_SIZE, correlate_scene, crossing,
                                      prepare_scene, scene_wave_image, subsample,
                                      wave_geometry, wave_response)
from dic.metrology._transfer import attenuation_period, displacement_transfer, strain_transfer
from dic.strain.defaults import DEFAULT_MEASURE

__all__ = ["advise", "Advice"]

SUBSETS = (15, 21, 27, 31, 41)
WINDOWS = (5, 7, 9, 11, 15)
#: steps are these multiples of a base step (a quarter of the subset, at least 2 px, more on
#: large regions), up to half the subset
STEP_MULTIPLES = (1, 2, 3, 4, 5)
#: the smallest step proposed, as a share of the subset: below it neighbouring subsets share
#: more than three quarters of their pixels, so the extra points are not independent
#: measurements, while the matching time grows as 1 / step^2 (common practice, no source)
STEP_FLOOR = 0.25
#: a candidate meets a target only with this much to spare, for the scatter between images
MARGIN = 0.9
#: base-step grids hold at most about this many points
_MAX_POINTS = 40_000


def _margin(value, target):
    """How far a value lies below its target, in words."""
    if not (np.isfinite(value) and target > 0):
        return "margin not known"
    spare = 1.0 - value / target
    return f"{100 * spare:.0f} % below it" if spare > 0 else "at the target"


@dataclass
class Advice:
    """Proposed settings, and every setting tried on the self-check.

    Attributes
    ----------
    met : bool
        True when a setting meets every target given (with the 10 % margin).
    chosen : dict or None
        The proposed setting: subset, step, window, vsg (px), strain_noise (max of the xx and
        yy standard deviations, strain), displacement_noise (px), resolution (strain spatial
        resolution, px), resolution_u (displacement, px). When no setting meets the targets,
        the best reachable one.
    candidates : list of dict
        Every setting tried, with the same keys and ``meets``.
    message : str
        One or two sentences for the user.
    target_strain_noise : float or None
        Target, strain (not microstrain).
    target_resolution : float or None
        Target, px.
    pixel_size : float or None
        mm per px, when the resolution target was given in mm.
    noise : float
        Image noise used, grey levels.
    """

    met: bool
    chosen: dict | None
    candidates: list
    message: str
    target_strain_noise: float | None
    target_resolution: float | None
    pixel_size: float | None
    noise: float
    shape_function: str
    measure: str

    def summary(self) -> str:
        """Plain text: the message, then the chosen setting."""
        lines = [self.message]
        c = self.chosen
        if c is not None:
            lines.append(f"  subset {c['subset']} px, step {c['step']} px, strain window "
                         f"{c['window']} points (VSG {c['vsg']} px): strain noise "
                         f"{c['strain_noise'] * 1e6:.3g} microstrain, strain spatial resolution "
                         f"{self._length(c['resolution'])}, displacement noise "
                         f"{c['displacement_noise']:.4f} px")
        return "\n".join(lines)

    def _length(self, px):
        if not np.isfinite(px):
            return "not measured"
        if self.pixel_size:
            return f"{px:.0f} px ({px * self.pixel_size:.2f} mm)"
        return f"{px:.0f} px"

    def as_dict(self) -> dict:
        return {"met": self.met, "chosen": self.chosen, "candidates": self.candidates,
                "message": self.message, "target_strain_noise": self.target_strain_noise,
                "target_resolution": self.target_resolution, "pixel_size": self.pixel_size,
                "noise": self.noise}

    def figure(self):
        """Trade-off between strain noise and strain spatial resolution (matplotlib Figure)."""
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        fig = Figure(figsize=(6.4, 4.4))
        FigureCanvasAgg(fig)
        ax = fig.add_subplot(1, 1, 1)
        scale = self.pixel_size or 1.0
        unit = "mm" if self.pixel_size else "px"
        c = [d for d in self.candidates if np.isfinite(d["resolution"])
             and np.isfinite(d["strain_noise"])]
        if c:
            res = np.array([d["resolution"] for d in c]) * scale
            noi = np.array([d["strain_noise"] for d in c]) * 1e6
            sub = np.array([d["subset"] for d in c])
            sc = ax.scatter(res, noi, c=sub, cmap="viridis", s=14, alpha=0.8)
            fig.colorbar(sc, ax=ax, label="subset (px)")
            # the lower-left frontier: no other setting is better in both
            o = np.argsort(res)
            front, best = [], np.inf
            for i in o:
                if noi[i] < best:
                    best = noi[i]
                    front.append(i)
            ax.plot(res[front], noi[front], "-", color="0.3", lw=1, label="best trade-off")
        if self.target_strain_noise is not None:
            ax.axhline(self.target_strain_noise * 1e6, color="tab:red", ls="--", lw=1,
                       label="target noise")
        if self.target_resolution is not None:
            ax.axvline(self.target_resolution * scale, color="tab:red", ls=":", lw=1,
                       label="target resolution")
        if self.chosen is not None:
            ax.plot(self.chosen["resolution"] * scale, self.chosen["strain_noise"] * 1e6, "o",
                    mfc="none", mec="tab:red", ms=12, mew=1.5,
                    label="proposed" if self.met else "best reachable")
        ax.set_yscale("log")
        ax.set_xscale("log")
        ax.set_xlabel(f"strain spatial resolution, 10 % attenuation period ({unit})")
        ax.set_ylabel("strain noise (microstrain)")
        ax.set_title("settings: strain noise against spatial resolution")
        ax.legend(loc="upper right", fontsize="small")
        fig.tight_layout()
        return fig


def _check_targets(target_strain_noise, target_resolution, pixel_size):
    def positive(v, name, hint):
        if v is None:
            return None
        try:
            f = float(v)
        except (TypeError, ValueError):
            f = float("nan")
        if not (f > 0 and math.isfinite(f)):
            raise ValueError(f"{name} must be a positive number, got {v!r}; {hint}")
        return f

    tn = positive(target_strain_noise, "target_strain_noise", "give microstrain, e.g. 100")
    tr = positive(target_resolution, "target_resolution", "give px (or mm with pixel_size)")
    ps = positive(pixel_size, "pixel_size", "give mm per px, e.g. 0.08")
    if tn is None and tr is None:
        raise ValueError("give a target: target_strain_noise (microstrain) or target_resolution "
                         "(px, or mm with pixel_size)")
    return (None if tn is None else tn * 1e-6,
            None if tr is None else (tr / ps if ps else tr), ps)


def advise(image, *, target_strain_noise=None, target_resolution=None, pixel_size=None,
           roi=None, subsets=SUBSETS, windows=WINDOWS, steps=None,
           shape_function: str = "affine", interpolation: str = "quintic",
           measure: str = DEFAULT_MEASURE, noise=None, seed: int = 0,
           max_size: int = MAX_SIZE) -> Advice:
    """Propose subset, step and strain window that meet a strain-noise or resolution target.

    Every combination of ``subsets``, ``steps`` and ``windows`` is run on the self-check of
    the user's own reference image (:func:`dic.metrology.self_check`): a static pair with
    independent noise gives the strain noise (the larger of the xx and yy standard
    deviations), a sinusoidal displacement of varying period gives the strain spatial
    resolution (the period at which the measured strain amplitude has fallen by 10 %). One
    match per subset size serves every step (coarser grids are every m-th point of the finest)
    and every window.

    With a noise target the proposed setting is the one that meets it with the smallest
    virtual strain gauge (VSG = (window - 1) step + subset), i.e. the finest resolution. With
    only a resolution target it is the one that meets it with the least noise (the smallest
    VSG would be the noisiest). A setting meets a target with at least 10 % to spare (scatter
    between images); the message gives the real margin. Steps below a quarter of the subset
    (:data:`STEP_FLOOR`) are not tried by default. When none meets the target, the advice says
    so and gives the best reachable setting.

    Parameters
    ----------
    image : ndarray or path
        The reference image.
    target_strain_noise : float, optional
        Strain noise target in microstrain.
    target_resolution : float, optional
        Strain spatial resolution target in px (in mm when ``pixel_size`` is given).
    pixel_size : float, optional
        mm per px.
    roi : optional
        Region of interest (see :func:`dic.images.roi.make_roi`).
    subsets, windows : sequence of int
        Odd subset sizes (px) and strain windows (points) to try.
    steps : sequence of int, optional
        Steps (px) to try for every subset. Default, per subset: multiples 1-5 of a base step
        of about a tenth of the subset (at least 2 px, more on large regions), up to half the
        subset.
    shape_function, interpolation, measure : str
        As for :func:`dic.correlate` and :func:`dic.strain_field`.
    noise : float, optional
        Image noise, grey levels (estimated from the image by default).
    seed : int
        Seed of the noise draws.
    max_size : int
        Largest side of the region used, px.

    Returns
    -------
    Advice

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1 (VSG, noise floor).
    .. [2] P. L. Reu et al., Exp. Mech. 62 (2022) 639-654 (spatial resolution).
    """
    from dic.strain import canonical_measure, strain_field

    t_noise, t_res, ps = _check_targets(target_strain_noise, target_resolution, pixel_size)
    measure = canonical_measure(measure)
    sf = str(shape_function).lower()
    subsets = sorted({int(s) for s in subsets})
    windows = sorted({int(w) for w in windows})
    if not subsets or any(s < 7 or s % 2 == 0 for s in subsets):
        raise ValueError(f"subsets must be odd integers of at least 7, got {subsets}")
    if not windows or any(w < 3 or w % 2 == 0 for w in windows):
        raise ValueError(f"windows must be odd integers of at least 3, got {windows}")
    scene = prepare_scene(image, roi, noise, seed, max_size)
    area = int(scene.mask.sum())
    plan = {}
    for s in subsets:
        if steps is None:
            b = max(2, round(STEP_FLOOR * s), int(math.ceil(math.sqrt(area / _MAX_POINTS))))
            plan[s] = [b * m for m in STEP_MULTIPLES if b * m <= max(b, s // 2 + 1)]
        else:
            plan[s] = sorted({int(t) for t in steps})
            if not plan[s] or plan[s][0] < 1:
                raise ValueError(f"steps must be positive integers, got {steps}")

    # one wave for every candidate: periods from half the shortest theoretical displacement
    # resolution to 2.5 times the longest strain resolution
    th_u = {s: attenuation_period(lambda p, s=s: displacement_transfer(p, s, sf))
            for s in subsets}
    # the longest strain resolution: the largest subset with its largest step and window
    th_e = max(attenuation_period(lambda p: strain_transfer(p, s, max(plan[s]), windows[-1], sf))
               for s in subsets)
    lo = max(0.5 * min(th_u.values()), 4.0 * math.pi * AMPLITUDE)
    hi = max(2.5 * th_e, 2.0 * lo)
    geom = wave_geometry(scene, lo, hi)
    static = scene.noisy(scene.image)
    wave = scene.noisy(scene_wave_image(scene, geom, AMPLITUDE))

    candidates = []
    for s in subsets:
        base = functools.reduce(math.gcd, plan[s])
        try:
            fs0 = correlate_scene(scene, static, s, base, sf, interpolation)
            fw0 = correlate_scene(scene, wave, s, base, sf, interpolation)
        except RegionTooSmall:
            continue                                   # the ROI is too small for this subset
        for st in plan[s]:
            m = st // base
            fs, fw = subsample(fs0, m), subsample(fw0, m)
            ok = fs.valid
            if ok.sum() < 10:
                continue
            d_noise = float(max(np.std(fs.u[ok]), np.std(fs.v[ok])))
            for w in windows:
                try:
                    es = strain_field(fs, window=w, measure=measure)
                    ew = strain_field(fw, window=w, measure="infinitesimal")
                except (RegionTooSmall, TooFewPoints):
                    continue                           # too few points for this window
                v = es.valid
                if v.sum() < 10 or np.count_nonzero(es.n_used >= w * w) < 10:
                    continue                           # the window hardly fits in the ROI
                e_noise = float(max(np.std(es.xx[v]), np.std(es.yy[v])))
                periods, ru, re = wave_response(scene, geom, AMPLITUDE, fw, ew, w)
                res_e, flag = crossing(periods, re)
                res_u, _f = crossing(periods, ru)
                if flag == ">":
                    res_e = float("inf")               # worse than the longest period tried
                candidates.append({
                    "subset": s, "step": st, "window": w, "vsg": (w - 1) * st + s,
                    "strain_noise": e_noise, "strain_noise_xy": float(np.std(es.xy[v])),
                    "displacement_noise": d_noise, "resolution": res_e,
                    "resolution_u": res_u, "theory_resolution": attenuation_period(
                        lambda p: strain_transfer(p, s, st, w, sf)),
                    "n_points": int(v.sum())})
    if not candidates:
        raise ValueError("no setting could be measured on this image and ROI; check the "
                         "pattern (dic.metrology.pattern_quality) and enlarge the ROI")

    for c in candidates:
        # a setting whose resolution could not be measured (its strain window barely fits the
        # ROI) is shown but never proposed
        ok = bool(np.isfinite(c["resolution"]) or c["resolution"] == float("inf"))
        c["measurable"] = ok
        if t_noise is not None:
            ok &= c["strain_noise"] <= MARGIN * t_noise
        if t_res is not None:
            ok &= c["resolution"] <= MARGIN * t_res
        c["meets"] = bool(ok)
    meeting = [c for c in candidates if c["meets"]]
    if meeting:
        if t_noise is not None:
            chosen = min(meeting, key=lambda c: (c["vsg"], c["strain_noise"]))
        else:
            chosen = min(meeting, key=lambda c: (c["strain_noise"], c["vsg"]))
    else:
        def shortfall(c):
            r = []
            if t_noise is not None:
                r.append(c["strain_noise"] / t_noise)
            if t_res is not None:
                r.append(c["resolution"] / t_res)
            return max(r)
        pool = [c for c in candidates if c["measurable"]] or candidates
        chosen = min(pool, key=shortfall)

    def length(px):
        if not np.isfinite(px):
            return "beyond the periods tried" if px > 0 else "not measurable on this ROI"
        return f"{px:.0f} px" + (f" ({px * ps:.3g} mm)" if ps else "")

    wanted = []
    if t_noise is not None:
        wanted.append(f"strain noise of {t_noise * 1e6:.3g} microstrain")
    if t_res is not None:
        wanted.append(f"strain spatial resolution of {length(t_res)}")
    want = " and ".join(wanted)
    if meeting:
        got = []
        if t_noise is not None:
            got.append(f"strain noise {chosen['strain_noise'] * 1e6:.3g} microstrain against "
                       f"{t_noise * 1e6:.3g} asked, {_margin(chosen['strain_noise'], t_noise)}")
        if t_res is not None:
            got.append(f"spatial resolution {length(chosen['resolution'])} against "
                       f"{length(t_res)} asked, {_margin(chosen['resolution'], t_res)}")
        message = (f"Proposed settings for a {want} ({'; '.join(got)}; VSG "
                   f"{chosen['vsg']} px). Steps below a quarter of the subset are not "
                   f"proposed: the extra points would share most of their pixels with their "
                   f"neighbours, adding matching time (as 1/step\u00b2) but no independent "
                   f"information:")
    else:
        message = (f"No setting tried reaches a {want}. The best reachable (strain noise "
                   f"{chosen['strain_noise'] * 1e6:.3g} microstrain, spatial resolution "
                   f"{length(chosen['resolution'])}) is:")
    return Advice(met=bool(meeting), chosen=dict(chosen), candidates=candidates, message=message,
                  target_strain_noise=t_noise, target_resolution=t_res, pixel_size=ps,
                  noise=scene.noise, shape_function=sf, measure=measure)
