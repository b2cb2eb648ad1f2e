"""Typed errors of the package: callers catch a class, never a piece of message text.

Every error keeps a one-line message that names the argument (or file) and the fix; the command
line prints it as ``dic: error: ...`` and exits with code 2. The classes derive from the built-in
``ValueError`` or ``OSError`` they refine, so code that catches those keeps working.
"""

from __future__ import annotations

__all__ = [
    "DicError", "InputError", "TooFewPoints", "RegionTooSmall", "SettingsConflict",
    "ResultsMismatch", "FileProblem", "ResultsFileError", "NotWritable", "DiskFull",
    "ImageError",
]


class DicError(Exception):
    """Base of every error the package raises on purpose."""


class InputError(DicError, ValueError):
    """A bad argument or a bad value in an input file; the message names it and the fix."""


class TooFewPoints(InputError):
    """A fit or an estimate has fewer valid points than it needs."""


class RegionTooSmall(InputError):
    """The region of interest (or the image) is too small for the subset, step or window."""


class SettingsConflict(InputError):
    """Two settings that cannot go together (checked before anything is written)."""


class ResultsMismatch(InputError):
    """An existing results file was made with other settings or other images.

    ``fix`` holds the advice the command line turns into an option (``--overwrite``).
    """

    def __init__(self, message: str, *, fix: str = ""):
        super().__init__(message)
        self.fix = fix


class FileProblem(DicError, OSError):
    """A file or folder that cannot be read or written; the message names it and the fix."""


class ResultsFileError(FileProblem):
    """The results file cannot be opened, is damaged or is not one of ours."""


class NotWritable(FileProblem):
    """A location that cannot be written (permissions, read-only file system)."""


class DiskFull(FileProblem):
    """The disk filled up while writing; what was completed before stays valid."""


class ImageError(FileProblem):
    """An image that cannot be read or decoded."""
