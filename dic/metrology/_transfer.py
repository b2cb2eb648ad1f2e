"""Theoretical transfer functions of subset matching and of the strain window.

A subset whose shape function is a polynomial of degree ``q`` fits that polynomial, in the least
squares sense, to the displacement inside the subset: for a field it cannot follow it acts as a
Savitzky-Golay filter of degree ``q`` and width ``subset`` (Schreier & Sutton 2002). The strain
window then fits a plane (or a quadratic) to the measured displacements of ``window`` grid points
spaced ``step`` apart; its slope is a Savitzky-Golay derivative filter. For a sinusoidal
displacement ``A sin(2 pi y / p)`` the measured amplitude is ``A H(p)``: these functions give
``H`` and the period at which it has fallen by 10 %, the spatial resolution used by the DIC
Challenge 2.0 (Reu et al. 2022).
"""

from __future__ import annotations

import functools

import numpy as np

__all__ = ["displacement_transfer", "strain_transfer", "attenuation_period"]


@functools.lru_cache(maxsize=256)
def _savgol_weights(width: int, degree: int, derivative: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Offsets and least-squares weights giving the fitted polynomial's value (derivative 0)
    or slope (derivative 1) at the centre of a symmetric window of ``width`` samples."""
    half = width // 2
    k = np.arange(-half, half + 1, dtype=np.float64)
    V = np.vander(k, degree + 1, increasing=True)
    w = np.linalg.pinv(V)[derivative]
    k.setflags(write=False)
    w.setflags(write=False)
    return k, w


def _check_period(period):
    p = np.asarray(period, dtype=np.float64)
    if not np.all(p > 0):
        raise ValueError("period must be positive (px)")
    return p


def displacement_transfer(period, subset: int, shape_function: str = "affine"):
    """Measured / true amplitude of a sinusoidal displacement of the given period.

    The subset acts as a Savitzky-Golay smoother of degree 1 (affine) or 2 (quadratic) and width
    ``subset`` along the direction in which the displacement varies (a field constant along the
    other direction is fitted exactly there).

    Parameters
    ----------
    period : float or ndarray
        Wavelength(s) in px.
    subset : int
        Subset size in px.
    shape_function : {"affine", "quadratic"}

    Returns
    -------
    ndarray
        Transfer ratio (1 = no attenuation; it can be negative in the side lobes).

    References
    ----------
    .. [1] H. W. Schreier, M. A. Sutton, "Systematic errors in digital image correlation due to
       undermatched subset shape functions", Exp. Mech. 42 (2002) 303-310.
    .. [2] A. Savitzky, M. J. E. Golay, "Smoothing and differentiation of data by simplified
       least squares procedures", Anal. Chem. 36 (1964) 1627-1639.
    """
    p = _check_period(period)
    degree = 2 if str(shape_function).lower() in ("quadratic", "second", "second-order") else 1
    k, w = _savgol_weights(int(subset), degree)
    omega = 2.0 * np.pi / p
    return np.cos(np.multiply.outer(omega, k)) @ w


def strain_transfer(period, subset: int, step: float, window: int,
                    shape_function: str = "affine"):
    """Measured / true amplitude of the strain of a sinusoidal displacement of the given period.

    The displacement is first smoothed by the subset (:func:`displacement_transfer`); the slope
    of the plane (or quadratic: same slope weights on a symmetric window) fitted over ``window``
    grid points ``step`` px apart is then a Savitzky-Golay first-derivative filter.

    Parameters
    ----------
    period : float or ndarray
        Wavelength(s) in px.
    subset : int
        Subset size in px.
    step : float
        Grid spacing in px.
    window : int
        Strain window in grid points.
    shape_function : {"affine", "quadratic"}

    Returns
    -------
    ndarray
        Transfer ratio.

    References
    ----------
    .. [1] H. W. Schreier, M. A. Sutton, Exp. Mech. 42 (2002) 303-310.
    .. [2] B. Pan, A. Asundi, H. Xie, J. Gao, "Digital image correlation using iterative least
       squares and pointwise least squares for displacement field and strain field
       measurements", Opt. Lasers Eng. 47 (2009) 865-874.
    """
    p = _check_period(period)
    k, d = _savgol_weights(int(window), 1, derivative=1)
    omega = 2.0 * np.pi / p
    y = k * float(step)
    slope = np.sin(np.multiply.outer(omega, y)) @ d / float(step)
    return displacement_transfer(p, subset, shape_function) * slope / omega


def attenuation_period(transfer, *, level: float = 0.9, low: float = 2.0,
                       high: float = 1e5) -> float:
    """The period beyond which a transfer function stays at or above ``level``.

    Parameters
    ----------
    transfer : callable
        ``transfer(period_array) -> ratio_array``.
    level : float
        0.9 for the 10 % attenuation period.
    low, high : float
        Search range, px.

    Returns
    -------
    float
        Period in px (NaN if the transfer never reaches ``level`` within the range).
    """
    p = np.geomspace(low, high, 2001)
    h = transfer(p)
    below = np.flatnonzero(h < level)
    if below.size == 0:
        return float(low)
    i = int(below[-1])
    if i == p.size - 1:
        return float("nan")
    # refine the crossing between p[i] and p[i + 1] by bisection on log(period)
    a, b = np.log(p[i]), np.log(p[i + 1])
    for _ in range(40):
        m = 0.5 * (a + b)
        if transfer(np.array([np.exp(m)]))[0] < level:
            a = m
        else:
            b = m
    return float(np.exp(0.5 * (a + b)))
