"""Write the two-camera demo: a speckled sheet stretched while it creeps toward the cameras.

The scenario is invented and every number in it is synthetic. A large speckle-painted sheet of
polycarbonate, 300 mm in front of two 8-bit cameras (400 x 300 px, 90 mm apart, both aimed at
the sheet's centre, mild barrel distortion), is pulled along its horizontal axis in three
stages. Its clamps slip, so the sheet also moves toward the cameras (0.7, 1.4, 2.0 mm) and
turns a little about its vertical axis (0.2 degrees per stage). One camera alone reads the
approach as a false strain of about dZ/Z (0.7 % at 2 mm); the two cameras do not.

In its own axes the sheet's deformation gradient is ``diag(1 + e, 1 - 0.35 e)`` with
``e = 0, 0.5, 1.0, 1.5 %`` (Green-Lagrange strain ``0.5 (F^T F - I)``).

Written into ``sample_images/stereo/``:

- ``target/left_NN.png``, ``target/right_NN.png``: twelve poses of a chessboard target (9 x 6
  inner corners, 10 mm squares) photographed by both cameras at once;
- ``cameras.toml``: their calibration (:func:`dic.calibrate`, the same as
  ``dic calibrate "target/left_*.png" --right-images "target/right_*.png" --inner-corners 9x6
  --square 10 --out cameras.toml``);
- ``left/sheet_N.png``, ``right/sheet_N.png``: the sheet in its four states;
- ``analysis.toml``: the analysis (``dic run --config sample_images/stereo/analysis.toml --out
  stereo_results``), ``README.md``: this description and the true values.

Images are rendered exactly (:mod:`dic.stereo.render`: every pixel's ray meets the sheet, the
hit is mapped back to the reference sheet where the analytic speckle is evaluated), plus
Gaussian noise of 1 grey level (fixed seeds), rounded to 8 bits; the target photographs are
anti-aliased (supersampled) and rounded to 8 bits without added noise, so that they stay
small. Deterministic; about half a minute.

Run: python scripts/make_stereo_sample.py [--out sample_images/stereo]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

SIZE = (400, 300)
KL = np.array([[720.0, 0.0, 198.0], [0.0, 722.0, 152.0], [0.0, 0.0, 1.0]])
KR = np.array([[712.0, 0.0, 204.0], [0.0, 713.0, 147.0], [0.0, 0.0, 1.0]])
DL = [-0.10, 0.04, 0.0008, -0.0004, 0.0]
DR = [-0.09, 0.035, -0.0005, 0.0003, 0.0]
BASELINE_MM = 90.0
DISTANCE_MM = 300.0
INNER_CORNERS, SQUARE_MM = (9, 6), 10.0
N_TARGETS = 12
STRETCH = (0.0, 0.005, 0.010, 0.015)
APPROACH_MM = (0.0, 0.7, 1.4, 2.0)
TURN_DEG = (0.0, 0.2, 0.4, 0.6)
POISSON = 0.35
NOISE = 1.0


def cameras():
    """Left camera at the origin; right camera 90 mm to its right, aimed at the sheet centre."""
    from dic.stereo.camera import Camera, rotation_matrix

    phi = np.arctan2(-BASELINE_MM, DISTANCE_MM)
    R = rotation_matrix([0.0, -phi, 0.0])
    left = Camera(KL, DL, SIZE)
    right = Camera(KR, DR, SIZE, R, -R @ np.array([BASELINE_MM, 0.0, 0.0]))
    return left, right


def states():
    """The sheet in its four states (dic.stereo.render.Plate)."""
    from dic.stereo.camera import rotation_matrix
    from dic.stereo.render import Plate

    R0 = rotation_matrix([0.04, -0.12, 0.0])
    out = []
    for e, dz, turn in zip(STRETCH, APPROACH_MM, TURN_DEG):
        F = np.diag([1.0 + e, 1.0 - POISSON * e])
        R = rotation_matrix([0.0, np.radians(turn), 0.0]) @ R0
        out.append(Plate([0.0, 0.0, DISTANCE_MM - dz], R, F))
    return out


def _u8(img, seed):
    """8-bit image, with Gaussian noise of NOISE grey levels unless ``seed`` is None."""
    if seed is not None:
        img = img + np.random.default_rng(seed).normal(0.0, NOISE, img.shape)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


def _write_png(path, img):
    import cv2

    if not cv2.imwrite(str(path), img, [cv2.IMWRITE_PNG_COMPRESSION, 9]):
        raise OSError(f"cannot write {path}")


ANALYSIS = """# Two-camera demo (scripts/make_stereo_sample.py): run from the repository with
#   dic run --config sample_images/stereo/analysis.toml --out stereo_results
images = "left/*.png"

[matching]
subset = 25
step = 10

[strain]
window = 9
measure = "green-lagrange"

[stereo]
right_images = "right/*.png"
calibration = "cameras.toml"
"""


def _readme():
    rows = "\n".join(
        f"| sheet_{k}.png | {100 * e:.1f} % | {0.5 * ((1 + e) ** 2 - 1) * 1e6:.0f} | "
        f"{0.5 * ((1 - POISSON * e) ** 2 - 1) * 1e6:.0f} | {dz:.1f} | {t:.1f} |"
        for k, (e, dz, t) in enumerate(zip(STRETCH, APPROACH_MM, TURN_DEG)))
    doc = __doc__.split("\n\nRun:")[0]
    return (f"# Two-camera sample\n\n{doc}\n\n"
            "## True values\n\n"
            "| image | stretch | Exx (µε) | Eyy (µε) | toward the cameras (mm) | turn (deg) |\n"
            "|---|---|---|---|---|---|\n" + rows + "\n\n"
            f"Cameras: focal lengths {KL[0, 0]:g} / {KR[0, 0]:g} px, baseline "
            f"{BASELINE_MM:g} mm, angle {np.degrees(np.arctan2(BASELINE_MM, DISTANCE_MM)):.2f} "
            "degrees. Strain axes: x along the sheet's stretched axis (close to image columns), "
            "tensor shear.\n")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path,
                    default=Path(__file__).resolve().parent.parent / "sample_images" / "stereo")
    ap.add_argument("--quiet", action="store_true")
    args = ap.parse_args(argv)

    from dic.stereo import calibrate, save_calibration
    from dic.stereo.render import (render_chessboard, render_surface, surface_speckle,
                                   target_poses)

    out = args.out
    for sub in ("target", "left", "right"):
        (out / sub).mkdir(parents=True, exist_ok=True)
    left, right = cameras()
    poses = target_poses(N_TARGETS, INNER_CORNERS, SQUARE_MM, distance=DISTANCE_MM,
                         lateral=25.0, seed=11)
    names_l, names_r = [], []
    for k, pose in enumerate(poses):
        for cam, side, names in ((left, "left", names_l), (right, "right", names_r)):
            # no added noise on the targets: flat squares compress to a few kB per image
            img = _u8(render_chessboard(cam, pose, INNER_CORNERS, SQUARE_MM), None)
            p = out / "target" / f"{side}_{k:02d}.png"
            _write_png(p, img)
            names.append(p)
    cal = calibrate(names_l, names_r, inner_corners=INNER_CORNERS, square_mm=SQUARE_MM,
                    names=[f"{a.name} + {b.name}" for a, b in zip(names_l, names_r)])
    save_calibration(cal, out / "cameras.toml")
    speckle = surface_speckle(100.0, blob_mm=1.0, pitch=0.2, seed=21)
    for k, plate in enumerate(states()):
        for cam, side in ((left, "left"), (right, "right")):
            img = _u8(render_surface(cam, plate, speckle), 2000 + 2 * k + (side == "right"))
            _write_png(out / side / f"sheet_{k}.png", img)
    (out / "analysis.toml").write_text(ANALYSIS, encoding="utf-8")
    (out / "README.md").write_text(_readme(), encoding="utf-8")
    if not args.quiet:
        size = sum(p.stat().st_size for p in out.rglob("*") if p.is_file())
        print(f"wrote {out} ({size / 1e6:.2f} MB); calibration {cal.rms:.3f} px RMS, baseline "
              f"{cal.baseline:.2f} mm")
    return 0


if __name__ == "__main__":
    sys.exit(main())
