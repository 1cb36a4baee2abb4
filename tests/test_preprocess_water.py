"""Residual water removal by HLSVD (Pijnappel et al., J Magn Reson 1992;97:122-134).

Checks against the model the method rests on: a signal that *is* a sum of known damped
sinusoids is decomposed into those components (frequencies within 0.1 Hz, amplitudes within
1 %), and removing the components in the water band leaves a singlet outside it unchanged to
within the noise. The truncated (Lanczos) solver is checked against LAPACK's dense SVD
(scipy.linalg.svd) of the Hankel matrix built by scipy.linalg.hankel: same components to
1e-7 on a brain-like signal whose noise singular values beyond the model order lie close
together (the hard case for a truncated decomposition).
"""

import numpy as np
import pytest
import scipy.linalg

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.water import (
    DampedSinusoids,
    _HankelGram,
    damped_sinusoids_fid,
    hlsvd,
    remove_water,
    remove_water_scan,
)

MHZ, DWELL_S, N, CENTRE = 123.2, 2.5e-4, 2048, 4.65
T = np.arange(N) * DWELL_S

KNOWN = DampedSinusoids(
    freq_hz=np.array([-180.0, -35.0, 0.0, 12.5, 330.0]),
    lw_hz=np.array([6.0, 10.0, 4.0, 15.0, 5.0]),
    amplitude=np.array([1.0, 0.5j, 20.0 * np.exp(0.3j), 3.0, 0.8 * np.exp(-1.0j)]),
)


def matched(found, known_freq):
    return np.array([int(np.argmin(np.abs(found.freq_hz - f))) for f in known_freq])


def test_model_builder_matches_the_formula():
    fid = damped_sinusoids_fid(KNOWN, n_points=N, dwell_s=DWELL_S)
    direct = sum(a * np.exp(2j * np.pi * f * T - np.pi * lw * T) for f, lw, a in
                 zip(KNOWN.freq_hz, KNOWN.lw_hz, KNOWN.amplitude, strict=True))
    np.testing.assert_allclose(fid, direct, atol=1e-12)
    none = DampedSinusoids(np.zeros(0), np.zeros(0), np.zeros(0, complex))
    assert np.array_equal(damped_sinusoids_fid(none, n_points=N, dwell_s=DWELL_S),
                          np.zeros(N, complex))  # an empty sum


@pytest.mark.parametrize("solver", ["lanczos", "full"])
@pytest.mark.parametrize("order, noise", [(5, 0.0), (12, 1e-3)])
def test_hlsvd_recovers_known_damped_sinusoids(order, noise, solver):
    rng = np.random.default_rng(31)
    fid = damped_sinusoids_fid(KNOWN, n_points=N, dwell_s=DWELL_S)
    fid = fid + noise * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    found = hlsvd(fid, dwell_s=DWELL_S, model_order=order, fit_points=1024, solver=solver)
    idx = matched(found, KNOWN.freq_hz)
    # issue 4 tolerances: frequencies within 0.1 Hz, amplitudes within 1 %
    np.testing.assert_allclose(found.freq_hz[idx], KNOWN.freq_hz, atol=0.1)
    np.testing.assert_allclose(np.abs(found.amplitude[idx]), np.abs(KNOWN.amplitude), rtol=0.01)
    np.testing.assert_allclose(found.lw_hz[idx], KNOWN.lw_hz, atol=0.2)


def brain_like_fid(seed):
    """Eleven metabolite-like lines, a three-component residual water and noise (SNR ~ 30)."""
    rng = np.random.default_rng(seed)
    lines = [(2.008, 10, 4), (3.027, 8, 4), (3.2, 6, 4), (3.92, 7, 5), (3.56, 5, 8),
             (2.35, 3, 9), (2.1, 2, 9), (3.75, 3, 10), (1.3, 1, 12), (0.9, 2, 30), (1.4, 2, 30)]
    fid = sum(a * np.exp(-2j * np.pi * (d - CENTRE) * MHZ * T - np.pi * lw * T
                         + 1j * rng.uniform(0, 6)) for d, a, lw in lines)
    water = DampedSinusoids(np.array([-2.0, 6.0, 20.0]), np.array([6.0, 12.0, 25.0]),
                            np.array([300.0, 80.0 * np.exp(1j), 40.0j]))
    fid = fid + damped_sinusoids_fid(water, n_points=N, dwell_s=DWELL_S)
    return fid + 0.3 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))


def test_fft_hankel_product_matches_the_dense_matrix():
    rng = np.random.default_rng(5)
    x = rng.standard_normal(301) + 1j * rng.standard_normal(301)  # odd length, not 2^k
    rows = 140
    hankel = scipy.linalg.hankel(x[:rows], x[rows - 1:])  # reference: scipy.linalg.hankel
    u = rng.standard_normal(rows) + 1j * rng.standard_normal(rows)
    np.testing.assert_allclose(_HankelGram(x, rows).matvec(u),
                               hankel @ (hankel.conj().T @ u), rtol=1e-10, atol=1e-9)


@pytest.mark.parametrize("seed", [0, 1])
def test_lanczos_gives_the_components_of_the_full_svd(seed):
    fid = brain_like_fid(seed)
    full = hlsvd(fid, dwell_s=DWELL_S, model_order=25, solver="full")
    fast = hlsvd(fid, dwell_s=DWELL_S, model_order=25, solver="lanczos")
    # all 25 components, noise components included, not only the large ones
    np.testing.assert_allclose(fast.freq_hz, full.freq_hz, rtol=0, atol=1e-7)
    np.testing.assert_allclose(fast.lw_hz, full.lw_hz, rtol=0, atol=1e-7)
    np.testing.assert_allclose(fast.amplitude, full.amplitude, rtol=1e-7,
                               atol=1e-7 * np.abs(full.amplitude).max())
    kw = dict(dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE, model_order=25)
    cleaned_full, removed_full = remove_water(fid, solver="full", **kw)
    cleaned_fast, removed_fast = remove_water(fid, **kw)
    assert removed_fast.freq_hz.size == removed_full.freq_hz.size >= 3
    np.testing.assert_allclose(cleaned_fast, cleaned_full, rtol=0,
                               atol=1e-9 * np.abs(fid).max())


def test_water_band_removed_and_singlet_outside_unchanged():
    rng = np.random.default_rng(32)
    water = DampedSinusoids(np.array([-2.0, 6.0, 20.0]), np.array([6.0, 12.0, 25.0]),
                            np.array([300.0, 80.0 * np.exp(1j), 40.0j]))  # 4.49-4.67 ppm
    naa = np.exp(-2j * np.pi * (2.008 - CENTRE) * MHZ * T - np.pi * 4.0 * T)
    sd = 0.01
    noise = sd * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    fid = damped_sinusoids_fid(water, n_points=N, dwell_s=DWELL_S) + naa + noise
    cleaned, removed = remove_water(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ,
                                    centre_ppm=CENTRE, band_ppm=(4.2, 5.2), model_order=20)
    assert removed.freq_hz.size >= 3
    spec = np.fft.fftshift(np.fft.fft(cleaned - (naa + noise)))
    ppm = CENTRE - np.fft.fftshift(np.fft.fftfreq(N, DWELL_S)) / MHZ
    spectral_sd = sd * np.sqrt(2 * N)  # SD of |complex spectral noise|: DFT scales by √N
    near_naa = np.abs(ppm - 2.008) < 0.3
    # the singlet region differs from "singlet + noise" by less than the noise level
    assert np.max(np.abs(spec[near_naa])) < 1.0 * spectral_sd
    # and the water band is gone (residual below 1 % of its peak)
    band = (ppm > 4.2) & (ppm < 5.2)
    original = np.abs(np.fft.fftshift(np.fft.fft(fid)))
    assert np.max(np.abs(np.fft.fftshift(np.fft.fft(cleaned)))[band]) < 0.01 * original[band].max()


def test_scan_wrapper_and_bad_order():
    fid = damped_sinusoids_fid(KNOWN, n_points=N, dwell_s=DWELL_S)
    scan = Scan(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    out = remove_water_scan(scan, model_order=5)
    assert out.provenance[-1]["Method"] == "residual water removal"
    # -35 Hz -> 4.93 ppm, 0 Hz -> 4.65 ppm and 12.5 Hz -> 4.55 ppm lie inside 4.2-5.2 ppm
    shifts = sorted(out.provenance[-1]["Details"]["removed_shift_ppm"])
    assert shifts == pytest.approx([4.65 - 12.5 / MHZ, 4.65, 4.65 + 35 / MHZ], abs=1e-6)
    with pytest.raises(InvalidInputError, match="model order"):
        hlsvd(fid, dwell_s=DWELL_S, model_order=600, fit_points=1024)
    with pytest.raises(InvalidInputError, match="zero"):
        hlsvd(np.zeros(N, complex), dwell_s=DWELL_S)
    with pytest.raises(InvalidInputError, match="solver"):
        hlsvd(fid, dwell_s=DWELL_S, solver="qr")  # type: ignore[arg-type]
