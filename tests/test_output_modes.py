"""Tables-only scan folders, and their figures and report drawn later from the saved result."""

from __future__ import annotations

import json
import pickle
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from test_analysis import _singlet_basis as singlet_basis  # three singlets

from specproc.analysis import analyse_scan, load_scan_result, write_scan_outputs
from specproc.batch.task import run_task
from specproc.cli import main
from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io import save

MHZ, DWELL, N = larmor_mhz(3.0), 5e-4, 1024
NO_WATER_REMOVAL = {"preprocess": {"water_removal": {"enabled": False}}}
FIGURES_AND_REPORT = {"fit.png", "fit.pdf", "preprocess.png", "report.html"}
TABLES = {"results.tsv", "fit.json", "config.toml"}


@pytest.fixture(scope="module")
def scan_file(tmp_path_factory: pytest.TempPathFactory) -> Path:
    basis = singlet_basis()
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(4)
    fid = (1.5 * basis.fids[0] + basis.fids[1] + 0.25 * basis.fids[2]) * np.exp(-np.pi * 4 * t)
    fid = fid + rng.normal(0, 0.05, N) + 1j * rng.normal(0, 0.05, N)
    path = tmp_path_factory.mktemp("scan") / "three.nii.gz"
    save(Scan(fid.astype(np.complex64), dwell_s=DWELL, spectrometer_mhz=MHZ, te_s=0.03,
              tr_s=2.0, sequence="press"), path)
    return path


def names(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


def test_tables_only_then_render_gives_the_full_folder(scan_file: Path, tmp_path: Path) -> None:
    result = analyse_scan(scan_file, basis=singlet_basis(), config=NO_WATER_REMOVAL)
    full, later = tmp_path / "full", tmp_path / "later"
    write_scan_outputs(result, full)
    files = write_scan_outputs(result, later, outputs="tables")
    assert names(later) == TABLES | {"result.pickle"} and set(files) >= {"results", "state"}
    doc = json.loads((later / "fit.json").read_text(encoding="utf-8"))
    assert set(doc["outputs"].values()) == TABLES | {"result.pickle"}
    tables_before = (later / "results.tsv").read_bytes()

    run = CliRunner().invoke(main, ["render", str(later)], catch_exceptions=False)
    assert run.exit_code == 0, run.output
    assert names(later) == names(full) == TABLES | FIGURES_AND_REPORT  # state removed
    assert (later / "results.tsv").read_bytes() == tables_before == (
        full / "results.tsv").read_bytes()
    rendered = json.loads((later / "fit.json").read_text(encoding="utf-8"))
    assert rendered["quantification"] == doc["quantification"]
    assert rendered["outputs"] == json.loads((full / "fit.json").read_text("utf-8"))["outputs"]

    # tables only over a full folder leaves no figure of other numbers behind
    write_scan_outputs(result, full, outputs="tables")
    assert not names(full) & FIGURES_AND_REPORT
    with pytest.raises(InvalidInputError, match="outputs must be one of"):
        write_scan_outputs(result, full, outputs="figures")


def test_a_foreign_state_file_is_one_clear_error(tmp_path: Path) -> None:
    (tmp_path / "result.pickle").write_bytes(pickle.dumps({"not": "a result"}))
    with pytest.raises(InvalidInputError, match="not a saved specproc result"):
        load_scan_result(tmp_path / "result.pickle")
    (tmp_path / "result.pickle").write_bytes(b"truncated")
    run = CliRunner().invoke(main, ["render", str(tmp_path)])
    assert run.exit_code == 2 and "not a saved specproc result" in run.output


def test_batch_task_in_tables_mode(scan_file: Path, tmp_path: Path) -> None:
    basis_path = tmp_path / "basis.npz"
    singlet_basis().save(basis_path)
    task = {"key": "three", "scan_path": str(scan_file), "water_path": None,
            "out_dir": str(tmp_path / "scan"), "basis_path": str(basis_path), "protocol": None,
            "config": NO_WATER_REMOVAL, "tissue": None, "overrides": {}, "inputs": {},
            "outputs": "tables"}
    outcome = run_task(task)
    assert outcome["status"] in ("ok", "flagged"), outcome
    assert names(tmp_path / "scan") >= TABLES | {"result.pickle", "summary.json", "done.json"}
    assert not names(tmp_path / "scan") & FIGURES_AND_REPORT
