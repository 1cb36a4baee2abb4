"""Edited scans in a cohort run: ``specproc batch`` with an edited and a plain scan.

Outside check: GABA+/tCr in ``cohort.tsv`` against the truth of the independent generator
(``benchmarks/edited_scans.py``: its own line shapes, T2, macromolecules and drift); the rest
checks the batch's own bookkeeping (the edited protocol's three bases, its QC columns, resume,
the same numbers as ``specproc fit``, a scan of unknown edit meaning recorded as failed).
"""

from __future__ import annotations

import csv
import json
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import simulate_basis
from specproc.cli import main
from specproc.data import Scan
from specproc.io import save
from specproc.synthetic import synthetic_scan

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "benchmarks"))

from edited_scans import make_edited_scan


def _rows(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle, delimiter="\t"))


@pytest.mark.slow
def test_batch_with_an_edited_and_a_plain_scan(tmp_path: Path) -> None:
    edited = make_edited_scan(21, n_pairs=48, snr=400.0)
    save(edited.scan.replace(source=None), tmp_path / "e_svs.nii.gz")
    save(edited.water.replace(source=None), tmp_path / "e_ref.nii.gz")
    small = simulate_basis(sequence="press", field_t=3.0, te_s=0.08, dwell_s=5e-4,
                           n_points=1024, metabolites=["NAA", "Cr", "GPC"])
    save(synthetic_scan(small, {"NAA": 10.0, "Cr": 8.0, "GPC": 2.0}, noise_sd=0.05),
         tmp_path / "p_svs.nii.gz")
    manifest = tmp_path / "m.tsv"
    manifest.write_text("scan\twater\tscan_id\tgm\twm\tcsf\n"
                        "e_svs.nii.gz\te_ref.nii.gz\tedited\t0.6\t0.3\t0.1\n"
                        "p_svs.nii.gz\t\tplain\t\t\t\n", "utf-8")
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["batch", str(manifest), "-o", str(out)],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert "0 failed" in result.output
    # one plain basis and the edited protocol's ON/OFF/DIFF bases, keyed apart
    names = sorted(p.name for p in (out / "basis").iterdir())
    assert len(names) == 4 and sum(n.endswith(("-on.npz", "-off.npz", "-diff.npz"))
                                   for n in names) == 3, names
    qc = {r["scan_id"]: r for r in _rows(out / "cohort_qc.tsv")}
    for column in ("diff_fit_error_percent", "subtraction_artefact_3p2_percent"):
        assert float(qc["edited"][column]) >= 0 and qc["plain"][column] == "n/a"
    assert int(qc["edited"]["pairs_rejected"]) >= 1  # the generator's motion-corrupted pair
    assert qc["plain"]["pairs_rejected"] == "n/a"
    rows = _rows(out / "cohort.tsv")
    gaba = {r["metabolite"]: r for r in rows if r["scan_id"] == "edited"
            and r["kind"] == "edited"}
    assert set(gaba) == {"GABA+", "GABA+_alpha"}
    # same tolerance as the single-scan check of test_edited.py (model mismatch at high SNR)
    assert abs(float(gaba["GABA+"]["ratio_tcr"]) / edited.truth["GABA+/tCr"] - 1) < 0.15
    assert float(gaba["GABA+"]["ratio_tcr_sd"]) > 0
    mm, alpha = float(gaba["GABA+"]["conc_molar_mm"]), float(gaba["GABA+_alpha"]["conc_molar_mm"])
    # alpha correction (Harris et al. 2015): c / (f_GM + 0.5 f_WM) over GM+WM = 0.667/0.9 ...
    assert alpha == pytest.approx(mm / (0.6 / 0.9 + 0.5 * 0.3 / 0.9), rel=1e-4)
    assert not [r for r in rows if r["scan_id"] == "plain" and r["kind"] == "edited"]
    assert "GABA+" in (out / "cohort.html").read_text("utf-8")
    # the scan report says the same in words: values with bounds, the QC with its limits
    from specproc.edited.analysis import FIT_ERROR_LIMIT_PERCENT, SUBTRACTION_LIMIT_PERCENT
    from specproc.report.tables import sig

    report = (out / "scans" / "edited" / "report.html").read_text("utf-8")
    start = report.index('<section id="edited">')
    section = report[start:report.index("</section>", start)]
    ratio = float(gaba["GABA+"]["ratio_tcr"])
    assert f"{sig(ratio)} ± " in section and f"{sig(alpha)} ± " in section
    assert f"≤ {FIT_ERROR_LIMIT_PERCENT:g} %" in section
    assert f"≤ {SUBTRACTION_LIMIT_PERCENT:g} %" in section
    assert f"{qc['edited']['pairs_rejected']} of 48" in section
    assert "not aligned to OFF" in section  # the default: offset measured, not applied
    assert "<li>edited: " not in report[:start]  # its notes are in the section, not twice
    again = CliRunner().invoke(main, ["batch", str(manifest), "-o", str(out)],
                               catch_exceptions=False)
    assert again.exit_code == 0 and "2 already done" in again.output, again.output
    # one per-scan computation: specproc fit gives the batch's edited numbers exactly
    single = tmp_path / "single"
    result = CliRunner().invoke(main, [
        "fit", str(tmp_path / "e_svs.nii.gz"), "--water", str(tmp_path / "e_ref.nii.gz"),
        "--gm", "0.6", "--wm", "0.3", "--csf", "0.1", "-o", str(single)],
        catch_exceptions=False)
    assert result.exit_code == 0, result.output
    by_fit = json.loads((single / "fit.json").read_text("utf-8"))["edited"]
    by_batch = json.loads((out / "scans" / "edited" / "fit.json").read_text("utf-8"))["edited"]
    assert by_fit["values"] == by_batch["values"] and by_fit["qc"] == by_batch["qc"]


def test_batch_records_an_edited_scan_of_unknown_meaning_and_goes_on(tmp_path: Path) -> None:
    data = np.ones((2, 4, 256), np.complex64)
    unknown = Scan(data=data, dwell_s=5e-4, spectrometer_mhz=123.2,
                   dims=("DIM_EDIT", "DIM_DYN"), te_s=0.068, tr_s=2.0)  # no EditCondition
    save(unknown, tmp_path / "u_svs.nii.gz")
    (tmp_path / "m.tsv").write_text("scan\tscan_id\nu_svs.nii.gz\tunknown\n", "utf-8")
    result = CliRunner().invoke(main, ["batch", str(tmp_path / "m.tsv"), "-o",
                                       str(tmp_path / "out")], catch_exceptions=False)
    assert result.exit_code == 0 and "1 failed" in result.output, result.output
    (row,) = _rows(tmp_path / "out" / "cohort_qc.tsv")
    assert row["status"] == "failed" and "unknown meaning" in row["reason"]
    assert not (tmp_path / "out" / "basis").exists() or not any(
        (tmp_path / "out" / "basis").iterdir())  # nothing simulated for it
