"""Hostile configuration files: every number bounded, every error naming the file and the key.

Reproducers of the configuration defects of the reliability probe (issue 17, item 10).
"""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from specproc import InvalidInputError
from specproc.cli import main
from specproc.config import BOUNDS, default_config, load_config


def _write(tmp_path, text):
    path = tmp_path / "settings.toml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize(("text", "match"), [
    ("[preprocess.drift_correction]\npasses = 1000000\n",
     r"'preprocess.drift_correction.passes' must be between 1 and 10 passes, got 1e\+06"),
    ("[preprocess.apodization]\nlw_hz = inf\n",
     r"'preprocess.apodization.lw_hz' must be between 0 and 100 Hz, got inf"),
    ("[fit]\nmax_lorentz_hz = nan\n", r"'fit.max_lorentz_hz' must be between .* got nan"),
    ("[fit]\nrange_ppm = [4.2, 0.2]\n", r"'fit.range_ppm' must be an increasing range"),
    ("[fit]\nnoise_ppm = [[-3.0, -1e300]]\n", r"'fit.noise_ppm\[0\]\[1\]' must be between"),
    ("a = " + "[" * 5000 + "]" * 5000 + "\n", "nested too deeply"),
    ("x = " + "{y = " * 5000 + "1" + "}" * 5000 + "\n", "nested too deeply"),
    ("relaxation." + ".".join(["a"] * 5000) + " = 1\n", "nested too deeply"),
    ("[fit]\nrange_ppm = " + "[" * 300 + "]" * 300 + "\n",
     r"must be a list of 2 numbers \(a range\), got \[\[\[\[...\]\]\]\]"),
])
def test_hostile_settings_are_refused_naming_file_and_key(tmp_path, text, match):
    path = _write(tmp_path, text)
    with pytest.raises(InvalidInputError, match=match) as info:
        load_config(path)
    assert str(info.value).startswith(f"{path}: ")
    assert len(str(info.value)) < 300
    result = CliRunner().invoke(main, ["config", "check", str(path)])
    assert result.exit_code == 2
    assert result.stderr.startswith(f"specproc: error: {path}: ")


def test_defaults_lie_within_their_bounds_and_every_bound_names_a_setting():
    defaults = default_config()
    for key, (low, high, _unit) in BOUNDS.items():
        node = defaults
        for part in key.split("."):
            node = node[part]
        values = node if isinstance(node, list) else [node]
        flat = [v for item in values for v in (item if isinstance(item, list) else [item])]
        assert all(low <= v <= high for v in flat), key
