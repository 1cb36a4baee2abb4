"""Helpers shared by the format modules of :mod:`specproc.io` (private).

* :func:`reader_boundary` turns any exception a parsing library raises into an
  :class:`~specproc.errors.InvalidInputError` that names the file.
* :func:`normalise_sequence_name` maps the free text of a header to specproc's sequence names.
* small checked converters for numbers read from headers.
"""

from __future__ import annotations

import contextlib
import logging
import os
import re
import warnings
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError

__all__ = [
    "SEQUENCE_NAMES",
    "check_options",
    "merge_value",
    "normalise_sequence_name",
    "optional_time_s",
    "reader_boundary",
    "require_file",
]

#: Sequence names used across specproc (basis simulation, reports).
SEQUENCE_NAMES: tuple[str, ...] = ("press", "steam", "semi-laser", "spin-echo", "pulse-acquire")

# token (lower case, letters and digits only) -> sequence name
_SEQUENCE_TOKENS: dict[str, str] = {
    "press": "press",
    "steam": "steam",
    "stim": "steam",
    "slaser": "semi-laser",
    "semilaser": "semi-laser",
    "spinecho": "spin-echo",
    "hahnecho": "spin-echo",
    "fid": "pulse-acquire",
    "pulseacquire": "pulse-acquire",
}
# edited or otherwise modified variants: not one of our plain names
_EDITED_TOKENS: tuple[str, ...] = ("mega", "hermes", "hercules", "jpress", "spectralediting")


def normalise_sequence_name(text: Any) -> str | None:
    """Map a header's free-text sequence name to one of :data:`SEQUENCE_NAMES`.

    Only obvious cases are mapped ("PRESS", "svs_press", "sLASER", "semi-LASER", "STEAM",
    "spin echo", "pulse-acquire", "FID"); edited variants such as MEGA-PRESS and anything
    unclear give ``None`` (the raw text stays in the Scan's header).

    Parameters
    ----------
    text : str or None
        Sequence name as written in a file header.

    Returns
    -------
    str or None
        ``"press"``, ``"steam"``, ``"semi-laser"``, ``"spin-echo"``, ``"pulse-acquire"`` or
        ``None``.

    Examples
    --------
    >>> normalise_sequence_name("svs_PRESS_v2")
    'press'
    >>> normalise_sequence_name("MEGA-PRESS") is None
    True
    """
    if not isinstance(text, str) or not text.strip():
        return None
    lowered = text.lower()
    squashed = re.sub(r"[^a-z0-9]", "", lowered)
    if any(tag in squashed for tag in _EDITED_TOKENS):
        return None
    # whole words first ("spin echo" -> "spinecho"), then tokens separated by punctuation
    for phrase, name in (("semi laser", "semi-laser"), ("spin echo", "spin-echo"),
                         ("pulse acquire", "pulse-acquire"), ("hahn echo", "spin-echo")):
        if phrase in re.sub(r"[^a-z0-9]+", " ", lowered):
            return name
    tokens = [t for t in re.split(r"[^a-z0-9]+", lowered) if t]
    found = {_SEQUENCE_TOKENS[t] for t in tokens if t in _SEQUENCE_TOKENS}
    for token in tokens:  # "svspress" or "presssvs" style names
        for key in ("press", "steam", "slaser", "semilaser"):
            if key in token and token not in _SEQUENCE_TOKENS:
                found.add(_SEQUENCE_TOKENS[key])
    if len(found) == 1:
        return found.pop()
    return None


def require_file(path: str | os.PathLike[str]) -> Path:
    """Return ``path`` as a Path, raising InvalidInputError if it is not a readable file."""
    p = Path(path)
    if not p.exists():
        raise InvalidInputError("file not found", p)
    if not p.is_file():
        raise InvalidInputError("not a regular file", p)
    return p


#: Loggers of the parsing libraries that report header problems on stderr (nibabel's
#: "nibabel.global" has its own stream handler); silenced while a reader runs.
_LIBRARY_LOGGERS: tuple[str, ...] = ("nibabel", "nibabel.global", "pydicom", "nmrglue")


@contextlib.contextmanager
def _quiet_loggers() -> Iterator[None]:
    loggers = [logging.getLogger(name) for name in _LIBRARY_LOGGERS]
    saved = [lg.disabled for lg in loggers]
    for lg in loggers:
        lg.disabled = True
    try:
        yield
    finally:
        for lg, was in zip(loggers, saved, strict=True):
            lg.disabled = was


@contextlib.contextmanager
def reader_boundary(path: str | os.PathLike[str], what: str) -> Iterator[None]:
    """Turn any exception raised inside the block into an InvalidInputError naming ``path``.

    InvalidInputErrors pass through (given the path if they have none); MemoryError becomes
    "too large"; warnings of the parsing libraries are silenced (the error says what is
    wrong instead).
    """
    try:
        with warnings.catch_warnings(), _quiet_loggers():
            warnings.simplefilter("ignore")
            with np.errstate(all="ignore"):
                yield
    except InvalidInputError as exc:
        raise exc.with_path(path) from None
    except MemoryError:
        raise InvalidInputError(f"{what} file is too large to read", path) from None
    except Exception as exc:  # any library error while parsing a malformed file
        detail = " ".join(str(exc).split())[:200] or type(exc).__name__
        raise InvalidInputError(f"corrupt or unreadable {what} file: {detail}", path) from exc


def check_options(
    options: Mapping[str, Any], allowed: tuple[str, ...], what: str, path: Any
) -> None:
    """Raise InvalidInputError if ``options`` has keys outside ``allowed``."""
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        valid = ", ".join(allowed) if allowed else "none"
        raise InvalidInputError(
            f"unknown load option(s) {', '.join(unknown)} for {what} files; valid: {valid}", path
        )


def optional_time_s(value: Any, name: str, path: Any, *, scale: float = 1.0) -> float | None:
    """A non-negative finite time from a header value (``None`` stays ``None``), times ``scale``."""
    if value is None:
        return None
    if isinstance(value, list | tuple) and len(value) == 1:
        value = value[0]
    if isinstance(value, bool):
        raise InvalidInputError(f"{name} is not a number: {value!r}", path)
    try:
        number = float(value) * scale
    except (TypeError, ValueError):
        raise InvalidInputError(f"{name} is not a number: {value!r}", path) from None
    if not np.isfinite(number) or number < 0:
        raise InvalidInputError(f"{name} must be a non-negative time, got {value!r}", path)
    return number


def merge_value(
    file_value: Any, option_value: Any, name: str, path: Any, *, rtol: float = 1e-6
) -> Any:
    """The value of a setting given by the file and/or a load option.

    The option fills in what the file lacks; when both are given they must agree (within
    ``rtol`` for numbers), otherwise InvalidInputError says which is which.
    """
    if option_value is None:
        return file_value
    if file_value is None:
        return option_value
    if isinstance(file_value, int | float) and isinstance(option_value, int | float):
        if np.isclose(float(file_value), float(option_value), rtol=rtol, atol=0.0):
            return file_value
    elif str(file_value) == str(option_value):
        return file_value
    raise InvalidInputError(
        f"the file gives {name} = {file_value!r} but the load option says {option_value!r}", path
    )
