"""Surface strain from 3-D positions on a grid: the deformation gradient in the tangent plane.

At every grid point the reference positions of the ``window x window`` neighbourhood give a
provisional plane (least squares, by singular value decomposition), whose principal directions
give in-plane coordinates ``b``. Reference and deformed positions are both fitted as linear (or
quadratic) functions of ``b`` (pointwise least squares); the fits' first derivatives at the
point, ``J = dX/db`` and ``K = dx/db`` (3 x 2 each), span the reference and deformed tangent
planes. The reference tangent basis is
turned so that ``e1`` is the left camera's ``x`` axis projected on the plane (``e2 = n x e1``,
``n`` toward the camera), so for a plate facing the camera ``xx`` is along image columns, as in
the 2-D analysis. With ``M = [e1 e2]^T J`` the surface deformation gradient is ``G = K M^-1``
(3 x 2, deformed position per unit tangent length). Expressed in the deformed tangent basis
``d1`` (``e1`` projected on the deformed plane), ``d2 = n' x d1``, the in-plane gradient is
``F = [d1 d2]^T G`` (2 x 2), from which every strain measure of :mod:`dic.strain` follows;
``F^T F = G^T G`` is the surface's right Cauchy-Green tensor.

References
----------
.. [1] B. Pan, A. Asundi, H. Xie and J. Gao, "Digital image correlation using iterative least
   squares and pointwise least squares for displacement field and strain field measurements",
   Opt. Lasers Eng. 47 (2009) 865-874 (pointwise least squares).
.. [2] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley (2000) (surface deformation gradient,
   right Cauchy-Green tensor).
"""

from __future__ import annotations

import numpy as np

from dic.errors import InputError
from dic.strain.defaults import DEFAULT_MEASURE

__all__ = ["surface_gradient", "surface_strain", "surface_normals", "view_angles"]


def _unit(v):
    return v / np.linalg.norm(v)


def surface_gradient(reference, deformed, *, window=5, fit="plane", min_points=None):
    """In-plane deformation gradient of a surface at every grid point.

    Parameters
    ----------
    reference, deformed : ndarray, shape (ny, nx, 3)
        3-D positions (mm) of the grid points in the reference and the deformed state, left
        camera's frame; NaN where not measured.
    window : int, optional
        Odd side, in grid points, of the neighbourhood fitted at each point.
    fit : {'plane', 'quadratic'}, optional
        Positions fitted as linear or quadratic functions of the in-plane coordinates. The
        quadratic fit follows a curved surface more closely but passes more of the matching
        noise into the strain (on a 50 mm cylinder with a 5 x 5 window: about twice the error).
    min_points : int, optional
        Fewest valid neighbours for a fit; default ``(window**2 + 1) // 2``.

    Returns
    -------
    F : ndarray, shape (ny, nx, 2, 2)
        ``F[..., i, j] = d x_i / d X_j`` in the tangent bases (module docstring); NaN where the
        fit has too few points.
    normal : ndarray, shape (ny, nx, 3)
        Unit normal of the reference surface, toward the camera.
    """
    X = np.asarray(reference, dtype=np.float64)
    x = np.asarray(deformed, dtype=np.float64)
    if X.ndim != 3 or X.shape[2] != 3 or x.shape != X.shape:
        raise InputError("reference and deformed must both be (ny, nx, 3) arrays of positions; "
                         f"got {X.shape} and {x.shape}")
    if fit not in ("quadratic", "plane"):
        raise InputError(f"fit must be 'quadratic' or 'plane'; got {fit!r}")
    min_points = _window_points(window, min_points)
    ny, nx, _ = X.shape
    h = window // 2
    F = np.full((ny, nx, 2, 2), np.nan)
    normal = np.full((ny, nx, 3), np.nan)
    valid = np.all(np.isfinite(X), -1) & np.all(np.isfinite(x), -1)
    cam_x = np.array([1.0, 0.0, 0.0])
    for i in range(ny):
        for j in range(nx):
            if not valid[i, j]:
                continue
            sl = (slice(max(i - h, 0), i + h + 1), slice(max(j - h, 0), j + h + 1))
            ok = valid[sl]
            if ok.sum() < max(min_points, 4):
                continue
            P = X[sl][ok]
            p = x[sl][ok]
            c = P.mean(0)
            _, s, vt = np.linalg.svd(P - c, full_matrices=False)
            if s[1] <= 1e-9 * max(s[0], 1e-300):
                continue                       # neighbours on a line: no plane
            b = np.column_stack([(P - X[i, j]) @ vt[0], (P - X[i, j]) @ vt[1]])
            cols = [np.ones(len(b)), b[:, 0], b[:, 1]]
            if fit == "quadratic":
                cols += [b[:, 0] ** 2, b[:, 0] * b[:, 1], b[:, 1] ** 2]
            A = np.column_stack(cols)
            if len(b) < A.shape[1] + 2:
                continue
            J = np.linalg.lstsq(A, P, rcond=None)[0][1:3].T         # dX/db at the point
            K = np.linalg.lstsq(A, p, rcond=None)[0][1:3].T         # dx/db at the point
            n = np.cross(J[:, 0], J[:, 1])
            n = _unit(n) if n[2] < 0 else -_unit(n)                 # toward the camera
            e1 = _unit(cam_x - (cam_x @ n) * n)
            e2 = np.cross(n, e1)
            M = np.stack([e1, e2]) @ J                              # tangent coords of dX/db
            G = K @ np.linalg.inv(M)                                # dx/da, (3, 2)
            nd = np.cross(G[:, 0], G[:, 1])
            nd = _unit(nd) if nd @ n > 0 else -_unit(nd)
            d1 = _unit(e1 - (e1 @ nd) * nd)
            d2 = np.cross(nd, d1)
            F[i, j] = np.stack([d1, d2]) @ G
            normal[i, j] = n
    return F, normal


def surface_strain(reference, deformed, *, window=5, fit="plane", measure=DEFAULT_MEASURE):
    """Surface strain tensor at every grid point (tensor shear).

    Parameters
    ----------
    reference, deformed : ndarray, shape (ny, nx, 3)
        3-D positions (mm), as for :func:`surface_gradient`.
    window : int, optional
        Odd side, in grid points, of the neighbourhood fitted at each point.
    fit : {'quadratic', 'plane'}, optional
        See :func:`surface_gradient`.
    measure : str, optional
        Any measure of :func:`dic.strain.strain_tensor`.

    Returns
    -------
    ndarray, shape (ny, nx, 2, 2)
        Strain tensor in the tangent basis (``xx`` along the left camera's ``x`` projected on
        the surface), tensor shear.
    """
    from dic.strain import strain_tensor

    F, _ = surface_gradient(reference, deformed, window=window, fit=fit)
    out = np.full(F.shape, np.nan)
    ok = np.all(np.isfinite(F), axis=(-2, -1))
    out[ok] = strain_tensor(F[ok], measure)
    return out


def surface_normals(points, *, window=5, min_points=None):
    """Unit normal of a surface at every grid point, from its neighbours' 3-D positions.

    Parameters
    ----------
    points : ndarray, shape (ny, nx, 3)
        3-D positions (mm), left camera's frame; NaN where not measured.
    window : int, optional
        Odd side, in grid points, of the neighbourhood whose least-squares plane (singular
        value decomposition) gives the normal.
    min_points : int, optional
        Fewest valid neighbours; default ``(window**2 + 1) // 2``.

    Returns
    -------
    ndarray, shape (ny, nx, 3)
        Unit normals toward the left camera (negative ``Z`` component); NaN where the point or
        too many of its neighbours are not measured.
    """
    P = np.asarray(points, dtype=np.float64)
    if P.ndim != 3 or P.shape[2] != 3:
        raise InputError(f"points must be an (ny, nx, 3) array of positions; got {P.shape}")
    min_points = _window_points(window, min_points)
    ny, nx, _ = P.shape
    h = window // 2
    out = np.full((ny, nx, 3), np.nan)
    valid = np.all(np.isfinite(P), -1)
    for i, j in zip(*np.nonzero(valid)):
        sl = (slice(max(i - h, 0), i + h + 1), slice(max(j - h, 0), j + h + 1))
        Q = P[sl][valid[sl]]
        if len(Q) < max(min_points, 4):
            continue
        _, s, vt = np.linalg.svd(Q - Q.mean(0), full_matrices=False)
        if s[1] <= 1e-9 * max(s[0], 1e-300):
            continue                           # neighbours on a line: no plane
        out[i, j] = vt[2] if vt[2, 2] < 0 else -vt[2]
    return out


def view_angles(calibration, points, *, window=5):
    """Angle between the surface normal and each camera's line of sight, at every grid point.

    0 degrees: the camera looks straight at the surface; toward 90 degrees it sees it edge-on
    (grazing), so a subset covers ever more surface, squeezed in one direction, and its match
    in that camera loses accuracy.

    Parameters
    ----------
    calibration : Calibration
        Two-camera calibration (the right camera's centre is ``-R^T T`` in the left frame).
    points : ndarray, shape (ny, nx, 3)
        Reference 3-D positions (mm), left camera's frame; NaN where not measured.
    window : int, optional
        Neighbourhood of the normal's plane fit (:func:`surface_normals`).

    Returns
    -------
    ndarray, shape (ny, nx, 2)
        Angles in degrees for the left and the right camera; NaN where the normal is unknown.

    References
    ----------
    .. [1] M. A. Sutton, J.-J. Orteu and H. W. Schreier, Image Correlation for Shape, Motion
       and Deformation Measurements, Springer (2009), ch. 5 (stereo systems, view angles).
    """
    P = np.asarray(points, dtype=np.float64)
    n = surface_normals(P, window=window)
    centres = [np.zeros(3)]
    if getattr(calibration, "stereo", False):
        centres.append(-calibration.rotation.T @ np.asarray(calibration.translation).ravel())
    out = np.full(P.shape[:2] + (2,), np.nan)
    for c, centre in enumerate(centres):
        sight = centre - P
        with np.errstate(invalid="ignore", divide="ignore"):
            sight = sight / np.linalg.norm(sight, axis=-1, keepdims=True)
            cosine = np.clip(np.abs(np.sum(sight * n, -1)), 0.0, 1.0)
        out[..., c] = np.degrees(np.arccos(cosine))
    return out


def _window_points(window, min_points):
    """Check a fitting window (odd number of grid points, at least 3); the fewest measured
    points a fit needs (given, or half the window's)."""
    if window < 3 or window % 2 == 0:
        raise InputError(f"window must be an odd number of grid points >= 3; got {window}")
    return (window * window + 1) // 2 if min_points is None else min_points
