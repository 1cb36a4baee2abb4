"""The one error family of specproc.

Every problem with a user's file or parameter raises :class:`InvalidInputError` with a message
that names the file (when there is one) and says what is wrong. The command line turns it into
one line ``specproc: error: FILE: what is wrong`` and exit status 2.
"""

from __future__ import annotations

import os

__all__ = ["InvalidInputError", "SpecprocError"]


class SpecprocError(Exception):
    """Base class of all errors raised on purpose by specproc."""


class InvalidInputError(SpecprocError, ValueError):
    """A bad input file or parameter.

    Parameters
    ----------
    message : str
        What is wrong, in one line.
    path : str or os.PathLike, optional
        The file concerned; it is put in front of the message.
    """

    def __init__(self, message: str, path: str | os.PathLike[str] | None = None) -> None:
        self.message = " ".join(str(message).split())  # always one line
        self.path = None if path is None else os.fspath(path)
        super().__init__(self.message)

    def __str__(self) -> str:
        if self.path is None:
            return self.message
        return f"{self.path}: {self.message}"

    def with_path(self, path: str | os.PathLike[str]) -> InvalidInputError:
        """Return the same error naming ``path`` if it names no file yet."""
        if self.path is not None:
            return self
        return InvalidInputError(self.message, path)
