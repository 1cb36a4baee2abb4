"""Helpers shared by the format modules of :mod:`specproc.io` (private).

* :func:`reader_boundary` turns any exception a parsing library raises into an
  :class:`~specproc.errors.InvalidInputError` that names the file.
* :func:`normalise_sequence_name` maps the free text of a header to specproc's sequence names.
* small checked converters for numbers read from headers.
* :func:`max_input_bytes` / :func:`read_capped`: the cap on the data a file may declare
  (checked before anything is decompressed or allocated) and a streaming read up to it.
* :func:`check_physical_ranges`: the plausible range of every acquisition value, with a message
  naming the header key and its unit.
"""

from __future__ import annotations

import contextlib
import logging
import os
import re
import reprlib
import warnings
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError

__all__ = [
    "DEFAULT_MAX_INPUT_MB",
    "PHYSICAL_RANGES",
    "SEQUENCE_NAMES",
    "brief",
    "check_declared_size",
    "check_options",
    "check_physical_ranges",
    "max_input_bytes",
    "merge_value",
    "normalise_sequence_name",
    "optional_time_s",
    "read_capped",
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
        raise InvalidInputError(f"{name} is not a number: {brief(value)}", path)
    try:
        number = float(value) * scale
    except OverflowError:  # an integer beyond float range
        number = float("inf")
    except (TypeError, ValueError):
        raise InvalidInputError(f"{name} is not a number: {brief(value)}", path) from None
    if not np.isfinite(number) or number < 0:
        raise InvalidInputError(f"{name} must be a non-negative time, got {brief(value)}", path)
    return number


_BRIEF = reprlib.Repr()  # Python 3.11 sets the limits by attribute
_BRIEF.maxlong, _BRIEF.maxstring, _BRIEF.maxother, _BRIEF.maxlist, _BRIEF.maxlevel = (
    24, 40, 40, 4, 2)


def brief(value: Any) -> str:
    """A short rendering of a header value for an error message (long numbers and texts cut)."""
    return _BRIEF.repr(value)


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


# ------------------------------------------------------------------------------ size cap
#: Largest amount of data (decompressed) one input file may declare, MiB. Single-voxel scans
#: are far smaller (2,048 points x 32 coils x 512 transients in complex64 is 256 MiB).
DEFAULT_MAX_INPUT_MB: float = 2048.0
#: Environment variable that changes :data:`DEFAULT_MAX_INPUT_MB`.
MAX_INPUT_ENV: str = "SPECPROC_MAX_INPUT_MB"
_CHUNK_BYTES = 1 << 22


def max_input_bytes() -> int:
    """The cap on the decompressed data of one input file, bytes.

    ``SPECPROC_MAX_INPUT_MB`` (a positive number of MiB) overrides the default of
    :data:`DEFAULT_MAX_INPUT_MB`; an unusable value is an error naming the variable.
    """
    text = os.environ.get(MAX_INPUT_ENV, "").strip()
    if not text:
        return int(DEFAULT_MAX_INPUT_MB * 2**20)
    try:
        mb = float(text)
    except ValueError:
        mb = float("nan")
    if not np.isfinite(mb) or mb <= 0:
        raise InvalidInputError(
            f"environment variable {MAX_INPUT_ENV} must be a positive number of MiB, "
            f"got {text[:40]!r}"
        )
    return int(min(mb, 2.0**43) * 2**20)


def check_declared_size(n_bytes: int, path: Any, what: str) -> None:
    """Raise InvalidInputError if a file declares more data than :func:`max_input_bytes`."""
    cap = max_input_bytes()
    if n_bytes > cap:
        raise InvalidInputError(
            f"the {what} declares {n_bytes / 2**20:.6g} MiB of data, more than the limit of "
            f"{cap / 2**20:.6g} MiB (set {MAX_INPUT_ENV} to raise it)",
            path,
        )


def read_capped(fh: Any, n_bytes: int, path: Any, what: str) -> bytes:
    """Read exactly ``n_bytes`` from an open (possibly gzip) stream, in chunks.

    The size is checked against the cap first, so nothing larger is ever allocated; a stream
    that ends early is "truncated".
    """
    check_declared_size(n_bytes, path, what)
    buffer = bytearray()
    while len(buffer) < n_bytes:
        chunk = fh.read(min(_CHUNK_BYTES, n_bytes - len(buffer)))
        if not chunk:
            raise InvalidInputError(
                f"truncated: the header promises {n_bytes} bytes, the file holds "
                f"{len(buffer)}",
                path,
            )
        buffer += chunk
    return bytes(buffer)


# ------------------------------------------------------------------ physical ranges
#: Plausible range of each acquisition value of a Scan: (low, high, unit), SI. Wide enough for
#: any in-vivo or phantom single-voxel scan (common practice: TE 0-1 s, TR up to a minute,
#: 0.01-30 T, spectral widths 10 Hz to 10 MHz); a value outside is a unit mistake or a
#: corrupt header.
PHYSICAL_RANGES: dict[str, tuple[float, float, str]] = {
    "te_s": (0.0, 2.0, "s"),
    "tr_s": (0.0, 120.0, "s"),
    "tm_s": (0.0, 2.0, "s"),
    "field_t": (0.01, 30.0, "T"),
    "dwell_s": (1e-7, 0.1, "s"),
}
#: Shortest echo time of the echo sequences (PRESS, STEAM, semi-LASER, spin echo), s (common
#: practice: their refocusing pulses alone take more than a millisecond).
MIN_ECHO_TE_S: float = 1e-3
_ECHO_SEQUENCES = ("press", "steam", "semi-laser", "spin-echo")


def _show(value: float) -> str:
    return f"{value:.6g}"


def check_physical_ranges(
    scan: Any, keys: Mapping[str, str], path: Any, *, spectral_width_hz: Any = None
) -> None:
    """Refuse acquisition values no scanner can produce, naming the header key and its unit.

    Parameters
    ----------
    scan : Scan
        The values checked: ``te_s``, ``tr_s``, ``tm_s``, ``dwell_s`` and the field strength
        implied by ``spectrometer_mhz``.
    keys : mapping
        How the file names each value, e.g. ``{"te_s": "EchoTime (s)"}``; missing entries use
        the attribute name.
    path : path-like
        The file, for the message.
    spectral_width_hz : float, optional
        A spectral width the header also gives; it must agree with 1/dwell within 1 %.

    Raises
    ------
    InvalidInputError
        Naming the key, its value in the header's unit and the accepted range.
    """
    def name(attr: str) -> str:
        return keys.get(attr, attr)

    for attr in ("te_s", "tr_s", "tm_s", "dwell_s"):
        value = getattr(scan, attr)
        if value is None:
            continue
        low, high, unit = PHYSICAL_RANGES[attr]
        if not low <= value <= high:
            hint = " (a value in milliseconds?)" if unit == "s" and value > high else ""
            raise InvalidInputError(
                f"{name(attr)} = {_show(value)} s is outside the plausible range "
                f"{_show(low)}-{_show(high)} {unit}{hint}",
                path,
            )
    low, high, unit = PHYSICAL_RANGES["field_t"]
    field_t = scan.field_t
    if not low <= field_t <= high:
        raise InvalidInputError(
            f"{name('spectrometer_mhz')} = {_show(scan.spectrometer_mhz)} MHz means a field of "
            f"{_show(field_t)} T for {scan.nucleus}, outside the plausible range "
            f"{_show(low)}-{_show(high)} {unit}",
            path,
        )
    if scan.sequence in _ECHO_SEQUENCES and scan.te_s is not None and (
        scan.te_s < MIN_ECHO_TE_S
    ):
        raise InvalidInputError(
            f"{name('te_s')} = {_show(scan.te_s)} s is shorter than any {scan.sequence} echo "
            f"(at least {_show(MIN_ECHO_TE_S * 1e3)} ms)",
            path,
        )
    if scan.te_s is not None and scan.tr_s is not None and 0 < scan.tr_s < scan.te_s:
        raise InvalidInputError(
            f"{name('tr_s')} = {_show(scan.tr_s)} s is shorter than {name('te_s')} = "
            f"{_show(scan.te_s)} s",
            path,
        )
    if spectral_width_hz is not None:
        width = spectral_width_hz
        if isinstance(width, list | tuple) and len(width) == 1:
            width = width[0]
        if isinstance(width, bool) or not isinstance(width, int | float):
            raise InvalidInputError(
                f"SpectralWidth must be a number (Hz), got {str(width)[:40]!r}", path
            )
        expected = scan.spectral_width_hz
        try:
            width = float(width)
        except OverflowError:  # an integer beyond float range
            width = float("inf")
        if not (np.isfinite(width) and abs(width - expected) <= 0.01 * expected):
            raise InvalidInputError(
                f"SpectralWidth = {_show(width)} Hz disagrees with the dwell time "
                f"({_show(scan.dwell_s)} s, i.e. {_show(expected)} Hz)",
                path,
            )
