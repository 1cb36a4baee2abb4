"""JCAMP-DX, text and npz readers, format dispatch by content, save by suffix.

Outside sources: JCAMP-DX for NMR (Davies & Lampen, Appl Spectrosc 1993;47:1093-1099) for the
file written here, read through nmrglue.jcampdx; numpy's npz format (numpy.savez / allow_pickle);
the NIfTI-MRS sign convention (Clarke et al. 2022) for the singlet positions.
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
from _io_builders import (
    peak_ppm,
    singlet_fid,
    write_dicom_mrs,
    write_jcampdx,
    write_nifti_nibabel,
    write_npz_numpy,
    write_text_columns,
)

from specproc import InvalidInputError, Scan
from specproc.io import detect_format, load, normalise_sequence_name, save
from specproc.io.jcampdx import read_jcampdx

DWELL = 2.5e-4
MHZ = 123.2
N = 1024
RES = 1 / (N * DWELL) / MHZ  # ppm per spectral point


# ------------------------------------------------------------------------------ JCAMP-DX
def test_jcampdx_complex_fid(tmp_path):
    fid = singlet_fid(N, DWELL, MHZ, 3.027)
    path = write_jcampdx(tmp_path / "fid.jdx", fid, dwell_s=DWELL, mhz=MHZ)
    assert detect_format(path) == "jcamp-dx"
    scan = load(path)
    assert scan.format == "jcamp-dx"
    assert scan.spectrometer_mhz == MHZ
    assert scan.dwell_s == pytest.approx(DWELL, rel=1e-12)  # (LAST - FIRST) / (n - 1)
    assert scan.nucleus == "1H" and scan.dims == ()
    np.testing.assert_array_equal(scan.data, fid)  # repr floats read back exactly
    assert peak_ppm(scan.data, scan.dwell_s, MHZ) == pytest.approx(3.027, abs=RES)
    assert scan.header["DATATYPE"] == ["NMR FID"]


def test_jcampdx_refusals_and_options(tmp_path):
    fid = singlet_fid(64, DWELL, MHZ, 2.0)
    real = write_jcampdx(tmp_path / "real.jdx", fid, real_only=True)
    with pytest.raises(InvalidInputError, match="only real data"):
        load(real)
    spec = write_jcampdx(tmp_path / "spec.jdx", fid, data_type="NMR SPECTRUM")
    with pytest.raises(InvalidInputError, match="spectrum"):
        load(spec)
    nofreq = write_jcampdx(tmp_path / "nofreq.jdx", fid, mhz=None)
    with pytest.raises(InvalidInputError, match="missing spectrometer frequency"):
        load(nofreq)
    assert load(nofreq, spectrometer_mhz=MHZ).spectrometer_mhz == MHZ
    with pytest.raises(InvalidInputError, match="load option says"):
        read_jcampdx(write_jcampdx(tmp_path / "f.jdx", fid, mhz=MHZ), spectrometer_mhz=100.0)
    with pytest.raises(InvalidInputError, match="unknown load option"):
        load(tmp_path / "f.jdx", colour="red")
    p31 = write_jcampdx(tmp_path / "p.jdx", fid, nucleus="31P", mhz=51.7)
    assert read_jcampdx(p31).nucleus == "31P"
    with pytest.raises(InvalidInputError, match="nucleus 31P is not supported yet"):
        load(p31)


# ------------------------------------------------------------------------------ text
def test_text_with_header_line(tmp_path):
    fid = singlet_fid(N, DWELL, MHZ, 2.008)
    header = f"specproc-text 1 dwell_s={DWELL} spectrometer_mhz={MHZ} nucleus=1H te_s=0.03"
    path = write_text_columns(tmp_path / "fid.txt", fid, dwell_s=DWELL, header=header)
    scan = load(path)
    assert scan.format == "text" and scan.te_s == 0.03
    assert scan.dwell_s == DWELL and scan.spectrometer_mhz == MHZ
    np.testing.assert_array_equal(scan.data, fid)  # 17 significant digits are exact
    assert peak_ppm(scan.data, scan.dwell_s, MHZ) == pytest.approx(2.008, abs=RES)


def test_text_with_options_and_time_column(tmp_path):
    fid = singlet_fid(256, DWELL, MHZ, 3.2)
    path = write_text_columns(tmp_path / "plain.dat", fid, dwell_s=DWELL)
    with pytest.raises(InvalidInputError, match="missing spectrometer frequency"):
        load(path)
    scan = load(path, spectrometer_mhz=MHZ)
    assert scan.dwell_s == pytest.approx(DWELL, rel=1e-12)  # from the time column
    with pytest.raises(InvalidInputError, match="time column steps"):
        load(path, spectrometer_mhz=MHZ, dwell_s=2 * DWELL)


@pytest.mark.parametrize(
    ("content", "match"),
    [
        ("# specproc-text 1 spectrometer_mhz=123.2\n0 1 0\n0.00025 1 2 3\n", "expected 3 columns"),
        ("# specproc-text 1 spectrometer_mhz=123.2\n0 1 0\n0.00025 1 x\n", "not a number"),
        ("# specproc-text 1 spectrometer_mhz=123.2\n0 1 0\n0.00025 nan 0\n", "NaN"),
        ("# specproc-text 1 spectrometer_mhz=123.2\n", "no time-domain samples"),
        ("# specproc-text 1 spectrometer_mhz=123.2 colour=red\n0 1 0\n", "unknown header key"),
        ("# specproc-text 2\n0 1 0\n", "version"),
        ("# specproc-text 1 spectrometer_mhz=123.2\n0 1 0\n0.1 1 0\n0.15 1 0\n", "uniformly"),
        ("# specproc-text 1 dwell_s=0.001 spectrometer_mhz=123.2 nucleus=31P\n0 1 0\n",
         "nucleus 31P is not supported yet"),
    ],
)
def test_bad_text(tmp_path, content, match):
    path = tmp_path / "bad.txt"
    path.write_text(content)
    with pytest.raises(InvalidInputError, match=match):
        load(path)


# ------------------------------------------------------------------------------ npz
def test_npz_written_with_numpy(tmp_path):
    fid = np.stack([singlet_fid(N, DWELL, MHZ, 2.008)] * 3).astype(np.complex64)
    path = write_npz_numpy(
        tmp_path / "a.npz", fid=fid, dwell_s=DWELL, spectrometer_mhz=MHZ,
        dims=np.array(["DIM_DYN"]), nucleus=np.array("1H"), te_s=0.03,
    )
    assert detect_format(path) == "npz"
    scan = load(path)
    assert scan.dims == ("DIM_DYN",) and scan.data.dtype == np.complex64
    np.testing.assert_array_equal(scan.data, fid)
    assert peak_ppm(scan.data[0], scan.dwell_s, MHZ) == pytest.approx(2.008, abs=RES)


def test_npz_round_trip(tmp_path):
    rng = np.random.default_rng(5)
    data = rng.normal(size=(2, 64)) + 1j * rng.normal(size=(2, 64))
    scan = Scan(data, dwell_s=DWELL, spectrometer_mhz=MHZ, dims=("DIM_COIL",), te_s=0.03,
                centre_ppm=4.7, sequence="steam", protocol="p", water_suppressed=True,
                dim_headers={"DIM_COIL": {"info": "coils"}},
                header={"k": [1, 2]}).with_step("x", {"y": 1})
    save(scan, tmp_path / "rt.npz")
    back = load(tmp_path / "rt.npz")
    assert back.data.tobytes() == scan.data.tobytes()
    for name in ("dims", "te_s", "centre_ppm", "sequence", "protocol", "water_suppressed",
                 "provenance", "dwell_s", "spectrometer_mhz"):
        assert getattr(back, name) == getattr(scan, name), name
    assert dict(back.header) == {"k": [1, 2]}
    assert dict(back.dim_headers) == {"DIM_COIL": {"info": "coils"}}


def test_bad_npz(tmp_path):
    fid = np.ones(8, complex)
    cases = {
        "pickle": ({"fid": fid, "dwell_s": DWELL, "spectrometer_mhz": MHZ,
                    "header_json": np.array([{"a": 1}], dtype=object)}, "corrupt|pickle"),
        "unknown": ({"fid": fid, "dwell_s": DWELL, "spectrometer_mhz": MHZ, "extra": 1},
                    "unknown npz key"),
        "real": ({"fid": np.ones(8), "dwell_s": DWELL, "spectrometer_mhz": MHZ}, "complex"),
        "nofreq": ({"fid": fid, "dwell_s": DWELL}, "missing spectrometer frequency"),
        "nodwell": ({"fid": fid, "spectrometer_mhz": MHZ}, "missing dwell"),
        "empty": ({"fid": np.ones(0, complex), "dwell_s": DWELL, "spectrometer_mhz": MHZ},
                  "no time-domain samples"),
        "tags": ({"fid": np.ones((2, 8), complex), "dwell_s": DWELL, "spectrometer_mhz": MHZ,
                  "dims": np.array(["DIM_WHAT"])}, "unknown dimension tag"),
        "ntags": ({"fid": np.ones((2, 8), complex), "dwell_s": DWELL, "spectrometer_mhz": MHZ},
                  "dimension tags"),
    }
    for name, (arrays, match) in cases.items():
        path = write_npz_numpy(tmp_path / f"{name}.npz", **arrays)
        with pytest.raises(InvalidInputError, match=match):
            load(path)


# ------------------------------------------------------------------------------ dispatch, save
def test_dispatch_by_content_not_suffix(tmp_path):
    fid = singlet_fid(64, DWELL, MHZ, 2.0)
    nifti = write_nifti_nibabel(
        tmp_path / "n.nii", fid.reshape(1, 1, 1, 64).astype(np.complex64), dwell=DWELL,
        meta={"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"]})
    dicom = write_dicom_mrs(tmp_path / "d.dcm", fid[None, :])
    npz = write_npz_numpy(tmp_path / "z.npz", fid=fid, dwell_s=DWELL, spectrometer_mhz=MHZ)
    jdx = write_jcampdx(tmp_path / "j.jdx", fid)
    expected = {nifti: "nifti-mrs", dicom: "dicom", npz: "npz", jdx: "jcamp-dx"}
    for original, fmt in expected.items():
        misnamed = tmp_path / f"misnamed_{fmt}.txt"
        shutil.copy(original, misnamed)
        assert detect_format(misnamed) == fmt
        assert load(misnamed).format == fmt


def test_missing_and_empty_files(tmp_path):
    with pytest.raises(InvalidInputError, match="file not found") as info:
        load(tmp_path / "nope.nii")
    assert str(info.value).startswith(str(tmp_path / "nope.nii"))
    (tmp_path / "empty.nii").write_bytes(b"")
    with pytest.raises(InvalidInputError, match="empty"):
        load(tmp_path / "empty.nii")
    with pytest.raises(InvalidInputError, match="not a regular file"):
        load(tmp_path)


def test_save_refuses_unknown_suffix_and_leaves_nothing(tmp_path):
    scan = Scan(np.ones((2, 16), complex), dwell_s=DWELL, spectrometer_mhz=MHZ,
                dims=("DIM_DYN",))
    with pytest.raises(InvalidInputError, match="cannot write"):
        save(scan, tmp_path / "x.mat")
    with pytest.raises(InvalidInputError, match="one FID"):
        save(scan, tmp_path / "x.txt")
    assert list(tmp_path.iterdir()) == []


def test_text_writer_round_trip(tmp_path):
    scan = Scan(singlet_fid(128, DWELL, MHZ, 2.5), dwell_s=DWELL, spectrometer_mhz=MHZ,
                te_s=0.144, sequence="press")
    save(scan, tmp_path / "fid.txt")
    back = load(tmp_path / "fid.txt")
    assert back.data.tobytes() == scan.data.tobytes()
    assert (back.te_s, back.sequence, back.dwell_s) == (0.144, "press", DWELL)


@pytest.mark.parametrize(
    ("text", "name"),
    [
        ("PRESS", "press"),
        ("svs_press_v2", "press"),
        ("STEAM", "steam"),
        ("sLASER", "semi-laser"),
        ("semi-LASER", "semi-laser"),
        ("Spin Echo", "spin-echo"),
        ("svs_fid", "pulse-acquire"),
        ("pulse-acquire", "pulse-acquire"),
        ("MEGA-PRESS", None),
        ("LASER", None),
        ("", None),
        (None, None),
        ("press_steam", None),
    ],
)
def test_normalise_sequence_name(text, name):
    assert normalise_sequence_name(text) == name
