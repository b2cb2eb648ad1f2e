"""Benchmark: the measurement-quality bars of dic.metrology, printed with their figures.

1. Noise predicted from one image of the pattern (``pattern_quality``, noise estimated from that
   image) against the displacement noise measured on pairs of synthetic images with known noise
   (``dic.images.synth``, subpixel shift, independent noise draws). Bar: within 20 %.
2. Per-point predicted sigma (``DisplacementField.std_u``) against the measured noise floor of
   a stack of static images (``noise_floor``).
3. Self-check spatial resolution against the 10 % attenuation period of the Savitzky-Golay
   transfer function (Schreier & Sutton, Exp. Mech. 42 (2002) 303). Bar: within 15 %.
4. Wall time of ``self_check`` and ``advise`` on the sample coupon image.

Run: python scripts/bench_selfcheck.py [--quick]
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
PATTERNS = [(1.8, 180.0, 2.0, None), (2.5, 180.0, 2.0, None), (2.5, 150.0, 4.0, 8),
            (3.0, 60.0, 2.0, 8), (4.0, 180.0, 2.0, None)]
SETTINGS = [(21, 10, 9, "affine"), (21, 4, 9, "affine"), (15, 3, 11, "affine"),
            (31, 6, 5, "affine"), (41, 5, 7, "quadratic")]


def predicted_vs_measured(patterns, pairs):
    import dic
    from dic.images import synth
    from dic.metrology import pattern_quality

    print("1. predicted displacement noise (one image) vs measured (pairs), subset 21 px, "
          "bar 20 %")
    print(f"{'radius':>6} {'contr.':>6} {'sigma':>5} {'bits':>4} {'pred u':>8} {'meas u':>8} "
          f"{'ratio':>6} {'pred v':>8} {'meas v':>8} {'ratio':>6}  verdict")
    shape, shift = (200, 200), (0.3, -0.2)
    for radius, contrast, sigma, bits in patterns:
        pat = synth.make_speckle(shape, radius=radius, contrast=contrast, seed=31)
        q = pattern_quality(synth.render(pat, shape, noise=sigma, bits=bits, seed=1))
        pu, pv = q.predicted_noise[21]
        du, dv = [], []
        for k in range(pairs):
            a = synth.render(pat, shape, noise=sigma, bits=bits, seed=10 + k)
            b = synth.render(pat, shape, synth.translation(*shift), noise=sigma, bits=bits,
                             seed=20 + k)
            f = dic.correlate(a, b, subset=21, step=10)
            du.append(f.u[f.valid] - shift[0])
            dv.append(f.v[f.valid] - shift[1])
        mu = math.sqrt(np.mean(np.concatenate(du) ** 2))
        mv = math.sqrt(np.mean(np.concatenate(dv) ** 2))
        print(f"{radius:6.1f} {contrast:6.0f} {sigma:5.1f} {bits or '-':>4} {pu:8.5f} {mu:8.5f} "
              f"{pu / mu:6.3f} {pv:8.5f} {mv:8.5f} {pv / mv:6.3f}  {q.verdict}")


def sigma_vs_floor(n_images):
    from dic.images import synth
    from dic.metrology import noise_floor

    shape = (180, 180)
    pat = synth.make_speckle(shape, radius=2.5, seed=21)
    clean = synth.render(pat, shape)
    stack = [clean + np.random.default_rng(100 + k).normal(0.0, 2.0, shape)
             for k in range(n_images)]
    nf = noise_floor(stack, subset=21, step=8, window=7)
    print(f"\n2. per-point sigma vs noise floor ({n_images} static images, sigma 2):")
    for k, c in enumerate("uv"):
        print(f"   {c}: measured spatial {nf.spatial[c]:.5f} px, predicted {nf.predicted[k]:.5f}"
              f" px (ratio {nf.predicted[k] / nf.spatial[c]:.3f}); temporal "
              f"{nf.temporal_rms[c]:.5f} px = predicted/sqrt(2) x "
              f"{nf.temporal_rms[c] * math.sqrt(2) / nf.predicted[k]:.3f}")


def resolution_vs_theory(settings):
    from dic.images import synth
    from dic.metrology import self_check

    shape = (240, 640)
    pat = synth.make_speckle(shape, radius=2.5, seed=17)
    img = synth.render(pat, shape, noise=2.0, seed=5)
    print("\n3. self-check spatial resolution vs Savitzky-Golay theory (bar 15 %)")
    print(f"{'subset':>6} {'step':>4} {'win':>3} {'shape':>9} {'VSG':>4} {'disp':>6} "
          f"{'theory':>6} {'ratio':>6} {'strain':>6} {'theory':>6} {'ratio':>6} {'s':>5}")
    for subset, step, window, sf in settings:
        t = time.perf_counter()
        r = self_check(img, subset=subset, step=step, window=window, shape_function=sf)
        t = time.perf_counter() - t
        print(f"{subset:6d} {step:4d} {window:3d} {sf:>9} {r.settings['vsg']:4d} "
              f"{r.resolution_u:6.1f} {r.theory_u:6.1f} {r.resolution_u / r.theory_u:6.3f} "
              f"{r.resolution_strain:6.1f} {r.theory_strain:6.1f} "
              f"{r.resolution_strain / r.theory_strain:6.3f} {t:5.1f}")


def coupon_times():
    import dic
    from dic.metrology import advise, self_check

    img = dic.read_image(ROOT / "sample_images" / "coupon_000.png")
    roi = (0, 45.4, 639, 193.6)
    t = time.perf_counter()
    r = self_check(img, roi=roi)
    t1 = time.perf_counter() - t
    t = time.perf_counter()
    a = advise(img, roi=roi, target_strain_noise=50)
    t2 = time.perf_counter() - t
    print(f"\n4. sample coupon: self_check {t1:.1f} s, advise ({len(a.candidates)} settings) "
          f"{t2:.1f} s")
    print(r.summary())
    print(a.summary())


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer patterns and settings")
    args = parser.parse_args(argv)
    predicted_vs_measured(PATTERNS[1:3] if args.quick else PATTERNS, 2 if args.quick else 4)
    sigma_vs_floor(4 if args.quick else 8)
    resolution_vs_theory(SETTINGS[:2] if args.quick else SETTINGS)
    coupon_times()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
