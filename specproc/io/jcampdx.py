"""JCAMP-DX complex FID read, through ``nmrglue.jcampdx``.

Layout (JCAMP-DX for NMR, Davies & Lampen 1993, version 5.0x)
--------------------------------------------------------------
* A text file of labelled data records ``##LABEL= value``; a block starts with ``##TITLE=``
  and ends with ``##END=``. Labels are compared after removing spaces, dashes, slashes and
  underscores and upper-casing (``##.OBSERVE FREQUENCY`` -> ``.OBSERVEFREQUENCY``).
* ``##DATA TYPE= NMR FID`` with ``##DATA CLASS= NTUPLES``: pages of a real and an imaginary
  table, ``##DATA TABLE= (X++(R..R)), XYDATA`` and ``(X++(I..I))``; ``##SYMBOL=``,
  ``##FIRST=``, ``##LAST=``, ``##UNITS=``, ``##FACTOR=`` give, per column, the first and last
  value, the unit and the scale factor. nmrglue returns the FID as ``[real, imag]``.
* ``##.OBSERVE FREQUENCY=`` (MHz) and ``##.OBSERVE NUCLEUS= ^1H``.

specproc takes the dwell time from the spacing of the X (time) column, ``(LAST - FIRST) /
(n - 1)`` in its unit (seconds, ms or µs), or from a Bruker-style ``##$SW_h=`` spectral width
(Hz), or from the ``dwell_s`` option. A file with only real data is refused: a complex FID is
needed. JCAMP-DX does not fix the sense of rotation; the samples are taken as being in the
NIfTI-MRS sense (``conjugate=True`` flips them).

References
----------
.. [1] Davies AN, Lampen P. JCAMP-DX for NMR. Appl Spectrosc 1993;47:1093-1099.
.. [2] nmrglue, https://www.nmrglue.com (``nmrglue.fileio.jcampdx.read``).
"""

from __future__ import annotations

import os
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

__all__ = ["is_jcampdx_text", "read_jcampdx"]

_OPTIONS: tuple[str, ...] = (
    "dwell_s",
    "spectrometer_mhz",
    "nucleus",
    "centre_ppm",
    "te_s",
    "tr_s",
    "sequence",
)
_TIME_UNITS = {"S": 1.0, "SEC": 1.0, "SECOND": 1.0, "SECONDS": 1.0, "MS": 1e-3,
               "MSEC": 1e-3, "MILLISECONDS": 1e-3, "US": 1e-6, "USEC": 1e-6,
               "MICROSECONDS": 1e-6}


def is_jcampdx_text(head: bytes) -> bool:
    """True if the first non-blank line of ``head`` is a JCAMP-DX label (``##...=``)."""
    text = head.lstrip(b"\xef\xbb\xbf").lstrip()
    return text.startswith(b"##") and b"=" in text.split(b"\n", 1)[0]


def _first(dic: dict[str, Any], key: str) -> str | None:
    values = dic.get(key)
    if not values:
        return None
    return str(values[0]).strip()


def _column(dic: dict[str, Any], key: str, index: int) -> str | None:
    text = _first(dic, key)
    if text is None:
        return None
    parts = [s.strip() for s in text.split(",")]
    return parts[index] if index < len(parts) else None


def _dwell_from_file(dic: dict[str, Any], n: int) -> float | None:
    symbols = [s.strip().upper() for s in (_first(dic, "SYMBOL") or "").split(",")]
    first = last = unit = None
    if "X" in symbols:
        ix = symbols.index("X")
        first, last, unit = (_column(dic, k, ix) for k in ("FIRST", "LAST", "UNITS"))
    if first is None or last is None:
        first, last, unit = _first(dic, "FIRSTX"), _first(dic, "LASTX"), _first(dic, "XUNITS")
    if first is not None and last is not None and n > 1:
        scale = _TIME_UNITS.get((unit or "SECONDS").strip().upper().replace(" ", ""))
        if scale is None:
            raise InvalidInputError(f"the X axis is in {unit!r}, not a time: not a FID", None)
        return (float(last) - float(first)) / (n - 1) * scale
    sw = _first(dic, "$SWH")
    if sw is not None:
        return 1.0 / float(sw)
    return None


def read_jcampdx(
    path: str | os.PathLike[str], *, conjugate: bool = False, **options: Any
) -> Scan:
    """Read a complex FID from a JCAMP-DX file.

    Parameters
    ----------
    path : str or path-like
        A JCAMP-DX file with ``DATA TYPE= NMR FID`` and real and imaginary tables.
    conjugate : bool, default False
        Take the complex conjugate (for data in the sense opposite to NIfTI-MRS).
    **options
        ``dwell_s``, ``spectrometer_mhz``, ``nucleus``, ``centre_ppm``, ``te_s``, ``tr_s``,
        ``sequence``: fill in what the file does not say (they must agree with the file where
        it does).

    Returns
    -------
    Scan
        One FID (``dims == ()``), ``format == "jcamp-dx"``; ``header`` holds the labelled
        records as nmrglue returns them (lists of strings).

    Raises
    ------
    InvalidInputError
        For a missing or corrupt file, no data, only real data, real and imaginary parts of
        different lengths, a spectrum instead of a FID, a missing spectrometer frequency or
        dwell time, NaN or infinite samples.
    """
    from nmrglue.fileio import jcampdx as _ng_jcampdx

    p = require_file(path)
    check_options(options, _OPTIONS, "JCAMP-DX", p)
    with reader_boundary(p, "JCAMP-DX"):
        check_declared_size(p.stat().st_size, p, "JCAMP-DX file")
        with open(p, "rb") as fh:
            if not is_jcampdx_text(fh.read(4096)):
                raise InvalidInputError("not a JCAMP-DX file (no ##LABEL= record first)", p)
        dic, data = _ng_jcampdx.read(str(p))
        kind = (_first(dic, "DATATYPE") or "").upper().replace(" ", "")
        if kind and "SPECTRUM" in kind:
            raise InvalidInputError(f"the file holds a spectrum ({kind}), not a FID", p)
        if data is None:
            raise InvalidInputError("no data table found", p)
        if not isinstance(data, list):
            raise InvalidInputError(
                "only real data found; a complex FID (real and imaginary tables) is needed", p
            )
        real, imag = data[0], data[1]
        if real is None or imag is None:
            raise InvalidInputError("the real or the imaginary table is missing", p)
        real, imag = np.asarray(real, dtype=float), np.asarray(imag, dtype=float)
        if real.shape != imag.shape:
            raise InvalidInputError(
                f"real ({real.size}) and imaginary ({imag.size}) tables differ in length", p
            )
        fid = real + 1j * imag
        if conjugate:
            fid = np.conj(fid)

        mhz = _first(dic, ".OBSERVEFREQUENCY")
        mhz = merge_value(float(mhz) if mhz else None, options.get("spectrometer_mhz"),
                          "the spectrometer frequency (MHz)", p)
        if mhz is None:
            raise InvalidInputError(
                "missing spectrometer frequency (##.OBSERVE FREQUENCY= or the "
                "spectrometer_mhz option)",
                p,
            )
        try:
            dwell = _dwell_from_file(dic, fid.size)
        except InvalidInputError as exc:
            raise exc.with_path(p) from None
        dwell = merge_value(dwell, options.get("dwell_s"), "the dwell time (s)", p)
        if dwell is None:
            raise InvalidInputError(
                "missing dwell time (no time axis, no ##$SW_h=, no dwell_s option)", p
            )
        nucleus_text = (_first(dic, ".OBSERVENUCLEUS") or "").replace("^", "").strip() or None
        nucleus = merge_value(nucleus_text, options.get("nucleus"), "the nucleus", p) or "1H"
        return Scan(
            data=fid,
            dwell_s=dwell,
            spectrometer_mhz=mhz,
            nucleus=nucleus,
            centre_ppm=options.get("centre_ppm"),
            te_s=optional_time_s(options.get("te_s"), "te_s", p),
            tr_s=optional_time_s(options.get("tr_s"), "tr_s", p),
            sequence=normalise_sequence_name(options.get("sequence")),
            header={k: v for k, v in dic.items()},
            source=str(p),
            format="jcamp-dx",
        )
