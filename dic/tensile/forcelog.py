"""Reading a testing machine's force log (CSV export) into SI-like units: s, N, mm.

Machines export their logs in many layouts. The reader makes few assumptions:

- lines starting with the comment character (``#`` by default) and blank lines are skipped;
  other lines before the table (a preamble such as ``Specimen: A1``) are skipped too;
- the delimiter is detected (tab, ``;``, ``|``, ``,``, or runs of blanks) unless given, and so is
  a decimal comma (``0,125`` in a ``;`` or tab separated file);
- the header is the line naming the columns the user asked for (or, when columns are given by
  number, the last non-numeric line before the numbers); a line of units right below it
  (``s;kN;mm``) is recognised and kept for the record;
- the user names the columns (time, force, optionally crosshead travel) and their units; nothing
  is guessed from column names.

Rows whose mapped columns are empty or not numbers, and times that repeat or go backwards, are
errors naming the line (``skip_bad_rows=True`` drops bad rows instead and says how many).

Only this module and :mod:`dic.tensile.forcesync` read such tables.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["ForceLog", "read_force_log", "read_table", "Table", "FORCE_UNITS", "TIME_UNITS",
           "LENGTH_UNITS", "unit_factor"]

#: force units and their size in newtons (1 lbf = 4.4482216152605 N exactly, by the definition
#: of the pound-force with standard gravity 9.80665 m/s^2 and the international pound)
FORCE_UNITS = {"N": 1.0, "kN": 1000.0, "lbf": 4.4482216152605}
#: time units and their size in seconds
TIME_UNITS = {"s": 1.0, "ms": 1e-3, "min": 60.0}
#: crosshead travel units and their size in millimetres (1 in = 25.4 mm exactly)
LENGTH_UNITS = {"mm": 1.0, "um": 1e-3, "in": 25.4}

_DELIMITERS = ("\t", ";", "|", ",")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+([eE][+-]?\d+)?$")
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$|^[+-]?(nan|inf|infinity)$",
                     re.IGNORECASE)


def unit_factor(unit, table, what):
    """Size of ``unit`` in the base unit of ``table`` (case-insensitive names).

    Parameters
    ----------
    unit : str
        Unit name, e.g. ``"kN"``.
    table : dict
        One of :data:`FORCE_UNITS`, :data:`TIME_UNITS`, :data:`LENGTH_UNITS`.
    what : str
        Argument name for the error message.

    Returns
    -------
    float

    Raises
    ------
    ValueError
        Unknown unit; the message lists the known ones.
    """
    if isinstance(unit, str):
        key = unit.strip().replace("\u00b5", "u").replace("\u03bc", "u")
        for name, factor in table.items():
            if name.lower() == key.lower():
                return factor
    raise ValueError(f"{what}: unknown unit {unit!r}; use one of {', '.join(table)}")


# --------------------------------------------------------------------------------------------
# a delimited table
# --------------------------------------------------------------------------------------------
@dataclass
class Table:
    """A delimited text table as found in a file: header, unit row and raw fields.

    Attributes
    ----------
    path : pathlib.Path
    columns : list of str
        Header names (empty strings where a column has no name).
    units_row : list of str or None
        A row of units found right below the header.
    rows : list of list of str
        Data rows (stripped fields).
    line_numbers : list of int
        File line number (from 1) of each data row.
    delimiter : str
        The delimiter used (``" "`` stands for runs of blanks).
    decimal : str
        ``"."`` or ``","``.
    """

    path: Path
    columns: list
    units_row: list | None
    rows: list
    line_numbers: list
    delimiter: str
    decimal: str

    def index(self, column, what) -> int:
        """Position of ``column`` (a header name, case-insensitive, or a 0-based number)."""
        found = ", ".join(repr(c) for c in self.columns) or "none"
        if isinstance(column, (int, np.integer)) and not isinstance(column, bool):
            if 0 <= column < len(self.columns):
                return int(column)
            raise ValueError(f"{what}: column number {column} does not exist in '{self.path}' "
                             f"(it has {len(self.columns)} columns: {found}); count from 0")
        if not isinstance(column, str) or not column.strip():
            raise ValueError(f"{what}: give a column name or number, got {column!r}; columns "
                             f"found: {found}")
        key = _norm(column)
        hits = [i for i, c in enumerate(self.columns) if _norm(c) == key]
        if not hits and key.isdigit():
            return self.index(int(key), what)
        if not hits:
            raise ValueError(f"{what}: no column {column!r} in '{self.path}'; columns found: "
                             f"{found}")
        if len(hits) > 1:
            raise ValueError(f"{what}: {len(hits)} columns are named {column!r} in "
                             f"'{self.path}'; give the column number instead (from 0)")
        return hits[0]

    def numbers(self, index, what, *, skip_bad_rows=False):
        """Column ``index`` as float64, and the mask of rows kept.

        Raises ValueError at the first empty or non-numeric field unless ``skip_bad_rows``.
        """
        out = np.full(len(self.rows), np.nan)
        ok = np.ones(len(self.rows), dtype=bool)
        for r, (row, line) in enumerate(zip(self.rows, self.line_numbers)):
            text = row[index] if index < len(row) else ""
            value = to_float(text, self.decimal)
            if value is None or not math.isfinite(value):
                if skip_bad_rows:
                    ok[r] = False
                    continue
                shown = "is empty" if not text else f"{text!r} is not a number"
                raise ValueError(f"{what}: line {line} of '{self.path}': column "
                                 f"{self.columns[index]!r} {shown}; fix or delete that line "
                                 "(or skip bad rows)")
            out[r] = value
        return out, ok


def _norm(name) -> str:
    return " ".join(str(name).strip().strip('"').strip("'").split()).casefold()


def to_float(text, decimal):
    t = text.strip().strip('"').strip("'")
    if decimal == ",":
        if "." in t:
            return None
        t = t.replace(",", ".")
    if not _NUMBER.match(t):
        return None
    return float(t)


def _split(line, delimiter):
    if delimiter == " ":
        parts = line.split()
    else:
        parts = line.split(delimiter)
    return [p.strip().strip('"').strip("'").strip() for p in parts]


def _read_text(p: Path, what: str) -> str:
    if not p.exists():
        raise FileNotFoundError(f"{what}: file not found: '{p}'; check the path")
    if p.is_dir():
        raise IsADirectoryError(f"{what}: '{p}' is a folder; give the CSV file")
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise OSError(f"{what}: cannot read '{p}' ({exc.strerror or exc}); check permissions")
    if b"\x00" in raw[:4096]:
        raise ValueError(f"{what}: '{p}' is not a text file; export the log as CSV text")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return raw.decode("cp1252", errors="replace")


def _detect_delimiter(lines):
    """The candidate whose field count is the same (and >= 2) on most lines."""
    tail = lines[-min(len(lines), 200):]
    for d in _DELIMITERS:
        counts = [ln.count(d) for ln in tail]
        common = max(set(counts), key=counts.count)
        if common >= 1 and counts.count(common) >= 0.8 * len(counts):
            return d
    counts = [len(ln.split()) for ln in tail]
    common = max(set(counts), key=counts.count)
    if common >= 2 and counts.count(common) >= 0.8 * len(counts):
        return " "
    return None


def read_table(path, *, what="path", want=(), delimiter=None, decimal=None,
               comment="#") -> Table:
    """Read a delimited text table with a header line.

    Parameters
    ----------
    path : str or os.PathLike
    what : str
        Argument name used in error messages.
    want : sequence of str or int
        Columns the caller needs; a header line naming all string entries is preferred.
    delimiter : str, optional
        Field delimiter; detected when None (tab, ``;``, ``|``, ``,``, blanks).
    decimal : {".", ","}, optional
        Decimal mark; detected when None (a comma only with another delimiter than ``,``).
    comment : str
        Lines starting with this are skipped.

    Returns
    -------
    Table

    Raises
    ------
    OSError
        Missing or unreadable file.
    ValueError
        No table found, or an unusable delimiter or decimal mark.
    """
    try:
        p = Path(os.fspath(path))
    except TypeError:
        raise ValueError(f"{what}: expected a file path, got {type(path).__name__}") from None
    text = _read_text(p, what)
    numbered = [(i + 1, ln.rstrip("\r\n")) for i, ln in enumerate(text.splitlines())]
    numbered = [(i, ln) for i, ln in numbered
                if ln.strip() and not (comment and ln.lstrip().startswith(comment))]
    if not numbered:
        raise ValueError(f"{what}: '{p}' holds no table (only blank or comment lines); check "
                         "the file")
    lines = [ln for _, ln in numbered]
    if delimiter is None:
        delimiter = _detect_delimiter(lines)
        if delimiter is None:
            raise ValueError(f"{what}: cannot tell the delimiter of '{p}' (tried tab, ';', "
                             "'|', ',' and blanks); give it explicitly")
    elif not isinstance(delimiter, str) or not delimiter or delimiter in "\r\n":
        raise ValueError(f"delimiter: give one character such as ',' or ';', got {delimiter!r}")
    split = [_split(ln, delimiter) for ln in lines]
    if decimal is None:
        decimal = "."
        if delimiter != ",":
            if any(_DECIMAL_COMMA.match(f) for row in split for f in row):
                decimal = ","
    elif decimal not in (".", ","):
        raise ValueError(f"decimal: use '.' or ',', got {decimal!r}")
    if decimal == "," and delimiter == ",":
        raise ValueError("decimal: a decimal comma needs another delimiter than ','; give "
                         "delimiter=';' (or the file's own)")

    def pattern(row):
        return tuple(f != "" and to_float(f, decimal) is not None for f in row)

    counts = [len(r) for r in split]
    width = max(set(counts), key=counts.count)
    names = {_norm(n) for n in want if isinstance(n, str)}
    header_at = first = None
    if names:
        # the header is the first line naming every wanted column; data follow it (after an
        # optional line of units)
        for i, row in enumerate(split):
            if names <= {_norm(c) for c in row} and not all(pattern(row)):
                header_at = i
                break
        if header_at is not None:
            first = header_at + 1
            if (first < len(split) and not any(pattern(split[first]))
                    and _looks_like_units(split[first])):
                first += 1
    if first is None:
        # the data block starts at the first row of the table's width holding numbers whose
        # next row has the same layout of numbers
        for i, row in enumerate(split):
            pat = pattern(row)
            if len(row) == width and any(pat) and (
                    i + 1 == len(split) or (len(split[i + 1]) == width
                                            and pattern(split[i + 1]) == pat)):
                first = i
                break
        if first is None:
            raise ValueError(f"{what}: '{p}' has no rows of numbers below a header; check the "
                             "file and the delimiter")
        head = split[:first]
        cands = [i for i, row in enumerate(head) if len(row) == width and not any(pattern(row))]
        if cands:
            header_at = cands[-1]
            if (header_at >= 1 and header_at - 1 in cands and header_at == len(head) - 1
                    and _looks_like_units(head[header_at])):
                header_at -= 1
    if first >= len(split):
        raise ValueError(f"{what}: '{p}' has a header but no rows below it; check the file")
    if header_at is None:
        columns = [f"column {j}" for j in range(len(split[first]))]
        units_row = None
    else:
        columns = split[header_at]
        units_row = split[header_at + 1] if header_at + 1 < first else None
    # trailing empty fields from a trailing delimiter
    while columns and columns[-1] == "" and all((len(r) >= len(columns) and r[-1] == "")
                                                for r in split[first:first + 5]):
        columns = columns[:-1]
    n = len(columns)
    rows = [row[:n] if len(row) > n and all(f == "" for f in row[n:]) else row
            for row in split[first:]]
    return Table(path=p, columns=columns, units_row=units_row, rows=rows,
                 line_numbers=[i for i, _ in numbered[first:]], delimiter=delimiter,
                 decimal=decimal)


_UNIT_WORDS = {u.lower() for u in (*FORCE_UNITS, *TIME_UNITS, *LENGTH_UNITS)} | {
    "", "-", "%", "sec", "mpa", "n/mm2", "n/mm^2", "mm/mm", "kgf", "h", "hh:mm:ss", "1"}


def _looks_like_units(row):
    """A row whose fields are all unit names, bare or in brackets (``s``, ``(kN)``, ``[mm]``)."""
    return all(f.strip().strip("()[]").strip().lower().replace("\u00b5", "u") in _UNIT_WORDS
               for f in row)


# --------------------------------------------------------------------------------------------
# the force log
# --------------------------------------------------------------------------------------------
@dataclass
class ForceLog:
    """A testing machine's record: time, force and optionally crosshead travel.

    Attributes
    ----------
    time : ndarray of float64
        Seconds on the machine's clock, strictly increasing.
    force : ndarray of float64
        Newtons.
    crosshead : ndarray of float64 or None
        Crosshead travel in millimetres, if mapped.
    path : pathlib.Path
        The file read.
    columns : list of str
        All column names found in the file.
    mapping : dict
        Which file column (and unit) gave each quantity.
    delimiter, decimal : str
        As detected or given.
    notes : list of str
        Remarks on the reading (unit row found, rows skipped).
    """

    time: np.ndarray
    force: np.ndarray
    crosshead: np.ndarray | None
    path: Path
    columns: list
    mapping: dict
    delimiter: str
    decimal: str
    notes: list = field(default_factory=list)

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def span(self) -> tuple[float, float]:
        """First and last time, s."""
        return float(self.time[0]), float(self.time[-1])

    def summary(self) -> str:
        """One line: rows, time span, force range."""
        t0, t1 = self.span
        return (f"force log '{self.path.name}': {len(self)} rows, {t0:g} .. {t1:g} s, force "
                f"{self.force.min() / 1000:.4g} .. {self.force.max() / 1000:.4g} kN"
                + ("" if self.crosshead is None else
                   f", crosshead {self.crosshead.min():.4g} .. {self.crosshead.max():.4g} mm"))


def read_force_log(path, *, time_column, force_column, crosshead_column=None, time_unit="s",
                   force_unit="N", crosshead_unit="mm", delimiter=None, decimal=None,
                   comment="#", skip_bad_rows=False) -> ForceLog:
    """Read a testing machine's CSV export.

    Parameters
    ----------
    path : str or os.PathLike
        The exported text file.
    time_column, force_column : str or int
        Header names (case-insensitive) or 0-based column numbers.
    crosshead_column : str or int, optional
        Crosshead travel column.
    time_unit : {"s", "ms", "min"}
    force_unit : {"N", "kN", "lbf"}
    crosshead_unit : {"mm", "um", "in"}
    delimiter : str, optional
        Detected when None.
    decimal : {".", ","}, optional
        Detected when None.
    comment : str
        Lines starting with it are skipped (default ``#``).
    skip_bad_rows : bool
        Drop rows whose mapped fields are empty or not numbers instead of stopping (the number
        dropped is in ``notes``).

    Returns
    -------
    ForceLog
        Time in s, force in N, crosshead in mm.

    Raises
    ------
    OSError
        The file is missing or unreadable.
    ValueError
        Unknown unit; a column that does not exist (the message lists those found); an empty or
        non-numeric value; times that repeat or go backwards; fewer than two rows.
    """
    ft = unit_factor(time_unit, TIME_UNITS, "time_unit")
    ff = unit_factor(force_unit, FORCE_UNITS, "force_unit")
    fc = (unit_factor(crosshead_unit, LENGTH_UNITS, "crosshead_unit")
          if crosshead_column is not None else None)
    want = [c for c in (time_column, force_column, crosshead_column) if c is not None]
    table = read_table(path, what="force log", want=want, delimiter=delimiter, decimal=decimal,
                       comment=comment)
    idx = {"time": table.index(time_column, "time_column"),
           "force": table.index(force_column, "force_column")}
    if crosshead_column is not None:
        idx["crosshead"] = table.index(crosshead_column, "crosshead_column")
    values, keep = {}, np.ones(len(table.rows), dtype=bool)
    for key, i in idx.items():
        values[key], ok = table.numbers(i, f"{key}_column", skip_bad_rows=skip_bad_rows)
        keep &= ok
    notes = []
    if table.units_row is not None:
        notes.append("unit row in the file: " + ", ".join(
            f"{table.columns[i]} [{table.units_row[i]}]" for i in idx.values()
            if i < len(table.units_row)))
    if not keep.all():
        bad = [table.line_numbers[r] for r in np.flatnonzero(~keep)]
        notes.append(f"skipped {len(bad)} rows with empty or non-numeric values (lines "
                     f"{_lines(bad)})")
    lines = [ln for ln, k in zip(table.line_numbers, keep) if k]
    t = values["time"][keep] * ft
    if t.size < 2:
        raise ValueError(f"force log: '{table.path}' has {t.size} usable rows; a log needs at "
                         "least two")
    dt = np.diff(t)
    if np.any(dt <= 0):
        j = int(np.flatnonzero(dt <= 0)[0])
        if dt[j] == 0:
            raise ValueError(f"force log: line {lines[j + 1]} of '{table.path}' repeats the time "
                             f"{t[j + 1] / ft:g} {time_unit} of line {lines[j]}; delete the "
                             "duplicate row")
        raise ValueError(f"force log: time goes back at line {lines[j + 1]} of '{table.path}' "
                         f"({t[j + 1] / ft:g} after {t[j] / ft:g} {time_unit}); sort the log "
                         "by time or check the time column")
    mapping = {"time": (table.columns[idx["time"]], time_unit),
               "force": (table.columns[idx["force"]], force_unit)}
    cross = None
    if crosshead_column is not None:
        cross = values["crosshead"][keep] * fc
        mapping["crosshead"] = (table.columns[idx["crosshead"]], crosshead_unit)
    return ForceLog(time=t, force=values["force"][keep] * ff, crosshead=cross, path=table.path,
                    columns=list(table.columns), mapping=mapping, delimiter=table.delimiter,
                    decimal=table.decimal, notes=notes)


def _lines(numbers, limit=8):
    shown = ", ".join(str(n) for n in numbers[:limit])
    return shown + (" ..." if len(numbers) > limit else "")
