"""specproc.analysis: the water amplitude measurement, settings resolution, a ratios-only run."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest

from specproc._versions import software_versions
from specproc.analysis import ScanResult, analyse_scan, resolve_config, write_scan_outputs
from specproc.basis import BasisSet
from specproc.config import load_config
from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io import save
from specproc.quantify import NO_WATER_STATEMENT, water_amplitude

MHZ = larmor_mhz(3.0)
DWELL = 5e-4
N = 1024


def _voigt_fid(amplitude: float, lorentz_hz: float, gauss_hz: float, offset_hz: float = 3.0,
               phase: float = 0.7) -> np.ndarray:
    t = np.arange(N) * DWELL
    decay = np.exp(-np.pi * lorentz_hz * t - (np.pi * gauss_hz * t) ** 2 / (4 * math.log(2)))
    return amplitude * decay * np.exp(1j * phase + 2j * np.pi * offset_hz * t)


@pytest.mark.parametrize(("lorentz", "gauss"), [(4.0, 0.0), (2.0, 5.0), (6.0, 3.0)])
def test_water_amplitude_recovers_a_voigt_decay(lorentz: float, gauss: float) -> None:
    """Analytic check: for w(t) = S exp(-π Γ_L t - (π Γ_G t)²/(4 ln 2)) the fit of ln|w| is
    exact, so S, Γ_L and Γ_G come back (Voigt decay: Lorentzian × Gaussian, textbook)."""
    water = Scan(_voigt_fid(5.0e4, lorentz, gauss), dwell_s=DWELL, spectrometer_mhz=MHZ)
    amp, sd, details = water_amplitude(water)
    assert amp == pytest.approx(5.0e4, rel=1e-9)
    assert sd < 1e-6 * amp
    assert details["lorentz_fwhm_hz"] == pytest.approx(lorentz, abs=1e-6)
    assert details["gauss_fwhm_hz"] == pytest.approx(gauss, abs=1e-4)


def test_water_amplitude_of_a_non_voigt_water_line_is_its_value_at_t0() -> None:
    """Analytic check: a water FID that is a sum of exponentials, w(t) = Σ a_k exp(-t/T2_k +
    2πi f_k t) (times a shared Gaussian), equals Σ a_k at t = 0 (the area of its spectrum,
    Fourier integral theorem; textbook). Here GM, WM and CSF water (T2 0.099, 0.069, 2.1 s:
    Stanisz et al. 2005, from memory, and the checked CSF value of the relaxation table) in
    three sub-voxel parts 9 Hz apart, whose beating makes |w(t)| far from a Voigt decay. The
    fit over the first half-decay recovers the sum; fitted down to 5 % of the maximum over
    150 ms (the former setting) it comes out about 12 % high."""
    t = np.arange(2048) * DWELL
    fid = np.zeros(t.size, dtype=complex)
    for amplitude, t2_s in ((0.45, 0.099), (0.35, 0.069), (0.20, 2.1)):
        for share, freq_hz in ((0.5, -3.0), (0.3, 2.0), (0.2, 6.0)):
            fid += amplitude * share * np.exp(-t / t2_s + 2j * np.pi * freq_hz * t)
    fid *= 1.0e4 * np.exp(-(np.pi * 3.0 * t) ** 2 / (4 * math.log(2)))
    water = Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ)
    amp, _, _ = water_amplitude(water)
    assert amp == pytest.approx(1.0e4, rel=0.005)
    former, _, _ = water_amplitude(water, min_fraction=0.05)
    assert former > 1.05e4


def test_water_amplitude_with_noise_is_unbiased_within_its_sd() -> None:
    rng = np.random.default_rng(7)
    fid = _voigt_fid(1.0e4, 5.0, 3.0)
    estimates, sds = [], []
    for _ in range(40):
        noisy = fid + rng.normal(0, 20.0, N) + 1j * rng.normal(0, 20.0, N)
        amp, sd, _ = water_amplitude(Scan(noisy, dwell_s=DWELL, spectrometer_mhz=MHZ))
        estimates.append(amp)
        sds.append(sd)
    estimates = np.array(estimates)
    # the reported SD describes the scatter (within a factor of 2: 40 repeats)
    assert 0.5 < np.mean(sds) / estimates.std(ddof=1) < 2.0
    # mean within 4 standard errors of the true value; spread well below 1 %
    assert abs(estimates.mean() - 1.0e4) < 4 * estimates.std(ddof=1) / np.sqrt(40)
    assert estimates.std(ddof=1) < 0.01 * 1.0e4


def test_water_amplitude_rejects_unaveraged_or_empty_water() -> None:
    stacked = Scan(np.stack([_voigt_fid(1.0, 4, 0)] * 2), dwell_s=DWELL, spectrometer_mhz=MHZ,
                   dims=("DIM_DYN",))
    with pytest.raises(InvalidInputError, match="averaged"):
        water_amplitude(stacked)
    fast = Scan(_voigt_fid(1.0, 3000.0, 0.0), dwell_s=DWELL, spectrometer_mhz=MHZ)
    with pytest.raises(InvalidInputError, match="decays too fast"):
        water_amplitude(fast)


def test_resolve_config_sources(tmp_path: Path) -> None:
    cfg, source = resolve_config(None)
    assert cfg == load_config(None) and source == "bundled defaults"
    user = tmp_path / "user.toml"
    user.write_text("[fit]\nbaseline_knot_ppm = 0.5\n", encoding="utf-8")
    cfg, source = resolve_config(user)
    assert cfg["fit"]["baseline_knot_ppm"] == 0.5 and user.name in source
    cfg, _ = resolve_config({"fit": {"range_ppm": [0.5, 4.0]}})
    assert cfg["fit"]["range_ppm"] == [0.5, 4.0]
    with pytest.raises(InvalidInputError):
        resolve_config({"fit": {"no_such_key": 1}})
    with pytest.raises(InvalidInputError):
        resolve_config(3)


def test_software_versions_lists_the_libraries() -> None:
    versions = software_versions()
    assert {"python", "specproc", "numpy", "scipy", "matplotlib"} <= set(versions)


def _singlet_basis() -> BasisSet:
    t = np.arange(N) * DWELL

    def line(ppm: float, protons: float) -> np.ndarray:
        return protons * np.exp(-2j * np.pi * (ppm - 4.65) * MHZ * t)

    return BasisSet(names=("NAA", "Cr", "PCh"),
                    fids=np.stack([line(2.008, 3), line(3.027, 3), line(3.21, 9)]),
                    dwell_s=DWELL, spectrometer_mhz=MHZ, protons=(3, 3, 9))


def test_averaged_scan_without_water_gives_ratios_only(tmp_path: Path) -> None:
    """An averaged FID of three singlets: NAA/Cr = 1.5 and PCh/Cr = 0.25 molecules."""
    rng = np.random.default_rng(11)
    basis = _singlet_basis()
    t = np.arange(N) * DWELL
    fid = (1.5 * basis.fids[0] + 1.0 * basis.fids[1] + 0.25 * basis.fids[2]) * np.exp(
        -np.pi * 4.0 * t)
    fid = fid + rng.normal(0, 0.05, N) + 1j * rng.normal(0, 0.05, N)
    scan = Scan(fid.astype(np.complex64), dwell_s=DWELL, spectrometer_mhz=MHZ, te_s=0.03,
                tr_s=2.0, sequence="press", protocol="three singlets")
    save(scan, tmp_path / "avg.nii.gz")
    result = analyse_scan(tmp_path / "avg.nii.gz", basis=basis,
                          config={"preprocess": {"water_removal": {"enabled": False}}})
    assert isinstance(result, ScanResult)
    assert result.quantification.statement == NO_WATER_STATEMENT
    assert result.conc_mm is None and not result.water_referenced
    assert result.quantification.ratios["NAA"] == pytest.approx(1.5, rel=0.02)
    assert result.quantification.ratios["PCh"] == pytest.approx(0.25, rel=0.05)
    assert result.title == "avg"
    text = repr(result)
    assert text.startswith("ScanResult('avg'") and len(text) < 400
    # compact reprs of the parts too (printing them used to write 100 KB)
    assert len(repr(result.fit)) < 300 and repr(result.fit).startswith("FitResult(NAA=")
    assert len(repr(basis)) < 300 and "3 members [NAA, Cr, PCh]" in repr(basis)
    assert "<table>" in result._repr_html_()
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.title = "other"  # type: ignore[misc]
    files = write_scan_outputs(result, tmp_path / "out")
    assert set(files) >= {"results", "json", "config", "figure_png", "report"}
    doc = json.loads((tmp_path / "out" / "fit.json").read_text(encoding="utf-8"))
    assert doc["quantification"]["ratios"]["NAA"] == pytest.approx(1.5, rel=0.02)
    assert doc["protocol"] is None and doc["basis"]["origin"] == "given by the caller"
    assert doc["inputs"]["scan"]["path"] == "avg.nii.gz"
    assert (tmp_path / "out" / "report.html").is_file()
