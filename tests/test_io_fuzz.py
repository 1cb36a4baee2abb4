"""Property-based fuzzing of every loader: only InvalidInputError may escape.

Random bytes (plain, or behind each format's magic so that the deep parser is reached),
truncations and byte changes of valid files made by the reference libraries (nibabel,
pydicom, numpy) or written out by hand (JCAMP-DX, text).
"""

from __future__ import annotations

import gzip
import io

import numpy as np
import pytest
from _io_builders import (
    singlet_fid,
    write_dicom_mrs,
    write_jcampdx,
    write_nifti_nibabel,
    write_npz_numpy,
    write_text_columns,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from specproc import InvalidInputError, Scan
from specproc.io import FORMATS, load

SETTINGS = settings(max_examples=100, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])
DWELL, MHZ = 2.5e-4, 123.2


@pytest.fixture(scope="module")
def samples(tmp_path_factory):
    """Bytes of one small valid file of each format."""
    folder = tmp_path_factory.mktemp("samples")
    fid = singlet_fid(64, DWELL, MHZ, 2.0)
    meta = {"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"], "dim_5": "DIM_DYN",
            "EchoTime": 0.03}
    nii = write_nifti_nibabel(folder / "a.nii", np.stack([fid, fid], -1).reshape(1, 1, 1, 64, 2)
                              .astype(np.complex64), dwell=DWELL, meta=meta)
    files = {
        "nifti-mrs": nii.read_bytes(),
        "nifti-gz": gzip.compress(nii.read_bytes()),
        "dicom": write_dicom_mrs(folder / "d.dcm", np.stack([fid, fid])).read_bytes(),
        "jcamp-dx": write_jcampdx(folder / "j.jdx", fid).read_bytes(),
        "npz": write_npz_numpy(folder / "z.npz", fid=fid, dwell_s=DWELL,
                               spectrometer_mhz=MHZ).read_bytes(),
        "text": write_text_columns(
            folder / "t.txt", fid, dwell_s=DWELL,
            header=f"specproc-text 1 spectrometer_mhz={MHZ}").read_bytes(),
    }
    for name, content in files.items():  # each sample is valid to begin with
        (folder / name).write_bytes(content)
        assert isinstance(load(folder / name), Scan)
    return folder, files


def _check_all_readers(path):
    """load() and every reader directly: a Scan or InvalidInputError, nothing else."""
    for reader in (load, *FORMATS.values()):
        try:
            result = reader(path)
        except InvalidInputError as exc:
            assert str(exc).startswith(str(path))
            assert "\n" not in str(exc)
        else:
            assert isinstance(result, Scan)


def _prefix(name: str) -> bytes:
    return {
        "nifti2": (540).to_bytes(4, "little") + b"n+2\x00\r\n\x1a\n",
        "nifti1": (348).to_bytes(4, "little") + b"\x00" * 340 + b"n+1\x00",
        "dicom": b"\x00" * 128 + b"DICM",
        "zip": b"PK\x03\x04",
        "jcamp": b"##TITLE= x\n##DATA TYPE= NMR FID\n",
        "gzip": b"\x1f\x8b\x08\x00",
        "none": b"",
    }[name]


@SETTINGS
@given(
    prefix=st.sampled_from(["nifti2", "nifti1", "dicom", "zip", "jcamp", "gzip", "none"]),
    body=st.binary(max_size=2048),
)
def test_random_bytes(samples, prefix, body):
    folder, _ = samples
    path = folder / "random.bin"
    path.write_bytes(_prefix(prefix) + body)
    _check_all_readers(path)


@SETTINGS
@given(
    name=st.sampled_from(["nifti-mrs", "nifti-gz", "dicom", "jcamp-dx", "npz", "text"]),
    fraction=st.floats(min_value=0.0, max_value=1.0),
)
def test_truncations_of_valid_files(samples, name, fraction):
    folder, files = samples
    content = files[name]
    path = folder / "truncated.bin"
    path.write_bytes(content[: int(len(content) * fraction)])
    _check_all_readers(path)


@SETTINGS
@given(
    name=st.sampled_from(["nifti-mrs", "nifti-gz", "dicom", "jcamp-dx", "npz", "text"]),
    data=st.data(),
)
def test_changed_bytes_of_valid_files(samples, name, data):
    folder, files = samples
    content = bytearray(files[name])
    n_changes = data.draw(st.integers(min_value=1, max_value=8))
    for _ in range(n_changes):
        where = data.draw(st.integers(min_value=0, max_value=len(content) - 1))
        content[where] = data.draw(st.integers(min_value=0, max_value=255))
    path = folder / "changed.bin"
    path.write_bytes(bytes(content))
    _check_all_readers(path)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(text=st.text(max_size=400))
def test_random_text(samples, text):
    folder, _ = samples
    path = folder / "random.txt"
    path.write_bytes(text.encode("utf-8"))
    _check_all_readers(path)


def test_gzip_bomb_like_garbage_inside_gzip(samples):
    folder, _ = samples
    path = folder / "gz.nii.gz"
    buffer = io.BytesIO()
    with gzip.GzipFile(fileobj=buffer, mode="wb") as gz:
        gz.write(b"\x00" * 10_000)
    path.write_bytes(buffer.getvalue())
    with pytest.raises(InvalidInputError, match="not a NIfTI"):
        load(path)
