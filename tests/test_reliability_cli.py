"""Faults and hostile inputs through the command line (issue 17, items 4, 5, 6 and 9).

Every case ends in exit 0 with sane numbers or in exit 2 with one line naming the file, and
never leaves a partial output folder. The data are small synthetic scans built from a
four-singlet basis (NIfTI-MRS sign convention, Clarke et al. 2022); disk-full and read-only
faults are injected where the operating system would raise them (ENOSPC, EACCES).
"""

from __future__ import annotations

import errno
import json
import os
import pathlib
import tempfile

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import BasisSet
from specproc.cli import main
from specproc.data import Scan
from specproc.io import save

MHZ, CENTRE, N, DWELL = 123.2, 4.65, 512, 1.0 / 1200.0
LINES = {"NAA": [(2.008, 3)], "Cr": [(3.027, 3), (3.913, 2)], "PCr": [(3.029, 3), (3.93, 2)],
         "GPC": [(3.212, 9)]}


def _basis() -> BasisSet:
    t = np.arange(N) * DWELL
    fids = np.stack([sum(p * np.exp(-2j * np.pi * (s - CENTRE) * MHZ * t) for s, p in lines)
                     for lines in LINES.values()])
    return BasisSet(names=tuple(LINES), fids=fids, dwell_s=DWELL, spectrometer_mhz=MHZ,
                    centre_ppm=CENTRE, kinds=("metabolite",) * 4, sequence="press",
                    timings_s={"te_s": 0.03})


def _scan(fid, **extra) -> Scan:
    return Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE, te_s=0.03,
                sequence="press", **extra)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    root = tmp_path_factory.mktemp("faults")
    basis = _basis()
    basis.save(root / "basis.npz")
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(17)
    clean = (np.array([10.0, 4.0, 3.0, 1.0]) @ basis.fids) * np.exp(-np.pi * 4 * t - 80 * t * t)

    def noise(*shape):
        return 0.05 * (rng.standard_normal((*shape, N)) + 1j * rng.standard_normal((*shape, N)))

    save(_scan(clean + noise()), root / "one.nii.gz")
    save(_scan(clean * np.exp(0.05j * np.arange(8))[:, None] + noise(8), dims=("DIM_DYN",)),
         root / "raw.nii.gz")
    save(_scan(np.full(N, 1 + 1j)), root / "constant.nii.gz")
    # found by the fuzz benchmark: samples scaled by 1e-300 (squares underflow)
    save(_scan((clean + noise()) * 1e-300), root / "tiny.nii.gz")
    # one line at 1.0 ppm, where the basis has none: the fit runs its shift to the limit
    lipid = 20 * np.exp(-2j * np.pi * (1.0 - CENTRE) * MHZ * t - np.pi * 6 * t)
    save(_scan(lipid + noise()), root / "lipid.nii.gz")
    return root


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _one_error_line(result, path):
    assert result.exit_code == 2, result.output
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith(f"specproc: error: {path}: "), lines[0]
    assert "Traceback" not in result.output and "Warning" not in result.stderr
    return lines[0]


def _fit(files, name, out):
    return _run("fit", files / name, "--basis", files / "basis.npz", "-o", out)


# ------------------------------------------------------------ 4: degenerate data, collapse
@pytest.mark.parametrize("command", ["fit", "preprocess"])
def test_constant_data_are_refused(files, tmp_path, command):
    out = tmp_path / ("out" if command == "fit" else "out.nii.gz")
    extra = ["--basis", files / "basis.npz"] if command == "fit" else []
    result = _run(command, files / "constant.nii.gz", *extra, "-o", out)
    assert "constant in time" in _one_error_line(result, files / "constant.nii.gz")
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_a_fit_at_its_shift_limit_is_reported_as_failed(files, tmp_path):
    result = _fit(files, "lipid.nii.gz", tmp_path / "out")
    assert result.exit_code == 0, result.output
    assert "specproc: warning: The fit failed: its frequency shift ended at the limit" in (
        result.stderr)
    document = json.loads((tmp_path / "out" / "fit.json").read_text())
    fit = document["fit"]
    assert fit["success"] is False
    assert "collapsed:shift_at_limit" in fit["flags"]
    from specproc.batch.task import summarise_fit_json

    summary = summarise_fit_json(document)  # what a batch records for this scan
    assert summary["status"] == "failed"
    # the reason in words (specproc.report.messages), as on the cohort page
    assert summary["reason"].startswith("The fit failed: its frequency shift ended at the limit")


def test_a_fit_with_no_naa_and_no_creatine_is_failed():
    from specproc.fit import fit_spectrum

    basis = _basis()
    t = np.arange(N) * DWELL
    decay = np.exp(-np.pi * 4 * t)
    only_gpc = (np.array([0.0, 0.0, 0.0, 1.0]) @ basis.fids) * decay  # no NAA, no creatine
    fit = fit_spectrum(_scan(only_gpc), basis)
    assert fit.amplitudes[:3].max() < 1e-9 * fit.amplitudes[3]  # NAA, Cr, PCr
    assert fit.success is False
    assert "collapsed:principal_metabolites_zero" in fit.flags
    good = fit_spectrum(_scan((np.array([10.0, 4.0, 3.0, 1.0]) @ basis.fids) * decay), basis)
    assert good.success and not [f for f in good.flags if f.startswith("collapsed")]


def test_collapse_rules():
    from specproc.sanity import collapse_reason

    names = ("NAA", "Cr", "GPC", "Lac")
    assert collapse_reason(names, [0.0, 0.0, 2.0, 1.0], []) == "principal_metabolites_zero"
    assert collapse_reason(names, [1e-13, 0.0, 2.0, 1.0], []) == "principal_metabolites_zero"
    assert collapse_reason(names, [1.0, 0.0, 2.0, 1.0], []) is None
    assert collapse_reason(("Lac",), [0.0], []) is None  # no principal member in the basis
    assert collapse_reason(names, [1.0, 1.0, 1.0, 1.0],
                           ["at_bound:shift_all_hz"]) == "shift_at_limit"
    assert collapse_reason(names, [1.0, 1.0, 1.0, 1.0], ["at_bound:dshift_NAA_hz"]) is None


# --------------------------------------------------------- 5: disk full, read-only output
def _fail_on(monkeypatch, name, code):
    real = pathlib.Path.write_bytes

    def write_bytes(self, data):
        if self.name == name:
            raise OSError(code, os.strerror(code), str(self))
        return real(self, data)

    monkeypatch.setattr(pathlib.Path, "write_bytes", write_bytes)


@pytest.mark.parametrize("existing", [False, True])
def test_disk_full_leaves_the_output_folder_as_it_was(files, tmp_path, monkeypatch, existing):
    out = tmp_path / "out"
    if existing:
        assert _fit(files, "one.nii.gz", out).exit_code == 0
        before = {p.name: p.read_bytes() for p in out.iterdir()}
    _fail_on(monkeypatch, "fit.json", errno.ENOSPC)
    result = _fit(files, "one.nii.gz", out)
    line = _one_error_line(result, out)
    assert "No space left on device" in line
    if existing:
        assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    else:
        assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == (["out"] if existing else [])


def test_read_only_output_is_one_line(files, tmp_path, monkeypatch):
    def refuse(*_args, dir=None, **_kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), dir)

    monkeypatch.setattr(tempfile, "mkdtemp", refuse)
    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    out = tmp_path / "out"
    assert "Permission denied" in _one_error_line(_fit(files, "one.nii.gz", out), out)
    result = _run("preprocess", files / "raw.nii.gz", "-o", tmp_path / "p.nii.gz")
    assert result.exit_code == 2
    assert result.stderr.startswith(f"specproc: error: {tmp_path}")
    assert "Permission denied" in result.stderr and len(result.stderr.splitlines()) == 1
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------------ 6: odd names
@pytest.mark.parametrize("name", ["$\\alpha$ scan.nii.gz", "a$b$c.nii.gz",
                                  os.fsdecode(b"bad\xff\xfename.nii.gz")])
def test_odd_file_names_in_figures(files, tmp_path, name):
    path = tmp_path / name
    path.write_bytes((files / "raw.nii.gz").read_bytes())
    fit = _run("fit", path, "--basis", files / "basis.npz", "-o", tmp_path / "fit")
    assert fit.exit_code == 0, fit.output
    assert (tmp_path / "fit" / "fit.png").stat().st_size > 0
    pre = _run("preprocess", path, "-o", tmp_path / "pre.nii.gz")
    assert pre.exit_code == 0, pre.output
    assert (tmp_path / "pre_preprocess.png").stat().st_size > 0


# --------------------------------------------------------------- 9: every error names a file
def test_a_window_outside_the_spectrum_names_the_scan(files, tmp_path):
    config = tmp_path / "narrow.toml"
    config.write_text("[preprocess.drift_correction]\nwindow_ppm = [40.0, 45.0]\n")
    result = _run("preprocess", files / "raw.nii.gz", "--config", config, "-o",
                  tmp_path / "out.nii.gz")
    assert "lies outside the spectrum" in _one_error_line(result, files / "raw.nii.gz")


# ------------------------------------------------------- 1: text processing history, report
def test_a_file_with_a_text_processing_history_gets_its_report(files, tmp_path):
    """Issue 17 item 1: ``ProcessingApplied[].Details`` as text (the standard's form)."""
    from specproc.io import load

    scan = load(files / "raw.nii.gz")
    history = ({"Time": "2024-01-01T00:00:00", "Program": "converter", "Version": "2",
                "Method": "coil combination", "Details": "weighted by the first points"},)
    save(scan.replace(provenance=history), tmp_path / "history.nii.gz")
    assert load(tmp_path / "history.nii.gz").provenance[0]["Details"] == (
        "weighted by the first points")
    result = _run("fit", tmp_path / "history.nii.gz", "--basis", files / "basis.npz", "-o",
                  tmp_path / "out")
    assert result.exit_code == 0, result.output
    report = (tmp_path / "out" / "report.html").read_text("utf-8")
    assert "weighted by the first points" in report


def test_data_too_small_to_square_are_refused(files, tmp_path):
    result = _fit(files, "tiny.nii.gz", tmp_path / "out")
    assert "too small to be processed" in _one_error_line(result, files / "tiny.nii.gz")
    assert not (tmp_path / "out").exists()
