"""The demo study's anatomy: the fractions specproc computes from the invented volunteers'
maps are those the spectra were generated with (demo_spectra/truth.json), and the scans carry
their voxel. The maps are built in closed form by demo_spectra/make_demo.py (fissure and medial
cortex of known widths across the voxel), independently of specproc.tissue."""

from __future__ import annotations

import csv
import json

import pytest
from click.testing import CliRunner

from specproc._paths import demo_dir
from specproc.cli import main

VOLUNTEERS_WITH_ANATOMY = ("sub-01", "sub-02")


def _manifest_rows():
    with open(demo_dir() / "manifest.tsv", encoding="utf-8", newline="") as handle:
        return {row["subject"]: row for row in csv.DictReader(handle, delimiter="\t")}


@pytest.mark.parametrize("subject", VOLUNTEERS_WITH_ANATOMY)
def test_demo_fractions_from_anatomy_equal_the_generated_ones(subject, tmp_path):
    root = demo_dir()
    truth = {s["subject"]: s for s in json.loads((root / "truth.json").read_text())["scans"]}
    row = _manifest_rows()[subject]
    png = tmp_path / "voxel.png"
    result = CliRunner().invoke(main, [
        "tissue", str(root / row["scan"]), "--gm", str(root / row["gm_map"]),
        "--wm", str(root / row["wm_map"]), "--csf", str(root / row["csf_map"]),
        "--anatomy", str(root / row["anatomy"]), "--png", str(png), "--json"])
    assert result.exit_code == 0, result.output
    document = json.loads(result.stdout)
    for t in ("gm", "wm", "csf"):
        assert document["fractions"][t] == pytest.approx(truth[subject]["tissue_fractions"][t],
                                                         abs=0.002), t
    assert abs(document["unsegmented"]) < 0.005
    assert document["voxel"]["size_mm"] == pytest.approx([20.0, 20.0, 20.0])
    assert png.read_bytes().startswith(b"\x89PNG")


def test_demo_anatomy_is_small():
    root = demo_dir()
    files = [p for p in root.rglob("*.nii.gz") if "anat" in p.parts]
    assert len(files) == 4 * len(VOLUNTEERS_WITH_ANATOMY)
    assert sum(p.stat().st_size for p in files) < 500_000  # "a few hundred kB at most"
