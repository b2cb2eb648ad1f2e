"""Lens distortion of one camera: the Brown-Conrady model and its inverse, for points and
displacements.

The model is OpenCV's (coefficients ``k1, k2, p1, p2, k3``), acting on normalised coordinates
``(x, y)`` of an ideal pinhole camera::

    r2 = x^2 + y^2,   s = 1 + k1 r2 + k2 r2^2 + k3 r2^3
    xd = x s + 2 p1 x y + p2 (r2 + 2 x^2)
    yd = y s + p1 (r2 + 2 y^2) + 2 p2 x y

:func:`distort` applies it; :func:`undistort_points` inverts it by Newton's method and is the
one place in the project where lens distortion is removed (the camera's rays, triangulation,
the specimen plane, the keypoint epipolar check and the one-camera lens correction all call it).

A displacement measured between two images of one camera is the difference of two distorted
image positions. Mapped through the inverse of the lens model, reference and deformed positions
become those an ideal pinhole camera with the same matrix would have seen; their difference is
the corrected displacement (:func:`undistort_displacements`), free of the false strain the lens
adds toward the image corners.

References
----------
.. [1] D. C. Brown, "Decentering distortion of lenses", Photogramm. Eng. 32 (1966) 444-462.
.. [2] OpenCV documentation, "Camera Calibration and 3D Reconstruction" (calib3d module):
   the distortion model and ``cv2.undistortPoints``.
"""

from __future__ import annotations

import numpy as np

from dic.errors import InputError

__all__ = ["distort", "distortion_coefficients", "normalised_coordinates", "undistort_points",
           "undistort_displacements"]

_NEWTON_TOL = 1e-14
_NEWTON_ITER = 50


def distortion_coefficients(dist):
    """The five coefficients ``(k1, k2, p1, p2, k3)`` of 4 or 5 given (``k3`` = 0 if absent).

    Parameters
    ----------
    dist : array_like
        ``(k1, k2, p1, p2[, k3])``; empty means no distortion.

    Returns
    -------
    ndarray, shape (5,)

    Raises
    ------
    InputError
        For another count, or a number that is not finite.
    """
    d = np.zeros(5)
    dist = np.asarray(dist, dtype=np.float64).ravel()
    if dist.size not in (0, 4, 5) or not np.all(np.isfinite(dist)):
        raise InputError("distortion must hold 4 or 5 finite numbers (k1, k2, p1, p2[, k3]); "
                         f"got {dist.size}")
    d[:dist.size] = dist
    return d


def distort(x, y, dist):
    """Distorted normalised coordinates of ideal ones (the model of the module docstring).

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
    k1, k2, p1, p2, k3 = distortion_coefficients(dist)
    r2 = x * x + y * y
    s = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
    xd = x * s + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
    yd = y * s + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
    return xd, yd


def _model(camera):
    K = np.asarray(getattr(camera, "matrix", None), dtype=np.float64)
    d = np.asarray(getattr(camera, "distortion", None), dtype=np.float64).ravel()
    if K.shape != (3, 3) or d.size not in (4, 5):
        raise InputError("camera must carry a 3x3 matrix and 4 or 5 distortion coefficients "
                         "(a CameraFit from dic.stereo.calibrate, or a Camera)")
    return K, distortion_coefficients(d)


def _newton(xd, yd, dist):
    """Ideal normalised coordinates of finite distorted ones: Newton's method with the analytic
    Jacobian, every point iterated until all steps are below ``_NEWTON_TOL``."""
    k1, k2, p1, p2, k3 = dist
    x = xd.copy()
    y = yd.copy()
    for _ in range(_NEWTON_ITER):
        r2 = x * x + y * y
        s = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
        ds = k1 + r2 * (2 * k2 + 3 * k3 * r2)            # d s / d r2
        fx = x * s + 2 * p1 * x * y + p2 * (r2 + 2 * x * x) - xd
        fy = y * s + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y - yd
        a = s + 2 * x * x * ds + 2 * p1 * y + 6 * p2 * x
        b = 2 * x * y * ds + 2 * p1 * x + 2 * p2 * y     # the Jacobian is symmetric
        d = s + 2 * y * y * ds + 6 * p1 * y + 2 * p2 * x
        det = a * d - b * b
        if not np.all(det > 0):
            raise InputError("the distortion model folds over at some of these points; "
                             "check the distortion coefficients or keep to the image")
        dx = (d * fx - b * fy) / det
        dy = (a * fy - b * fx) / det
        x -= dx
        y -= dy
        if np.all(np.abs(dx) + np.abs(dy) < _NEWTON_TOL):
            return x, y
    raise InputError("undistortion did not converge; the distortion coefficients are too "
                     "strong for these points")


def normalised_coordinates(x, y, matrix):
    """Pixel positions divided through a camera matrix: ``x/z, y/z`` of their rays in the
    camera's frame (with no lens distortion applied or removed).

    Parameters
    ----------
    x, y : array_like
        Column and row, pixels.
    matrix : array_like, shape (3, 3)
        ``[[fx, skew, cx], [0, fy, cy], [0, 0, 1]]``.

    Returns
    -------
    xn, yn : ndarray
    """
    K = np.asarray(matrix, dtype=np.float64)
    yn = (np.asarray(y, dtype=np.float64) - K[1, 2]) / K[1, 1]
    xn = (np.asarray(x, dtype=np.float64) - K[0, 2] - K[0, 1] * yn) / K[0, 0]
    return xn, yn


def undistort_points(x, y, camera, *, normalised=False):
    """Ideal pinhole positions of measured (distorted) pixel positions.

    Inverts the lens model (module docstring) by Newton's method with the analytic Jacobian,
    from the distorted position as the first guess, until every point's step is below 1e-14
    (normalised units, about 1e-11 px); with the distortion of real lenses that takes a few
    iterations. The result agrees with ``cv2.undistortPoints`` iterated to convergence, and
    ``distort`` of it gives back the measured position to rounding.

    Parameters
    ----------
    x, y : array_like
        Measured positions, column and row, pixels (same shape; NaN stays NaN).
    camera : CameraFit or Camera
        Anything with ``matrix`` (3x3, ``[[fx, skew, cx], [0, fy, cy], [0, 0, 1]]``) and
        ``distortion`` (k1, k2, p1, p2[, k3]).
    normalised : bool, optional
        Return ideal normalised coordinates (``x/z, y/z`` of the point's ray in the camera's
        frame) instead of pixels.

    Returns
    -------
    xu, yu : ndarray
        Positions the same camera without lens distortion would show, pixels (``matrix``
        applied to the normalised coordinates), or the normalised coordinates themselves.

    Raises
    ------
    InputError
        For a camera without matrix and coefficients, ``x`` and ``y`` of different shapes, or
        where the model folds over (its Jacobian is not positive) or Newton's method does not
        converge: coefficients that do not describe a lens at these points.

    References
    ----------
    .. [1] D. C. Brown, "Decentering distortion of lenses", Photogramm. Eng. 32 (1966)
       444-462.
    .. [2] OpenCV documentation, ``cv2.undistortPoints`` (calib3d module): the same inverse,
       by fixed-point iteration.
    """
    K, dist = _model(camera)
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.shape != y.shape:
        raise InputError(f"x and y must have the same shape; got {x.shape} and {y.shape}")
    xd, yd = normalised_coordinates(x, y, K)
    xn = np.full(x.shape, np.nan)
    yn = np.full(x.shape, np.nan)
    ok = np.isfinite(xd) & np.isfinite(yd)
    if ok.all():
        xn, yn = _newton(xd, yd, dist)
    elif ok.any():
        xn[ok], yn[ok] = _newton(xd[ok], yd[ok], dist)
    if normalised:
        return xn, yn
    return K[0, 0] * xn + K[0, 1] * yn + K[0, 2], K[1, 1] * yn + K[1, 2]


def undistort_displacements(x, y, u, v, camera, *, reference=None):
    """Reference positions and displacements corrected for lens distortion.

    Parameters
    ----------
    x, y : array_like
        Reference positions of the points, pixels.
    u, v : array_like
        Measured displacements, pixels (NaN where not measured).
    camera : CameraFit or Camera
    reference : (ndarray, ndarray), optional
        ``undistort_points(x, y, camera)``, when already computed (a sequence corrects every
        frame on the same reference grid).

    Returns
    -------
    xu, yu, uu, vu : ndarray
        Undistorted reference positions and the displacements between undistorted positions.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if reference is None:
        xu, yu = undistort_points(x, y, camera)
    else:
        xu, yu = (np.asarray(a, dtype=np.float64) for a in reference)
        if xu.shape != x.shape or yu.shape != x.shape:
            raise InputError(f"reference must hold two arrays of the points' shape {x.shape}; "
                             "pass undistort_points(x, y, camera)")
    xd, yd = undistort_points(x + np.asarray(u, float), y + np.asarray(v, float), camera)
    return xu, yu, xd - xu, yd - yu
