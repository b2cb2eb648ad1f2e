"""The specimen plane of one calibrated camera, from a target photograph lying on it.

With the plane known, every image point has a position on the specimen in mm: its ray (lens
distortion inverted) meets the plane. That gives one camera its scale (mm per px) and turns
lens-corrected displacements into millimetres on the specimen, also where the plane is a little
tilted toward the camera.

References
----------
.. [1] OpenCV documentation, ``cv2.solvePnP`` (calib3d module): pose of a known target from its
   image points.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from dic.errors import InputError

__all__ = ["locate_plane", "plane_points", "plane_scale"]


def locate_plane(calibration, image):
    """The calibration with the specimen plane located from a target photograph lying on it.

    Parameters
    ----------
    calibration : Calibration
        Its target (kind, inner corners, square) is the one in the photograph.
    image : ndarray or path
        The (left) camera's photograph of the target lying flat on the specimen.

    Returns
    -------
    Calibration
        A copy whose ``plane`` is ``(rotation, translation_mm)`` of the target in the left
        camera's frame.

    Raises
    ------
    InputError
        Without the target's description, or when the target is not found.
    """
    import cv2

    from dic.stereo.calibration import find_corners
    from dic.stereo.render import chessboard_corners

    t = calibration.target or {}
    if "inner_corners" not in t or not np.isfinite(t.get("square_mm", np.nan)):
        raise InputError("calibration: it does not describe its target (inner corners, square "
                         "size); calibrate with dic.calibrate first")
    if not isinstance(image, np.ndarray):
        from dic.images.io import read_image

        image = read_image(image, name=str(image))
    corners = find_corners(image, t["inner_corners"])
    if corners is None:
        raise InputError("plane image: the target was not found; photograph the whole target "
                         "lying flat on the specimen")
    fit = calibration.cameras[0]
    obj = chessboard_corners(tuple(t["inner_corners"]), float(t["square_mm"]))
    ok, rv, tv = cv2.solvePnP(obj, corners, fit.matrix, fit.distortion,
                              flags=cv2.SOLVEPNP_ITERATIVE)
    if not ok:
        raise InputError("plane image: the target's pose could not be found")
    return dataclasses.replace(calibration, plane=(cv2.Rodrigues(rv)[0], tv.ravel()))


def plane_points(calibration, x, y, *, undistorted=False):
    """Positions (mm) on the specimen plane of left-image pixels, in the target's own axes.

    Parameters
    ----------
    calibration : Calibration
        With ``plane`` (:func:`locate_plane`).
    x, y : array_like
        Pixel positions (NaN stays NaN).
    undistorted : bool, optional
        ``x, y`` are already ideal pinhole positions (from
        :func:`dic.stereo.undistort_points` or :func:`dic.stereo.undistort_displacements`),
        so the lens model is not inverted again.

    Returns
    -------
    a, b : ndarray
        In-plane coordinates, mm (origin at the target's first inner corner).
    """
    from dic.stereo.undistort import normalised_coordinates, undistort_points

    if calibration.plane is None:
        raise InputError("calibration: the specimen plane is not known; locate it from a "
                         "target photograph lying on the specimen (dic.stereo.locate_plane)")
    R, T = (np.asarray(a, float) for a in calibration.plane)
    camera = calibration.cameras[0]
    if undistorted:
        xn, yn = normalised_coordinates(x, y, camera.matrix)
    else:
        xn, yn = undistort_points(x, y, camera, normalised=True)
    d = np.stack([xn, yn, np.ones_like(xn)], -1)
    n = R[:, 2]
    with np.errstate(invalid="ignore", divide="ignore"):
        s = (T @ n) / (d @ n)
    P = s[..., None] * d - T
    return P @ R[:, 0], P @ R[:, 1]


def plane_scale(calibration, x, y):
    """mm per px on the specimen plane at pixel ``(x, y)`` (mean of the two image axes)."""
    a, b = plane_points(calibration, np.array([x - 0.5, x + 0.5, x, x], float),
                        np.array([y, y, y - 0.5, y + 0.5], float))
    return 0.5 * (np.hypot(a[1] - a[0], b[1] - b[0]) + np.hypot(a[3] - a[2], b[3] - b[2]))
