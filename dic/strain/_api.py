"""The public entry point: a strain field from a displacement field."""

from __future__ import annotations

import numpy as np

from dic.strain._measures import (canonical_measure, determinant, out_of_plane as zz_out_of_plane,
                                  strain_tensor)
from dic.strain._gradients import displacement_gradient
from dic.strain._result import StrainField
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["strain_field", "vsg_size"]


def vsg_size(window: int, step: float, subset: float) -> float:
    """Virtual strain gauge size in px, ``(window - 1) * step + subset``.

    Parameters
    ----------
    window : int
        Strain window in grid points.
    step : float
        Grid spacing in px.
    subset : float
        Subset size in px.

    Returns
    -------
    float

    References
    ----------
    .. [1] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1.
    """
    return float((window - 1) * step + subset)


def strain_field(field, *, window: int = DEFAULT_WINDOW, measure: str = DEFAULT_MEASURE,
                 fit: str = "plane", min_points: int | None = None,
                 out_of_plane: str | None = None) -> StrainField:
    """Strain tensors from a displacement field by pointwise least squares.

    At every measured point a plane (or quadratic) is fitted to u and v over the window of
    ``window x window`` grid points centred on it, using only measured neighbours; its linear
    coefficients give ``grad u`` and ``F = I + grad u`` (Lagrangian, reference coordinates),
    from which the chosen strain measure follows. Shear ``xy`` is TENSOR shear (half the
    engineering shear angle).

    Parameters
    ----------
    field : DisplacementField
        Result of matching; the grid must be regular (``field.x``, ``field.y``).
    window : int
        Odd strain window size in grid points, >= 3 (>= 5 for ``fit="quadratic"``).
    measure : str
        ``"green-lagrange"`` (default), ``"infinitesimal"``, ``"euler-almansi"``, ``"hencky"``
        or ``"engineering"`` (Biot, ``U - I``); case-insensitive, aliases ``green``, ``almansi``,
        ``log``, ``logarithmic``, ``small``, ``biot`` and a few more.
    fit : {"plane", "quadratic"}
        Local model of the displacement in the window.
    min_points : int, optional
        Minimum number of measured points in a window for a valid strain; default
        ``max(6, ceil(N*N/2))`` (plane) or ``max(12, ceil(N*N/2))`` (quadratic), see
        :func:`dic.strain.default_min_points`.
    out_of_plane : {None, "incompressible"}
        ``"incompressible"`` adds an ESTIMATE of ``zz`` assuming volume conservation
        (``lambda_3 = 1 / det F``; for Hencky ``zz = -(xx + yy)``), recorded in
        ``zz_assumption``. Only sensible for plastic flow.

    Returns
    -------
    StrainField
        Points without a strain (centre not measured, too few measured neighbours, a degenerate
        neighbourhood, or ``det F <= 0``) are NaN and False in ``valid``.

    Raises
    ------
    ValueError
        Bad window, measure, fit, min_points or out_of_plane; irregular grid; a field with
        fewer valid points than ``min_points``.

    References
    ----------
    .. [1] B. Pan, A. Asundi, H. Xie, J. Gao, Opt. Lasers Eng. 47 (2009) 865-874.
    .. [2] H. W. Schreier, M. A. Sutton, Exp. Mech. 42 (2002) 303-310.
    .. [3] International Digital Image Correlation Society, A Good Practices Guide for Digital
       Image Correlation, 2018, doi:10.32720/idics/gpg.ed1.
    .. [4] G. A. Holzapfel, Nonlinear Solid Mechanics, Wiley, 2000.
    """
    canon = canonical_measure(measure)
    if out_of_plane not in (None, "incompressible"):
        raise ValueError(f"out_of_plane must be None or 'incompressible' (got {out_of_plane!r})")
    fitted = displacement_gradient(field, window=window, fit=fit, min_points=min_points)
    F = fitted.grad + np.eye(2)
    valid = fitted.valid & (determinant(F) > 0.0)  # NaN compares False
    F[~valid] = np.nan
    T = strain_tensor(F, canon)
    zz = zz_out_of_plane(F, canon) if out_of_plane else None

    settings = getattr(field, "settings", None) or {}
    step = float(settings.get("step", 0) or fitted.spacing[0])
    subset = int(settings.get("subset", 0) or 0)
    vsg = vsg_size(fitted.window, step, subset) if subset > 0 else float("nan")
    n_used = np.where(valid, fitted.n_used, 0)
    return StrainField(
        xx=T[..., 0, 0], yy=T[..., 1, 1], xy=T[..., 0, 1], F=F, valid=valid,
        x=np.asarray(field.x, dtype=np.float64), y=np.asarray(field.y, dtype=np.float64),
        measure=canon, window=fitted.window, fit=fitted.fit, vsg=vsg, step=step,
        subset=subset, min_points=fitted.min_points, n_used=n_used, zz=zz,
        zz_assumption="incompressible" if out_of_plane else None)

