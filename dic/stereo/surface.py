"""Surface strain from 3-D positions on a grid: the deformation gradient in the tangent plane.

At every grid point a plane is fitted (least squares, by singular value decomposition) to the
reference positions of the ``window x window`` neighbourhood; its first two principal directions
span the tangent plane. The tangent basis is then turned so that ``e1`` is the left camera's
``x`` axis projected on the plane (``e2 = n x e1``, ``n`` toward the camera), so for a plate
facing the camera ``xx`` is along image columns, as in the 2-D analysis. The deformed positions
of the neighbours are fitted linearly in the reference tangent coordinates ``a``:
``x(a) = x0 + G a`` with ``G`` (3 x 2) the surface deformation gradient. Expressed in the
deformed tangent basis ``d1`` (``e1`` projected on the deformed plane), ``d2 = n' x d1``, the
in-plane gradient is ``F = [d1 d2]^T G`` (2 x 2), from which every strain measure of
:mod:`dic.strain` follows; ``F^T F = G^T G`` is the surface's right Cauchy-Green tensor.

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

__all__ = ["surface_gradient", "surface_strain"]


def _unit(v):
    return v / np.linalg.norm(v)


def surface_gradient(reference, deformed, *, window=5, min_points=None):
    """In-plane deformation gradient of a surface at every grid point.

    Parameters
    ----------
    reference, deformed : ndarray, shape (ny, nx, 3)
        3-D positions (mm) of the grid points in the reference and the deformed state, left
        camera's frame; NaN where not measured.
    window : int, optional
        Odd side, in grid points, of the neighbourhood fitted at each point.
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
    if window < 3 or window % 2 == 0:
        raise InputError(f"window must be an odd number of grid points >= 3; got {window}")
    if min_points is None:
        min_points = (window * window + 1) // 2
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
            n = vt[2] if vt[2][2] < 0 else -vt[2]        # toward the camera (-Z side)
            e1 = _unit(cam_x - (cam_x @ n) * n)
            e2 = np.cross(n, e1)
            a = np.column_stack([(P - X[i, j]) @ e1, (P - X[i, j]) @ e2])
            A = np.column_stack([np.ones(len(a)), a])
            coef, *_ = np.linalg.lstsq(A, p, rcond=None)          # (3, 3): x0, dx/da1, dx/da2
            G = coef[1:].T                                        # (3, 2)
            nd = np.cross(G[:, 0], G[:, 1])
            nd = _unit(nd) if nd @ n > 0 else -_unit(nd)
            d1 = _unit(e1 - (e1 @ nd) * nd)
            d2 = np.cross(nd, d1)
            F[i, j] = np.stack([d1, d2]) @ G
            normal[i, j] = n
    return F, normal


def surface_strain(reference, deformed, *, window=5, measure="green-lagrange"):
    """Surface strain tensor at every grid point (tensor shear).

    Parameters
    ----------
    reference, deformed : ndarray, shape (ny, nx, 3)
        3-D positions (mm), as for :func:`surface_gradient`.
    window : int, optional
        Odd side, in grid points, of the neighbourhood fitted at each point.
    measure : str, optional
        Any measure of :func:`dic.strain.strain_tensor`.

    Returns
    -------
    ndarray, shape (ny, nx, 2, 2)
        Strain tensor in the tangent basis (``xx`` along the left camera's ``x`` projected on
        the surface), tensor shear.
    """
    from dic.strain import strain_tensor

    F, _ = surface_gradient(reference, deformed, window=window)
    out = np.full(F.shape, np.nan)
    ok = np.all(np.isfinite(F), axis=(-2, -1))
    out[ok] = strain_tensor(F[ok], measure)
    return out
