"""The TOML configuration: defaults, merging, validation, and ``specproc config``.

Source: TOML v1.0 as read by the standard library's tomllib (the reference parser here).
"""

import tomllib

import pytest
from click.testing import CliRunner

from specproc.cli import main
from specproc.config import default_config, default_config_text, load_config, merge_config
from specproc.errors import InvalidInputError

PIPELINE_STEPS = ["coil_combination", "drift_correction", "outlier_rejection", "eddy_current",
                  "water_removal", "referencing", "phasing", "apodization", "zero_filling"]


def write(tmp_path, text, name="user.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_defaults_parse_and_hold_every_step():
    parsed = tomllib.loads(default_config_text())
    assert parsed == load_config() == default_config()
    steps = parsed["preprocess"]
    assert list(steps) == PIPELINE_STEPS  # the order the pipeline runs them
    for name, section in steps.items():
        assert isinstance(section["enabled"], bool), name
    # display-only steps are off for the fit path
    assert steps["apodization"]["enabled"] is False
    assert steps["zero_filling"]["enabled"] is False
    assert steps["water_removal"]["band_ppm"] == [4.2, 5.2]
    assert default_config_text().count("#") > 20  # commented for people


def test_user_file_is_deep_merged(tmp_path):
    path = write(tmp_path, """
[preprocess.drift_correction]
window_ppm = [1.9, 4.0]
max_shift_hz = 10        # an integer where a float is expected is fine

[preprocess.phasing]
method = "acme"
""")
    config = load_config(path)
    assert config["preprocess"]["drift_correction"]["window_ppm"] == [1.9, 4.0]
    assert config["preprocess"]["drift_correction"]["max_shift_hz"] == 10.0
    assert isinstance(config["preprocess"]["drift_correction"]["max_shift_hz"], float)
    assert config["preprocess"]["drift_correction"]["passes"] == 2  # default kept
    assert config["preprocess"]["phasing"]["method"] == "acme"
    assert config["preprocess"]["water_removal"] == default_config()["preprocess"]["water_removal"]


@pytest.mark.parametrize(("text", "match"), [
    ("[preprocess.phasing]\nmethd = 'peak'\n", "unknown configuration key 'preprocess.phasing.me"),
    ("[preprocess.smoothing]\nenabled = true\n", "unknown configuration key 'preprocess.smooth"),
    ("[prepro]\n", "unknown configuration key 'prepro'"),
    ("[preprocess.water_removal]\nmodel_order = 25.5\n", "model_order' must be an integer"),
    ("[preprocess.water_removal]\nenabled = 1\n", "enabled' must be true or false"),
    ("[preprocess.outlier_rejection]\nthreshold = 'high'\n", "threshold' must be a number"),
    ("[preprocess.outlier_rejection]\nthreshold = true\n", "threshold' must be a number"),
    ("[preprocess.water_removal]\nband_ppm = [4.2]\n", "a list of 2 numbers"),
    ("[preprocess.water_removal]\nband_ppm = [4.2, 'x']\n", r"band_ppm\[1\]' must be a number"),
    ("[preprocess.phasing]\nmethod = 3\n", "method' must be a string"),
    ("preprocess = 3\n", "'preprocess' must be a table"),
])
def test_bad_user_files_name_file_and_key(tmp_path, text, match):
    path = write(tmp_path, text)
    with pytest.raises(InvalidInputError, match=match) as info:
        load_config(path)
    assert str(info.value).startswith(str(path))


def test_unreadable_files(tmp_path):
    with pytest.raises(InvalidInputError, match="not found"):
        load_config(tmp_path / "missing.toml")
    broken = write(tmp_path, "[preprocess\nenabled = \n")
    with pytest.raises(InvalidInputError, match="not valid TOML") as info:
        load_config(broken)
    assert str(broken) in str(info.value)


def test_merge_config_of_a_dict():
    merged = merge_config({"preprocess": {"apodization": {"enabled": True}}})
    assert merged["preprocess"]["apodization"]["enabled"] is True
    assert merge_config(None) == default_config()
    with pytest.raises(InvalidInputError, match="table"):
        merge_config(["not", "a", "dict"])


def test_cli_config_show_and_check(tmp_path):
    runner = CliRunner()
    shown = runner.invoke(main, ["config", "show"])
    assert shown.exit_code == 0
    assert shown.output == default_config_text()
    # the printed text is a valid configuration file itself
    path = write(tmp_path, shown.output, "copy.toml")
    ok = runner.invoke(main, ["config", "check", str(path)])
    assert ok.exit_code == 0 and "valid" in ok.output
    bad = write(tmp_path, "[preprocess.phasing]\nmethd = 'peak'\n")
    failed = runner.invoke(main, ["config", "check", str(bad)])
    assert failed.exit_code == 2
    lines = failed.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("specproc: error: ")


def test_qc_and_relaxation_tables_are_accepted(tmp_path):
    path = write(tmp_path, """
[qc]
snr_min = 5
crlb_percent_max = 30.0
drift_range_hz_max = 0
exclude_flagged = false
[relaxation.metabolite.NAA]
t2_s = 0.25
source = "this study"
""")
    result = CliRunner().invoke(main, ["config", "check", str(path)])
    assert result.exit_code == 0, result.output
    from specproc.qc import QCThresholds

    th = QCThresholds.from_config(load_config(path)["qc"])
    assert (th.snr_min, th.crlb_percent_max, th.drift_range_hz_max) == (5.0, 30.0, None)
    assert QCThresholds.from_config(default_config()["qc"]) == QCThresholds()


@pytest.mark.parametrize("text, message", [
    ('[preprocess.phasing]\nmethod = "bogus"\n', "preprocess.phasing.method"),
    ("[fit]\nbaseline_knot_ppm = -1.0\n", "baseline_knot_ppm"),
    ("[qc]\nsnr_min = -3.0\n", "snr_min"),
    ("[relaxation.metabolite.NAA]\nt2_s = -1.0\n", "NAA"),
])
def test_cli_config_check_rejects_what_a_run_would_reject(tmp_path, text, message):
    # "valid" must mean that preprocess and fit accept the file: the same checks they make
    path = tmp_path / "user.toml"
    path.write_text(text)
    result = CliRunner().invoke(main, ["config", "check", str(path)])
    assert result.exit_code == 2
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("specproc: error:")
    assert "user.toml" in lines[0] and message in lines[0]
