"""Writing displacement fields to plain open formats: CSV and NumPy ``.npz``.

CSV files hold one row per grid point (row-major over the grid, ``y`` outer, ``x`` inner) with
the columns of :data:`CSV_COLUMNS`. The first line is the column names; the next line is a
comment (``#``) with the analysis settings, so the file reads back with
``numpy.genfromtxt(path, delimiter=",", names=True, comments="#")`` and with spreadsheet or
pandas readers that skip ``#`` lines. Unmeasured points are ``nan`` in every number column and
keep their reason code (:class:`dic.field.Reason`).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from ._version import __version__
from .field import DisplacementField

__all__ = ["CSV_COLUMNS", "field_from_npz", "field_to_csv", "field_to_npz"]

#: column names of :func:`field_to_csv`, in order
CSV_COLUMNS = ("x_px", "y_px", "u_px", "v_px", "dudx", "dudy", "dvdx", "dvdy", "zncc", "reason")

# 17 significant digits round-trip any float64 exactly
_FLOAT_FMT = "%.17g"


def _check_field(field):
    if not isinstance(field, DisplacementField):
        raise ValueError(f"field must be a DisplacementField (from dic.correlate); got "
                         f"{type(field).__name__}")


def _settings_text(settings):
    """The settings as ``key=value`` pairs on one line, without commas (a CSV separator)."""
    parts = []
    for key, value in settings.items():
        if isinstance(value, (tuple, list)):
            value = "x".join(str(v) for v in value)
        parts.append(f"{key}={value}".replace(",", ";").replace("\n", " "))
    return "; ".join(parts)


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
    note = (f"# dic {__version__} displacement field; {field.n_valid} of {n} points measured; "
            f"pixels; reason 0 = measured; {_settings_text(field.settings)}")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"path: folder '{p.parent}' does not exist; create it before "
                                f"writing '{p.name}'")
    try:
        with open(p, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(head + "\n" + note + "\n")
            for row, r in zip(data, reason):
                fh.write(",".join(_FLOAT_FMT % v for v in row) + f",{r}\n")
    except OSError as exc:
        raise OSError(f"path: cannot write '{p}' ({exc.strerror or exc}); check the folder "
                      f"permissions and free space") from None
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
    try:
        np.savez_compressed(p, **arrays)
    except OSError as exc:
        raise OSError(f"path: cannot write '{p}' ({exc.strerror or exc}); check the folder "
                      f"permissions and free space") from None
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
