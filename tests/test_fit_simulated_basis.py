"""Integration: the fit with a basis from specproc.basis.simulate_basis (PRESS, 3 T).

Sources: exact recovery of a noiseless spectrum that the model represents (zero-residual least
squares); invariance of the amplitudes to a global shift and phase of the data (the model's
shift/phase parameters absorb them); NIfTI-MRS sign convention (Clarke et al. 2022).
"""

from __future__ import annotations

import numpy as np
import pytest

from specproc.basis import simulate_basis
from specproc.data import Scan
from specproc.fit import fit_spectrum

NAMES = ["NAA", "Cr", "PCr", "GPC", "mI", "Glu"]
CONC = np.array([11.0, 4.5, 4.0, 1.2, 6.0, 9.0])


@pytest.fixture(scope="module")
def basis():
    return simulate_basis(sequence="press", field_t=2.89, te_s=0.030, dwell_s=1 / 1200,
                          n_points=512, metabolites=NAMES, cache=False)


def test_noiseless_simulated_spectrum_is_recovered(basis):
    t = basis.time_s()
    fid = (CONC @ basis.fids) * np.exp(-(np.pi * 3.0 - 2j * np.pi * 2.0) * t - 90 * t * t
                                       - 0.5j)
    scan = Scan(fid, dwell_s=basis.dwell_s, spectrometer_mhz=basis.spectrometer_mhz,
                centre_ppm=basis.centre_ppm)
    res = fit_spectrum(scan, basis, config={"shift_sd_hz": 0.0, "noise_sd": 1e-3,
                                            "range_ppm": [0.5, 4.2]})
    np.testing.assert_allclose(res.amplitudes, CONC, rtol=1e-6)
    assert res.nonlinear["shift_all_hz"] == pytest.approx(-2.0, abs=1e-6)  # towards lower ppm
    assert res.nonlinear["phase0_rad"] == pytest.approx(-0.5, abs=1e-6)
    assert res.combined["tCr"]["amplitude"] == pytest.approx(8.5, rel=1e-6)


def test_noisy_simulated_spectrum_within_bounds(basis):
    t = basis.time_s()
    rng = np.random.default_rng(11)
    fid = (CONC @ basis.fids) * np.exp(-(np.pi * 3.0) * t - 90 * t * t)
    fid = fid + 0.4 * (rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size))
    scan = Scan(fid, dwell_s=basis.dwell_s, spectrometer_mhz=basis.spectrometer_mhz,
                centre_ppm=basis.centre_ppm)
    res = fit_spectrum(scan, basis, config={"range_ppm": [0.5, 4.2]})
    assert res.success
    z = (res.amplitudes - CONC) / res.crlb_sd
    assert np.all(np.abs(z) < 4.0), z  # within 4 bounds (a 4-sigma event has p < 1e-4)
    # residual at the noise level: χ²/dof with the true spectral noise SD 0.4·sqrt(N)
    # (Parseval); its SD is sqrt(2/dof) ≈ 0.08 here
    chi2 = np.sum(np.abs(res.residual) ** 2) / (0.4**2 * t.size) / res.dof
    assert chi2 == pytest.approx(1.0, abs=0.25)
    # the measured noise SD (edges of this narrow spectrum) is close to the true one
    assert res.noise_sd == pytest.approx(0.4 * np.sqrt(t.size), rel=0.25)
