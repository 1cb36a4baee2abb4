"""``specproc info`` on every format, and every bad-input class through the command line.

Expected values come from the files built with the reference libraries (nibabel, pydicom,
numpy) and from CODATA via scipy.constants (field = f / (γ/2π)).
"""

from __future__ import annotations

import gzip
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from _io_builders import (
    singlet_fid,
    write_dicom_mrs,
    write_jcampdx,
    write_nifti_nibabel,
    write_npz_numpy,
    write_text_columns,
)
from click.testing import CliRunner
from scipy import constants

from specproc._paths import source_root
from specproc.cli import main

EXAMPLE = source_root() / "demo_spectra" / "example" / "example_svs.nii.gz"
DWELL, MHZ = 2.5e-4, 123.2
GAMMA_MHZ_PER_T = constants.physical_constants["proton gyromag. ratio in MHz/T"][0]  # CODATA


def _run(*args):
    return CliRunner().invoke(main, list(map(str, args)))


def test_info_on_bundled_example():
    result = _run("info", EXAMPLE)
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "nifti-mrs" in out
    assert f"{3.0 * GAMMA_MHZ_PER_T:.4f} MHz" in out  # 127.7324 MHz at 3 T (CODATA)
    assert "3.000 T" in out
    assert "4000.0 Hz" in out and "0.25 ms" in out and "1024" in out
    assert "DIM_DYN x 16" in out
    assert "30 ms" in out and "2000 ms" in out and "press" in out
    assert "sha256" in out
    assert result.stderr == ""


def test_info_json_one_object_per_file(tmp_path):
    other = tmp_path / "copy.nii.gz"
    other.write_bytes(EXAMPLE.read_bytes())
    result = _run("info", "--json", EXAMPLE, other)
    assert result.exit_code == 0
    lines = result.stdout.strip().splitlines()
    assert len(lines) == 2
    info = json.loads(lines[0])
    assert info["format"] == "nifti-mrs" and info["nucleus"] == "1H"
    assert info["spectrometer_mhz"] == pytest.approx(3.0 * GAMMA_MHZ_PER_T)
    assert info["field_t"] == pytest.approx(3.0)
    assert info["spectral_width_hz"] == pytest.approx(4000.0)
    assert info["dwell_ms"] == pytest.approx(0.25)
    assert info["n_points"] == 1024
    assert info["dims"] == [{"dim": 5, "tag": "DIM_DYN", "size": 16}]
    assert info["te_ms"] == pytest.approx(30.0) and info["tr_ms"] == pytest.approx(2000.0)
    assert info["sequence"] == "press"
    assert len(info["header"]["sha256"]) == 16
    assert json.loads(lines[1])["header"] == info["header"]  # same header, same digest


def _good_files(tmp_path):
    fid = singlet_fid(256, DWELL, MHZ, 2.0)
    meta = {"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"], "EchoTime": 0.144}
    return {
        "nifti-mrs": write_nifti_nibabel(tmp_path / "a.nii", fid.reshape(1, 1, 1, -1)
                                         .astype(np.complex64), dwell=DWELL, meta=meta),
        "dicom": write_dicom_mrs(tmp_path / "b.dcm", np.stack([fid] * 4), te_ms=144.0),
        "jcamp-dx": write_jcampdx(tmp_path / "c.jdx", fid),
        "npz": write_npz_numpy(tmp_path / "d.npz", fid=fid, dwell_s=DWELL,
                               spectrometer_mhz=MHZ, te_s=0.144),
        "text": write_text_columns(tmp_path / "e.txt", fid, dwell_s=DWELL,
                                   header=f"specproc-text 1 spectrometer_mhz={MHZ} te_s=0.144"),
    }


def test_info_reads_every_format(tmp_path):
    files = _good_files(tmp_path)
    result = _run("info", "--json", *files.values())
    assert result.exit_code == 0, result.output
    infos = [json.loads(line) for line in result.stdout.splitlines()]
    assert [i["format"] for i in infos] == list(files)
    for info in infos:
        assert info["spectrometer_mhz"] == pytest.approx(MHZ)
        assert info["field_t"] == pytest.approx(MHZ / GAMMA_MHZ_PER_T)
        assert info["spectral_width_hz"] == pytest.approx(1 / DWELL, rel=1e-6)
        assert info["n_points"] == 256
    te = {i["format"]: i["te_ms"] for i in infos}
    assert te["nifti-mrs"] == pytest.approx(144.0) and te["dicom"] == pytest.approx(144.0)
    assert te["jcamp-dx"] is None
    assert infos[1]["dims"] == [{"dim": 5, "tag": "DIM_DYN", "size": 4}]


def test_info_options_for_files_without_metadata(tmp_path):
    path = write_text_columns(tmp_path / "plain.txt", singlet_fid(64, DWELL, MHZ, 2.0),
                              dwell_s=DWELL, time_column=True)
    assert _run("info", path).exit_code == 2
    result = _run("info", "--json", "--spectrometer-mhz", MHZ, "--dwell-ms", 0.25, path)
    assert result.exit_code == 0, result.output
    assert json.loads(result.stdout)["spectrometer_mhz"] == MHZ


def _bad_files(tmp_path):
    """One file per bad-input class of issue 2 (plus the DICOM variant of >1 voxel)."""
    fid = singlet_fid(64, DWELL, MHZ, 2.0).astype(np.complex64)
    meta = {"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"]}
    good = write_nifti_nibabel(tmp_path / "good.nii", fid.reshape(1, 1, 1, -1), dwell=DWELL,
                               meta=meta)
    raw = good.read_bytes()
    nan = fid.copy()
    nan[3] = np.inf
    bad = {}
    bad["missing"] = (tmp_path / "missing.nii", "file not found")
    (tmp_path / "truncated.nii").write_bytes(raw[:-40])
    bad["truncated"] = (tmp_path / "truncated.nii", "truncated")
    (tmp_path / "truncated.nii.gz").write_bytes(gzip.compress(raw)[:200])
    bad["truncated gz"] = (tmp_path / "truncated.nii.gz", "gzip")
    (tmp_path / "corrupt.nii").write_bytes(raw[:4] + b"junkjunk" + raw[12:])  # NIfTI-2 magic
    bad["corrupt"] = (tmp_path / "corrupt.nii", "not a recognised spectroscopy file")
    json_at = raw.index(b'{"Spectrometer')
    (tmp_path / "badjson.nii").write_bytes(raw[:json_at] + b"{{" + raw[json_at + 2:])
    bad["corrupt json"] = (tmp_path / "badjson.nii", "not valid JSON")
    bad["nan"] = (write_nifti_nibabel(tmp_path / "nan.nii", nan.reshape(1, 1, 1, -1),
                                      dwell=DWELL, meta=meta), "NaN or infinite")
    bad["no frequency"] = (write_nifti_nibabel(tmp_path / "nofreq.nii", fid.reshape(1, 1, 1, -1),
                                               dwell=DWELL, meta={"ResonantNucleus": ["1H"]}),
                           "missing spectrometer frequency")
    bad["zero length"] = (write_npz_numpy(tmp_path / "empty.npz", fid=np.zeros(0, complex),
                                          dwell_s=DWELL, spectrometer_mhz=MHZ),
                          "no time-domain samples")
    (tmp_path / "empty.txt").write_text(f"# specproc-text 1 spectrometer_mhz={MHZ}\n")
    bad["zero length text"] = (tmp_path / "empty.txt", "no time-domain samples")
    bad["unknown tag"] = (write_nifti_nibabel(
        tmp_path / "tag.nii", np.stack([fid, fid], -1).reshape(1, 1, 1, 64, 2), dwell=DWELL,
        meta={**meta, "dim_5": "DIM_WHATEVER"}), "unknown dimension tag")
    bad["inconsistent tags"] = (write_nifti_nibabel(
        tmp_path / "tags.nii", fid.reshape(1, 1, 1, -1), dwell=DWELL,
        meta={**meta, "dim_5": "DIM_DYN"}), "inconsistent dimension tags")
    bad["voxels"] = (write_nifti_nibabel(tmp_path / "mrsi.nii", np.stack([fid] * 4).reshape(
        2, 2, 1, 64), dwell=DWELL, meta=meta), "more than one voxel")
    bad["voxels dicom"] = (write_dicom_mrs(tmp_path / "mrsi.dcm", np.stack([fid] * 4), rows=2,
                                           columns=2), "more than one voxel")
    bad["nucleus"] = (write_nifti_nibabel(
        tmp_path / "p31.nii", fid.reshape(1, 1, 1, -1), dwell=DWELL,
        meta={"SpectrometerFrequency": [51.7], "ResonantNucleus": ["31P"]}),
        "nucleus 31P is not supported yet")
    bad["real only"] = (write_jcampdx(tmp_path / "real.jdx", fid, real_only=True),
                        "only real data")
    (tmp_path / "noise.bin").write_bytes(bytes(range(256)) * 4)
    bad["random bytes"] = (tmp_path / "noise.bin", "not a recognised spectroscopy file")
    # a BIDS sidecar or a README given as a scan is not read as FID text
    (tmp_path / "sub-01_svs.json").write_text('{"EchoTime": 0.03, "RepetitionTime": 2.0}\n')
    bad["json sidecar"] = (tmp_path / "sub-01_svs.json",
                           "not a recognised spectroscopy file (NIfTI-MRS, DICOM MRS, JCAMP-DX, "
                           "specproc text or npz)")
    (tmp_path / "README.md").write_text("# Study\n\nScans of the pilot, 2 sessions.\n")
    bad["readme"] = (tmp_path / "README.md", "not a recognised spectroscopy file")
    return bad


def test_every_bad_input_gives_one_line_and_exit_2(tmp_path):
    bad = _bad_files(tmp_path)
    before = sorted(tmp_path.iterdir())
    for name, (path, match) in bad.items():
        result = _run("info", path)
        assert result.exit_code == 2, name
        lines = result.stderr.splitlines()
        assert len(lines) == 1, (name, result.stderr)
        assert lines[0].startswith(f"specproc: error: {path}: "), (name, lines[0])
        assert match in lines[0], (name, lines[0])
        assert "Traceback" not in result.output
        assert result.stdout == ""
    assert sorted(tmp_path.iterdir()) == before  # nothing written


def test_bad_file_among_good_ones(tmp_path):
    files = _good_files(tmp_path)
    missing = tmp_path / "missing.nii"
    result = _run("info", "--json", files["nifti-mrs"], missing, files["npz"])
    assert result.exit_code == 2
    assert len(result.stdout.strip().splitlines()) == 2  # the two good files still print
    assert result.stderr.splitlines() == [f"specproc: error: {missing}: file not found"]


def test_debug_shows_the_exception(tmp_path):
    result = _run("--debug", "info", tmp_path / "missing.nii")
    assert result.exit_code != 0
    assert result.exception is not None and "file not found" in str(result.exception)


def test_console_script_runs():
    # the installed entry point, as README's first command uses it
    script = Path(sys.executable).with_name("specproc")
    command = [str(script)] if script.exists() else [
        sys.executable, "-c", "from specproc.cli import main; main()"]
    result = subprocess.run(
        [*command, "info", "--json", str(EXAMPLE)],
        capture_output=True, text=True, timeout=120, check=False,
    )
    assert result.returncode == 0, result.stderr
    assert json.loads(result.stdout)["n_points"] == 1024


@pytest.mark.parametrize(
    "args",
    [["info"], ["nosuch-command"], ["basis", "simulate", "--sequence", "foo", "--field", "3"]],
)
def test_usage_errors_are_one_line_exit_2(args: list[str]) -> None:
    # DESIGN.md (errors): every bad invocation gives one line `specproc: error: ...`, exit 2
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("specproc: error: "), result.output
    assert "--help" in lines[0]
