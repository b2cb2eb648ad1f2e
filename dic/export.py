"""Writing results to plain open formats: CSV tables, NumPy ``.npz`` archives, VTK files.

Single displacement fields
    :func:`field_to_csv`, :func:`field_to_npz` and :func:`field_from_npz`.
Whole results files (displacements and strain, frame by frame)
    :func:`export_results` writes one of three formats: a CSV table per frame
    (:func:`frame_to_csv`), one ``.npz`` archive with every frame stacked
    (:func:`results_to_npz`), or a VTK time series that ParaView and other VTK readers open, a
    structured grid per frame plus a ``.pvd`` collection file (:func:`results_to_vtk`).

CSV files hold one row per grid point (row-major over the grid, ``y`` outer, ``x`` inner). The
first line is the column names, each with its unit (``u_px``, ``u_mm``; strain columns are plain
numbers, 0.01 = 1 %); every other line is numbers, so ``pandas.read_csv(path)`` and
``numpy.genfromtxt(path, delimiter=",", names=True)`` read every column as numbers. What the
numbers are (software, image, settings, strain measure) is in a sidecar JSON file of the same
name (``frame_0003.csv`` -> ``frame_0003.json``; :func:`sidecar_path`). Unmeasured points are
``nan`` in every number column and keep their reason code (:class:`dic.field.Reason`). Strain
shear ``xy`` is TENSOR shear, half the engineering shear angle, in every format.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from dic import __version__
from dic.field import DisplacementField
from dic.figures.common import (MEASURE_TITLES, STRAIN_QUANTITIES, frame_indices, open_results,
                                quantity_values)
from dic.files import atomic_write, sidecar_path, write_error, writing
from dic.files import write_sidecar as _write_sidecar
from dic.strain.defaults import DEFAULT_MEASURE, DEFAULT_WINDOW

__all__ = ["CSV_COLUMNS", "EXPORT_FORMATS", "check_components", "export_results",
           "field_from_npz", "field_to_csv", "field_to_npz", "frame_to_csv", "out_folder",
           "results_to_npz", "results_to_vtk", "sidecar_path", "write_sidecar"]

#: column names of :func:`field_to_csv`, in order
CSV_COLUMNS = ("x_px", "y_px", "u_px", "v_px", "dudx", "dudy", "dvdx", "dvdy", "zncc", "reason")

# 17 significant digits round-trip any float64 exactly
_FLOAT_FMT = "%.17g"


def _check_field(field):
    if not isinstance(field, DisplacementField):
        raise ValueError(f"field must be a DisplacementField (from dic.correlate); got "
                         f"{type(field).__name__}")


def write_sidecar(path, about):
    """Write the sidecar JSON of a CSV table (see :func:`dic.files.write_sidecar`).

    Parameters
    ----------
    path : str or os.PathLike
        The CSV table.
    about : dict
        What it holds.

    Returns
    -------
    pathlib.Path
    """
    return _write_sidecar(path, about, software=f"dic {__version__}")


def field_to_csv(field, path):
    """Write a displacement field as a CSV table, one row per grid point.

    Parameters
    ----------
    field : DisplacementField
        The field to write.
    path : str or os.PathLike
        Output file; its folder must exist.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        ``field`` is not a :class:`~dic.field.DisplacementField`.
    OSError
        The folder is missing or the file cannot be written.

    Notes
    -----
    Columns (:data:`CSV_COLUMNS`): point position ``x_px``, ``y_px`` and displacement ``u_px``,
    ``v_px`` in reference-image pixels; displacement gradient ``dudx = du/dx``, ``dudy``,
    ``dvdx``, ``dvdy`` (dimensionless, from the subset shape function); ``zncc`` of the match;
    ``reason``, the integer :class:`~dic.field.Reason` code (0 = measured). Floats are written
    with 17 significant digits, so they read back bit for bit.
    """
    _check_field(field)
    p = Path(os.fspath(path))
    n = field.n_points
    g = np.asarray(field.grad, dtype=np.float64).reshape(n, 2, 2)
    cols = [field.x, field.y, field.u, field.v, g[:, 0, 0], g[:, 0, 1], g[:, 1, 0], g[:, 1, 1],
            field.zncc]
    data = np.column_stack([np.asarray(c, dtype=np.float64).reshape(n) for c in cols])
    reason = np.asarray(field.reason).reshape(n).astype(np.int64)
    head = ",".join(CSV_COLUMNS)
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    write_sidecar(p, {"content": "displacement field", "points": n,
                      "points_measured": field.n_valid, "units": "px; gradients dimensionless",
                      "reason": "0 = measured; other codes as dic.field.Reason",
                      "settings": dict(field.settings)})
    with writing(p, newline="\n") as fh:
        fh.write(head + "\n")
        for row, r in zip(data, reason):
            fh.write(",".join(_FLOAT_FMT % v for v in row) + f",{r}\n")
    return p


def field_to_npz(field, path):
    """Write a displacement field to a compressed NumPy ``.npz`` archive.

    Parameters
    ----------
    field : DisplacementField
        The field to write.
    path : str or os.PathLike
        Output file (NumPy adds ``.npz`` if the name lacks it); its folder must exist.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        ``field`` is not a :class:`~dic.field.DisplacementField`.
    OSError
        The folder is missing or the file cannot be written.

    Notes
    -----
    The archive holds the arrays ``x, y, u, v, grad, zncc, reason, iterations`` (and ``grad2``
    for second-order fields) under those names, plus ``settings``: the settings as a JSON
    string. :func:`field_from_npz` reads it back.
    """
    _check_field(field)
    p = Path(os.fspath(path))
    if p.suffix != ".npz":
        p = p.with_name(p.name + ".npz")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    arrays = {name: np.asarray(getattr(field, name)) for name in
              ("x", "y", "u", "v", "grad", "zncc", "reason", "iterations")}
    if field.grad2 is not None:
        arrays["grad2"] = np.asarray(field.grad2)
    arrays["settings"] = np.array(json.dumps(field.settings, default=_jsonable))
    arrays["format_version"] = np.array(1)
    with writing(p, "wb") as fh:
        np.savez_compressed(fh, **arrays)
    return p


def _jsonable(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    return str(value)


def field_from_npz(path):
    """Read a displacement field written by :func:`field_to_npz`.

    Parameters
    ----------
    path : str or os.PathLike
        An ``.npz`` file from :func:`field_to_npz`.

    Returns
    -------
    DisplacementField

    Raises
    ------
    OSError
        The file is missing, unreadable or not such an archive.
    """
    p = Path(os.fspath(path))
    if not p.is_file():
        raise FileNotFoundError(f"path: no such file '{p}'; check the name")
    try:
        with np.load(p, allow_pickle=False) as z:
            names = set(z.files)
            need = {"x", "y", "u", "v", "grad", "zncc", "reason", "iterations", "settings"}
            if not need <= names:
                raise OSError(f"path: '{p}' is not a displacement-field archive (missing "
                              f"{', '.join(sorted(need - names))}); write it with field_to_npz")
            arr = {k: z[k] for k in names}
    except OSError:
        raise
    except Exception as exc:  # zipfile / format errors
        raise OSError(f"path: cannot read '{p}' ({' '.join(str(exc).split())}); check that it is "
                      f"an intact .npz file") from None
    settings = json.loads(str(arr["settings"]))
    if isinstance(settings.get("image_shape"), list):
        settings["image_shape"] = tuple(settings["image_shape"])
    return DisplacementField(
        x=arr["x"], y=arr["y"], u=arr["u"], v=arr["v"], grad=arr["grad"], zncc=arr["zncc"],
        reason=arr["reason"], iterations=arr["iterations"], grad2=arr.get("grad2"),
        settings=settings)


# --------------------------------------------------------------------------------------------
# whole results files
# --------------------------------------------------------------------------------------------
#: formats of :func:`export_results`
EXPORT_FORMATS = ("csv", "npz", "vtk")
#: strain components exported by default (xy is tensor shear)
DEFAULT_COMPONENTS = ("xx", "yy", "xy")


def check_components(components):
    """Checked tuple of strain quantity names (a list or a comma-separated string).

    Parameters
    ----------
    components : sequence of str or str
        Keys of :data:`dic.figures.common.STRAIN_QUANTITIES`, e.g. ``"xx,yy,xy"``.

    Returns
    -------
    tuple of str
        Lower case, each once, in the order given.

    Raises
    ------
    ValueError
        Not names, none, or an unknown one.
    """
    if isinstance(components, str):
        components = [c for c in components.split(",")]
    try:
        names = [c.strip().lower() for c in components]
    except (TypeError, AttributeError):
        raise ValueError(f"components: expected strain component names such as "
                         f"['xx', 'yy', 'xy'], got {components!r}") from None
    bad = [c for c in names if c not in STRAIN_QUANTITIES]
    if bad or not names:
        raise ValueError(f"components: unknown {bad[0] if bad else '(none)'!r}; use some of: "
                         f"{', '.join(STRAIN_QUANTITIES)} (e.g. xx,yy,xy)")
    return tuple(dict.fromkeys(names))


def _column(name):
    """Column or array name of a strain quantity."""
    return {"rotation": "rotation_deg", "nonlinear_share": "nonlinear_share",
            "area_change": "area_change"}.get(name, f"strain_{name}")


def _strain_columns(strain, components):
    return {_column(c): quantity_values(strain, c) for c in components}


def _open(results):
    res, opened = open_results(results)
    if len(res) == 0:
        if opened:
            res.close()
        raise ValueError(f"results: '{res.path}' holds no completed frames; track images into "
                         f"it first")
    return res, opened


def out_folder(out_dir, what="the exported files"):
    """Create (if needed) and check a writable output folder; one-line errors.

    Parameters
    ----------
    out_dir : str or os.PathLike
    what : str, optional
        What goes into the folder, for the error messages.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    FileExistsError
        ``out_dir`` is a file.
    PermissionError
        The folder cannot be written into.
    OSError
        The folder cannot be created.
    """
    p = Path(os.fspath(out_dir))
    if p.exists() and not p.is_dir():
        raise FileExistsError(f"out_dir: '{p}' is a file; give a folder for {what}")
    try:
        p.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OSError(f"out_dir: cannot create '{p}' ({exc.strerror or exc}); choose a folder "
                      f"you can write to") from None
    if not os.access(p, os.W_OK | os.X_OK):
        raise PermissionError(f"out_dir: cannot write into '{p}' (permission denied); choose a "
                              f"folder you can write to")
    return p


def _strain_note(strain):
    vsg = f", VSG {strain.vsg:g} px" if np.isfinite(strain.vsg) else ""
    return (f"{MEASURE_TITLES.get(strain.measure, strain.measure)} strain, {strain.fit} fit, "
            f"window {strain.window} points{vsg}; xy is tensor shear (half the engineering "
            f"shear angle); strain as plain numbers (0.01 = 1 %)")


def _write_text(p, text_writer):
    with writing(p, newline="\n") as fh:
        text_writer(fh)
    return p


def frame_to_csv(results, k, path, *, components=DEFAULT_COMPONENTS, window=DEFAULT_WINDOW,
                 measure=DEFAULT_MEASURE, digits=9, about=None, field=None, strain=None):
    """Write one frame of a results file as a CSV table: positions, displacements, strain.

    Parameters
    ----------
    results : str, os.PathLike or dic.sequence.Results
    k : int
        Completed frame (negative counts from the end).
    path : str or os.PathLike
        Output file; its folder must exist. A sidecar JSON (:func:`sidecar_path`) says what the
        numbers are.
    components : sequence of str or str, optional
        Strain quantities (see :data:`dic.figures.common.STRAIN_QUANTITIES`), e.g.
        ``("xx", "yy", "xy")`` or ``"xx,yy,xy"``.
    window, measure : optional
        As for :func:`dic.strain_field`.
    digits : int, optional
        Significant digits (17 gives every float back bit for bit).
    about : dict, optional
        More facts for the sidecar JSON.
    field, strain : optional
        Frame ``k``'s displacement field and its strain at ``window`` and ``measure``, when
        the caller has them already (they are then not read or computed again).

    Returns
    -------
    pathlib.Path

    Notes
    -----
    Columns: ``x_px, y_px`` (reference position), then ``x_mm, y_mm`` when the results file
    knows its scale, ``u_px, v_px`` (displacement) and ``u_mm, v_mm`` with a scale, the
    displacement gradient ``dudx, dudy, dvdx, dvdy`` of the subset match (dimensionless), one
    column per strain quantity (``strain_xx``, ``strain_yy``, ``strain_xy`` -- tensor shear --,
    ``rotation_deg``, ...), ``zncc`` and ``reason`` (0 = measured). ``nan`` marks values that
    do not exist (an unmeasured point, or a point too near the edge of the measured area for a
    strain). ``dic run`` writes its per-image tables with this function too, so both share
    their columns.
    """
    comps = check_components(components)
    res, opened = _open(results)
    try:
        kk = _frame(res, k)
        f = res.field(kk) if field is None else field
        s = res.strain(kk, window=window, measure=measure) if strain is None else strain
        scale = res.scale
        n = f.n_points
        g = np.asarray(f.grad, dtype=np.float64).reshape(n, 2, 2)
        cols = {"x_px": f.x, "y_px": f.y}
        if scale is not None:
            cols.update(x_mm=f.x * scale, y_mm=f.y * scale)
        cols.update(u_px=f.u, v_px=f.v)
        if scale is not None:
            cols.update(u_mm=f.u * scale, v_mm=f.v * scale)
        cols.update(dudx=g[:, 0, 0], dudy=g[:, 0, 1], dvdx=g[:, 1, 0], dvdy=g[:, 1, 1])
        cols.update(_strain_columns(s, comps))
        cols["zncc"] = np.where(f.valid, f.zncc, np.nan)
        data = np.column_stack([np.asarray(c, dtype=np.float64).reshape(n)
                                for c in cols.values()])
        reason = np.asarray(f.reason).reshape(n).astype(np.int64)
        t = float(res.image_times[kk]) if len(res.image_times) > kk else float("nan")
        head = ",".join([*cols, "reason"])
        fmt = [f"%.{int(digits)}g"] * data.shape[1] + ["%d"]
        table = np.column_stack([data, reason])
        p = Path(os.fspath(path))
        if not p.parent.is_dir():
            raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it "
                                    f"before writing '{p.name}'")
        write_sidecar(p, {
            "content": f"frame {kk} of a results file", "frame": kk,
            "image": str(res.image_names[kk]), "time_s": t if np.isfinite(t) else None,
            "scale_mm_per_px": scale,
            "units": "lengths in px and mm" if scale is not None else
                     "lengths in px (scale unknown, so no mm columns)",
            "strain": _strain_note(s), "points": n, "points_measured": f.n_valid,
            "reason": "0 = measured; other codes as dic.field.Reason",
            "settings": dict(res.settings), **(about or {})})

        def write(fh):
            fh.write(head + "\n")
            np.savetxt(fh, table, fmt=fmt, delimiter=",")

        return _write_text(p, write)
    finally:
        if opened:
            res.close()


def _frame(res, k):
    n = len(res)
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not -n <= int(k) < n:
        raise ValueError(f"k: frame {k!r} does not exist; the results file has frames 0 to "
                         f"{n - 1}")
    return int(k) % n


def results_to_npz(results, path, *, frames=None, components=DEFAULT_COMPONENTS,
                   window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE):
    """Write the displacement and strain of many frames into one ``.npz`` archive.

    Frames are written one at a time through memory-mapped temporary files, so memory use does
    not grow with the number of frames.

    Parameters
    ----------
    results : str, os.PathLike or dic.sequence.Results
    path : str or os.PathLike
        Output archive (``.npz`` is added if missing); its folder must exist.
    frames : sequence of int or slice, optional
        Frames to write (default all completed frames).
    components, window, measure : optional
        As for :func:`frame_to_csv`.

    Returns
    -------
    pathlib.Path

    Notes
    -----
    Arrays (``F`` frames, grid ``(ny, nx)``): ``frames (F,)``, ``image_names (F,)``,
    ``times (F,)`` in s (NaN unknown), ``x_px, y_px (ny, nx)``, ``u_px, v_px (F, ny, nx)``,
    one ``(F, ny, nx)`` array per strain quantity named as the CSV columns (``strain_xx``,
    ...), ``zncc (F, ny, nx)``, ``reason (F, ny, nx)`` int8, ``scale_mm_per_px`` (NaN if
    unknown), ``settings`` and ``strain_settings`` (JSON text) and ``format_version``. Load with
    ``numpy.load(path)``.
    """
    import tempfile
    import zipfile

    from numpy.lib.format import open_memmap

    comps = check_components(components)
    p = Path(os.fspath(path))
    if p.suffix != ".npz":
        p = p.with_name(p.name + ".npz")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    res, opened = _open(results)
    try:
        order = frame_indices(frames, len(res))
        F, (ny, nx) = len(order), res.shape
        try:
            tmp = Path(tempfile.mkdtemp(prefix=".partial-npz-", dir=p.parent))
        except OSError as exc:
            raise OSError(f"path: cannot write in '{p.parent}' ({exc.strerror or exc}); check "
                          f"the folder permissions") from None
        try:
            names = ["u_px", "v_px", *(_column(c) for c in comps), "zncc"]
            stacks = {nm: open_memmap(tmp / f"{nm}.npy", mode="w+", dtype=np.float64,
                                      shape=(F, ny, nx)) for nm in names}
            stacks["reason"] = open_memmap(tmp / "reason.npy", mode="w+", dtype=np.int8,
                                           shape=(F, ny, nx))
            strain_info = None
            for i, k in enumerate(order):
                f = res.field(k)
                s = res.strain(k, window=window, measure=measure)
                stacks["u_px"][i] = f.u
                stacks["v_px"][i] = f.v
                for nm, values in _strain_columns(s, comps).items():
                    stacks[nm][i] = values
                stacks["zncc"][i] = np.where(f.valid, f.zncc, np.nan)
                stacks["reason"][i] = f.reason
                if strain_info is None:
                    strain_info = {"measure": s.measure, "window": s.window, "fit": s.fit,
                                   "vsg_px": s.vsg, "step_px": s.step, "subset_px": s.subset,
                                   "shear": "tensor (half the engineering shear angle)"}
            for m in stacks.values():
                m.flush()
            del stacks
            small = {
                "frames": np.asarray(order, dtype=np.int64),
                "image_names": np.asarray([str(res.image_names[k]) for k in order]),
                "times": np.asarray([float(res.image_times[k]) for k in order]),
                "x_px": np.asarray(res.grid_x, dtype=np.float64),
                "y_px": np.asarray(res.grid_y, dtype=np.float64),
                "scale_mm_per_px": np.float64(res.scale if res.scale is not None else np.nan),
                "settings": np.array(json.dumps(res.settings, default=_jsonable)),
                "strain_settings": np.array(json.dumps(strain_info, default=_jsonable)),
                "format_version": np.array(1),
            }
            with atomic_write(p, "wb") as out, \
                    zipfile.ZipFile(out, "w", compression=zipfile.ZIP_DEFLATED,
                                    allowZip64=True) as z:
                for nm, arr in small.items():
                    with z.open(f"{nm}.npy", "w", force_zip64=True) as fh:
                        np.lib.format.write_array(fh, np.asanyarray(arr), allow_pickle=False)
                for nm in [*names, "reason"]:
                    z.write(tmp / f"{nm}.npy", arcname=f"{nm}.npy")
        except OSError as exc:
            raise write_error(p, exc) from None
        finally:
            import shutil

            shutil.rmtree(tmp, ignore_errors=True)
        return p
    finally:
        if opened:
            res.close()


# VTK XML data types of the numpy types written
_VTK_TYPES = {np.dtype("<f8"): "Float64", np.dtype("int8"): "Int8", np.dtype("uint8"): "UInt8"}


def _vtk_array(values, name=None, components=1, indent="        "):
    """A binary (base64) VTK XML ``DataArray``: a UInt32 byte count, then the data, encoded as
    one base64 stream (VTK file formats, Kitware: "binary" inline data without compression)."""
    import base64

    arr = np.ascontiguousarray(values)
    if arr.dtype.kind == "f":
        arr = arr.astype("<f8")
    data = arr.tobytes()
    head = np.array([len(data)], dtype="<u4").tobytes()
    attrs = f'type="{_VTK_TYPES[arr.dtype]}"'
    if name is not None:
        attrs += f' Name="{name}"'
    if components != 1:
        attrs += f' NumberOfComponents="{components}"'
    return (f'{indent}<DataArray {attrs} format="binary">\n{indent}  '
            f'{base64.b64encode(head + data).decode("ascii")}\n{indent}</DataArray>\n')


def _xml_comment(text):
    return "<!-- " + text.replace("--", "- -").replace("\n", " ") + " -->"


def results_to_vtk(results, out_dir, *, frames=None, components=DEFAULT_COMPONENTS,
                   window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE, name="results"):
    """Write a VTK time series: one structured grid per frame and a ``.pvd`` collection file.

    ParaView opens the ``.pvd`` file as a time series (its time steps are the images' times
    when all are known, else the frame numbers).

    Parameters
    ----------
    results : str, os.PathLike or dic.sequence.Results
    out_dir : str or os.PathLike
        Folder for the files (created if missing).
    frames, components, window, measure : optional
        As for :func:`results_to_npz`.
    name : str, optional
        Stem of the collection file: ``<name>.pvd`` beside ``<name>_0000.vts``, ... .

    Returns
    -------
    pathlib.Path
        The ``.pvd`` collection file.

    Notes
    -----
    Each ``.vts`` file is a VTK XML StructuredGrid (version 0.1, little-endian, binary data
    inline as base64) on the grid of points of the reference image: points ``(x, y, 0)`` in mm
    when the results file knows its scale, else in px (image coordinates: ``y`` points down,
    so look from -z to see the image the right way up). Point data: ``displacement_mm`` (or
    ``_px``, 3 components ``u, v, 0``; ParaView's Warp By Vector shows the deformed shape),
    one array per strain quantity (``strain_xx``, ... as in the CSV columns), ``zncc`` and
    ``reason`` (Int8, 0 = measured). NaN marks values that do not exist.

    A two-camera results file is written as a SURFACE: points are the reference 3-D positions
    (mm, left camera's frame; unmeasured points filled from a quadratic fit of the others, so
    the grid stays whole), ``displacement_mm`` is ``U, V, W``, the strain is the surface strain
    (:func:`dic.sequence.stereofile.surface_strain_field`), ``reason`` the 3-D reason, and
    ``W_mm``, ``shape_mm`` (distance from the best-fit plane), ``ray_gap_mm`` and the left
    image's ``u_px``, ``v_px`` are added.

    References
    ----------
    .. [1] Kitware, VTK File Formats (VTK User's Guide, "XML File Formats": StructuredGrid,
       Collection), https://docs.vtk.org/en/latest/design_documents/VTKFileFormats.html
    """
    comps = check_components(components)
    if not isinstance(name, str) or not name or any(c in name for c in "/\\\0"):
        raise ValueError(f"name: {name!r} is not a plain file stem; use e.g. 'results'")
    res, opened = _open(results)
    try:
        order = frame_indices(frames, len(res))
        out = out_folder(out_dir)
        ny, nx = res.shape
        scale = res.scale
        unit = "mm" if scale is not None else "px"
        factor = scale if scale is not None else 1.0
        extent = f"0 {nx - 1} 0 {ny - 1} 0 0"
        pts = np.zeros((ny * nx, 3))
        pts[:, 0] = np.asarray(res.grid_x, dtype=np.float64).ravel() * factor
        pts[:, 1] = np.asarray(res.grid_y, dtype=np.float64).ravel() * factor
        surface = _surface(res)        # two cameras: a 3-D surface in the left camera's frame
        if surface is not None:
            pts, unit, factor = surface["points"], "mm", 1.0
        points_xml = _vtk_array(pts, components=3)
        times = np.asarray([float(res.image_times[k]) for k in order])
        use_time = bool(np.isfinite(times).all())
        entries = []
        for k in order:
            f = res.field(k)
            s = res.strain(k, window=window, measure=measure)   # surface strain for 2 cameras
            disp = np.zeros((ny * nx, 3))
            disp[:, 0] = np.asarray(f.u, dtype=np.float64).ravel() * factor
            disp[:, 1] = np.asarray(f.v, dtype=np.float64).ravel() * factor
            reason = f.reason
            if surface is not None:
                disp, reason = surface["displacement"](k), surface["reason"](k)
            cols = _strain_columns(s, comps)
            first = next(iter(cols))
            arrays = [_vtk_array(disp, f"displacement_{unit}", 3)]
            arrays += [_vtk_array(v.ravel(), nm) for nm, v in cols.items()]
            arrays.append(_vtk_array(np.where(f.valid, f.zncc, np.nan).ravel(), "zncc"))
            arrays.append(_vtk_array(np.asarray(reason, dtype=np.int8).ravel(), "reason"))
            if surface is not None:
                arrays += [_vtk_array(a.ravel(), nm) for nm, a in surface["extra"](k, f).items()]
            comment = (f"dic {__version__} export of frame {k} (image {res.image_names[k]}); "
                       f"points and displacements in {unit}"
                       + (f" ({scale:g} mm/px)" if scale is not None else "") + "; "
                       + _strain_note(s) + "; NaN = no value; reason 0 = measured")
            text = ('<?xml version="1.0"?>\n' + _xml_comment(comment) + "\n"
                    '<VTKFile type="StructuredGrid" version="0.1" byte_order="LittleEndian">\n'
                    f'  <StructuredGrid WholeExtent="{extent}">\n'
                    f'    <Piece Extent="{extent}">\n'
                    f'      <PointData Scalars="{first}" Vectors="displacement_{unit}">\n'
                    + "".join(arrays) +
                    "      </PointData>\n"
                    "      <Points>\n" + points_xml + "      </Points>\n"
                    "    </Piece>\n  </StructuredGrid>\n</VTKFile>\n")
            fname = f"{name}_{k:04d}.vts"
            _write_text(out / fname, lambda fh, text=text: fh.write(text))
            step = f"{float(res.image_times[k]):.9g}" if use_time else str(k)
            entries.append(f'    <DataSet timestep="{step}" group="" part="0" '
                           f'file="{fname}"/>\n')
        pvd = ('<?xml version="1.0"?>\n'
               + _xml_comment(f"dic {__version__}: {len(order)} frames of "
                              f"{Path(res.path).name}; time steps are "
                              + ("image times in s" if use_time else "frame numbers")) + "\n"
               '<VTKFile type="Collection" version="0.1" byte_order="LittleEndian">\n'
               "  <Collection>\n" + "".join(entries) + "  </Collection>\n</VTKFile>\n")
        return _write_text(out / f"{name}.pvd", lambda fh: fh.write(pvd))
    finally:
        if opened:
            res.close()


def _surface(res):
    """Two-camera results as VTK pieces (None for a 2-D results file)."""
    from dic.sequence.stereofile import has_stereo, load_stereo, vtk_points

    if not has_stereo(res.path):
        return None
    st = load_stereo(res.path)
    gap = st.gap.astype(np.float64)
    return {"points": vtk_points(st),
            "displacement": lambda k: np.stack([st.U[k], st.V[k], st.W[k]], -1).reshape(-1, 3),
            "reason": lambda k: st.reason[k],
            # f: frame k's field, already read by the caller
            "extra": lambda k, f: {"W_mm": st.W[k], "shape_mm": st.shape_mm(),
                                   "ray_gap_mm": gap[k], "u_px": f.u, "v_px": f.v}}


def export_results(results, out_dir, *, format="csv", frames=None,
                   components=DEFAULT_COMPONENTS, window=DEFAULT_WINDOW, measure=DEFAULT_MEASURE):
    """Export a results file as CSV tables, one NumPy archive, or a VTK time series.

    Parameters
    ----------
    results : str, os.PathLike or dic.sequence.Results
    out_dir : str or os.PathLike
        Folder for the files (created if missing).
    format : {'csv', 'npz', 'vtk'}, optional
        ``csv``: ``frame_0000.csv``, ... (:func:`frame_to_csv`); ``npz``: ``results.npz``
        (:func:`results_to_npz`); ``vtk``: ``results.pvd`` with ``results_0000.vts``, ...
        (:func:`results_to_vtk`).
    frames : sequence of int or slice, optional
        Frames to export (default all completed frames).
    components : sequence of str or str, optional
        Strain quantities, e.g. ``"xx,yy,xy"`` (xy is tensor shear).
    window, measure : optional
        As for :func:`dic.strain_field`.

    Returns
    -------
    list of pathlib.Path
        The files written (for VTK the ``.pvd`` file last).

    Raises
    ------
    ValueError
        Unknown format, component or measure (the message lists the valid ones), a frame that
        does not exist, an empty results file.
    OSError
        Unreadable results file or an output folder that cannot be written.
    """
    from dic.strain import canonical_measure

    fmt = format.strip().lower() if isinstance(format, str) else None
    if fmt not in EXPORT_FORMATS:
        raise ValueError(f"format: unknown {format!r}; use one of: {', '.join(EXPORT_FORMATS)}")
    comps = check_components(components)
    measure = canonical_measure(measure)
    res, opened = _open(results)
    try:
        order = frame_indices(frames, len(res))
        out = out_folder(out_dir)
        if fmt == "csv":
            return [frame_to_csv(res, k, out / f"frame_{k:04d}.csv", components=comps,
                                 window=window, measure=measure) for k in order]
        if fmt == "npz":
            return [results_to_npz(res, out / "results.npz", frames=order, components=comps,
                                   window=window, measure=measure)]
        pvd = results_to_vtk(res, out, frames=order, components=comps, window=window,
                             measure=measure)
        return [out / f"results_{k:04d}.vts" for k in order] + [pvd]
    finally:
        if opened:
            res.close()
