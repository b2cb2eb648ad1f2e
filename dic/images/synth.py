"""Exact synthetic speckle images under a known displacement field.

The speckle pattern is a sum of Gaussian blobs on a flat background (Zhou & Goodson 2001),

.. math:: f(\\mathbf X) = b + \\sum_k a_k \\exp(-|\\mathbf X - \\mathbf c_k|^2 / r_k^2),

an analytic function of the reference position :math:`\\mathbf X`. The deformed image is
:math:`g(\\mathbf x) = f(\\mathbf X)` with :math:`\\mathbf x = \\mathbf X + \\mathbf u(\\mathbf X)`:
for every pixel the reference position is found by Newton's method and the formula is evaluated
there, so no stored image is ever interpolated. Pixels are point samples at the pixel centres
(no integration over the pixel area).

Coordinates follow the project convention: ``x`` is the column, ``y`` the row (downwards),
origin at the centre of the top-left pixel; ``u`` is along ``x`` and ``v`` along ``y``.

Each blob is truncated at four of its radii, where it has fallen to
:math:`e^{-16} \\approx 1.1\\times10^{-7}` of its peak; the neglected tail of one blob holds the
same fraction :math:`e^{-16}` of its integral. Summed over all blobs, the neglected intensity at a
point is on average ``density * mean(amplitude) * exp(-16)``, about 1e-5 grey levels for the
default pattern -- far below one grey level and below any noise the matcher will see.

numba is imported here (the kernel), so this module is loaded only on use (``dic.images.synth``).

References
----------
.. [1] P. Zhou and K. E. Goodson, "Subpixel displacement and deformation gradient measurement
   using digital image/speckle correlation (DISC)", Opt. Eng. 40(8) (2001) 1613-1620.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

__all__ = [
    "Speckle",
    "Displacement",
    "make_speckle",
    "render",
    "inverse_map",
    "evaluate",
    "translation",
    "homogeneous",
    "sinusoid",
    "from_function",
    "tensile_neck",
]

#: blobs are cut at this many of their own radii (exp(-16) of the peak, see module docstring)
CUTOFF_RADII = 4.0
#: tolerance on |X + u(X) - x| (pixels) for the inverse map
_TOL = 1e-10
_MAX_ITER = 60
_MAX_HALVINGS = 30
#: central-difference step (pixels) for Jacobians of fields without an analytic one
_FD_STEP = 1e-4


# --------------------------------------------------------------------------------------------
# the pattern
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Speckle:
    """A Gaussian-blob speckle pattern in reference coordinates.

    Attributes
    ----------
    centres : ndarray, shape (N, 2)
        Blob centres as ``(x, y)`` = (column, row), in reference pixels.
    radius : ndarray, shape (N,)
        Blob radii ``r_k`` (the blob is ``a_k exp(-d^2 / r_k^2)``), pixels.
    amplitude : ndarray, shape (N,)
        Blob peak heights ``a_k`` above the background, grey levels.
    background : float
        Flat background level ``b``, grey levels.
    """

    centres: np.ndarray
    radius: np.ndarray
    amplitude: np.ndarray
    background: float

    @property
    def count(self) -> int:
        """Number of blobs."""
        return int(np.shape(self.radius)[0])


def _check_shape(shape, name="shape"):
    try:
        rows, cols = shape
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be (rows, cols), two positive integers; got {shape!r}")
    out = []
    for n in (rows, cols):
        if isinstance(n, bool) or not isinstance(n, numbers.Integral) or n < 1:
            raise ValueError(f"{name} must be (rows, cols), two positive integers; got {shape!r}")
        out.append(int(n))
    return tuple(out)


def _finite_float(value, name, *, positive=False, nonnegative=False):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a finite number; got {value!r}")
    if not math.isfinite(v):
        raise ValueError(f"{name} must be a finite number; got {value!r}")
    if positive and not v > 0:
        raise ValueError(f"{name} must be > 0; got {value!r}")
    if nonnegative and not v >= 0:
        raise ValueError(f"{name} must be >= 0; got {value!r}")
    return v


def make_speckle(shape, *, radius=2.5, density=0.6, contrast=180.0, background=40.0, seed=0,
                 margin=None, radius_spread=0.2):
    """Random Gaussian-blob speckle pattern covering an image and a margin around it.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)`` of the images the pattern will be rendered on.
    radius : float, optional
        Mean blob radius ``r`` in pixels (blob ``a exp(-d^2 / r^2)``, so the blob's
        1/e-diameter is ``2 r``).
    density : float, optional
        Fraction of the area covered: the number of blobs is
        ``N = round(density * area / (pi * radius**2))`` over the image plus margin.
    contrast : float, optional
        Intended span of the image above the background, grey levels. Blob amplitudes are
        ``s * contrast * U(0.6, 1.0)``, with ``s`` set so that the mean plus five standard
        deviations of the intensity (Campbell's theorem for a sum of randomly placed blobs, see
        Notes) equals ``background + contrast``. A negative value gives dark speckles on a bright
        background.
    background : float, optional
        Flat background level, grey levels.
    seed : int or numpy.random.Generator or None, optional
        Seed for :func:`numpy.random.default_rng`; the same seed gives the same pattern.
    margin : float, optional
        Width in pixels of the band around the image that is also scattered with blobs, so that
        material moved into view by the displacement is still patterned. Default
        ``0.7 * max(shape) + 5 * radius``: enough for about 60 % stretch or compression about any
        point of the image together with 50 px of rigid motion.
    radius_spread : float, optional
        Relative spread of the radii: each radius is ``radius * U(1 - spread, 1 + spread)``;
        ``0 <= radius_spread < 1``.

    Returns
    -------
    Speckle
        Centres uniformly random over ``[-margin, cols - 1 + margin] x [-margin, rows - 1 +
        margin]``. The float image is never clipped; with the defaults about 99.9 % of the pixels
        lie between 40 and 220 grey levels and some 0.01 % (piles of overlapping blobs) above 255.

    Notes
    -----
    Blob centres form a uniform point field of intensity ``lam = N / area``. By Campbell's
    theorem the intensity has mean ``b + lam * E[a pi r^2]`` and variance
    ``lam * E[a^2 pi r^2 / 2]`` (the integrals of one blob and of its square). With
    ``lam = density / (pi radius^2)`` and independent ``a``, ``r`` these are
    ``b + density * E[a] * E[r^2] / radius^2`` and ``density * E[a^2] * E[r^2] / (2 radius^2)``.
    With many overlapping blobs the sum is far from Gaussian (long bright tail), hence five
    standard deviations for the span.

    References
    ----------
    .. [1] P. Zhou and K. E. Goodson, Opt. Eng. 40(8) (2001) 1613-1620.
    """
    rows, cols = _check_shape(shape)
    radius = _finite_float(radius, "radius", positive=True)
    density = _finite_float(density, "density", positive=True)
    contrast = _finite_float(contrast, "contrast")
    if contrast == 0.0:
        raise ValueError("contrast must be non-zero; give the blob amplitude in grey levels")
    background = _finite_float(background, "background")
    radius_spread = _finite_float(radius_spread, "radius_spread", nonnegative=True)
    if radius_spread >= 1.0:
        raise ValueError(f"radius_spread must be in [0, 1); got {radius_spread!r}")
    if margin is None:
        margin = 0.7 * max(rows, cols) + 5.0 * radius
    margin = _finite_float(margin, "margin", nonnegative=True)

    width = cols - 1 + 2 * margin
    height = rows - 1 + 2 * margin
    area = max(width, 1.0) * max(height, 1.0)
    n = int(round(density * area / (math.pi * radius**2)))
    if n < 1:
        raise ValueError("density is too small for this image: no blob would be placed; "
                         "raise density or radius")
    if n > 50_000_000:
        raise ValueError(f"the pattern would hold {n} blobs; lower margin or density")

    rng = np.random.default_rng(seed)
    cx = rng.uniform(-margin, cols - 1 + margin, n)
    cy = rng.uniform(-margin, rows - 1 + margin, n)
    r = radius * rng.uniform(1.0 - radius_spread, 1.0 + radius_spread, n)
    a = contrast * _amplitude_scale(density, radius_spread) * rng.uniform(0.6, 1.0, n)
    return Speckle(centres=np.column_stack([cx, cy]), radius=r, amplitude=a,
                   background=background)


def _amplitude_scale(density, radius_spread):
    """``s`` with ``mean + 5 std = s`` per unit contrast (Campbell's theorem, see make_speckle)."""
    e_u, e_u2 = 0.8, 0.8**2 + 0.4**2 / 12.0          # moments of U(0.6, 1.0)
    e_r2 = 1.0 + radius_spread**2 / 3.0              # E[r^2] / radius^2 for U(1 -+ spread)
    mean = density * e_u * e_r2
    std = math.sqrt(density * e_u2 * e_r2 / 2.0)
    return 1.0 / (mean + 5.0 * std)


def _check_pattern(pat):
    if not isinstance(pat, Speckle):
        raise ValueError(f"pattern must be a Speckle (see make_speckle); got {type(pat).__name__}")
    c = np.asarray(pat.centres, dtype=np.float64)
    r = np.asarray(pat.radius, dtype=np.float64)
    a = np.asarray(pat.amplitude, dtype=np.float64)
    if c.ndim != 2 or c.shape[1] != 2:
        raise ValueError(f"pattern.centres must have shape (N, 2); got {c.shape}")
    n = c.shape[0]
    if r.shape != (n,) or a.shape != (n,):
        raise ValueError("pattern.radius and pattern.amplitude must have shape (N,) matching "
                         f"centres; got {r.shape} and {a.shape} for N = {n}")
    if not (np.all(np.isfinite(c)) and np.all(np.isfinite(a))):
        raise ValueError("pattern centres and amplitudes must be finite")
    if not np.all(np.isfinite(r) & (r > 0)):
        raise ValueError("pattern.radius must be finite and > 0 for every blob")
    b = _finite_float(pat.background, "pattern.background")
    return c, r, a, b


# --------------------------------------------------------------------------------------------
# displacement fields
# --------------------------------------------------------------------------------------------
class Displacement:
    """A known displacement field: ``u, v = field(X, Y)`` at reference positions.

    Call it with arrays of reference coordinates ``X`` (column) and ``Y`` (row); it returns
    float64 arrays ``u`` and ``v`` of the broadcast shape. ``field.jacobian(X, Y)`` returns
    ``(du/dX, du/dY, dv/dX, dv/dY)``, so the deformation gradient is ``F = I + grad u``.
    Build one with :func:`translation`, :func:`homogeneous`, :func:`sinusoid` or
    :func:`from_function`.
    """

    def __init__(self, fu, fv, jacobian=None, *, label="field"):
        self._fu = fu
        self._fv = fv
        self._jac = jacobian
        self.label = label

    def __repr__(self):
        return f"Displacement({self.label})"

    def __call__(self, X, Y):
        X = np.asarray(X, dtype=np.float64)
        Y = np.asarray(Y, dtype=np.float64)
        shape = np.broadcast_shapes(X.shape, Y.shape)
        u = np.broadcast_to(np.asarray(self._fu(X, Y), dtype=np.float64), shape)
        v = np.broadcast_to(np.asarray(self._fv(X, Y), dtype=np.float64), shape)
        return u.copy(), v.copy()

    def jacobian(self, X, Y):
        """Displacement gradient ``(du/dX, du/dY, dv/dX, dv/dY)`` at ``(X, Y)``.

        Analytic where the field was built with one, otherwise central differences with a
        step of 1e-4 px (truncation error ~2e-9 * third derivative, rounding ~2e-12 * |u|).
        """
        X = np.asarray(X, dtype=np.float64)
        Y = np.asarray(Y, dtype=np.float64)
        shape = np.broadcast_shapes(X.shape, Y.shape)
        if self._jac is None:
            return _fd_jacobian(self, X, Y)
        return tuple(np.broadcast_to(np.asarray(g, dtype=np.float64), shape).copy()
                     for g in self._jac(X, Y))


def _fd_jacobian(field, X, Y):
    h = _FD_STEP
    up, vp = field(X + h, Y)
    um, vm = field(X - h, Y)
    uq, vq = field(X, Y + h)
    un, vn = field(X, Y - h)
    s = 0.5 / h
    return (up - um) * s, (uq - un) * s, (vp - vm) * s, (vq - vn) * s


def translation(dx, dy):
    """Rigid translation ``u = dx``, ``v = dy`` everywhere.

    Parameters
    ----------
    dx, dy : float
        Displacement along ``x`` (columns) and ``y`` (rows), pixels.

    Returns
    -------
    Displacement
    """
    dx = _finite_float(dx, "dx")
    dy = _finite_float(dy, "dy")
    def const(value):
        return lambda X, Y: np.full(np.broadcast_shapes(X.shape, Y.shape), value)

    zero = const(0.0)
    return Displacement(const(dx), const(dy), lambda X, Y: (zero(X, Y),) * 4,
                        label=f"translation({dx!r}, {dy!r})")


def homogeneous(F, *, centre=(0.0, 0.0), offset=(0.0, 0.0)):
    """Homogeneous deformation ``u(X) = (F - I) (X - centre) + offset``.

    Parameters
    ----------
    F : array_like, shape (2, 2)
        Deformation gradient ``[[dx/dX, dx/dY], [dy/dX, dy/dY]]``; ``det F`` must be > 0.
    centre : (float, float), optional
        ``(x, y)`` of the point that moves only by ``offset``.
    offset : (float, float), optional
        Rigid displacement ``(u, v)`` added everywhere, pixels.

    Returns
    -------
    Displacement
        With the constant analytic Jacobian ``F - I``.
    """
    F = np.asarray(F, dtype=np.float64)
    if F.shape != (2, 2) or not np.all(np.isfinite(F)):
        raise ValueError(f"F must be a finite 2x2 deformation gradient; got shape {F.shape}")
    if not np.linalg.det(F) > 0:
        raise ValueError("F must have a positive determinant (a material cannot fold or "
                         f"vanish); got det F = {np.linalg.det(F):g}")
    c = np.asarray(centre, dtype=np.float64)
    o = np.asarray(offset, dtype=np.float64)
    if c.shape != (2,) or o.shape != (2,) or not (np.all(np.isfinite(c))
                                                  and np.all(np.isfinite(o))):
        raise ValueError("centre and offset must each be two finite numbers (x, y)")
    G = F - np.eye(2)
    (g00, g01), (g10, g11) = G

    def fu(X, Y):
        return g00 * (X - c[0]) + g01 * (Y - c[1]) + o[0]

    def fv(X, Y):
        return g10 * (X - c[0]) + g11 * (Y - c[1]) + o[1]

    def jac(X, Y):
        shape = np.broadcast_shapes(X.shape, Y.shape)
        return tuple(np.full(shape, g) for g in (g00, g01, g10, g11))

    return Displacement(fu, fv, jac, label=f"homogeneous(F={F.tolist()}, centre={c.tolist()}, "
                                           f"offset={o.tolist()})")


def tensile_neck(strain, *, centre, neck_strain=0.0, neck_width=40.0, lateral="volume",
                 offset=(0.0, 0.0)):
    """Uniaxial stretch along x with a diffuse neck: the field of a tensile test.

    The engineering strain along the axis is ``e(X) = strain + neck_strain sech^2((X - xc) / w)``
    so that ``u = strain (X - xc) + neck_strain w tanh((X - xc) / w) + offset_x``. Across the
    axis the specimen contracts as if its volume (area, in the plane) were kept per unit length:
    ``dy/dY = (1 + e)^(-1/2)`` (``lateral="volume"``; plastic incompressibility with equal
    width and thickness strains), so ``v = ((1 + e)^(-1/2) - 1) (Y - yc) + offset_y``.

    Parameters
    ----------
    strain : float
        Uniform engineering strain along x (> -1).
    centre : (float, float)
        ``(xc, yc)``: the neck centre, and the point that moves only by ``offset``.
    neck_strain : float
        Extra engineering strain at the centre of the neck.
    neck_width : float
        Width parameter ``w`` of the neck (px).
    lateral : {"volume", "none"}
        Lateral contraction model.
    offset : (float, float)
        Rigid displacement added everywhere (crosshead motion).

    Returns
    -------
    Displacement
        With an analytic Jacobian.
    """
    xc, yc = (float(c) for c in centre)
    e0, e1, w = float(strain), float(neck_strain), float(neck_width)
    if not (e0 > -1 and e0 + e1 > -1 and w > 0):
        raise ValueError("tensile_neck needs strain > -1, strain + neck_strain > -1 and "
                         "neck_width > 0")
    if lateral not in ("volume", "none"):
        raise ValueError(f"lateral must be 'volume' or 'none', got {lateral!r}")
    ox, oy = (float(o) for o in offset)

    def e(X):
        return e0 + e1 / np.cosh((X - xc) / w) ** 2

    def de(X):
        t = np.tanh((X - xc) / w)
        return -2.0 * e1 / w * t / np.cosh((X - xc) / w) ** 2

    def fu(X, Y):
        return e0 * (X - xc) + e1 * w * np.tanh((X - xc) / w) + ox

    def fv(X, Y):
        if lateral == "none":
            return np.zeros_like(X) + oy
        return ((1.0 + e(X)) ** -0.5 - 1.0) * (Y - yc) + oy

    def jac(X, Y):
        dudx = e(X)
        dudy = np.zeros_like(X * Y)
        if lateral == "none":
            z = np.zeros_like(X * Y)
            return dudx + z, dudy, z, z
        dvdx = -0.5 * (1.0 + e(X)) ** -1.5 * de(X) * (Y - yc)
        dvdy = (1.0 + e(X)) ** -0.5 - 1.0 + 0.0 * Y
        return dudx + 0.0 * Y, dudy, dvdx, dvdy

    return Displacement(fu, fv, jac, label=f"tensile_neck(strain={e0}, neck_strain={e1}, "
                                           f"neck_width={w})")


def sinusoid(amplitude, period, *, direction="x"):
    """Sinusoidal displacement ``u = A sin(2 pi X / period)`` (or ``v = A sin(2 pi Y / period)``).

    Parameters
    ----------
    amplitude : float
        ``A``, pixels.
    period : float
        Wavelength in reference pixels, > 0.
    direction : {"x", "y"}, optional
        ``"x"``: ``u`` varies with ``X`` and ``v = 0``; ``"y"``: ``v`` varies with ``Y`` and
        ``u = 0``. The map folds where ``2 pi A / period > 1``; :func:`render` then refuses it.

    Returns
    -------
    Displacement
        With its analytic Jacobian.
    """
    A = _finite_float(amplitude, "amplitude")
    P = _finite_float(period, "period", positive=True)
    if direction not in ("x", "y"):
        raise ValueError(f"direction must be 'x' or 'y'; got {direction!r}")
    k = 2.0 * math.pi / P

    def wave(X, Y):
        return A * np.sin(k * (X if direction == "x" else Y))

    def slope(X, Y):
        return A * k * np.cos(k * (X if direction == "x" else Y))

    def zero(X, Y):
        return np.zeros(np.broadcast_shapes(X.shape, Y.shape))

    if direction == "x":
        return Displacement(wave, zero, lambda X, Y: (slope(X, Y), zero(X, Y), zero(X, Y),
                                                      zero(X, Y)),
                            label=f"sinusoid({A!r}, {P!r}, direction='x')")
    return Displacement(zero, wave, lambda X, Y: (zero(X, Y), zero(X, Y), zero(X, Y),
                                                  slope(X, Y)),
                        label=f"sinusoid({A!r}, {P!r}, direction='y')")


def from_function(fu, fv, *, jacobian=None):
    """Wrap two vectorised callables ``fu(X, Y) -> u`` and ``fv(X, Y) -> v``.

    Parameters
    ----------
    fu, fv : callable
        Elementwise functions of reference arrays ``X``, ``Y`` (pixels) giving ``u`` and ``v``.
    jacobian : callable, optional
        ``jacobian(X, Y) -> (du/dX, du/dY, dv/dX, dv/dY)``; central differences if omitted.

    Returns
    -------
    Displacement
    """
    if not callable(fu) or not callable(fv):
        raise ValueError("fu and fv must be callables (X, Y) -> array")
    if jacobian is not None and not callable(jacobian):
        raise ValueError("jacobian must be a callable (X, Y) -> (du/dX, du/dY, dv/dX, dv/dY) "
                         "or None")
    return Displacement(fu, fv, jacobian, label="from_function")


# --------------------------------------------------------------------------------------------
# inverse map and rendering
# --------------------------------------------------------------------------------------------
def _eval_field(displacement, X, Y):
    out = displacement(X, Y)
    try:
        u, v = out
    except (TypeError, ValueError):
        raise ValueError("displacement must return a pair (u, v) of arrays")
    u = np.broadcast_to(np.asarray(u, dtype=np.float64), X.shape)
    v = np.broadcast_to(np.asarray(v, dtype=np.float64), X.shape)
    if not (np.all(np.isfinite(u)) and np.all(np.isfinite(v))):
        raise ValueError("displacement returned non-finite values; give a field defined over "
                         "the whole image")
    return u, v


def _eval_jacobian(displacement, X, Y):
    jac = getattr(displacement, "jacobian", None)
    if jac is None:
        h = _FD_STEP
        up, vp = _eval_field(displacement, X + h, Y)
        um, vm = _eval_field(displacement, X - h, Y)
        uq, vq = _eval_field(displacement, X, Y + h)
        un, vn = _eval_field(displacement, X, Y - h)
        s = 0.5 / h
        g = ((up - um) * s, (uq - un) * s, (vp - vm) * s, (vq - vn) * s)
    else:
        g = jac(X, Y)
        if len(g) != 4:
            raise ValueError("displacement.jacobian must return (du/dX, du/dY, dv/dX, dv/dY)")
        g = tuple(np.broadcast_to(np.asarray(a, dtype=np.float64), X.shape) for a in g)
    if not all(np.all(np.isfinite(a)) for a in g):
        raise ValueError("displacement gradient is non-finite; give a smooth field")
    return g


def _fold_error(X, Y, det):
    i = int(np.argmin(det))
    return ValueError(f"displacement field folds (det F = {det[i]:.3g} <= 0 at reference "
                      f"X = {X[i]:.6g}, Y = {Y[i]:.6g}); give a one-to-one field")


def inverse_map(displacement, x, y):
    """Reference positions ``X`` whose material lands on ``x``: solve ``X + u(X) = x``.

    Newton's method from ``X = x`` with step halving, to ``|X + u(X) - x| < 1e-10`` px, using
    ``displacement.jacobian`` when present and central differences otherwise.

    Parameters
    ----------
    displacement : callable
        ``(X, Y) -> (u, v)``, vectorised over 1-D arrays (see :class:`Displacement`).
    x, y : array_like
        Current (deformed) positions, column and row, pixels; broadcast together.

    Returns
    -------
    X, Y : ndarray
        Reference positions, float64, of the broadcast shape.

    Raises
    ------
    ValueError
        If the iteration does not converge or the field folds (``det F <= 0`` on the way or at
        the solution), or the field returns non-finite values.
    """
    if not callable(displacement):
        raise ValueError("displacement must be a callable (X, Y) -> (u, v) or None")
    x, y = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
    shape = x.shape
    x = x.ravel()
    y = y.ravel()
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ValueError("x and y must be finite")
    X = x.copy()
    Y = y.copy()
    u, v = _eval_field(displacement, X, Y)
    rx = X + u - x
    ry = Y + v - y
    norm = np.hypot(rx, ry)
    active = np.flatnonzero(norm >= _TOL)
    for _ in range(_MAX_ITER):
        if active.size == 0:
            break
        Xa, Ya = X[active], Y[active]
        rxa, rya, na = rx[active], ry[active], norm[active]
        a, b, c, d = _eval_jacobian(displacement, Xa, Ya)
        a = a + 1.0
        d = d + 1.0
        det = a * d - b * c
        if not np.all(det > 0):
            i = int(np.argmin(det))
            raise ValueError(f"inverse map failed at x = {x[active[i]]:.6g}, "
                             f"y = {y[active[i]]:.6g}: the iteration reached reference "
                             f"X = {Xa[i]:.6g}, Y = {Ya[i]:.6g} where det F = {det[i]:.3g} <= 0 "
                             "(the field folds, or no material point lands on this pixel); "
                             "give a one-to-one displacement field")
        sx = (d * rxa - b * rya) / det
        sy = (a * rya - c * rxa) / det
        t = np.ones_like(sx)
        todo = np.arange(active.size)
        Xn, Yn = Xa.copy(), Ya.copy()
        rxn, ryn, nn = rxa.copy(), rya.copy(), na.copy()
        for _h in range(_MAX_HALVINGS + 1):
            Xt = Xa[todo] - t[todo] * sx[todo]
            Yt = Ya[todo] - t[todo] * sy[todo]
            ut, vt = _eval_field(displacement, Xt, Yt)
            rxt = Xt + ut - x[active[todo]]
            ryt = Yt + vt - y[active[todo]]
            nt = np.hypot(rxt, ryt)
            ok = (nt < na[todo]) | (nt < _TOL)
            sel = todo[ok]
            Xn[sel], Yn[sel] = Xt[ok], Yt[ok]
            rxn[sel], ryn[sel], nn[sel] = rxt[ok], ryt[ok], nt[ok]
            todo = todo[~ok]
            if todo.size == 0:
                break
            t[todo] *= 0.5
        X[active], Y[active] = Xn, Yn
        rx[active], ry[active], norm[active] = rxn, ryn, nn
        if todo.size:
            # no step along the Newton direction lowers the residual: a stationary point of a
            # folding map, or a field too rough for Newton
            i = active[todo[0]]
            raise ValueError(f"inverse map did not converge at x = {x[i]:.6g}, y = {y[i]:.6g} "
                             f"(residual {norm[i]:.3g} px); the displacement field is probably "
                             "not one-to-one")
        active = active[nn >= _TOL]
    if active.size:
        i = active[int(np.argmax(norm[active]))]
        raise ValueError(f"inverse map did not converge in {_MAX_ITER} iterations at "
                         f"x = {x[i]:.6g}, y = {y[i]:.6g} (residual {norm[i]:.3g} px); give a "
                         "smooth one-to-one displacement field")
    a, b, c, d = _eval_jacobian(displacement, X, Y)
    det = (1.0 + a) * (1.0 + d) - b * c
    if not np.all(det > 0):
        raise _fold_error(X, Y, det)
    return X.reshape(shape), Y.reshape(shape)


def _cell_table(c, r):
    """Sort blobs into square cells of side 4 * max radius; return sorted arrays and table."""
    cell = CUTOFF_RADII * float(r.max())
    x0 = float(c[:, 0].min())
    y0 = float(c[:, 1].min())
    ix = np.floor((c[:, 0] - x0) / cell).astype(np.int64)
    iy = np.floor((c[:, 1] - y0) / cell).astype(np.int64)
    ncx = int(ix.max()) + 1
    ncy = int(iy.max()) + 1
    cid = iy * ncx + ix
    order = np.argsort(cid, kind="stable")
    start = np.searchsorted(cid[order], np.arange(ncx * ncy + 1)).astype(np.int64)
    return order, start, x0, y0, cell, ncx, ncy


def evaluate(pattern, X, Y):
    """The reference intensity ``f(X, Y)`` of a pattern at arbitrary reference points.

    Parameters
    ----------
    pattern : Speckle
    X, Y : array_like
        Reference positions (column, row), pixels; broadcast together.

    Returns
    -------
    ndarray
        ``b + sum_k a_k exp(-|X - c_k|^2 / r_k^2)``, each blob cut at ``4 r_k``.

    References
    ----------
    .. [1] P. Zhou and K. E. Goodson, Opt. Eng. 40(8) (2001) 1613-1620.
    """
    from dic.images._synth_kernel import blob_sum

    c, r, a, b = _check_pattern(pattern)
    X, Y = np.broadcast_arrays(np.asarray(X, dtype=np.float64), np.asarray(Y, dtype=np.float64))
    shape = X.shape
    px = np.ascontiguousarray(X.ravel())
    py = np.ascontiguousarray(Y.ravel())
    if not (np.all(np.isfinite(px)) and np.all(np.isfinite(py))):
        raise ValueError("X and Y must be finite")
    out = np.empty(px.size)
    if c.shape[0] == 0:
        out[:] = b
        return out.reshape(shape)
    order, start, x0, y0, cell, ncx, ncy = _cell_table(c, r)
    cs = c[order]
    rs = r[order]
    blob_sum(px, py, np.ascontiguousarray(cs[:, 0]), np.ascontiguousarray(cs[:, 1]),
             1.0 / rs**2, (CUTOFF_RADII * rs) ** 2, np.ascontiguousarray(a[order]), start,
             x0, y0, cell, ncx, ncy, b, out)
    return out.reshape(shape)


_DTYPES = {np.dtype(np.float64): None, np.dtype(np.float32): None,
           np.dtype(np.uint8): 8, np.dtype(np.uint16): 16}


def render(pattern, shape, displacement=None, *, noise=0.0, bits=None, seed=None, dtype=None):
    """Render the deformed image of a speckle pattern, exactly, on a pixel grid.

    Each pixel centre ``x`` (``x`` = column, ``y`` = row) is mapped back to the reference position
    ``X`` with ``X + u(X) = x`` (:func:`inverse_map`, to 1e-10 px) and the analytic pattern is
    evaluated there: ``g(x) = f(X)``. Pixels are point samples.

    Parameters
    ----------
    pattern : Speckle
        From :func:`make_speckle`.
    shape : tuple of int
        ``(rows, cols)`` of the image.
    displacement : callable, optional
        Forward Lagrangian displacement ``(X, Y) -> (u, v)`` of the material point at reference
        position ``(X, Y)``, vectorised over 1-D arrays; a ``.jacobian(X, Y)`` attribute returning
        ``(du/dX, du/dY, dv/dX, dv/dY)`` is used if present (central differences otherwise).
        ``None`` renders the reference image.
    noise : float, optional
        Standard deviation of additive Gaussian noise, grey levels.
    bits : int, optional
        If given (1 to 16), round to integers and clip to ``[0, 2**bits - 1]``, as a camera of
        that bit depth would. Defaults to the width of ``dtype`` for an integer ``dtype``.
    seed : int or numpy.random.Generator or None, optional
        Seed for the noise (:func:`numpy.random.default_rng`).
    dtype : {None, float64, float32, uint8, uint16}, optional
        Type of the returned array; ``None`` means float64. An integer type needs ``bits`` no
        wider than itself.

    Returns
    -------
    ndarray, shape ``shape``

    Raises
    ------
    ValueError
        For invalid arguments, or a displacement field that folds or whose inverse does not
        converge.

    Notes
    -----
    Blobs are cut at four radii (``exp(-16)`` of the peak); a numba kernel sums, for each pixel,
    only the blobs of the 3 x 3 cells (side = the largest cut radius) around its reference
    position.

    References
    ----------
    .. [1] P. Zhou and K. E. Goodson, "Subpixel displacement and deformation gradient
       measurement using digital image/speckle correlation (DISC)", Opt. Eng. 40(8) (2001)
       1613-1620.
    """
    rows, cols = _check_shape(shape)
    _check_pattern(pattern)
    noise = _finite_float(noise, "noise", nonnegative=True)
    if dtype is None:
        out_dtype = np.dtype(np.float64)
    else:
        try:
            out_dtype = np.dtype(dtype)
        except TypeError:
            raise ValueError(f"dtype must be one of float64, float32, uint8, uint16; got {dtype!r}")
        if out_dtype not in _DTYPES:
            raise ValueError(f"dtype must be one of float64, float32, uint8, uint16; got {dtype!r}")
    width = _DTYPES[out_dtype]
    if bits is not None:
        if isinstance(bits, bool) or not isinstance(bits, numbers.Integral) or not 1 <= bits <= 16:
            raise ValueError(f"bits must be an integer from 1 to 16 (e.g. 8 or 16); got {bits!r}")
        bits = int(bits)
        if width is not None and bits > width:
            raise ValueError(f"bits={bits} does not fit dtype {out_dtype}; use uint16 or fewer "
                             "bits")
    elif width is not None:
        bits = width
    if displacement is not None and not callable(displacement):
        raise ValueError("displacement must be a callable (X, Y) -> (u, v) or None")

    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    if displacement is None:
        X, Y = xx, yy
    else:
        X, Y = inverse_map(displacement, xx, yy)
    img = evaluate(pattern, X, Y)
    if noise > 0:
        img += np.random.default_rng(seed).normal(0.0, noise, img.shape)
    if bits is not None:
        img = np.clip(np.rint(img), 0, 2**bits - 1)
    return img.astype(out_dtype, copy=False)
