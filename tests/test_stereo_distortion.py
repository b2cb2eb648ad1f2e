"""Lens-distortion correction of one camera (dic.stereo.undistort): the inverse of the lens model
against OpenCV, and on exactly rendered images.

``undistort_points`` is checked against ``cv2.undistortPoints`` (reference library, same camera
matrix and coefficients k1 k2 p1 p2 k3) on a grid reaching the image corners, and by a round
trip through the forward model (distort, then undistort). A flat speckled plate faces a camera
with strong barrel distortion and slides rigidly in its own plane. Through an ideal pinhole
camera the image would move by the same amount everywhere (zero strain; common practice, no
source); the lens adds false strain toward the corners. Oracles: OpenCV's ``undistortPoints``
and ``projectPoints``, the camera the images were rendered with, and zero strain of a rigid
motion.
"""

from __future__ import annotations

import numpy as np
import pytest

cv2 = pytest.importorskip("cv2")

import dic  # noqa: E402
from dic.errors import InputError  # noqa: E402
from dic.stereo import calibrate, undistort_displacements, undistort_points  # noqa: E402
from dic.stereo.camera import Camera  # noqa: E402
from dic.stereo.undistort import distort  # noqa: E402
from dic.stereo.render import (Plate, render_chessboard, render_surface,  # noqa: E402
                               surface_speckle, target_poses)

K = np.array([[700.0, 0, 203.0], [0, 702.0, 151.0], [0, 0, 1]])
# barrel distortion: about -3 % at the image corners
CAM = Camera(K, [-0.25, 0.08, 0.0, 0.0, 0.0], (400, 300))
IC, SQ = (9, 6), 10.0


def local_strain(X, Y, U, V, w=7):
    """Small strain from least-squares planes of U and V over w x w grid neighbourhoods."""
    ny, nx = X.shape
    h = w // 2
    out = []
    for i in range(h, ny - h):
        for j in range(h, nx - h):
            sl = (slice(i - h, i + h + 1), slice(j - h, j + h + 1))
            x, y, u, v = (a[sl].ravel() for a in (X, Y, U, V))
            if not np.all(np.isfinite(u) & np.isfinite(v)):
                continue
            A = np.column_stack([np.ones(x.size), x, y])
            cu = np.linalg.lstsq(A, u, rcond=None)[0]
            cv = np.linalg.lstsq(A, v, rcond=None)[0]
            out.append([cu[1], cv[2], 0.5 * (cu[2] + cv[1])])
    return np.array(out)


def test_undistort_points_inverts_the_camera_model():
    rng = np.random.default_rng(0)
    P = np.column_stack([rng.uniform(-80, 80, 300), rng.uniform(-60, 60, 300),
                         np.full(300, 300.0)])
    seen = CAM.project(P)
    ideal = Camera(K, np.zeros(5), CAM.size).project(P)
    xu, yu = undistort_points(seen[:, 0], seen[:, 1], CAM)
    # exact pinhole projection of the same points (the camera they were projected with)
    np.testing.assert_allclose(np.column_stack([xu, yu]), ideal, atol=1e-6)
    xn, yn = undistort_points(np.array([np.nan, 10.0]), np.array([1.0, 20.0]), CAM)
    assert np.isnan(xn[0]) and np.isfinite(xn[1])
    with pytest.raises(InputError, match="matrix"):
        undistort_points(xu, yu, object())


# a wide lens (f = 400 px on 400 x 300 px: corners at normalised radius 0.63) with every
# coefficient of the model: barrel and pincushion, tangential terms, k3
LENSES = [
    ("barrel", [-0.25, 0.08, 0.0, 0.0, 0.0]),
    ("barrel, tangential, k3", [-0.3, 0.12, 1.2e-3, -2.0e-3, -0.02]),
    ("pincushion, tangential, k3", [0.15, -0.05, -1.5e-3, 1.0e-3, 0.01]),
]
KW = np.array([[400.0, 0.0, 203.5], [0.0, 404.0, 148.0], [0.0, 0.0, 1.0]])


def _image_grid(size=(400, 300), n=(41, 31)):
    """Points over the whole image, its four corner pixels and border included."""
    gx, gy = np.meshgrid(np.linspace(0, size[0] - 1, n[0]), np.linspace(0, size[1] - 1, n[1]))
    return gx.ravel(), gy.ravel()


@pytest.mark.parametrize("name,dist", LENSES, ids=[n for n, _ in LENSES])
def test_undistort_points_agrees_with_opencv(name, dist):
    x, y = _image_grid()
    d = np.array(dist)
    cam = Camera(KW, d, (400, 300))
    pts = np.stack([x, y], -1).reshape(-1, 1, 2)
    # OpenCV's fixed-point inverse, run to convergence (its default of five iterations leaves
    # errors of up to tenths of a pixel in these corners): stop at 1e-14 px or 1000 iterations
    crit = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 1000, 1e-14)
    px = cv2.undistortPoints(pts, KW, d, None, None, KW, crit).reshape(-1, 2)
    nm = cv2.undistortPoints(pts, KW, d, None, None, None, crit).reshape(-1, 2)
    assert np.abs(px - np.column_stack([x, y])).max() > 1.0     # the corners do move
    xu, yu = undistort_points(x, y, cam)
    xn, yn = undistort_points(x, y, cam, normalised=True)
    # reference library: cv2.undistortPoints, pixel output (P = camera matrix). Both iterate to
    # the same root to ~1e-12 px (measured: 1.1e-13 px apart); 1e-9 px leaves room for rounding
    # and is a thousand times below any matching error
    np.testing.assert_allclose(np.column_stack([xu, yu]), px, rtol=0, atol=1e-9)
    # reference library: cv2.undistortPoints, normalised output (P = None); 1e-9 px / f
    np.testing.assert_allclose(np.column_stack([xn, yn]), nm, rtol=0, atol=1e-9 / 400)


@pytest.mark.parametrize("name,dist", LENSES, ids=[n for n, _ in LENSES])
def test_undistort_points_round_trip(name, dist):
    # ideal normalised points over the ideal view (beyond the image's corners for barrel lenses)
    gx, gy = np.meshgrid(np.linspace(-0.6, 0.6, 37), np.linspace(-0.45, 0.45, 29))
    x, y = gx.ravel(), gy.ravel()
    K = KW.copy()
    K[0, 1] = 0.7                                   # a skewed matrix: the project's model has it
    cam = Camera(K, dist, (400, 300))
    P = np.column_stack([x, y, np.ones_like(x)]) * 250.0
    seen = cam.project(P)
    # the projection is OpenCV's forward model (cv2.projectPoints on the unskewed matrix; the
    # skew term fx xd + skew yd + cx is added by hand, OpenCV's matrix convention)
    ref, _ = cv2.projectPoints(P, np.zeros(3), np.zeros(3), KW, np.array(dist))
    xd, yd = distort(x, y, dist)
    np.testing.assert_allclose(seen[:, 0], ref[:, 0, 0] + 0.7 * yd, rtol=0, atol=1e-9)
    np.testing.assert_allclose(seen[:, 1], ref[:, 0, 1], rtol=0, atol=1e-9)
    # distort then undistort gives the ideal point back (round trip through the project's own
    # forward model; Newton stops at steps below 1e-14, about 1e-11 px)
    xn, yn = undistort_points(seen[:, 0], seen[:, 1], cam, normalised=True)
    np.testing.assert_allclose(np.column_stack([xn, yn]), np.column_stack([x, y]), rtol=0,
                               atol=1e-12)
    xu, yu = undistort_points(seen[:, 0], seen[:, 1], cam)
    ideal = Camera(K, np.zeros(5), cam.size).project(P)
    np.testing.assert_allclose(np.column_stack([xu, yu]), ideal, rtol=0, atol=1e-9)
    # the camera's rays use the same inverse: the ray of a projected point passes through it
    o, dvec = cam.rays(seen[:, 0], seen[:, 1])
    np.testing.assert_allclose(o + 250.0 * dvec / dvec[:, 2:], P, rtol=0, atol=1e-9)


def test_undistort_points_refuses_a_folding_model():
    # k1 = -2: the distorted radius r (1 - 2 r^2) peaks at 0.27 (calculus), so the image
    # corners (distorted radius 0.36 with f = 700 px) have no ideal point
    cam = Camera(K, [-2.0, 0.0, 0.0, 0.0, 0.0], (400, 300))
    with pytest.raises(InputError, match="distortion"):
        undistort_points(np.array([0.0, 203.0]), np.array([0.0, 151.0]), cam)
    with pytest.raises(InputError, match="same shape"):
        undistort_points(np.zeros(3), np.zeros(2), CAM)


def test_distortion_correction_removes_false_strain():
    sp = surface_speckle(90.0, blob_mm=1.1, pitch=0.2, seed=3)
    ref = render_surface(CAM, Plate([0.0, 0.0, 300.0]), sp)
    moved = render_surface(CAM, Plate([4.0, 3.0, 300.0]), sp)     # about 9 px and 7 px
    f = dic.correlate(ref, moved, subset=21, step=10)
    assert np.isfinite(f.u).mean() > 0.8
    X, Y = f.x.astype(float), f.y.astype(float)

    poses = target_poses(12, IC, SQ, lateral=35.0, seed=1)
    cal = calibrate([render_chessboard(CAM, p, IC, SQ) for p in poses],
                    inner_corners=IC, square_mm=SQ)
    assert cal.rejected == () and cal.rms <= 0.1

    raw = local_strain(X, Y, f.u, f.v)
    fixed = local_strain(*undistort_displacements(X, Y, f.u, f.v, cal.cameras[0]))
    exact = local_strain(*undistort_displacements(X, Y, f.u, f.v, CAM))
    # the reference grid undistorted once and passed in (as a sequence does) changes nothing
    # (the same computation in another order; common practice, no source)
    ref_grid = undistort_points(X, Y, cal.cameras[0])
    again = undistort_displacements(X, Y, f.u, f.v, cal.cameras[0], reference=ref_grid)
    for a, b in zip(again, undistort_displacements(X, Y, f.u, f.v, cal.cameras[0])):
        np.testing.assert_array_equal(a, b)
    for name, e in (("no correction", raw), ("calibrated", fixed), ("true lens", exact)):
        print(f"{name:14s} false strain rms {np.sqrt(np.mean(e**2)) * 1e6:8.1f} µε, "
              f"95 % {np.percentile(np.abs(e), 95) * 1e6:8.1f} µε, "
              f"max {np.abs(e).max() * 1e6:8.1f}")
    # bar of the issue: false strain of a rigid in-plane motion below 50 µε with the
    # calibration (zero strain of a rigid motion: common practice, no source)
    assert np.sqrt(np.mean(fixed**2)) < 50e-6
    assert np.percentile(np.abs(fixed), 95) < 50e-6
    # and clearly larger without it: more than ten times the bar
    assert np.sqrt(np.mean(raw**2)) > 500e-6
    # the true lens model leaves only the matching error
    assert np.sqrt(np.mean(exact**2)) < 10e-6
