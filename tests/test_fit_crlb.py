"""Cramér-Rao bounds of the fit (specproc.fit.crlb) checked against closed forms.

Sources: Kay SM, Fundamentals of Statistical Signal Processing vol. 1: Estimation Theory, 1993
(ch. 3-4: the bound of a linear model, var(â) = σ² / Σ|s_n|² for a real amplitude in complex
white noise of variance σ² per real component); Cavassila et al., NMR Biomed 2001;14:278-283
(bounds of the full model, variances of sums including covariances); linear algebra
(inverse of a regular matrix, numpy.linalg.inv).
"""

from __future__ import annotations

import numpy as np
import pytest

from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.fit import fit_spectrum
from specproc.fit.crlb import combine_sums, covariance_from_fisher, estimate_noise_sd

MHZ = 123.2
CENTRE = 4.65
#: The classical model of the closed forms: no per-member width deviations or expected widths.
CLASSICAL = {"damping_sd_hz": 0.0, "width_prior": "none"}


def _line(t: np.ndarray, ppm: float) -> np.ndarray:
    # NIfTI-MRS convention: exp(-2πi (δ - centre) MHz t)
    return np.exp(-2j * np.pi * (ppm - CENTRE) * MHZ * t)


def _single_line_case(n=1024, dwell=1e-3, alpha=20.0, amp=5.0, sigma=0.05, seed=3):
    t = np.arange(n) * dwell
    basis = BasisSet(names=("S",), fids=_line(t, 2.0)[None, :], dwell_s=dwell,
                     spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    rng = np.random.default_rng(seed)
    noise = sigma * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    fid = amp * basis.fids[0] * np.exp(-alpha * t) * np.exp(0.7j) + noise
    scan = Scan(fid, dwell_s=dwell, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    return scan, basis, t


@pytest.mark.parametrize("fixed", [
    ["damping", "gauss", "phase1"],                    # phase0 and frequency free
    ["damping", "gauss", "phase1", "phase0", "shift"],  # everything nonlinear held
])
def test_single_damped_exponential_matches_kay_closed_form(fixed):
    # Kay 1993, linear model: var(â) = σ² / Σ_n exp(-2 α t_n) for s_n = exp((-α + iω) t_n),
    # σ² the variance of each real component. With the amplitude real and the phase and
    # frequency free, the Fisher cross terms of the amplitude with φ0 and with the frequency are
    # exactly zero (Parseval), so the amplitude bound is the same closed form.
    alpha, sigma, n = 20.0, 0.05, 1024
    scan, basis, t = _single_line_case(n=n, alpha=alpha, sigma=sigma)
    ppm = scan.ppm()
    config = {
        "range_ppm": [float(ppm.min()), float(ppm.max())], "baseline": False,
        "fixed": fixed, "shift_sd_hz": 0.0, **CLASSICAL, "start_lorentz_hz": alpha / np.pi,
        "start_gauss_hz": 0.0,
        # spectral noise SD per component: sqrt(N)·σ for the unnormalised DFT (Parseval)
        "noise_sd": sigma * np.sqrt(n),
    }
    res = fit_spectrum(scan, basis, config=config)
    expected = sigma / np.sqrt(np.sum(np.exp(-2 * alpha * t)))
    assert res.crlb_sd[0] == pytest.approx(expected, rel=1e-9)
    assert not res.flags


def test_measured_noise_sd_matches_the_added_noise():
    # White noise of SD σ per time-domain component gives σ·sqrt(N) per spectral component
    # (Parseval's theorem for numpy's unnormalised DFT).
    sigma, n = 0.05, 1024
    scan, _, _ = _single_line_case(n=n, sigma=sigma)
    sd, used = estimate_noise_sd(scan, [(-3.0, -0.5), (9.5, 12.0)])
    assert used  # fell back to the spectrum edges (regions outside this narrow spectrum)
    assert sd == pytest.approx(sigma * np.sqrt(n), rel=0.08)


def test_covariance_of_regular_fisher_is_its_inverse():
    rng = np.random.default_rng(0)
    a = rng.standard_normal((40, 6))
    fisher = a.T @ a
    cov, bad = covariance_from_fisher(fisher)
    assert not bad.any()
    np.testing.assert_allclose(cov, np.linalg.inv(fisher), rtol=1e-9, atol=1e-12)


def test_singular_fisher_gives_nan_only_where_not_identifiable():
    rng = np.random.default_rng(1)
    a = rng.standard_normal((40, 4))
    a = np.column_stack([a, a[:, 1]])  # parameter 4 duplicates parameter 1
    cov, bad = covariance_from_fisher(a.T @ a)
    assert bad.tolist() == [False, True, False, False, True]
    assert np.isnan(cov[1, 1]) and np.isnan(cov[4, 4])
    # the others equal the inverse of the Fisher matrix without the duplicate column
    # (the duplicate only adds a direction along which parameters 1 and 4 trade off)
    keep = [0, 2, 3]
    ref = np.linalg.inv(a[:, :4].T @ a[:, :4])
    assert np.all(np.isfinite(cov[np.ix_(keep, keep)]))
    np.testing.assert_allclose(np.diag(cov)[keep], np.diag(ref)[keep], rtol=1e-6)


def test_combined_sum_variance_includes_covariance():
    # var(a + b) = var a + var b + 2 cov(a, b)
    names = ("Cr", "PCr", "NAA")
    amps = np.array([4.0, 3.0, 10.0])
    cov = np.array([[0.04, -0.03, 0.0], [-0.03, 0.05, 0.0], [0.0, 0.0, 0.1]])
    sums = combine_sums(names, amps, cov)
    assert sums["tCr"]["amplitude"] == pytest.approx(7.0)
    assert sums["tCr"]["crlb_sd"] == pytest.approx(np.sqrt(0.04 + 0.05 - 0.06))
    assert sums["tNAA"]["components"] == ["NAA"]
    assert "tCho" not in sums and "Glx" not in sums


def test_fit_with_duplicate_members_flags_singular_fisher_without_crashing():
    n, dwell = 512, 1e-3
    t = np.arange(n) * dwell
    naa = 3 * _line(t, 2.008)
    cr = 3 * _line(t, 3.027) + 2 * _line(t, 3.92)
    basis = BasisSet(names=("NAA", "Copy", "Cr"), fids=np.stack([naa, naa, cr]),
                     dwell_s=dwell, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    rng = np.random.default_rng(5)
    fid = (2 * naa + cr) * np.exp(-15 * t) + 0.02 * (rng.standard_normal(n)
                                                      + 1j * rng.standard_normal(n))
    scan = Scan(fid, dwell_s=dwell, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    # without per-member shift deviations the two copies have identical model columns
    res = fit_spectrum(scan, basis, config={"baseline": False, "range_ppm": [1.0, 4.2],
                                            "shift_sd_hz": 0.0, **CLASSICAL})
    assert "fisher_singular" in res.flags
    assert np.isnan(res.crlb_sd[0]) and np.isnan(res.crlb_sd[1])
    assert np.isfinite(res.crlb_sd[2])
    assert not res.success
    # the sum of the two copies is still determined by the data
    assert res.amplitudes[0] + res.amplitudes[1] == pytest.approx(2.0, rel=0.02)


def test_zero_filled_data_are_flagged_because_the_bound_is_too_small():
    # Zero filling by 2 correlates neighbouring spectral points; JᵀJ/s² counts them as
    # independent, so the bound drops by about √2 below the Kay 1993 closed form
    # σ / sqrt(Σ exp(-2αt)) of the measured points. Such a fit must carry a flag.
    alpha, sigma, n = 20.0, 0.05, 1024
    scan, _, t = _single_line_case(n=n, alpha=alpha, sigma=sigma)
    filled = Scan(np.concatenate([scan.data, np.zeros(n, complex)]), dwell_s=1e-3,
                  spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    t2 = np.arange(2 * n) * 1e-3
    basis = BasisSet(names=("S",), fids=_line(t2, 2.0)[None, :], dwell_s=1e-3,
                     spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    ppm = filled.ppm()
    config = {"range_ppm": [float(ppm.min()), float(ppm.max())], "baseline": False,
              "fixed": ["damping", "gauss", "phase1", "phase0", "shift"], "shift_sd_hz": 0.0,
              **CLASSICAL,
              "start_lorentz_hz": alpha / np.pi, "start_gauss_hz": 0.0,
              # spectral noise SD per component, the same with or without the added zeros
              # (Parseval: sqrt(N)·σ over the N measured points)
              "noise_sd": sigma * np.sqrt(n)}
    res = fit_spectrum(filled, basis, config=config)
    kay = sigma / np.sqrt(np.sum(np.exp(-2 * alpha * t)))
    assert res.crlb_sd[0] < 0.8 * kay  # the too-small bound the flag warns about
    assert "zero_filled_data" in res.flags
    ppm1 = scan.ppm()
    plain = fit_spectrum(scan, basis_for(scan),
                         config={**config, "range_ppm": [float(ppm1.min()), float(ppm1.max())]})
    assert plain.crlb_sd[0] == pytest.approx(kay, rel=1e-9)
    assert "zero_filled_data" not in plain.flags


def basis_for(scan):
    t = np.arange(scan.n_points) * scan.dwell_s
    return BasisSet(names=("S",), fids=_line(t, 2.0)[None, :], dwell_s=scan.dwell_s,
                    spectrometer_mhz=MHZ, centre_ppm=CENTRE)


def test_fit_and_quantification_sum_the_same_members_whatever_the_case():
    # issue 12: with a member spelled "pcr" the fit reported tCr 8.0 and the quantification
    # 5.0. Both now take the members of each sum from specproc.sums.sum_members.
    from specproc.quantify import combine_linear

    names = ("Cr", "pcr", "NAA")
    amps = np.array([5.0, 3.0, 10.0])
    cov = np.eye(3) * 0.01
    fit_sums = combine_sums(names, amps, cov)
    quant_sums = combine_linear(amps, cov, names=names)
    assert fit_sums["tCr"]["amplitude"] == pytest.approx(8.0)
    assert quant_sums["tCr"][0] == pytest.approx(8.0)
    assert fit_sums["tCr"]["components"] == list(quant_sums["tCr"][2]) == ["Cr", "pcr"]
    sums = combine_sums(("GPC", "Cho"), np.array([1.0, 0.5]), np.eye(2) * 0.01)
    assert sums["tCho"]["components"] == ["GPC", "Cho"]
    # a member named like a sum is kept as fitted, by both
    assert "tCr" not in combine_sums(("tcr", "Cr"), amps[:2], cov[:2, :2])
    assert "tCr" not in combine_linear(amps[:2], cov[:2, :2], names=("tcr", "Cr"))


def test_apodized_data_are_flagged():
    # exponential apodization multiplies the noise by exp(-π L t): coloured spectral noise, so
    # the independent-points Fisher matrix no longer describes it (Kay 1993, ch. 3)
    from specproc.preprocess.apodize import apodize_scan

    scan, basis, _ = _single_line_case(n=512)
    config = {"baseline": False, "range_ppm": [1.0, 4.2]}
    assert "apodized_data" not in fit_spectrum(scan, basis, config=config).flags
    smooth = apodize_scan(scan, kind="exponential", lw_hz=2.0)
    assert "apodized_data" in fit_spectrum(smooth, basis, config=config).flags
