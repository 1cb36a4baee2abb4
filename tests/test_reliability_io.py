"""Hostile and non-standard input files: the reader refuses what no scanner writes, caps the
data a file may declare, and accepts every form the NIfTI-MRS standard allows.

Each test reproduces one defect of the reliability probe (issue 17); the NIfTI files are
built with nibabel (reference library), the key forms follow the NIfTI-MRS standard
(Clarke et al. 2022, definitions v0.9-0.11).
"""

from __future__ import annotations

import gzip
import time

import nibabel as nib
import numpy as np
import pytest
from _io_builders import singlet_fid, write_nifti_nibabel
from click.testing import CliRunner

from specproc import InvalidInputError
from specproc.cli import main
from specproc.io import load, reader_notes, save

DWELL, MHZ = 2.5e-4, 123.2  # 2.894 T for 1H


def _meta(**extra):
    return {"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"], "EchoTime": 0.03,
            "SequenceName": "PRESS", **extra}


def _fid_file(tmp_path, name="scan.nii", n=256, meta=None, dwell=DWELL, scale=None):
    fid = singlet_fid(n, DWELL, MHZ, 2.0).astype(np.complex64).reshape(1, 1, 1, n)
    path = tmp_path / name
    write_nifti_nibabel(path, fid, dwell=dwell, meta=_meta() if meta is None else meta)
    if scale is not None:
        img = nib.Nifti2Image.from_bytes(path.read_bytes())
        img.header["scl_slope"], img.header["scl_inter"] = scale
        path.write_bytes(img.to_bytes())
    return path


def _info(path):
    return CliRunner().invoke(main, ["info", str(path)])


# -------------------------------------------------------------- 3: decompressed size cap
def _bomb(tmp_path, n_points):
    """A .nii.gz whose header declares ``n_points`` complex64 samples but holds 64."""
    raw = bytearray(_fid_file(tmp_path, "small.nii", n=64).read_bytes())
    raw[48:56] = int(n_points).to_bytes(8, "little")  # NIfTI-2 dim[4] (int64 at byte 48)
    path = tmp_path / "bomb.nii.gz"
    path.write_bytes(gzip.compress(bytes(raw) + bytes(8 * 1024 * 1024)))
    return path


def test_gzip_bomb_is_refused_before_decompression(tmp_path):
    path = _bomb(tmp_path, 400_000_000)  # 3.2 GB declared, 8 MiB of zeros inside
    start = time.process_time()
    with pytest.raises(InvalidInputError, match=r"declares 3051\.\d+ MiB .* limit of 2048 MiB"):
        load(path)
    assert time.process_time() - start < 2.0  # nothing was decompressed past the header


def test_the_size_cap_is_configurable(tmp_path, monkeypatch):
    path = _fid_file(tmp_path, n=4096)
    assert load(path).n_points == 4096
    monkeypatch.setenv("SPECPROC_MAX_INPUT_MB", "0.01")
    with pytest.raises(InvalidInputError, match="SPECPROC_MAX_INPUT_MB"):
        load(path)
    monkeypatch.setenv("SPECPROC_MAX_INPUT_MB", "lots")
    with pytest.raises(InvalidInputError, match="must be a positive number"):
        load(path)


@pytest.mark.parametrize("compress", [False, True])
def test_trailing_data_after_the_image_is_refused(tmp_path, compress):
    good = _fid_file(tmp_path).read_bytes() + bytes(1024 * 1024)
    path = tmp_path / ("tail.nii.gz" if compress else "tail.nii")
    path.write_bytes(gzip.compress(good) if compress else good)
    with pytest.raises(InvalidInputError, match="trailing data"):
        load(path)


# --------------------------------------------------- 4 and 11: physical ranges of the header
@pytest.mark.parametrize(("meta", "match"), [
    (_meta(EchoTime=30), r"EchoTime = 30 s is outside .* 0-2 s \(a value in milliseconds\?\)"),
    (_meta(EchoTime="30"), r"EchoTime must be a number in seconds, got the text '30'"),
    (_meta(EchoTime=1e300), r"EchoTime = 1e\+300 s is outside"),
    (_meta(EchoTime=1e-9), r"EchoTime = 1e-09 s is shorter than any press echo"),
    (_meta(RepetitionTime=2000), r"RepetitionTime = 2000 s is outside"),
    (_meta(RepetitionTime=0.01, EchoTime=0.03), r"RepetitionTime = 0.01 s is shorter than"),
    (_meta(MixingTime=-1), r"MixingTime \(s\) must be a non-negative time"),
    (_meta(SpectrometerFrequency=[2e298]), r"SpectrometerFrequency = 2e\+298 MHz means a "
                                           r"field of 4\.\d+e\+296 T for 1H, outside"),
    (_meta(SpectralWidth=5000.0), r"SpectralWidth = 5000 Hz disagrees with the dwell time"),
    # found by the fuzz benchmark: integers beyond float range, and 400-digit messages
    (_meta(SpectralWidth=2**70), r"SpectralWidth = 1\.18059e\+21 Hz disagrees"),
    (_meta(EchoTime=10**400), r"EchoTime \(s\) must be a non-negative time, got 1000.{0,30}$"),
])
def test_impossible_header_values_name_the_key_and_unit(tmp_path, meta, match):
    path = _fid_file(tmp_path, meta=meta)
    with pytest.raises(InvalidInputError, match=match):
        load(path)
    result = _info(path)  # issue item 11: info printed such values with exit 0
    assert result.exit_code == 2
    assert result.stderr.startswith(f"specproc: error: {path}: ")
    assert len(result.stderr.splitlines()) == 1


def test_impossible_dwell_time_names_pixdim(tmp_path):
    path = _fid_file(tmp_path, dwell=1e-30)
    with pytest.raises(InvalidInputError, match=r"the dwell time pixdim\[4\] = 1e-30 s is "
                                                r"outside the plausible range 1e-07-0\.1 s"):
        load(path)


def test_ordinary_values_pass(tmp_path):
    scan = load(_fid_file(tmp_path, meta=_meta(RepetitionTime=2.0, SpectralWidth=4000.0)))
    assert (scan.te_s, scan.tr_s) == (0.03, 2.0)


# --------------------------------------------------------------- 4: scaling is announced
def test_intensity_scaling_is_recorded_and_announced(tmp_path):
    path = _fid_file(tmp_path, scale=(2.0, 0.0))
    plain = load(_fid_file(tmp_path, "plain.nii"))
    scaled = load(path)
    np.testing.assert_allclose(scaled.data, 2.0 * plain.data, rtol=1e-6)
    assert scaled.provenance[-1]["Method"] == "intensity scaling"
    assert scaled.provenance[-1]["Details"]["scl_slope"] == 2.0
    assert reader_notes(scaled) == [
        "the samples were scaled by scl_slope = 2 and scl_inter = 0 from the NIfTI header"]
    assert reader_notes(plain) == []
    assert "scl_slope = 2" in _info(path).output


# ------------------------------------------- 1 and 12: every form the standard allows
def test_text_processing_history_is_accepted(tmp_path):
    history = [{"Time": "2024-01-01T00:00:00", "Program": "converter", "Version": "1",
                "Method": "coil combination", "Details": "weighted by the first point"},
               {"Method": 7, "Details": ["odd", "but", "kept"]}]
    scan = load(_fid_file(tmp_path, meta=_meta(ProcessingApplied=history)))
    assert scan.provenance[0]["Details"] == "weighted by the first point"
    assert scan.provenance[1]["Method"] == "7"  # text, as the standard says
    from specproc.report.tables import processing_rows

    rows = processing_rows(scan.provenance)
    assert "weighted by the first point" in rows[0]["details"]


def test_user_keys_are_read_in_both_forms_and_written_as_objects(tmp_path):
    bare = load(_fid_file(tmp_path, meta=_meta(specproc_centre_ppm=4.7)))
    wrapped = load(_fid_file(tmp_path, "w.nii", meta=_meta(
        specproc_centre_ppm={"Value": 4.7, "Description": "centre"})))
    assert bare.centre_ppm == wrapped.centre_ppm == 4.7
    save(bare.replace(header={**bare.header, "private_site": "x"}), tmp_path / "out.nii.gz")
    written = load(tmp_path / "out.nii.gz").header
    assert written["specproc_centre_ppm"] == {
        "Value": 4.7, "Description": "chemical shift at the receiver centre frequency, ppm"}
    assert written["private_site"]["Value"] == "x"
    assert "Description" in written["private_site"]


def test_voxel_geometry_travels_in_the_affine(tmp_path):
    affine = np.diag([20.0, 25.0, 30.0, 1.0])
    affine[:3, 3] = [1.0, -2.0, 3.0]
    scan = load(_fid_file(tmp_path)).replace(affine=affine)
    save(scan, tmp_path / "geo.nii.gz")
    back = load(tmp_path / "geo.nii.gz")
    assert back.voxel_mm == (20.0, 25.0, 30.0)
    assert back.voxel_position_mm == (1.0, -2.0, 3.0)
    zooms = nib.load(str(tmp_path / "geo.nii.gz")).header.get_zooms()  # nibabel's reading
    assert zooms[:3] == (20.0, 25.0, 30.0)


def test_npz_members_are_sized_before_inflating(tmp_path, monkeypatch):
    path = tmp_path / "zip.npz"
    np.savez_compressed(path, fid=np.zeros(200_000, np.complex64), dwell_s=DWELL,
                        spectrometer_mhz=MHZ)  # 1.6 MB inflated from a few kB
    assert load(path).n_points == 200_000
    monkeypatch.setenv("SPECPROC_MAX_INPUT_MB", "1")
    with pytest.raises(InvalidInputError, match=r"npz archive declares 1\.5\d* MiB"):
        load(path)
