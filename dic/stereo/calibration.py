"""Camera calibration from photographs of a chessboard target, with OpenCV.

One camera: intrinsics and lens distortion (Zhang's method, ``cv2.calibrateCamera``). Two cameras
photographed together: each camera on its own first, then the pose of the right camera relative
to the left refined together with both cameras' intrinsics (``cv2.stereoCalibrate``). Views
where the target is not found, or whose corners fit the model badly, are left out and listed
with the reason.

References
----------
.. [1] Z. Zhang, "A flexible new technique for camera calibration", IEEE Trans. Pattern Anal.
   Mach. Intell. 22 (2000) 1330-1334.
.. [2] OpenCV documentation, "Camera Calibration and 3D Reconstruction" (calib3d module).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from dic.errors import InputError, TooFewPoints
from dic.stereo.camera import Camera

__all__ = ["calibrate", "Calibration", "CameraFit", "Rejected", "find_corners"]

#: corner refinement works on the image blurred by this Gaussian (px); on sharp, anti-aliased
#: edges the gradient-based refinement otherwise locks to the pixel grid by up to 0.1 px
_BLUR = 1.0
_MIN_VIEWS = 3
#: a view fits badly when its reprojection RMS exceeds max_error and this many times the median
_BAD_FACTOR = 3.0


@dataclass(frozen=True)
class CameraFit:
    """One calibrated camera.

    Attributes
    ----------
    matrix : ndarray, shape (3, 3)
        ``[[fx, 0, cx], [0, fy, cy], [0, 0, 1]]``, pixels.
    distortion : ndarray, shape (5,)
        ``(k1, k2, p1, p2, k3)`` (OpenCV's model, see :mod:`dic.stereo.undistort`).
    size : (int, int)
        Image ``(width, height)``.
    rms : float
        Reprojection error over all corners of the views used, px (root mean square).
    view_rms : dict
        View index -> reprojection RMS of that view's corners, px.
    """

    matrix: np.ndarray
    distortion: np.ndarray
    size: tuple
    rms: float
    view_rms: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Rejected:
    """A view left out of the calibration: its index, name and the reason (plain words)."""

    index: int
    name: str
    reason: str


@dataclass(frozen=True)
class Calibration:
    """The result of :func:`calibrate`: one or two cameras and, for two, their relative pose.

    The left camera's frame is the world frame (mm). A point ``P`` in it is at
    ``rotation @ P + translation`` in the right camera's frame.

    Attributes
    ----------
    cameras : tuple of CameraFit
        ``(left,)`` or ``(left, right)``.
    rotation : ndarray, shape (3, 3) or None
        Right camera's rotation relative to the left.
    translation : ndarray, shape (3,) or None
        Right camera's translation relative to the left, mm.
    rms : float
        Overall reprojection RMS, px: of the stereo fit for two cameras, else of the camera.
    view_rms : dict
        View index -> reprojection RMS (stereo fit for two cameras), px.
    rejected : tuple of Rejected
        Views left out, with the reason.
    target : dict
        ``kind``, ``inner_corners`` and ``square_mm`` of the target.
    names : tuple of str
        Names of the views (file names, or ``view 0``, ... for arrays).
    """

    cameras: tuple
    rotation: np.ndarray | None = None
    translation: np.ndarray | None = None
    rms: float = float("nan")
    view_rms: dict = field(default_factory=dict)
    rejected: tuple = ()
    target: dict = field(default_factory=dict)
    names: tuple = ()
    #: the specimen plane, ``(rotation, translation_mm)`` of a target lying on it, in the left
    #: camera's frame (:func:`dic.stereo.plane.locate_plane`); None when not known
    plane: tuple | None = None

    @property
    def stereo(self) -> bool:
        """True for a two-camera calibration."""
        return len(self.cameras) == 2

    @property
    def baseline(self) -> float:
        """Distance between the optical centres, mm (NaN for one camera)."""
        if self.translation is None:
            return float("nan")
        return float(np.linalg.norm(self.translation))

    @property
    def angle_deg(self) -> float:
        """Angle between the two cameras (rotation angle of ``rotation``), degrees."""
        if self.rotation is None:
            return float("nan")
        c = (np.trace(self.rotation) - 1) / 2
        return float(np.degrees(np.arccos(np.clip(c, -1, 1))))

    def camera(self, which=0) -> Camera:
        """A :class:`~dic.stereo.camera.Camera` placed in the world (left camera's) frame."""
        fit = self.cameras[which]
        if which == 0:
            return Camera(fit.matrix, fit.distortion, fit.size)
        return Camera(fit.matrix, fit.distortion, fit.size, self.rotation, self.translation)


def _as_gray_u8(image, index):
    from dic.images.io import read_image

    a = read_image(image) if not isinstance(image, np.ndarray) else np.asarray(image)
    if a.ndim == 3:
        a = a[..., :3] @ np.array([0.299, 0.587, 0.114])
    if a.ndim != 2:
        raise InputError(f"calibration image {index} must be a grey or colour image; "
                         f"got an array of shape {a.shape}")
    a = np.asarray(a, dtype=np.float64)
    top = 255.0 if a.max() <= 255 else 65535.0
    return np.clip(np.rint(a * (255.0 / top)), 0, 255).astype(np.uint8), a


def find_corners(image, inner_corners):
    """Inner corners of a chessboard in one image, refined to a fraction of a pixel.

    ``cv2.findChessboardCorners`` locates them, ``cv2.cornerSubPix`` refines them on the image
    blurred by a 1 px Gaussian (sharp edges otherwise lock the refinement to the pixel grid),
    with a window of about a third of the square. The order is made the same for every view: the
    first corner is the one nearest the image's top-left.

    Parameters
    ----------
    image : ndarray
        Grey image (any range; uint8 is used for the search).
    inner_corners : (int, int)
        ``(cols, rows)`` of inner corners.

    Returns
    -------
    ndarray, shape (cols * rows, 2), or None
        Corner pixel positions, or None where the target is not found.
    """
    import cv2

    u8, full = _as_gray_u8(image, 0)
    flags = cv2.CALIB_CB_ADAPTIVE_THRESH | cv2.CALIB_CB_NORMALIZE_IMAGE
    ok, c = cv2.findChessboardCorners(u8, tuple(int(n) for n in inner_corners), flags=flags)
    if not ok:
        return None
    c = c.reshape(-1, 2)
    cols = int(inner_corners[0])
    spacing = float(np.median(np.linalg.norm(np.diff(c.reshape(-1, cols, 2), axis=1), axis=-1)))
    half = int(np.clip(round(spacing / 3), 3, 15))
    blurred = cv2.GaussianBlur(full.astype(np.float32), (0, 0), _BLUR)
    crit = (cv2.TERM_CRITERIA_EPS + cv2.TERM_CRITERIA_MAX_ITER, 100, 1e-5)
    c = cv2.cornerSubPix(blurred, c.reshape(-1, 1, 2).astype(np.float32), (half, half),
                         (-1, -1), crit).reshape(-1, 2).astype(np.float64)
    if c[0].sum() > c[-1].sum():
        c = c[::-1].copy()
    return c


def _view_rms(obj, img, rvec, tvec, K, dist):
    import cv2

    p, _ = cv2.projectPoints(obj, rvec, tvec, K, dist)
    return float(np.sqrt(np.mean(np.sum((p.reshape(-1, 2) - img) ** 2, axis=1))))


def _calibrate_one(obj, pts, idx, size, flags):
    import cv2

    K0 = np.eye(3)
    rms, K, dist, rvecs, tvecs = cv2.calibrateCamera(
        [o.astype(np.float32) for o in obj], [p.astype(np.float32) for p in pts], size, K0,
        np.zeros(5), flags=flags,
        criteria=(cv2.TERM_CRITERIA_COUNT + cv2.TERM_CRITERIA_EPS, 200, 1e-12))
    per = {i: _view_rms(o, p, r, t, K, dist) for i, o, p, r, t in zip(idx, obj, pts, rvecs,
                                                                        tvecs)}
    return float(rms), K, dist.ravel(), per


def calibrate(left_images, right_images=None, *, target="chessboard", inner_corners,
              square_mm, fit_k3=False, jointly=True, max_error=0.5, names=None):
    """Calibrate one camera, or two cameras and their relative pose, from target photographs.

    Parameters
    ----------
    left_images : sequence of ndarray or path
        Views of the target by the (left) camera.
    right_images : sequence of ndarray or path, optional
        The same views by the right camera, in the same order (photographed at the same time).
    target : {'chessboard'}, optional
        Kind of target.
    inner_corners : (int, int)
        ``(cols, rows)`` of inner corners of the chessboard (squares minus one each way).
    square_mm : float
        Side of one square, mm.
    fit_k3 : bool, optional
        Also fit the sixth-order radial term ``k3``. Off by default (``k3 = 0``): ordinary lenses
        need only ``k1, k2``, and a free ``k3`` fitted to targets that do not reach the image
        corners extrapolates badly there (OpenCV's documentation advises the same for
        non-fish-eye lenses). Turn it on for wide-angle lenses with targets filling the corners.
    jointly : bool, optional
        Two cameras: refine both cameras' intrinsics and distortion together with their
        relative pose (``cv2.stereoCalibrate`` started from the single-camera fits), so that
        every view constrains both cameras. With False the single-camera intrinsics are held.
    max_error : float, optional
        A view whose reprojection RMS (px) exceeds both this and three times the median of the
        views fits badly: the worst such view is left out, listed in ``rejected``, and the
        cameras are calibrated again without it, until none is left (or three views remain).
    names : sequence of str, optional
        Names of the views for the report; default the file names, or ``view 0``, ...

    Returns
    -------
    Calibration

    Raises
    ------
    InputError
        For bad arguments.
    TooFewPoints
        When fewer than three views remain.

    References
    ----------
    .. [1] Z. Zhang, IEEE Trans. Pattern Anal. Mach. Intell. 22 (2000) 1330-1334.
    """
    import cv2

    from dic.stereo.render import chessboard_corners

    if target != "chessboard":
        raise InputError(f"target must be 'chessboard'; got {target!r}")
    try:
        cols, rows = (int(n) for n in inner_corners)
    except (TypeError, ValueError):
        raise InputError("inner_corners must be (cols, rows), two integers; "
                         f"got {inner_corners!r}")
    if cols < 3 or rows < 3 or cols == rows:
        raise InputError("inner_corners must be (cols, rows) with at least 3 each and cols != "
                         f"rows (a square board has no unique orientation); got {inner_corners!r}")
    if not (np.isfinite(square_mm) and square_mm > 0):
        raise InputError(f"square_mm must be a positive length in mm; got {square_mm!r}")
    left = list(left_images)
    right = None if right_images is None else list(right_images)
    if right is not None and len(right) != len(left):
        raise InputError(f"right_images must pair with left_images: got {len(right)} right and "
                         f"{len(left)} left images")
    if names is None:
        names = [str(getattr(im, "name", im)) if not isinstance(im, np.ndarray) else f"view {i}"
                 for i, im in enumerate(left)]
    names = tuple(str(n) for n in names)
    obj = chessboard_corners((cols, rows), float(square_mm))
    flags = 0 if fit_k3 else cv2.CALIB_FIX_K3
    cams = [left] if right is None else [left, right]
    corners = [[None] * len(left) for _ in cams]
    sizes = [None] * len(cams)
    rejected = []
    for i in range(len(left)):
        missing = []
        for c, images in enumerate(cams):
            full = _as_gray_u8(images[i], i)[1]  # read once, at full bit depth
            size = (full.shape[1], full.shape[0])
            if sizes[c] is None:
                sizes[c] = size
            elif sizes[c] != size:
                raise InputError(f"calibration image {names[i]!r} is {size[0]}x{size[1]} px; "
                                 f"the others of that camera are {sizes[c][0]}x{sizes[c][1]}")
            corners[c][i] = find_corners(full, (cols, rows))  # refined on the full depth
            if corners[c][i] is None:
                missing.append("left" if c == 0 else "right")
        if missing:
            where = " and ".join(missing) + (" image" if len(missing) == 1 else " images")
            rejected.append(Rejected(i, names[i], f"target not found in the {where}"))
    use = [i for i in range(len(left)) if all(corners[c][i] is not None for c in range(len(cams)))]

    while True:
        if len(use) < _MIN_VIEWS:
            raise TooFewPoints(f"only {len(use)} usable calibration views (at least "
                               f"{_MIN_VIEWS} needed); photograph the target in more poses")
        fits = [_calibrate_one([obj] * len(use), [corners[c][i] for i in use], use, sizes[c],
                              flags)
                for c in range(len(cams))]
        # one bad view inflates the others' errors too: leave out the worst one, then refit
        worst, err = max(((i, max(f[3][i] for f in fits)) for i in use), key=lambda t: t[1])
        median = float(np.median([max(f[3][i] for f in fits) for i in use]))
        limit = max(max_error, _BAD_FACTOR * median)
        if err <= limit or len(use) <= _MIN_VIEWS:
            break
        rejected.append(Rejected(worst, names[worst], f"fits badly: reprojection RMS {err:.3g} "
                                                      f"px > {limit:.3g} px"))
        bad = [worst]
        use = [i for i in use if i not in bad]

    cam_fits = tuple(CameraFit(K, d, sizes[c], rms, per)
                     for c, (rms, K, d, per) in enumerate(fits))
    info = {"kind": target, "inner_corners": (cols, rows), "square_mm": float(square_mm)}
    rejected = tuple(sorted(rejected, key=lambda r: r.index))
    if right is None:
        return Calibration(cam_fits, rms=cam_fits[0].rms, view_rms=dict(cam_fits[0].view_rms),
                           rejected=rejected, target=info, names=names)

    o32 = [obj.astype(np.float32)] * len(use)
    l32 = [corners[0][i].astype(np.float32) for i in use]
    r32 = [corners[1][i].astype(np.float32) for i in use]
    crit = (cv2.TERM_CRITERIA_COUNT + cv2.TERM_CRITERIA_EPS, 200, 1e-12)
    sflags = cv2.CALIB_USE_INTRINSIC_GUESS | flags if jointly else cv2.CALIB_FIX_INTRINSIC
    out = cv2.stereoCalibrate(o32, l32, r32, cam_fits[0].matrix.copy(),
                              cam_fits[0].distortion.copy(), cam_fits[1].matrix.copy(),
                              cam_fits[1].distortion.copy(), sizes[0], flags=sflags,
                              criteria=crit)
    rms, R, T = float(out[0]), out[5], out[6].ravel()
    if jointly:
        cam_fits = tuple(CameraFit(out[1 + 2 * c], out[2 + 2 * c].ravel(), f.size, f.rms,
                                   f.view_rms) for c, f in enumerate(cam_fits))
    view = {}
    for i in use:
        ok, rv, tv = cv2.solvePnP(obj, corners[0][i], cam_fits[0].matrix, cam_fits[0].distortion)
        Rl = cv2.Rodrigues(rv)[0]
        el = _view_rms(obj, corners[0][i], rv, tv, cam_fits[0].matrix, cam_fits[0].distortion)
        rr = cv2.Rodrigues(R @ Rl)[0]
        tr = R @ tv.ravel() + T
        er = _view_rms(obj, corners[1][i], rr, tr, cam_fits[1].matrix, cam_fits[1].distortion)
        view[i] = float(np.sqrt((el**2 + er**2) / 2))
    return Calibration(cam_fits, R, T, rms, view, rejected, info, names)
