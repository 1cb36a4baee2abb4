"""``specproc tissue`` end to end: fractions, JSON, the voxel picture, one-line errors (exit 2)
with nothing written. The phantom is a spherical shell written with plain nibabel; its
expected fractions come from a brute-force count (tests/_tissue_phantoms.py)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from _tissue_phantoms import (
    rotation_deg,
    shell_fraction_brute_force,
    shell_maps,
    voxel_affine,
    write_map,
    write_mrs_with_affine,
)
from click.testing import CliRunner

from specproc.cli import main

R_IN, R_OUT = 22.0, 34.0
VOXEL = voxel_affine([20.0, 20.0, 20.0], [26.0, 4.0, -3.0], rotation_deg(x_deg=30, z_deg=30))


@pytest.fixture(scope="module")
def phantom(tmp_path_factory):
    folder = tmp_path_factory.mktemp("phantom")
    maps, affine = shell_maps(2.0, 48.0, R_IN, R_OUT, sub_mm=0.5)
    paths = {t: write_map(folder / f"{t}.nii.gz", m, affine) for t, m in maps.items()}
    t1 = 0.35 * maps["gm"] + 0.8 * maps["wm"] + 0.1 * maps["csf"]
    paths["anatomy"] = write_map(folder / "t1.nii.gz", (1000 * t1).astype(np.int16), affine)
    labels = np.argmax(np.stack([np.zeros_like(maps["gm"]) + 0.01, maps["csf"], maps["gm"],
                                 maps["wm"]]), axis=0).astype(np.uint8)
    paths["labels"] = write_map(folder / "seg.nii.gz", labels, affine)
    paths["scan"] = write_mrs_with_affine(folder / "svs.nii.gz", VOXEL)
    paths["truth"] = shell_fraction_brute_force(VOXEL, R_IN, R_OUT, spacing_mm=0.2)
    return paths


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_prints_fractions_that_match_the_phantom(phantom):
    result = _run("tissue", phantom["scan"], "--gm", phantom["gm"], "--wm", phantom["wm"],
                  "--csf", phantom["csf"])
    assert result.exit_code == 0, result.output
    rows = {line.split()[0]: line.split()[1:] for line in result.output.splitlines()
            if line[:3] in ("GM ", "WM ", "CSF")}
    for t in ("gm", "wm", "csf"):
        # 2 mm maps: within 2 % of the count (the picture of a 20 mm voxel is blurred by one
        # map voxel at each face)
        assert float(rows[t.upper()][0]) == pytest.approx(phantom["truth"][t], rel=0.02,
                                                           abs=0.005)
    assert "20.0 x 20.0 x 20.0 mm (8.00 mL)" in result.output
    assert "unsegmented" in result.output and "NIfTI sform" in result.output


def test_json_and_picture(phantom, tmp_path):
    png = tmp_path / "voxel.png"
    result = _run("tissue", phantom["scan"], "--labels", phantom["labels"], "--label-table",
                  "csf=1,gm=2,wm=3", "--anatomy", phantom["anatomy"], "--png", png, "--json")
    assert result.exit_code == 0, result.output
    document = json.loads(result.output)
    assert document["maps_kind"] == "labels"
    assert sum(document["fractions"].values()) == pytest.approx(1.0)
    assert document["voxel"]["size_mm"] == pytest.approx([20.0, 20.0, 20.0])
    assert document["picture"] == str(png)
    assert png.read_bytes().startswith(b"\x89PNG")
    assert "label image" in document["method"]


def test_voxel_picture_outline_is_the_cut_of_the_box():
    # the cut of an axis-aligned box through its centre is the rectangle of its two sides;
    # of a box rotated by 30 degrees about z, the axial cut is that rectangle rotated
    from specproc.report.voxel import plane_outline_mm
    from specproc.tissue import VoxelGeometry

    box = VoxelGeometry(voxel_affine([20.0, 16.0, 12.0], [1.0, 2.0, 3.0]))
    cut = plane_outline_mm(box, 2)  # axial: (x, y)
    assert cut.shape == (4, 2)
    assert np.allclose(sorted(cut[:, 0]), [-9, -9, 11, 11])
    assert np.allclose(sorted(cut[:, 1]), [-6, -6, 10, 10])
    rotated = VoxelGeometry(voxel_affine([20.0, 16.0, 12.0], [0, 0, 0], rotation_deg(z_deg=30)))
    cut = plane_outline_mm(rotated, 2)
    area = 0.5 * abs(np.dot(cut[:, 0], np.roll(cut[:, 1], 1))
                     - np.dot(cut[:, 1], np.roll(cut[:, 0], 1)))
    assert area == pytest.approx(20.0 * 16.0)
    oblique = VoxelGeometry(voxel_affine([20.0, 20.0, 20.0], [0, 0, 0],
                                         rotation_deg(x_deg=30, z_deg=30)))
    for plane in range(3):
        assert 3 <= len(plane_outline_mm(oblique, plane)) <= 6


@pytest.mark.parametrize("case", ["outside", "grid", "sum", "shear", "png-no-anatomy",
                                  "half-maps"])
def test_bad_inputs_give_one_line_exit_2_and_write_nothing(phantom, tmp_path, case):
    png = tmp_path / "voxel.png"
    maps = ["--gm", phantom["gm"], "--wm", phantom["wm"], "--csf", phantom["csf"]]
    scan = phantom["scan"]
    if case == "outside":
        scan = write_mrs_with_affine(tmp_path / "far.nii.gz",
                                     voxel_affine([20, 20, 20], [200.0, 0.0, 0.0]))
    elif case == "grid":
        coarse = np.ones((10, 10, 10), np.float32)
        maps[1] = write_map(tmp_path / "gm_other.nii.gz", coarse, np.diag([9.6] * 3 + [1]))
    elif case == "sum":
        maps[3] = phantom["gm"]  # WM given the GM map: GM counted twice, WM missing
    elif case == "shear":
        sheared = VOXEL.copy()
        sheared[:3, 1] += 0.3 * sheared[:3, 0]
        scan = write_mrs_with_affine(tmp_path / "shear.nii.gz", sheared)
    elif case == "half-maps":
        maps = maps[:4]
    args = ["tissue", scan, *maps, "--png", png]
    if case != "png-no-anatomy":
        args += ["--anatomy", phantom["anatomy"]]
    result = _run(*args)
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("specproc: error:"), result.output
    assert not png.exists()
    expected = {"outside": "outside the anatomical image", "grid": "not on the grid",
                "sum": "not about 1", "shear": "non-orthogonal", "png-no-anatomy": "--anatomy",
                "half-maps": "all three"}[case]
    assert expected in lines[0]


def test_methods_rows_say_where_the_voxel_was_and_how_fractions_were_obtained(phantom):
    from specproc.report.voxel import tissue_methods_rows, with_tissue_methods
    from specproc.tissue import TissueMapFiles, tissue_fractions_from_files

    result = tissue_fractions_from_files(
        phantom["scan"], TissueMapFiles(gm=phantom["gm"], wm=phantom["wm"], csf=phantom["csf"]))
    rows = tissue_methods_rows(result.to_dict())
    items = {r["item"]: r["value"] for r in rows}
    assert "supersampled" in items["tissue fractions: method"]
    assert items["segmentation"] == "csf.nii.gz, gm.nii.gz, wm.nii.gz"
    assert "centre (26.0, 4.0, -3.0) mm" in items["voxel position and orientation"]
    table = [{"section": "2 Acquisition", "item": "a", "value": ""},
             {"section": "3 Analysis", "item": "b", "value": ""},
             {"section": "4 Data quality", "item": "c", "value": ""}]
    placed = with_tissue_methods(table, result.to_dict())
    sections = [r["section"] for r in placed]
    assert sections == sorted(sections)  # each row at the end of its own section
    assert tissue_methods_rows(None) == []
    given = tissue_methods_rows({"method": "given", "fractions": {"gm": 0.6, "wm": 0.3,
                                                                  "csf": 0.1}})
    assert "given by the user" in given[-1]["value"]


def test_manifest_columns_point_to_the_maps(phantom, tmp_path):
    from specproc.batch.manifest import read_manifest
    from specproc.errors import InvalidInputError

    folder = phantom["scan"].parent
    manifest = folder / "cohort.tsv"
    manifest.write_text(
        "scan\tgm_map\twm_map\tcsf_map\tanatomy\tlabels\tlabel_table\n"
        "svs.nii.gz\tgm.nii.gz\twm.nii.gz\tcsf.nii.gz\tt1.nii.gz\t\t\n")
    (entry,) = read_manifest(manifest)
    assert entry.tissue is None
    assert entry.tissue_maps.gm == folder.resolve() / "gm.nii.gz"
    assert entry.tissue_maps.anatomy == folder.resolve() / "t1.nii.gz"
    assert entry.describe()["tissue_maps"]["csf"].endswith("csf.nii.gz")
    manifest.write_text("scan\tlabels\tlabel_table\nsvs.nii.gz\tseg.nii.gz\tgm=2,wm=3,csf=1\n")
    (entry,) = read_manifest(manifest)
    assert entry.tissue_maps.labels.name == "seg.nii.gz"
    for text, match in (
        ("scan\tgm\twm\tcsf\tlabels\nsvs.nii.gz\t0.6\t0.3\t0.1\tseg.nii.gz\n", "not both"),
        ("scan\tgm_map\nsvs.nii.gz\tgm.nii.gz\n", "all three"),
        ("scan\tlabels\nsvs.nii.gz\tmissing.nii.gz\n", "does not exist"),
    ):
        manifest.write_text(text)
        with pytest.raises(InvalidInputError, match=match):
            read_manifest(manifest)
