"""Test helpers of the io tests: build files of each format with the reference libraries.

Nothing here goes through specproc's writers: NIfTI-MRS files are made with nibabel, DICOM
files with pydicom, JCAMP-DX and text files are written out line by line, npz files with
numpy, so that the readers are checked against files we did not write with our own code.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import nibabel as nib
import numpy as np

__all__ = [
    "CENTRE_PPM",
    "peak_ppm",
    "singlet_fid",
    "write_dicom_mrs",
    "write_jcampdx",
    "write_nifti_nibabel",
    "write_npz_numpy",
    "write_text_columns",
]

#: Receiver centre of 1H data (NIfTI-MRS convention for 1H, common practice: 4.65 ppm).
CENTRE_PPM = 4.65


def singlet_fid(
    n: int,
    dwell_s: float,
    mhz: float,
    shift_ppm: float,
    *,
    centre_ppm: float = CENTRE_PPM,
    lw_hz: float = 3.0,
    sense: str = "nifti",
) -> np.ndarray:
    """Lorentzian singlet at ``shift_ppm``.

    ``sense="nifti"``: the NIfTI-MRS convention (Clarke et al. 2022), a shift above the centre
    turns as exp(-2πi Δf t). ``sense="dicom"``: the opposite sense, exp(+2πi Δf t), the common
    reading of DICOM PS3.3 for positive relative frequency.
    """
    t = np.arange(n) * dwell_s
    delta_hz = (shift_ppm - centre_ppm) * mhz
    sign = -1.0 if sense == "nifti" else 1.0
    return np.exp(sign * 2j * np.pi * delta_hz * t - np.pi * lw_hz * t)


def peak_ppm(fid: np.ndarray, dwell_s: float, mhz: float, centre_ppm: float = CENTRE_PPM) -> float:
    """Shift of the largest spectral point, using numpy's FFT directly (not specproc's axis).

    ppm = centre - f / MHz with f = fftshift(fftfreq(n, dwell)) and S = fftshift(fft(fid)):
    the NIfTI-MRS convention as written in the standard.
    """
    n = fid.shape[-1]
    spectrum = np.fft.fftshift(np.fft.fft(fid))
    freq = np.fft.fftshift(np.fft.fftfreq(n, dwell_s))
    return float(centre_ppm - freq[np.argmax(np.abs(spectrum))] / mhz)


def write_nifti_nibabel(
    path: Path,
    data: np.ndarray,
    *,
    dwell: float,
    meta: dict[str, Any] | None,
    version: int = 2,
    time_unit: str = "sec",
    intent: str = "mrs_v0_9",
) -> Path:
    """Write ``data`` of shape (x, y, z, t, ...) as a NIfTI file with nibabel only."""
    cls = nib.Nifti2Image if version == 2 else nib.Nifti1Image
    img = cls(data, affine=np.eye(4))
    hdr = img.header
    hdr.set_data_dtype(data.dtype)
    hdr.set_xyzt_units("mm", time_unit)
    pixdim = hdr["pixdim"]
    pixdim[4] = dwell
    hdr["pixdim"] = pixdim
    hdr["intent_name"] = intent.encode()
    if meta is not None:
        content = json.dumps(meta).encode("utf-8")
        hdr.extensions.append(nib.nifti1.Nifti1Extension(44, content))
    nib.save(img, str(path))
    return path


def write_dicom_mrs(
    path: Path,
    frames: np.ndarray,
    *,
    spectral_width_hz: float = 4000.0,
    mhz: float | None = 123.2,
    nucleus: str = "1H",
    te_ms: float | None = 30.0,
    tr_ms: float | None = 2000.0,
    per_frame_te_ms: list[float] | None = None,
    frame_labels: list[str | None] | None = None,
    rows: int = 1,
    columns: int = 1,
    domain: str = "TIME",
    representation: str = "COMPLEX",
    sop_class: str | None = None,
    centre_ppm: float | None = 4.65,
    sequence: str = "svs_press",
    data_bytes: bytes | None = None,
) -> Path:
    """A DICOM MR Spectroscopy Storage file built with pydicom (DICOM PS3.3 attributes).

    ``frames`` has shape (n_frames, n_points), complex, stored as interleaved real/imaginary
    float32 exactly as given (no conjugation here). ``frame_labels`` gives each frame a Frame
    Label (0020,9453) in its Frame Content Sequence (0020,9111) (``None``: no label).
    """
    from pydicom.dataset import Dataset, FileMetaDataset
    from pydicom.uid import ExplicitVRLittleEndian, MRSpectroscopyStorage, generate_uid

    frames = np.atleast_2d(frames)
    uid = generate_uid()
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = sop_class or MRSpectroscopyStorage
    meta.MediaStorageSOPInstanceUID = uid
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = Dataset()
    ds.file_meta = meta
    ds.SOPClassUID = sop_class or MRSpectroscopyStorage
    ds.SOPInstanceUID = uid
    ds.Modality = "MR"
    ds.PatientName = "Invented^Phantom"
    ds.NumberOfFrames = frames.shape[0]
    ds.Rows = rows
    ds.Columns = columns
    ds.DataPointRows = 1
    ds.DataPointColumns = frames.shape[1]
    ds.DataRepresentation = representation
    ds.SignalDomainColumns = domain
    ds.SpectralWidth = spectral_width_hz
    if mhz is not None:
        ds.TransmitterFrequency = mhz
    ds.ResonantNucleus = nucleus
    if centre_ppm is not None:
        ds.ChemicalShiftReference = centre_ppm
    ds.PulseSequenceName = sequence
    ds.ProtocolName = "invented protocol"
    ds.SpectrallySelectedSuppression = "WATER"
    shared = Dataset()
    if te_ms is not None:
        echo = Dataset()
        echo.EffectiveEchoTime = te_ms
        shared.MREchoSequence = [echo]
    if tr_ms is not None:
        timing = Dataset()
        timing.RepetitionTime = tr_ms
        shared.MRTimingAndRelatedParametersSequence = [timing]
    ds.SharedFunctionalGroupsSequence = [shared]
    if per_frame_te_ms is not None or frame_labels is not None:
        groups = [Dataset() for _ in range(frames.shape[0])]
        for group, value in zip(groups, per_frame_te_ms or [], strict=False):
            echo = Dataset()
            echo.EffectiveEchoTime = value
            group.MREchoSequence = [echo]
        for group, label in zip(groups, frame_labels or [], strict=False):
            content = Dataset()
            if label is not None:
                content.FrameLabel = label
            group.FrameContentSequence = [content]
        ds.PerFrameFunctionalGroupsSequence = groups
    if data_bytes is None:
        pairs = np.stack([frames.real, frames.imag], axis=-1)
        data_bytes = pairs.astype("<f4").tobytes()
    ds.SpectroscopyData = data_bytes
    ds.save_as(path, enforce_file_format=True)
    return path


def write_jcampdx(
    path: Path,
    fid: np.ndarray | None,
    *,
    dwell_s: float = 2.5e-4,
    mhz: float | None = 123.2,
    nucleus: str = "1H",
    real_only: bool = False,
    data_type: str = "NMR FID",
    per_line: int = 6,
) -> Path:
    """A JCAMP-DX NTUPLES NMR FID (Davies & Lampen 1993) in AFFN form, written as text.

    ``real_only`` writes a plain XYDATA record of the real part instead.
    """
    n = 0 if fid is None else fid.size
    lines = ["##TITLE= invented FID", "##JCAMP-DX= 5.01", f"##DATA TYPE= {data_type}",
             "##ORIGIN= specproc tests", "##OWNER= public domain"]
    if mhz is not None:
        lines.append(f"##.OBSERVE FREQUENCY= {mhz!r}")
    lines.append(f"##.OBSERVE NUCLEUS= ^{nucleus}")

    def table(values: np.ndarray) -> list[str]:
        rows = []
        for start in range(0, values.size, per_line):
            chunk = " ".join(f"{v!r}" for v in values[start:start + per_line].tolist())
            rows.append(f"{start} {chunk}")
        return rows

    last_t = (n - 1) * dwell_s
    if real_only:
        lines += ["##XUNITS= SECONDS", "##YUNITS= ARBITRARY UNITS", "##FIRSTX= 0.0",
                  f"##LASTX= {last_t!r}", "##XFACTOR= 1.0", "##YFACTOR= 1.0", f"##NPOINTS= {n}",
                  "##XYDATA= (X++(Y..Y))"]
        lines += table(np.real(fid))
        lines.append("##END=")
    else:
        lines += [
            "##DATA CLASS= NTUPLES",
            f"##NTUPLES= {data_type}",
            "##VAR_NAME= TIME, FID/REAL, FID/IMAG, PAGE NUMBER",
            "##SYMBOL= X, R, I, N",
            "##VAR_TYPE= INDEPENDENT, DEPENDENT, DEPENDENT, PAGE",
            "##VAR_FORM= AFFN, AFFN, AFFN, AFFN",
            f"##VAR_DIM= {n}, {n}, {n}, 2",
            "##UNITS= SECONDS, ARBITRARY UNITS, ARBITRARY UNITS, ",
            f"##FIRST= 0.0, {float(fid.real[0])!r}, {float(fid.imag[0])!r}, 1",
            f"##LAST= {last_t!r}, {float(fid.real[-1])!r}, {float(fid.imag[-1])!r}, 2",
            "##FACTOR= 1.0, 1.0, 1.0, 1",
            "##PAGE= N=1",
            "##DATA TABLE= (X++(R..R)), XYDATA",
        ]
        lines += table(fid.real)
        lines += ["##PAGE= N=2", "##DATA TABLE= (X++(I..I)), XYDATA"]
        lines += table(fid.imag)
        lines += [f"##END NTUPLES= {data_type}", "##END="]
    path.write_text("\n".join(lines) + "\n", encoding="ascii")
    return path


def write_text_columns(
    path: Path,
    fid: np.ndarray,
    *,
    dwell_s: float,
    header: str | None = None,
    time_column: bool = True,
) -> Path:
    """Text columns time, real, imaginary written with numpy.savetxt (17 digits)."""
    t = np.arange(fid.size) * dwell_s
    cols = [t, fid.real, fid.imag] if time_column else [fid.real, fid.imag]
    np.savetxt(path, np.column_stack(cols), fmt="%.17g",
               header=header or "", comments="# " if header else "")
    return path


def write_npz_numpy(path: Path, **arrays: Any) -> Path:
    """An npz archive written with numpy.savez."""
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)
    return path
