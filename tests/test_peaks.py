"""Tests of specproc.peaks (local maxima, prominences, selection) and of the numpy line removal
of specproc.qc, against the SciPy reference implementations they stand in for
(``scipy.signal.find_peaks``, ``scipy.signal.peak_prominences``, ``scipy.signal.detrend``;
reference library, imported only here)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from specproc.peaks import local_maxima, peak_indices, prominences
from specproc.qc import linear_detrended


def _signals():
    rng = np.random.default_rng(3)
    yield rng.standard_normal(500)
    # plateaus of every length, at the edges too: integer-valued noise
    yield rng.integers(0, 4, 400).astype(float)
    yield np.array([2.0, 2.0, 1.0, 3.0, 3.0, 3.0, 3.0, 0.0, 5.0, 5.0])
    # a smooth spectrum-like signal: Lorentzians on noise, zero-filled sampling
    x = np.linspace(0, 1, 3000)
    lines = sum(h / (1 + ((x - c) / 0.004) ** 2) for c, h in ((0.2, 5), (0.5, 9), (0.52, 3)))
    yield np.abs(lines + 0.05 * rng.standard_normal(x.size))
    yield np.zeros(10)
    yield np.array([1.0, 2.0])


@pytest.mark.parametrize("x", list(_signals()))
def test_local_maxima_and_prominences_match_scipy(x):
    # reference: SciPy (scipy.signal.find_peaks without conditions, peak_prominences)
    expected, _ = signal.find_peaks(x)
    assert np.array_equal(local_maxima(x), expected)
    if expected.size:
        assert np.array_equal(prominences(x, expected), signal.peak_prominences(x, expected)[0])


@pytest.mark.parametrize("x", list(_signals()))
@pytest.mark.parametrize("fraction", [0.0, 0.05, 0.2, 0.6])
def test_selection_matches_scipy_find_peaks(x, fraction):
    # reference: SciPy scipy.signal.find_peaks with the height and prominence conditions
    level = fraction * float(np.max(x))
    assert np.array_equal(peak_indices(x, min_prominence=level),
                          signal.find_peaks(x, prominence=level)[0])
    assert np.array_equal(peak_indices(x, min_height=level),
                          signal.find_peaks(x, height=level)[0])


def test_linear_detrended_matches_scipy_detrend():
    # reference: SciPy scipy.signal.detrend(type="linear"); exact for a straight line (textbook)
    rng = np.random.default_rng(11)
    for n in (16, 257, 1000):
        y = rng.standard_normal(n) + 40.0 * np.linspace(-1, 3, n) + 7.0
        np.testing.assert_allclose(linear_detrended(y), signal.detrend(y, type="linear"),
                                   rtol=0, atol=1e-12 * np.max(np.abs(y)))
    line = 3.0 - 0.25 * np.arange(50.0)
    np.testing.assert_allclose(linear_detrended(line), 0.0, atol=1e-12)
