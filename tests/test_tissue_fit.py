"""``specproc fit`` and ``specproc batch`` take segmentation maps instead of tissue numbers:
the same fractions (those of ``specproc tissue``), their method in fit.json and the report's
methods table, and the voxel picture beside the report; a bad map fails the one scan.

The voxel geometry is set with plain nibabel on a file written by specproc (which writes no
position), the maps are the spherical-shell phantom of tests/_tissue_phantoms.py, and the
expected fractions come from a brute-force count."""

from __future__ import annotations

import json
import math
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from _tissue_phantoms import (
    rotation_deg,
    shell_fraction_brute_force,
    shell_maps,
    voxel_affine,
    write_map,
)
from click.testing import CliRunner

from specproc.basis import simulate_basis
from specproc.cli import main
from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.io import save

MEMBERS = ["NAA", "Cr", "PCh"]
DWELL, N = 1 / 2000, 1024
R_IN, R_OUT = 22.0, 34.0
VOXEL = voxel_affine([20.0, 20.0, 20.0], [26.0, 4.0, -3.0], rotation_deg(x_deg=30, z_deg=30))


def _set_voxel(path: Path, affine: np.ndarray) -> None:
    img = nib.load(str(path))
    header = img.header.copy()
    header.set_sform(affine, code=1)
    header.set_qform(affine, code=1)
    zooms = list(header.get_zooms())
    zooms[:3] = list(np.linalg.norm(affine[:3, :3], axis=0))
    header.set_zooms(zooms)
    data = np.asanyarray(img.dataobj)
    nib.save(type(img)(data, None, header), str(path))


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("tissue-fit")
    mhz = larmor_mhz(3.0)
    basis = simulate_basis(sequence="press", field_t=3.0, te_s=0.08, dwell_s=DWELL, n_points=N,
                           metabolites=MEMBERS, cache=False)
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(5)
    clean = (np.array([12.0, 8.0, 2.0]) @ basis.fids) * np.exp(-np.pi * 4.0 * t)
    noise = rng.normal(0, 0.4, (8, N)) + 1j * rng.normal(0, 0.4, (8, N))
    scan = Scan(clean + noise, dwell_s=DWELL, spectrometer_mhz=mhz, dims=("DIM_DYN",),
                te_s=0.08, tr_s=2.0, sequence="press")
    water_fid = 2.0e4 * np.exp(-np.pi * 5.0 * t) + rng.normal(0, 0.4, N)
    water = Scan(water_fid, dwell_s=DWELL, spectrometer_mhz=mhz, te_s=0.08, tr_s=10.0,
                 sequence="press", water_suppressed=False)
    for name, item in (("scan", scan), ("water", water)):
        save(item, root / f"{name}.nii.gz")
        _set_voxel(root / f"{name}.nii.gz", VOXEL)
    maps, affine = shell_maps(2.0, 48.0, R_IN, R_OUT, sub_mm=0.5)
    for t_, m in maps.items():
        write_map(root / f"{t_}.nii.gz", m, affine)
    t1 = 300 * maps["gm"] + 800 * maps["wm"] + 100 * maps["csf"]
    write_map(root / "t1.nii.gz", t1.astype(np.int16), affine)
    write_map(root / "t1_other_grid.nii.gz", t1[1:].astype(np.int16), affine)
    (root / "settings.toml").write_text(f"[fit]\nmembers = {json.dumps(MEMBERS)}\n", "utf-8")
    (root / "manifest.tsv").write_text(
        "scan\twater\tscan_id\tgm_map\twm_map\tcsf_map\tanatomy\n"
        "scan.nii.gz\twater.nii.gz\tmaps\tgm.nii.gz\twm.nii.gz\tcsf.nii.gz\tt1.nii.gz\n"
        "scan.nii.gz\twater.nii.gz\tbadgrid\tgm.nii.gz\twm.nii.gz\tcsf.nii.gz\t"
        "t1_other_grid.nii.gz\n", "utf-8")
    cache = tmp_path_factory.mktemp("tissue-fit-cache")
    runner = CliRunner()
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SPECPROC_CACHE_DIR", str(cache))
        fit = runner.invoke(main, [
            "fit", str(root / "scan.nii.gz"), "--water", str(root / "water.nii.gz"),
            "--gm-map", str(root / "gm.nii.gz"), "--wm-map", str(root / "wm.nii.gz"),
            "--csf-map", str(root / "csf.nii.gz"), "--anatomy", str(root / "t1.nii.gz"),
            "--config", str(root / "settings.toml"), "--title", "maps", "-o", str(root / "fit")])
        assert fit.exit_code == 0, fit.output
        batch = runner.invoke(main, [
            "batch", str(root / "manifest.tsv"), "--config", str(root / "settings.toml"),
            "--workers", "1", "--no-progress", "-o", str(root / "batch")])
        assert batch.exit_code == 0, batch.output
    return root


def test_fit_with_maps_is_water_referenced_with_the_fractions_of_the_anatomy(study: Path):
    doc = json.loads((study / "fit" / "fit.json").read_text(encoding="utf-8"))
    truth = shell_fraction_brute_force(VOXEL, R_IN, R_OUT, spacing_mm=0.2)
    assert doc["tissue"]["fractions"] == pytest.approx(truth, rel=0.02)
    assert doc["inputs"]["tissue_fractions"] == pytest.approx(doc["tissue"]["fractions"])
    assert "supersampled" in doc["tissue"]["method"]
    assert doc["tissue"]["voxel"]["centre_mm"] == pytest.approx([26.0, 4.0, -3.0])
    assert doc["quantification"]["water_referenced"] is True
    assert math.isfinite(doc["quantification"]["conc_molar_mm"]["NAA"])
    assert (study / "fit" / "voxel.png").read_bytes().startswith(b"\x89PNG")
    report = (study / "fit" / "report.html").read_text(encoding="utf-8")
    assert "tissue fractions: method" in report and "voxel position and orientation" in report


def test_batch_with_map_columns_gives_the_same_as_fit(study: Path):
    fit = json.loads((study / "fit" / "fit.json").read_text(encoding="utf-8"))
    batch = json.loads((study / "batch" / "scans" / "maps" / "fit.json").read_text("utf-8"))
    for key in ("fractions", "raw", "unsegmented", "method", "voxel"):
        assert batch["tissue"][key] == fit["tissue"][key], key
    assert (study / "batch" / "scans" / "maps" / "voxel.png").is_file()
    import csv

    with open(study / "batch" / "cohort_qc.tsv", encoding="utf-8", newline="") as handle:
        rows = {r["scan_id"]: r for r in csv.DictReader(handle, delimiter="\t")}
    assert rows["maps"]["tissue_source"] == "maps"
    assert float(rows["maps"]["gm"]) == pytest.approx(fit["tissue"]["fractions"]["gm"], rel=1e-5)
    assert rows["badgrid"]["tissue_source"] == "n/a" and rows["badgrid"]["status"] == "failed"
    assert ((study / "fit" / "results.tsv").read_text("utf-8").splitlines()[1:]
            == (study / "batch" / "scans" / "maps" / "results.tsv").read_text("utf-8")
            .splitlines()[1:])


def test_batch_records_a_bad_map_and_goes_on(study: Path):
    summary = json.loads((study / "batch" / "scans" / "badgrid" / "summary.json")
                         .read_text("utf-8"))
    assert summary["status"] == "failed"
    assert "not on the grid" in summary["reason"]
    assert not (study / "batch" / "scans" / "badgrid" / "fit.json").exists()


def test_fit_refuses_numbers_and_maps_together(study: Path, tmp_path: Path):
    result = CliRunner().invoke(main, [
        "fit", str(study / "scan.nii.gz"), "--gm", "0.6", "--wm", "0.3", "--csf", "0.1",
        "--gm-map", str(study / "gm.nii.gz"), "--wm-map", str(study / "wm.nii.gz"),
        "--csf-map", str(study / "csf.nii.gz"), "-o", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert "not both" in result.output
    assert not (tmp_path / "out").exists()
