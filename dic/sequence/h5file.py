"""Opening HDF5 files of the results file with one-line, typed errors naming the file."""

from __future__ import annotations

import errno
import re
from pathlib import Path

from dic.errors import DiskFull, NotWritable, ResultsFileError
from dic.files import is_disk_full

__all__ = ["load_h5py", "one_line", "open_h5"]


def load_h5py():
    """The h5py module, imported on first use (so that ``import dic`` stays light)."""
    import h5py  # noqa: PLC0415 -- keep `import dic` light

    return h5py


def one_line(exc: BaseException) -> str:
    """The gist of an exception on one line (HDF5's long I/O errors cut to their cause)."""
    raw = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
    text = " ".join(str(raw).split())  # without the "[Errno N]" prefix of OSError
    m = re.search(r"error message = '([^']*)'", text)
    if m:  # HDF5: "... errno = 28, error message = 'No space left on device' (time = ..."
        head = text.split(",")[0].split("(")[0].strip()
        return f"{head}: {m.group(1)}" if head else m.group(1)
    return text or type(exc).__name__


def open_h5(p: Path, mode: str, what: str, **kw):
    """h5py.File with every failure turned into a one-line error naming the file.

    Parameters
    ----------
    p : pathlib.Path
        The file.
    mode : str
        As for ``h5py.File``.
    what : str
        The action for the message (``"read"``, ``"create"``, ...).
    **kw
        More ``h5py.File`` options.

    Raises
    ------
    FileNotFoundError, PermissionError
        No such file; permission denied or a read-only file system.
    dic.errors.ResultsFileError
        Another process writes the file, or it is not an HDF5 file or is damaged.
    dic.errors.DiskFull
        The disk is full.
    """
    h5py = load_h5py()
    try:
        return h5py.File(p, mode, **kw)
    except OSError as exc:
        msg = one_line(exc)
        if "lock" in msg.lower() and ("errno = 11" in msg or "unavailable" in msg.lower()):
            raise ResultsFileError(f"cannot {what} results file '{p}': another process "
                                   "has it open for writing; wait for it to finish or stop "
                                   "it") from None
        if isinstance(exc, FileNotFoundError) or "errno = 2," in msg:
            raise FileNotFoundError(f"cannot {what} results file '{p}': no such "
                                    "file; check the path") from None
        code = exc.errno if isinstance(exc.errno, int) else None
        if code == errno.EROFS or "errno = 30," in msg:
            raise NotWritable(f"cannot {what} results file '{p}': the location is not "
                              "writable (read-only file system); choose a writable --out "
                              "folder, or copy the file to one") from None
        if isinstance(exc, PermissionError) or code in (errno.EACCES, errno.EPERM) \
                or "errno = 13," in msg:
            where = "the location is not writable" if mode != "r" else "not readable"
            raise PermissionError(f"cannot {what} results file '{p}': permission "
                                  f"denied ({where}); choose a writable --out folder or fix "
                                  "its permissions") from None
        error = DiskFull if is_disk_full(exc) else ResultsFileError
        raise error(f"cannot {what} results file '{p}' ({msg}); check that it is an HDF5 "
                    "results file and not damaged") from None
