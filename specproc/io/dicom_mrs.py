"""DICOM MR Spectroscopy Storage read (single voxel), through pydicom.

Layout (DICOM PS3.3, MR Spectroscopy IOD, SOP Class UID 1.2.840.10008.5.1.4.1.1.4.2)
------------------------------------------------------------------------------------
* A Part-10 file: 128-byte preamble, ``DICM`` at byte 128, then the data set.
* Spectroscopy Data (5600,0020), VR OF (little-endian float32): for each frame, for each voxel
  (Rows (0028,0010) x Columns (0028,0011)), for each Data Point Row (0028,9001), Data Point
  Columns (0028,9002) points; with Data Representation (0028,9108) ``COMPLEX`` each point is a
  (real, imaginary) pair. Signal Domain Columns (0028,9003) must be ``TIME``.
* Number of Frames (0028,0008): specproc reads the frames as transients (``DIM_DYN``).
* Spectral Width (0018,9052, Hz), Transmitter Frequency (0018,9098, MHz), Resonant Nucleus
  (0018,9100), Chemical Shift Reference (0018,9053, ppm at the transmitter frequency).
* Echo time: MR Echo Sequence (0018,9114) > Effective Echo Time (0018,9082, ms); repetition
  time: MR Timing and Related Parameters Sequence (0018,9112) > Repetition Time (0018,0080,
  ms); both in the Shared or the Per-frame Functional Groups Sequence, with the top-level Echo
  Time (0018,0081) and Repetition Time (0018,0080) as fallbacks.
* Sequence: Pulse Sequence Name (0018,9005) or Sequence Name (0018,0024); Protocol Name
  (0018,1030); Spectrally Selected Suppression (0018,9025) tells water suppression.

Edited (J-difference, e.g. MEGA-PRESS) frames
---------------------------------------------
The MR Spectroscopy IOD has no attribute for the editing state of a frame (none of the
functional groups of C.8.14 or the MR Modifier Sequence describes frequency-selective editing
pulses; PS3.3 as read by us, from memory). specproc reads it from a standard, non-private
attribute meant for free frame labels: **Frame Label (0020,9453) in each frame's Frame Content
Sequence (0020,9111)** (Per-frame Functional Groups), ``ON`` or ``OFF`` (also ``EDIT_ON`` /
``EDIT_OFF``, any case). When the frames are so labelled, the k-th ON and the k-th OFF frame (in
file order) form the k-th pair and the Scan has ``(DIM_EDIT, DIM_DYN)`` axes with
``EditCondition`` ``["ON", "OFF"]`` in the edit axis' dim header, as a NIfTI-MRS file would
(the editing pulse offsets are then assumed, :mod:`specproc.edited.conditions`). Labels on only
some frames, other labels next to ON/OFF, unequal ON and OFF counts, or a sequence named as
edited (e.g. "MEGA-PRESS") whose frames carry no ON/OFF label are refused: the edit state
cannot be told.

Conjugation
-----------
DICOM describes the time-domain signal of a resonance above the transmitter frequency (higher
chemical shift) as turning counter-clockwise, ``exp(+2πi Δf t)`` with ``Δf > 0`` (the common
reading, as written in STANDARDS.md; unverified against vendor files). NIfTI-MRS and the Scan
use the opposite sense (a higher shift turns as ``exp(-2πi Δf t)``), so this reader takes the
complex conjugate. ``conjugate=False`` keeps the samples as stored. The choice is pinned by a
test that places a singlet at a known shift in a pydicom-built file.

References
----------
.. [1] NEMA PS3.3, DICOM Information Object Definitions: MR Spectroscopy IOD (A.28) and
   modules C.8.14 (MR Spectroscopy, MR Spectroscopy Data).
.. [2] pydicom, https://pydicom.github.io (``dcmread``).
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import numpy as np

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io._util import (
    check_declared_size,
    check_options,
    normalise_sequence_name,
    optional_time_s,
    reader_boundary,
    require_file,
)

__all__ = ["MR_SPECTROSCOPY_STORAGE", "is_dicom_bytes", "read_dicom_mrs"]

#: SOP Class UID of MR Spectroscopy Storage.
MR_SPECTROSCOPY_STORAGE: str = "1.2.840.10008.5.1.4.1.1.4.2"

def is_dicom_bytes(head: bytes) -> bool:
    """True if ``head`` (at least 132 bytes) starts like a DICOM Part-10 file."""
    return len(head) >= 132 and head[128:132] == b"DICM"


def _find(ds: Any, keyword: str, *, parents: tuple[str, ...] = ()) -> list[Any]:
    """Values of ``keyword`` in the functional groups (shared first, then each frame).

    ``parents`` lists functional-group sequences to look into; an empty tuple looks only at
    the top level. Returns one value per place found (shared: one; per-frame: one per frame).
    """
    found: list[Any] = []
    for group_name in ("SharedFunctionalGroupsSequence", "PerFrameFunctionalGroupsSequence"):
        groups = ds.get(group_name) or []
        for group in groups:
            for parent in parents:
                items = group.get(parent) or []
                for item in items[:1]:
                    if keyword in item and item.get(keyword) is not None:
                        found.append(item.get(keyword))
        if found:
            return found
    return found


def _number(value: Any) -> float | None:
    """First number of a DICOM value (VM may be > 1), ``None`` if empty."""
    if value is None or value == "":
        return None
    if isinstance(value, list | tuple) or type(value).__name__ == "MultiValue":
        values = list(value)
        if not values:
            return None
        value = values[0]
    return float(value)


def _header_dict(ds: Any) -> dict[str, Any]:
    """The data set as DICOM JSON (PS3.18 F.2), without the spectroscopy data."""

    def drop_bulk(_: Any) -> None:
        return None

    clean = ds.copy()
    for tag in (0x56000020, 0x7FE00010):
        if tag in clean:
            del clean[tag]
    try:
        return json.loads(json.dumps(clean.to_json_dict(bulk_data_threshold=4096,
                                                        bulk_data_element_handler=drop_bulk)))
    except Exception:  # a header we cannot render is still usable; keep the key names
        return {"keywords": [str(e.keyword or e.tag) for e in clean]}


def read_dicom_mrs(
    path: str | os.PathLike[str], *, conjugate: bool = True, **options: Any
) -> Scan:
    """Read a single-voxel DICOM MR Spectroscopy Storage file.

    Parameters
    ----------
    path : str or path-like
        A DICOM Part-10 file.
    conjugate : bool, default True
        Take the complex conjugate to convert to the NIfTI-MRS sense (see the module notes).

    Returns
    -------
    Scan
        Frames on a ``DIM_DYN`` axis (no extra axis for one frame); ``format == "dicom"``;
        ``header`` is the DICOM JSON of the data set without the spectroscopy data.

    Raises
    ------
    InvalidInputError
        For a missing, truncated or corrupt file, another SOP class, more than one voxel,
        frequency-domain or non-complex data, a data length that does not match the
        dimensions, missing spectral width or transmitter frequency, NaN or infinite samples.
    """
    import pydicom

    p = require_file(path)
    check_options(options, (), "DICOM", p)
    with reader_boundary(p, "DICOM"):
        check_declared_size(p.stat().st_size, p, "DICOM file")
        ds = pydicom.dcmread(p)
        sop = str(ds.get("SOPClassUID", "") or ds.file_meta.get("MediaStorageSOPClassUID", ""))
        if sop != MR_SPECTROSCOPY_STORAGE:
            raise InvalidInputError(
                f"not an MR Spectroscopy Storage object (SOP class {sop or 'missing'})", p
            )
        if "SpectroscopyData" not in ds:
            raise InvalidInputError("no Spectroscopy Data (5600,0020) in the file", p)
        rows = int(ds.get("Rows", 1) or 1)
        cols = int(ds.get("Columns", 1) or 1)
        if rows != 1 or cols != 1:
            raise InvalidInputError(
                f"more than one voxel ({rows} rows x {cols} columns); only single-voxel data "
                "are supported",
                p,
            )
        domain = str(ds.get("SignalDomainColumns", "TIME") or "TIME").upper()
        if domain != "TIME":
            raise InvalidInputError(f"signal domain is {domain}; a time-domain FID is needed", p)
        representation = str(ds.get("DataRepresentation", "") or "").upper()
        if representation != "COMPLEX":
            raise InvalidInputError(
                f"data representation is {representation or 'missing'}; COMPLEX is needed", p
            )
        frames = int(ds.get("NumberOfFrames", 1) or 1)
        point_rows = int(ds.get("DataPointRows", 1) or 1)
        points = int(ds.get("DataPointColumns", 0) or 0)
        if points <= 0:
            raise InvalidInputError("Data Point Columns (0028,9002) is missing or zero", p)
        if point_rows != 1:
            raise InvalidInputError(
                f"{point_rows} data point rows (2-D spectroscopy) are not supported", p
            )
        raw = ds.SpectroscopyData
        if not isinstance(raw, bytes | bytearray):
            raise InvalidInputError("Spectroscopy Data is not stored as bytes", p)
        values = np.frombuffer(bytes(raw), dtype="<f4") if len(raw) % 4 == 0 else None
        expected = frames * points * 2
        if values is None or values.size != expected:
            found = len(raw) // 4
            raise InvalidInputError(
                f"Spectroscopy Data holds {found} values but {frames} frame(s) x {points} "
                f"points x 2 = {expected} are expected (truncated or inconsistent)",
                p,
            )
        pairs = values.reshape(frames, points, 2).astype(np.float32)
        fid = (pairs[..., 0] + 1j * pairs[..., 1]).astype(np.complex64)
        if conjugate:
            fid = np.conj(fid)
        seq_text = str(ds.get("PulseSequenceName", "") or ds.get("SequenceName", "") or "")
        dims: tuple[str, ...]
        dim_headers: dict[str, Any] = {}
        edit = _edit_frames(ds, frames, seq_text, p)
        if edit is not None:
            on, off = edit
            fid, dims = np.stack([fid[on], fid[off]]), ("DIM_EDIT", "DIM_DYN")
            dim_headers = {"DIM_EDIT": {"header": {"EditCondition": ["ON", "OFF"]}}}
        elif frames == 1:
            fid, dims = fid[0], ()
        else:
            dims = ("DIM_DYN",)

        width_hz = _number(ds.get("SpectralWidth"))
        if width_hz is None:
            raise InvalidInputError("missing Spectral Width (0018,9052)", p)
        if not np.isfinite(width_hz) or width_hz <= 0:
            raise InvalidInputError(f"Spectral Width must be positive, got {width_hz}", p)
        mhz = _number(ds.get("TransmitterFrequency"))
        if mhz is None:
            raise InvalidInputError(
                "missing spectrometer frequency (Transmitter Frequency 0018,9098)", p
            )
        nucleus = str(ds.get("ResonantNucleus", "") or "").strip()
        if not nucleus:
            raise InvalidInputError("missing Resonant Nucleus (0018,9100)", p)
        centre = _number(ds.get("ChemicalShiftReference"))

        te_ms = _single(_find(ds, "EffectiveEchoTime", parents=("MREchoSequence",)), "echo", p)
        if te_ms is None:
            te_ms = _number(ds.get("EchoTime"))
        tr_ms = _single(
            _find(ds, "RepetitionTime", parents=("MRTimingAndRelatedParametersSequence",)),
            "repetition",
            p,
        )
        if tr_ms is None:
            tr_ms = _number(ds.get("RepetitionTime"))
        protocol = str(ds.get("ProtocolName", "") or "") or None
        suppression = str(ds.get("SpectrallySelectedSuppression", "") or "").upper()
        water = None
        if suppression:
            water = "WATER" in suppression
        return Scan(
            data=fid,
            dwell_s=1.0 / width_hz,
            spectrometer_mhz=mhz,
            nucleus=nucleus,
            dims=dims,
            dim_headers=dim_headers,
            centre_ppm=centre,
            te_s=optional_time_s(te_ms, "echo time", p, scale=1e-3),
            tr_s=optional_time_s(tr_ms, "repetition time", p, scale=1e-3),
            sequence=normalise_sequence_name(seq_text),
            protocol=protocol,
            water_suppressed=water,
            header=_header_dict(ds),
            source=str(p),
            format="dicom",
        )


def _frame_labels(ds: Any, frames: int) -> list[str | None]:
    """Frame Label (0020,9453) of each frame's Frame Content Sequence (``None`` when absent)."""
    groups = list(ds.get("PerFrameFunctionalGroupsSequence") or [])
    labels: list[str | None] = [None] * frames
    if len(groups) != frames:
        return labels
    for i, group in enumerate(groups):
        for item in list(group.get("FrameContentSequence") or [])[:1]:
            text = str(item.get("FrameLabel", "") or "").strip()
            labels[i] = text or None
    return labels


def _edit_frames(ds: Any, frames: int, seq_text: str, p: Path
                 ) -> tuple[list[int], list[int]] | None:
    """Indices of the ON and the OFF frames (module notes), or ``None`` for unedited data."""
    from specproc.edited.conditions import condition_of

    labels = _frame_labels(ds, frames)
    states = [None if label is None else condition_of(label) for label in labels]
    named_edited = normalise_sequence_name(seq_text) is None and any(
        tag in seq_text.lower().replace("-", "") for tag in ("mega", "edit"))
    if not any(states):
        if named_edited:
            raise InvalidInputError(
                f"edited data (sequence {seq_text!r}) whose frames do not say which are ON "
                "and which OFF: specproc reads the edit state from each frame's Frame Label "
                "(0020,9453) in the Frame Content Sequence, ON or OFF", p)
        return None
    unknown = sorted({str(lab) for lab, st in zip(labels, states, strict=True)
                      if st is None and lab is not None})
    missing = labels.count(None)
    on = [i for i, st in enumerate(states) if st == "on"]
    off = [i for i, st in enumerate(states) if st == "off"]
    problem = (f"Frame Labels other than ON/OFF ({', '.join(repr(u) for u in unknown[:3])})"
               if unknown else f"{missing} frame(s) without a Frame Label" if missing
               else f"{len(on)} ON and {len(off)} OFF frames" if len(on) != len(off) else "")
    if problem:
        raise InvalidInputError(
            f"the edit state of the frames cannot be told: {problem}; every frame's Frame "
            "Label (0020,9453) must be ON or OFF, as many of each", p)
    if "laser" in seq_text.lower():
        raise InvalidInputError(
            f"edited data acquired with {seq_text!r}: specproc simulates editing in PRESS "
            "localisation only (MEGA-PRESS)", p)
    return on, off


def _single(values: list[Any], what: str, p: Path) -> float | None:
    numbers = [n for n in (_number(v) for v in values) if n is not None]
    if not numbers:
        return None
    if any(not np.isclose(n, numbers[0]) for n in numbers):
        raise InvalidInputError(f"the frames have different {what} times: {numbers[:4]} ms", p)
    return numbers[0]
