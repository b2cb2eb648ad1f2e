"""3-D stage: camera calibration, lens-distortion correction, stereo matching, surface strain.

Modules
-------
camera
    Pinhole camera with OpenCV's distortion model: projection and rays.
calibration
    :func:`calibrate` from chessboard photographs (OpenCV), the :class:`Calibration` result.
calfile
    The calibration file (TOML of our own layout): :func:`save_calibration`,
    :func:`load_calibration`.
undistort
    The lens-distortion model and its inverse (:func:`undistort_points`, the one place
    distortion is removed); measured displacements corrected for lens distortion.
match
    The left reference grid matched into the right image (epipolar starting guess, or paired
    keypoints for large perspective changes) and into a deformed pair.
features
    Keypoints paired across the two views (SIFT, epipolar check, RANSAC): a starting
    displacement and gradient for every grid point.
triangulation
    3-D positions in the left camera's frame, with the gap between the two rays.
surface
    Surface strain: the deformation gradient in the local tangent plane.
plane
    One camera's specimen plane from a target photograph lying on it: positions in mm, scale.
render
    Exact images of speckled surfaces and chessboard targets through posed cameras (tests,
    the sample).

The names load on first use, so importing this package stays light.
"""

from __future__ import annotations

from dic.lazy import lazy_exports

_LAZY = {
    "Camera": "dic.stereo.camera",
    "calibrate": "dic.stereo.calibration",
    "Calibration": "dic.stereo.calibration",
    "find_corners": "dic.stereo.calibration",
    "save_calibration": "dic.stereo.calfile",
    "load_calibration": "dic.stereo.calfile",
    "undistort_points": "dic.stereo.undistort",
    "normalised_coordinates": "dic.stereo.undistort",
    "undistort_displacements": "dic.stereo.undistort",
    "match_cameras": "dic.stereo.match",
    "match_frame": "dic.stereo.match",
    "feature_pairs": "dic.stereo.features",
    "feature_guess": "dic.stereo.features",
    "triangulate": "dic.stereo.triangulation",
    "grid_points": "dic.stereo.triangulation",
    "StereoReason": "dic.stereo.triangulation",
    "surface_strain": "dic.stereo.surface",
    "surface_gradient": "dic.stereo.surface",
    "surface_normals": "dic.stereo.surface",
    "view_angles": "dic.stereo.surface",
    "MAX_VIEW_ANGLE": "dic.stereo.triangulation",
    "locate_plane": "dic.stereo.plane",
    "plane_points": "dic.stereo.plane",
    "plane_scale": "dic.stereo.plane",
}
_MODULES = ("camera", "calibration", "calfile", "undistort", "render", "match", "features",
            "triangulation",
            "surface", "plane")

__all__ = list(_LAZY)

__getattr__, __dir__ = lazy_exports(__name__, _LAZY, _MODULES)
