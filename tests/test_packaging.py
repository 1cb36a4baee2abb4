"""The package as a user installs it: a wheel built from the source tree, installed into a fresh
virtual environment outside the checkout, simulates its basis and fits the bundled example.

The wheel must carry its package data (the metabolite definitions and the default settings);
a checkout on ``sys.path`` would hide a missing file, so the fit runs from an empty folder with
only the fresh environment's ``specproc`` importable.
"""

from __future__ import annotations

import csv
import json
import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "demo_spectra" / "example" / "example_svs.nii.gz"

pytestmark = pytest.mark.slow


def _run(cmd: list[str], **kwargs) -> subprocess.CompletedProcess:
    proc = subprocess.run(cmd, capture_output=True, text=True, **kwargs)
    assert proc.returncode == 0, f"{cmd[:3]} failed:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}"
    return proc


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    src = tmp_path_factory.mktemp("src") / "specproc"
    shutil.copytree(ROOT, src, ignore=shutil.ignore_patterns(
        ".git", ".venv", "build", "dist", "*.egg-info", "__pycache__", ".pytest_cache",
        ".hypothesis", ".ruff_cache", ".mypy_cache", "specproc-demo-output"))
    out = tmp_path_factory.mktemp("wheel")
    _run([sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "-w", str(out), str(src)])
    (found,) = out.glob("specproc-*.whl")
    return found


def test_wheel_carries_package_data(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    assert "specproc/data/defaults.toml" in names
    assert "specproc/data/relaxation.toml" in names
    definitions = {Path(n).name for n in names if n.startswith("specproc/data/basis/")}
    # one file per definition in the source tree, none left behind
    expected = {p.name for p in (ROOT / "specproc" / "data" / "basis").glob("*.toml")}
    assert expected and expected <= definitions


def test_installed_wheel_fits_the_example(wheel: Path, tmp_path: Path) -> None:
    env_dir = tmp_path / "env"
    _run([sys.executable, "-m", "venv", "--without-pip", str(env_dir)])
    fresh_python = env_dir / "bin" / "python"
    # the dependencies come from this test environment's site-packages (no download); its .pth
    # files, among them the editable install of the checkout, are not processed from here
    purelib = _run([str(fresh_python), "-c",
                    "import sysconfig; print(sysconfig.get_paths()['purelib'])"]).stdout.strip()
    Path(purelib, "test-deps.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    _run([sys.executable, "-m", "pip", "--python", str(fresh_python), "install", "-q",
          "--no-deps", "--no-index", str(wheel)])

    work = tmp_path / "elsewhere"
    work.mkdir()
    env = {k: v for k, v in os.environ.items()
           if k not in {"PYTHONPATH", "SPECPROC_BASIS_DIR", "SPECPROC_DEMO_DIR"}}
    env["SPECPROC_CACHE_DIR"] = str(tmp_path / "cache")
    where = _run([str(fresh_python), "-c", "import specproc; print(specproc.__file__)"],
                 cwd=work, env=env).stdout.strip()
    assert Path(where).is_relative_to(env_dir), where

    shutil.copy(EXAMPLE, work / EXAMPLE.name)
    _run([str(env_dir / "bin" / "specproc"), "fit", EXAMPLE.name, "-o", "out"], cwd=work, env=env)
    document = json.loads((work / "out" / "fit.json").read_text())
    assert document["basis"]["definitions_hash"]
    # the basis was simulated from the wheel's own definitions and the fit found NAA
    with open(work / "out" / "results.tsv", newline="") as handle:
        rows = list(csv.DictReader(handle, delimiter="\t"))
    naa = [row for row in rows if row["metabolite"] == "NAA"]
    assert naa, rows[:3]
    assert float(naa[0]["amplitude"]) > 0, naa[0]
    assert (work / "out" / "report.html").is_file()
