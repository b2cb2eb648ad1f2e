"""The optional groups of a results file for calibrated cameras: ``/stereo`` and ``/lens``.

A results file of two cameras is first an ordinary results file of the LEFT camera's images
(``/frames``: 2-D displacements in px, see :mod:`dic.sequence.layout`); the surface strain is
stored under ``/strain`` like any strain (group attribute ``kind = "surface"``). The 3-D results
are in the group ``/stereo`` (``F`` = frames, ``(ny, nx)`` = grid)::

    /stereo/X, Y, Z      (F, ny, nx) float64  positions, mm, in the left camera's frame
    /stereo/U, V, W      (F, ny, nx) float64  displacements from the reference state, mm
    /stereo/gap          (F, ny, nx) float32  distance between the two rays, mm
    /stereo/right_u, right_v (F, ny, nx) float64  position in the right image minus the grid
                                              position, px
    /stereo/reason       (F, ny, nx) int8     dic.Reason per point (0 = measured in 3-D;
                                              ONE_CAMERA, POOR_TRIANGULATION, OBLIQUE, or the
                                              left image's own reason)
    /stereo/n_done       ()          int64    frames completed: frames 0 .. n_done-1 are whole
    attributes: frame (the coordinate frame in words), units "mm",
                calibration (the calibration file's text), rms_px, baseline_mm, angle_deg,
                right_images (JSON list),
                key (fingerprint of calibration, right images and limits), strain_key,
                max_gap_px, max_view_angle (degrees; "none" when not limited)

The left camera's frame: origin at its optical centre, ``X`` along image columns, ``Y`` along
image rows, ``Z`` along the optical axis toward the scene.

One camera with a calibration adds ``/lens``: displacements corrected for lens distortion::

    /lens/x, /lens/y     (ny, nx) float64     grid positions an ideal pinhole camera would see, px
    /lens/u, /lens/v     (F, ny, nx) float64  displacements between ideal positions, px
    /lens/X_mm, Y_mm     (ny, nx) float64     with a known specimen plane: grid positions on
                                              it (the plane target's axes), mm
    /lens/U_mm, V_mm     (F, ny, nx) float64  ... and displacements on it, mm
    attributes: n_done, calibration, key

``/stereo`` is written frame by frame like ``/frames``: the group is made once with every
dataset allocated at full size (:func:`create_frame_group`, on a copy of the file that then
replaces it atomically), then each frame is written in place, flushed to disk, and only then
counted in ``/stereo/n_done`` (:func:`write_group_frame`); a run killed at any moment leaves
frames ``0 .. n_done-1`` whole and readable, and the next run carries on from there.
``/lens`` is written whole, when tracking is done, on a copy of the file (atomic). Older files
whose groups count frames in an ``n_done`` attribute read as before.
"""

from __future__ import annotations

import json
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from dic.field import Reason
from dic.files import atomic_write, lock_file, sparse_copy, unlock_file
from dic.sequence.h5file import open_h5
from dic.sequence.layout import WRITE_KW, fixed_dataset, group_attrs
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["StereoData", "LensData", "write_group", "create_frame_group", "write_group_frame",
           "frames_held", "read_stored", "load_stereo", "load_lens",
           "info_lines", "FRAME_WORDS", "shape_deviation", "vtk_points", "has_stereo",
           "surface_strain_field", "corrected_strain", "lens_strain_field", "positions_at",
           "mean_scale"]

#: the coordinate frame of /stereo, in words (also stored with the group)
FRAME_WORDS = ("left camera: origin at its optical centre, X along image columns, Y along "
               "image rows, Z along the optical axis toward the scene, mm")


@dataclass
class StereoData:
    """The ``/stereo`` group of a results file (frames ``0 .. n_done - 1``).

    Attributes
    ----------
    X, Y, Z, U, V, W : ndarray, shape (n, ny, nx)
        Positions and displacements in the left camera's frame, mm (NaN where not measured).
    gap : ndarray, shape (n, ny, nx)
        Distance between the two rays, mm.
    right_u, right_v : ndarray, shape (n, ny, nx)
        Position in the right image minus the grid position, px.
    reason : ndarray of int8, shape (n, ny, nx)
        :class:`dic.Reason` per point.
    attrs : dict
        The group's attributes (``frame``, ``units``, ``calibration``, ...).
    """

    X: np.ndarray
    Y: np.ndarray
    Z: np.ndarray
    U: np.ndarray
    V: np.ndarray
    W: np.ndarray
    gap: np.ndarray
    right_u: np.ndarray
    right_v: np.ndarray
    reason: np.ndarray
    attrs: dict

    def shape_mm(self) -> np.ndarray:
        """Distance (mm) of the reference positions from their best-fit plane, + toward the
        camera (:func:`shape_deviation`)."""
        return shape_deviation(self.X[0], self.Y[0], self.Z[0])


def shape_deviation(X, Y, Z):
    """Signed distance (mm) of 3-D points from their least-squares plane, + toward the camera.

    Parameters
    ----------
    X, Y, Z : ndarray
        Positions in the left camera's frame (NaN where not measured).

    Returns
    -------
    ndarray
        Same shape as ``X``; NaN where not measured.
    """
    P = np.stack([X, Y, Z], -1)
    ok = np.all(np.isfinite(P), -1)
    out = np.full(X.shape, np.nan)
    if ok.sum() < 3:
        return out
    c = P[ok].mean(0)
    n = np.linalg.svd(P[ok] - c, full_matrices=False)[2][2]
    n = n if n[2] < 0 else -n                  # toward the camera (at the origin, Z > 0)
    out[ok] = (P[ok] - c) @ n
    return out


def vtk_points(data) -> np.ndarray:
    """Reference 3-D positions as an (ny * nx, 3) array with no hole, for a surface mesh.

    Unmeasured points get ``X, Y, Z`` of a quadratic least-squares fit, over the grid indices,
    of the measured ones (their data stay NaN).
    """
    P = np.stack([data.X[0], data.Y[0], data.Z[0]], -1)
    ny, nx, _ = P.shape
    ok = np.all(np.isfinite(P), -1)
    if ok.all() or ok.sum() < 6:
        return np.nan_to_num(P).reshape(-1, 3)
    j, i = np.meshgrid(np.arange(nx, dtype=float), np.arange(ny, dtype=float))
    A = np.column_stack([np.ones(ok.size), j.ravel(), i.ravel(), j.ravel() ** 2,
                         (i * j).ravel(), i.ravel() ** 2])
    coef = np.linalg.lstsq(A[ok.ravel()], P[ok], rcond=None)[0]
    out = P.reshape(-1, 3).copy()
    out[~ok.ravel()] = A[~ok.ravel()] @ coef
    return out


def has_stereo(path) -> bool:
    """True when the results file holds a ``/stereo`` group."""
    with open_h5(Path(path), "r", "read", locking=False) as f:
        return "stereo" in f


@dataclass
class LensData:
    """The ``/lens`` group: grid positions and displacements corrected for lens distortion;
    with a known specimen plane also positions ``X_mm, Y_mm`` and displacements ``U_mm, V_mm``
    on it (target axes, mm), else None."""

    x: np.ndarray
    y: np.ndarray
    u: np.ndarray
    v: np.ndarray
    attrs: dict
    X_mm: np.ndarray | None = None
    Y_mm: np.ndarray | None = None
    U_mm: np.ndarray | None = None
    V_mm: np.ndarray | None = None


def write_group(path, name, arrays, attrs) -> None:
    """Replace group ``name`` of a results file with ``arrays`` and ``attrs``, atomically.

    Parameters
    ----------
    path : str or Path
        A results file no writer has open.
    name : {'stereo', 'lens'}
    arrays : dict of ndarray
    attrs : dict
        Values: numbers, strings, or lists/dicts (stored as JSON text).
    """
    with _new_group(path, name) as g:
        for k, a in arrays.items():
            g.create_dataset(k, data=a)
        _set_attrs(g, attrs)


def create_frame_group(path, name, datasets, attrs) -> None:
    """Replace group ``name`` with datasets allocated at full size and ``n_done = 0``.

    Atomic (on a copy of the file that then replaces it); the frames are then written one by
    one with :func:`write_group_frame`.

    Parameters
    ----------
    path : str or Path
        A results file no writer has open.
    name : str
    datasets : dict
        ``{name: (shape, dtype)}``, frames along the first axis.
    attrs : dict
        As for :func:`write_group`.
    """
    with _new_group(path, name) as g:
        for k, (shape, dtype) in datasets.items():
            fixed_dataset(g, k, tuple(shape), dtype)
        fixed_dataset(g, "n_done", (), np.int64)[()] = np.int64(0)
        _set_attrs(g, attrs)


@contextmanager
def _new_group(path, name):
    """Group ``name`` of the results file at ``path``, emptied (created anew), for writing;
    atomic: the changes are made on a copy of the file that then replaces it."""
    p = Path(path)
    with atomic_write(p, None) as tmp:
        sparse_copy(p, tmp)
        with open_h5(tmp, "r+", "update", **WRITE_KW) as h:
            if name in h:
                del h[name]
            yield h.create_group(name)


def _set_attrs(group, attrs):
    """Numbers and strings as they are, lists and dicts as JSON text."""
    for k, v in attrs.items():
        group.attrs[k] = json.dumps(v) if isinstance(v, (list, dict)) else v


def write_group_frame(path, name, k, arrays, *, fsync=True) -> None:
    """Write frame ``k`` of group ``name`` in place, then count it in ``n_done``.

    The frame's numbers are flushed (and synced to disk) before ``n_done`` becomes ``k + 1``,
    so a kill at any moment leaves frames ``0 .. n_done-1`` whole. Only raw data change: the
    datasets were allocated by :func:`create_frame_group`.

    Parameters
    ----------
    path : str or Path
    name : str
    k : int
        Must equal the group's ``n_done`` (frames are written in order).
    arrays : dict of ndarray
        One frame of each dataset.
    fsync : bool, optional
        Sync to disk before counting the frame.
    """
    import os

    from dic.errors import InputError

    p = Path(path)
    lock = lock_file(p, "results file")
    try:
        with open_h5(p, "r+", "update", **WRITE_KW) as f:
            g = f[name]
            done = int(g["n_done"][()])
            if int(k) != done:
                raise InputError(f"frame {k} of /{name} written out of order; the group "
                                 f"holds frames 0..{done - 1}")
            for nm, a in arrays.items():
                g[nm][k] = a
            f.flush()
            if fsync:
                os.fsync(f.id.get_vfd_handle())
            g["n_done"][()] = np.int64(k + 1)
            f.flush()
    finally:
        unlock_file(lock)


def frames_held(g) -> int:
    """Frames held by an open ``/stereo`` or ``/lens`` group (``n_done`` dataset, or the
    attribute of older files)."""
    return int(g["n_done"][()]) if "n_done" in g else int(g.attrs.get("n_done", 0))


def read_stored(path, name):
    """Attributes of group ``name`` with its ``n_done`` and ``size`` (frames allocated), or
    None when the file has none."""
    with open_h5(Path(path), "r", "read", locking=False) as f:
        if name not in f:
            return None
        g = f[name]
        first = next((g[k] for k in g if g[k].ndim == 3), None)
        return {**group_attrs(g), "n_done": frames_held(g),
                "size": int(first.shape[0]) if first is not None else 0}


def _load(path, name, fields, cls):
    p = Path(path)
    with open_h5(p, "r", "read", locking=False) as f:
        if name not in f:
            from dic.errors import InputError

            raise InputError(f"path: '{p}' holds no /{name} results; track with "
                             + ("right_images and a two-camera calibration" if name == "stereo"
                                else "a calibration"))
        g = f[name]
        n = frames_held(g)
        data = {k: (g[k][:n] if g[k].ndim == 3 else g[k][()]) for k in fields if k in g}
        return cls(**data, attrs=group_attrs(g))


def load_stereo(path) -> StereoData:
    """The 3-D results of a two-camera results file (see the module docstring).

    Raises
    ------
    InputError
        When the file has no ``/stereo`` group.
    """
    return _load(path, "stereo", ("X", "Y", "Z", "U", "V", "W", "gap", "right_u", "right_v",
                                  "reason"), StereoData)


def load_lens(path) -> LensData:
    """The lens-corrected displacements of a one-camera results file with a calibration."""
    return _load(path, "lens", ("x", "y", "u", "v", "X_mm", "Y_mm", "U_mm", "V_mm"), LensData)


def info_lines(f) -> list:
    """Lines for ``dic info`` about the ``/stereo`` and ``/lens`` groups of an open file."""
    lines = []
    if "stereo" in f:
        g = f["stereo"]
        n = frames_held(g)
        lines.append(f"two cameras: 3-D positions X, Y, Z and displacements U, V, W in mm for "
                     f"{n} frames ({g.attrs.get('frame', '')})")
        if n:
            why = g["reason"][n - 1]
            W = g["W"][n - 1]
            ok = why == 0
            lines.append(f"last frame 3-D: {int(ok.sum())} of {ok.size} points; W "
                         + (f"{np.nanmin(W):.4g}..{np.nanmax(W):.4g} mm" if ok.any() else "-")
                         + f"; seen by one camera only {int((why == Reason.ONE_CAMERA).sum())}"
                         f", rays too far apart {int((why == Reason.POOR_TRIANGULATION).sum())}"
                         f", seen at a grazing angle {int((why == Reason.OBLIQUE).sum())}")
        a = group_attrs(g)
        lines.append(f"calibration: reprojection {a.get('rms_px', float('nan')):.3f} px RMS, "
                     f"baseline {a.get('baseline_mm', float('nan')):.2f} mm, angle "
                     f"{a.get('angle_deg', float('nan')):.2f} degrees")
    if "lens" in f:
        g = f["lens"]
        lines.append(f"lens distortion: displacements corrected for {frames_held(g)} "
                     "frames (/lens/u, /lens/v; stored strain uses them)")
    return lines


def surface_strain_field(res, k, *, window=None, measure=None, fit="plane"):
    """The surface strain of frame ``k`` of a two-camera results file as a StrainField.

    The deformation gradient in the tangent plane (:func:`dic.stereo.surface_gradient`) of the
    stored 3-D positions, so every measure and derived quantity of :mod:`dic.strain` follows.

    Parameters
    ----------
    res : dic.sequence.Results
        An open results file with a ``/stereo`` group.
    k : int
        Completed frame (negative counts from the end).
    window, measure : optional
        Default: those of the stored surface strain.
    fit : {'plane', 'quadratic'}, optional
        As for :func:`dic.stereo.surface_gradient`.

    Returns
    -------
    dic.strain.StrainField
        ``x, y`` are the left reference grid in px; ``step`` and ``vsg`` in px of that grid.
    """
    from scipy.ndimage import correlate

    from dic.errors import InputError
    from dic.stereo.surface import surface_gradient
    from dic.strain import StrainField, canonical_measure, strain_tensor

    with open_h5(Path(res.path), "r", "read", locking=False) as f:
        if "stereo" not in f:
            raise InputError(f"res: '{res.path}' holds no /stereo results; track with "
                             "right_images and a two-camera calibration")
        g = f["stereo"]
        n = frames_held(g)
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not -n <= k < n:
            raise InputError(f"k: frame {k!r} is not stored; use 0 to {n - 1}")
        k = int(k) % n
        P0 = np.stack([g[c][0] for c in "XYZ"], -1)
        P = np.stack([g[c][k] for c in "XYZ"], -1)
        stored = str(group_attrs(g).get("strain_key", ""))
    m0, _, w0 = stored.rpartition("_w")
    if window is None:
        window = int(w0) if w0.isdigit() else 5
    measure = canonical_measure(measure or m0 or DEFAULT_MEASURE)
    F, _ = surface_gradient(P0, P, window=int(window), fit=fit)
    valid = np.all(np.isfinite(F), axis=(-2, -1))
    T = np.full(F.shape, np.nan)
    T[valid] = strain_tensor(F[valid], measure)
    step = float(res.settings.get("step", np.nan))
    subset = int(res.settings.get("subset", 0))
    both = (np.all(np.isfinite(P0), -1) & np.all(np.isfinite(P), -1)).astype(np.int64)
    n_used = np.where(valid, correlate(both, np.ones((window, window), np.int64),
                                       mode="constant"), 0)
    return StrainField(xx=T[..., 0, 0], yy=T[..., 1, 1], xy=T[..., 0, 1], F=F, valid=valid,
                       x=res.grid_x, y=res.grid_y, measure=measure, window=int(window), fit=fit,
                       vsg=(window - 1) * step + subset, step=step, subset=subset,
                       min_points=(window * window + 1) // 2, n_used=n_used)


def corrected_strain(field, xu, yu, uu, vu, *, window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE,
                     fit="plane"):
    """Strain of a displacement field corrected for lens distortion, as a StrainField.

    ``F = (I + grad_def) (I + grad_ref)^-1``: the gradient of the ideal-pinhole deformed
    positions ``xu + uu`` and of the ideal reference positions ``xu`` with respect to the
    measuring grid (pointwise least squares of :mod:`dic.strain`, over the same measured
    points so that the bias of a plane fitted to the curved lens map cancels; chain rule).

    Parameters
    ----------
    field : DisplacementField
        As measured (its grid, reasons and settings are used).
    xu, yu : ndarray
        Ideal-pinhole reference positions of the grid points, px.
    uu, vu : ndarray
        Displacements between ideal-pinhole positions, px.
    window, measure, fit
        As for :func:`dic.strain_field`.

    Returns
    -------
    dic.strain.StrainField
    """
    import dataclasses

    from dic.strain import canonical_measure, displacement_gradient, strain_field, strain_tensor

    X, Y = np.asarray(field.x, float), np.asarray(field.y, float)
    meas = np.isfinite(uu) & np.isfinite(vu)
    ref = displacement_gradient(dataclasses.replace(
        field, u=np.where(meas, xu - X, np.nan), v=np.where(meas, yu - Y, np.nan)),
        window=window, fit=fit)
    moved = dataclasses.replace(field, u=xu + uu - X, v=yu + vu - Y)
    base = strain_field(moved, window=window, measure=measure, fit=fit)
    ok = base.valid & ref.valid
    F = np.full(base.F.shape, np.nan)
    F[ok] = base.F[ok] @ np.linalg.inv(np.eye(2) + ref.grad[ok])
    T = np.full(F.shape, np.nan)
    T[ok] = strain_tensor(F[ok], canonical_measure(measure))
    return dataclasses.replace(base, xx=T[..., 0, 0], yy=T[..., 1, 1], xy=T[..., 0, 1], F=F,
                               valid=ok, n_used=np.where(ok, base.n_used, 0))


def lens_strain_field(res, k, *, window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE, fit="plane"):
    """The lens-corrected strain of frame ``k`` of a one-camera results file with ``/lens``.

    Parameters
    ----------
    res : dic.sequence.Results
    k : int
        Completed frame (non-negative).
    window, measure, fit
        As for :func:`dic.strain_field`.

    Returns
    -------
    dic.strain.StrainField
    """
    with open_h5(Path(res.path), "r", "read", locking=False) as f:
        g = f["lens"]
        xu, yu, uu, vu = g["x"][()], g["y"][()], g["u"][k], g["v"][k]
    return corrected_strain(res.field(k), xu, yu, uu, vu, window=window, measure=measure,
                            fit=fit)


def positions_at(res, k, x, y):
    """3-D positions (mm, left camera's frame) in frame ``k`` of the material points seen at
    left reference pixels ``(x, y)``: bilinear interpolation of the stored grid positions.

    Parameters
    ----------
    res : dic.sequence.Results
        With a ``/stereo`` group.
    k : int
        Completed frame (non-negative).
    x, y : array_like
        Reference positions, px (same shape).

    Returns
    -------
    ndarray, shape (..., 3)
        NaN outside the grid or where a grid point with non-zero weight has no position.
    """
    with open_h5(Path(res.path), "r", "read", locking=False) as f:
        P = np.stack([f["stereo"][c][k] for c in "XYZ"], -1)
    gx, gy = res.grid_x, res.grid_y
    ny, nx = gx.shape
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    fj = (x - gx[0, 0]) / ((gx[0, -1] - gx[0, 0]) / (nx - 1))
    fi = (y - gy[0, 0]) / ((gy[-1, 0] - gy[0, 0]) / (ny - 1))
    inside = (fj >= -1e-9) & (fj <= nx - 1 + 1e-9) & (fi >= -1e-9) & (fi <= ny - 1 + 1e-9)
    fj = np.clip(np.where(inside, fj, 0.0), 0, nx - 1)
    fi = np.clip(np.where(inside, fi, 0.0), 0, ny - 1)
    j0 = np.minimum(np.floor(fj).astype(np.intp), nx - 2)
    i0 = np.minimum(np.floor(fi).astype(np.intp), ny - 2)
    t, s = (fj - j0)[..., None], (fi - i0)[..., None]
    out = ((1 - t) * (1 - s) * P[i0, j0] + t * (1 - s) * P[i0, j0 + 1]
           + (1 - t) * s * P[i0 + 1, j0] + t * s * P[i0 + 1, j0 + 1])
    out[~inside] = np.nan
    return out


def mean_scale(res) -> float | None:
    """Median mm per px of the reference surface: 3-D distance between neighbouring grid
    points over their distance in the left reference image (for placing gauges given in mm).

    Returns None when it cannot be found.
    """
    with open_h5(Path(res.path), "r", "read", locking=False) as f:
        P = np.stack([f["stereo"][c][0] for c in "XYZ"], -1)
    gx, gy = res.grid_x, res.grid_y
    parts = []
    if gx.shape[1] > 1:
        parts.append(np.linalg.norm(np.diff(P, axis=1), axis=-1) / np.diff(gx, axis=1))
    if gx.shape[0] > 1:
        parts.append(np.linalg.norm(np.diff(P, axis=0), axis=-1) / np.diff(gy, axis=0))
    vals = np.concatenate([p.ravel() for p in parts]) if parts else np.array([])
    vals = vals[np.isfinite(vals)]
    return float(np.median(vals)) if vals.size else None
