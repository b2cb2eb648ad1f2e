"""Pinhole camera with OpenCV's lens-distortion model: projection, rays and undistortion.

A camera maps a point ``P`` given in the world frame (mm) to its own frame by
``Pc = R P + t`` and projects it to normalised coordinates ``(x, y) = (Pc_x / Pc_z, Pc_y / Pc_z)``.
The lens bends them to distorted normalised coordinates (Brown-Conrady model as used by OpenCV,
coefficients ``k1, k2, p1, p2, k3``)::

    r2 = x^2 + y^2,   s = 1 + k1 r2 + k2 r2^2 + k3 r2^3
    xd = x s + 2 p1 x y + p2 (r2 + 2 x^2)
    yd = y s + p1 (r2 + 2 y^2) + 2 p2 x y

and the pixel is ``(fx xd + cx, fy yd + cy)``. Pixel coordinates follow the project convention
(``x`` column, ``y`` row, origin at the centre of the top-left pixel), which is OpenCV's too.

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

__all__ = ["Camera", "distort", "undistort_normalised", "rotation_matrix"]

_NEWTON_TOL = 1e-14
_NEWTON_ITER = 50


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


def _coeffs(dist):
    d = np.zeros(5)
    dist = np.asarray(dist, dtype=np.float64).ravel()
    if dist.size not in (0, 4, 5) or not np.all(np.isfinite(dist)):
        raise InputError("distortion must hold 4 or 5 finite numbers (k1, k2, p1, p2[, k3]); "
                         f"got {dist.size}")
    d[:dist.size] = dist
    return d


def distort(x, y, dist):
    """Distorted normalised coordinates of ideal ones (OpenCV's model, module docstring).

    Parameters
    ----------
    x, y : ndarray
        Ideal normalised coordinates.
    dist : array_like
        ``(k1, k2, p1, p2[, k3])``.

    Returns
    -------
    xd, yd : ndarray
    """
    k1, k2, p1, p2, k3 = _coeffs(dist)
    r2 = x * x + y * y
    s = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
    xd = x * s + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
    yd = y * s + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
    return xd, yd


def undistort_normalised(xd, yd, dist):
    """Invert :func:`distort` by Newton's method with the analytic Jacobian.

    Parameters
    ----------
    xd, yd : ndarray
        Distorted normalised coordinates.
    dist : array_like
        ``(k1, k2, p1, p2[, k3])``.

    Returns
    -------
    x, y : ndarray
        Ideal normalised coordinates with ``distort(x, y) = (xd, yd)`` to 1e-14.

    Raises
    ------
    InputError
        Where the model folds (the Jacobian vanishes) or Newton's method does not converge.
    """
    k1, k2, p1, p2, k3 = _coeffs(dist)
    xd = np.asarray(xd, dtype=np.float64)
    yd = np.asarray(yd, dtype=np.float64)
    x = xd.copy()
    y = yd.copy()
    for _ in range(_NEWTON_ITER):
        r2 = x * x + y * y
        s = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
        ds = k1 + r2 * (2 * k2 + 3 * k3 * r2)            # d s / d r2
        fx = x * s + 2 * p1 * x * y + p2 * (r2 + 2 * x * x) - xd
        fy = y * s + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y - yd
        a = s + 2 * x * x * ds + 2 * p1 * y + 6 * p2 * x
        b = 2 * x * y * ds + 2 * p1 * x + 2 * p2 * y
        c = 2 * x * y * ds + 2 * p1 * x + 2 * p2 * y
        d = s + 2 * y * y * ds + 6 * p1 * y + 2 * p2 * x
        det = a * d - b * c
        if np.any(det <= 0):
            raise InputError("the distortion model folds over at some of these points; "
                             "check the distortion coefficients or keep to the image")
        dx = (d * fx - b * fy) / det
        dy = (a * fy - c * fx) / det
        x -= dx
        y -= dy
        if np.all(np.abs(dx) + np.abs(dy) < _NEWTON_TOL):
            return x, y
    raise InputError("undistortion did not converge; the distortion coefficients are too "
                     "strong for these points")


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
        object.__setattr__(self, "distortion", _coeffs(self.distortion))
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
        """Ideal (undistorted) normalised coordinates of pixel positions.

        Parameters
        ----------
        px, py : ndarray
            Column and row, pixels.

        Returns
        -------
        x, y : ndarray
        """
        K = self.matrix
        yd = (np.asarray(py, dtype=np.float64) - K[1, 2]) / K[1, 1]
        xd = (np.asarray(px, dtype=np.float64) - K[0, 2] - K[0, 1] * yd) / K[0, 0]
        return undistort_normalised(xd, yd, self.distortion)

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
