"""Reading and writing MRS data files: :func:`load` and :func:`save`.

One module per format, each with a note on its layout:

=============  ====================================  =======  ======================
format         module                                read     write
=============  ====================================  =======  ======================
nifti-mrs      :mod:`specproc.io.nifti_mrs`          yes      ``.nii``, ``.nii.gz``
dicom          :mod:`specproc.io.dicom_mrs`          yes      no
jcamp-dx       :mod:`specproc.io.jcampdx`            yes      no
npz            :mod:`specproc.io.npz`                yes      ``.npz``
text           :mod:`specproc.io.text`               yes      ``.txt`` (one FID)
=============  ====================================  =======  ======================

:func:`load` recognises the format from the file's content (magic bytes), not its name:
NIfTI-2 ``n+2`` at byte 4 or NIfTI-1 ``n+1`` at byte 344, also inside gzip; ``DICM`` at byte
128; a zip archive (npz); a first line ``##LABEL=`` (JCAMP-DX); anything else is read as text
columns. Every problem becomes an :class:`~specproc.errors.InvalidInputError` naming the file.

Examples
--------
>>> import numpy as np, tempfile, pathlib
>>> from specproc import Scan
>>> from specproc.io import load, save
>>> fid = np.exp(-np.arange(512) * 1e-2).astype(np.complex64)
>>> path = pathlib.Path(tempfile.mkdtemp()) / "fid.nii.gz"
>>> save(Scan(fid, dwell_s=2.5e-4, spectrometer_mhz=123.2), path)
>>> load(path).format
'nifti-mrs'
"""

from __future__ import annotations

import gzip
import os
import zlib
from collections.abc import Callable
from pathlib import Path
from typing import Any

from specproc.constants import SUPPORTED_NUCLEI
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io._util import check_physical_ranges, normalise_sequence_name, require_file
from specproc.io.dicom_mrs import is_dicom_bytes, read_dicom_mrs
from specproc.io.jcampdx import is_jcampdx_text, read_jcampdx
from specproc.io.nifti_mrs import (
    HEADER_KEYS as NIFTI_HEADER_KEYS,
)
from specproc.io.nifti_mrs import (
    is_nifti_bytes,
    read_nifti_mrs,
    scaling_note,
    write_nifti_mrs,
)
from specproc.io.npz import is_zip_bytes, read_npz, write_npz
from specproc.io.text import read_text, write_text_fid

__all__ = [
    "FORMATS",
    "detect_format",
    "load",
    "normalise_sequence_name",
    "reader_notes",
    "save",
]

#: Readers by format name.
FORMATS: dict[str, Callable[..., Scan]] = {
    "nifti-mrs": read_nifti_mrs,
    "dicom": read_dicom_mrs,
    "jcamp-dx": read_jcampdx,
    "npz": read_npz,
    "text": read_text,
}

#: How each format names the acquisition values (for range errors); others use the attribute.
_HEADER_KEYS: dict[str, dict[str, str]] = {
    "nifti-mrs": NIFTI_HEADER_KEYS,
    "dicom": {"te_s": "Echo Time", "tr_s": "Repetition Time", "dwell_s": "1 / Spectral Width",
              "spectrometer_mhz": "Transmitter Frequency"},
}

_WRITERS: dict[str, Callable[[Scan, Path], None]] = {
    ".nii": write_nifti_mrs,
    ".nii.gz": write_nifti_mrs,
    ".npz": write_npz,
    ".txt": write_text_fid,
}


def detect_format(path: str | os.PathLike[str]) -> str:
    """Name of the format of a file, from its first bytes.

    Parameters
    ----------
    path : str or path-like
        An existing file.

    Returns
    -------
    str
        One of the keys of :data:`FORMATS`.

    Raises
    ------
    InvalidInputError
        If the file is missing, empty, gzip data that are not NIfTI, or none of the formats
        (:data:`UNRECOGNISED`: e.g. a JSON sidecar or a README given as a scan).
    """
    p = require_file(path)
    with open(p, "rb") as fh:
        head = fh.read(4096)
    if not head:
        raise InvalidInputError("the file is empty", p)
    if head[:2] == b"\x1f\x8b":
        try:
            with gzip.open(p, "rb") as gz:
                inner = gz.read(348)
        except (OSError, EOFError, zlib.error) as exc:
            raise InvalidInputError(f"truncated or corrupt gzip data: {exc}", p) from None
        if is_nifti_bytes(inner) is not None:
            return "nifti-mrs"
        raise InvalidInputError("gzip-compressed data that are not a NIfTI file", p)
    if is_nifti_bytes(head) is not None:
        return "nifti-mrs"
    if is_dicom_bytes(head):
        return "dicom"
    if is_zip_bytes(head):
        return "npz"
    if is_jcampdx_text(head):
        return "jcamp-dx"
    if _looks_like_fid_text(head):
        return "text"
    raise InvalidInputError(f"{UNRECOGNISED}; the first bytes are {_first_bytes(head)}", p)


#: The one-line message of a file no reader recognises.
UNRECOGNISED = ("not a recognised spectroscopy file (NIfTI-MRS, DICOM MRS, JCAMP-DX, specproc "
                "text or npz)")


def _first_bytes(head: bytes) -> str:
    text = head[:24].decode("utf-8", errors="replace").replace("\n", " ").replace("\r", " ")
    return repr(text.strip() or head[:8])


def _looks_like_fid_text(head: bytes) -> bool:
    """Whether the start of a file is specproc's text layout: ``#`` lines, then number columns.

    The header line or the first data line decides; a JSON sidecar, a README or a table with
    words in it is not a FID.
    """
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(head) - 4:  # not text (a window may cut a character at its end)
            return False
        text = head[:exc.start].decode("utf-8")
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            if stripped.lstrip("#").split()[:1] == ["specproc-text"]:
                return True
            continue
        cells = stripped.replace(",", " ").split()
        try:
            [float(c) for c in cells]
        except ValueError:
            return False
        return len(cells) >= 2
    return False


def load(path: str | os.PathLike[str], **options: Any) -> Scan:
    """Read an MRS data file of any supported format into a :class:`~specproc.data.Scan`.

    Parameters
    ----------
    path : str or path-like
        The file; its format is recognised from its content.
    **options
        Passed to the format's reader: ``conjugate`` (all but NIfTI-MRS), and for text and
        JCAMP-DX files ``dwell_s``, ``spectrometer_mhz``, ``nucleus``, ``centre_ppm``,
        ``te_s``, ``tr_s``, ``sequence``. An option the reader does not know is an error.

    Returns
    -------
    Scan
        Time on the last axis, in the NIfTI-MRS sign convention, ``source`` set to ``path``.

    Raises
    ------
    InvalidInputError
        For every problem with the file (missing, truncated, corrupt, NaN, no spectrometer
        frequency, zero-length data, bad dimension tags, more than one voxel, more data than
        :func:`specproc.io._util.max_input_bytes`), for acquisition values outside their
        physical range (:data:`specproc.io._util.PHYSICAL_RANGES`; the message names the
        header key and its unit) and for a nucleus specproc does not process yet (see
        ``constants.SUPPORTED_NUCLEI``).
    """
    p = Path(path)
    kind = detect_format(p)
    reader = FORMATS[kind]
    try:
        scan = reader(p, **options)
    except InvalidInputError as exc:
        raise exc.with_path(p) from None
    except TypeError as exc:  # a bad option value of the wrong type
        raise InvalidInputError(f"bad load option: {exc}", p) from None
    if scan.nucleus not in SUPPORTED_NUCLEI:
        raise InvalidInputError(
            f"nucleus {scan.nucleus} is not supported yet (supported: "
            f"{', '.join(sorted(SUPPORTED_NUCLEI))})",
            p,
        )
    width = scan.header.get("SpectralWidth") if kind == "nifti-mrs" else None
    check_physical_ranges(scan, _HEADER_KEYS.get(kind, {}), p, spectral_width_hz=width)
    return scan


def reader_notes(scan: Scan) -> list[str]:
    """What the reader did to the data that the user should hear about (e.g. intensity scaling).
    """
    note = scaling_note(scan)
    return [] if note is None else [note]


def _suffix(path: Path) -> str:
    name = path.name.lower()
    return ".nii.gz" if name.endswith(".nii.gz") else path.suffix.lower()


def save(scan: Scan, path: str | os.PathLike[str]) -> None:
    """Write a Scan; the format follows the suffix (``.nii``, ``.nii.gz``, ``.npz``, ``.txt``).

    The file is written to a temporary name in the target folder and renamed when complete,
    so an error never leaves a partial file.

    Raises
    ------
    InvalidInputError
        For an unknown suffix, or a Scan the format cannot hold.
    """
    p = Path(path)
    writer = _WRITERS.get(_suffix(p))
    if writer is None:
        raise InvalidInputError(
            f"cannot write {p.suffix or 'files without a suffix'}; use one of "
            f"{', '.join(_WRITERS)}",
            p,
        )
    writer(scan, p)
