"""Eddy-current correction (Klose, Magn Reson Med 1990;14:26-30).

Check against the method's own statement: a time-varying phase φ(t) common to the water and
metabolite signals is measured by the water reference and removed exactly (noiseless data, to
float precision).
"""

import numpy as np
import pytest

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.eddy import correct_eddy_currents, correct_eddy_currents_scan, eddy_phase

MHZ, DWELL_S, N, CENTRE = 123.2, 2.5e-4, 2048, 4.65
T = np.arange(N) * DWELL_S
METAB = sum(a * np.exp(-2j * np.pi * (d - CENTRE) * MHZ * T - np.pi * 4.0 * T)
            for d, a in ((2.008, 1.0), (3.027, 0.8), (3.2, 0.6)))
WATER = 50.0 * np.exp(-np.pi * 5.0 * T)  # on resonance, zero phase
EDDY = 0.8 * np.exp(-T / 0.03) + 0.3 * np.sin(2 * np.pi * 7.0 * T) * np.exp(-T / 0.1)


def test_known_time_varying_phase_removed_to_float_precision():
    phase = eddy_phase(WATER * np.exp(1j * EDDY), dwell_s=DWELL_S)
    np.testing.assert_allclose(phase, EDDY, atol=1e-12)
    fixed = correct_eddy_currents(METAB * np.exp(1j * EDDY), phase)
    np.testing.assert_allclose(fixed, METAB, rtol=0, atol=1e-12 * np.max(np.abs(METAB)))


def peak_hz(fid):
    spectrum = np.abs(np.fft.fftshift(np.fft.fft(fid, 16 * N)))
    return np.fft.fftshift(np.fft.fftfreq(16 * N, DWELL_S))[np.argmax(spectrum)]


def test_preserve_water_offset_keeps_the_frequency():
    # The water 3 Hz off resonance with phase 0.4 rad and a fast (5 ms) eddy phase: plain Klose
    # removes the offset too (the water ends on the receiver centre, real and positive);
    # preserving it keeps the water's peak where it was (the eddy phase pulls that peak by
    # about 0.14 Hz from the true 3 Hz, which the option cannot know).
    eddy = 0.8 * np.exp(-T / 0.005)
    water = WATER * np.exp(1j * (2 * np.pi * 3.0 * T + 0.4)) * np.exp(1j * eddy)
    plain = correct_eddy_currents(water, eddy_phase(water, dwell_s=DWELL_S))
    np.testing.assert_allclose(plain, np.abs(water), atol=1e-9)
    kept = correct_eddy_currents(
        water, eddy_phase(water, dwell_s=DWELL_S, preserve_water_offset=True))
    assert abs(peak_hz(plain)) < 0.01
    assert peak_hz(kept) == pytest.approx(peak_hz(water), abs=0.02)
    assert peak_hz(kept) == pytest.approx(3.0, abs=0.2)


def test_scan_wrapper_corrects_both_and_checks_shapes():
    scan = Scan(METAB * np.exp(1j * EDDY), dwell_s=DWELL_S, spectrometer_mhz=MHZ)
    water = Scan(WATER * np.exp(1j * EDDY), dwell_s=DWELL_S, spectrometer_mhz=MHZ,
                 source="ref.nii")
    new_scan, new_water = correct_eddy_currents_scan(scan, water)
    np.testing.assert_allclose(new_scan.data, METAB, atol=1e-9)
    np.testing.assert_allclose(new_water.data, WATER, atol=1e-9)
    assert new_scan.provenance[-1]["Method"] == "eddy-current correction"
    short = Scan(WATER[:1024], dwell_s=DWELL_S, spectrometer_mhz=MHZ, source="ref.nii")
    with pytest.raises(InvalidInputError, match=r"ref\.nii"):
        correct_eddy_currents_scan(scan, short)
    with pytest.raises(InvalidInputError, match="all zero"):
        eddy_phase(np.zeros(16, complex), dwell_s=DWELL_S)
