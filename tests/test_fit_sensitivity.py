"""Model uncertainty from refits under alternative model choices (specproc.fit.sensitivity).

Outside references:

* The injected model error is analytic: a Lorentzian line (the Fourier pair of
  ``exp(-π FWHM t)``, textbook) of 25 Hz FWHM under the NAA-like singlet at 2.05 ppm, which no
  basis member has; the fit model cannot represent it, so the estimate is biased in proportion
  to its amplitude (linear least squares: the bias of a linear estimator is linear in the
  unmodelled signal). The systematic SD must grow with it, and be zero (to rounding) on
  noiseless data of the fit model itself, where every model choice fits the data exactly.
* On noisy data of the fit model itself the total uncertainty must stay close to the
  Cramér-Rao bound (Cavassila et al., NMR Biomed 2001;14:278-283: the bound is the scatter of
  an efficient estimator when the model is right); "close" is within 15 % on average over the
  realisations (common practice, as in tests/test_fit_montecarlo.py).
* The combination rule (RMS per factor, factors in quadrature) is that of a systematic
  uncertainty budget (Barlow, arXiv:hep-ex/0207026, 2002; JCGM 100:2008 (GUM) 5.1, from
  memory), checked on hand-computed values; a ratio of amplitudes that all move by one common
  factor has no spread (arithmetic), which a propagation that treats numerator and
  denominator as independent would not give.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.fit import fit_spectrum
from specproc.fit.sensitivity import (
    SensitivitySettings,
    alternative_mm_basis,
    model_sensitivity,
    model_variants,
    sensitivity_settings,
)
from specproc.fit.settings import FitSettings
from specproc.quantify import Amplitudes, quantify
from specproc.quantify.sums import systematic_sd, total_sd

MHZ = 123.2
CENTRE = 4.65
N = 1024
DWELL = 1.0 / 2000.0
T = np.arange(N) * DWELL
CONC = np.array([10.0, 8.0, 1.5, 5.0])
CONFIG = {"range_ppm": [0.5, 4.2], "width_prior": "none"}


def _line(ppm: float) -> np.ndarray:
    return np.exp(-2j * np.pi * (ppm - CENTRE) * MHZ * T)


@pytest.fixture(scope="module")
def basis() -> BasisSet:
    fids = np.stack([
        3 * _line(2.008) + _line(2.49) + _line(2.67),    # NAA-like
        3 * _line(3.027) + 2 * _line(3.913),                # Cr-like
        9 * _line(3.212) + 2 * _line(3.66),                 # choline-like
        2 * _line(3.52) + 2 * _line(3.61) + _line(4.05),    # mI-like
    ])
    return BasisSet(names=("NAA", "Cr", "Cho", "mI"), fids=fids, dwell_s=DWELL,
                    spectrometer_mhz=MHZ, centre_ppm=CENTRE)


def _clean(basis: BasisSet) -> np.ndarray:
    return (CONC @ basis.fids) * np.exp(-(np.pi * 4.0 + 2j * np.pi * 1.0) * T - 100.0 * T * T
                                        + 0.3j)


def _broad_line(amplitude: float) -> np.ndarray:
    """Analytic Lorentzian of 25 Hz FWHM at 2.05 ppm, in no basis member."""
    return amplitude * _line(2.05) * np.exp(-np.pi * 25.0 * T + 0.3j)


def _scan(fid: np.ndarray) -> Scan:
    return Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE)


# ------------------------------------------------------------------ the combination rule
def test_systematic_sd_is_rms_per_factor_added_in_quadrature():
    # factor a: differences +0.1, -0.1 (RMS 0.1); factor b: +0.3 -> sqrt(0.01 + 0.09)
    assert systematic_sd(1.0, [1.1, 0.9, 1.3], ["a", "a", "b"]) == pytest.approx(math.sqrt(0.1))
    assert systematic_sd(2.0, [2.0, 2.0], ["a", "b"]) == 0.0
    assert math.isnan(systematic_sd(1.0, [], []))
    assert math.isnan(systematic_sd(1.0, [np.nan], ["a"]))
    assert total_sd(3.0, 4.0) == pytest.approx(5.0)
    assert math.isnan(total_sd(3.0, float("nan")))  # no total without a model uncertainty


def test_ratio_spread_is_taken_from_the_refits_not_assumed_independent():
    names = ("NAA", "Cr", "PCr")
    values = np.array([12.0, 6.0, 2.0])
    # every alternative scales all amplitudes by one factor: the ratios do not move
    alternatives = np.outer([1.1, 0.95, 1.2], values)
    amps = Amplitudes(names, values, np.diag([0.1, 0.1, 0.1]), per_molecule=True,
                      alternatives=alternatives, alternative_factors=("a", "a", "b"))
    q = quantify(amps)
    expected_naa = systematic_sd(12.0, alternatives[:, 0], ("a", "a", "b"))
    assert q.amplitude_model_sd is not None and q.ratio_model_sd is not None
    assert q.amplitude_model_sd["NAA"] == pytest.approx(expected_naa)
    assert q.amplitude_model_sd["tCr"] == pytest.approx(systematic_sd(8.0, alternatives[:, 1:]
                                                                      .sum(axis=1),
                                                                      ("a", "a", "b")))
    assert q.ratio_model_sd["NAA"] == pytest.approx(0.0, abs=1e-12)
    # one alternative in which only NAA moves: its ratio moves by the same fraction
    amps = Amplitudes(names, values, None, per_molecule=True,
                      alternatives=[[13.2, 6.0, 2.0]], alternative_factors=("a",))
    q = quantify(amps)
    assert q.ratio_model_sd["NAA"] == pytest.approx(0.15)
    assert q.ratio_model_sd["tCr"] == pytest.approx(0.0)


def test_water_referenced_model_sd_scales_with_the_concentration_factor():
    from specproc.quantify import Acquisition, WaterSignal

    names = ("NAA", "Cr", "PCr")
    values = np.array([12.0, 6.0, 2.0])
    alternatives = np.array([[12.6, 6.0, 2.0], [11.4, 6.0, 2.0]])
    kwargs = {"water": WaterSignal(3.0e4), "tissue": {"gm": 0.6, "wm": 0.3, "csf": 0.1},
              "acquisition": Acquisition(te_s=0.030, tr_s=2.0, field_t=3.0)}
    q = quantify(Amplitudes(names, values, None, per_molecule=True, alternatives=alternatives,
                            alternative_factors=("a", "a")), **kwargs)
    assert q.conc_molar_model_sd_mm is not None
    # NAA moves by 5 % in both alternatives: 5 % of its concentration
    assert q.conc_molar_model_sd_mm["NAA"] == pytest.approx(0.05 * q.conc_molar_mm["NAA"])
    assert q.conc_molar_model_sd_mm["Cr"] == pytest.approx(0.0)


def test_amplitudes_reject_alternatives_of_the_wrong_shape():
    with pytest.raises(InvalidInputError, match="factors"):
        Amplitudes(("a", "b"), [1.0, 2.0], alternatives=[[1.0, 2.0]], alternative_factors=())


# ------------------------------------------------------------------ settings and variants
def test_settings_reject_unknown_keys_and_bad_values():
    with pytest.raises(InvalidInputError, match="unknown"):
        sensitivity_settings({"uncertainty": {"modle": True}})
    with pytest.raises(InvalidInputError, match=">= 1"):
        SensitivitySettings(width_sd_factor=0.5)
    assert sensitivity_settings({"fit": {}}).model is True


def test_variants_follow_the_main_settings(basis):
    fit = fit_spectrum(_scan(_clean(basis)), basis, config=CONFIG)
    settings = FitSettings(range_ppm=(0.5, 4.2), width_prior="none")
    labels = [v.label for v in model_variants(fit, settings, SensitivitySettings())]
    factors = {v.factor for v in model_variants(fit, settings, SensitivitySettings())}
    # no macromolecule members: no macromolecule alternative
    assert factors == {"baseline", "line widths", "fit range"}
    assert any("fit range from 0.8 ppm" in label for label in labels)
    no_baseline = FitSettings(range_ppm=(0.5, 4.2), baseline=False, damping_sd_hz=0.0)
    assert {v.factor for v in model_variants(fit, no_baseline, SensitivitySettings())} == {
        "fit range"}


# ------------------------------------------------------------------ against outside references
def test_no_spread_on_noiseless_data_of_the_fit_model(basis):
    scan = _scan(_clean(basis))
    fit = fit_spectrum(scan, basis, config=CONFIG)
    sens = model_sensitivity(scan, basis, fit, config=CONFIG)
    assert len(sens.variants) >= 4 and not sens.skipped
    assert np.all(sens.amplitude_sd() < 1e-4 * CONC)


def test_systematic_sd_grows_with_the_injected_model_error(basis):
    rng = np.random.default_rng(3)
    noise = 0.3 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    sd, err = [], []
    for amplitude in (0.0, 10.0, 20.0, 40.0):
        scan = _scan(_clean(basis) + _broad_line(amplitude) + noise)
        fit = fit_spectrum(scan, basis, config=CONFIG)
        sens = model_sensitivity(scan, basis, fit, config=CONFIG)
        sd.append(float(sens.amplitude_sd()[0]))
        err.append(abs(float(fit.amplitudes[0]) - CONC[0]))
    assert np.all(np.diff(sd) > 0), sd
    assert np.all(np.diff(err) > 0), err
    # the bias is linear in the unmodelled line, and so is the spread of the alternatives
    assert 1.5 < sd[3] / sd[2] < 3.0, sd
    assert sd[3] > 10 * sd[0], sd


def test_total_stays_close_to_the_crlb_on_data_of_the_fit_model(basis):
    rng = np.random.default_rng(11)
    clean = _clean(basis)
    ratio = []
    for _ in range(25):
        noise = 3.0 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
        scan = _scan(clean + noise)
        fit = fit_spectrum(scan, basis, config=CONFIG)
        sens = model_sensitivity(scan, basis, fit, config=CONFIG)
        total = np.hypot(fit.crlb_sd, sens.amplitude_sd())
        ratio.append(total / fit.crlb_sd)
    mean_ratio = np.mean(ratio, axis=0)
    assert np.all(mean_ratio < 1.15), mean_ratio


# ------------------------------------------------------------------ outputs
def test_outputs_carry_model_and_total_sd(demo_cohort):
    import csv
    import json

    with open(demo_cohort.out / "cohort.tsv", newline="") as fh:
        rows = [r for r in csv.DictReader(fh, delimiter="\t") if r["metabolite"] == "tNAA"]
    assert rows
    for row in rows:
        crlb, model, total = (float(row[k]) for k in ("ratio_tcr_sd", "ratio_tcr_model_sd",
                                                       "ratio_tcr_total_sd"))
        assert total == pytest.approx(math.hypot(crlb, model), rel=1e-5)
    folder = demo_cohort.scan_dir(rows[0]["scan_id"])
    doc = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
    factors = {v["factor"] for v in doc["model_uncertainty"]["variants"]}
    assert {"baseline", "line widths", "fit range"} <= factors
    assert "ratio total SD (noise + model)" in (folder / "report.html").read_text("utf-8")


def test_model_uncertainty_off_leaves_the_columns_empty(basis):
    from specproc.analysis import analyse_scan

    scan = _scan(_clean(basis) + 3.0 * (np.random.default_rng(5).standard_normal(N)
                                        + 1j * np.random.default_rng(6).standard_normal(N)))
    off = analyse_scan(scan, basis=basis, config={"fit": CONFIG, "uncertainty": {"model": False}})
    assert off.sensitivity is None and off.to_dict()["model_uncertainty"] is None
    row = next(r for r in off.rows() if r["metabolite"] == "NAA")
    assert math.isnan(row["ratio_tcr_total_sd"]) and math.isnan(row["amplitude_model_sd"])


# ------------------------------------------------------------------ macromolecule shapes
def _mm_basis() -> BasisSet:
    from specproc.basis import simulate_basis

    return simulate_basis(sequence="press", field_t=3.0, te_s=0.030, metabolites="NAA,Cr",
                          macromolecules=True, dwell_s=DWELL, n_points=T.size,
                          centre_ppm=CENTRE, cache=False)


def _gaussian_fid(shift_ppm: float, fwhm_hz: float, mhz: float) -> np.ndarray:
    """Analytic FID of a Gaussian line: exp(-2πi ν t) exp(-(π fwhm t)² / (4 ln 2))."""
    nu = (shift_ppm - CENTRE) * mhz
    return np.exp(-2j * np.pi * nu * T - (np.pi * fwhm_hz * T) ** 2 / (4 * np.log(2)))


def test_tentative_peak_is_half_weight_in_the_basis_and_varied_by_the_refits():
    from specproc.spins.systems import TENTATIVE_WEIGHT, load_macromolecules

    mm = {c.name: c for c in load_macromolecules()}["MM2.05"]
    tentative = [p for p in mm.peaks if p.tentative]
    # consensus table 1 (Cudalbu et al. 2021, checked): M1.9 "to be confirmed"
    assert [p.shift_ppm for p in tentative] == [1.90]
    assert TENTATIVE_WEIGHT == 0.5  # expectation of a uniform size in [0, full] (GUM 4.3.7)
    full = sum(p.protons for p in mm.peaks)
    assert mm.protons == pytest.approx(full - 0.5 * tentative[0].protons)
    basis = _mm_basis()
    scan = Scan(basis.fids[0] * np.exp(-np.pi * 6 * T), dwell_s=DWELL,
                spectrometer_mhz=basis.spectrometer_mhz, centre_ppm=CENTRE)
    fit = fit_spectrum(scan, basis,
                       config={"fit": {"range_ppm": [0.5, 4.2]}})
    variants = model_variants(fit, FitSettings(range_ppm=(0.5, 4.2)), SensitivitySettings(),
                              basis)
    scales = sorted(v.basis_changes["tentative_scale"] for v in variants
                    if v.factor == "tentative macromolecule peaks")
    assert scales == [0.0, 1.0]
    assert {"macromolecule shapes", "tentative macromolecule peaks"} <= {v.factor for v in variants}
    assert not any(v.basis_changes for v in model_variants(
        fit, FitSettings(range_ppm=(0.5, 4.2)), SensitivitySettings(tentative=False,
                                                                     mm_width_factor=1.0,
                                                                     mm_shift_ppm=0.0), basis))


def test_alternative_mm_basis_matches_analytic_gaussians():
    basis = _mm_basis()
    i = basis.index("MM2.05")
    mhz = basis.spectrometer_mhz
    # the consensus shape: 2.03 ppm, 0.10 ppm FWHM, 3 protons; the tentative 1.90 ppm line
    # (0.072 ppm, 1 proton) at half weight; a singlet echo scales every line alike
    scale = basis.fids[i][0] / (3.0 + 0.5)
    expected = scale * (3.0 * _gaussian_fid(2.03, 0.10 * mhz, mhz)
                        + 0.5 * _gaussian_fid(1.90, 0.072 * mhz, mhz))
    np.testing.assert_allclose(basis.fids[i], expected, atol=1e-9 * abs(scale))
    alt = alternative_mm_basis(basis, [i], width_factor=1.5, shift_ppm=0.03, tentative_scale=1.0)
    expected = scale * (3.0 * _gaussian_fid(2.06, 0.15 * mhz, mhz)
                        + 1.0 * _gaussian_fid(1.93, 0.108 * mhz, mhz))
    np.testing.assert_allclose(alt.fids[i], expected, atol=1e-9 * abs(scale))
    # other members untouched; absent tentative peak
    np.testing.assert_array_equal(alt.fids[basis.index("NAA")], basis.fids[basis.index("NAA")])
    gone = alternative_mm_basis(basis, [i], tentative_scale=0.0)
    np.testing.assert_allclose(gone.fids[i], scale * 3.0 * _gaussian_fid(2.03, 0.10 * mhz, mhz),
                               atol=1e-9 * abs(scale))
