"""The one error family of specproc.

Every problem with a user's file or parameter raises :class:`InvalidInputError` with a message
that names the file (when there is one) and says what is wrong. The command line turns it into
one line ``specproc: error: FILE: what is wrong`` and exit status 2.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator

__all__ = ["InvalidInputError", "SpecprocError", "naming"]


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


@contextlib.contextmanager
def naming(path: str | os.PathLike[str] | None) -> Iterator[None]:
    """Give every InvalidInputError raised in the block that names no file the file ``path``.

    Used around the processing of one input file, so that a problem found deep inside (a
    spectral window outside the spectrum, too few points) still names the file.
    """
    try:
        yield
    except InvalidInputError as exc:
        if path is None or exc.path is not None:
            raise
        raise exc.with_path(path) from None
