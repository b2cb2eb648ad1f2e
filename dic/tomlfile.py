"""TOML text for the files the package writes (the standard library reads TOML, not writes it).

The analysis file of the set-up page (:mod:`dic.view.setup_data`) and the calibration file
(:mod:`dic.stereo.calfile`) are written with :func:`toml_text`; ``tomllib`` reads them back.
Only what those files need is written: numbers, booleans, strings, arrays, inline tables,
``[tables]`` and ``[[arrays of tables]]`` one level deep. Strings keep their characters as
they are (UTF-8), with the backslash, the double quote and the control characters escaped.

References
----------
.. [1] TOML v1.0.0, https://toml.io/en/v1.0.0 (keys, basic strings, floats incl. ``nan``
   and ``inf``, arrays, tables, inline tables, arrays of tables).
"""

from __future__ import annotations

import math
import re

from dic.errors import InputError

__all__ = ["toml_key", "toml_value", "toml_text"]

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")


def _string(text: str) -> str:
    """A TOML basic string: backslash, quote, control characters and DEL escaped."""
    out = []
    for c in text:
        if c in ('"', "\\"):
            out.append("\\" + c)
        elif ord(c) < 0x20 or ord(c) == 0x7F:
            out.append(f"\\u{ord(c):04x}")
        else:
            out.append(c)
    return '"' + "".join(out) + '"'


def toml_key(key) -> str:
    """A key as TOML writes it: bare when made of ``A-Za-z0-9_-`` only, quoted otherwise.

    Parameters
    ----------
    key : str

    Returns
    -------
    str
    """
    key = str(key)
    return key if _BARE_KEY.fullmatch(key) else _string(key)


def toml_value(value, *, finite: bool = False, what: str = "TOML file") -> str:
    """A value as TOML text.

    Parameters
    ----------
    value : bool, int, float, str, list, tuple, dict or NumPy value
        Lists, tuples and NumPy arrays become arrays; a dict becomes an inline table.
    finite : bool, optional
        Refuse NaN and infinity (default: write them as ``nan``, ``inf``, ``-inf``).
    what : str, optional
        The file being written, for messages.

    Returns
    -------
    str

    Raises
    ------
    dic.errors.InputError
        A value TOML cannot hold (None, other objects), or a non-finite number when
        ``finite``.
    """
    item = getattr(value, "tolist", None)  # NumPy scalars and arrays
    if callable(item) and not isinstance(value, (str, bytes)):
        value = item()
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(int(value))
    if isinstance(value, float):
        if finite and not math.isfinite(value):
            raise InputError(f"{what}: {value!r} cannot be written; give a finite number")
        return repr(float(value))  # 'nan', 'inf', '-inf' and '1e-05' are TOML floats too
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v, finite=finite, what=what) for v in value) + "]"
    if isinstance(value, dict):
        if not value:
            return "{}"
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_value(v, finite=finite, what=what)}"
                                for k, v in value.items()) + " }"
    raise InputError(f"{what}: cannot write a {type(value).__name__}")


def _tables(value) -> bool:
    return isinstance(value, (list, tuple)) and bool(value) \
        and all(isinstance(v, dict) for v in value)


def toml_text(data: dict, header: str = "", *, inline=(), finite: bool = False,
              what: str = "TOML file") -> str:
    """A dictionary as TOML text: top-level values first, then one table per dict value.

    Parameters
    ----------
    data : dict
        Top-level values. A dict value becomes a ``[table]`` (its own dict values inline
        tables), a non-empty list of dicts an array of tables (``[[name]]``, one per item);
        tables follow in the order of ``data``.
    header : str, optional
        Comment lines put first.
    inline : collection of str, optional
        Top-level keys whose dict value is written as an inline table instead.
    finite, what
        As for :func:`toml_value`.

    Returns
    -------
    str
        Ends in a newline.

    Raises
    ------
    dic.errors.InputError
        As for :func:`toml_value`.
    """
    def pairs(table):
        return [f"{toml_key(k)} = {toml_value(v, finite=finite, what=what)}"
                for k, v in table.items()]

    def is_table(k, v):
        return (isinstance(v, dict) and k not in inline) or _tables(v)

    lines = [f"# {h}" for h in header.splitlines()] if header else []
    lines += pairs({k: v for k, v in data.items() if not is_table(k, v)})
    for k, v in data.items():
        if not is_table(k, v):
            continue
        if isinstance(v, dict):
            lines += ["", f"[{toml_key(k)}]"] + pairs(v)
        else:
            for one in v:
                lines += ["", f"[[{toml_key(k)}]]"] + pairs(one)
    return "\n".join(lines) + "\n"
