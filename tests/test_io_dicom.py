"""DICOM MR Spectroscopy Storage reading, checked against objects built with pydicom.

Outside sources: DICOM PS3.3 (MR Spectroscopy IOD and modules: Spectroscopy Data (5600,0020),
Spectral Width (0018,9052), Transmitter Frequency (0018,9098), Data Representation (0028,9108),
Signal Domain Columns (0028,9003), MR Echo Sequence > Effective Echo Time (0018,9082), MR Timing
and Related Parameters Sequence > Repetition Time (0018,0080)); pydicom as the reference writer.
Sign convention: a resonance above the transmitter frequency turns counter-clockwise in DICOM
(the common reading, STANDARDS.md), the opposite of NIfTI-MRS (Clarke et al. 2022).
"""

from __future__ import annotations

import numpy as np
import pytest
from _io_builders import peak_ppm, singlet_fid, write_dicom_mrs

from specproc import InvalidInputError
from specproc.io import detect_format, load
from specproc.io.dicom_mrs import read_dicom_mrs

SW = 4000.0
MHZ = 123.2


def _frames(n_frames=8, n=512, seed=1):
    rng = np.random.default_rng(seed)
    return (rng.normal(size=(n_frames, n)) + 1j * rng.normal(size=(n_frames, n))).astype(
        np.complex64
    )


def test_loads_frequency_width_and_data(tmp_path):
    frames = _frames()
    path = write_dicom_mrs(tmp_path / "mrs.dcm", frames, spectral_width_hz=SW, mhz=MHZ)
    assert detect_format(path) == "dicom"
    scan = load(path)
    assert scan.format == "dicom"
    assert scan.spectrometer_mhz == MHZ
    assert scan.spectral_width_hz == pytest.approx(SW)
    assert scan.dwell_s == pytest.approx(1 / SW)
    assert scan.dims == ("DIM_DYN",)  # frames are transients
    assert scan.data.shape == (8, 512)
    # stored float32 pairs, conjugated into the NIfTI-MRS sense
    np.testing.assert_array_equal(scan.data, np.conj(frames))
    assert scan.nucleus == "1H"
    assert scan.te_s == pytest.approx(0.030) and scan.tr_s == pytest.approx(2.0)
    assert scan.centre_ppm == 4.65
    assert scan.sequence == "press"
    assert scan.protocol == "invented protocol"
    assert scan.water_suppressed is True
    assert "00189098" in scan.header  # Transmitter Frequency in the DICOM JSON header
    assert "56000020" not in scan.header  # the samples are not copied into the header


def test_option_keeps_stored_sense(tmp_path):
    frames = _frames(1)
    path = write_dicom_mrs(tmp_path / "mrs.dcm", frames)
    scan = read_dicom_mrs(path, conjugate=False)
    assert scan.dims == () and scan.data.shape == (512,)
    np.testing.assert_array_equal(scan.data, frames[0])


def test_known_peak_lands_at_its_ppm(tmp_path):
    # A choline-like singlet at 3.2 ppm written in the DICOM sense must land at 3.2 ppm after
    # loading (FFT of numpy, NIfTI-MRS axis ppm = 4.65 - f / MHz).
    n = 2048
    fid = singlet_fid(n, 1 / SW, MHZ, 3.2, sense="dicom")
    path = write_dicom_mrs(tmp_path / "cho.dcm", fid[None, :], spectral_width_hz=SW, mhz=MHZ)
    scan = load(path)
    resolution = SW / n / MHZ
    assert peak_ppm(scan.data, scan.dwell_s, MHZ) == pytest.approx(3.2, abs=resolution)
    # without the conjugation it would sit at the mirror image about the centre
    raw = read_dicom_mrs(path, conjugate=False)
    assert peak_ppm(raw.data, raw.dwell_s, MHZ) == pytest.approx(2 * 4.65 - 3.2, abs=resolution)


def test_echo_time_per_frame_and_top_level_fallback(tmp_path):
    path = write_dicom_mrs(tmp_path / "pf.dcm", _frames(3), te_ms=None,
                           per_frame_te_ms=[144.0, 144.0, 144.0])
    assert load(path).te_s == pytest.approx(0.144)
    path = write_dicom_mrs(tmp_path / "pfbad.dcm", _frames(3), te_ms=None,
                           per_frame_te_ms=[30.0, 60.0, 90.0])
    with pytest.raises(InvalidInputError, match="different echo times"):
        load(path)

    import pydicom

    path = write_dicom_mrs(tmp_path / "top.dcm", _frames(2), te_ms=None, tr_ms=None)
    ds = pydicom.dcmread(path)
    ds.EchoTime = "68"
    ds.RepetitionTime = "3000"
    ds.save_as(path, enforce_file_format=True)
    scan = load(path)
    assert scan.te_s == pytest.approx(0.068) and scan.tr_s == pytest.approx(3.0)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"rows": 2}, "more than one voxel"),
        ({"columns": 4}, "more than one voxel"),
        ({"domain": "FREQUENCY"}, "signal domain is FREQUENCY"),
        ({"representation": "REAL"}, "COMPLEX is needed"),
        ({"mhz": None}, "missing spectrometer frequency"),
        ({"sop_class": "1.2.840.10008.5.1.4.1.1.4"}, "not an MR Spectroscopy Storage"),
        ({"data_bytes": b"\x00" * 400}, "truncated or inconsistent"),
        ({"data_bytes": b"\x00" * 4095}, "truncated or inconsistent"),
        ({"nucleus": "31P"}, "nucleus 31P is not supported yet"),
    ],
)
def test_bad_dicom(tmp_path, kwargs, match):
    path = write_dicom_mrs(tmp_path / "bad.dcm", _frames(2), **kwargs)
    with pytest.raises(InvalidInputError, match=match) as info:
        load(path)
    assert info.value.path == str(path)


def test_nan_samples_and_truncated_file(tmp_path):
    frames = _frames(2)
    frames[1, 7] = np.nan
    with pytest.raises(InvalidInputError, match="NaN"):
        load(write_dicom_mrs(tmp_path / "nan.dcm", frames))
    good = write_dicom_mrs(tmp_path / "good.dcm", _frames(2)).read_bytes()
    (tmp_path / "cut.dcm").write_bytes(good[: len(good) // 2])
    with pytest.raises(InvalidInputError, match=r"cut\.dcm"):
        load(tmp_path / "cut.dcm")


# ------------------------------------------------------------------ edited frames
# DICOM PS3.3 has no editing attribute for spectroscopy frames; specproc's convention is the
# standard Frame Label (0020,9453) of each frame's Frame Content Sequence (0020,9111): ON/OFF.
def test_edit_state_from_frame_labels(tmp_path):
    frames = _frames(6)
    labels = ["OFF", "on", "EDIT_OFF", "ON", "off", "edit_on"]  # interleaved, any spelling
    path = write_dicom_mrs(tmp_path / "mega.dcm", frames, sequence="MEGA-PRESS",
                           frame_labels=labels)
    scan = load(path)
    assert scan.dims == ("DIM_EDIT", "DIM_DYN") and scan.data.shape == (2, 3, 512)
    np.testing.assert_allclose(scan.data[0], np.conj(frames[[1, 3, 5]]))  # ON, file order
    np.testing.assert_allclose(scan.data[1], np.conj(frames[[0, 2, 4]]))
    from specproc.edited.conditions import edit_conditions

    conditions = edit_conditions(scan)
    assert (conditions.on_index, conditions.off_index) == (0, 1)
    assert any("assumed" in note for note in conditions.notes)  # offsets not in DICOM
    # the conversion to NIfTI-MRS keeps the edit axis and its EditCondition
    from specproc.io import save

    save(scan.replace(source=None), tmp_path / "mega.nii.gz")
    again = load(tmp_path / "mega.nii.gz")
    assert again.dims == scan.dims
    assert again.dim_headers["DIM_EDIT"]["header"]["EditCondition"] == ["ON", "OFF"]


@pytest.mark.parametrize(
    ("labels", "sequence", "match"),
    [
        (["ON", "OFF", "ON", None], "svs_press", "1 frame.s. without a Frame Label"),
        (["ON", "OFF", "A", "B"], "svs_press", "other than ON/OFF .'A', 'B'."),
        (["ON", "OFF", "ON", "ON"], "svs_press", "3 ON and 1 OFF frames"),
        (None, "MEGA-PRESS", "do not say which are ON"),
        (["ON", "OFF", "ON", "OFF"], "MEGA-sLASER", "PRESS localisation only"),
    ],
)
def test_edit_state_that_cannot_be_told_is_refused(tmp_path, labels, sequence, match):
    path = write_dicom_mrs(tmp_path / "bad.dcm", _frames(4), sequence=sequence,
                           frame_labels=labels)
    with pytest.raises(InvalidInputError, match=match) as info:
        load(path)
    assert info.value.path == str(path)


def test_unlabelled_frames_of_a_plain_sequence_stay_transients(tmp_path):
    path = write_dicom_mrs(tmp_path / "plain.dcm", _frames(4), frame_labels=[None] * 4)
    assert load(path).dims == ("DIM_DYN",)
