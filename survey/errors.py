"""Errors that reach the user as one clean line (never a traceback)."""

from __future__ import annotations

from os import PathLike


class InputError(Exception):
    """A log, option or output path the tool cannot use.

    The CLI prints ``str(error)`` on one line and exits with status 1 (``UsageError``: 2).

    Parameters
    ----------
    path
        The file the problem is in (as the user gave it), or ``None``.
    message
        Short, plain description of the problem.
    where
        Location inside the file when known, e.g. ``"line 12"`` or ``"trkpt 7"``.
    """

    def __init__(self, path: str | PathLike[str] | None, message: str, where: str | None = None):
        self.path = None if path is None else str(path)
        self.message = " ".join(str(message).split())  # always one line
        self.where = where
        super().__init__(str(self))

    def __str__(self) -> str:
        parts = [p for p in (self.path, self.where, self.message) if p]
        return ": ".join(parts)


class UsageError(InputError):
    """Options that cannot be used together or a value an option cannot take, found after
    parsing (argparse reports the rest itself): one line, exit status 2, as for any usage
    mistake."""
