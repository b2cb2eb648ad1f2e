"""Lens-distortion correction of measured image points and displacements (one camera).

A displacement measured between two images of one camera is the difference of two distorted
image positions. Mapped through the inverse of the lens model, reference and deformed positions
become those an ideal pinhole camera with the same matrix would have seen; their difference is
the corrected displacement, free of the false strain the lens adds toward the image corners.

References
----------
.. [1] OpenCV documentation, ``cv2.undistortPoints`` (calib3d module).
.. [2] D. C. Brown, "Decentering distortion of lenses", Photogramm. Eng. 32 (1966) 444-462.
"""

from __future__ import annotations

import numpy as np

from dic.errors import InputError

__all__ = ["undistort_points", "undistort_displacements"]

_CRITERIA_ITER = 100
_CRITERIA_EPS = 1e-12


def _model(camera):
    K = np.asarray(getattr(camera, "matrix", None), dtype=np.float64)
    d = np.asarray(getattr(camera, "distortion", None), dtype=np.float64).ravel()
    if K.shape != (3, 3) or d.size not in (4, 5):
        raise InputError("camera must carry a 3x3 matrix and 4 or 5 distortion coefficients "
                         "(a CameraFit from dic.stereo.calibrate, or a Camera)")
    return K, d


def undistort_points(x, y, camera):
    """Ideal pinhole pixel positions of measured (distorted) pixel positions.

    Parameters
    ----------
    x, y : array_like
        Measured positions, column and row, pixels (same shape; NaN stays NaN).
    camera : CameraFit or Camera
        Anything with ``matrix`` (3x3) and ``distortion`` (k1, k2, p1, p2[, k3]).

    Returns
    -------
    xu, yu : ndarray
        Positions the same camera without lens distortion would show, pixels.

    References
    ----------
    .. [1] OpenCV, ``cv2.undistortPoints`` (iterated to convergence: a count and an epsilon
       criterion; the default of five fixed iterations leaves errors toward the corners).
    """
    import cv2

    K, d = _model(camera)
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.shape != y.shape:
        raise InputError(f"x and y must have the same shape; got {x.shape} and {y.shape}")
    xu = np.full(x.shape, np.nan)
    yu = np.full(x.shape, np.nan)
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.any():
        pts = np.stack([x[ok], y[ok]], -1).reshape(-1, 1, 2)
        crit = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, _CRITERIA_ITER, _CRITERIA_EPS)
        out = cv2.undistortPoints(pts, K, d, None, None, K, crit).reshape(-1, 2)
        xu[ok] = out[:, 0]
        yu[ok] = out[:, 1]
    return xu, yu


def undistort_displacements(x, y, u, v, camera):
    """Reference positions and displacements corrected for lens distortion.

    Parameters
    ----------
    x, y : array_like
        Reference positions of the points, pixels.
    u, v : array_like
        Measured displacements, pixels (NaN where not measured).
    camera : CameraFit or Camera

    Returns
    -------
    xu, yu, uu, vu : ndarray
        Undistorted reference positions and the displacements between undistorted positions.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    xu, yu = undistort_points(x, y, camera)
    xd, yd = undistort_points(x + np.asarray(u, float), y + np.asarray(v, float), camera)
    return xu, yu, xd - xu, yd - yu
