"""The two-camera rigs the stereo tests render with (helper module, not a test).

Two 400 x 300 px cameras with mild barrel distortion, 100 mm apart, both aimed at a point
300 mm in front of the left camera (18.4 degrees between them; a second, wide rig: 33 degrees);
chessboard target of 9 x 6 inner corners, 10 mm squares.
"""

from __future__ import annotations

import numpy as np

from dic.stereo.camera import Camera, rotation_matrix
from dic.stereo.render import render_chessboard, target_poses

IC = (9, 6)
SQ = 10.0
KL = np.array([[700.0, 0, 205.0], [0, 703.0, 148.0], [0, 0, 1]])
KR = np.array([[690.0, 0, 196.0], [0, 694.0, 153.0], [0, 0, 1]])
DL = [-0.12, 0.05, 0.001, -0.0005, 0.0]
DR = [-0.08, 0.03, -0.0007, 0.0004, 0.0]
BASELINE = 100.0


def rig():
    """Left camera at the world origin; right camera 100 mm to its right, aimed at 300 mm."""
    phi = np.arctan2(-BASELINE, 300.0)
    R = rotation_matrix([0.0, -phi, 0.0])
    left = Camera(KL, DL, (400, 300))
    right = Camera(KR, DR, (400, 300), R, -R @ np.array([BASELINE, 0.0, 0.0]))
    return left, right


def target_views(n=12, seed=1, cameras=None):
    """Poses and rendered left and right images of the target, over the common view of
    ``cameras`` (left, right; default :func:`rig`)."""
    left, right = rig() if cameras is None else cameras
    ps = target_poses(n, IC, SQ, lateral=25.0, seed=seed)
    return (ps, [render_chessboard(left, p, IC, SQ) for p in ps],
            [render_chessboard(right, p, IC, SQ) for p in ps])


#: the second rig's angle between the cameras, degrees
WIDE_ANGLE = 33.0


def wide_rig():
    """Left camera at the world origin; right camera turned 33 degrees toward it, aimed at the
    point 300 mm in front of the left camera (baseline 300 tan 33 = 195 mm)."""
    a = np.radians(WIDE_ANGLE)
    R = rotation_matrix([0.0, a, 0.0])
    left = Camera(KL, DL, (400, 300))
    right = Camera(KR, DR, (400, 300), R, -R @ np.array([300.0 * np.tan(a), 0.0, 0.0]))
    return left, right


def wide_target_views(n=12, seed=1):
    """Poses and rendered left and right images of the target for :func:`wide_rig`."""
    return target_views(n, seed, wide_rig())


def kabsch(P, Q):
    """P moved by the best rigid motion onto Q (least squares; Kabsch 1976, from memory)."""
    cp, cq = P.mean(0), Q.mean(0)
    U, _, Vt = np.linalg.svd((P - cp).T @ (Q - cq))
    D = np.diag([1.0, 1.0, np.sign(np.linalg.det(Vt.T @ U.T))])
    return (P - cp) @ (Vt.T @ D @ U.T).T + cq
