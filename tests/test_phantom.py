"""Phantom validation (specproc.phantom, ``specproc phantom``).

Simulated phantoms: invented NAA + creatine solutions at known concentrations and known
temperatures. The water line is put at ``4.65 + k (T - 37)`` ppm with k = -0.01 ppm/°C (the
water-shift temperature coefficient, Hindman 1966, about -0.0103 ppm/K, rounded as commonly used
in MRS thermometry; from memory) and NAA at 2.008 ppm (Govindaraju et al. 2000); the estimate
must come back within 1 °C. The water signal of the simulated solution is that of pure water,
55.51 mol/L with 2 protons per molecule (common practice), so the recovery of the nominal
concentrations is a check of the whole chain against the invented truth.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import simulate_basis
from specproc.cli import main
from specproc.constants import WATER_MOLAR_MM
from specproc.errors import InvalidInputError
from specproc.io import save
from specproc.phantom import (
    Thermometry,
    analyse_phantom,
    load_nominal,
    temperature_from_shifts,
    water_shift_at,
)
from specproc.synthetic import synthetic_scan, synthetic_water

#: (label, NAA mM, Cr mM, temperature °C) of the invented phantoms, one session each.
PHANTOMS = (("low", 5.0, 4.0, 21.0), ("mid", 10.0, 8.0, 30.0), ("high", 15.0, 12.0, 41.0))
FAST_CONFIG = "[preprocess.water_removal]\nenabled = false\n"
NOMINAL = """
reference = "water"
{phantoms}
"""


def _phantom_block(label: str, naa: float, cr: float, temp: float) -> str:
    return (f'[[phantom]]\nname = "{label}"\nfiles = ["*{label}*"]\ntemperature_c = {temp}\n'
            f"concentrations_mm = {{ NAA = {naa}, Cr = {cr} }}\n")


@pytest.fixture(scope="module")
def phantom_basis(tmp_path_factory: pytest.TempPathFactory):
    old = os.environ.get("SPECPROC_CACHE_DIR")
    os.environ["SPECPROC_CACHE_DIR"] = str(tmp_path_factory.mktemp("phantom-cache"))
    try:
        yield simulate_basis(sequence="press", field_t=3.0, te_s=0.08, dwell_s=5e-4,
                             n_points=1024, metabolites=["NAA", "Cr"])
    finally:
        if old is None:
            os.environ.pop("SPECPROC_CACHE_DIR", None)
        else:
            os.environ["SPECPROC_CACHE_DIR"] = old


@pytest.fixture(scope="module")
def phantom_files(phantom_basis, tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("phantoms")
    rng = np.random.default_rng(424242)
    for k, (label, naa, cr, temp) in enumerate(PHANTOMS, start=1):
        water_ppm = water_shift_at(temp)
        stem = f"sub-phantom_ses-{k:02d}_acq-{label}"
        save(synthetic_scan(phantom_basis, {"NAA": naa, "Cr": cr}, lw_hz=3.0, noise_sd=0.05,
                            residual_water=20.0, water_ppm=water_ppm, rng=rng),
             root / f"{stem}_svs.nii.gz")
        # the water signal of the solution: 2 protons x 55 510 mM on the same scale
        save(synthetic_water(phantom_basis, amplitude=2 * WATER_MOLAR_MM, shift_ppm=water_ppm,
                             lw_hz=3.0, rng=rng), root / f"{stem}_mrsref.nii.gz")
    blocks = "\n".join(_phantom_block(*p) for p in PHANTOMS)
    (root / "nominal.toml").write_text(NOMINAL.format(phantoms=blocks), "utf-8")
    (root / "fast.toml").write_text(FAST_CONFIG, "utf-8")
    return root


def test_temperature_formula_hand_values() -> None:
    # Δ = 4.65 - 2.008 = 2.642 ppm is 37 °C by construction; +0.1 ppm is 10 °C colder with
    # k = -0.01 ppm/°C (Hindman 1966, from memory)
    assert temperature_from_shifts(4.65, 2.008) == pytest.approx(37.0)
    assert temperature_from_shifts(4.75, 2.008) == pytest.approx(27.0)
    assert temperature_from_shifts(4.70, 2.058) == pytest.approx(37.0)  # only Δ matters
    # a user calibration: k = -0.0103 ppm/K (Hindman's value, from memory)
    th = Thermometry(coefficient_ppm_per_c=-0.0103)
    assert temperature_from_shifts(water_shift_at(25.0, thermometry=th), 2.008,
                                   thermometry=th) == pytest.approx(25.0)


def test_phantom_cli_recovery_linearity_temperature(phantom_files: Path,
                                                    tmp_path: Path) -> None:
    scans = sorted(str(p) for p in phantom_files.glob("*_svs.nii.gz"))
    out = tmp_path / "qa"
    result = CliRunner().invoke(main, ["phantom", *scans, "--nominal",
                                       str(phantom_files / "nominal.toml"), "--config",
                                       str(phantom_files / "fast.toml"), "-o", str(out)])
    assert result.exit_code == 0, result.output
    with open(out / "phantom_qa.tsv", encoding="utf-8") as handle:
        qa = list(csv.DictReader(handle, delimiter="\t"))
    assert [r["session"] for r in qa] == ["01", "02", "03"]
    for row, (_, _, _, temp) in zip(qa, PHANTOMS, strict=True):
        assert abs(float(row["temperature_c"]) - temp) < 1.0
        assert float(row["temperature_nominal_c"]) == temp
        assert float(row["snr"]) > 10
    with open(out / "phantom_recovery.tsv", encoding="utf-8") as handle:
        recovery = list(csv.DictReader(handle, delimiter="\t"))
    assert len(recovery) == 6
    for row in recovery:
        assert float(row["recovery_percent"]) == pytest.approx(100.0, abs=5.0)
    with open(out / "phantom_linearity.tsv", encoding="utf-8") as handle:
        lin = {r["compound"]: r for r in csv.DictReader(handle, delimiter="\t")}
    for name in ("NAA", "Cr"):
        assert float(lin[name]["slope"]) == pytest.approx(1.0, abs=0.05)
        assert float(lin[name]["r_squared"]) > 0.995
        assert lin[name]["n"] == "3"
    check_phantom_page(out, recovery, lin, tmp_path)


def check_phantom_page(out: Path, recovery: list[dict[str, str]],
                       lin: dict[str, dict[str, str]], tmp_path: Path) -> None:
    """The phantom report as headless Chromium builds it agrees with the TSV tables."""
    from _browser import dump_dom, tables

    page = tables(dump_dom(out / "phantom_report.html", tmp_path / "profile"))
    heading, *rows = page["recovery-table"]
    assert heading[:6] == ["scan", "session", "compound", "nominal (mM)", "measured (mM)",
                           "recovery (%)"]
    assert len(rows) == len(recovery)
    for shown, row in zip(rows, recovery, strict=True):
        assert shown[2] == row["compound"]
        for cell, column in ((shown[4], "measured_mm"), (shown[5], "recovery_percent")):
            assert float(cell) == pytest.approx(float(row[column]), rel=6e-3)
    _, *lin_rows = page["linearity-table"]
    for shown in lin_rows:
        assert float(shown[3]) == pytest.approx(float(lin[shown[0]]["r_squared"]), rel=1e-3)
    _, *temps = page["temperature-table"]
    assert len(temps) == 3 and all("±" in row[2] for row in temps)
    html = (out / "phantom_report.html").read_text("utf-8")
    assert "not a medical device" in html and "<script" not in html
    assert html.count("<svg") >= 1 + 2 + 3  # recovery, two linearity panels, three trends


def test_implausible_recovery_names_the_water_content(phantom_files: Path,
                                                      phantom_basis) -> None:
    # the solution is pure water (55 510 mM); a nominal file saying 2 % of it makes every
    # measured concentration 50 times too small: a recovery of about 2 %
    text = 'reference = "water"\nwater_mm = 1110.2\n' + _phantom_block("low", 5.0, 4.0, 21.0)
    (phantom_files / "wrong_water.toml").write_text(text, "utf-8")
    scan = next(phantom_files.glob("*low*_svs.nii.gz"))
    m = analyse_phantom(scan, load_nominal(phantom_files / "wrong_water.toml"),
                        water_path=str(scan).replace("_svs", "_mrsref"),
                        config={"preprocess": {"water_removal": {"enabled": False}}},
                        basis=phantom_basis)
    assert m.recovery_percent["NAA"] == pytest.approx(2.0, rel=0.1)
    warning = [n for n in m.notes if n.startswith("Implausible recovery")]
    assert len(warning) == 1 and "water_mm = 1110.2 mM" in warning[0]


def test_temperature_without_water_reference_uses_residual_water(phantom_files: Path,
                                                                 phantom_basis) -> None:
    text = 'reference = "Cr"\n' + _phantom_block("high", 15.0, 12.0, 41.0)
    (phantom_files / "internal.toml").write_text(text, "utf-8")
    nominal = load_nominal(phantom_files / "internal.toml")
    scan = next(phantom_files.glob("*high*_svs.nii.gz"))
    m = analyse_phantom(scan, nominal, config={"preprocess": {"water_removal":
                                                              {"enabled": False}}},
                        basis=phantom_basis)
    assert abs(m.temperature_c - 41.0) < 1.0
    assert m.recovery_percent["Cr"] == pytest.approx(100.0)  # the internal reference
    assert m.recovery_percent["NAA"] == pytest.approx(100.0, abs=5.0)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ('reference = "water"\n', "needs a concentrations_mm table"),
        ('reference = "Lac"\nconcentrations_mm = { NAA = 5.0 }\n', "reference compound Lac"),
        ("concentrations_mm = { NAA = -1.0 }\n", "must be a positive number"),
        ("concentrations_mm = { NAA = 1.0 }\ncolour = 3\n", "unknown key"),
        ("concentrations_mm = { NAA = 1.0 }\n[thermometry]\nslope = 1\n", "thermometry key"),
    ],
)
def test_nominal_file_errors(tmp_path: Path, text: str, match: str) -> None:
    path = tmp_path / "nominal.toml"
    path.write_text(text, "utf-8")
    with pytest.raises(InvalidInputError, match=match):
        load_nominal(path)
