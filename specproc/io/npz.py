"""NumPy ``.npz`` read and write (loaded with ``allow_pickle=False``).

Layout (specproc's own, version 1)
----------------------------------
A zip archive of ``.npy`` arrays (``numpy.savez``). Keys:

=====================  ==========================  ==========================================
key                    array                       meaning
=====================  ==========================  ==========================================
``fid``                (..., n) complex            time-domain samples, time last (required)
``dwell_s``            0-d float                   dwell time, s (required)
``spectrometer_mhz``   0-d float                   spectrometer frequency, MHz (required)
``nucleus``            0-d str                     e.g. ``"1H"`` (default ``"1H"``)
``dims``               (k,) str                    NIfTI-MRS tags of the k extra axes
``centre_ppm``         0-d float                   shift at the receiver centre, ppm
``te_s``, ``tr_s``,    0-d float                   echo, repetition, mixing time, s
``tm_s``
``sequence``,          0-d str                     sequence name, protocol name
``protocol``
``water_suppressed``   0-d bool
``header_json``        0-d str                     JSON object: the original header
``dim_headers_json``   0-d str                     JSON object: per-axis info by tag
``provenance_json``    0-d str                     JSON list: processing records
``specproc_npz``       0-d int                     layout version (1)
=====================  ==========================  ==========================================

Object arrays are refused (no pickles are ever loaded); unknown keys are refused. The samples
are in the NIfTI-MRS sense (``conjugate=True`` flips them on reading).
"""

from __future__ import annotations

import io
import json
import os
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io._util import (
    check_declared_size,
    check_options,
    optional_time_s,
    reader_boundary,
    require_file,
)

__all__ = ["NPZ_KEYS", "is_zip_bytes", "read_npz", "write_npz"]

NPZ_KEYS: tuple[str, ...] = (
    "fid",
    "dwell_s",
    "spectrometer_mhz",
    "nucleus",
    "dims",
    "centre_ppm",
    "te_s",
    "tr_s",
    "tm_s",
    "sequence",
    "protocol",
    "water_suppressed",
    "header_json",
    "dim_headers_json",
    "provenance_json",
    "specproc_npz",
)
_VERSION = 1


def is_zip_bytes(head: bytes) -> bool:
    """True if ``head`` starts with a zip signature (local file header or empty archive)."""
    return head[:4] in (b"PK\x03\x04", b"PK\x05\x06")


def _scalar(archive: Any, key: str, kind: str, p: Path) -> Any:
    if key not in archive:
        return None
    value = archive[key]
    if value.shape != ():
        raise InvalidInputError(f"key {key!r} must be a single value, has shape {value.shape}", p)
    item = value.item()
    if kind == "float":
        if value.dtype.kind not in "iuf" or isinstance(item, bool):
            raise InvalidInputError(f"key {key!r} must be a number, has dtype {value.dtype}", p)
        return float(item)
    if kind == "str":
        if value.dtype.kind != "U":
            raise InvalidInputError(f"key {key!r} must be text, has dtype {value.dtype}", p)
        return str(item)
    if kind == "bool":
        if value.dtype.kind != "b":
            raise InvalidInputError(f"key {key!r} must be true/false, has dtype {value.dtype}", p)
        return bool(item)
    raise AssertionError(kind)  # pragma: no cover


def _json(archive: Any, key: str, expected: type, p: Path) -> Any:
    text = _scalar(archive, key, "str", p)
    if text is None:
        return expected()
    try:
        value = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InvalidInputError(f"key {key!r} is not valid JSON: {exc}", p) from None
    if not isinstance(value, expected):
        raise InvalidInputError(f"key {key!r} must hold a JSON {expected.__name__}", p)
    return value


def read_npz(path: str | os.PathLike[str], *, conjugate: bool = False, **options: Any) -> Scan:
    """Read a Scan from a NumPy ``.npz`` archive (layout in the module notes).

    Parameters
    ----------
    path : str or path-like
        The archive; arrays are loaded with ``allow_pickle=False``.
    conjugate : bool, default False
        Take the complex conjugate of the samples.

    Returns
    -------
    Scan
        ``format == "npz"``.

    Raises
    ------
    InvalidInputError
        For a missing or corrupt archive, object arrays, unknown keys, no ``fid``, a real
        ``fid``, a missing dwell time or spectrometer frequency, inconsistent ``dims``.
    """
    p = require_file(path)
    check_options(options, (), "npz", p)
    with reader_boundary(p, "npz"):
        raw = p.read_bytes()
        with zipfile.ZipFile(io.BytesIO(raw)) as members:  # sizes before anything is inflated
            check_declared_size(sum(m.file_size for m in members.infolist()), p, "npz archive")
        with np.load(io.BytesIO(raw), allow_pickle=False) as archive:
            keys = set(archive.files)
            unknown = sorted(keys - set(NPZ_KEYS))
            if unknown:
                raise InvalidInputError(
                    f"unknown npz key(s) {', '.join(unknown)}; valid: {', '.join(NPZ_KEYS)}", p
                )
            if "fid" not in keys:
                raise InvalidInputError("no 'fid' array in the archive", p)
            version = _scalar(archive, "specproc_npz", "float", p)
            if version is not None and version != _VERSION:
                raise InvalidInputError(f"unsupported specproc_npz version {version:g}", p)
            fid = archive["fid"]
            if fid.dtype.kind != "c":
                raise InvalidInputError(f"'fid' must be complex, has dtype {fid.dtype}", p)
            dims: tuple[str, ...] = ()
            if "dims" in keys:
                dims_arr = archive["dims"]
                if dims_arr.ndim != 1 or (dims_arr.size and dims_arr.dtype.kind != "U"):
                    raise InvalidInputError("'dims' must be a 1-D array of tags", p)
                dims = tuple(str(d) for d in dims_arr)
            mhz = _scalar(archive, "spectrometer_mhz", "float", p)
            if mhz is None:
                raise InvalidInputError("missing spectrometer frequency ('spectrometer_mhz')", p)
            dwell = _scalar(archive, "dwell_s", "float", p)
            if dwell is None:
                raise InvalidInputError("missing dwell time ('dwell_s')", p)
            provenance = _json(archive, "provenance_json", list, p)
            if not all(isinstance(r, dict) for r in provenance):
                raise InvalidInputError("'provenance_json' must be a list of objects", p)
            fid = np.array(fid)
            return Scan(
                data=np.conj(fid) if conjugate else fid,
                dwell_s=dwell,
                spectrometer_mhz=mhz,
                nucleus=_scalar(archive, "nucleus", "str", p) or "1H",
                dims=dims,
                centre_ppm=_scalar(archive, "centre_ppm", "float", p),
                te_s=optional_time_s(_scalar(archive, "te_s", "float", p), "te_s", p),
                tr_s=optional_time_s(_scalar(archive, "tr_s", "float", p), "tr_s", p),
                tm_s=optional_time_s(_scalar(archive, "tm_s", "float", p), "tm_s", p),
                sequence=_scalar(archive, "sequence", "str", p),
                protocol=_scalar(archive, "protocol", "str", p),
                water_suppressed=_scalar(archive, "water_suppressed", "bool", p),
                dim_headers=_json(archive, "dim_headers_json", dict, p),
                header=_json(archive, "header_json", dict, p),
                provenance=tuple(provenance),
                source=str(p),
                format="npz",
            )


def write_npz(scan: Scan, path: str | os.PathLike[str]) -> None:
    """Write a Scan to a ``.npz`` archive (uncompressed; the data bit-exact in their dtype)."""
    from specproc._atomic import write_bytes

    target = Path(path)
    arrays: dict[str, Any] = {
        "fid": np.asarray(scan.data),
        "dwell_s": np.asarray(scan.dwell_s),
        "spectrometer_mhz": np.asarray(scan.spectrometer_mhz),
        "nucleus": np.asarray(scan.nucleus),
        "dims": np.asarray(list(scan.dims), dtype=str),
        "specproc_npz": np.asarray(_VERSION),
    }
    for key in ("centre_ppm", "te_s", "tr_s", "tm_s"):
        if getattr(scan, key) is not None:
            arrays[key] = np.asarray(float(getattr(scan, key)))
    for key in ("sequence", "protocol"):
        if getattr(scan, key) is not None:
            arrays[key] = np.asarray(str(getattr(scan, key)))
    if scan.water_suppressed is not None:
        arrays["water_suppressed"] = np.asarray(bool(scan.water_suppressed))
    try:
        arrays["header_json"] = np.asarray(json.dumps(dict(scan.header), allow_nan=False))
        arrays["dim_headers_json"] = np.asarray(json.dumps(dict(scan.dim_headers)))
        arrays["provenance_json"] = np.asarray(json.dumps(list(scan.provenance)))
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"the header cannot be stored as JSON: {exc}", target) from None
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    write_bytes(target, buffer.getvalue())
