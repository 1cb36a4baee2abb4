"""Tests of specproc.qc: SNR, linewidth, residual ratio, transient summary and flags.

Sources named beside each check:
* Textbook NMR: a decaying exponential exp(-t/T2*) has a Lorentzian spectrum whose absorption
  (real, phased) FWHM is 1/(π T2*) Hz and whose magnitude FWHM is √3/(π T2*) Hz.
* Textbook DFT (Parseval): complex white noise of SD σ per component in N time samples gives a
  real spectral part of SD σ·√N with the unnormalised numpy FFT; a sampled exponential of
  amplitude A has peak height A·T2*/dwell (first point halved, the standard correction of the
  discrete transform's constant offset; e.g. Otting et al., J Magn Reson 1986;66:187-193, from
  memory).
* Thresholds: common practice (SNR < 10, NAA FWHM > 0.1 ppm at 3 T, CRLB > 20 %, residual/noise >
  1.5, drift range > 5 Hz).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.qc import (
    QCThresholds,
    evaluate_flags,
    linewidth,
    noise_sd,
    peak_height,
    qc_from_scan,
    qc_report,
    residual_ratio,
    snr,
    transient_summary,
)

MHZ = 123.2  # 3 T-like spectrometer frequency, MHz
SW = 2000.0  # spectral width, Hz
N = 2048  # points (realistic single-voxel acquisition: 1.02 s)
DWELL = 1.0 / SW
CENTRE = 4.65


def _fid(shift_ppm: float, t2_s: float, *, amplitude: float = 1.0, phase: float = 0.0,
         n: int = N) -> np.ndarray:
    """Singlet in the NIfTI-MRS convention: exp(-2πi (δ - centre)·MHz·t - t/T2*)."""
    t = np.arange(n) * DWELL
    fid = amplitude * np.exp(1j * phase - 2j * np.pi * (shift_ppm - CENTRE) * MHZ * t - t / t2_s)
    fid[0] *= 0.5  # first point halved: removes the DFT's constant offset (textbook)
    return fid


def _spectrum(fid: np.ndarray, n: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    n = fid.size if n is None else n
    spec = np.fft.fftshift(np.fft.fft(fid, n))
    ppm = CENTRE - np.fft.fftshift(np.fft.fftfreq(n, DWELL)) / MHZ
    return ppm, spec


# ---------------------------------------------------------------------- linewidth
@pytest.mark.parametrize("t2_s", [0.03, 0.05, 0.08])
@pytest.mark.parametrize("shift_ppm", [2.008, 2.0123])
def test_fwhm_of_lorentzian_matches_one_over_pi_t2(t2_s, shift_ppm):
    # textbook: absorption FWHM = 1/(π T2*); magnitude FWHM = √3/(π T2*)
    ppm, spec = _spectrum(_fid(shift_ppm, t2_s), 2 * N)  # zero-filled x2 as qc_from_scan does
    expected = 1.0 / (math.pi * t2_s)
    hz, in_ppm = linewidth(ppm, spec, spectrometer_mhz=MHZ, centre_ppm=shift_ppm)
    assert hz == pytest.approx(expected, rel=0.01)
    assert in_ppm == pytest.approx(expected / MHZ, rel=0.01)
    hz_mag, _ = linewidth(ppm, spec, spectrometer_mhz=MHZ, centre_ppm=shift_ppm, part="magnitude")
    assert hz_mag == pytest.approx(math.sqrt(3.0) * expected, rel=0.01)


@pytest.mark.parametrize("t2_s", [0.03, 0.05])
def test_fwhm_without_zero_filling_at_in_vivo_linewidths(t2_s):
    # 6-11 Hz lines at 0.98 Hz per point (no zero filling) are still within 1 %
    ppm, spec = _spectrum(_fid(2.008, t2_s))
    hz, _ = linewidth(ppm, spec, spectrometer_mhz=MHZ)
    assert hz == pytest.approx(1.0 / (math.pi * t2_s), rel=0.01)


def test_fwhm_of_sampled_analytic_lorentzian_on_increasing_axis():
    # absorption Lorentzian L(ν) = γ² / (γ² + (ν - ν0)²), FWHM = 2γ; axis in increasing ppm
    gamma_hz = 3.1
    ppm = np.linspace(1.0, 3.0, 2001)  # 0.123 Hz per point
    nu = (ppm - 2.008) * MHZ
    spec = gamma_hz**2 / (gamma_hz**2 + nu**2) + 0j
    hz, _ = linewidth(ppm, spec, spectrometer_mhz=MHZ)
    assert hz == pytest.approx(2 * gamma_hz, rel=0.001)
    height, pos = peak_height(ppm, spec)
    assert height == pytest.approx(1.0, rel=1e-6)
    assert pos == pytest.approx(2.008, abs=1e-6)


def test_water_linewidth_from_scan_with_phase_error():
    scan = Scan(_fid(2.008, 0.05, amplitude=10.0), DWELL, MHZ, centre_ppm=CENTRE)
    water = Scan(_fid(4.65, 0.04, amplitude=1e4, phase=0.7), DWELL, MHZ, centre_ppm=CENTRE)
    report = qc_from_scan(scan, water=water)
    # the helper zero-order phases the water peak: real FWHM = 1/(π·0.04 s) = 7.96 Hz
    assert report.water_fwhm_hz == pytest.approx(1.0 / (math.pi * 0.04), rel=0.01)
    assert report.naa_fwhm_hz == pytest.approx(1.0 / (math.pi * 0.05), rel=0.01)
    assert report.naa_fwhm_ppm == pytest.approx(report.naa_fwhm_hz / MHZ)


# ---------------------------------------------------------------------- SNR and noise
@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_snr_of_synthetic_peak_with_known_height_and_noise(seed):
    rng = np.random.default_rng(seed)
    ppm = np.linspace(12.0, -3.0, 4096)  # 0.45 Hz per point
    nu = (ppm - 2.008) * MHZ
    height, gamma, sigma = 50.0, 3.0, 1.5
    clean = height * gamma**2 / (gamma**2 + nu**2)
    spec = clean + rng.normal(0, sigma, ppm.size) + 1j * rng.normal(0, sigma, ppm.size)
    # known SNR = 50 / 1.5 = 33.3; within 10 % (noise SD from ~550 points, peak top noisy)
    assert snr(ppm, spec) == pytest.approx(height / sigma, rel=0.10)
    assert noise_sd(ppm, spec) == pytest.approx(sigma, rel=0.10)


def test_snr_from_scan_matches_parseval():
    # time-domain noise σ_t per component -> spectral SD σ_t·√N; height = A·T2*/dwell
    amplitude, t2_s, sigma_t = 1.0, 0.06, 0.02
    expected = (amplitude * t2_s / DWELL) / (sigma_t * math.sqrt(N))
    values = []
    for seed in range(4):
        rng = np.random.default_rng(100 + seed)
        noise = rng.normal(0, sigma_t, N) + 1j * rng.normal(0, sigma_t, N)
        scan = Scan(_fid(2.008, t2_s, amplitude=amplitude) + noise, DWELL, MHZ, centre_ppm=CENTRE)
        values.append(qc_from_scan(scan).snr)
    for v in values:
        assert v == pytest.approx(expected, rel=0.10)
    assert np.mean(values) == pytest.approx(expected, rel=0.05)


def test_noise_sd_removes_a_linear_baseline():
    rng = np.random.default_rng(7)
    ppm = np.linspace(10, -3, 3000)
    noise = rng.normal(0, 2.0, ppm.size) + 0j
    sloped = noise + 30.0 * ppm  # a steep linear baseline
    assert noise_sd(ppm, sloped) == pytest.approx(noise_sd(ppm, noise), rel=1e-9)
    assert noise_sd(ppm, sloped, detrend_linear=False) > 5 * noise_sd(ppm, noise)
    with pytest.raises(InvalidInputError, match="noise region"):
        noise_sd(ppm, noise, region_ppm=(20.0, 21.0))


def test_linear_baseline_option_removes_a_sloped_offset():
    ppm = np.linspace(4.0, 0.0, 4001)
    nu = (ppm - 2.008) * MHZ
    # Gaussian peak of height 10 (negligible beyond 12 Hz) on the baseline 3 + 0.5·ppm
    spec = 10.0 * np.exp(-0.5 * (nu / 2.0) ** 2) + 3.0 + 0.5 * ppm + 0j
    assert peak_height(ppm, spec)[0] == pytest.approx(10.0 + 3.0 + 0.5 * 2.008, rel=1e-3)
    # the straight line through the two flanking windows is the baseline itself
    assert peak_height(ppm, spec, baseline="linear")[0] == pytest.approx(10.0, rel=1e-3)


# ---------------------------------------------------------------------- residual, transients
def test_residual_ratio_of_pure_noise_is_one():
    rng = np.random.default_rng(11)
    ppm = np.linspace(10, -3, 6000)
    residual = rng.normal(0, 2.0, ppm.size) + 1j * rng.normal(0, 2.0, ppm.size)
    assert residual_ratio(ppm, residual, noise_sd=2.0) == pytest.approx(1.0, rel=0.05)
    assert residual_ratio(ppm, 3 * residual, noise_sd=2.0) == pytest.approx(3.0, rel=0.05)
    with pytest.raises(InvalidInputError):
        residual_ratio(ppm, residual, noise_sd=0.0)


def test_transient_summary_counts_and_drift_range():
    s = transient_summary([0.0, 1.5, -2.0, 3.0, 40.0], [True, True, True, True, False])
    assert s == {"n_transients": 5, "n_rejected": 1, "drift_range_hz": 5.0}  # 3 - (-2)
    assert transient_summary([1.0, 4.0])["drift_range_hz"] == 3.0
    assert transient_summary(kept=[True, False, False])["n_rejected"] == 2
    assert transient_summary()["n_transients"] is None
    with pytest.raises(InvalidInputError):
        transient_summary([1.0, 2.0], [True])


# ---------------------------------------------------------------------- flags
@pytest.mark.parametrize(
    ("metric", "below", "at", "beyond"),
    [
        ("snr", 9.99, 10.0, None),  # flag when < 10 (common practice)
        ("naa_fwhm_ppm", None, 0.1, 0.1001),  # flag when > 0.1 ppm at 3 T (common practice)
        ("residual_ratio", None, 1.5, 1.51),  # common practice
        ("drift_range_hz", None, 5.0, 5.01),  # common practice
    ],
)
def test_flags_switch_at_the_thresholds(metric, below, at, beyond):
    assert evaluate_flags({metric: at}) == []
    if below is not None:
        flags = evaluate_flags({metric: below})
        assert [f.name for f in flags] == [metric]
        assert flags[0].basis == "common practice"
        assert evaluate_flags({metric: 10.01}) == []
    if beyond is not None:
        flags = evaluate_flags({metric: beyond})
        assert [f.name for f in flags] == [metric]
        assert flags[0].rule == ">"
        assert evaluate_flags({metric: at * 0.9}) == []


def test_crlb_flags_and_custom_thresholds():
    flags = evaluate_flags({"crlb_percent": {"NAA": 3.0, "GABA": 20.5, "Gln": 20.0}})
    assert [f.name for f in flags] == ["crlb:GABA"]  # > 20 % (common practice); 20 % exactly not
    custom = evaluate_flags({"crlb_percent": {"Gln": 20.0}}, {"crlb_percent_max": 15})
    assert [f.name for f in custom] == ["crlb:Gln"] and custom[0].basis == "user"
    assert evaluate_flags({"snr": 1.0}, {"snr_min": None}) == []  # rule switched off
    assert evaluate_flags({"snr": float("nan")}) == []  # not measured: no flag
    rej = evaluate_flags({"n_transients": 64, "n_rejected": 20}, {"rejected_fraction_max": 0.25})
    assert [f.name for f in rej] == ["rejected_fraction"]
    with pytest.raises(InvalidInputError, match="unknown QC threshold"):
        QCThresholds.from_mapping({"snr_minimum": 5})
    with pytest.raises(InvalidInputError):
        QCThresholds.from_mapping({"snr_min": -1})


def test_qc_report_end_to_end_and_json():
    rng = np.random.default_rng(3)
    fid = _fid(2.008, 0.05, amplitude=1.0) + 0.3 * _fid(3.027, 0.05)
    fid = fid + rng.normal(0, 0.05, N) + 1j * rng.normal(0, 0.05, N)
    scan = Scan(fid, DWELL, MHZ, centre_ppm=CENTRE)
    residual = rng.normal(0, 0.05, N) + 1j * rng.normal(0, 0.05, N)
    report = qc_from_scan(
        scan, residual_fid=residual, shifts_hz=np.linspace(-4, 4, 32), kept=[True] * 31 + [False],
        crlb_percent={"NAA": 4.0, "GABA": 35.0},
    )
    names = {f.name for f in report.flags}
    # drift over the 31 kept transients: 4 - 8/31 - (-4) = 7.74 Hz > 5 Hz
    assert report.drift_range_hz == pytest.approx(8.0 - 8.0 / 31.0)
    assert "drift_range_hz" in names and "crlb:GABA" in names
    assert report.n_rejected == 1 and report.n_transients == 32
    assert report.residual_ratio == pytest.approx(1.0, rel=0.1)
    assert report.snr > 10 and "snr" not in names
    assert not report.passed
    d = report.to_dict()
    json.dumps(d, allow_nan=False)
    assert d["settings"]["noise_region_ppm"] == [-2.0, 0.0]
    assert "snr" in d["definitions"] and d["water_fwhm_hz"] is None
    assert any("no water reference" in n for n in d["notes"])


def test_qc_report_without_a_noise_region():
    ppm = np.linspace(4.2, 1.0, 800)
    spec = 1.0 / (1 + ((ppm - 2.008) * MHZ / 3.0) ** 2) + 0j
    report = qc_report(ppm, spec, spectrometer_mhz=MHZ)
    assert math.isnan(report.snr)
    assert any("noise region" in n for n in report.notes)
    assert report.naa_fwhm_hz == pytest.approx(6.0, rel=0.01)


def test_qc_from_scan_rejects_unaveraged_data():
    data = np.stack([_fid(2.008, 0.05)] * 4)
    scan = Scan(data, DWELL, MHZ, dims=("DIM_DYN",), centre_ppm=CENTRE)
    with pytest.raises(InvalidInputError, match="averaged"):
        qc_from_scan(scan)
    with pytest.raises(InvalidInputError, match="does not match"):
        linewidth(np.arange(5.0), np.zeros(4), spectrometer_mhz=MHZ)


def test_docstring_examples_run():
    import doctest

    import specproc.qc

    result = doctest.testmod(specproc.qc)
    assert result.attempted > 0 and result.failed == 0
