"""Write the demo image sequence: a speckle-painted aluminium tensile coupon being stretched.

The scenario is invented for the demo and the images are synthetic. A laser-cut aluminium
coupon, its gauge section painted with black speckles on white, lies horizontally across a
600 x 300 px frame (specimen axis along ``x``). Above and below the painted band the camera sees a
plain dark background. Frame 0 is the unloaded reference. Frames 1..5 stretch the coupon along
``x`` up to 5 % engineering strain:

- axial strain ``e`` (engineering, ``F_xx = 1 + e``) at 0, 0.25, 0.6, 1.5, 3.0 and 5.0 %;
- lateral contraction ``e_yy = -(0.33 e_el + 0.5 e_pl)``, with the elastic part ``e_el`` capped
  at 0.35 % (a typical 6xxx alloy yields near there) and the plastic part ``e_pl = e - e_el``
  shrinking at constant volume;
- a smooth bump of extra plastic strain (15 % of ``e_pl`` at its peak, Gaussian, 80 px wide)
  near the middle, where a neck would later form, so the strain map is not flat;
- the whole coupon moving with the crosshead: a rigid shift along ``x`` of 75 px per unit strain
  (3.75 px at 5 %) and a small sideways drift of up to 0.3 px.

The images are rendered exactly from an analytic Gaussian-blob speckle (:mod:`dic.synth`, no
interpolation of a stored image): every pixel is mapped back to its reference position and the
pattern formula evaluated there. Gaussian noise of 1.5 grey levels (a fresh seed per frame) is
added and the result rounded to 8 bits. Run time: a few seconds.

Run: python scripts/make_sample_images.py [--out sample_images]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

ROWS, COLS = 300, 600
#: engineering axial strain of frames 0..5
STRAINS = (0.0, 0.0025, 0.006, 0.015, 0.030, 0.050)
NU_ELASTIC, NU_PLASTIC = 0.33, 0.5
ELASTIC_LIMIT = 0.0035
BUMP_SHARE, BUMP_WIDTH = 0.15, 80.0       # extra plastic strain at the peak; Gaussian 1/e width (px)
SHIFT_PER_STRAIN, DRIFT_MAX = 75.0, 0.3   # crosshead shift (px per unit strain); sideways drift (px)
CENTRE = ((COLS - 1) / 2.0, (ROWS - 1) / 2.0)
BAND_HALF = 115.0                          # half height of the painted band (px, reference)
EDGE_BLUR = 1.2                            # standard deviation of the band-edge blur (px)
WHITE, DARK = 235.0, 14.0                  # white paint, plain background grey levels
#: blob contrast (grey levels, negative: dark speckles). make_speckle scales it to the mean + 5 std
#: of the blob sum, which leaves single speckles mid-grey; -300 makes the 1st..99th percentiles of
#: the painted area span about 25..235, with some 0.4 % of pixels (piles of overlapping speckles)
#: clipped at 0 as on a real camera
SPECKLE_CONTRAST = -300.0
NOISE = 1.5
PIXEL_SIZE_MM = 0.02
SEED = 20240611


def coupon_motion(e, frame):
    """Displacement field of the coupon at axial engineering strain ``e``.

    ``u = s + e (X - Xc) + a w sqrt(pi)/2 erf((X - Xc)/w)`` and
    ``v = d + e_yy(X) (Y - Yc)``, with the bump ``a exp(-((X - Xc)/w)^2)`` adding to the axial
    strain and its lateral share ``-0.5`` of it to ``e_yy``. ``det F > 0`` for every strain here.
    """
    import dic.synth as synth

    e_el = min(e, ELASTIC_LIMIT)
    e_pl = e - e_el
    lateral = -(NU_ELASTIC * e_el + NU_PLASTIC * e_pl)
    a = BUMP_SHARE * e_pl
    w = BUMP_WIDTH
    shift = SHIFT_PER_STRAIN * e
    drift = DRIFT_MAX * frame / (len(STRAINS) - 1)
    xc, yc = CENTRE
    c = a * w * math.sqrt(math.pi) / 2.0

    def bump(X):
        return np.exp(-(((X - xc) / w) ** 2))

    def fu(X, Y):
        from scipy.special import erf

        return shift + e * (X - xc) + c * erf((X - xc) / w) + 0.0 * Y

    def fv(X, Y):
        return drift + (lateral - NU_PLASTIC * a * bump(X)) * (Y - yc)

    def jac(X, Y):
        b = bump(X)
        dudx = e + a * b
        dudy = np.zeros_like(Y + X)
        dvdx = -NU_PLASTIC * a * b * (-2.0 * (X - xc) / w**2) * (Y - yc)
        dvdy = lateral - NU_PLASTIC * a * b
        return dudx, dudy, dvdx, dvdy

    return synth.from_function(fu, fv, jacobian=jac)


def render_frame(pattern, displacement, rng):
    """One 8-bit frame: speckled band over a dark background, noise added."""
    import dic.synth as synth

    yy, xx = np.mgrid[0:ROWS, 0:COLS].astype(np.float64)
    if displacement is None:
        X, Y = xx, yy
    else:
        X, Y = synth.inverse_map(displacement, xx, yy)
    paint = synth.evaluate(pattern, X, Y)
    # how much of the band the pixel sees: the band edge (in reference coordinates) blurred by a
    # Gaussian of EDGE_BLUR px, as a lens would. A sharper edge is not band-limited: the matcher's
    # B-spline cannot interpolate it, and subsets across the edge would be biased.
    from scipy.special import erf

    inside = 0.5 * (1.0 + erf((BAND_HALF - np.abs(Y - CENTRE[1])) / (math.sqrt(2.0) * EDGE_BLUR)))
    img = inside * paint + (1.0 - inside) * DARK
    img += rng.normal(0.0, NOISE, img.shape)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


README = """\
# Sample images

`coupon_000.png` .. `coupon_{last:03d}.png`: a demo tensile test, **synthetic** (rendered, not
photographed). An aluminium coupon, painted with black speckles on white, lies along x across a
{cols} x {rows} px frame with a dark background above and below. Frame 0 is the unloaded reference;
frames 1-{last} stretch the coupon along x to {strains} % engineering strain, with lateral
contraction (Poisson's ratio 0.33 elastic, 0.5 plastic), a smooth bump of extra strain near the
middle and a rigid shift of up to {shift:.2f} px with the crosshead. 8-bit grey PNG, noise
{noise} grey levels. Assume a pixel size of {px} mm (the frame is {wmm:.0f} x {hmm:.0f} mm).

The data is invented for demonstrations and tests of the software, not measured.

Regenerate (deterministic, a few seconds):

    python scripts/make_sample_images.py --out sample_images

Try:

    dic run sample_images --out demo_out
"""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent.parent / "sample_images"),
                    help="output folder (default: the project's sample_images)")
    args = ap.parse_args(argv)

    import dic.synth as synth
    from dic.io import write_image

    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    pattern = synth.make_speckle((ROWS, COLS), radius=2.75, density=0.6,
                                 contrast=SPECKLE_CONTRAST, background=WHITE, seed=SEED)
    seeds = np.random.SeedSequence(SEED).spawn(len(STRAINS))
    for k, e in enumerate(STRAINS):
        disp = None if k == 0 else coupon_motion(e, k)
        img = render_frame(pattern, disp, np.random.default_rng(seeds[k]))
        path = write_image(out / f"coupon_{k:03d}.png", img)
        print(f"{path}  strain {100 * e:.2f} %  grey {img.min()}..{img.max()}")
    text = README.format(last=len(STRAINS) - 1, cols=COLS, rows=ROWS,
                         strains=", ".join(f"{100 * e:g}" for e in STRAINS[1:]),
                         shift=SHIFT_PER_STRAIN * STRAINS[-1], noise=NOISE, px=PIXEL_SIZE_MM,
                         wmm=COLS * PIXEL_SIZE_MM, hmm=ROWS * PIXEL_SIZE_MM)
    (out / "README.md").write_text(text, encoding="utf-8")
    size = sum(p.stat().st_size for p in out.iterdir() if p.is_file())
    print(f"wrote {len(STRAINS)} images and README.md to {out} ({size / 1e6:.2f} MB) in "
          f"{time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
