"""Every kind of NIfTI-MRS file specproc writes or ships passes the standard's own validator.

The validator is ``nifti_mrs.validator`` from the PyPI package ``nifti-mrs`` (the NIfTI-MRS
standard's Python tools; only its validator is used). Files checked: the bundled example,
every file of the demo study, the output of ``specproc preprocess`` (scan and water), each
file of ``specproc basis export``, a Scan read from another format (npz) saved as
NIfTI-MRS, and edited scans (``DIM_EDIT`` with ``EditCondition``, ``EditPulse``) written from
the invented MEGA-PRESS generator and from DICOM, and ``specproc preprocess`` of one (ON/OFF on
``DIM_EDIT``, and DIFF). Issue 17, item 12: user keys must be
objects with a ``Description``.
"""

from __future__ import annotations

from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from click.testing import CliRunner
from nifti_mrs import validator  # the standard's own validator (test extra)

from specproc._paths import source_root
from specproc.cli import main
from specproc.data import Scan
from specproc.io import load, save

DEMO = source_root() / "demo_spectra"
#: The NIfTI-MRS files shipped (the anatomy images of the demo are plain NIfTI).
SHIPPED = sorted(p for p in DEMO.rglob("*.nii.gz") if p.parent.name in ("mrs", "example"))


def validate(path: Path) -> None:
    """The checks of ``nifti_mrs.validator.validate_nifti_mrs`` on a file read by nibabel."""
    img = nib.load(str(path))
    ext = [e for e in img.header.extensions if int(e.get_code()) == 44]
    assert len(ext) == 1, path
    content = ext[0].get_content()
    text = content.decode("utf-8") if isinstance(content, bytes) else content
    validator.validate_nifti_data(np.asanyarray(img.dataobj))
    validator.validate_nifti_header(img.header)
    validator.validate_hdr_ext(text, img.shape)
    validator.validate_spectralwidth(text, img.header["pixdim"][4])


def test_every_shipped_file_is_checked():
    names = {p.name for p in SHIPPED}
    assert "example_svs.nii.gz" in names
    assert sum(n.endswith("_svs.nii.gz") for n in names) >= 5
    assert sum(n.endswith("_mrsref.nii.gz") for n in names) >= 5


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.name)
def test_shipped_files_pass_the_validator(path):
    validate(path)


def test_validator_rejects_a_bare_user_key(tmp_path):
    """The check is live: a file with a bare user value fails it."""
    from _io_builders import write_nifti_nibabel

    meta = {"SpectrometerFrequency": [123.2], "ResonantNucleus": ["1H"], "my_key": "bare"}
    path = write_nifti_nibabel(tmp_path / "bare.nii", np.ones((1, 1, 1, 64), np.complex64),
                               dwell=2.5e-4, meta=meta)
    with pytest.raises(validator.headerExtensionError, match="Description"):
        validate(path)


def test_written_files_pass_the_validator(tmp_path):
    runner = CliRunner()
    scan = DEMO / "sub-01" / "ses-01" / "mrs" / "sub-01_ses-01_svs.nii.gz"
    water = scan.with_name("sub-01_ses-01_mrsref.nii.gz")
    out = tmp_path / "pre.nii.gz"
    result = runner.invoke(main, ["preprocess", str(scan), "--water", str(water), "-o", str(out)])
    assert result.exit_code == 0, result.output
    written = [out, tmp_path / "pre_water.nii.gz"]

    basis = tmp_path / "basis.npz"
    result = runner.invoke(main, ["basis", "simulate", "--sequence", "press", "--field", "3",
                                  "--te", "30", "--metabolites", "NAA,Cr", "--points", "512",
                                  "--bandwidth", "2000",
                                  "-o", str(basis)])
    assert result.exit_code == 0, result.output
    result = runner.invoke(main, ["basis", "export", str(basis), "-o", str(tmp_path / "exp")])
    assert result.exit_code == 0, result.output
    exported = sorted((tmp_path / "exp").glob("*.nii.gz"))
    assert len(exported) >= 2
    written += exported

    fid = np.exp(-np.arange(256) / 40.0).astype(np.complex64)
    save(Scan(fid, dwell_s=2.5e-4, spectrometer_mhz=123.2, centre_ppm=4.7), tmp_path / "a.npz")
    save(load(tmp_path / "a.npz"), tmp_path / "from_npz.nii.gz")  # specproc_source_format
    written.append(tmp_path / "from_npz.nii.gz")
    for path in written:
        validate(path)


def test_edited_files_pass_the_validator(tmp_path):
    """An edited scan (DIM_EDIT with EditCondition in its dim header, the EditPulse key), as
    written from the invented MEGA-PRESS generator and from a DICOM file with ON/OFF frame
    labels."""
    import sys

    from _io_builders import write_dicom_mrs

    sys.path.insert(0, str(source_root() / "benchmarks"))
    from edited_scans import make_edited_scan

    edited = make_edited_scan(5, n_pairs=4, snr=100.0).scan
    assert "EditPulse" in edited.header
    save(edited.replace(source=None), tmp_path / "edited.nii.gz")
    frames = np.exp(-np.arange(6 * 256).reshape(6, 256) / 40.0).astype(np.complex64)
    dicom = write_dicom_mrs(tmp_path / "mega.dcm", frames, sequence="MEGA-PRESS",
                            frame_labels=["ON", "OFF"] * 3)
    save(load(dicom).replace(source=None), tmp_path / "from_dicom.nii.gz")
    # specproc preprocess of an edited scan: ON/OFF on DIM_EDIT, and the DIFF spectrum
    result = CliRunner().invoke(main, ["preprocess", str(tmp_path / "edited.nii.gz"), "-o",
                                       str(tmp_path / "pre.nii.gz")])
    assert result.exit_code == 0, result.output
    for path in (tmp_path / "pre.nii.gz", tmp_path / "pre_diff.nii.gz"):
        validate(path)
    for path in (tmp_path / "edited.nii.gz", tmp_path / "from_dicom.nii.gz",
                 tmp_path / "pre.nii.gz"):
        img = nib.load(str(path))
        assert "DIM_EDIT" in img.header.extensions[0].get_content().decode("utf-8")
        validate(path)
