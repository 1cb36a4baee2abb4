"""Extreme sample values through preprocessing (issue 17, item 6).

A single sample at the float32 limit or every sample scaled by 1e300 gave a ValueError from the
least-squares bounds of the spectral registration; the registration and the outlier scores
now work in float64 on data scaled by the median transient, and magnitudes whose squares would
overflow float64 (above 1e150) are refused in one line before any processing. The bundled
example (invented data) is the input; its expected behaviour is the outcome on the unmodified
file.
"""

from __future__ import annotations

import numpy as np
from click.testing import CliRunner

from specproc._paths import source_root
from specproc.cli import main
from specproc.io import load, save

EXAMPLE = source_root() / "demo_spectra" / "example" / "example_svs.nii.gz"


def _preprocess(path, out):
    return CliRunner().invoke(main, ["preprocess", str(path), "-o", str(out)])


def test_one_sample_at_the_float32_limit_rejects_its_transient(tmp_path):
    scan = load(EXAMPLE)
    data = np.array(scan.data)
    data[3, 10] = 3e38
    path = tmp_path / "spike.nii.gz"
    save(scan.replace(data=data), path)
    result = _preprocess(path, tmp_path / "out.nii.gz")
    assert result.exit_code == 0, result.output
    assert "15/16 transients kept" in result.stdout
    assert "Warning" not in result.stderr


def test_every_sample_times_1e100_gives_the_same_alignment(tmp_path):
    scan = load(EXAMPLE)
    path = tmp_path / "huge.nii.gz"
    save(scan.replace(data=np.asarray(scan.data, dtype=np.complex128) * 1e100), path)
    plain = _preprocess(EXAMPLE, tmp_path / "plain.nii.gz")
    huge = _preprocess(path, tmp_path / "huge_out.nii.gz")
    assert plain.exit_code == huge.exit_code == 0, huge.output
    shifts = [
        next(r for r in load(tmp_path / name).provenance
         if r["Method"] == "frequency and phase drift correction")["Details"]["shifts_hz"]
        for name in ("plain.nii.gz", "huge_out.nii.gz")
    ]
    np.testing.assert_allclose(shifts[1], shifts[0], atol=1e-6)  # scale-invariant


def test_samples_near_the_float64_limit_are_refused_in_one_line(tmp_path):
    scan = load(EXAMPLE)
    path = tmp_path / "huger.nii.gz"
    save(scan.replace(data=np.asarray(scan.data, dtype=np.complex128) * 1e300), path)
    result = _preprocess(path, tmp_path / "out.nii.gz")
    assert result.exit_code == 2
    assert result.stderr.startswith(f"specproc: error: {path}: sample magnitudes up to ")
    assert len(result.stderr.splitlines()) == 1
    assert not (tmp_path / "out.nii.gz").exists()
