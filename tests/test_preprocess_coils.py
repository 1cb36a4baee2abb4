"""Coil combination.

Sources: array-combination theory (Roemer et al., Magn Reson Med 1990;16:192-225): the best SNR
of a linear combination is sqrt(sᴴ Ψ⁻¹ s), which for N identical coils of equal, independent
noise is √N times the single-coil SNR; the signal- and noise-weighted, phase-aligned combination
of Hall et al. (NeuroImage 2014;86:35-42) attains it, while plain summation does not when coils
differ in sensitivity and noise.
"""

import numpy as np
import pytest

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.coils import (
    coil_combination_snr_gain,
    combine_coils,
    combine_coils_scan,
    compute_coil_weights,
    estimate_noise_covariance,
)

MHZ, DWELL_S, N, CENTRE = 123.2, 2.5e-4, 2048, 4.65
T = np.arange(N) * DWELL_S
SIGNAL = np.exp(-2j * np.pi * (2.008 - CENTRE) * MHZ * T - np.pi * 4.0 * T)  # NAA-like singlet
N_TR = 16


def coil_data(rng, gains, noise_sd, noise_corr=None):
    """(coils, transients, N) data: gain_c · SIGNAL + noise with covariance Ψ."""
    gains = np.asarray(gains, complex)
    n_c = gains.size
    psi = np.diag(np.asarray(noise_sd, float) ** 2).astype(complex)
    if noise_corr is not None:
        psi = psi + noise_corr
    lower = np.linalg.cholesky(psi)
    white = (rng.standard_normal((n_c, N_TR * N)) + 1j * rng.standard_normal((n_c, N_TR * N)))
    noise = (lower @ white / np.sqrt(2)).reshape(n_c, N_TR, N)  # E|n|² = Ψ per complex sample
    clean = gains[:, None, None] * SIGNAL[None, None, :] * np.ones((1, N_TR, 1))
    return clean, noise, psi


def combined_snr(weights, clean, noise):
    """|combined signal at t=0| / SD of the combined complex noise (both known exactly)."""
    signal = combine_coils(clean, weights)[..., 0].mean()
    return abs(signal) / np.std(combine_coils(noise, weights))


def test_equal_coils_gain_sqrt_n():
    # Roemer et al. 1990: N identical coils, equal independent noise -> SNR gain √N.
    rng = np.random.default_rng(21)
    n_c = 4
    phases = np.exp(1j * rng.uniform(-np.pi, np.pi, n_c))  # coils differ only in phase
    clean, noise, _ = coil_data(rng, phases, np.full(n_c, 0.05))
    data = clean + noise
    weights = compute_coil_weights(data, noise_cov=estimate_noise_covariance(data))
    single = abs(SIGNAL[0]) / np.std(noise[0])
    gain = combined_snr(weights, clean, noise) / single
    assert gain == pytest.approx(np.sqrt(n_c), rel=0.03)


def test_weighted_beats_plain_sum_with_unequal_coils():
    # Unequal sensitivities and noise: the whitened combination reaches the matched-filter
    # bound sqrt(sᴴΨ⁻¹s) (Roemer 1990) and beats both the plain sum and the phase-aligned
    # equal-weight sum; the SVD weighting also comes close to the bound.
    rng = np.random.default_rng(22)
    gains = np.array([1.0, 0.6, 0.3, 0.1]) * np.exp(1j * np.array([0.3, -2.0, 1.1, 2.8]))
    sd = np.array([0.05, 0.1, 0.05, 0.2])
    clean, noise, psi = coil_data(rng, gains, sd)
    data = clean + noise
    cov = estimate_noise_covariance(data)
    bound = coil_combination_snr_gain(gains * SIGNAL[0], psi)
    whitened = combined_snr(compute_coil_weights(data, noise_cov=cov), clean, noise)
    svd = combined_snr(compute_coil_weights(data, noise_cov=cov, method="svd"), clean, noise)
    plain = combined_snr(np.ones(4, complex), clean, noise)
    aligned = combined_snr(np.exp(1j * np.angle(gains)), clean, noise)
    assert whitened == pytest.approx(bound, rel=0.03)
    assert svd == pytest.approx(bound, rel=0.05)
    assert whitened > 1.2 * aligned
    assert whitened > 1.5 * plain


def test_correlated_noise_is_prewhitened():
    # With correlated coil noise, only weights using Ψ⁻¹ reach the bound (Roemer 1990).
    rng = np.random.default_rng(23)
    gains = np.array([1.0, 0.8, 0.5])
    sd = np.array([0.05, 0.05, 0.05])
    corr = np.full((3, 3), 0.0018) - np.diag(np.full(3, 0.0018))
    clean, noise, psi = coil_data(rng, gains, sd, noise_corr=corr)
    data = clean + noise
    cov = estimate_noise_covariance(data)
    bound = coil_combination_snr_gain(gains * SIGNAL[0], psi)
    with_cov = combined_snr(compute_coil_weights(data, noise_cov=cov), clean, noise)
    without = combined_snr(compute_coil_weights(data), clean, noise)
    assert with_cov == pytest.approx(bound, rel=0.03)
    assert with_cov > without


def test_noise_covariance_estimate():
    rng = np.random.default_rng(24)
    _, noise, psi = coil_data(rng, np.ones(3), [0.1, 0.2, 0.3])
    # sampling error of a covariance from K samples: about σ_i σ_j / √K (5 SD allowed)
    k = noise.shape[1] * noise.shape[2]
    np.testing.assert_allclose(estimate_noise_covariance(noise, tail_fraction=1.0), psi,
                               atol=5 * 0.09 / np.sqrt(k))


def test_weights_are_scaled_like_a_phase_aligned_sum():
    gains = np.array([1.0, 0.5j, -0.25])
    clean = gains[:, None] * SIGNAL
    weights = compute_coil_weights(clean, weight_points=1)
    combined = combine_coils(clean, weights)
    np.testing.assert_allclose(combined, np.sum(np.abs(gains)) * SIGNAL, atol=1e-12)


def test_scan_wrapper_and_bad_input():
    rng = np.random.default_rng(25)
    clean, noise, _ = coil_data(rng, [1.0, 0.5], [0.05, 0.05])
    scan = Scan(clean + noise, dwell_s=DWELL_S, spectrometer_mhz=MHZ,
                dims=("DIM_COIL", "DIM_DYN"), centre_ppm=CENTRE)
    out = combine_coils_scan(scan)
    assert out.dims == ("DIM_DYN",)
    assert out.provenance[-1]["Method"] == "coil combination"
    assert len(out.provenance[-1]["Details"]["weights_abs"]) == 2
    assert scan.provenance == ()
    one_coil = Scan(clean[0], dwell_s=DWELL_S, spectrometer_mhz=MHZ, dims=("DIM_DYN",))
    with pytest.raises(InvalidInputError, match="DIM_COIL"):
        combine_coils_scan(one_coil)
    with pytest.raises(InvalidInputError, match="zero"):
        compute_coil_weights(np.zeros((2, 3, 64), complex))
    with pytest.raises(InvalidInputError, match="valid"):
        compute_coil_weights(clean, method="sum")
