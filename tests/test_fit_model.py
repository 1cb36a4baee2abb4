"""The fit model and solver (specproc.fit.model, varpro, baseline) on synthetic spectra.

Sources: the NIfTI-MRS sign convention (Clarke et al., Magn Reson Med 2022;88:2358-2370: a line
at δ evolves as exp(-2πi (δ - centre) MHz t), ppm = centre - f / MHz); exact recovery of a
noiseless signal that the model can represent (a property of least squares at a zero-residual
solution); linearity of the amplitudes in the data (the model is linear in c); B-spline
partition of unity (de Boor, A Practical Guide to Splines, 1978); derivatives checked against
central finite differences (calculus).
"""

from __future__ import annotations

import numpy as np
import pytest

from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.fit import fit_spectrum
from specproc.fit.baseline import bspline_design, second_difference
from specproc.fit.model import _resample_fids, build_model, lorentz_fwhm_hz, start_values
from specproc.fit.settings import FitSettings
from specproc.fit.varpro import VarproProblem

MHZ = 123.2
CENTRE = 4.65
N = 1024
DWELL = 1.0 / 1200.0

# singlets/multiplets at the Govindaraju 2000 positions (a few lines each; no J evolution)
MEMBERS = {
    "NAA": [(2.008, 3), (2.49, 1), (2.67, 1)],
    "Cr": [(3.027, 3), (3.913, 2)],
    "PCr": [(3.029, 3), (3.930, 2)],
    "GPC": [(3.212, 9), (3.66, 2)],
    "mI": [(3.52, 2), (3.61, 2), (4.05, 1), (3.27, 1)],
    "Glu": [(2.04, 1), (2.12, 1), (2.34, 2), (3.74, 1)],
    "Lac": [(1.31, 3), (4.10, 1)],
}
TRUE = {"NAA": 10.0, "Cr": 4.0, "PCr": 3.5, "GPC": 1.0, "mI": 5.0, "Glu": 8.0, "Lac": 0.5,
        "MM0.9": 2.0}


def _line(t, ppm):
    return np.exp(-2j * np.pi * (ppm - CENTRE) * MHZ * t)


def make_basis(order=None):
    t = np.arange(N) * DWELL
    names, fids, kinds = [], [], []
    for name, lines in MEMBERS.items():
        names.append(name)
        fids.append(sum(p * _line(t, s) for s, p in lines))
        kinds.append("metabolite")
    names.append("MM0.9")
    fids.append(3 * _line(t, 0.90) * np.exp(-(60.0 * t) ** 2))
    kinds.append("macromolecule")
    idx = list(range(len(names))) if order is None else list(order)
    return BasisSet(names=tuple(names[i] for i in idx), fids=np.stack([fids[i] for i in idx]),
                    dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE,
                    kinds=tuple(kinds[i] for i in idx))


def make_scan(basis, conc, *, shift_hz=1.5, lw_hz=4.0, gauss_s2=150.0, phase=0.4, noise=0.0,
              seed=0):
    t = basis.time_s()
    c = np.array([conc[n] for n in basis.names])
    fid = (c @ basis.fids) * np.exp(-(np.pi * lw_hz + 2j * np.pi * shift_hz) * t
                                    - gauss_s2 * t * t + 1j * phase)
    if noise:
        rng = np.random.default_rng(seed)
        fid = fid + noise * (rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size))
    return Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)


# every member of the test data has the same Lorentzian width: the model with no width prior
NOISELESS = {"shift_sd_hz": 0.0, "noise_sd": 1e-3, "range_ppm": [0.5, 4.2], "width_prior": "none"}


def test_noiseless_spectrum_is_recovered():
    # zero-residual least squares: the exact parameters are the minimum (1e-6 relative)
    basis = make_basis()
    res = fit_spectrum(make_scan(basis, TRUE), basis, config=NOISELESS)
    c = np.array([TRUE[n] for n in basis.names])
    np.testing.assert_allclose(res.amplitudes, c, rtol=1e-6)
    assert res.nonlinear["shift_all_hz"] == pytest.approx(1.5, abs=1e-6)
    assert res.nonlinear["phase0_rad"] == pytest.approx(0.4, abs=1e-6)
    assert res.nonlinear["gauss_s2"] == pytest.approx(150.0, rel=1e-6)
    assert res.lorentz_fwhm_hz[0] == pytest.approx(4.0, rel=1e-6)
    assert res.success
    assert np.max(np.abs(res.baseline)) < 1e-6 * np.max(np.abs(res.data))


def test_amplitudes_scale_linearly_with_the_data():
    basis = make_basis()
    a = fit_spectrum(make_scan(basis, TRUE, noise=0.02, seed=1), basis)
    scaled = {k: 3.0 * v for k, v in TRUE.items()}
    b = fit_spectrum(make_scan(basis, scaled, noise=0.06, seed=1), basis)
    np.testing.assert_allclose(b.amplitudes, 3.0 * a.amplitudes, rtol=1e-5, atol=1e-8)
    np.testing.assert_allclose(b.crlb_sd, 3.0 * a.crlb_sd, rtol=1e-4)


def test_result_does_not_depend_on_member_order():
    basis = make_basis()
    order = [5, 2, 7, 0, 3, 6, 1, 4]
    shuffled = make_basis(order)
    a = fit_spectrum(make_scan(basis, TRUE, noise=0.02, seed=2), basis)
    b = fit_spectrum(make_scan(shuffled, TRUE, noise=0.02, seed=2), shuffled)
    for i, name in enumerate(shuffled.names):
        j = basis.names.index(name)
        assert b.amplitudes[i] == pytest.approx(a.amplitudes[j], rel=1e-5, abs=1e-8)
        assert b.crlb_sd[i] == pytest.approx(a.crlb_sd[j], rel=1e-4)


def test_positive_shift_moves_lines_to_higher_ppm():
    # NIfTI-MRS: exp(-2πi δ t) moves a line by +δ/MHz ppm; the fit reports that δ
    basis = make_basis()
    scan = make_scan(basis, TRUE, shift_hz=+6.0)
    spec = np.abs(scan.spectrum())
    ppm = scan.ppm()
    near = (ppm > 1.9) & (ppm < 2.2)
    peak_ppm = ppm[near][np.argmax(spec[near])]
    assert peak_ppm == pytest.approx(2.008 + 6.0 / MHZ, abs=0.5 / (N * DWELL) / MHZ + 1e-3)
    res = fit_spectrum(scan, basis, config=NOISELESS)
    assert res.nonlinear["shift_all_hz"] == pytest.approx(6.0, abs=1e-6)


def test_analytic_jacobian_matches_finite_differences():
    basis = make_basis()
    scan = make_scan(basis, TRUE, noise=0.02, seed=3)
    settings = FitSettings(shift_sd_hz=1.0, damping_sd_hz=2.0)
    model = build_model(scan, np.asarray(basis.fids), basis.names, basis.kinds, settings)
    theta = start_values(model, settings)
    theta[model.layout.i_shift] = 1.0
    theta[0], theta[1] = 0.3, 2e-4
    c = np.linspace(1.0, 2.0, model.n_members)
    spectra, fids, phase = model.member_spectra(theta)
    cols = model.derivative_columns(theta, c, spectra, fids, phase)
    for j in range(model.layout.size):
        h = 1e-6 * max(1.0, abs(theta[j]))
        tp, tm = theta.copy(), theta.copy()
        tp[j] += h
        tm[j] -= h
        numeric = (model.member_spectra(tp)[0] @ c - model.member_spectra(tm)[0] @ c) / (2 * h)
        np.testing.assert_allclose(cols[:, j], numeric, rtol=1e-5,
                                   atol=1e-6 * np.abs(numeric).max(), err_msg=str(j))


def test_varpro_jacobian_matches_finite_differences_at_zero_residual():
    # Kaufman's approximation is exact when the residual vanishes (the data are made with one
    # damping for all members, so the model has no expected width differences here)
    basis = make_basis()
    scan = make_scan(basis, TRUE)
    settings = FitSettings(range_ppm=(0.5, 4.2), width_prior="none")
    model = build_model(scan, np.asarray(basis.fids), basis.names, basis.kinds, settings)
    data = np.fft.fft(np.asarray(scan.data))[model.index]
    bmat = bspline_design(model.ppm, knot_ppm=0.4)
    pmat = second_difference(bmat.shape[1])
    prob = VarproProblem(model, data, bmat, pmat, noise_sd=1.0)
    theta = np.zeros(model.layout.size)
    theta[0], theta[2] = 0.4, 150.0
    theta[model.layout.i_damp] = np.pi * 4.0
    theta[model.layout.i_shift] = 1.5
    jac = prob.jacobian(theta)
    for j in (0, 2, int(model.layout.i_damp[-1]), int(model.layout.i_shift[0])):
        h = 1e-6 * max(1.0, abs(theta[j]))
        tp, tm = theta.copy(), theta.copy()
        tp[j] += h
        tm[j] -= h
        numeric = (prob.residual_vector(tp) - prob.residual_vector(tm)) / (2 * h)
        np.testing.assert_allclose(jac[:, j], numeric, atol=1e-4 * np.abs(numeric).max())


def test_bspline_design_is_a_partition_of_unity():
    ppm = np.linspace(4.2, 0.2, 300)
    design = bspline_design(ppm, knot_ppm=0.4)
    np.testing.assert_allclose(design.sum(axis=1), 1.0, atol=1e-12)
    assert design.shape[1] == 10 + 3  # 10 intervals, cubic: n_int + 3 functions
    d2 = second_difference(design.shape[1])
    # second differences annihilate linear coefficient sequences
    np.testing.assert_allclose(d2 @ np.arange(design.shape[1]), 0.0, atol=1e-12)


def test_private_resampling_matches_direct_synthesis():
    # a line on a finer grid, band-limited resampling vs the analytic line on the coarse grid
    t_fine = np.arange(4096) * (DWELL / 2)
    fine = (_line(t_fine, 3.0) * np.exp(-10 * t_fine))[None, :]
    coarse = _resample_fids(fine, DWELL / 2, DWELL, 1024)
    t = np.arange(1024) * DWELL
    ref = _line(t, 3.0) * np.exp(-10 * t)
    np.testing.assert_allclose(coarse[0], ref, atol=1e-12)  # whole ratio: exact decimation
    # a non-integer ratio goes through band-limited (DFT) interpolation: close to the line
    # away from t = 0, where the periodic DFT continuation has its jump
    odd = _resample_fids(fine, DWELL / 2, DWELL * 0.75, 1024)
    t_odd = np.arange(1024) * DWELL * 0.75
    ref_odd = _line(t_odd, 3.0) * np.exp(-10 * t_odd)
    assert np.max(np.abs(odd[0, 50:] - ref_odd[50:])) < 2e-2
    with pytest.raises(InvalidInputError, match="narrower"):
        _resample_fids(fine, DWELL * 2, DWELL, 1024)


def test_baseline_absorbs_a_smooth_offset():
    basis = make_basis()
    scan = make_scan(basis, TRUE, noise=0.02, seed=4)
    ppm = scan.ppm()
    # add a broad smooth hump in the spectrum (through the FID)
    hump = 30.0 * np.exp(-((ppm - 2.5) / 1.2) ** 2) * np.exp(0.4j)
    fid = scan.data + np.fft.ifft(np.fft.ifftshift(hump))
    res = fit_spectrum(scan.replace(data=fid), basis)
    ref = fit_spectrum(scan, basis)
    i = basis.names.index("NAA")
    assert res.amplitudes[i] == pytest.approx(ref.amplitudes[i], rel=0.03)
    assert np.max(np.abs(res.baseline.real)) > 10.0


def test_first_order_phase_is_reported_in_degrees_per_ppm():
    # a phase of φ(δ) = 0.4 rad + 20°/ppm · (δ - 2.35 ppm) applied to the spectrum is recovered
    # (definition of the reported phase, FitResult docstring; noiseless, so to 1e-6)
    basis = make_basis()
    scan = make_scan(basis, TRUE)
    ppm = scan.ppm()
    spec = scan.spectrum() * np.exp(1j * np.radians(20.0 * (ppm - 2.35)))
    res = fit_spectrum(scan.replace(data=np.fft.ifft(np.fft.ifftshift(spec))), basis,
                       config=NOISELESS)
    assert res.phase1_deg_per_ppm == pytest.approx(20.0, abs=1e-6)
    expected0 = np.degrees(0.4) + 20.0 * (res.phase1_pivot_ppm - 2.35)
    assert res.phase0_deg == pytest.approx(expected0, abs=1e-5)


def test_damping_prior_is_given_as_a_lorentzian_width_in_hz():
    # exp(-γ t) has a Lorentzian FWHM of γ/π Hz (textbook FT pair), so a prior SD of w Hz on
    # the width is an SD of π·w s⁻¹ on the damping-rate parameter (the unit in the setting's
    # name, damping_sd_hz, is the unit of its value)
    basis = make_basis()
    scan = make_scan(basis, TRUE, noise=0.02, seed=3)
    model = build_model(scan, np.asarray(basis.fids), basis.names, basis.kinds,
                        FitSettings(damping_sd_hz=2.0))
    lay = model.layout
    np.testing.assert_allclose(lay.prior_sd[lay.i_ddamp], np.pi * 2.0)
    np.testing.assert_allclose(lay.upper[lay.i_ddamp], 4 * np.pi * 2.0)
    assert lorentz_fwhm_hz(np.pi * 2.0) == pytest.approx(2.0)
