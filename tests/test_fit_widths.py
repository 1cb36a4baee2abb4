"""Per-metabolite line widths, separately damped macromolecules and the data-chosen baseline.

Outside checks: the data are written here line by line (singlets and doublets at literature
shifts, each metabolite decaying with its own ``exp(-t / T2)``; textbook FT pair: a Lorentzian
of FWHM ``1 / (π T2)``), not with the fit's model code; the effective number of parameters of a
penalised least-squares fit is the trace of its hat matrix (Hastie & Tibshirani, Generalized
Additive Models 1990, ch. 3), which equals the number of columns without a penalty and, with a
very large second-difference penalty, the free amplitudes plus the dimension of the penalty's
null space (straight lines: 2 per real and imaginary part).
"""

from __future__ import annotations

import numpy as np
import pytest

from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.fit import fit_spectrum
from specproc.fit.baseline import bspline_design
from specproc.fit.fitter import _penalty_matrix
from specproc.fit.model import build_model, expected_damping, start_values
from specproc.fit.settings import FitSettings
from specproc.fit.varpro import VarproProblem
from specproc.quantify import load_relaxation_times

MHZ = 123.25  # 2.89 T
CENTRE = 4.65
N = 2048
DWELL = 5e-4
#: Singlets and the creatine CH2 (Govindaraju et al., NMR Biomed 2000;13:129-153, from memory).
LINES = {"NAA": [(2.008, 3)], "Cr": [(3.027, 3), (3.913, 2)], "GPC": [(3.212, 9)]}
CONC = {"NAA": 10.0, "Cr": 8.0, "GPC": 1.5}
#: Distinct T2 at 3 T as in the relaxation table (from memory: NAA 250, Cr 150, Cho 210 ms).
T2 = {"NAA": 0.25, "Cr": 0.15, "GPC": 0.21}


def _line(t, ppm):
    return np.exp(-2j * np.pi * (ppm - CENTRE) * MHZ * t)


def _basis(t, mm=False):
    names = list(LINES)
    fids = [sum(p * _line(t, s) for s, p in LINES[n]) for n in names]
    kinds = ["metabolite"] * len(names)
    if mm:
        names.append("MM2.0")
        fids.append(2 * _line(t, 2.05) * np.exp(-(40.0 * t) ** 2))
        kinds.append("macromolecule")
    return BasisSet(names=tuple(names), fids=np.stack(fids), dwell_s=DWELL,
                    spectrometer_mhz=MHZ, centre_ppm=CENTRE, kinds=tuple(kinds))


def _tissue_fid(t, *, extra_lorentz_hz=2.0, gauss_s2=60.0, mm_damping=0.0):
    fid = np.zeros(t.size, complex)
    for name, lines in LINES.items():
        fid += CONC[name] * sum(p * _line(t, s) for s, p in lines) * np.exp(-t / T2[name])
    if mm_damping:
        fid += 3.0 * 2 * _line(t, 2.05) * np.exp(-(40.0 * t) ** 2 - mm_damping * t)
    return fid * np.exp(-np.pi * extra_lorentz_hz * t - gauss_s2 * t * t + 0.3j)


def test_expected_damping_is_the_inverse_t2_of_the_relaxation_table():
    relax = load_relaxation_times(2.89)
    gamma = expected_damping(("NAA", "Cr", "MM"), ("metabolite", "metabolite",
                                                   "macromolecule"), 2.89)
    assert gamma[0] == pytest.approx(1.0 / relax.metabolite("NAA").t2_s)
    assert gamma[1] == pytest.approx(1.0 / relax.metabolite("Cr").t2_s)
    assert gamma[2] == 0.0
    # 7 T relaxes faster (shorter T2) than 3 T in the table
    assert expected_damping(("NAA",), ("metabolite",), 7.0)[0] > gamma[0]


def test_distinct_t2_are_fitted_without_the_bias_of_one_shared_width():
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(4)
    fid = _tissue_fid(t) + 0.05 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    scan = Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    basis = _basis(t)
    ratio = lambda res: res.amplitudes[0] / res.amplitudes[1]  # noqa: E731
    truth = CONC["NAA"] / CONC["Cr"]
    base = {"range_ppm": [1.0, 4.2], "baseline": False}
    shared = fit_spectrum(scan, basis, config={**base, "width_prior": "none",
                                               "damping_sd_hz": 0.0})
    assert ratio(shared) / truth - 1 > 0.05  # one width for all: NAA/Cr too high
    res = fit_spectrum(scan, basis, config=base)
    assert ratio(res) == pytest.approx(truth, rel=0.01)
    # each member's width is its own 1/(π T2) plus the shared 2 Hz
    expected = np.array([1 / (np.pi * T2[n]) for n in LINES]) + 2.0
    np.testing.assert_allclose(res.lorentz_fwhm_hz, expected, atol=0.1)
    # the bounds cover the deviation parameters
    assert "ddamping_NAA_per_s" in res.parameter_names
    assert np.all(np.isfinite(res.crlb_sd))


def test_macromolecules_get_a_width_of_their_own():
    t = np.arange(N) * DWELL
    fid = _tissue_fid(t, mm_damping=np.pi * 12.0)
    scan = Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    res = fit_spectrum(scan, _basis(t, mm=True),
                       config={"range_ppm": [1.0, 4.2], "baseline": False, "noise_sd": 1e-3,
                               "separate_damping": ["kind:macromolecule"]})
    # its own damping replaces the metabolites' shared one: 12 Hz here plus the 2 Hz of all
    assert res.nonlinear["damping_MM2.0_per_s"] == pytest.approx(np.pi * 14.0, rel=1e-3)
    np.testing.assert_allclose(res.amplitudes, [10.0, 8.0, 1.5, 3.0], rtol=1e-4)


def _problem(t, fid, weight):
    scan = Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    basis = _basis(t)
    settings = FitSettings(range_ppm=(1.0, 4.2))
    model = build_model(scan, np.asarray(basis.fids), basis.names, basis.kinds, settings)
    data = np.fft.fft(scan.data)[model.index]
    bmat = bspline_design(model.ppm, knot_ppm=0.4)
    return VarproProblem(model, data, bmat, _penalty_matrix(bmat, weight), 0.1), model, settings


def test_effective_dof_is_the_trace_of_the_hat_matrix():
    t = np.arange(N) * DWELL
    prob, model, settings = _problem(t, _tissue_fid(t), 1e-12)
    theta = start_values(model, settings)
    sol = prob.solve_linear(theta)
    n_free = int((sol.amplitudes > 0).sum())
    assert prob.effective_dof(sol) == pytest.approx(n_free + 2 * prob.nb, rel=1e-6)
    stiff, _, _ = _problem(t, _tissue_fid(t), 1e6)
    assert stiff.effective_dof(stiff.solve_linear(theta)) == pytest.approx(n_free + 4, abs=1e-3)


def test_baseline_stiffness_follows_the_data():
    # a broad hump that no basis member has makes the chosen baseline more flexible
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(8)
    noise = 0.05 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    hump = 20.0 * _line(t, 2.6) * np.exp(-(190.0 * t) ** 2)  # Gaussian of FWHM 0.8 ppm
    config = {"range_ppm": [1.0, 4.2]}
    humped = fit_spectrum(Scan(_tissue_fid(t) + hump + noise, dwell_s=DWELL,
                               spectrometer_mhz=MHZ, centre_ppm=CENTRE), _basis(t),
                          config=config)
    assert humped.baseline_penalty < 0.1  # the default fixed weight is 1
    # the flexible baseline keeps the amplitudes, better than the fixed default stiffness
    np.testing.assert_allclose(humped.amplitudes, [10.0, 8.0, 1.5], rtol=0.03)
    fixed = fit_spectrum(Scan(_tissue_fid(t) + hump + noise, dwell_s=DWELL,
                              spectrometer_mhz=MHZ, centre_ppm=CENTRE), _basis(t),
                         config={**config, "baseline_auto": False})
    assert abs(fixed.amplitudes[0] / 10.0 - 1) > 2 * abs(humped.amplitudes[0] / 10.0 - 1)


def test_tied_macromolecule_amplitudes_share_one_level():
    # two macromolecule members, one under NAA: tied with a small relative SD, both come out
    # near their common level, and the prior narrows the bound of the hidden one
    t = np.arange(N) * DWELL
    mm_a = 2 * _line(t, 0.90) * np.exp(-(40.0 * t) ** 2)
    mm_b = 2 * _line(t, 2.02) * np.exp(-(40.0 * t) ** 2)
    met = _basis(t)
    basis = BasisSet(names=(*met.names, "MM0.90", "MM2.02"),
                     fids=np.vstack([met.fids, mm_a, mm_b]), dwell_s=DWELL,
                     spectrometer_mhz=MHZ, centre_ppm=CENTRE,
                     kinds=(*met.kinds, "macromolecule", "macromolecule"))
    rng = np.random.default_rng(2)
    shared = np.exp(-np.pi * 2.0 * t - 60.0 * t * t + 0.3j)
    fid = (_tissue_fid(t) + 3.5 * (mm_a + mm_b) * shared
           + 0.2 * (rng.standard_normal(N) + 1j * rng.standard_normal(N)))
    scan = Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    base = {"range_ppm": [0.5, 4.2], "baseline": False}
    free = fit_spectrum(scan, basis, config=base)
    tied = fit_spectrum(scan, basis, config={**base, "mm_amplitude_sd": 0.02})
    assert tied.amplitudes[3] == pytest.approx(tied.amplitudes[4], rel=0.1)
    np.testing.assert_allclose(tied.amplitudes, [10.0, 8.0, 1.5, 3.5, 3.5], rtol=0.05)
    assert tied.crlb_sd[4] < 0.9 * free.crlb_sd[4]  # the prior enters the bound


def test_relaxation_overrides_of_the_configuration_move_the_width_prior():
    # a [relaxation] override (the table the relaxation corrections use) sets the expected
    # widths too: NAA given T2 = 0.10 s gets 1/(π 0.10 s) ≈ 3.2 Hz in the model
    from specproc.fit.fitter import _relaxation

    t = np.arange(256) * DWELL
    scan = Scan(_tissue_fid(t), dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    config = {"fit": {}, "relaxation": {"metabolite": {"NAA": {"t2_s": 0.10}}}}
    relax = _relaxation(config, scan, FitSettings())
    assert relax.metabolite("NAA").t2_s == pytest.approx(0.10)
    assert expected_damping(("NAA",), ("metabolite",), 2.89, relax)[0] == pytest.approx(10.0)
    assert _relaxation({"fit": {}}, scan, FitSettings()) is None  # the bundled table
