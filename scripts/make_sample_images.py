"""Write the demo data set: a speckle-painted 6061-T6 aluminium coupon in a tensile test.

The scenario is invented and every number in it is synthetic. A laser-cut sheet tensile coupon
of 6061-T6 aluminium (parallel section 12.5 mm wide, 3 mm thick) has its gauge section painted
with black speckles on white. It lies horizontally (specimen axis along ``x``) in front of a
12-bit camera that sees a 640 x 240 px window (0.08 mm/px: the 12.5 mm wide painted face is the
bright band across the middle 65 % of the height, plain dark background above and below). The
camera saves 16-bit grey PNG files holding 12-bit values (0..4095). One frame a second (a
realistic rate for a slow test, dense enough that the elastic range holds 15 frames and the yield
knee 6 more): frame ``k`` at ``t = k`` s, 38 frames, ``coupon_000.png`` (unloaded reference) ..
``coupon_037.png``.

The test, run in crosshead-displacement control:

- 0..22 s at 0.03 mm/s (about 17 MPa/s in the elastic range and 0.05 %/s of strain through
  yield, near ISO 6892-1's slow rates, from memory): elastic loading to 0.39 % strain at 16 s,
  yield, and the 0.2 % offset point near 20 s;
- from 22 s at 0.45 mm/s: plastic hardening to the uniform elongation of 10 % at maximum force
  (near 34 s);
- then a diffuse neck at ``x = 0.55 * width`` grows to about 26 % local engineering strain,
  while the 40 mm gauge in view averages about 13 %; the material outside the neck unloads
  elastically as the force falls. The recording stops at 37 s, before fracture.

Material law (true stress against true plastic strain): Swift hardening
``sigma = K (eps0 + eps_p)^n`` after a linear-elastic range, with ``K``, ``n``, ``eps0`` solved so
that the engineering curve has the handbook 0.2 % proof strength (276 MPa) and tensile strength
(310 MPa) of 6061-T6, its maximum (Considere's condition ``d sigma / d eps = sigma``) at the
invented uniform elongation of 10 %. E = 68.9 GPa and Poisson's ratio 0.33 (elastic); plastic
flow keeps the volume (width and thickness strains equal). Handbook values: typical properties of
6061-T6 as listed in handbooks (ASM Handbook Vol. 2), from memory.

The displacement field of frame ``k`` is :func:`dic.images.synth.tensile_neck` along ``x`` (uniform
stretch about the neck centre plus a ``sech^2`` neck) with our own lateral contraction
``dy/dY = (1 - nu e_el) sqrt((1 + e_el) / (1 + e(X)))`` (elastic Poisson contraction times
plastic volume constancy, ``e_el = sigma_eng / E``), plus a rigid shift (0.5 px per mm of
crosshead travel along ``x``, up to 0.3 px sideways drift). Images are rendered exactly from an
analytic speckle (:mod:`dic.images.synth`, no interpolation of a stored image): Gaussian paint drops
whose optical depths add, the paint reflecting ``BLACK + (WHITE - BLACK) exp(-depth)`` (200 to
3900 grey levels, so overlapping drops saturate towards black instead of clipping), the
band edge blurred by a Gaussian of 1.2 px (as a lens would; a sharp edge is not band-limited and
biases subsets near it), Gaussian noise of 2 grey levels (seeded per frame), rounded to integers.

Also written: ``force_log.csv`` (the testing machine's log, 10 Hz, our own layout: ``#`` comment
lines, then ``time_s,force_kN,crosshead_mm``), ``frame_times.csv`` (``file,time_s``) and
``README.md``. Deterministic (fixed seeds); a few seconds.

Run: python scripts/make_sample_images.py [--out sample_images]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

# --------------------------------------------------------------------------------------------
# camera and specimen
# --------------------------------------------------------------------------------------------
ROWS, COLS = 240, 640
BITS = 12
PIXEL_SIZE_MM = 0.08
N_FRAMES = 38
FRAME_INTERVAL_S = 1.0
LOG_RATE_HZ = 10
WIDTH_MM, THICKNESS_MM = 12.5, 3.0
AREA_MM2 = WIDTH_MM * THICKNESS_MM
#: parallel (reduced) section length, ASTM E8/E8M sheet-type standard specimen (from memory)
PARALLEL_LENGTH_MM = 57.0
#: invented machine stiffness (load train, grips), kN/mm: the crosshead travel includes F / k
MACHINE_STIFFNESS_KN_MM = 40.0

#: band centre and half height (px, reference): the 12.5 mm face at 0.08 mm/px
BAND_CENTRE_Y = (ROWS - 1) / 2.0
BAND_HALF = 0.5 * WIDTH_MM / PIXEL_SIZE_MM
EDGE_BLUR = 1.2          # standard deviation of the band-edge blur, px
#: virtual gauge of 40 mm (500 px) centred in the reference image; stays in view to the end
GAUGE_X = ((COLS - 1) / 2.0 - 250.0, (COLS - 1) / 2.0 + 250.0)
NECK_CENTRE_X = 0.55 * COLS
NECK_WIDTH_PX = 60.0     # w of the sech^2 neck profile (full width at half height 1.76 w)

# --------------------------------------------------------------------------------------------
# grey levels (12-bit camera)
# --------------------------------------------------------------------------------------------
WHITE = 3900.0           # white paint between speckles
BLACK = 200.0            # fully covered by black paint
DARK = 350.0             # plain background beside the coupon
#: speckles as layers of black paint: the painted face reflects
#: ``BLACK + (WHITE - BLACK) exp(-tau)``, ``tau`` the summed optical depth of the Gaussian paint
#: drops (overlapping drops multiply their transmittances). Drops cannot go darker than BLACK,
#: so nothing clips. SPECKLE_DEPTH is make_speckle's ``contrast`` for ``tau``: single drops have
#: peak depths of 1.0..1.6 (63-81 % of the way to black), piles approach BLACK
SPECKLE_DEPTH = 4.0
SPECKLE_RADIUS = 2.5
SPECKLE_DENSITY = 0.5
NOISE = 2.0
SEED = 20240611

# --------------------------------------------------------------------------------------------
# material: 6061-T6 typical handbook values (ASM Handbook Vol. 2, from memory)
# --------------------------------------------------------------------------------------------
E_MPA = 68_900.0
POISSON = 0.33
PROOF_MPA = 276.0        # 0.2 % proof (yield) strength
UTS_MPA = 310.0          # tensile strength
ELONGATION_BREAK = 0.12  # elongation at break, 50 mm gauge (not used by the model)
UNIFORM_ELONGATION = 0.10  # invented for the demo (engineering strain at maximum force)

# --------------------------------------------------------------------------------------------
# test programme
# --------------------------------------------------------------------------------------------
SPEED_1_MM_S, SPEED_2_MM_S, SPEED_SWITCH_S = 0.03, 0.45, 22.0
SHIFT_PX_PER_MM = 0.5    # rigid shift of the coupon in view per mm of crosshead travel
DRIFT_MAX_PX = 0.3       # sideways drift at the last frame
FORCE_NOISE_KN = 0.008   # load-cell noise, standard deviation
CROSSHEAD_NOISE_MM = 0.0005


# --------------------------------------------------------------------------------------------
# material law
# --------------------------------------------------------------------------------------------
def _swift_constants():
    """``(K, n, eps0)`` of ``sigma_true = K (eps0 + eps_p)^n`` from the handbook numbers.

    Engineering and true quantities: ``1 + e = (1 + s / E) exp(eps_p)`` (elastic engineering
    strain ``s / E`` times plastic stretch) and ``sigma_true = s (1 + e)``, ``s`` the engineering
    stress. Conditions: (1) at 0.2 % offset on the engineering curve ``s = PROOF``; (2) at
    ``e = UNIFORM_ELONGATION`` ``s = UTS``; (3) ``s`` is greatest there, which for this split is
    ``d sigma_true / d eps_p = sigma_true``, i.e. ``n = eps0 + eps_p`` (Considere).
    """
    from scipy.optimize import brentq

    e_p02 = 0.002 + PROOF_MPA / E_MPA
    eps_p02 = math.log((1.0 + e_p02) / (1.0 + PROOF_MPA / E_MPA))
    sig02 = PROOF_MPA * (1.0 + e_p02)
    eps_pu = math.log((1.0 + UNIFORM_ELONGATION) / (1.0 + UTS_MPA / E_MPA))
    sigu = UTS_MPA * (1.0 + UNIFORM_ELONGATION)

    def gap(n):  # ratio condition with eps0 = n - eps_pu
        return n * math.log((n - eps_pu + eps_p02) / n) - math.log(sig02 / sigu)

    n = brentq(gap, eps_pu - eps_p02 + 1e-9, 1.0, xtol=1e-15)
    return sigu / n**n, n, n - eps_pu


K_MPA, N_HARD, EPS0 = _swift_constants()
EPS_P_UNIFORM = N_HARD - EPS0


def true_stress(eps_p):
    """Swift hardening law, MPa, at true plastic strain ``eps_p >= 0``."""
    return K_MPA * (EPS0 + eps_p) ** N_HARD


def _eng_stress_at_plastic(eps_p):
    """Engineering stress ``s`` with ``s (1 + s/E) exp(eps_p) = sigma_true(eps_p)``."""
    q = true_stress(eps_p) * math.exp(-eps_p)
    return 0.5 * E_MPA * (math.sqrt(1.0 + 4.0 * q / E_MPA) - 1.0)


def _yield_strain():
    return _eng_stress_at_plastic(0.0) / E_MPA


def uniform_state(e):
    """Engineering stress (MPa) and elastic engineering strain of a uniformly stretched coupon."""
    from scipy.optimize import brentq

    if e <= _yield_strain():
        return E_MPA * e, e

    def gap(eps_p):
        return (1.0 + _eng_stress_at_plastic(eps_p) / E_MPA) * math.exp(eps_p) - 1.0 - e

    eps_p = brentq(gap, 0.0, 2.0, xtol=1e-15)
    s = _eng_stress_at_plastic(eps_p)
    return s, s / E_MPA


def neck_state(p):
    """State after necking, ``p`` = true plastic strain at the neck centre beyond uniform.

    Returns ``(s, e0, e1)``: engineering stress, the engineering strain outside the neck (it
    unloads elastically from the uniform elongation) and the extra strain at the neck centre.
    """
    s = _eng_stress_at_plastic(EPS_P_UNIFORM + p)
    e_peak = (1.0 + s / E_MPA) * math.exp(EPS_P_UNIFORM + p) - 1.0
    e0 = (1.0 + s / E_MPA) * math.exp(EPS_P_UNIFORM) - 1.0
    return s, e0, e_peak - e0


def _neck_integral_mm():
    """Integral of the neck profile sech^2 over the parallel length (mm), neck centred in it."""
    w = NECK_WIDTH_PX * PIXEL_SIZE_MM
    return 2.0 * w * math.tanh(0.5 * PARALLEL_LENGTH_MM / w)


def _crosshead_of(stage, value):
    """Crosshead travel (mm) of a state: stage 0 uniform strain ``value``, 1 neck ``p``."""
    if stage == 0:
        s, _ = uniform_state(value)
        stretch = value * PARALLEL_LENGTH_MM
    else:
        s, e0, e1 = neck_state(value)
        stretch = e0 * PARALLEL_LENGTH_MM + e1 * _neck_integral_mm()
    return stretch + s * AREA_MM2 / 1000.0 / MACHINE_STIFFNESS_KN_MM


def crosshead(t):
    """Commanded crosshead travel (mm) at time ``t`` (s): two constant speeds."""
    t1 = min(t, SPEED_SWITCH_S)
    return SPEED_1_MM_S * t1 + SPEED_2_MM_S * max(t - SPEED_SWITCH_S, 0.0)


def state_at(t):
    """The coupon at time ``t``: dict of engineering stress, force and strains.

    Keys: ``stress_mpa``, ``force_kn``, ``e0`` (strain outside the neck), ``e1`` (extra strain at
    the neck centre), ``e_el`` (elastic engineering strain), ``crosshead_mm``.
    """
    from scipy.optimize import brentq

    c = crosshead(t)
    c_u = _crosshead_of(0, UNIFORM_ELONGATION)
    if c <= c_u:
        e0 = brentq(lambda e: _crosshead_of(0, e) - c, 0.0, UNIFORM_ELONGATION, xtol=1e-15) \
            if c > 0 else 0.0
        s, _ = uniform_state(e0)
        e1 = 0.0
    else:
        p = brentq(lambda q: _crosshead_of(1, q) - c, 0.0, 2.0, xtol=1e-15)
        s, e0, e1 = neck_state(p)
    return {"stress_mpa": s, "force_kn": s * AREA_MM2 / 1000.0, "e0": e0, "e1": e1,
            "e_el": s / E_MPA, "crosshead_mm": c}


def frame_time(k):
    """Time (s) of frame ``k``."""
    return FRAME_INTERVAL_S * k


def gauge_strain(state):
    """Engineering strain averaged over the virtual gauge ``GAUGE_X`` (exact, from the field)."""
    x1, x2 = GAUGE_X
    w = NECK_WIDTH_PX
    g = w * (math.tanh((x2 - NECK_CENTRE_X) / w) - math.tanh((x1 - NECK_CENTRE_X) / w))
    return state["e0"] + state["e1"] * g / (x2 - x1)


# --------------------------------------------------------------------------------------------
# displacement field
# --------------------------------------------------------------------------------------------
def coupon_field(k):
    """Exact displacement field of frame ``k`` (a :class:`dic.images.synth.Displacement`).

    ``u`` is :func:`dic.images.synth.tensile_neck` (``lateral="none"``); ``v`` is our lateral
    contraction ``(lam(X) - 1) (Y - yc)`` with ``lam = (1 - nu e_el) sqrt((1 + e_el) /
    (1 + e(X)))``, ``e(X)`` the local axial engineering strain, plus the rigid shift.
    """
    import dic.images.synth as synth

    st = state_at(frame_time(k))
    e0, e1, e_el = st["e0"], st["e1"], st["e_el"]
    xc, yc, w = NECK_CENTRE_X, BAND_CENTRE_Y, NECK_WIDTH_PX
    ox = SHIFT_PX_PER_MM * st["crosshead_mm"]
    oy = DRIFT_MAX_PX * k / (N_FRAMES - 1)
    axial = synth.tensile_neck(e0, centre=(xc, yc), neck_strain=e1, neck_width=w,
                               lateral="none", offset=(ox, 0.0))
    c = (1.0 - POISSON * e_el) * math.sqrt(1.0 + e_el)

    def strain(X):
        return e0 + e1 / np.cosh((X - xc) / w) ** 2

    def lam(X):
        return c / np.sqrt(1.0 + strain(X))

    def fu(X, Y):
        return axial(X, Y)[0]

    def fv(X, Y):
        return (lam(X) - 1.0) * (Y - yc) + oy

    def jac(X, Y):
        dudx, dudy, _, _ = axial.jacobian(X, Y)
        s = (X - xc) / w
        de = -2.0 * e1 / w * np.tanh(s) / np.cosh(s) ** 2
        dlam = -0.5 * lam(X) / (1.0 + strain(X)) * de
        return dudx, dudy, dlam * (Y - yc), lam(X) - 1.0 + 0.0 * Y

    return synth.from_function(fu, fv, jacobian=jac)


# --------------------------------------------------------------------------------------------
# images
# --------------------------------------------------------------------------------------------
def make_pattern():
    """The paint drops: analytic Gaussian blobs of optical depth, reference coordinates."""
    import dic.images.synth as synth

    return synth.make_speckle((ROWS, COLS), radius=SPECKLE_RADIUS, density=SPECKLE_DENSITY,
                              contrast=SPECKLE_DEPTH, background=0.0, seed=SEED)


def render_clean(pattern, k):
    """Noise-free float image of frame ``k`` (frame 0 = reference, no displacement)."""
    import dic.images.synth as synth
    from scipy.special import erf

    yy, xx = np.mgrid[0:ROWS, 0:COLS].astype(np.float64)
    if k == 0:
        X, Y, lam = xx, yy, np.ones_like(xx)
    else:
        field = coupon_field(k)
        X, Y = synth.inverse_map(field, xx, yy)
        lam = 1.0 + field.jacobian(X, Y)[3]
    paint = BLACK + (WHITE - BLACK) * np.exp(-synth.evaluate(pattern, X, Y))
    # share of the painted face a pixel sees: the coupon edge (material, reference coordinates)
    # at its current lateral scale, blurred by a Gaussian of EDGE_BLUR px
    d = (BAND_HALF - np.abs(Y - BAND_CENTRE_Y)) * lam
    inside = 0.5 * (1.0 + erf(d / (math.sqrt(2.0) * EDGE_BLUR)))
    return inside * paint + (1.0 - inside) * DARK


def to_camera(clean, rng):
    """Add Gaussian noise of ``NOISE`` grey levels and round to 12-bit integers (uint16)."""
    img = np.rint(clean + rng.normal(0.0, NOISE, clean.shape))
    if img.min() < 0 or img.max() > 2**BITS - 1:
        raise ValueError("rendered grey levels leave the 12-bit range; check WHITE, BLACK, DARK")
    return img.astype(np.uint16)


def frame_seeds():
    """One noise generator per frame, from ``SEED``."""
    return [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(N_FRAMES)]


# --------------------------------------------------------------------------------------------
# machine log
# --------------------------------------------------------------------------------------------
def force_log_text():
    """The testing machine's log as CSV text (our own layout)."""
    rng = np.random.default_rng(SEED + 1)
    n = int(round(frame_time(N_FRAMES - 1) * LOG_RATE_HZ)) + 1
    lines = [
        "# tensile test log (synthetic demo data, invented layout)",
        "# specimen: 6061-T6 aluminium sheet coupon, laser cut, gauge section speckle painted",
        f"# cross-section: {WIDTH_MM} mm x {THICKNESS_MM} mm = {AREA_MM2} mm^2; "
        f"parallel length {PARALLEL_LENGTH_MM} mm",
        f"# control: crosshead {SPEED_1_MM_S} mm/s to {SPEED_SWITCH_S:g} s, then "
        f"{SPEED_2_MM_S} mm/s",
        f"# sampling: {LOG_RATE_HZ} Hz; camera frame k taken at t = {FRAME_INTERVAL_S:g} k s",
        "time_s,force_kN,crosshead_mm",
    ]
    for i in range(n):
        t = i / LOG_RATE_HZ
        st = state_at(t)
        f = st["force_kn"] + rng.normal(0.0, FORCE_NOISE_KN)
        c = st["crosshead_mm"] + rng.normal(0.0, CROSSHEAD_NOISE_MM)
        lines.append(f"{t:.1f},{f:.4f},{c:.4f}")
    return "\n".join(lines) + "\n"


def frame_times_text():
    lines = ["file,time_s"]
    lines += [f"coupon_{k:03d}.png,{frame_time(k):.1f}" for k in range(N_FRAMES)]
    return "\n".join(lines) + "\n"


README = """\
# Sample images: a tensile test on a 6061-T6 aluminium coupon

**Synthetic demo data.** Everything in this folder is invented and rendered by
`scripts/make_sample_images.py`; nothing was photographed or measured. Use it to try the
software and in its tests, never as material data.

## Scenario

A laser-cut sheet tensile coupon of 6061-T6 aluminium, parallel section {width} mm wide and
{thick} mm thick ({area} mm^2, parallel length {plen} mm), gauge section painted with black
speckles on white, is pulled in a testing machine in crosshead-displacement control:
{v1} mm/s up to {tsw:g} s, then {v2} mm/s. A 12-bit camera looks at the painted face.

- `coupon_000.png` .. `coupon_{last:03d}.png`: {n} frames, {cols} x {rows} px, 16-bit grey PNG
  holding 12-bit values (0..4095). Specimen axis along x (columns). Frame 0 is the unloaded
  reference. The bright band across the middle {band:.0f} % of the height is the coupon
  ({bandpx:.0f} px = {width} mm); above and below is a plain dark background.
- Pixel size **{px} mm/px** (the frame is {wmm:.1f} x {hmm:.1f} mm).
- Timing: frame k is taken at t = {dt:g} k s (`frame_times.csv`), the last at {tend:g} s.
- `force_log.csv`: the machine's log at {hz} Hz from 0 to {tend:g} s. Lines starting with `#`
  describe the test; then the columns `time_s,force_kN,crosshead_mm`. Frame k corresponds to the
  row with time_s = {dt:g} k. Force noise {fnoise} kN, crosshead noise {cnoise} mm (std).

What happens: elastic loading to {e3:.2f} % at frame 15; yield near {ey:.2f} %; plastic hardening
to the uniform elongation of {eu:g} % at maximum force ({fmax:.2f} kN, {smax:.0f} MPa) at
{tu:.1f} s (just after frame {ku}); then a diffuse neck centred at x = {xn:.0f} px grows to
{eneck:.1f} % local engineering strain at frame {last} while a {glen:.0f} mm virtual gauge
(reference x = {gx1:.1f} .. {gx2:.1f} px) reads {egauge:.1f} %. The material outside the neck
unloads elastically as the force falls. The recording stops at {tend:g} s, before fracture.
The coupon also shifts rigidly by up to {shift:.1f} px along x and {drift} px across.

## Model and constants

- 6061-T6 typical handbook values (ASM Handbook Vol. 2, from memory): E = {E:g} GPa,
  Poisson's ratio {nu}, 0.2 % proof strength {rp:g} MPa, tensile strength {rm:g} MPa,
  elongation at break {a:g} % (50 mm gauge). The uniform elongation of {eu:g} % is invented.
- Engineering stress = force / ({area} mm^2). True stress against true plastic strain follows
  Swift's law sigma = K (eps0 + eps_p)^n with K = {K:.1f} MPa, n = {nh:.4f}, eps0 = {e0:.5f},
  solved so that the engineering curve has the proof and tensile strengths above and its
  maximum (Considere's condition) at the uniform elongation. Below {ey:.3f} % the coupon is
  linear elastic.
- Displacement field: `dic.synth.tensile_neck` along x (uniform stretch plus a sech^2 neck of
  width parameter {wn:g} px); lateral contraction dy/dY = (1 - nu e_el) sqrt((1 + e_el) / (1 +
  e(X))): Poisson's ratio {nu} for the elastic part e_el = stress / E and constant volume (equal
  width and thickness strains) for the plastic part. Before necking, force and strain are
  uniform; after it, the force is the one the neck section carries (the same law at the neck
  centre's strain).
- Crosshead travel = elongation of the parallel length + force / {kmach:g} kN/mm (an invented
  machine stiffness), so the crosshead overstates the strain, especially in the elastic range:
  use the images (a virtual gauge) for strain, not the crosshead.
- Images: analytic speckle of Gaussian drops of black paint (radius {rad} px) on white
  paint, rendered exactly at the inverse of the known field (no interpolation of a stored
  image), band edge blurred by a {blur} px Gaussian, Gaussian noise of {noise} grey levels (a
  fixed seed per frame), rounded. The drops' optical depths add, and the face reflects
  {black:g} + ({white:g} - {black:g}) exp(-depth) grey levels (white paint {white:g}, full
  black {black:g}, plain background {darkbg:g}), so piles of drops saturate towards black and
  no pixel clips.
- Strain noise floor of this pattern: two noise draws (sigma = 2) of the unloaded coupon,
  subset 21 px, step 4 px, strain window 9 (VSG 53 px): about 13 microstrain (std of exx),
  against the project's bar of 100; checked in `tests/test_sample_images.py`.

Regenerate (deterministic, a few seconds):

    python scripts/make_sample_images.py --out sample_images

Try:

    dic run sample_images --out demo_out

## Caution

These are synthetic demo data, not measurements of any real material or specimen. Optical
strain used for certification must be verified as an extensometer under the applicable
standard (ISO 9513 / ASTM E83 class) and the lab's accredited practice; results are indicative
otherwise. Test-machine safety (guards, eye protection, stored energy at fracture, intense
lighting) follows local rules and the machine maker's instructions.
"""


def readme_text(states):
    k_u = next(k for k in range(N_FRAMES) if states[k]["e1"] > 0) - 1
    last = states[-1]
    f = np.array([state_at(i / LOG_RATE_HZ)["force_kn"]
                  for i in range(int(frame_time(N_FRAMES - 1) * LOG_RATE_HZ) + 1)])
    i_max = int(np.argmax(f))
    return README.format(
        width=WIDTH_MM, thick=THICKNESS_MM, area=AREA_MM2, plen=PARALLEL_LENGTH_MM,
        v1=SPEED_1_MM_S, v2=SPEED_2_MM_S, tsw=SPEED_SWITCH_S, last=N_FRAMES - 1, n=N_FRAMES,
        cols=COLS, rows=ROWS, band=100 * 2 * BAND_HALF / ROWS, bandpx=2 * BAND_HALF,
        px=PIXEL_SIZE_MM, wmm=COLS * PIXEL_SIZE_MM, hmm=ROWS * PIXEL_SIZE_MM,
        dt=FRAME_INTERVAL_S, tend=frame_time(N_FRAMES - 1), hz=LOG_RATE_HZ,
        fnoise=FORCE_NOISE_KN, cnoise=CROSSHEAD_NOISE_MM, e3=100 * states[15]["e0"],
        ey=100 * _yield_strain(), eu=100 * UNIFORM_ELONGATION, fmax=f[i_max],
        smax=f[i_max] * 1000.0 / AREA_MM2, tu=i_max / LOG_RATE_HZ, ku=k_u, xn=NECK_CENTRE_X,
        eneck=100 * (last["e0"] + last["e1"]), glen=(GAUGE_X[1] - GAUGE_X[0]) * PIXEL_SIZE_MM,
        gx1=GAUGE_X[0], gx2=GAUGE_X[1], egauge=100 * gauge_strain(last),
        shift=SHIFT_PX_PER_MM * last["crosshead_mm"], drift=DRIFT_MAX_PX, E=E_MPA / 1000.0,
        nu=POISSON, rp=PROOF_MPA, rm=UTS_MPA, a=100 * ELONGATION_BREAK, K=K_MPA, nh=N_HARD,
        e0=EPS0, wn=NECK_WIDTH_PX, kmach=MACHINE_STIFFNESS_KN_MM, rad=SPECKLE_RADIUS,
        white=WHITE, black=BLACK, darkbg=DARK, blur=EDGE_BLUR, noise=NOISE)


def analysis_text() -> str:
    """The analysis file that takes the sample from images to a report (``dic run``)."""
    y0 = math.ceil(BAND_CENTRE_Y - BAND_HALF + 4.0)
    y1 = math.floor(BAND_CENTRE_Y + BAND_HALF - 4.0)
    return f"""# Analysis of the sample tensile test: dic run --config sample_images/analysis.toml
# (paths are relative to this file; command-line options override these settings)
images = "coupon_*.png"

[matching]
subset = 21
step = 8

[roi]
rectangle = [0, {y0}, {COLS - 1}, {y1}]   # the painted band, 4 px inside its edges

[scale]
mm_per_px = {PIXEL_SIZE_MM}

[strain]
window = 9
measure = "green-lagrange"

[tensile]
force_log = "force_log.csv"
time_column = "time_s"
force_column = "force_kN"
force_unit = "kN"
frame_times = "frame_times.csv"
width_mm = {WIDTH_MM}
thickness_mm = {THICKNESS_MM}
gauge_length_mm = 40.0
modulus_range_mpa = [20, 265]

[report]
title = "Tensile test of a 6061-T6 coupon (synthetic sample)"
"""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent.parent / "sample_images"),
                    help="output folder (default: the project's sample_images)")
    ap.add_argument("--quiet", action="store_true", help="print only the summary line")
    args = ap.parse_args(argv)

    from dic.images.io import write_image

    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    pattern = make_pattern()
    rngs = frame_seeds()
    states = [state_at(frame_time(k)) for k in range(N_FRAMES)]
    for k in range(N_FRAMES):
        img = to_camera(render_clean(pattern, k), rngs[k])
        path = write_image(out / f"coupon_{k:03d}.png", img, bits=16)
        if not args.quiet:
            st = states[k]
            print(f"{path.name}  t {frame_time(k):4.0f} s  force {st['force_kn']:6.3f} kN  "
                  f"gauge {100 * gauge_strain(st):6.3f} %  neck {100 * (st['e0'] + st['e1']):6.2f}"
                  f" %  grey {img.min()}..{img.max()}")
    (out / "force_log.csv").write_text(force_log_text(), encoding="utf-8")
    (out / "frame_times.csv").write_text(frame_times_text(), encoding="utf-8")
    (out / "README.md").write_text(readme_text(states), encoding="utf-8")
    (out / "analysis.toml").write_text(analysis_text(), encoding="utf-8")
    size = sum(p.stat().st_size for p in out.iterdir() if p.is_file())
    print(f"wrote {N_FRAMES} images, force_log.csv, frame_times.csv, README.md and "
          f"analysis.toml to {out} "
          f"({size / 1e6:.2f} MB) in {time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
