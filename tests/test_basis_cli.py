"""``specproc basis`` commands: simulate, show, plot, export, and their errors."""

from __future__ import annotations

import json

import nibabel as nib
import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import BasisSet
from specproc.cli import main


@pytest.fixture(autouse=True)
def _private_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("SPECPROC_CACHE_DIR", str(tmp_path / "cache"))


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _simulate(tmp_path, *extra):
    out = tmp_path / "set.npz"
    result = _run("basis", "simulate", "--sequence", "press", "--field", "3", "--te", "30",
                  "--points", "1024", "--bandwidth", "2000", "--metabolites", "NAA,Cr,Lac",
                  *extra, "-o", out)
    assert result.exit_code == 0, result.output
    return out


def test_simulate_and_show(tmp_path):
    out = _simulate(tmp_path, "--macromolecules")
    b = BasisSet.load(out)
    assert b.names[:3] == ("NAA", "Cr", "Lac") and "MM1.43" in b.names
    assert b.dwell_s == pytest.approx(1 / 2000) and b.n_points == 1024
    shown = _run("basis", "show", out)
    assert shown.exit_code == 0, shown.output
    assert "NAA" in shown.output and "MM1.43" in shown.output
    # the NAA methyl singlet is listed at 2.008 ppm within the 1.95 Hz point spacing
    # (Govindaraju 2000)
    naa_row = next(line for line in shown.output.splitlines() if "NAA" in line)
    peaks = [float(x) for x in naa_row.split("│")[4].split(",")]
    assert min(abs(p - 2.008) for p in peaks) < 0.01


def test_plot_writes_png(tmp_path):
    out = _simulate(tmp_path)
    png = tmp_path / "set.png"
    result = _run("basis", "plot", out, "-o", png)
    assert result.exit_code == 0, result.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_export_writes_nifti_mrs_per_member(tmp_path):
    out = _simulate(tmp_path)
    folder = tmp_path / "nifti"
    result = _run("basis", "export", out, "-o", folder)
    assert result.exit_code == 0, result.output
    b = BasisSet.load(out)
    for i, name in enumerate(b.names):
        # read back with nibabel (outside library) following the NIfTI-MRS standard
        img = nib.load(folder / f"{name}.nii.gz")
        data = np.asanyarray(img.dataobj)
        assert data.shape == (1, 1, 1, b.n_points)
        np.testing.assert_allclose(data[0, 0, 0], b.fids[i], rtol=1e-6, atol=1e-6)
        assert img.header.get_zooms()[3] == pytest.approx(b.dwell_s)
        (ext,) = [e for e in img.header.extensions if e.get_code() == 44]
        content = ext.get_content()
        meta = json.loads(content.decode() if isinstance(content, bytes) else content)
        # user-defined keys are objects with a Value and a Description (NIfTI-MRS standard)
        member = meta["specproc_basis_member"]
        assert member["Value"] == name and member["Description"]
        assert meta["specproc_basis_kind"]["Value"] == b.kinds[i]
        assert meta["specproc_basis_protons"]["Value"] == b.protons[i]
        assert meta["SpectrometerFrequency"][0] == pytest.approx(b.spectrometer_mhz)
        assert meta["ResonantNucleus"] == ["1H"]


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--te", "-30"], "non-negative"),
        (["--te", "30", "--te1", "40"], "shorter than TE"),
        (["--te", "30", "--metabolites", "NAA,unobtainium"], "unknown metabolite"),
        (["--te", "30", "--bandwidth", "0"], "bandwidth"),
        ([], "needs an echo time"),
    ],
)
def test_simulate_bad_arguments_one_line_exit_2(tmp_path, args, message):
    out = tmp_path / "bad.npz"
    base = ["basis", "simulate", "--sequence", "press", "--field", "3", "--points", "256",
            "--bandwidth", "2000"]
    if "--bandwidth" in args:
        base = base[:-2]
    result = _run(*base, *args, "-o", out)
    assert result.exit_code == 2
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("specproc: error:")
    assert message in lines[0]
    assert not out.exists()


def test_unknown_sequence_is_a_usage_error(tmp_path):
    result = _run("basis", "simulate", "--sequence", "laser", "--field", "3", "--te", "30",
                  "--points", "256", "--bandwidth", "2000", "-o", tmp_path / "x.npz")
    assert result.exit_code == 2


def test_show_of_a_bad_file_is_one_line(tmp_path):
    bad = tmp_path / "bad.npz"
    bad.write_text("hello")
    result = _run("basis", "show", bad)
    assert result.exit_code == 2
    assert result.output.strip().startswith("specproc: error:")
    assert len(result.output.strip().splitlines()) == 1
