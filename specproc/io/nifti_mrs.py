"""NIfTI-MRS read and write (single voxel), through nibabel.

Layout (NIfTI-MRS standard, Clarke et al., Magn Reson Med 2022;88:2358-2370)
------------------------------------------------------------------------------
* A NIfTI-2 (preferred; 540-byte header, magic ``n+2\\0`` at byte 4) or NIfTI-1 (348-byte
  header, magic ``n+1\\0`` at byte 344) single file, ``.nii`` or gzip-compressed ``.nii.gz``.
* Data type complex64 or complex128. Dimensions: 1-3 spatial (all of size 1 for a single
  voxel), 4 the complex time domain, 5-7 optional extra axes. Their tags are in the JSON keys
  ``dim_5``, ``dim_6``, ``dim_7`` (defaults ``DIM_COIL``, ``DIM_DYN``, ``DIM_INDIRECT_0``),
  with optional ``dim_N_info`` (text) and ``dim_N_header`` (per-index values).
* Dwell time in ``pixdim[4]``, in the time unit of ``xyzt_units`` (s, ms or µs).
* ``intent_name`` ``mrs_v0_9`` (the version of the standard written here).
* Header extension with code 44 whose content is UTF-8 JSON: required
  ``SpectrometerFrequency`` (MHz) and ``ResonantNucleus``, both arrays; optional
  ``EchoTime``, ``RepetitionTime``, ``MixingTime`` (s), ``SequenceName``, ``ProtocolName``,
  ``WaterSuppressed`` and ``ProcessingApplied`` (list of ``{Time, Program, Version, Method,
  Details}``), which holds the Scan's provenance.

Reading keeps the JSON object verbatim in ``Scan.header``; writing starts from that object
(when the Scan came from a NIfTI-MRS file), brings the standard keys up to date from the Scan's
fields and stores the provenance in ``ProcessingApplied``. specproc keeps the chemical shift of
the receiver centre, when it is not the nucleus default, in the user key
``specproc_centre_ppm``, and the sequence sub-timings (:attr:`specproc.data.Scan.timings`) in
the user key ``specproc_timings`` = ``{"Value": {"te1_s": ..., "tm_s": ..., "delays_s": [...]},
"Description": "..."}`` (only the members that apply). The time-domain data are read with
``np.asanyarray(img.dataobj)`` (``get_fdata`` would drop the imaginary part).

References
----------
.. [1] Clarke WT, Bell TK, Emir UE, et al. NIfTI-MRS: a standard data format for magnetic
   resonance spectroscopy. Magn Reson Med 2022;88:2358-2370.
.. [2] nibabel, https://nipy.org/nibabel (``Nifti2Image``, ``Nifti1Extension``).
"""

from __future__ import annotations

import gzip
import json
import math
import os
import zlib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import nibabel as nib
import numpy as np

from specproc._json import to_jsonable
from specproc.data import Scan, is_valid_dim_tag, make_step_record, user_key, user_value
from specproc.errors import InvalidInputError
from specproc.io._util import (
    brief,
    check_declared_size,
    check_options,
    normalise_sequence_name,
    optional_time_s,
    read_capped,
    reader_boundary,
    require_file,
)
from specproc.protocol import TIMINGS_HEADER_KEY, parse_timings

__all__ = [
    "DEFAULT_DIM_TAGS",
    "EXTENSION_CODE",
    "HEADER_KEYS",
    "INTENT_NAME",
    "is_nifti_bytes",
    "read_nifti_mrs",
    "scaling_note",
    "write_nifti_mrs",
]

#: Header extension code of NIfTI-MRS (registered with the NIfTI committee).
EXTENSION_CODE: int = 44
#: ``intent_name`` written by specproc (NIfTI-MRS version 0.9).
INTENT_NAME: str = "mrs_v0_9"
#: Tags of dimensions 5, 6, 7 when the JSON does not give them.
DEFAULT_DIM_TAGS: dict[int, str] = {5: "DIM_COIL", 6: "DIM_DYN", 7: "DIM_INDIRECT_0"}

_OPTIONS: tuple[str, ...] = ()
_TIME_UNIT_SCALE = {"sec": 1.0, "msec": 1e-3, "usec": 1e-6, "unknown": 1.0}
#: Keys the NIfTI-MRS standard defines (required and standard-defined metadata, version 0.9
#: and its changelog to 0.11); any other key is user-defined and must be an object with a
#: ``Description`` (and, by convention, a ``Value``).
STANDARD_KEYS: frozenset[str] = frozenset((
    "SpectrometerFrequency", "ResonantNucleus", "SpectralWidth", "EchoTime",
    "RepetitionTime", "InversionTime", "MixingTime", "AcquisitionStartTime",
    "ExcitationFlipAngle", "TxOffset", "RxOffset", "SpecFreqChemShift", "VOI",
    "WaterSuppressed", "WaterSuppressionType", "SequenceTriggered", "Manufacturer",
    "ManufacturersModelName", "DeviceSerialNumber", "SoftwareVersions", "InstitutionName",
    "InstitutionAddress", "TxCoil", "RxCoil", "SequenceName", "ProtocolName",
    "PatientPosition", "PatientName", "PatientID", "PatientWeight", "PatientDoB",
    "PatientSex", "ConversionMethod", "ConversionTime", "OriginalFile", "kSpace",
    "EditCondition", "EditPulse", "ProcessingApplied",
    *(f"dim_{n}{suffix}" for n in (5, 6, 7) for suffix in ("", "_info", "_header")),
))


def is_nifti_bytes(head: bytes) -> int | None:
    """NIfTI version (1 or 2) of an uncompressed header start, or ``None``.

    ``head`` must hold at least the first 348 bytes for NIfTI-1 (magic ``n+1\\0`` at 344) or
    the first 12 bytes for NIfTI-2 (magic ``n+2\\0\\r\\n\\032\\n`` at 4).
    """
    if len(head) >= 12 and head[4:12] == b"n+2\x00\r\n\x1a\n":
        return 2
    if len(head) >= 348 and head[344:348] in (b"n+1\x00", b"ni1\x00"):
        return 1
    return None


def _read_raw(path: Path) -> bytes:
    """The bytes of the image (header, extensions, data), read up to what the header declares.

    The fixed header is read first; the declared size (``vox_offset`` plus the data) is
    checked against :func:`~specproc.io._util.max_input_bytes` before the rest is read,
    in chunks, from the (possibly gzip) stream. Bytes beyond the declared data are refused.
    """
    with open(path, "rb") as fh:
        compressed = fh.read(2) == b"\x1f\x8b"
    opener: Any = gzip.open if compressed else open
    try:
        with opener(path, "rb") as fh:
            head = fh.read(540)
            version = is_nifti_bytes(head[:348])
            if version is None:
                raise InvalidInputError("not a NIfTI file (no NIfTI-1 or NIfTI-2 magic)", path)
            header_class = nib.Nifti2Header if version == 2 else nib.Nifti1Header
            size = 540 if version == 2 else 348
            if len(head) < size:
                raise InvalidInputError(
                    f"truncated: {len(head)} bytes, less than the {size}-byte header", path
                )
            fixed = header_class(binaryblock=head[:size], check=False)
            total = _declared_bytes(fixed, size, path)
            raw = head[:total] if total <= len(head) else head + read_capped(
                fh, total - len(head), path, "NIfTI-MRS header"
            )
            if len(head) > total or fh.read(1):
                raise InvalidInputError(
                    f"the file holds more than the {total} bytes its header declares "
                    "(trailing data after the image)",
                    path,
                )
    except (OSError, EOFError, zlib.error) as exc:
        what = "truncated or corrupt gzip data" if compressed else "cannot read the file"
        raise InvalidInputError(f"{what}: {exc}", path) from None
    return raw


def _declared_bytes(fixed: Any, header_size: int, path: Path) -> int:
    """``vox_offset`` plus the size of the data a fixed NIfTI header declares, bytes."""
    dim = [int(d) for d in fixed["dim"]]
    ndim = dim[0]
    if not 1 <= ndim <= 7:
        raise InvalidInputError(f"the header declares {ndim} dimensions (1 to 7 allowed)", path)
    shape = dim[1:1 + ndim]
    if any(d < 0 for d in shape):
        raise InvalidInputError(f"negative dimension sizes in the header: {shape}", path)
    itemsize = fixed.get_data_dtype().itemsize
    offset = float(fixed["vox_offset"])
    if not np.isfinite(offset) or offset < header_size or offset != int(offset):
        raise InvalidInputError(f"impossible data offset vox_offset = {offset:.6g}", path)
    total = int(offset) + math.prod(shape) * itemsize
    check_declared_size(total, path, "NIfTI-MRS header")
    return total


def read_nifti_mrs(path: str | os.PathLike[str], **options: Any) -> Scan:
    """Read a single-voxel NIfTI-MRS file (``.nii`` or ``.nii.gz``, NIfTI-2 or NIfTI-1).

    Parameters
    ----------
    path : str or path-like
        The file. Its content decides whether it is gzip-compressed, not its suffix.
    **options
        None are accepted (NIfTI-MRS files carry all they need).

    Returns
    -------
    Scan
        Data with time on the last axis and the dimension-5..7 axes before it, in order;
        ``format == "nifti-mrs"``; ``header`` is the JSON extension verbatim.

    Raises
    ------
    InvalidInputError
        For a missing, truncated or corrupt file, no code-44 extension, invalid JSON, missing
        ``SpectrometerFrequency`` or ``ResonantNucleus``, more than one voxel, real data,
        unknown or inconsistent dimension tags, NaN or infinite samples, zero-length data,
        more data than :func:`specproc.io._util.max_input_bytes` or more bytes than the
        header declares.
    """
    p = require_file(path)
    check_options(options, _OPTIONS, "NIfTI-MRS", p)
    with reader_boundary(p, "NIfTI-MRS"):
        raw = _read_raw(p)
        version = is_nifti_bytes(raw[:348])
        if version == 1 and raw[344:348] == b"ni1\x00":
            raise InvalidInputError("a NIfTI header/image pair is not supported; use .nii", p)
        image_class = nib.Nifti2Image if version == 2 else nib.Nifti1Image
        img = image_class.from_bytes(raw)
        return _scan_from_image(img, p, n_bytes=len(raw))


def _scan_from_image(img: Any, p: Path, *, n_bytes: int) -> Scan:
    hdr = img.header
    shape = tuple(int(s) for s in img.shape)
    if len(shape) < 4:
        raise InvalidInputError(
            f"NIfTI-MRS needs at least 4 dimensions (x, y, z, time); found shape {shape}", p
        )
    if len(shape) > 7:
        raise InvalidInputError(f"more than 7 dimensions: shape {shape}", p)
    if any(s != 1 for s in shape[:3]):
        raise InvalidInputError(
            f"more than one voxel (spatial size {shape[0]}x{shape[1]}x{shape[2]}); "
            "only single-voxel data are supported",
            p,
        )
    if shape[3] == 0 or 0 in shape:
        raise InvalidInputError("the data hold no time-domain samples", p)
    meta = _json_extension(hdr, p)

    mhz = _first_number(meta, "SpectrometerFrequency", p)
    nucleus = _first_text(meta, "ResonantNucleus", p)

    # dwell time from pixdim[4] in the unit of xyzt_units
    time_unit = hdr.get_xyzt_units()[1]
    if time_unit not in _TIME_UNIT_SCALE:
        raise InvalidInputError(
            f"time unit {time_unit!r} of dimension 4 is not a time (NIfTI-MRS stores the "
            "time domain)",
            p,
        )
    dwell_s = float(hdr["pixdim"][4]) * _TIME_UNIT_SCALE[time_unit]
    if not np.isfinite(dwell_s) or dwell_s <= 0:
        raise InvalidInputError(f"the dwell time pixdim[4] must be positive, got {dwell_s}", p)

    dims, dim_headers = _dimension_tags(meta, shape, p)

    dtype = img.get_data_dtype()
    if dtype.kind != "c":
        raise InvalidInputError(
            f"data type {dtype} is not complex (NIfTI-MRS stores complex64 or complex128)", p
        )
    # check the size before reading: nibabel allocates what the header promises
    needed = int(hdr.get_data_offset()) + math.prod(shape) * dtype.itemsize
    if needed > n_bytes:
        raise InvalidInputError(
            f"truncated: the header promises {needed} bytes, the file holds {n_bytes}", p
        )
    data = np.asanyarray(img.dataobj)  # never get_fdata: it drops the imaginary part
    data = np.moveaxis(data.reshape(shape[3:]), 0, -1)
    if data.dtype not in (np.complex64, np.complex128):
        data = data.astype(np.complex128)

    provenance = _processing_applied(meta.get("ProcessingApplied", []), p)
    scaling = _intensity_scaling(img)
    if scaling is not None:
        provenance.append(make_step_record("intensity scaling", {
            "scl_slope": scaling[0], "scl_inter": scaling[1],
            "note": "the NIfTI header's scl_slope and scl_inter were applied to the samples",
        }))
    water = meta.get("WaterSuppressed")
    if water is not None and not isinstance(water, bool):
        raise InvalidInputError(f"WaterSuppressed must be true or false, got {brief(water)}", p)
    centre = user_value(meta, "specproc_centre_ppm")
    if centre is not None:
        centre = _finite(centre, "specproc_centre_ppm (ppm)", p)
    seq_text = _optional_text(meta, "SequenceName", p)
    protocol = _optional_text(meta, "ProtocolName", p)
    timings = _timings(meta.get(TIMINGS_HEADER_KEY), p)
    return Scan(
        data=data,
        dwell_s=dwell_s,
        spectrometer_mhz=mhz,
        nucleus=nucleus,
        dims=dims,
        centre_ppm=centre,
        te_s=_time_s(meta, "EchoTime", p),
        tr_s=_time_s(meta, "RepetitionTime", p),
        tm_s=_time_s(meta, "MixingTime", p),
        sequence=normalise_sequence_name(seq_text),
        timings=timings,
        protocol=protocol,
        water_suppressed=water,
        dim_headers=dim_headers,
        header=meta,
        provenance=tuple(provenance),
        affine=_affine(img),
        source=str(p),
        format="nifti-mrs",
    )


def _timings(raw: Any, p: Path) -> dict[str, Any]:
    """The ``Value`` of the ``specproc_timings`` user key, checked (empty when absent)."""
    if raw is None:
        return {}
    if not isinstance(raw, dict) or not isinstance(raw.get("Value"), dict):
        raise InvalidInputError(
            f"{TIMINGS_HEADER_KEY} must be an object with a 'Value' object", p)
    return parse_timings(raw["Value"], where=p, what=TIMINGS_HEADER_KEY)


#: How this format names the values of :data:`specproc.io._util.PHYSICAL_RANGES`.
HEADER_KEYS: dict[str, str] = {
    "te_s": "EchoTime",
    "tr_s": "RepetitionTime",
    "tm_s": "MixingTime",
    "dwell_s": "the dwell time pixdim[4]",
    "spectrometer_mhz": "SpectrometerFrequency",
}


def _time_s(meta: Mapping[str, Any], key: str, p: Path) -> float | None:
    """A standard time key: a JSON number in seconds (the standard allows nothing else)."""
    value = meta.get(key)
    if value is None:
        return None
    if isinstance(value, str):
        raise InvalidInputError(
            f"{key} must be a number in seconds, got the text {value[:40]!r}", p
        )
    return optional_time_s(value, f"{key} (s)", p)


def _optional_text(meta: Mapping[str, Any], key: str, p: Path) -> str | None:
    value = meta.get(key)
    if value is None:
        return None
    if isinstance(value, dict | list):
        raise InvalidInputError(f"{key} must be text, got a JSON {type(value).__name__}", p)
    return str(value)


def _processing_applied(value: Any, p: Path) -> list[dict[str, Any]]:
    """``ProcessingApplied``: a list of objects (``Details`` free text or an object)."""
    if not isinstance(value, list) or not all(isinstance(r, dict) for r in value):
        raise InvalidInputError("ProcessingApplied must be a list of objects", p)
    records = []
    for record in value:
        record = dict(record)
        for key in ("Time", "Program", "Version", "Method"):  # text in the standard
            if key in record and not isinstance(record[key], str):
                record[key] = json.dumps(record[key])[:200]
        records.append(record)
    return records


def _intensity_scaling(img: Any) -> tuple[float, float] | None:
    """(slope, intercept) nibabel applies to the samples, or ``None`` when it applies none."""
    slope = float(getattr(img.dataobj, "slope", 1.0))
    inter = float(getattr(img.dataobj, "inter", 0.0))
    if slope == 1.0 and inter == 0.0:
        return None
    return slope, inter


def _affine(img: Any) -> np.ndarray | None:
    """The voxel-to-scanner affine (mm) when the header gives one (sform or qform)."""
    hdr = img.header
    if int(hdr["sform_code"]) == 0 and int(hdr["qform_code"]) == 0:
        return None
    affine = np.asarray(img.affine, dtype=float)
    return affine if np.all(np.isfinite(affine)) else None


def scaling_note(scan: Scan) -> str | None:
    """A sentence for the user when the reader applied NIfTI intensity scaling, else ``None``."""
    for record in scan.provenance:
        if record.get("Method") == "intensity scaling" and record.get("Program") == "specproc":
            details = record.get("Details") or {}
            return (f"the samples were scaled by scl_slope = {details.get('scl_slope'):.6g} and "
                    f"scl_inter = {details.get('scl_inter'):.6g} from the NIfTI header")
    return None


def _json_extension(hdr: Any, p: Path) -> dict[str, Any]:
    found = [ext for ext in hdr.extensions if int(ext.get_code()) == EXTENSION_CODE]
    if not found:
        raise InvalidInputError(
            f"no NIfTI-MRS header extension (code {EXTENSION_CODE}); not a NIfTI-MRS file", p
        )
    if len(found) > 1:
        raise InvalidInputError(f"{len(found)} NIfTI-MRS header extensions; expected one", p)
    content = found[0].get_content()
    if isinstance(content, bytes | bytearray):
        content = bytes(content).rstrip(b"\x00").decode("utf-8")
    elif not isinstance(content, str):  # some nibabel versions may return parsed objects
        content = json.dumps(content)
    try:
        meta = json.loads(content.rstrip("\x00 \n\r\t"))
    except json.JSONDecodeError as exc:
        raise InvalidInputError(f"the NIfTI-MRS JSON header is not valid JSON: {exc}", p) from None
    if not isinstance(meta, dict):
        raise InvalidInputError("the NIfTI-MRS JSON header is not an object", p)
    return meta


def _finite(value: Any, name: str, p: Path) -> float:
    if isinstance(value, bool):
        raise InvalidInputError(f"{name} is not a number: {brief(value)}", p)
    try:
        number = float(value)
    except OverflowError:  # an integer beyond float range
        number = float("inf")
    except (TypeError, ValueError):
        raise InvalidInputError(f"{name} is not a number: {brief(value)}", p) from None
    if not np.isfinite(number):
        raise InvalidInputError(f"{name} is not finite: {brief(value)}", p)
    return number


def _first_number(meta: dict[str, Any], key: str, p: Path) -> float:
    value = meta.get(key)
    if isinstance(value, list):
        value = value[0] if value else None
    if value is None:
        raise InvalidInputError(f"missing spectrometer frequency ({key} in the JSON header)", p)
    number = _finite(value, key, p)
    if number <= 0:
        raise InvalidInputError(f"{key} must be positive, got {brief(value)}", p)
    return number


def _first_text(meta: dict[str, Any], key: str, p: Path) -> str:
    value = meta.get(key)
    if isinstance(value, list):
        value = value[0] if value else None
    if not isinstance(value, str) or not value.strip():
        raise InvalidInputError(f"missing or invalid {key} in the JSON header: {brief(value)}", p)
    return value.strip()


def _checked_dim_header(value: Any, n: int, size: int, p: Path) -> Any:
    """A ``dim_N_header``: per-index lists of length ``size`` or ``{"start", "increment"}``."""
    if not isinstance(value, dict):
        raise InvalidInputError(f"dim_{n}_header must be an object", p)
    for key, item in value.items():
        if isinstance(item, list) and len(item) != size:
            raise InvalidInputError(
                f"inconsistent dimension header: dim_{n}_header {key} has {len(item)} values "
                f"for {size} indices",
                p,
            )
    return value


def _dimension_tags(
    meta: dict[str, Any], shape: tuple[int, ...], p: Path
) -> tuple[tuple[str, ...], dict[str, Any]]:
    ndim = len(shape)
    sizes = shape[4:]
    dims: list[str] = []
    headers: dict[str, Any] = {}
    for n in range(5, ndim + 1):
        tag = meta.get(f"dim_{n}", DEFAULT_DIM_TAGS[n])
        if not isinstance(tag, str) or not is_valid_dim_tag(tag):
            raise InvalidInputError(f"unknown dimension tag dim_{n} = {brief(tag)}", p)
        if tag in dims:
            raise InvalidInputError(f"dimension tag {tag} is used twice (dim_{n})", p)
        dims.append(tag)
        extra = {}
        if f"dim_{n}_info" in meta:
            extra["info"] = meta[f"dim_{n}_info"]
        if f"dim_{n}_header" in meta:
            extra["header"] = _checked_dim_header(meta[f"dim_{n}_header"], n, sizes[n - 5], p)
        if extra:
            headers[tag] = extra
    for n in range(ndim + 1, 8):
        for key in (f"dim_{n}", f"dim_{n}_info", f"dim_{n}_header"):
            if key in meta:
                raise InvalidInputError(
                    f"inconsistent dimension tags: {key} is given but the data have only "
                    f"{ndim} dimensions",
                    p,
                )
    return tuple(dims), headers


# ---------------------------------------------------------------------------------- writing
def _is_user_entry(value: Any) -> bool:
    return isinstance(value, Mapping) and "Description" in value


def _json_header(scan: Scan) -> dict[str, Any]:
    meta: dict[str, Any] = dict(scan.header) if scan.format == "nifti-mrs" else {}
    for key, value in list(meta.items()):  # bare user values of older files: wrap them
        if key not in STANDARD_KEYS and not _is_user_entry(value):
            meta[key] = user_key(value, "copied from the header of the input file")
    if scan.format not in (None, "nifti-mrs"):
        meta["specproc_source_format"] = user_key(
            scan.format, "format of the file the data were read from")
    for n in range(5, 8):  # dimension keys are rewritten from the Scan
        for key in (f"dim_{n}", f"dim_{n}_info", f"dim_{n}_header"):
            meta.pop(key, None)
    meta["SpectrometerFrequency"] = [scan.spectrometer_mhz]
    meta["ResonantNucleus"] = [scan.nucleus]
    for key, value in (("EchoTime", scan.te_s), ("RepetitionTime", scan.tr_s),
                       ("MixingTime", scan.tm_s)):
        if value is None:
            meta.pop(key, None)
        else:
            meta[key] = value
    if scan.sequence is not None and normalise_sequence_name(meta.get("SequenceName")) != (
        scan.sequence
    ):
        meta["SequenceName"] = scan.sequence
    if "SpectralWidth" in meta:  # the dwell time wins; keep the two consistent
        meta["SpectralWidth"] = scan.spectral_width_hz
    if scan.protocol is not None:
        meta["ProtocolName"] = scan.protocol
    if scan.water_suppressed is not None:
        meta["WaterSuppressed"] = bool(scan.water_suppressed)
    if scan.centre_ppm is not None:
        meta["specproc_centre_ppm"] = user_key(
            scan.centre_ppm, "chemical shift at the receiver centre frequency, ppm")
    else:
        meta.pop("specproc_centre_ppm", None)
    if scan.timings:
        meta[TIMINGS_HEADER_KEY] = {
            "Value": {k: list(v) if isinstance(v, tuple) else v for k, v in scan.timings.items()},
            "Description": "sequence sub-timings in s (specproc): PRESS te1_s (TE2 = TE - TE1), "
                           "STEAM tm_s, semi-LASER delays_s d1..d5",
        }
    else:
        meta.pop(TIMINGS_HEADER_KEY, None)
    for n, tag in enumerate(scan.dims, start=5):
        meta[f"dim_{n}"] = tag
        extra = scan.dim_headers.get(tag, {})
        if "info" in extra:
            meta[f"dim_{n}_info"] = extra["info"]
        if "header" in extra:
            meta[f"dim_{n}_header"] = extra["header"]
    if scan.provenance or "ProcessingApplied" in meta:
        meta["ProcessingApplied"] = [dict(r) for r in scan.provenance]
    return meta


def write_nifti_mrs(scan: Scan, path: str | os.PathLike[str]) -> None:
    """Write a Scan as a NIfTI-2 NIfTI-MRS file (gzip-compressed if ``path`` ends in ``.gz``).

    The file is written to a temporary name and renamed (nothing partial is left). The data
    are stored bit-exact in their dtype (complex64 or complex128).

    Parameters
    ----------
    scan : Scan
        At most three extra axes (NIfTI-MRS dimensions 5-7).
    path : str or path-like
        Target, ``.nii`` or ``.nii.gz``.

    Raises
    ------
    InvalidInputError
        If the Scan has more than three extra axes or its header cannot be stored as JSON.
    """
    from specproc._atomic import atomic_path

    target = Path(path)
    if len(scan.dims) > 3:
        raise InvalidInputError(
            f"NIfTI-MRS holds at most 3 extra dimensions; the scan has {len(scan.dims)}", target
        )
    meta = _json_header(scan)
    try:
        text = json.dumps(to_jsonable(meta), allow_nan=False, ensure_ascii=False)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(f"the header cannot be stored as JSON: {exc}", target) from None
    data = np.moveaxis(np.asarray(scan.data), -1, 0)  # (time, dim5, dim6, dim7)
    data = np.ascontiguousarray(data).reshape((1, 1, 1, *data.shape))
    affine = np.eye(4) if scan.affine is None else np.asarray(scan.affine, dtype=float)
    img = nib.Nifti2Image(data, affine=affine)
    hdr = img.header
    hdr.set_data_dtype(data.dtype)
    hdr.set_xyzt_units("mm", "sec")
    voxel_mm = [float(v) for v in np.linalg.norm(affine[:3, :3], axis=0)]
    zooms = [*voxel_mm, scan.dwell_s] + [1.0] * (data.ndim - 4)
    hdr.set_zooms(zooms)
    hdr.set_intent("none", name=INTENT_NAME)
    hdr.extensions.append(nib.nifti1.Nifti1Extension(EXTENSION_CODE, text.encode("utf-8")))
    with atomic_path(target) as tmp:
        img.to_filename(str(tmp))
