"""Plain-text FID columns: read and write (one FID).

Layout (specproc's own, version 1)
----------------------------------
UTF-8 text, one sample per line, three columns separated by white space or commas::

    # specproc-text 1 dwell_s=0.00025 spectrometer_mhz=123.2 nucleus=1H te_s=0.03
    # any other line starting with '#' is a comment
    0.0        1.0           0.0
    0.00025    0.98          -0.11
    ...

* Columns: time (s), real part, imaginary part.
* The optional header line starts with ``# specproc-text`` and a format version, followed by
  ``key=value`` pairs: ``dwell_s``, ``spectrometer_mhz``, ``nucleus``, ``centre_ppm``,
  ``te_s``, ``tr_s``, ``sequence`` (no spaces inside a value). The same keys can be passed as
  load options; a value given both ways must agree.
* The dwell time comes from the header or option, else from the (uniform) time column.
* The samples are in the NIfTI-MRS sense (``conjugate=True`` flips them on reading).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io._util import (
    check_declared_size,
    check_options,
    merge_value,
    normalise_sequence_name,
    optional_time_s,
    reader_boundary,
    require_file,
)

__all__ = ["HEADER_MARK", "read_text", "write_text_fid"]

#: First word of specproc's header line.
HEADER_MARK: str = "specproc-text"
_VERSION = "1"
_KEYS: tuple[str, ...] = (
    "dwell_s",
    "spectrometer_mhz",
    "nucleus",
    "centre_ppm",
    "te_s",
    "tr_s",
    "sequence",
)
_NUMBER_KEYS = frozenset({"dwell_s", "spectrometer_mhz", "centre_ppm", "te_s", "tr_s"})


def _parse_header(line: str, p: Path) -> dict[str, Any]:
    words = line.lstrip("#").split()
    if len(words) < 2 or words[1] != _VERSION:
        raise InvalidInputError(
            f"unsupported {HEADER_MARK} header version {words[1:2]}; expected {_VERSION}", p
        )
    values: dict[str, Any] = {}
    for word in words[2:]:
        key, sep, value = word.partition("=")
        if not sep or not value:
            raise InvalidInputError(f"bad header item {word!r}; expected key=value", p)
        if key not in _KEYS:
            raise InvalidInputError(
                f"unknown header key {key!r}; valid: {', '.join(_KEYS)}", p
            )
        if key in _NUMBER_KEYS:
            try:
                number = float(value)
            except ValueError:
                raise InvalidInputError(f"header {key} is not a number: {value!r}", p) from None
            if not np.isfinite(number):
                raise InvalidInputError(f"header {key} is not finite: {value!r}", p)
            values[key] = number
        else:
            values[key] = value
    return values


def read_text(
    path: str | os.PathLike[str], *, conjugate: bool = False, **options: Any
) -> Scan:
    """Read a FID from plain-text columns (time, real, imaginary).

    Parameters
    ----------
    path : str or path-like
        The text file (layout in the module notes).
    conjugate : bool, default False
        Take the complex conjugate of the samples.
    **options
        ``dwell_s``, ``spectrometer_mhz``, ``nucleus``, ``centre_ppm``, ``te_s``, ``tr_s``,
        ``sequence``: what the header line does not give (they must agree where it does).

    Returns
    -------
    Scan
        One FID, ``format == "text"``, ``header`` the key/value pairs of the header line.

    Raises
    ------
    InvalidInputError
        For a missing or undecodable file, a malformed line, not three columns, no samples,
        NaN or infinite values, a non-uniform time column, no spectrometer frequency.
    """
    p = require_file(path)
    check_options(options, _KEYS, "text", p)
    with reader_boundary(p, "text"):
        check_declared_size(p.stat().st_size, p, "text file")
        raw = p.read_bytes()
        if b"\x00" in raw:
            raise InvalidInputError(
                "unrecognised format: binary content that is not NIfTI-MRS, DICOM, npz, "
                "JCAMP-DX or text",
                p,
            )
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise InvalidInputError(
                f"not UTF-8 text: {exc.reason} at byte {exc.start}", p
            ) from None
        header: dict[str, Any] = {}
        rows: list[list[float]] = []
        for number, line in enumerate(text.splitlines(), start=1):
            stripped = line.strip()
            if not stripped:
                continue
            if stripped.startswith("#"):
                words = stripped.lstrip("#").split()
                if words and words[0] == HEADER_MARK:
                    if header:
                        raise InvalidInputError(f"line {number}: a second header line", p)
                    header = _parse_header(stripped, p)
                continue
            fields = stripped.replace(",", " ").split()
            if len(fields) != 3:
                raise InvalidInputError(
                    f"line {number}: expected 3 columns (time, real, imaginary), "
                    f"found {len(fields)}",
                    p,
                )
            try:
                rows.append([float(f) for f in fields])
            except ValueError:
                raise InvalidInputError(
                    f"line {number}: not a number: {stripped[:60]!r}", p
                ) from None
        if not rows:
            raise InvalidInputError("the data hold no time-domain samples", p)
        table = np.asarray(rows, dtype=float)
        if not np.all(np.isfinite(table)):
            raise InvalidInputError("the data contain NaN or infinite samples", p)
        time_s, fid = table[:, 0], table[:, 1] + 1j * table[:, 2]
        if conjugate:
            fid = np.conj(fid)

        settings = {k: merge_value(header.get(k), options.get(k), k, p) for k in _KEYS}
        dwell = settings["dwell_s"]
        column_dwell = _dwell_from_column(time_s, p)
        if dwell is None:
            dwell = column_dwell
        elif column_dwell is not None and not np.isclose(dwell, column_dwell, rtol=1e-3):
            raise InvalidInputError(
                f"the time column steps by {column_dwell:g} s but dwell_s is {dwell:g} s", p
            )
        if dwell is None:
            raise InvalidInputError("missing dwell time (one sample and no dwell_s)", p)
        if settings["spectrometer_mhz"] is None:
            raise InvalidInputError(
                "missing spectrometer frequency (spectrometer_mhz in the header line or as "
                "an option)",
                p,
            )
        return Scan(
            data=fid,
            dwell_s=dwell,
            spectrometer_mhz=settings["spectrometer_mhz"],
            nucleus=settings["nucleus"] or "1H",
            centre_ppm=settings["centre_ppm"],
            te_s=optional_time_s(settings["te_s"], "te_s", p),
            tr_s=optional_time_s(settings["tr_s"], "tr_s", p),
            sequence=normalise_sequence_name(settings["sequence"]),
            header=header,
            source=str(p),
            format="text",
        )


def _dwell_from_column(time_s: np.ndarray, p: Path) -> float | None:
    if time_s.size < 2:
        return None
    steps = np.diff(time_s)
    dwell = float((time_s[-1] - time_s[0]) / (time_s.size - 1))
    if dwell <= 0 or np.max(np.abs(steps - dwell)) > 1e-3 * dwell:
        raise InvalidInputError("the time column is not uniformly increasing", p)
    return dwell


def write_text_fid(scan: Scan, path: str | os.PathLike[str]) -> None:
    """Write a single FID (``scan.dims == ()``) as text columns with a header line.

    Numbers are written with 17 significant digits, so float64 samples read back exactly.
    Provenance and the original header are not kept (use NIfTI-MRS for that).
    """
    from specproc._atomic import write_text

    target = Path(path)
    if scan.dims:
        raise InvalidInputError(
            f"text files hold one FID; the scan has extra axes {list(scan.dims)}", target
        )
    items = [f"dwell_s={scan.dwell_s!r}", f"spectrometer_mhz={scan.spectrometer_mhz!r}",
             f"nucleus={scan.nucleus}"]
    for key in ("centre_ppm", "te_s", "tr_s"):
        value = getattr(scan, key)
        if value is not None:
            items.append(f"{key}={value!r}")
    if scan.sequence is not None:
        items.append(f"sequence={scan.sequence}")
    lines = [f"# {HEADER_MARK} {_VERSION} " + " ".join(items),
             "# columns: time_s real imaginary"]
    data = np.asarray(scan.data, dtype=np.complex128)
    for t, z in zip(scan.time_s(), data, strict=True):
        lines.append(f"{t:.17g} {z.real:.17g} {z.imag:.17g}")
    write_text(target, "\n".join(lines) + "\n")
