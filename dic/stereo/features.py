"""A starting guess for the stereo correspondence from matched image features.

Between cameras 30 degrees or more apart a subset of the left image looks markedly squeezed or
stretched in the right one, so a whole-pixel template search along the epipolar line (the
first guess of :mod:`dic.stereo.match`) may find no convincing match. Here scale- and
rotation-invariant keypoints (SIFT, [1]_, as OpenCV implements it) are found in both images and
paired by Lowe's ratio test; pairs further than ``max_epipolar_px`` from each other's epipolar
line (the calibration's essential matrix, [2]_) are dropped, and a RANSAC homography [2]_
removes the remaining outliers. Every grid point then gets a local affine map -- the
least-squares fit to its nearest paired keypoints -- as the starting displacement *and*
gradient of the IC-GN refinement, which the whole-pixel guess could not give.

References
----------
.. [1] D. G. Lowe, "Distinctive image features from scale-invariant keypoints", Int. J. Comput.
   Vis. 60 (2004) 91-110.
.. [2] R. Hartley and A. Zisserman, Multiple View Geometry in Computer Vision, 2nd ed.,
   Cambridge University Press (2004), sec. 9.6 (essential matrix) and 4.7 (RANSAC).
"""

from __future__ import annotations

import numpy as np

__all__ = ["feature_pairs", "feature_guess"]


def _to_uint8(a, mask=None):
    sample = a[mask] if mask is not None and mask.any() else a
    lo, hi = np.percentile(sample, [0.5, 99.5])
    return np.clip(np.rint((a - lo) * (255.0 / max(hi - lo, 1e-12))), 0, 255).astype(np.uint8)


def feature_pairs(left, right, calibration, *, mask=None, ratio=0.8, max_epipolar_px=2.0,
                  ransac_px=8.0):
    """Keypoints paired between the left and the right image, outliers removed.

    Parameters
    ----------
    left, right : ndarray
        Grey images of the two cameras.
    calibration : Calibration
        Two-camera calibration (for the epipolar check).
    mask : ndarray of bool, optional
        Where to look for keypoints in the left image.
    ratio : float, optional
        Lowe's ratio test: best match distance below ``ratio`` times the second best.
    max_epipolar_px : float, optional
        Largest distance (px, undistorted right image) of a right keypoint from the epipolar
        line of its left partner.
    ransac_px : float, optional
        RANSAC reprojection threshold of the homography (px). Generous, since a curved surface
        is not one plane: it only removes gross mismatches.

    Returns
    -------
    pl, pr : ndarray, shape (n, 2)
        Paired positions (x, y) in the left and the right image, px (possibly empty).
    """
    import cv2

    from dic.stereo.undistort import undistort_points

    sift = cv2.SIFT_create()
    m8 = None if mask is None else mask.astype(np.uint8) * 255
    kl, dl = sift.detectAndCompute(_to_uint8(left, mask), m8)
    kr, dr = sift.detectAndCompute(_to_uint8(right), None)
    empty = np.zeros((0, 2))
    if dl is None or dr is None or len(kl) < 8 or len(kr) < 8:
        return empty, empty
    pairs = cv2.BFMatcher(cv2.NORM_L2).knnMatch(dl, dr, k=2)
    good = [m[0] for m in pairs if len(m) == 2 and m[0].distance < ratio * m[1].distance]
    if len(good) < 8:
        return empty, empty
    pl = np.array([kl[g.queryIdx].pt for g in good], dtype=np.float64)
    pr = np.array([kr[g.trainIdx].pt for g in good], dtype=np.float64)
    # epipolar check on ideal (undistorted) normalised points: x_r^T E x_l = 0, E = [T]x R
    fl, fr = calibration.cameras[0], calibration.cameras[1]
    ul = np.column_stack(undistort_points(pl[:, 0], pl[:, 1], fl))
    ur = np.column_stack(undistort_points(pr[:, 0], pr[:, 1], fr))
    Kl, Kr = fl.matrix, fr.matrix
    t = np.asarray(calibration.translation, dtype=np.float64).ravel()
    tx = np.array([[0, -t[2], t[1]], [t[2], 0, -t[0]], [-t[1], t[0], 0]])
    F = np.linalg.inv(Kr).T @ tx @ calibration.rotation @ np.linalg.inv(Kl)
    hl = np.column_stack([ul, np.ones(len(ul))])
    hr = np.column_stack([ur, np.ones(len(ur))])
    lines = hl @ F.T                                 # epipolar lines in the right image
    dist = np.abs(np.sum(lines * hr, 1)) / np.hypot(lines[:, 0], lines[:, 1])
    keep = dist <= max_epipolar_px
    pl, pr = pl[keep], pr[keep]
    if len(pl) < 8:
        return empty, empty
    _, inl = cv2.findHomography(pl, pr, cv2.RANSAC, ransac_px)
    if inl is None:
        return empty, empty
    inl = inl.ravel().astype(bool)
    return pl[inl], pr[inl]


def feature_guess(pl, pr, x, y, *, neighbours=12, max_distance=None):
    """Starting displacements and gradients of grid points from paired keypoints.

    Parameters
    ----------
    pl, pr : ndarray, shape (n, 2)
        Paired keypoint positions (:func:`feature_pairs`).
    x, y : ndarray
        Grid point positions in the left image, px.
    neighbours : int, optional
        Keypoints in each point's local affine fit.
    max_distance : float, optional
        Points whose ``neighbours``-th nearest keypoint is further than this (px) get no guess;
        default four times the median such distance.

    Returns
    -------
    u, v : ndarray
        Right position minus left position, px (NaN: no guess).
    grad : ndarray, shape (..., 2, 2)
        ``[[du/dx, du/dy], [dv/dx, dv/dy]]`` of the local affine map.
    """
    from scipy.spatial import cKDTree

    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    u = np.full(x.shape, np.nan)
    v = np.full(x.shape, np.nan)
    grad = np.full(x.shape + (2, 2), np.nan)
    k = int(neighbours)
    if len(pl) < max(k, 3):
        return u, v, grad
    q = np.column_stack([x.ravel(), y.ravel()])
    dist, idx = cKDTree(pl).query(q, k=k)
    reach = dist[:, -1]
    limit = 4.0 * float(np.median(reach)) if max_distance is None else float(max_distance)
    d = pr - pl
    uu, vv = u.reshape(-1), v.reshape(-1)
    gg = grad.reshape(-1, 2, 2)
    for i in np.flatnonzero(reach <= limit):
        P = pl[idx[i]] - q[i]
        A = np.column_stack([np.ones(k), P])
        coef, *_ = np.linalg.lstsq(A, d[idx[i]], rcond=None)    # (3, 2): offset, d/dx, d/dy
        uu[i], vv[i] = coef[0]
        gg[i] = coef[1:].T
    return u, v, grad
