"""Self-check: the user's settings run on the user's own pattern under exactly known motion."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dic.metrology._rows import Row, microstrain, number, pixels
from dic.metrology._deform import EDGE, shift_image, stretch_image, wave_image, wave_periods
from dic.metrology._transfer import attenuation_period, displacement_transfer, strain_transfer
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["self_check", "SelfCheck"]

#: subpixel shifts of the rigid-motion sweep (px, applied along x and y together)
SHIFTS = (0.0, 0.1, 0.2, 0.3, 0.4, 0.5)
#: homogeneous stretch of the strain check: engineering strains along x and y
STRETCH = (5e-3, -1.5e-3)
#: amplitude of the sinusoidal displacement, px
AMPLITUDE = 0.5
#: the wave's periods span this range around the theoretical 10 % attenuation periods
_PERIOD_SPAN = (0.5, 2.5)
#: largest side of the region the self-check works on (px)
MAX_SIZE = 800
_LEVEL = 0.9


# --------------------------------------------------------------------------------------------
# preparation: crop, noise, deformed images
# --------------------------------------------------------------------------------------------
@dataclass
class _Scene:
    """The user's image region, its noise, and the deformed copies (all in crop pixels)."""

    image: np.ndarray          # crop of the user's image (float)
    mask: np.ndarray           # ROI inside the crop, away from the crop border
    origin: tuple              # (x0, y0) of the crop in the image
    noise: float
    noise_source: str
    rng: np.random.Generator
    transposed: bool           # the wave runs along x of the crop (crop taller than wide)
    reference: np.ndarray = None   # image + its own noise draw

    def noisy(self, img):
        return img + self.rng.normal(0.0, self.noise, img.shape)


def prepare_scene(image, roi, noise, seed, max_size):
    from dic.images.io import read_image
    from dic.images.roi import make_roi, roi_bbox
    from dic.matching import image_noise

    img = read_image(image, name="image")
    mask = make_roi(roi, img.shape)
    x0, y0, x1, y1 = roi_bbox(mask)
    rows, cols = img.shape
    # the crop: the ROI's bounding box plus EDGE px where the image allows, at most max_size
    cx0, cy0 = max(x0 - EDGE, 0), max(y0 - EDGE, 0)
    cx1, cy1 = min(x1 + EDGE, cols - 1), min(y1 + EDGE, rows - 1)
    if cx1 - cx0 + 1 > max_size:
        mid = (cx0 + cx1) // 2
        cx0, cx1 = mid - max_size // 2, mid - max_size // 2 + max_size - 1
    if cy1 - cy0 + 1 > max_size:
        mid = (cy0 + cy1) // 2
        cy0, cy1 = mid - max_size // 2, mid - max_size // 2 + max_size - 1
    crop = img[cy0:cy1 + 1, cx0:cx1 + 1].copy()
    m = mask[cy0:cy1 + 1, cx0:cx1 + 1].copy()
    m[:EDGE] = m[-EDGE:] = False
    m[:, :EDGE] = m[:, -EDGE:] = False
    if not m.any():
        raise ValueError("roi leaves no pixel more than 8 px inside the image; enlarge the ROI")
    if noise is None:
        sigma, source = image_noise(crop, roi=m), "estimated from the image"
        if not np.isfinite(sigma):
            sigma, source = image_noise(crop), "estimated from the whole crop"
    else:
        sigma, source = float(noise), "given"
        if not (math.isfinite(sigma) and sigma >= 0):
            raise ValueError(f"noise must be a non-negative number of grey levels, got {noise!r}")
    rng = np.random.default_rng(seed)
    scene = _Scene(crop, m, (cx0, cy0), float(sigma) if np.isfinite(sigma) else 0.0, source,
                   rng, crop.shape[0] > crop.shape[1])
    scene.reference = scene.noisy(crop)
    return scene


# --------------------------------------------------------------------------------------------
# measurement helpers
# --------------------------------------------------------------------------------------------
def correlate_scene(scene, deformed, subset, step, shape_function, interpolation):
    from dic.matching import correlate

    return correlate(scene.reference, deformed, subset=subset, step=step, roi=scene.mask,
                     shape_function=shape_function, interpolation=interpolation,
                     image_noise=scene.noise)


def subsample(f, m):
    """Every m-th point of a field: the field of an m times coarser step on the same grid."""
    from dic.field import DisplacementField

    if m == 1:
        return f
    s = np.s_[::m, ::m]
    return DisplacementField(
        x=f.x[s], y=f.y[s], u=f.u[s], v=f.v[s], grad=f.grad[s], zncc=f.zncc[s],
        reason=f.reason[s], iterations=f.iterations[s],
        grad2=None if f.grad2 is None else f.grad2[s],
        settings=dict(f.settings, step=f.step * m),
        std_u=None if f.std_u is None else f.std_u[s],
        std_v=None if f.std_v is None else f.std_v[s])


def _full_window(strain, window):
    return strain.valid & (strain.n_used >= window * window)


def wave_geometry(scene, lo, hi):
    """Periods per crop column (or row, when transposed) and the zero-phase line."""
    m = scene.mask.T if scene.transposed else scene.mask
    cols = np.flatnonzero(m.any(axis=0))
    rws = np.flatnonzero(m.any(axis=1))
    x0, x1 = float(cols[0]), float(cols[-1])
    yc = 0.5 * (rws[0] + rws[-1])
    return x0, x1, lo, hi, yc


def scene_wave_image(scene, geometry, amplitude):
    x0, x1, lo, hi, yc = geometry
    img = scene.image.T if scene.transposed else scene.image
    p = wave_periods(np.arange(img.shape[1]), x0, x1, lo, hi)
    out = wave_image(img, amplitude, p, yc)
    return out.T if scene.transposed else out


def crossing(period, ratio, level=_LEVEL):
    """Period beyond which the measured transfer stays at or above ``level``.

    The ratios are sorted by period and smoothed by a running median of five to locate the
    crossing; it is then placed by a straight-line fit of log(1 - ratio) against log(period)
    to the points near it (ratio 0.8-0.96), which averages the scatter of single grid lines.
    Returns (period, flag) with flag '' (found), '<' (never below: better than the shortest
    period tried), '>' (still below at the longest period: worse than that) or '?' (too few
    grid lines)."""
    period = np.asarray(period, dtype=np.float64)
    ratio = np.asarray(ratio, dtype=np.float64)
    ok = np.isfinite(period) & np.isfinite(ratio)
    period, ratio = period[ok], ratio[ok]
    if period.size < 5:
        return float("nan"), "?"
    o = np.argsort(period)
    period, ratio = period[o], ratio[o]
    pad = np.pad(ratio, 2, mode="edge")
    smooth = np.median(np.lib.stride_tricks.sliding_window_view(pad, 5), axis=1)
    below = np.flatnonzero(smooth < level)
    if below.size == 0:
        return float(period[0]), "<"
    i = int(below[-1])
    if i == period.size - 1:
        return float(period[-1]), ">"
    # near the crossing 1 - ratio falls as a power of the period (as 1/p^2 at long periods):
    # a straight line of log(1 - ratio) against log(period) through the points there
    near = ((ratio >= 0.8) & (ratio <= 0.96) & (period >= period[i] / 2.0)
            & (period <= period[i + 1] * 2.0))
    if near.sum() >= 4:
        b, a = np.polyfit(np.log(period[near]), np.log(1.0 - ratio[near]), 1)
        if b < 0:
            est = math.exp((math.log(1.0 - level) - a) / b)
            if period[i] / 2.0 <= est <= period[i + 1] * 2.0:
                return float(est), ""
    t = (level - smooth[i]) / (smooth[i + 1] - smooth[i])
    return float(math.exp(math.log(period[i]) + t * math.log(period[i + 1] / period[i]))), ""


def wave_response(scene, geometry, amplitude, f, strain, window):
    """Measured/commanded amplitude of the wave's displacement and strain, per grid line."""
    x0, x1, lo, hi, yc = geometry
    if scene.transposed:
        X, Y, d = f.y, f.x, f.u
        e = strain.xx
    else:
        X, Y, d = f.x, f.y, f.v
        e = strain.yy
    full = _full_window(strain, window)
    if scene.transposed:
        X, Y, d, e, valid, full = X.T, Y.T, d.T, e.T, f.valid.T, full.T
    else:
        valid = f.valid
    periods, ru, re = [], [], []
    for j in range(X.shape[1]):
        p = float(wave_periods(X[0, j], x0, x1, lo, hi))
        k = 2.0 * math.pi / p
        phi = k * (Y[:, j] - yc)
        ok = valid[:, j]
        r_u = r_e = float("nan")
        if ok.sum() >= 5:
            s, c = np.sin(phi[ok]), np.ones(ok.sum())
            A = np.column_stack([s, c])
            if np.sum(s * s) > 0.5:
                r_u = np.linalg.lstsq(A, d[ok, j], rcond=None)[0][0] / amplitude
        okf = full[:, j]
        if okf.sum() >= 5:
            cphi = np.cos(phi[okf])
            r_e = float(np.sum(e[okf, j] * cphi) / np.sum(cphi * cphi)) / (amplitude * k)
        periods.append(p)
        ru.append(r_u)
        re.append(r_e)
    return np.array(periods), np.array(ru), np.array(re)


def _period_text(flag, period):
    """A resolution period with its flag from :func:`crossing` in words for plain text:
    '<' and '>' as they are, 'not known' where too few grid lines gave none."""
    if flag == "?" or not np.isfinite(period):
        return "not known (too few grid lines)"
    return f"{flag}{period:.0f} px"


# --------------------------------------------------------------------------------------------
# the result
# --------------------------------------------------------------------------------------------
@dataclass
class SelfCheck:
    """What the self-check measured on the user's pattern with the user's settings.

    Lengths in px, strains as numbers (1e-6 = 1 microstrain), shear ``xy`` is tensor shear.

    Attributes
    ----------
    settings : dict
        subset, step, window, shape_function, interpolation, measure, vsg.
    noise : float
        Image noise (grey levels) added independently to every image; ``noise_source`` says
        where it came from.
    region : tuple
        ``(x0, y0, x1, y1)`` of the image region used.
    shifts : ndarray (n,)
        Subpixel shifts applied along x and y together.
    shift_bias, shift_sd : ndarray (n, 2)
        Mean error and standard deviation of (u, v) at each shift.
    displacement_bias : float
        Largest mean error over the shift sweep.
    displacement_noise : (float, float)
        Standard deviation of (u, v) with no motion, only image noise.
    predicted_noise : (float, float)
        Root mean square of the per-point ``std_u``, ``std_v`` of that field.
    strain_noise : dict
        Standard deviation of ``xx``, ``yy``, ``xy`` with no motion.
    stretch : dict
        ``applied`` (exx, eyy engineering), ``expected`` / ``mean`` / ``bias`` / ``sd`` of
        (xx, yy, xy) in the chosen measure, ``displacement_rms`` error.
    wave : dict
        ``amplitude``, ``period`` (per grid line), ``ratio_u`` and ``ratio_strain``
        (measured / commanded amplitude), ``axis`` ("y": v varies along y, its period along x).
    resolution_u, resolution_strain : float
        Spatial resolution: the period at which the measured amplitude of the displacement
        (strain) has fallen by 10 % (Reu et al. 2022). ``resolution_flags`` holds '<' or '>'
        when it lies outside the periods tried.
    theory_u, theory_strain : float
        The same from the Savitzky-Golay transfer functions (Schreier & Sutton 2002).
    mei_u : float
        Displacement noise x displacement spatial resolution, px^2 (DIC Challenge 2.0 form).
    mei_u_per_noise : float
        ``mei_u`` divided by the image noise, px^2 per grey level (the noise-free form of
        Grediac et al. 2017).
    mei_strain : float
        Strain noise x (strain spatial resolution)^2, px^2.
    """

    settings: dict
    noise: float
    noise_source: str
    region: tuple
    shifts: np.ndarray
    shift_bias: np.ndarray
    shift_sd: np.ndarray
    displacement_bias: float
    displacement_noise: tuple
    predicted_noise: tuple
    strain_noise: dict
    stretch: dict
    wave: dict
    resolution_u: float
    resolution_strain: float
    resolution_flags: tuple
    theory_u: float
    theory_strain: float
    mei_u: float
    mei_u_per_noise: float
    mei_strain: float

    def summary(self) -> str:
        """A few lines of plain text for a report."""
        s = self.settings
        sd_u, sd_v = self.displacement_noise
        pu, pv = self.predicted_noise
        sn = self.strain_noise
        st = self.stretch
        fu, fe = self.resolution_flags
        lines = [
            f"self-check on the reference pattern: subset {s['subset']} px, step {s['step']} px, "
            f"strain window {s['window']} points (VSG {s['vsg']:.0f} px), "
            f"{s['shape_function']} subsets, {s['measure']} strain",
            f"  image noise {self.noise:.2f} grey levels ({self.noise_source}), added "
            f"independently to every image",
            f"  displacement bias (subpixel shifts 0-0.5 px): {self.displacement_bias:.4f} px "
            f"at most",
            f"  displacement noise: u {sd_u:.4f} px, v {sd_v:.4f} px (predicted from the "
            f"subsets: {pu:.4f}, {pv:.4f})",
            f"  strain noise: xx {sn['xx'] * 1e6:.0f}, yy {sn['yy'] * 1e6:.0f}, xy (tensor) "
            f"{sn['xy'] * 1e6:.0f} microstrain",
            f"  stretch {st['applied'][0]:.4f} / {st['applied'][1]:.4f}: strain bias xx "
            f"{st['bias'][0] * 1e6:.0f}, yy {st['bias'][1] * 1e6:.0f} microstrain",
            f"  spatial resolution (10 % attenuation period): displacement "
            f"{_period_text(fu, self.resolution_u)} (theory {self.theory_u:.0f}), strain "
            f"{_period_text(fe, self.resolution_strain)} (theory {self.theory_strain:.0f})",
            f"  metrological efficiency: displacement {self.mei_u:.3f} px^2 "
            f"({self.mei_u_per_noise:.4f} px^2 per grey level of noise), strain "
            f"{self.mei_strain:.2f} px^2",
        ]
        return "\n".join(lines)

    #: what the result is called in a report
    TITLE = "Self-check of the settings"
    #: the method, named once wherever the rows are shown
    METHOD = ("The analysis settings were run on this test's own reference image under exactly "
              "known motion: subpixel shifts, a uniform stretch, and a sine wave whose period "
              "shortens until it is no longer followed (the DIC Challenge 2.0 procedure, "
              "Reu et al., Exp. Mech. 62 (2022) 639; theory from Schreier & Sutton, Exp. Mech. "
              "42 (2002) 303).")

    def report_rows(self, scale=None):
        """The results as rows a person reads: name, value with unit, what it means.

        Parameters
        ----------
        scale : float, optional
            mm per px, to give lengths in mm too.

        Returns
        -------
        list of Row
            ``Row(quantity, value, meaning, kind)``; see :data:`METHOD` for the method.
        """
        sd_u, sd_v = self.displacement_noise
        pu, pv = self.predicted_noise
        sn, st = self.strain_noise, self.stretch
        fu, fe = self.resolution_flags
        # '?': too few grid lines to find it; the NaN value then reads "not known"
        beyond = {"<": "shorter than ", ">": "longer than ", "": "", "?": ""}
        s = self.settings
        return [
            Row("Image noise", f"{number(self.noise)} grey levels",
                f"Random grey-level noise of the camera ({self.noise_source}), added to "
                f"every simulated image."),
            Row("Displacement bias", pixels(self.displacement_bias, 2, scale),
                "Largest systematic error over subpixel shifts of 0 to 0.5 px."),
            Row("Displacement noise", f"u {pixels(sd_u, 2, scale)}, v {pixels(sd_v, 2, scale)}",
                "Scatter (standard deviation) of the displacement with no motion.",
                "displacement noise"),
            Row("Displacement noise predicted", f"u {pixels(pu, 2, scale)}, "
                                                f"v {pixels(pv, 2, scale)}",
                "The same, predicted from each subset's pattern and the image noise; close "
                "to the line above when the prediction holds."),
            Row("Strain noise", f"xx {microstrain(sn['xx'])}, yy {microstrain(sn['yy'])}, "
                                f"xy {microstrain(sn['xy'])}",
                "Scatter of the strain with no motion: the smallest strain change the "
                "settings resolve (xy is tensor shear).", "strain noise"),
            Row("Strain bias under stretch",
                f"xx {microstrain(st['bias'][0])}, yy {microstrain(st['bias'][1])}",
                f"Mean strain error under a known stretch of "
                f"{number(100 * st['applied'][0])} % along x and {number(100 * st['applied'][1])} % "
                f"along y."),
            Row("Spatial resolution, displacement",
                beyond[fu] + pixels(self.resolution_u, 3, scale),
                f"Shortest wavelength of a displacement pattern measured with at most 10 % "
                f"loss of amplitude (theory for subset {s['subset']} px: "
                f"{pixels(self.theory_u, 3, scale)}).", "spatial resolution"),
            Row("Spatial resolution, strain",
                beyond[fe] + pixels(self.resolution_strain, 3, scale),
                f"The same for strain, with a virtual strain gauge of {number(s['vsg'])} px "
                f"(theory: {pixels(self.theory_strain, 3, scale)}).", "spatial resolution"),
            Row("Noise × resolution, displacement", f"{number(self.mei_u)} px²",
                "Displacement noise times its spatial resolution: a figure of merit to "
                "compare settings (lower is better)."),
            Row("Noise × resolution², strain", f"{number(self.mei_strain)} px²",
                "Strain noise times the square of its spatial resolution (lower is better)."),
        ]

    def figure(self):
        """Measured and theoretical transfer functions (a matplotlib Figure, Agg canvas)."""
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        fig = Figure(figsize=(6.4, 4.0))
        FigureCanvasAgg(fig)
        ax = fig.add_subplot(1, 1, 1)
        w = self.wave
        p = w["period"]
        o = np.argsort(p)
        s = self.settings
        grid = np.geomspace(max(p.min(), 2.0), p.max(), 400)
        ax.plot(p[o], w["ratio_u"][o], "o", ms=3, color="tab:blue", label="displacement")
        ax.plot(p[o], w["ratio_strain"][o], "s", ms=3, color="tab:orange", label="strain")
        ax.plot(grid, displacement_transfer(grid, s["subset"], s["shape_function"]), "-",
                color="tab:blue", lw=1, label="theory (displacement)")
        ax.plot(grid, strain_transfer(grid, s["subset"], s["step"], s["window"],
                                      s["shape_function"]), "-", color="tab:orange", lw=1,
                label="theory (strain)")
        ax.axhline(_LEVEL, color="0.5", lw=0.8, ls="--")
        ax.set_xscale("log")
        ax.set_xlabel("period of the sinusoidal displacement (px)")
        ax.set_ylabel("measured / applied amplitude")
        ax.set_ylim(-0.3, 1.15)
        ax.legend(loc="lower right", fontsize="small")
        ax.set_title("self-check: spatial resolution")
        fig.tight_layout()
        return fig


# --------------------------------------------------------------------------------------------
# the public function
# --------------------------------------------------------------------------------------------
def _check_settings(subset, step, window):
    for name, val, low in (("subset", subset, 7), ("step", step, 1), ("window", window, 3)):
        if isinstance(val, bool) or not isinstance(val, (int, np.integer)) or val < low:
            raise ValueError(f"{name} must be an integer of at least {low}, got {val!r}")
    if subset % 2 == 0 or window % 2 == 0:
        raise ValueError(f"subset and window must be odd, got subset {subset}, window {window}; "
                         f"e.g. subset 21, window 9")


def self_check(image, *, subset: int = 21, step: int = 10, window: int = DEFAULT_WINDOW,
               roi=None, shape_function: str = "affine", interpolation: str = "quintic",
               measure: str = DEFAULT_MEASURE, noise=None, seed: int = 0,
               shifts=SHIFTS, stretch=STRETCH, amplitude: float = AMPLITUDE,
               max_size: int = MAX_SIZE) -> SelfCheck:
    """Run the given settings on the user's own reference image under exactly known motion.

    The reference image (within the ROI's bounding box, at most ``max_size`` px a side) is
    deformed exactly, in the band-limited sense (see :mod:`dic.metrology._deform`):

    1. rigid subpixel shifts ``(s, s)`` for ``s`` in ``shifts``: displacement bias and noise;
    2. a homogeneous stretch ``F = diag(1 + exx, 1 + eyy)``: strain bias and noise;
    3. a sinusoidal displacement ``v = A sin(2 pi (y - yc) / p(x))`` whose period ``p`` grows
       geometrically along the image, as in the DIC Challenge 2.0 "star" images (along the
       longer side of the region; transposed for a region taller than wide): the measured over
       the applied amplitude against the period is the transfer function of the settings, and
       the period at which it has fallen by 10 % is the spatial resolution, for the
       displacement and for the strain.

    Every image (reference and deformed) gets its own draw of Gaussian noise of the image's
    noise level, so the random errors are those of two real images; the reference's own noise
    is common to both images and matches away like pattern. The settings are run with
    :func:`dic.correlate` and :func:`dic.strain_field`.

    Parameters
    ----------
    image : ndarray or path
        The reference image.
    subset, step, window : int
        The settings to check (window in grid points; VSG = (window - 1) step + subset).
    roi : optional
        Region of interest (see :func:`dic.images.roi.make_roi`).
    shape_function, interpolation : str
        As for :func:`dic.correlate`.
    measure : str
        Strain measure for the noise and stretch checks (the wave uses the small-strain
        gradient, to which the transfer theory applies).
    noise : float, optional
        Image noise, grey levels; estimated from the image by default
        (:func:`dic.metrology.image_noise`).
    seed : int
        Seed of the noise draws.
    shifts : sequence of float
        Subpixel shifts, px.
    stretch : (float, float)
        ``exx, eyy`` of the homogeneous stretch.
    amplitude : float
        Amplitude of the sinusoid, px.
    max_size : int
        Largest side of the region used, px.

    Returns
    -------
    SelfCheck

    References
    ----------
    .. [1] P. L. Reu et al., "DIC Challenge 2.0: developing images and guidelines for evaluating
       accuracy and resolution of 2D analyses", Exp. Mech. 62 (2022) 639-654.
    .. [2] M. Grediac, B. Blaysat, F. Sur, "A critical comparison of some metrological
       parameters characterizing local digital image correlation and grid method", Exp. Mech.
       57 (2017) 871-903.
    .. [3] H. W. Schreier, M. A. Sutton, Exp. Mech. 42 (2002) 303-310.
    .. [4] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1.
    """
    from dic.strain import canonical_measure, strain_field, strain_tensor

    _check_settings(subset, step, window)
    measure = canonical_measure(measure)
    scene = prepare_scene(image, roi, noise, seed, max_size)
    sf = str(shape_function).lower()

    # 1. rigid shifts
    shifts = np.asarray(shifts, dtype=np.float64).ravel()
    bias = np.full((shifts.size, 2), np.nan)
    sd = np.full((shifts.size, 2), np.nan)
    field0 = None
    for i, s in enumerate(shifts):
        dfm = scene.noisy(scene.image if s == 0 else shift_image(scene.image, s, s))
        f = correlate_scene(scene, dfm, subset, step, sf, interpolation)
        ok = f.valid
        if ok.sum() < 2:
            continue
        bias[i] = np.mean(f.u[ok]) - s, np.mean(f.v[ok]) - s
        sd[i] = np.std(f.u[ok]), np.std(f.v[ok])
        if field0 is None and s == 0:
            field0 = f
    if field0 is None:
        field0 = correlate_scene(scene, scene.noisy(scene.image), subset, step, sf, interpolation)
    ok0 = field0.valid
    if ok0.sum() < 2:
        raise ValueError("no point could be measured on the image with these settings; check "
                         "the ROI and the pattern (dic.metrology.pattern_quality)")
    e0 = strain_field(field0, window=window, measure=measure)
    v0 = e0.valid
    strain_noise = {c: float(np.std(getattr(e0, c)[v0])) if v0.any() else float("nan")
                    for c in ("xx", "yy", "xy")}
    disp_noise = (float(np.std(field0.u[ok0])), float(np.std(field0.v[ok0])))
    pred = (float(np.sqrt(np.nanmean(field0.std_u[ok0] ** 2))),
            float(np.sqrt(np.nanmean(field0.std_v[ok0] ** 2))))

    # 2. homogeneous stretch about the centre of the crop
    exx, eyy = (float(a) for a in stretch)
    rows, cols = scene.image.shape
    centre = ((cols - 1) / 2.0, (rows - 1) / 2.0)
    fs = correlate_scene(scene, scene.noisy(stretch_image(scene.image, exx, eyy, centre)), subset,
                    step, sf, interpolation)
    es = strain_field(fs, window=window, measure=measure)
    Fx = np.diag([1.0 + exx, 1.0 + eyy])
    T = strain_tensor(Fx, measure)
    expected = (float(T[0, 0]), float(T[1, 1]), float(T[0, 1]))
    vs = es.valid
    mean = tuple(float(np.mean(getattr(es, c)[vs])) if vs.any() else float("nan")
                 for c in ("xx", "yy", "xy"))
    oks = fs.valid
    du = fs.u[oks] - exx * (fs.x[oks] - centre[0])
    dv = fs.v[oks] - eyy * (fs.y[oks] - centre[1])
    stretch_res = {
        "applied": (exx, eyy), "expected": expected, "mean": mean,
        "bias": tuple(m - e for m, e in zip(mean, expected)),
        "sd": tuple(float(np.std(getattr(es, c)[vs])) if vs.any() else float("nan")
                    for c in ("xx", "yy", "xy")),
        "displacement_rms": float(np.sqrt(np.mean(du ** 2 + dv ** 2) / 2.0)),
    }

    # 3. the wave
    th_u = attenuation_period(lambda p: displacement_transfer(p, subset, sf))
    th_e = attenuation_period(lambda p: strain_transfer(p, subset, step, window, sf))
    lo = max(_PERIOD_SPAN[0] * th_u, 2.0 * math.pi * abs(amplitude) / 0.5)
    hi = max(_PERIOD_SPAN[1] * th_e, 2.0 * lo)
    geom = wave_geometry(scene, lo, hi)
    fw = correlate_scene(scene, scene.noisy(scene_wave_image(scene, geom, amplitude)), subset, step, sf,
                    interpolation)
    ew = strain_field(fw, window=window, measure="infinitesimal")
    periods, ru, re = wave_response(scene, geom, amplitude, fw, ew, window)
    res_u, flag_u = crossing(periods, ru)
    res_e, flag_e = crossing(periods, re)

    n_u = math.sqrt(0.5 * (disp_noise[0] ** 2 + disp_noise[1] ** 2))
    n_e = math.sqrt(0.5 * (strain_noise["xx"] ** 2 + strain_noise["yy"] ** 2))
    vsg = (window - 1) * step + subset
    x0, y0 = scene.origin
    return SelfCheck(
        settings={"subset": subset, "step": step, "window": window, "shape_function": sf,
                  "interpolation": str(interpolation).lower(), "measure": measure, "vsg": vsg},
        noise=scene.noise, noise_source=scene.noise_source,
        region=(x0, y0, x0 + cols - 1, y0 + rows - 1),
        shifts=shifts, shift_bias=bias, shift_sd=sd,
        displacement_bias=float(np.nanmax(np.abs(bias))) if np.isfinite(bias).any()
        else float("nan"),
        displacement_noise=disp_noise, predicted_noise=pred, strain_noise=strain_noise,
        stretch=stretch_res,
        wave={"amplitude": float(amplitude), "period": periods, "ratio_u": ru,
              "ratio_strain": re, "axis": "x" if scene.transposed else "y",
              "periods_applied": (lo, hi)},
        resolution_u=res_u, resolution_strain=res_e, resolution_flags=(flag_u, flag_e),
        theory_u=th_u, theory_strain=th_e,
        mei_u=n_u * res_u,
        mei_u_per_noise=n_u * res_u / scene.noise if scene.noise > 0 else float("nan"),
        mei_strain=n_e * res_e ** 2)
