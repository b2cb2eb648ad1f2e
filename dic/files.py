"""Safe writing of files: never half a file, never a stale temporary.

Every writer of an output file goes through :func:`atomic_write`: the content goes into a
temporary file beside the target (same folder, so the same file system), which is flushed,
synced to disk and renamed over the target with ``os.replace`` (atomic on POSIX and Windows).
A failed or interrupted write removes the temporary and leaves the target as it was.

Writers of outputs use it through :func:`writing` (or :func:`write_text`, :func:`write_json`),
which also turn a failure (missing folder, no permission, full disk) into the package's
one-line error (:func:`write_error`). Every JSON file is strict JSON (:func:`json_text`):
NumPy values become plain numbers and lists, NaN and infinity become ``null``.

The other helpers are the pieces the results file (:mod:`dic.sequence.writer`) builds on:
temporary names (:func:`partial_name`) and the removal of those a killed writer left
(:func:`remove_stale_partials`), syncing files and folders, the writer's exclusive lock, and
the check that the target's folder exists.
"""

from __future__ import annotations

import contextlib
import errno
import math
import os
import re
from pathlib import Path

from dic.errors import DiskFull, FileProblem, NotWritable

__all__ = ["PARTIAL_PREFIX", "atomic_write", "writing", "write_text", "write_json", "write_error",
           "json_safe", "json_text", "sidecar_path", "write_sidecar", "check_folder",
           "fsync_file", "fsync_folder", "is_disk_full", "lock_file", "partial_name",
           "remove_stale_partials", "sparse_copy", "unlock_file"]

#: temporary files are named ``.partial-<process id>-<target name>`` (the target's extension
#: stays last, so writers that choose a format by the extension still work)
PARTIAL_PREFIX = ".partial-"


def partial_name(path) -> Path:
    """The temporary file of this process for ``path``, in the same folder.

    Parameters
    ----------
    path : str or os.PathLike
        The target file.

    Returns
    -------
    pathlib.Path
        ``<folder>/.partial-<pid>-<name>``.
    """
    p = Path(os.fspath(path))
    return p.with_name(f"{PARTIAL_PREFIX}{os.getpid()}-{p.name}")


def fsync_file(path) -> None:
    """Flush a closed file's data to the disk (``os.fsync``).

    Parameters
    ----------
    path : str or os.PathLike
    """
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def fsync_folder(folder) -> None:
    """Make a rename inside ``folder`` durable; silently does nothing where that is impossible.

    Parameters
    ----------
    folder : str or os.PathLike
    """
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def remove_stale_partials(path) -> None:
    """Remove temporary files for ``path`` that writers no longer running left behind.

    Temporaries of processes still alive are kept.

    Parameters
    ----------
    path : str or os.PathLike
        The target file whose temporaries to look for.
    """
    p = Path(os.fspath(path))
    pattern = re.compile("^" + re.escape(PARTIAL_PREFIX) + r"(\d+)-" + re.escape(p.name) + "$")
    try:
        entries = list(p.parent.iterdir())
    except OSError:
        return
    for entry in entries:
        m = pattern.match(entry.name)
        if not m:
            continue
        pid = int(m.group(1))
        if pid != os.getpid():
            try:
                os.kill(pid, 0)
                continue  # that process still lives: leave its file alone
            except ProcessLookupError:
                pass
            except PermissionError:
                continue
        try:
            entry.unlink()
        except OSError:
            pass


def check_folder(path, action: str) -> None:
    """Check that the folder of ``path`` exists and is a folder.

    Parameters
    ----------
    path : pathlib.Path
        The file about to be written.
    action : str
        What is being done, for the message, e.g. ``"create results file"``.

    Raises
    ------
    FileNotFoundError
        The folder does not exist.
    NotADirectoryError
        It is not a folder.
    """
    p = Path(os.fspath(path))
    folder = p.parent
    if not folder.exists():
        raise FileNotFoundError(f"cannot {action} '{p}': folder '{folder}' does not exist; "
                                "create it or choose another --out")
    if not folder.is_dir():
        raise NotADirectoryError(f"cannot {action} '{p}': '{folder}' is not a folder; choose "
                                 "another --out")


def is_disk_full(exc: BaseException) -> bool:
    """True if ``exc`` reports a full disk (``ENOSPC``, also inside HDF5's error text)."""
    if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT):
        return True
    text = str(exc)
    return f"errno = {errno.ENOSPC}," in text or os.strerror(errno.ENOSPC) in text


def reserve_space(path, ranges) -> None:
    """Make the file system allocate disk blocks for byte ranges of an existing file now.

    A later write into a reserved range cannot fail for want of space, so a full disk shows
    up here, before anything is written, instead of in a library that buffers the write.
    The contents of the file do not change (unwritten ranges keep reading as zeros).

    Parameters
    ----------
    path : str or os.PathLike
        The file.
    ranges : iterable of (int, int)
        ``(offset, length)`` pairs in bytes, inside the file.

    Raises
    ------
    OSError
        ``ENOSPC`` (or ``EDQUOT``) when the disk or quota is full; other errors of the system.
        File systems that cannot reserve space are skipped silently.
    """
    fallocate = getattr(os, "posix_fallocate", None)
    if fallocate is None:  # pragma: no cover - not on this system
        return
    fd = os.open(os.fspath(path), os.O_WRONLY)
    try:
        for offset, length in ranges:
            if length <= 0:
                continue
            try:
                fallocate(fd, int(offset), int(length))
            except OSError as exc:
                if exc.errno in (errno.EOPNOTSUPP, errno.EINVAL, errno.ENOSYS):
                    return  # no reservation on this file system: the writes will tell
                raise
    finally:
        os.close(fd)


def lock_file(path, label: str = "file"):
    """Take an exclusive advisory lock (``flock``) on an existing file.

    A second writer fails at once; the kernel drops the lock when the process ends, however it
    ends.

    Parameters
    ----------
    path : str or os.PathLike
        The file to lock.
    label : str, optional
        What the file is, for messages (``"results file"``).

    Returns
    -------
    int or None
        The descriptor holding the lock (give it to :func:`unlock_file`), or None where the
        system has no such locks.

    Raises
    ------
    FileNotFoundError
        The file does not exist.
    dic.errors.FileProblem
        Another process holds the lock, or the file cannot be opened.
    """
    try:
        import fcntl  # noqa: PLC0415 -- POSIX only
    except ImportError:
        return None
    p = Path(os.fspath(path))
    try:
        fd = os.open(p, os.O_RDONLY)
    except FileNotFoundError:
        raise FileNotFoundError(f"cannot open {label} '{p}': no such file; check the "
                                "path") from None
    except OSError as exc:
        raise FileProblem(f"cannot open {label} '{p}' ({' '.join(str(exc).split())}); check "
                          "the path") from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        raise FileProblem(f"cannot open {label} '{p}' for writing: another process has it "
                          "open; wait for it to finish or stop it") from None
    except OSError:
        return fd  # the file system has no locks: carry on without
    return fd


def unlock_file(fd) -> None:
    """Release a lock from :func:`lock_file` (closing its descriptor); None is ignored."""
    if fd is not None:
        os.close(fd)


def sparse_copy(src, dst) -> None:
    """Copy a file, skipping holes where the system can find them (unused space stays unused).

    Parameters
    ----------
    src, dst : pathlib.Path
        Source and destination (``dst`` is overwritten).
    """
    size = os.stat(src).st_size
    with open(src, "rb") as fi, open(dst, "wb") as fo:
        fdi = fi.fileno()
        pos = 0
        while pos < size:
            try:
                start = os.lseek(fdi, pos, os.SEEK_DATA)
                end = os.lseek(fdi, start, os.SEEK_HOLE)
            except (AttributeError, OSError) as exc:  # no hole finding, or no data left
                if isinstance(exc, OSError) and exc.errno == errno.ENXIO:  # only a hole left
                    break
                start, end = pos, size
            fi.seek(start)
            fo.seek(start)
            left = end - start
            while left > 0:
                block = fi.read(min(left, 1 << 22))
                if not block:
                    break
                fo.write(block)
                left -= len(block)
            pos = end
        fo.truncate(size)


@contextlib.contextmanager
def atomic_write(path, mode="w", *, encoding="utf-8", newline=None, fsync=True):
    """Write a file through a temporary beside it that replaces it only when complete.

    Parameters
    ----------
    path : str or os.PathLike
        The target file; its folder must exist.
    mode : {"w", "wb", None}, optional
        ``"w"`` (text, default) or ``"wb"`` (binary): the block gets an open file object.
        None: the block gets the temporary's path, for writers that need a file name (HDF5,
        matplotlib); they must have closed it when the block ends. The temporary keeps the
        target's extension.
    encoding : str, optional
        Text mode only; default UTF-8.
    newline : str, optional
        Text mode only; as for :func:`open`.
    fsync : bool, optional
        Sync the temporary and the folder to disk (default True), so that a power cut leaves
        the old file or the new one.

    Yields
    ------
    file object or pathlib.Path

    Raises
    ------
    OSError
        As raised by the writing; the temporary is removed and the target is unchanged.

    Examples
    --------
    >>> with atomic_write(folder / "table.csv", newline="\\n") as fh:  # doctest: +SKIP
    ...     fh.write("x,y\\n")
    """
    if mode not in ("w", "wb", None):
        raise ValueError(f"mode: {mode!r} is not 'w', 'wb' or None; pick one")
    p = Path(os.fspath(path))
    tmp = partial_name(p)
    try:
        if mode is None:
            yield tmp
            if fsync:
                fsync_file(tmp)  # after the writer closed it: its last records are in
        else:
            kw = dict(encoding=encoding, newline=newline) if mode == "w" else {}
            with open(tmp, mode, **kw) as fh:
                yield fh
                fh.flush()
                if fsync:
                    os.fsync(fh.fileno())
        os.replace(tmp, p)
    except BaseException:
        try:
            tmp.unlink()
        except OSError:
            pass
        raise
    if fsync:
        fsync_folder(p.parent)


def sidecar_path(path) -> Path:
    """The JSON file that describes a CSV table: the same name ending in ``.json``.

    Parameters
    ----------
    path : str or os.PathLike
        The table.

    Returns
    -------
    pathlib.Path
    """
    return Path(os.fspath(path)).with_suffix(".json")


def write_error(path, exc: OSError, label: str | None = "path") -> OSError:
    """The one-line error for a file that could not be written.

    Parameters
    ----------
    path : str or os.PathLike
        The file being written.
    exc : OSError
        What the system (or the writer) raised.
    label : str or None, optional
        The argument that named the file, put first (``"path"``, ``"--json"``); None for none.

    Returns
    -------
    OSError
        To raise (``raise write_error(p, exc) from None``): ``FileNotFoundError`` when the
        folder does not exist, :class:`dic.errors.DiskFull` when the disk or quota is full,
        :class:`dic.errors.NotWritable` for no permission or a read-only file system,
        :class:`dic.errors.FileProblem` otherwise. Each names the file and the fix.
    """
    p = Path(os.fspath(path))
    head = f"{label}: cannot write '{p}'" if label else f"cannot write '{p}'"
    why = " ".join(str(exc.strerror or exc).split()) or type(exc).__name__
    if isinstance(exc, FileNotFoundError) and not p.parent.is_dir():
        return FileNotFoundError(f"{head}: folder '{p.parent}' does not exist; create it or "
                                 "choose another folder")
    if is_disk_full(exc):
        return DiskFull(f"{head} ({why}); free disk space or choose another folder")
    if isinstance(exc, PermissionError) or exc.errno in (errno.EACCES, errno.EPERM,
                                                         errno.EROFS):
        return NotWritable(f"{head} ({why}); choose a folder you can write to or fix its "
                           "permissions")
    return FileProblem(f"{head} ({why}); check the folder permissions and free space")


@contextlib.contextmanager
def writing(path, mode="w", *, label: str | None = "path", encoding="utf-8", newline=None,
            fsync=True):
    """:func:`atomic_write` whose failures become the package's one-line error.

    Parameters
    ----------
    path : str or os.PathLike
        The target file.
    mode : {"w", "wb", None}, optional
        As for :func:`atomic_write`: an open file object, or (None) the temporary's path.
    label : str or None, optional
        The argument that named the file, for the message (see :func:`write_error`).
    encoding, newline, fsync
        As for :func:`atomic_write`.

    Yields
    ------
    file object or pathlib.Path

    Raises
    ------
    OSError
        From :func:`write_error`, for any ``OSError`` raised while writing (inside the block
        too); the target is unchanged and no temporary is left.
    """
    p = Path(os.fspath(path))
    try:
        with atomic_write(p, mode, encoding=encoding, newline=newline, fsync=fsync) as target:
            yield target
    except OSError as exc:
        raise write_error(p, exc, label) from None


def write_text(path, text: str, *, label: str | None = "path", newline="\n") -> Path:
    """Write a text file (UTF-8) atomically; failures raise the one-line error.

    Parameters
    ----------
    path : str or os.PathLike
        The target file; its folder must exist.
    text : str
        The whole content.
    label : str or None, optional
        The argument that named the file, for the message (see :func:`write_error`).
    newline : str, optional
        Line ending written for each ``"\\n"`` (default: ``"\\n"`` on every system).

    Returns
    -------
    pathlib.Path

    Raises
    ------
    OSError
        See :func:`write_error`.
    """
    p = Path(os.fspath(path))
    with writing(p, label=label, newline=newline) as fh:
        fh.write(text)
    return p


def json_safe(value):
    """``value`` made fit for strict JSON.

    NumPy scalars and arrays become Python numbers and (nested) lists, tuples become lists,
    dictionary keys become strings, NaN and infinity become None; any other object becomes
    its ``str``.

    Parameters
    ----------
    value : object

    Returns
    -------
    object
        Made of dict, list, str, int, float (finite), bool and None only.
    """
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    item = getattr(value, "tolist", None)  # NumPy scalars and arrays
    if callable(item) and not isinstance(value, (str, bytes)):
        return json_safe(item())
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    return str(value)


def json_text(value, *, indent: int | None = 2) -> str:
    """Strict JSON text of ``value`` (through :func:`json_safe`), ending in a newline.

    Parameters
    ----------
    value : object
    indent : int or None, optional
        As for :func:`json.dumps`; None for the compact form on one line.

    Returns
    -------
    str
        Never holds ``NaN`` or ``Infinity``, which strict JSON readers refuse.
    """
    import json

    return json.dumps(json_safe(value), indent=indent, allow_nan=False) + "\n"


def write_json(path, value, *, label: str | None = "path", indent: int | None = 2) -> Path:
    """Write ``value`` as a strict JSON file (:func:`json_text`), atomically.

    Parameters
    ----------
    path : str or os.PathLike
        The target file; its folder must exist.
    value : object
        Anything :func:`json_safe` takes.
    label : str or None, optional
        The argument that named the file, for the message (see :func:`write_error`).
    indent : int or None, optional
        As for :func:`json_text`.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    OSError
        See :func:`write_error`.
    """
    return write_text(path, json_text(value, indent=indent), label=label)


def write_sidecar(path, about: dict, software: str = "") -> Path:
    """Write the sidecar JSON (:func:`sidecar_path`) that says what a CSV table holds.

    The tables themselves hold only a header line of column names (with units) and numbers,
    so that any CSV reader takes them as they are; their metadata lives here.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV table the sidecar describes.
    about : dict
        What the table holds; values are made JSON-safe (NaN becomes null).
    software : str, optional
        Name and version of the writer, stored first.

    Returns
    -------
    pathlib.Path
        The sidecar written (atomically).

    Raises
    ------
    OSError
        The file cannot be written.
    """
    p = sidecar_path(path)
    data = {"software": software} if software else {}
    data["table"] = Path(os.fspath(path)).name
    data.update(dict(about))
    return write_json(p, data)
