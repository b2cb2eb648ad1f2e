"""3-D positions from matched points of two calibrated cameras.

Both image points are undistorted (:func:`dic.stereo.undistort.undistort_points`) to normalised
coordinates and triangulated linearly (``cv2.triangulatePoints``, the homogeneous DLT of [1]_)
in the left camera's frame. The distance between the two back-projected rays at their closest
approach is kept as a quality number: rays that pass far apart mean a false match or a poor
calibration.

References
----------
.. [1] R. Hartley and A. Zisserman, Multiple View Geometry in Computer Vision, 2nd ed.,
   Cambridge University Press (2004), sec. 12.2.
"""

from __future__ import annotations

import enum

import numpy as np

from dic.errors import InputError

__all__ = ["triangulate", "ray_gap", "grid_points", "StereoReason", "MAX_VIEW_ANGLE"]

#: default largest angle (degrees) between the surface normal and either camera's line of sight
#: of a point given a 3-D position (see :func:`grid_points`)
MAX_VIEW_ANGLE = 45.0


def ray_gap(xl, yl, xr, yr, R, T):
    """Closest distance (mm) between the rays of normalised points in the two cameras.

    Parameters
    ----------
    xl, yl, xr, yr : ndarray
        Normalised (undistorted) coordinates in the left and right cameras.
    R, T : ndarray
        Right camera's pose relative to the left (``Pr = R Pl + T``).

    Returns
    -------
    ndarray
    """
    dl = np.stack([xl, yl, np.ones_like(xl)], -1)
    dr = np.stack([xr, yr, np.ones_like(xr)], -1) @ R            # R^T d, left frame
    cr = -R.T @ T
    n = np.cross(dl, dr)
    nn = np.linalg.norm(n, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.abs(n @ cr) / nn


def triangulate(calibration, xl, yl, xr, yr):
    """3-D positions (left camera's frame, mm) of points matched in the two cameras.

    Parameters
    ----------
    calibration : Calibration
        A two-camera calibration (:func:`dic.stereo.calibrate`).
    xl, yl : array_like
        Pixel positions in the left image.
    xr, yr : array_like
        Pixel positions of the same points in the right image (NaN where not matched).

    Returns
    -------
    points : ndarray, shape (..., 3)
        ``X, Y, Z`` in mm; NaN where a position is missing.
    gap : ndarray
        Distance between the two rays at closest approach, mm.

    References
    ----------
    .. [1] R. Hartley and A. Zisserman, Multiple View Geometry in Computer Vision (2004),
       sec. 12.2.
    """
    import cv2

    from dic.stereo.undistort import undistort_points

    if not getattr(calibration, "stereo", False):
        raise InputError("triangulation needs a two-camera calibration; calibrate with "
                         "right_images as well")
    arrays = [np.asarray(a, dtype=np.float64) for a in (xl, yl, xr, yr)]
    shape = arrays[0].shape
    if any(a.shape != shape for a in arrays):
        raise InputError("xl, yl, xr, yr must have the same shape")
    xl, yl, xr, yr = (a.ravel() for a in arrays)
    R, T = calibration.rotation, calibration.translation
    pts = np.full((xl.size, 3), np.nan)
    gap = np.full(xl.size, np.nan)
    ok = np.isfinite(xl) & np.isfinite(yl) & np.isfinite(xr) & np.isfinite(yr)
    if ok.any():
        nl = undistort_points(xl[ok], yl[ok], calibration.cameras[0], normalised=True)
        nr = undistort_points(xr[ok], yr[ok], calibration.cameras[1], normalised=True)
        P1 = np.hstack([np.eye(3), np.zeros((3, 1))])
        P2 = np.hstack([R, T.reshape(3, 1)])
        h = cv2.triangulatePoints(P1, P2, np.vstack(nl), np.vstack(nr))
        pts[ok] = (h[:3] / h[3]).T
        gap[ok] = ray_gap(nl[0], nl[1], nr[0], nr[1], R, T)
    return pts.reshape(shape + (3,)), gap.reshape(shape)


class StereoReason(enum.IntEnum):
    """Why a grid point has no 3-D position (the tracking maps these onto
    :class:`dic.field.Reason`: ``ONE_CAMERA``, ``POOR_TRIANGULATION``, ``OBLIQUE``)."""

    MEASURED = 0
    LEFT_ONLY = 1          # matched in the left image but not in the right one
    RIGHT_ONLY = 2         # matched in the right image but not in the left one
    NEITHER = 3            # matched in neither image
    RAYS_APART = 4         # the two rays pass further apart than max_gap_px allows
    OBLIQUE = 5            # a camera sees the surface there at more than max_view_angle


def grid_points(calibration, right, left=None, *, max_gap_px=0.5,
                max_view_angle=MAX_VIEW_ANGLE, window=5):
    """3-D positions of a grid of points from their matches in the two cameras.

    Parameters
    ----------
    calibration : Calibration
        Two-camera calibration.
    right : DisplacementField
        Positions of the left reference grid in the right image (``x + u``, ``y + v``): the
        stereo correspondence for the reference state, or the right field of
        :func:`dic.stereo.match.match_frame` for a deformed state.
    left : DisplacementField, optional
        Positions in the left image of the deformed state; None for the reference state (the
        grid itself).
    max_gap_px : float, optional
        Points whose two rays pass further apart than this many pixels of the left camera at
        the point's depth (``gap * f / Z``) are poorly triangulated -- a false match, or a
        calibration that no longer fits -- and get no position. A true match with a good
        calibration leaves a few hundredths of a pixel.
    max_view_angle : float or None, optional
        Points where the surface normal (the plane of the ``window x window`` triangulated
        neighbours, :func:`dic.stereo.surface.view_angles`) is further than this many degrees
        from either camera's line of sight are seen at a grazing angle and get no position
        (``OBLIQUE``): there a subset covers a strip of surface squeezed several times in one
        camera, and its match there is no longer good to the accuracy a strain needs. The
        default, 45 degrees, comes from rendered cylinders (tests/test_stereo_surfaces.py):
        surface strain within 200 microstrain of the truth up to 45 degrees, errors of
        500-5,000 microstrain beyond 50. None: no limit.
    window : int, optional
        Neighbourhood (odd, grid points) of the normal's plane fit.

    Returns
    -------
    points : ndarray, shape (ny, nx, 3)
        ``X, Y, Z`` in the left camera's frame, mm; NaN where not measured.
    gap : ndarray, shape (ny, nx)
        Distance between the two rays, mm (NaN where a camera has no match).
    reason : ndarray of int8, shape (ny, nx)
        A :class:`StereoReason` for every point.
    """
    x = right.x.astype(np.float64)
    y = right.y.astype(np.float64)
    xl, yl = (x, y) if left is None else (x + left.u, y + left.v)
    xr, yr = x + right.u, y + right.v
    pts, gap = triangulate(calibration, xl, yl, xr, yr)
    in_l = np.isfinite(xl) & np.isfinite(yl)
    in_r = np.isfinite(xr) & np.isfinite(yr)
    reason = np.select([in_l & in_r, in_l, in_r],
                       [StereoReason.MEASURED, StereoReason.LEFT_ONLY, StereoReason.RIGHT_ONLY],
                       StereoReason.NEITHER).astype(np.int8)
    f = float(calibration.cameras[0].matrix[0, 0])
    with np.errstate(invalid="ignore", divide="ignore"):
        apart = (reason == StereoReason.MEASURED) & ~(gap * f / pts[..., 2] <= max_gap_px)
    reason[apart] = StereoReason.RAYS_APART
    pts[reason != StereoReason.MEASURED] = np.nan
    if max_view_angle is not None:
        from dic.stereo.surface import view_angles

        with np.errstate(invalid="ignore"):
            steep = np.any(view_angles(calibration, pts, window=window) > max_view_angle, -1)
        reason[steep] = StereoReason.OBLIQUE
        pts[steep] = np.nan
    return pts, gap, reason
