"""Pinhole camera with OpenCV's lens-distortion model: projection and rays.

A camera maps a point ``P`` given in the world frame (mm) to its own frame by
``Pc = R P + t`` and projects it to normalised coordinates ``(x, y) = (Pc_x / Pc_z, Pc_y / Pc_z)``.
The lens bends them to distorted normalised coordinates (Brown-Conrady model as used by OpenCV,
coefficients ``k1, k2, p1, p2, k3``; :func:`dic.stereo.undistort.distort`), and the pixel is
``(fx xd + skew yd + cx, fy yd + cy)``. A pixel's ray inverts both
(:func:`dic.stereo.undistort.undistort_points`). Pixel coordinates follow the project
convention (``x`` column, ``y`` row, origin at the centre of the top-left pixel), which is
OpenCV's too.

References
----------
.. [1] D. C. Brown, "Decentering distortion of lenses", Photogramm. Eng. 32 (1966) 444-462.
.. [2] Z. Zhang, "A flexible new technique for camera calibration", IEEE Trans. Pattern Anal.
   Mach. Intell. 22 (2000) 1330-1334.
.. [3] OpenCV documentation, "Camera Calibration and 3D Reconstruction" (calib3d module).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from dic.errors import InputError
from dic.stereo.undistort import distort, distortion_coefficients, undistort_points

__all__ = ["Camera", "rotation_matrix"]


def rotation_matrix(rvec):
    """Rotation matrix of a rotation vector (axis times angle in radians, Rodrigues' formula).

    Parameters
    ----------
    rvec : array_like, shape (3,)

    Returns
    -------
    ndarray, shape (3, 3)
    """
    r = np.asarray(rvec, dtype=np.float64).reshape(3)
    th = float(np.linalg.norm(r))
    if th == 0.0:
        return np.eye(3)
    k = r / th
    K = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + np.sin(th) * K + (1 - np.cos(th)) * K @ K


@dataclass(frozen=True)
class Camera:
    """A pinhole camera with lens distortion, placed in a world frame (mm).

    Attributes
    ----------
    matrix : ndarray, shape (3, 3)
        Intrinsic matrix ``[[fx, skew, cx], [0, fy, cy], [0, 0, 1]]`` in pixels.
    distortion : ndarray, shape (5,)
        ``(k1, k2, p1, p2, k3)``, OpenCV's order.
    size : (int, int)
        Image ``(width, height)`` in pixels.
    rotation : ndarray, shape (3, 3)
        ``R`` of ``Pc = R P + t`` (world to camera).
    translation : ndarray, shape (3,)
        ``t`` of ``Pc = R P + t``, mm.
    """

    matrix: np.ndarray
    distortion: np.ndarray = field(default_factory=lambda: np.zeros(5))
    size: tuple = (400, 300)
    rotation: np.ndarray = field(default_factory=lambda: np.eye(3))
    translation: np.ndarray = field(default_factory=lambda: np.zeros(3))

    def __post_init__(self):
        K = np.asarray(self.matrix, dtype=np.float64)
        if K.shape != (3, 3) or not np.all(np.isfinite(K)) or K[0, 0] <= 0 or K[1, 1] <= 0:
            raise InputError("camera matrix must be a finite 3x3 [[fx, 0, cx], [0, fy, cy], "
                             "[0, 0, 1]] with fx, fy > 0")
        R = np.asarray(self.rotation, dtype=np.float64)
        if R.shape != (3, 3) or not np.allclose(R @ R.T, np.eye(3), atol=1e-9) \
                or np.linalg.det(R) < 0:
            raise InputError("camera rotation must be a 3x3 rotation matrix")
        t = np.asarray(self.translation, dtype=np.float64).reshape(3)
        object.__setattr__(self, "matrix", K)
        object.__setattr__(self, "distortion", distortion_coefficients(self.distortion))
        object.__setattr__(self, "rotation", R)
        object.__setattr__(self, "translation", t)
        object.__setattr__(self, "size", (int(self.size[0]), int(self.size[1])))

    @property
    def centre(self):
        """Optical centre in the world frame, mm."""
        return -self.rotation.T @ self.translation

    def project(self, points):
        """Pixel coordinates of world points.

        Parameters
        ----------
        points : array_like, shape (..., 3)

        Returns
        -------
        ndarray, shape (..., 2)
            ``(x, y)`` = (column, row).
        """
        P = np.asarray(points, dtype=np.float64)
        Pc = P @ self.rotation.T + self.translation
        x = Pc[..., 0] / Pc[..., 2]
        y = Pc[..., 1] / Pc[..., 2]
        xd, yd = distort(x, y, self.distortion)
        K = self.matrix
        return np.stack([K[0, 0] * xd + K[0, 1] * yd + K[0, 2], K[1, 1] * yd + K[1, 2]], -1)

    def normalised(self, px, py):
        """Ideal (undistorted) normalised coordinates of pixel positions
        (:func:`dic.stereo.undistort.undistort_points`).

        Parameters
        ----------
        px, py : ndarray
            Column and row, pixels (NaN stays NaN).

        Returns
        -------
        x, y : ndarray
        """
        return undistort_points(px, py, self, normalised=True)

    def rays(self, px, py):
        """World-frame rays through pixel positions.

        Parameters
        ----------
        px, py : ndarray
            Column and row, pixels (same shape).

        Returns
        -------
        origin : ndarray, shape (3,)
            The optical centre.
        direction : ndarray, shape (..., 3)
            Unit direction of the ray through each pixel position.
        """
        x, y = self.normalised(px, py)
        d = np.stack([x, y, np.ones_like(x)], -1) @ self.rotation    # R^T d_cam, row-wise
        d /= np.linalg.norm(d, axis=-1, keepdims=True)
        return self.centre, d

    def moved(self, rotation, translation):
        """The same camera at another pose (``Pc = rotation P + translation``)."""
        return Camera(self.matrix, self.distortion, self.size, rotation, translation)
