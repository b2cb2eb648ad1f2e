"""Strain measures and derived quantities from the deformation gradient, vectorised for 2-D.

Every function takes arrays of deformation gradients ``F`` of shape ``(..., 2, 2)`` (or tensor
components of shape ``(...)``) and works point by point with closed forms for 2 x 2 matrices, so
whole fields are handled at numpy speed. ``F[..., i, j] = d x_i / d X_j`` with index 0 for ``x``
(column) and 1 for ``y`` (row, downwards). NaN in, NaN out; where a quantity needs a proper
polar decomposition or an inverse (``det F <= 0``, a folded or degenerate gradient) the result
is NaN.

Shear components are TENSOR shear (``xy``), half the engineering shear angle.
"""

from __future__ import annotations

import numpy as np
from dic.strain.defaults import DEFAULT_MEASURE

__all__ = [
    "MEASURES",
    "canonical_measure",
    "strain_tensor",
    "green_lagrange",
    "infinitesimal",
    "euler_almansi",
    "hencky",
    "engineering",
    "polar_decomposition",
    "rotation_angle",
    "area_change",
    "principal_strains",
    "max_shear",
    "equivalent_strain",
    "out_of_plane",
    "incompressible_zz",
    "nonlinear_part",
    "nonlinear_share",
    "nonlinear_mask",
    "measure_difference",
]

#: canonical names of the strain measures, in the order they are listed in messages
MEASURES = ("green-lagrange", "infinitesimal", "euler-almansi", "hencky", "engineering")

_ALIASES = {
    "green-lagrange": "green-lagrange", "green": "green-lagrange", "lagrange": "green-lagrange",
    "greenlagrange": "green-lagrange", "gl": "green-lagrange",
    "infinitesimal": "infinitesimal", "small": "infinitesimal", "small-strain": "infinitesimal",
    "linear": "infinitesimal", "linearised": "infinitesimal", "linearized": "infinitesimal",
    "euler-almansi": "euler-almansi", "almansi": "euler-almansi", "euler": "euler-almansi",
    "euleralmansi": "euler-almansi",
    "hencky": "hencky", "log": "hencky", "logarithmic": "hencky", "true": "hencky",
    "engineering": "engineering", "biot": "engineering", "nominal": "engineering",
}


def canonical_measure(name) -> str:
    """Canonical name of a strain measure, accepting case-insensitive names and aliases.

    Parameters
    ----------
    name : str
        ``"green-lagrange"`` (aliases ``green``, ``gl``), ``"infinitesimal"`` (``small``,
        ``linear``), ``"euler-almansi"`` (``almansi``, ``euler``), ``"hencky"`` (``log``,
        ``logarithmic``, ``true``) or ``"engineering"`` (``biot``, ``nominal``). Underscores and
        spaces count as hyphens.

    Returns
    -------
    str
        One of :data:`MEASURES`.

    Raises
    ------
    ValueError
        If the name is not known; the message lists the valid names.
    """
    key = name.strip().lower().replace("_", "-").replace(" ", "-") if isinstance(name, str) else None
    if key not in _ALIASES:
        raise ValueError(f"measure {name!r} is not known; use one of: {', '.join(MEASURES)} "
                         f"(aliases: green, almansi, log, logarithmic, small, biot)")
    return _ALIASES[key]


# ---------------------------------------------------------------------------------------------
# small closed-form helpers for 2 x 2 matrices


def _as_F(F) -> np.ndarray:
    F = np.asarray(F, dtype=np.float64)
    if F.ndim < 2 or F.shape[-2:] != (2, 2):
        raise ValueError(f"F must have shape (..., 2, 2) (got {F.shape}); pass 2-D deformation "
                         "gradients")
    return F


def symmetric_matrix(xx, yy, xy) -> np.ndarray:
    """Stack tensor components into symmetric ``(..., 2, 2)`` matrices."""
    out = np.empty(np.shape(xx) + (2, 2))
    out[..., 0, 0] = xx
    out[..., 1, 1] = yy
    out[..., 0, 1] = xy
    out[..., 1, 0] = xy
    return out


def determinant(F) -> np.ndarray:
    """Determinant of ``(..., 2, 2)`` matrices."""
    return F[..., 0, 0] * F[..., 1, 1] - F[..., 0, 1] * F[..., 1, 0]


def _grad(F) -> np.ndarray:
    """Displacement gradient ``H = F - I``."""
    H = F.copy()
    H[..., 0, 0] -= 1.0
    H[..., 1, 1] -= 1.0
    return H


def _proper(F) -> np.ndarray:
    """Mask of points with ``det F > 0`` (NaN compares False)."""
    return determinant(F) > 0.0


def _sym_eig(xx, yy, xy):
    """Eigenvalues (major, minor) and the unit major eigenvector (c, s) of a symmetric 2x2."""
    m = 0.5 * (xx + yy)
    d = 0.5 * (xx - yy)
    r = np.hypot(d, xy)
    theta = 0.5 * np.arctan2(xy, d)
    return m + r, m - r, np.cos(theta), np.sin(theta)


def _spectral(l1, l2, c, s) -> np.ndarray:
    """Symmetric tensor with eigenvalues l1 (along (c, s)) and l2 (perpendicular)."""
    cc, ss, cs = c * c, s * s, c * s
    return symmetric_matrix(l1 * cc + l2 * ss, l1 * ss + l2 * cc, (l1 - l2) * cs)


def _tensor_of_E(F, fun) -> np.ndarray:
    """Apply the scalar function ``fun`` (of the Green-Lagrange principal values) spectrally.

    The principal values of E are ``(lambda_i**2 - 1) / 2`` for the principal stretches
    ``lambda_i`` of ``U``; computing from E keeps full precision at small strain.
    """
    E = green_lagrange(F)
    l1, l2, c, s = _sym_eig(E[..., 0, 0], E[..., 1, 1], E[..., 0, 1])
    ok = _proper(F)
    f1 = np.full_like(l1, np.nan)
    f2 = np.full_like(l2, np.nan)
    f1[ok] = fun(l1[ok])
    f2[ok] = fun(l2[ok])
    return _spectral(f1, f2, c, s)


# ---------------------------------------------------------------------------------------------
# strain measures


def green_lagrange(F) -> np.ndarray:
    """Green-Lagrange strain ``E = (F^T F - I) / 2``.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)
        Deformation gradients.

    Returns
    -------
    ndarray, shape (..., 2, 2)
        Symmetric strain tensors (``[..., 0, 1]`` is tensor shear).

    References
    ----------
    .. [1] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000, ch. 2.
    """
    F = _as_F(F)
    H = _grad(F)
    Ht = np.swapaxes(H, -1, -2)
    # E = (H + H^T + H^T H) / 2, written so that small strains keep full precision
    return 0.5 * (H + Ht + Ht @ H)


def infinitesimal(F) -> np.ndarray:
    """Infinitesimal (small) strain ``eps = (grad u + grad u^T) / 2`` with ``grad u = F - I``.

    Not invariant under rigid rotation: a rotation by ``theta`` gives ``(cos theta - 1) I``.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (..., 2, 2)

    References
    ----------
    .. [1] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000, ch. 2.
    """
    H = _grad(_as_F(F))
    return 0.5 * (H + np.swapaxes(H, -1, -2))


def _inverse(F) -> np.ndarray:
    """Closed-form inverse of 2x2 matrices; NaN where ``det F <= 0``."""
    det = determinant(F)
    ok = det > 0.0
    inv = np.full_like(F, np.nan)
    d = det[ok]
    Fo = F[ok]
    inv_ok = np.empty_like(Fo)
    inv_ok[..., 0, 0] = Fo[..., 1, 1] / d
    inv_ok[..., 1, 1] = Fo[..., 0, 0] / d
    inv_ok[..., 0, 1] = -Fo[..., 0, 1] / d
    inv_ok[..., 1, 0] = -Fo[..., 1, 0] / d
    inv[ok] = inv_ok
    return inv


def euler_almansi(F) -> np.ndarray:
    """Euler-Almansi strain ``e = (I - F^-T F^-1) / 2 = F^-T E F^-1`` (spatial description).

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (..., 2, 2)
        NaN where ``det F <= 0``.

    References
    ----------
    .. [1] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000, ch. 2.
    """
    F = _as_F(F)
    Fi = _inverse(F)
    e = np.swapaxes(Fi, -1, -2) @ green_lagrange(F) @ Fi
    return 0.5 * (e + np.swapaxes(e, -1, -2))  # exact symmetry


def hencky(F) -> np.ndarray:
    """Hencky (logarithmic, true) strain ``H = ln U = ln(C) / 2`` with ``F = R U``.

    Computed from the closed-form eigen-decomposition of the symmetric 2x2 ``C = F^T F``
    (through its Green-Lagrange form, ``ln C = log1p(2 E)`` spectrally).

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (..., 2, 2)
        NaN where ``det F <= 0``.

    References
    ----------
    .. [1] H. Hencky, Z. Tech. Phys. 9 (1928) 215 (from memory).
    .. [2] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000, ch. 2.
    """
    return _tensor_of_E(_as_F(F), lambda e: 0.5 * np.log1p(2.0 * e))


def engineering(F) -> np.ndarray:
    """Engineering (Biot) strain ``U - I`` with ``F = R U``.

    For a uniaxial stretch ``lambda`` this is the familiar ``lambda - 1``.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (..., 2, 2)
        NaN where ``det F <= 0``.

    References
    ----------
    .. [1] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000, ch. 2.
    """
    # sqrt(1 + 2e) - 1 written without cancellation
    return _tensor_of_E(_as_F(F), lambda e: 2.0 * e / (np.sqrt(1.0 + 2.0 * e) + 1.0))


_FUNCTIONS = {
    "green-lagrange": green_lagrange,
    "infinitesimal": infinitesimal,
    "euler-almansi": euler_almansi,
    "hencky": hencky,
    "engineering": engineering,
}


def strain_tensor(F, measure: str = DEFAULT_MEASURE) -> np.ndarray:
    """Strain tensor of the named measure from deformation gradients.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)
        Deformation gradients ``I + grad u`` (reference configuration).
    measure : str
        A name accepted by :func:`canonical_measure`.

    Returns
    -------
    ndarray, shape (..., 2, 2)
        Symmetric tensors; ``[..., 0, 1]`` is tensor shear (half the engineering shear angle).
    """
    return _FUNCTIONS[canonical_measure(measure)](F)


# ---------------------------------------------------------------------------------------------
# rotation, area, principal and equivalent values


def polar_decomposition(F):
    """Right polar decomposition ``F = R U`` in closed form for 2x2 matrices.

    For ``det F > 0``, ``F + det(F) F^-T = R (U + det(U) U^-1) = tr(U) R`` (Cayley-Hamilton for
    2x2 ``U``), so ``R`` is the normalised ``[[F00 + F11, F01 - F10], [F10 - F01, F00 + F11]]``
    and ``U = R^T F``.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    R, U : ndarray, shape (..., 2, 2)
        Rotation and right stretch; NaN where ``det F <= 0``.

    References
    ----------
    .. [1] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000, sec. 2.6 (polar
       decomposition; from memory).
    """
    F = _as_F(F)
    p = F[..., 0, 0] + F[..., 1, 1]
    q = F[..., 1, 0] - F[..., 0, 1]
    ok = _proper(F)
    n = np.where(ok, np.hypot(p, q), np.nan)
    c, s = p / n, q / n
    R = np.empty_like(F)
    R[..., 0, 0] = c
    R[..., 1, 1] = c
    R[..., 0, 1] = -s
    R[..., 1, 0] = s
    U = np.swapaxes(R, -1, -2) @ F
    off = 0.5 * (U[..., 0, 1] + U[..., 1, 0])
    U[..., 0, 1] = off
    U[..., 1, 0] = off
    return R, U


def rotation_angle(F) -> np.ndarray:
    """Rigid rotation angle of ``R`` in ``F = R U``, in degrees.

    Positive from the +x axis towards the +y axis; with image coordinates (y downwards) that is
    clockwise on the screen.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (...)
        Angle in (-180, 180]; NaN where ``det F <= 0``.
    """
    F = _as_F(F)
    p = F[..., 0, 0] + F[..., 1, 1]
    q = F[..., 1, 0] - F[..., 0, 1]
    return np.where(_proper(F), np.degrees(np.arctan2(q, p)), np.nan)


def area_change(F) -> np.ndarray:
    """Relative area change ``det F - 1`` (in-plane).

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (...)
    """
    H = _grad(_as_F(F))
    # det(I + H) - 1 without cancellation at small strain
    return H[..., 0, 0] + H[..., 1, 1] + H[..., 0, 0] * H[..., 1, 1] - H[..., 0, 1] * H[..., 1, 0]


def principal_strains(xx, yy, xy):
    """In-plane principal values and direction of a symmetric 2-D strain tensor.

    Parameters
    ----------
    xx, yy, xy : array_like
        Tensor components; ``xy`` is TENSOR shear (half the engineering shear angle).

    Returns
    -------
    major, minor : ndarray
        Larger and smaller principal values.
    angle : ndarray
        Direction of the major principal value in degrees from the +x axis towards +y, in
        (-90, 90].
    """
    xx, yy, xy = (np.asarray(a, dtype=np.float64) for a in (xx, yy, xy))
    l1, l2, c, s = _sym_eig(xx, yy, xy)
    return l1, l2, np.degrees(np.arctan2(s, c))


def max_shear(xx, yy, xy) -> np.ndarray:
    """Maximum in-plane TENSOR shear strain, ``(major - minor) / 2``.

    The engineering shear angle is twice this value.

    Parameters
    ----------
    xx, yy, xy : array_like
        Tensor components (``xy`` tensor shear).

    Returns
    -------
    ndarray
    """
    xx, yy, xy = (np.asarray(a, dtype=np.float64) for a in (xx, yy, xy))
    return np.hypot(0.5 * (xx - yy), xy)


def equivalent_strain(xx, yy, xy, zz=None, *, measure="hencky",
                      out_of_plane="incompressible") -> np.ndarray:
    """Von Mises equivalent strain ``sqrt(2/3 eps_dev : eps_dev)``.

    The strain tensor is taken as 3-D with the in-plane components, ``zz`` out of plane and no
    out-of-plane shear; ``eps_dev = eps - tr(eps)/3 I``. Without ``zz`` it is ESTIMATED by
    default from incompressibility (thickness stretch ``1 / (lambda_1 lambda_2)``, in the
    given measure, as :func:`out_of_plane`), so a uniaxial plastic stretch ``lambda`` in Hencky
    strain gives ``eps_eq = ln lambda``; ``out_of_plane="zero"`` takes ``zz = 0`` instead
    (state either assumption when reporting).

    Parameters
    ----------
    xx, yy, xy : array_like
        In-plane components (``xy`` tensor shear).
    zz : array_like or None
        Out-of-plane component, when known.
    measure : str
        The measure of the components (for the incompressible ``zz``); default Hencky.
    out_of_plane : {"incompressible", "zero"}
        How ``zz`` is found when it is not given.

    Returns
    -------
    ndarray

    References
    ----------
    .. [1] R. Hill, The Mathematical Theory of Plasticity, Oxford, 1950 (equivalent strain
       definition; from memory).
    """
    xx, yy, xy = (np.asarray(a, dtype=np.float64) for a in (xx, yy, xy))
    if zz is None:
        if out_of_plane == "incompressible":
            zz = incompressible_zz(xx, yy, xy, measure)
        elif out_of_plane == "zero":
            zz = np.zeros_like(xx + yy + xy)
        else:
            raise ValueError(f"out_of_plane must be 'incompressible' or 'zero' (got "
                             f"{out_of_plane!r})")
    zz = np.asarray(zz, dtype=np.float64)
    m = (xx + yy + zz) / 3.0
    dd = (xx - m) ** 2 + (yy - m) ** 2 + (zz - m) ** 2 + 2.0 * xy ** 2
    return np.sqrt(2.0 / 3.0 * dd)


def incompressible_zz(xx, yy, xy, measure="hencky") -> np.ndarray:
    """Out-of-plane strain ESTIMATED from in-plane components by incompressibility.

    The in-plane stretch product ``lambda_1 lambda_2`` follows from the components of the
    given measure (``det(I + 2E)`` for Green-Lagrange, ``det(I - 2e)`` for Euler-Almansi,
    ``det(I + e)`` for engineering/infinitesimal, ``xx + yy`` for Hencky); the thickness
    stretch is its inverse, expressed in the same measure (see :func:`out_of_plane`).

    Returns
    -------
    ndarray
        NaN where the components give no positive stretch product.
    """
    name = canonical_measure(measure)
    xx, yy, xy = (np.asarray(a, dtype=np.float64) for a in (xx, yy, xy))
    if name == "hencky":
        return -(xx + yy)
    with np.errstate(invalid="ignore", divide="ignore"):
        if name == "green-lagrange":
            sq = (1 + 2 * xx) * (1 + 2 * yy) - 4 * xy * xy       # (lam1 lam2)^2
            lam3 = 1.0 / np.sqrt(np.where(sq > 0, sq, np.nan))
        elif name == "euler-almansi":
            inv = (1 - 2 * xx) * (1 - 2 * yy) - 4 * xy * xy      # (lam1 lam2)^-2
            lam3 = np.sqrt(np.where(inv > 0, inv, np.nan))
        else:
            det = (1 + xx) * (1 + yy) - xy * xy                  # lam1 lam2
            lam3 = 1.0 / np.where(det > 0, det, np.nan)
        return _STRETCH[name](lam3)


_STRETCH = {  # strain of a pure stretch lam along one axis, per measure
    "green-lagrange": lambda lam: 0.5 * (lam * lam - 1.0),
    "infinitesimal": lambda lam: lam - 1.0,
    "euler-almansi": lambda lam: 0.5 * (1.0 - 1.0 / (lam * lam)),
    "engineering": lambda lam: lam - 1.0,
}


def out_of_plane(F, measure: str = DEFAULT_MEASURE) -> np.ndarray:
    """Out-of-plane normal strain ``zz`` ESTIMATED by assuming incompressibility.

    ASSUMPTION: the material keeps its volume (plastic incompressibility, ``det F_3D = 1``) and
    the out-of-plane direction is a principal direction, so the thickness stretch is
    ``lambda_3 = 1 / det F``. Then ``zz`` is the chosen measure of that stretch:
    ``(lambda_3**2 - 1)/2`` (Green-Lagrange), ``(1 - lambda_3**-2)/2`` (Euler-Almansi),
    ``lambda_3 - 1`` (engineering and infinitesimal) and ``ln lambda_3 = -(H_xx + H_yy)``
    (Hencky). Not valid for elastic strains of compressible materials.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)
    measure : str

    Returns
    -------
    ndarray, shape (...)
        NaN where ``det F <= 0``.
    """
    name = canonical_measure(measure)
    F = _as_F(F)
    a = area_change(F)
    ok = a > -1.0
    out = np.full(a.shape, np.nan)
    if name == "hencky":
        out[ok] = -np.log1p(a[ok])  # ln(1/det F) = -tr ln U
    else:
        out[ok] = _STRETCH[name](1.0 / (1.0 + a[ok]))
    return out


# ---------------------------------------------------------------------------------------------
# the nonlinear share of Green-Lagrange


def nonlinear_part(F) -> np.ndarray:
    """Quadratic term of Green-Lagrange strain, ``Q = (grad u)^T (grad u) / 2``.

    ``E = eps + Q`` exactly, with ``eps`` the infinitesimal strain.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)

    Returns
    -------
    ndarray, shape (..., 2, 2)
    """
    H = _grad(_as_F(F))
    return 0.5 * (np.swapaxes(H, -1, -2) @ H)


def _frobenius(T) -> np.ndarray:
    return np.sqrt(T[..., 0, 0] ** 2 + T[..., 1, 1] ** 2 + T[..., 0, 1] ** 2 + T[..., 1, 0] ** 2)


def nonlinear_share(F, *, floor: float = 1e-9) -> np.ndarray:
    """Size of the quadratic term of Green-Lagrange relative to the linear (infinitesimal) part.

    ``share = ||Q||_F / ||eps||_F`` per point with Frobenius norms (see :func:`nonlinear_part`).
    A share of 0.01 means the small-strain tensor misses about 1 % of the strain.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)
    floor : float
        Where ``||eps||_F <= floor`` the ratio is undefined and returned as NaN. The default
        1e-9 lies far below any measurable strain (DIC noise floors are 1e-5 to 1e-4), so it only
        guards the division.

    Returns
    -------
    ndarray, shape (...)
    """
    F = _as_F(F)
    lin = _frobenius(infinitesimal(F))
    quad = _frobenius(nonlinear_part(F))
    ok = lin > floor
    out = np.full(lin.shape, np.nan)
    out[ok] = quad[ok] / lin[ok]
    return out


def nonlinear_mask(F, *, threshold: float = 0.01, floor: float = 1e-9) -> np.ndarray:
    """Points where the nonlinear share exceeds ``threshold`` (default 1 %).

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)
    threshold : float
        Relative share above which a point is flagged.
    floor : float
        As in :func:`nonlinear_share`; points with an undefined share are not flagged.

    Returns
    -------
    ndarray of bool, shape (...)
    """
    share = nonlinear_share(F, floor=floor)
    return np.where(np.isnan(share), False, share > threshold)


def measure_difference(F, first: str, second: str) -> np.ndarray:
    """Difference ``first - second`` of two strain measures from the same gradients.

    Parameters
    ----------
    F : array_like, shape (..., 2, 2)
    first, second : str
        Measure names (see :func:`canonical_measure`).

    Returns
    -------
    ndarray, shape (..., 2, 2)
    """
    return strain_tensor(F, first) - strain_tensor(F, second)
