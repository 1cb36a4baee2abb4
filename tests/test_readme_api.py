"""The examples of the README's "Python API" section run as written (from the top folder of the
repository, here a temporary folder holding the demo study); the first, one scan from loading to
its folder, does what its comments say."""

import re
from pathlib import Path

import pytest

from specproc._paths import demo_dir, source_root


def readme_api_examples() -> list[str]:
    """The ``python`` code blocks under the README heading "Python API", in order."""
    text = (source_root() / "README.md").read_text(encoding="utf-8")
    section = re.search(r"^## Python API\n(.*?)(?=^## )", text, flags=re.S | re.M)
    assert section, "README.md has no 'Python API' section"
    blocks = re.findall(r"^```python\n(.*?)^```", section.group(1), flags=re.S | re.M)
    assert blocks, "the 'Python API' section has no python code block"
    return blocks


@pytest.mark.slow
def test_readme_python_api_example_runs(tmp_path, monkeypatch, capsys):
    first, *others = readme_api_examples()
    (tmp_path / "demo_spectra").symlink_to(demo_dir(), target_is_directory=True)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("SPECPROC_CACHE_DIR", str(tmp_path / "cache"))

    for i, code in enumerate(others, start=2):  # each further example runs on its own
        exec(compile(code, f"README.md (Python API, example {i})", "exec"), {})
    capsys.readouterr()

    namespace: dict = {"__name__": "__readme__"}
    exec(compile(first, "README.md (Python API)", "exec"), namespace)
    out = capsys.readouterr().out.splitlines()

    result = namespace["result"]
    # the compact one-line repr, water-referenced with the tissue fractions given
    assert out[0].startswith("ScanResult('sub-03_ses-01_svs'") and "\n" not in repr(result)
    assert "tNAA mM=" in out[0] and "not water-referenced" not in out[0]
    assert result.water_referenced and result.tissue is not None
    ratio, conc = (float(v) for v in out[1].split())
    assert ratio == pytest.approx(result.ratios["tNAA/tCr"]) and ratio > 0
    assert conc == pytest.approx(result.conc_mm["tNAA"]) and conc > 0
    # one printed line per principal sum, in mM with its SD and CRLB
    sums = [line.split()[0] for line in out if " mM, CRLB " in line]
    assert sorted(sums) == sorted(["tNAA", "tCr", "tCho", "mI", "Glx"])
    # the folder of a scan, as specproc fit writes it
    folder = tmp_path / "sub-03"
    for name in ("results.tsv", "fit.json", "config.toml", "fit.png", "report.html"):
        assert (folder / name).is_file(), name
    assert Path(out[-1]).resolve() == (folder / "report.html").resolve()
