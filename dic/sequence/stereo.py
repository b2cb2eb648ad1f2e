"""Tracking with calibrated cameras: two cameras (3-D shape, motion and surface strain), or one
camera corrected for lens distortion.

:func:`dic.track` comes here when it is given ``right_images`` or a ``calibration``.

Two cameras. The LEFT images are tracked exactly as in the 2-D analysis (the results file's
``/frames``). The grid is matched from the left reference image into the right reference image
(:func:`dic.stereo.match_cameras`, epipolar starting guess), and into every right image of the
sequence, seeded at the best point with its stereo offset plus its motion in the left image.
Every frame's left and right positions are triangulated (:func:`dic.stereo.grid_points`) into
``X, Y, Z`` in the left camera's frame; ``U, V, W`` are the changes from the reference state;
the surface strain (:func:`dic.stereo.surface_strain`) is stored under ``/strain`` with the
group attribute ``kind = "surface"``, so every strain output uses it. Layout of ``/stereo``:
:mod:`dic.sequence.stereofile`.

One camera. The displacements are corrected for lens distortion
(:func:`dic.stereo.undistort_displacements`) into ``/lens``; the stored strain is the gradient
of the ideal-pinhole deformed positions with respect to the ideal-pinhole reference positions,
``F = (I + grad_def) (I + grad_ref)^-1`` (both gradients by the pointwise least squares of
:mod:`dic.strain` on the regular grid, over the same measured points, so that the bias of a
plane fitted to the curved lens map cancels; chain rule).

``/stereo`` and the surface strain are written frame by frame after the left camera's 2-D
tracking (a stopped run keeps every completed frame and carries on from there; running the same
call again finds everything complete and does nothing more); ``/lens`` is computed when
tracking is done and written whole (atomically).

References
----------
.. [1] M. A. Sutton, J.-J. Orteu and H. W. Schreier, Image Correlation for Shape, Motion and
   Deformation Measurements, Springer (2009), ch. 4 and 5 (stereo DIC, calibration).
.. [2] R. Hartley and A. Zisserman, Multiple View Geometry in Computer Vision, 2nd ed.,
   Cambridge University Press (2004), sec. 12.2 (triangulation).
"""

from __future__ import annotations

import hashlib
import json
import logging

import numpy as np

from dic.errors import InputError
from dic.field import Reason
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["track_calibrated", "STEREO_STRAIN", "LENS_STRAIN"]

log = logging.getLogger("dic.sequence")

#: surface strain stored by default with two cameras (window in grid points)
STEREO_STRAIN = {"window": 5, "measure": DEFAULT_MEASURE}
#: strain stored by default with one calibrated camera
LENS_STRAIN = {"window": DEFAULT_WINDOW, "measure": DEFAULT_MEASURE}


def _fingerprint(cal_text, names):
    h = hashlib.sha256(cal_text.encode())
    h.update(json.dumps([str(n) for n in names]).encode())
    return h.hexdigest()


def _image(item):
    from dic.images.io import read_image

    name = "image" if isinstance(item, np.ndarray) else str(item)
    a = np.asarray(read_image(item, name=name), dtype=np.float64)
    return a if a.ndim == 2 else a[..., :3] @ np.array([0.299, 0.587, 0.114])


def _strain_spec(strain, default):
    from dic.strain import canonical_measure

    spec = {**default, **(strain or {})}
    return int(spec["window"]), canonical_measure(spec["measure"])


def track_calibrated(track_2d, images, out, *, right_images=None, calibration=None,
                     strain=None, max_gap_px=0.5, max_view_angle=None, **options):
    """Track with a calibration: two cameras into 3-D results, or one camera lens-corrected.

    Parameters
    ----------
    track_2d : callable
        The 2-D tracking, :func:`dic.sequence.tracker.track` (passed in: it calls this function).
    images : list of paths or arrays
        The (left) camera's sequence.
    out : path
        Results file (HDF5).
    right_images : list of paths or arrays, optional
        The right camera's sequence, image for image taken with the left one.
    calibration : Calibration or path
        From :func:`dic.calibrate`, or a calibration file. Two cameras need a two-camera
        calibration; one camera uses the (left) camera's lens model.
    strain : dict, optional
        ``{"window": N, "measure": ...}`` of the stored strain; default window 5 (surface
        strain) for two cameras, 9 for one.
    max_gap_px : float, optional
        Two cameras: points whose rays pass further apart than this (left-camera pixels at the
        point's depth) get ``Reason.POOR_TRIANGULATION``.
    max_view_angle : float, optional
        Two cameras: points where either camera sees the surface at more than this many
        degrees from its normal get ``Reason.OBLIQUE`` (default
        :data:`dic.stereo.MAX_VIEW_ANGLE`, 45 degrees; see :func:`dic.stereo.grid_points`).
    **options
        Everything else of :func:`dic.track` (``subset``, ``step``, ``roi``, ...).

    Returns
    -------
    dic.sequence.Results
        The left camera's results; the 3-D results are read with
        :func:`dic.sequence.stereofile.load_stereo`, the corrected displacements with
        :func:`~dic.sequence.stereofile.load_lens`.

    Raises
    ------
    InputError
        Without a calibration, with a one-camera calibration for two cameras, with right
        images of another count or size, or a calibration made for another image size.
    """
    from dic.stereo.calfile import as_calibration, calibration_text
    from dic.stereo.triangulation import MAX_VIEW_ANGLE

    if calibration is None:
        raise InputError("calibration: two cameras need a calibration; calibrate with 'dic "
                         "calibrate' and pass the file")
    angle = MAX_VIEW_ANGLE if max_view_angle is None else max_view_angle
    if isinstance(angle, bool) or not isinstance(angle, (int, float, np.integer, np.floating)) \
            or not 0 < float(angle) <= 90:
        raise InputError(f"max_view_angle: {max_view_angle!r} is not an angle in degrees "
                         "between 0 and 90; give e.g. 45 (90 turns the limit off)")
    angle = float(angle)
    cal = as_calibration(calibration)
    if right_images is not None and not cal.stereo:
        raise InputError("calibration: it holds one camera, but right images were given; "
                         "calibrate both cameras together (dic calibrate --right-images)")
    left_items = list(images)
    right_items = None
    if right_images is not None:
        right_items = list(right_images)
        if len(right_items) != len(left_items):
            raise InputError(f"right_images: {len(right_items)} right and {len(left_items)} "
                             "left images; give both cameras' images of the same instants")
    if right_items is None and cal.plane is not None and options.get("scale") is None:
        from dic.stereo.plane import plane_scale

        w, h = cal.cameras[0].size        # the specimen plane gives the scale at the centre
        options["scale"] = float(plane_scale(cal, (w - 1) / 2, (h - 1) / 2))
    results = track_2d(left_items, out, strain=None, **options)
    try:
        first = _image(left_items[int(results.settings.get("reference", 0))])
        for c, fit in enumerate(cal.cameras[:1 if right_items is None else 2]):
            if tuple(fit.size) != (first.shape[1], first.shape[0]):
                raise InputError(f"calibration: camera {c + 1} was calibrated on "
                                 f"{fit.size[0]}x{fit.size[1]} px images, these are "
                                 f"{first.shape[1]}x{first.shape[0]}; calibrate with images "
                                 "of the measuring set-up")
        text = calibration_text(cal)
        names = [] if right_items is None else [
            f"array {k}" if isinstance(it, np.ndarray) else str(it)
            for k, it in enumerate(right_items)]
        if right_items is not None:
            names.append(f"limits {float(max_gap_px)!r} {angle!r}")
        key = _fingerprint(text, names)
        from dic.sequence.stereofile import read_stored

        name = "lens" if right_items is None else "stereo"
        stored = read_stored(out, name)
        n = len(results)
        if stored is not None and stored.get("key") == key and int(stored["n_done"]) == n \
                and _strain_done(results, stored, n):
            return results
        if right_items is not None:
            settings = dict(results.settings)
            shape, roi = results.shape, results.roi_mask
            grid = results.grid_x
            results.close()
            _stereo(out, n, settings, shape, roi, grid, cal, left_items, right_items, strain,
                    max_gap_px, angle, {"calibration": text, "key": key}, stored)
            from dic.sequence.reader import Results

            return Results.open(out)
        arrays, attrs, comps, window, measure = _lens(results, cal, strain)
        attrs.update(n_done=n, calibration=text, key=key)
    finally:
        results.close()
    from dic.sequence.stereofile import write_group
    from dic.sequence.writer import ResultsWriter

    write_group(out, name, arrays, attrs)
    if n:
        with ResultsWriter.reopen(out) as w:
            w.write_strain(measure, window, comps, start=0, attrs={"kind": attrs["strain_kind"],
                                                                   "fit": "plane"})
    from dic.sequence.reader import Results

    return Results.open(out)


def _strain_done(results, stored, n):
    """True when the stored strain of a complete group covers every frame."""
    key = stored.get("strain_key")
    if key is None:
        return True                  # /lens: strain written together with the group
    if key not in results.strain_keys():
        return False
    return bool(np.all(results.strain_written(key)[:n]))


def _lens(results, cal, strain):
    """/lens arrays and the lens-corrected strain of every completed frame."""
    from dic.sequence.stereofile import corrected_strain
    from dic.stereo.undistort import undistort_displacements, undistort_points

    window, measure = _strain_spec(strain, LENS_STRAIN)
    fit = cal.cameras[0]
    X, Y = results.grid_x, results.grid_y
    xu, yu = undistort_points(X, Y, fit)
    n = len(results)
    ny, nx = X.shape
    U = np.full((n, ny, nx), np.nan)
    V = np.full((n, ny, nx), np.nan)
    comps = {c: np.full((n, ny, nx), np.nan) for c in ("xx", "yy", "xy")}
    for j in range(n):
        f = results.field(j)
        _, _, U[j], V[j] = undistort_displacements(X, Y, f.u, f.v, fit, reference=(xu, yu))
        s = corrected_strain(f, xu, yu, U[j], V[j], window=window, measure=measure)
        comps["xx"][j], comps["yy"][j], comps["xy"][j] = s.xx, s.yy, s.xy
    attrs = {"strain_kind": "lens-corrected", "units": "px (ideal pinhole camera)"}
    arrays = {"x": xu, "y": yu, "u": U, "v": V}
    if cal.plane is not None:            # millimetres on the specimen plane
        from dic.stereo.plane import plane_points

        # from the ideal pinhole positions already found: the lens model is inverted once
        A0, B0 = plane_points(cal, xu, yu, undistorted=True)
        A, B = plane_points(cal, xu + U, yu + V, undistorted=True)
        arrays.update(X_mm=A0, Y_mm=B0, U_mm=A - A0, V_mm=B - B0)
    return arrays, attrs, comps, window, measure


def _right_field(left_ref, right_img, stereo, left, settings, roi, prepared):
    """Frame's right image matched from the left reference grid (``prepared``: the left
    reference's spline gradients, computed once for the whole sequence)."""
    from dic.matching import correlate

    both = np.isfinite(left.u) & np.isfinite(stereo.u)
    if not both.any():
        return None
    score = np.where(both, np.nan_to_num(stereo.zncc) + np.nan_to_num(left.zncc), -np.inf)
    k = np.unravel_index(int(np.argmax(score)), score.shape)
    seed = (float(stereo.x[k]), float(stereo.y[k]), float(stereo.u[k] + left.u[k]),
            float(stereo.v[k] + left.v[k]))
    return correlate(left_ref, right_img, seeds=[seed], roi=roi, _prepared=prepared, **settings)


def _left_field(out, j):
    """Frame ``j`` of the left camera's 2-D results (the file is opened for this read only:
    the 3-D frames are written into the same file between reads)."""
    from dic.sequence.reader import Results

    with Results.open(out) as r:
        return r.field(j)


def _stereo(out, n, s, shape, roi, grid_x, cal, left_items, right_items, strain, max_gap_px,
            max_view_angle, ident, stored):
    """Write ``/stereo`` and the surface strain frame by frame (resuming after the frames a
    stopped run completed)."""
    from dic.sequence.stereofile import (FRAME_WORDS, create_frame_group, load_stereo,
                                         write_group_frame)
    from dic.sequence.writer import ResultsWriter
    from dic.stereo import grid_points, match_cameras, surface_strain
    from dic.stereo.match import right_shape_function

    window, measure = _strain_spec(strain, STEREO_STRAIN)
    ref = int(s.get("reference", 0))
    frames = [int(k) for k in s.get("frames", range(len(left_items)))]
    opts = {k: s[k] for k in ("subset", "step", "shape_function", "interpolation", "min_zncc",
                              "max_sigma") if k in s}
    if opts.get("shape_function") not in ("affine", "quadratic", "auto"):
        opts.pop("shape_function", None)
    left_ref = _image(left_items[ref])
    right_ref = _image(right_items[ref])
    if right_ref.shape != left_ref.shape:
        raise InputError(f"right_images: {right_ref.shape[1]}x{right_ref.shape[0]} px, the left "
                         f"images are {left_ref.shape[1]}x{left_ref.shape[0]}; use images of "
                         "one size")
    stereo = match_cameras(left_ref, right_ref, cal, roi=roi, **opts)
    if stereo.u.shape != tuple(shape) or not np.array_equal(stereo.x, grid_x):
        raise InputError("the stereo grid differs from the tracking grid; use the same subset, "
                         "step and roi")
    # the right camera keeps the correspondence's shape function in every frame
    right_opts = {**opts, "shape_function": right_shape_function(stereo, opts)}
    limits = {"max_gap_px": max_gap_px, "max_view_angle": max_view_angle}
    P0, _, why0 = grid_points(cal, stereo, **limits)
    ny, nx = shape
    attrs = {"strain_kind": "surface", "frame": FRAME_WORDS, "units": "mm",
             "rms_px": float(cal.rms), "baseline_mm": float(cal.baseline),
             "angle_deg": float(cal.angle_deg), "max_gap_px": float(max_gap_px),
             "max_view_angle": float(max_view_angle),
             "right_shape_function": right_opts["shape_function"],
             "right_images": [str(getattr(it, "name", "array")) if not isinstance(it, np.ndarray)
                              else "array" for it in right_items],
             "strain_key": f"{measure}_w{window}", **ident}
    start = 0
    if stored is not None and stored.get("key") == ident["key"] and stored.get("size") == n:
        start = int(stored["n_done"])          # carry on after the frames already written
    else:
        sets = {k: ((n, ny, nx), np.float64) for k in ("X", "Y", "Z", "U", "V", "W", "right_u",
                                                      "right_v")}
        sets.update(gap=((n, ny, nx), np.float32), reason=((n, ny, nx), np.int8))
        create_frame_group(out, "stereo", sets, attrs)
    strain_attrs = {"kind": "surface", "fit": "plane"}
    if start:                                 # a stop between a frame and its strain
        with ResultsWriter.reopen(out) as w:
            missing = np.flatnonzero(w.strain_written(measure, window)[:start] == 0)
        if missing.size:
            st = load_stereo(out)
            for j in missing:
                P = np.stack([st.X[j], st.Y[j], st.Z[j]], -1)
                _write_strain(out, j, surface_strain(P0, P, window=window, measure=measure),
                              measure, window, strain_attrs)
    from dic.images import interp
    from dic.matching import INTERPOLATIONS

    # the left reference is prepared once, not again for every frame
    prepared = interp.image_gradients(left_ref,
                                      INTERPOLATIONS[opts.get("interpolation", "quintic")])
    for j in range(start, n):
        left = _left_field(out, j)
        if frames[j] == ref and np.allclose(np.nan_to_num(left.u), 0, atol=1e-9):
            right = stereo
        else:
            right = _right_field(left_ref, _image(right_items[frames[j]]), stereo, left,
                                 right_opts, roi, prepared)
        P, gap, why_l = _frame_3d(cal, left, right, why0, (ny, nx), limits)
        row = {"reason": why_l, "gap": gap.astype(np.float32)}
        for c, nm in enumerate("XYZ"):
            row[nm] = P[..., c]
            row["UVW"[c]] = P[..., c] - P0[..., c]
        row["right_u"] = np.full((ny, nx), np.nan) if right is None else right.u
        row["right_v"] = np.full((ny, nx), np.nan) if right is None else right.v
        write_group_frame(out, "stereo", j, row)
        _write_strain(out, j, surface_strain(P0, P, window=window, measure=measure), measure,
                      window, strain_attrs)
        m = why_l == Reason.MEASURED
        log.info("stereo frame %d: %d of %d points in 3-D", j, int(m.sum()), m.size)


def _frame_3d(cal, left, right, why0, shape, limits):
    """3-D positions, ray gaps and reasons of one frame (reference reasons carried over)."""
    from dic.stereo import StereoReason, grid_points

    if right is None:
        P = np.full(shape + (3,), np.nan)
        gap = np.full(shape, np.nan)
        why = np.full(shape, StereoReason.LEFT_ONLY, np.int8)
    else:
        P, gap, why = grid_points(cal, right, left, **limits)
    why_l = np.asarray(left.reason, np.int8).copy()
    m = why_l == Reason.MEASURED
    codes = {StereoReason.RAYS_APART: Reason.POOR_TRIANGULATION,
             StereoReason.OBLIQUE: Reason.OBLIQUE}
    for w in (why0, why):
        bad = m & (w != StereoReason.MEASURED)
        why_l[bad] = Reason.ONE_CAMERA
        for code, reason in codes.items():
            why_l[bad & (w == code)] = reason
        m = why_l == Reason.MEASURED
    P = np.where(m[..., None], P, np.nan)
    return P, gap, why_l


def _write_strain(out, j, E, measure, window, attrs):
    from dic.sequence.writer import ResultsWriter

    comps = {"xx": E[..., 0, 0], "yy": E[..., 1, 1], "xy": E[..., 0, 1]}
    with ResultsWriter.reopen(out) as w:
        w.write_strain(measure, window, comps, start=int(j), attrs=attrs)
