"""``specproc fit`` and a one-scan ``specproc batch`` write the same scan folder.

Both commands are load -> :func:`specproc.analysis.analyse_scan` ->
:func:`specproc.analysis.write_scan_outputs` with the protocol of :mod:`specproc.protocol`, so
the same scan, water reference, tissue fractions and settings must give byte-identical tables
and the same numbers in ``fit.json`` (issue 12, "Done when").
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import simulate_basis
from specproc.cli import main
from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.io import save

#: Integration tests: the whole command line on real files.
pytestmark = pytest.mark.slow

MEMBERS = ["NAA", "Cr", "PCh"]
DWELL = 1 / 2000
N = 1024


@pytest.fixture(scope="module")
def inputs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("same")
    mhz = larmor_mhz(3.0)
    basis = simulate_basis(sequence="press", field_t=3.0, te_s=0.08, dwell_s=DWELL, n_points=N,
                           metabolites=MEMBERS, cache=False)
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(3)
    clean = (np.array([12.0, 8.0, 2.0]) @ basis.fids) * np.exp(-np.pi * 4.0 * t)
    noise = rng.normal(0, 0.4, (16, N)) + 1j * rng.normal(0, 0.4, (16, N))
    scan = Scan(clean + noise, dwell_s=DWELL, spectrometer_mhz=mhz, dims=("DIM_DYN",),
                te_s=0.08, tr_s=2.0, sequence="press",
                timings={"te1_s": 0.02})  # the NIfTI-MRS header key specproc_timings
    water_fid = 2.0e4 * np.exp(-np.pi * 5.0 * t) + rng.normal(0, 0.4, N)
    water = Scan(water_fid, dwell_s=DWELL, spectrometer_mhz=mhz, te_s=0.08, tr_s=10.0,
                 sequence="press", water_suppressed=False)
    save(scan, root / "scan.nii.gz")
    save(water, root / "water.nii.gz")
    (root / "settings.toml").write_text(f"[fit]\nmembers = {json.dumps(MEMBERS)}\n", "utf-8")
    (root / "manifest.tsv").write_text(
        "scan\twater\tscan_id\tgm\twm\tcsf\nscan.nii.gz\twater.nii.gz\tone\t0.6\t0.3\t0.1\n",
        "utf-8")
    return root


@pytest.fixture(scope="module")
def folders(inputs: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    cache = tmp_path_factory.mktemp("same-cache")
    runner = CliRunner()
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SPECPROC_CACHE_DIR", str(cache))
        fit = runner.invoke(main, [
            "fit", str(inputs / "scan.nii.gz"), "--water", str(inputs / "water.nii.gz"),
            "--gm", "0.6", "--wm", "0.3", "--csf", "0.1", "--config",
            str(inputs / "settings.toml"), "--title", "one", "-o", str(inputs / "fit")])
        assert fit.exit_code == 0, fit.output
        batch = runner.invoke(main, [
            "batch", str(inputs / "manifest.tsv"), "--config", str(inputs / "settings.toml"),
            "--workers", "1", "--no-progress", "--strict", "-o", str(inputs / "batch")])
        assert batch.exit_code == 0, batch.output
    return inputs / "fit", inputs / "batch" / "scans" / "one"


def _numbers(doc: dict) -> dict:
    """fit.json without what may differ: the settings' source, the wall times of the fit and
    of the model-uncertainty refits, and the time stamps of the processing records."""
    doc = json.loads(json.dumps(doc))
    doc["settings"].pop("config_source")
    doc["fit"].pop("elapsed_s")
    doc["model_uncertainty"].pop("elapsed_s")
    for key in ("steps", "water_steps"):
        for record in doc["preprocessing"][key]:
            record.pop("Time")
    return doc


def test_same_files(folders: tuple[Path, Path]) -> None:
    fit, batch = folders
    scan_files = {p.name for p in fit.iterdir()}
    assert scan_files == {p.name for p in batch.iterdir()} - {"summary.json", "done.json"}
    assert {"results.tsv", "fit.json", "config.toml", "report.html"} <= scan_files


def test_same_numbers(folders: tuple[Path, Path]) -> None:
    fit, batch = folders
    assert (fit / "results.tsv").read_bytes() == (batch / "results.tsv").read_bytes()
    a = json.loads((fit / "fit.json").read_text(encoding="utf-8"))
    b = json.loads((batch / "fit.json").read_text(encoding="utf-8"))
    assert _numbers(a) == _numbers(b)
    assert (fit / "fit.png").read_bytes() == (batch / "fit.png").read_bytes()


def test_fit_gives_water_referenced_concentrations_and_the_header_timing(
        folders: tuple[Path, Path]) -> None:
    fit, _ = folders
    doc = json.loads((fit / "fit.json").read_text(encoding="utf-8"))
    quant = doc["quantification"]
    assert quant["water_referenced"] is True
    assert math.isfinite(quant["conc_molar_mm"]["NAA"]) and quant["conc_molar_mm"]["NAA"] > 0
    assert doc["qc"]["snr"] > 0
    # one noise SD: the QC's SNR and the fit's bounds use the same value
    assert doc["qc"]["noise_sd"] == doc["fit"]["noise_sd"]
    # the PRESS TE1 of the header key specproc_timings, and its source, reach the basis
    assert doc["protocol"]["te1_s"] == pytest.approx(0.02)
    assert doc["protocol"]["timing_sources"] == {"te1_s": "header"}
    assert doc["basis"]["timings_s"]["te2_s"] == pytest.approx(0.06)
    assert "TE1 20 ms, TE2 60 ms (header)" in (fit / "report.html").read_text(encoding="utf-8")
