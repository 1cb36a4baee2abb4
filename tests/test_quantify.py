"""Tests of specproc.quantify: water scaling, tissue/relaxation corrections, sums and ratios.

Sources named beside each check:
* Gasparovic C et al., Magn Reson Med 2006;55:1219-1226: the molal tissue-water equation and its
  CSF-corrected molar form (Theory section; equation numbers not checked against the paper);
  tissue water contents GM 0.78, WM 0.65, CSF 0.97 (Ernst et al., J Magn Reson B 1993;102:1-8,
  as used by Gasparovic; from memory) in the hand-worked example. The defaults are GM 0.837,
  WM 0.691, CSF 1.0 (Front Neurol 2019;10:1333, checked; tests/test_constants.py).
* Pure water: 55.508 mol/kg (1000 / 18.015268 g/mol) in the molal formula and 55.138 mol/L at
  37 C (IAPWS-95 density) in the molar formula (tests/test_constants.py checks both).
* Near J et al., NMR Biomed 2021;34:e4257 (consensus; same equation).
* Textbook physics: saturation-recovery/spin-echo attenuation exp(-TE/T2)(1 - exp(-TR/T1)) for a
  90° excitation; variance of a sum var(a+b) = var a + var b + 2 cov(a, b) and the first-order
  (delta-method) variance of a ratio.
"""

from __future__ import annotations

import json
import math
import tomllib

import numpy as np
import pytest

from specproc.constants import (
    WATER_MOLAL_MMOL_PER_KG,
    WATER_MOLAR_37C_MM,
    WATER_MOLAR_MASS_G_PER_MOL,
)
from specproc.errors import InvalidInputError
from specproc.provenance import STATUSES
from specproc.quantify import (
    NO_WATER_STATEMENT,
    RELAXATION_FILE,
    TISSUE_WATER_CONTENT,
    Acquisition,
    Amplitudes,
    Relaxation,
    RelaxationTimes,
    Tissue,
    WaterSignal,
    combine_linear,
    concentration_factors,
    load_relaxation_times,
    quantify,
    ratio_linear,
    relaxation_factor,
    validate_tissue_fractions,
    water_mole_fractions,
)

INF = math.inf
MOLAL = WATER_MOLAL_MMOL_PER_KG  # 55 508 mmol/kg, the molal formula's [H2O]
MOLAR = WATER_MOLAR_37C_MM  # 55 138 mmol/L at 37 C, the molar formula's [H2O]
D_GM = 0.837  # default GM water content (Front Neurol 2019, checked)
ERNST = {"gm": 0.78, "wm": 0.65, "csf": 0.97}  # Ernst et al. 1993 via Gasparovic (from memory)
# R = exp(-TE/T2)(1 - exp(-TR/T1)) = 1 exactly: no T2 decay and instant T1 recovery
NO_RELAX = Relaxation(1e-12, INF, "no attenuation")


def _table(water: dict[str, Relaxation], metabolites: dict[str, Relaxation]) -> RelaxationTimes:
    return RelaxationTimes(3.0, water, metabolites, NO_RELAX, {}, "test")


# ---------------------------------------------------------------------- relaxation factor
def test_relaxation_factor_is_the_analytic_expression():
    # textbook: spin echo after a 90° pulse repeated every TR: exp(-TE/T2) * (1 - exp(-TR/T1))
    te, tr, t1, t2 = 0.035, 1.5, 1.2, 0.09
    expected = math.exp(-0.035 / 0.09) * (1.0 - math.exp(-1.5 / 1.2))
    assert relaxation_factor(te_s=te, tr_s=tr, t1_s=t1, t2_s=t2) == pytest.approx(expected, 1e-14)
    # limits: TE = 0 and TR -> infinity give 1; no T2 decay gives the saturation factor only
    assert relaxation_factor(te_s=0.0, tr_s=INF, t1_s=1.0, t2_s=0.1) == 1.0
    assert relaxation_factor(te_s=0.03, tr_s=2.0, t1_s=1.0, t2_s=INF) == pytest.approx(
        1 - math.exp(-2.0)
    )
    # TR = T1 ln 2 halves the longitudinal magnetisation recovered
    assert relaxation_factor(te_s=0.0, tr_s=math.log(2.0), t1_s=1.0, t2_s=1.0) == pytest.approx(0.5)


@pytest.mark.parametrize("bad", [dict(te_s=-0.01), dict(tr_s=0.0), dict(t1_s=-1.0), dict(t2_s=0)])
def test_relaxation_factor_rejects_bad_times(bad):
    args = dict(te_s=0.03, tr_s=2.0, t1_s=1.4, t2_s=0.25) | bad
    with pytest.raises(InvalidInputError):
        relaxation_factor(**args)


# ---------------------------------------------------------------------- hand-worked example
def test_water_scaling_reproduces_hand_worked_gasparovic_example():
    """Gasparovic et al. 2006 (MRM 55:1219), molal tissue-water equation and its molar form.

    [M]_molal = (S_M/S_W)(N_W/N_M) (a_GM R_GM + a_WM R_WM + a_CSF R_CSF) / ((1 - a_CSF) R_M) [H2O]
    [M]_molar = (S_M/S_W)(N_W/N_M) (f_GM d_GM R_GM + f_WM d_WM R_WM + f_CSF d_CSF R_CSF)
                / ((1 - f_CSF) R_M) [H2O]
    with a_t = f_t d_t / sum(f d), R = exp(-TE/T2)(1 - exp(-TR/T1)), [H2O] = 55.508 mol/kg in the
    molal and 55.138 mol/L (37 C) in the molar formula.
    The arithmetic is written out below with the numbers, independently of specproc.
    """
    # inputs: NAA methyl signal (3 protons) and water (2 protons), PRESS TE 30 ms, TR 2 s
    s_m, s_w, n_m, n_w = 3.6e3, 2.0e7, 3, 2
    f_gm, f_wm, f_csf = 0.55, 0.30, 0.15
    d_gm, d_wm, d_csf = 0.78, 0.65, 0.97  # Ernst et al. 1993 via Gasparovic 2006 (from memory)
    te, tr = 0.030, 2.0
    # water T1/T2 (s) per tissue and NAA T1/T2 (s): test inputs (3 T-like values)
    t1_gm, t2_gm, t1_wm, t2_wm, t1_csf, t2_csf = 1.331, 0.110, 0.832, 0.0796, 3.817, 0.503
    t1_m, t2_m = 1.40, 0.25

    # step 1: f_t d_t = 0.55*0.78 = 0.4290, 0.30*0.65 = 0.1950, 0.15*0.97 = 0.1455; sum 0.7695
    fd_gm, fd_wm, fd_csf = f_gm * d_gm, f_wm * d_wm, f_csf * d_csf
    fd_sum = fd_gm + fd_wm + fd_csf
    assert fd_sum == pytest.approx(0.7695, abs=1e-12)
    # step 2: water mole fractions a = 0.55750, 0.25341, 0.18908
    a_gm, a_wm, a_csf = fd_gm / fd_sum, fd_wm / fd_sum, fd_csf / fd_sum
    assert (a_gm, a_wm, a_csf) == pytest.approx((0.557505, 0.253411, 0.189084), abs=1e-6)
    # step 3: relaxation factors
    #   R_GM  = exp(-0.03/0.110)  * (1 - exp(-2/1.331)) = 0.761300 * 0.777456 = 0.591877
    #   R_WM  = exp(-0.03/0.0796) * (1 - exp(-2/0.832)) = 0.685995 * 0.909630 = 0.624002
    #   R_CSF = exp(-0.03/0.503)  * (1 - exp(-2/3.817)) = 0.942102 * 0.407836 = 0.384223
    #   R_M   = exp(-0.03/0.25)   * (1 - exp(-2/1.40))  = 0.886920 * 0.760349 = 0.674369
    r_gm = math.exp(-te / t2_gm) * (1 - math.exp(-tr / t1_gm))
    r_wm = math.exp(-te / t2_wm) * (1 - math.exp(-tr / t1_wm))
    r_csf = math.exp(-te / t2_csf) * (1 - math.exp(-tr / t1_csf))
    r_m = math.exp(-te / t2_m) * (1 - math.exp(-tr / t1_m))
    assert (r_gm, r_wm, r_csf, r_m) == pytest.approx(
        (0.591877, 0.624002, 0.384223, 0.674369), abs=1e-6
    )
    # step 4: signal ratio per proton: (3600 / 2e7) * (2 / 3) = 1.2e-4
    ratio = (s_m / s_w) * (n_w / n_m)
    assert ratio == pytest.approx(1.2e-4, rel=1e-12)
    # step 5 (molal): numerator 0.557505*0.591877 + 0.253411*0.624002 + 0.189084*0.384223
    #   = 0.560754; denominator (1 - 0.189084) * 0.674369 = 0.546844
    #   [M] = 1.2e-4 * 0.560754 / 0.546844 * 55508.47 mmol/kg = 6.8303 mmol/kg
    molal = ratio * (a_gm * r_gm + a_wm * r_wm + a_csf * r_csf) / ((1 - a_csf) * r_m) * 55508.47
    assert molal == pytest.approx(6.8303, abs=1e-4)
    # step 6 (molar): numerator 0.4290*0.591877 + 0.1950*0.624002 + 0.1455*0.384223 = 0.431500;
    #   denominator (1 - 0.15) * 0.674369 = 0.573214
    #   [M] = 1.2e-4 * 0.431500 / 0.573214 * 55138.23 mM = 4.9808 mM
    molar = ratio * (fd_gm * r_gm + fd_wm * r_wm + fd_csf * r_csf) / ((1 - f_csf) * r_m) * 55138.23
    assert molar == pytest.approx(4.9808, abs=1e-4)

    water = {
        "gm": Relaxation(t1_gm, t2_gm),
        "wm": Relaxation(t1_wm, t2_wm),
        "csf": Relaxation(t1_csf, t2_csf),
    }
    result = quantify(
        Amplitudes.from_mapping({"NAA": s_m, "Cr": 2.0e3}, protons={"NAA": 3, "Cr": 3}),
        water=WaterSignal(s_w),
        tissue=Tissue({"GM": f_gm, "WM": f_wm, "CSF": f_csf}, water_content=ERNST),
        acquisition=Acquisition(te, tr),
        relaxation=_table(water, {"NAA": Relaxation(t1_m, t2_m), "Cr": Relaxation(1.35, 0.15)}),
    )
    # the constants were rounded to 7 digits above
    assert result.conc_molal_mmol_kg["NAA"] == pytest.approx(molal, rel=1e-7)
    assert result.conc_molar_mm["NAA"] == pytest.approx(molar, rel=1e-7)
    # the record holds the formula and the constants
    record = result.to_dict()
    assert "(1 - a_CSF)" in record["formula"]["molal"]
    assert record["constants"]["water_content"] == {"gm": 0.78, "wm": 0.65, "csf": 0.97}
    assert record["constants"]["water_relaxation"]["gm"]["relaxation_factor"] == pytest.approx(
        r_gm
    )
    assert record["constants"]["metabolites"]["NAA"]["relaxation_factor"] == pytest.approx(r_m)
    json.dumps(record, allow_nan=False)  # JSON-serialisable, no NaN


# ---------------------------------------------------------------------- limiting cases
def test_pure_grey_matter_without_relaxation():
    # Gasparovic 2006 with f_GM = 1 and all R = 1:
    #   molar = (S_M/S_W)(2/N_M) * 55.14 M * d_GM; molal = (S_M/S_W)(2/N_M) * 55.51 mol/kg
    water = {t: NO_RELAX for t in ("gm", "wm", "csf")}
    res = quantify(
        Amplitudes.from_mapping({"Cr": 1.0e3, "PCr": 5.0e2}, protons={"Cr": 3, "PCr": 3}),
        water=WaterSignal(1.0e7),
        tissue={"gm": 1.0, "wm": 0.0, "csf": 0.0},
        acquisition=Acquisition(0.03, 2.0),
        relaxation=_table(water, {"Cr": NO_RELAX, "PCr": NO_RELAX}),
    )
    expected_molar = (1.0e3 / 1.0e7) * (2 / 3) * MOLAR * D_GM
    expected_molal = (1.0e3 / 1.0e7) * (2 / 3) * MOLAL
    assert res.conc_molar_mm["Cr"] == pytest.approx(expected_molar, rel=1e-12)
    assert res.conc_molal_mmol_kg["Cr"] == pytest.approx(expected_molal, rel=1e-12)
    # tCr concentration is the sum of the members' concentrations
    assert res.conc_molar_mm["tCr"] == pytest.approx(1.5 * expected_molar, rel=1e-12)


@pytest.mark.parametrize("f_csf", [0.0, 0.1, 0.25, 0.5])
def test_csf_fraction_scales_molar_result_as_one_over_one_minus_fcsf(f_csf):
    # with equal water content in every compartment and no relaxation, the water signal does not
    # depend on the partition, so [M] = ratio * 55.14 M * d / (1 - f_CSF) (Gasparovic 2006)
    d = 0.8
    water = {t: NO_RELAX for t in ("gm", "wm", "csf")}
    fractions = {"gm": 0.6 * (1 - f_csf), "wm": 0.4 * (1 - f_csf), "csf": f_csf}
    res = quantify(
        Amplitudes.from_mapping({"NAA": 2.0e3}, protons={"NAA": 3}),
        water=WaterSignal(1.0e7),
        tissue=Tissue(fractions, water_content={"gm": d, "wm": d, "csf": d}),
        acquisition=Acquisition(0.0, INF),
        relaxation=_table(water, {"NAA": NO_RELAX}),
        reference="NAA",
    )
    ratio = (2.0e3 / 1.0e7) * (2 / 3)
    assert res.conc_molar_mm["NAA"] == pytest.approx(ratio * MOLAR * d / (1 - f_csf), rel=1e-12)
    # with equal water contents the water mole fractions equal the volume fractions, so the
    # molal result is ratio * 55.51 / (1 - f_CSF)
    assert res.conc_molal_mmol_kg["NAA"] == pytest.approx(ratio * MOLAL / (1 - f_csf), rel=1e-12)


def test_csf_with_default_water_contents_follows_the_formula():
    # general check of the molar form: [M] (1 - f_CSF) / sum(f d R_W) is independent of f
    water = {t: NO_RELAX for t in ("gm", "wm", "csf")}
    values = []
    for f_csf in (0.0, 0.2, 0.4):
        f = {"gm": 0.7 * (1 - f_csf), "wm": 0.3 * (1 - f_csf), "csf": f_csf}
        res = quantify(
            Amplitudes.from_mapping({"NAA": 1.0}, protons={"NAA": 3}), water=WaterSignal(1.0),
            tissue=f, acquisition=Acquisition(0.0, INF),
            relaxation=_table(water, {"NAA": NO_RELAX}), reference="NAA",
        )
        fd = f["gm"] * 0.837 + f["wm"] * 0.691 + f["csf"] * 1.0
        values.append(res.conc_molar_mm["NAA"] * (1 - f_csf) / fd)
    assert values == pytest.approx([values[0]] * 3, rel=1e-12)
    assert values[0] == pytest.approx((2 / 3) * MOLAR, rel=1e-12)


def test_proton_normalised_amplitudes_give_the_same_concentrations():
    water = {"gm": Relaxation(1.3, 0.1), "wm": Relaxation(0.8, 0.08), "csf": Relaxation(4, 0.5)}
    metab = {"NAA": Relaxation(1.4, 0.25), "Cr": Relaxation(1.35, 0.15)}
    common = dict(
        water=WaterSignal(4.0e6), tissue={"gm": 0.5, "wm": 0.4, "csf": 0.1},
        acquisition=Acquisition(0.03, 2.0), relaxation=_table(water, metab),
    )
    # signal areas S = A_per_proton * N
    signals = quantify(Amplitudes.from_mapping({"NAA": 3 * 10.0, "Cr": 5 * 8.0},
                                               protons={"NAA": 3, "Cr": 5}), **common)
    per_proton = quantify(Amplitudes.from_mapping({"NAA": 10.0, "Cr": 8.0}, per_molecule=True),
                          **common)
    for name in ("NAA", "Cr", "tCr"):
        assert signals.conc_molar_mm[name] == pytest.approx(per_proton.conc_molar_mm[name])
        assert signals.ratios[name] == pytest.approx(per_proton.ratios[name])
    # molecule ratio NAA/tCr = 10 / 8 from either kind of amplitude
    assert per_proton.ratios["NAA"] == pytest.approx(10.0 / 8.0)
    # water amplitude per proton: S_W = 2 * A_W
    half = quantify(
        {"NAA": 10.0, "Cr": 8.0}, **(common | {"water": WaterSignal(2.0e6, per_proton=True)}),
    )
    assert half.conc_molar_mm["NAA"] == pytest.approx(per_proton.conc_molar_mm["NAA"])


def test_separate_water_timings_are_used_for_water():
    water = {"gm": Relaxation(1.3, 0.1), "wm": Relaxation(0.8, 0.08), "csf": Relaxation(4, 0.5)}
    table = _table(water, {"NAA": NO_RELAX})
    f = {"gm": 1.0, "wm": 0.0, "csf": 0.0}
    molar, _molal, consts = concentration_factors(
        ["NAA"], water_amplitude=1.0, volume_fractions=f, te_s=0.03, tr_s=2.0,
        metabolite_relaxation=table.metabolites, water_relaxation=water, protons={"NAA": 1},
        water_te_s=0.0, water_tr_s=INF,
    )
    # fully relaxed water (R_W = 1) and no metabolite relaxation: k = 2 * 55138 * 0.837
    assert molar["NAA"] == pytest.approx(2 * MOLAR * D_GM)
    assert consts["water_relaxation"]["gm"]["relaxation_factor"] == 1.0


# ---------------------------------------------------------------------- fractions
def test_tissue_fractions_validation():
    out = validate_tissue_fractions({"GM": 0.502, "WM": 0.4, "CSF": 0.1})  # sums to 1.002
    assert sum(out.values()) == pytest.approx(1.0, abs=1e-15)
    assert out["gm"] == pytest.approx(0.502 / 1.002)
    with pytest.raises(InvalidInputError, match="sum"):
        validate_tissue_fractions({"gm": 0.5, "wm": 0.3, "csf": 0.1})
    with pytest.raises(InvalidInputError, match=">= 0"):
        validate_tissue_fractions({"gm": 1.1, "wm": -0.1, "csf": 0.0})
    with pytest.raises(InvalidInputError, match="missing"):
        validate_tissue_fractions({"gm": 0.9, "wm": 0.1})
    with pytest.raises(InvalidInputError, match="unknown"):
        validate_tissue_fractions({"gm": 0.5, "wm": 0.5, "csf": 0.0, "bone": 0.0})
    with pytest.raises(InvalidInputError, match="CSF only"):
        validate_tissue_fractions({"gm": 0.0, "wm": 0.0, "csf": 1.0})


def test_water_mole_fractions_by_hand():
    # a_t = f_t d_t / sum(f d): 0.5*0.837 = 0.4185, 0.5*0.691 = 0.3455; sum 0.764
    a = water_mole_fractions({"gm": 0.5, "wm": 0.5, "csf": 0.0})
    assert a["gm"] == pytest.approx(0.4185 / 0.764)
    assert a["wm"] == pytest.approx(0.3455 / 0.764)
    assert a["csf"] == 0.0
    assert TISSUE_WATER_CONTENT == {"gm": 0.837, "wm": 0.691, "csf": 1.0}
    # Ernst et al. 1993: 0.5*0.78 = 0.39, 0.5*0.65 = 0.325; sum 0.715
    a = water_mole_fractions({"gm": 0.5, "wm": 0.5, "csf": 0.0}, ERNST)
    assert a["gm"] == pytest.approx(0.39 / 0.715)


# ---------------------------------------------------------------------- sums and ratios
def test_sum_sd_uses_the_covariance():
    # var(a + b) = var a + var b + 2 cov(a, b) = 4 + 9 - 2*1.5 = 10
    cov = np.array([[4.0, -1.5, 0.0], [-1.5, 9.0, 0.0], [0.0, 0.0, 1.0]])
    out = combine_linear([10.0, 5.0, 3.0], cov, names=["Cr", "PCr", "NAA"])
    value, sd, members = out["tCr"]
    assert value == 15.0
    assert sd == pytest.approx(math.sqrt(10.0))
    assert members == ("Cr", "PCr")
    assert out["tNAA"] == (3.0, 1.0, ("NAA",))  # NAAG not fitted: NAA alone
    assert "Glx" not in out  # no member fitted
    # weighted sum: var(2a + 3b) = 4*4 + 9*9 + 2*2*3*(-1.5) = 79
    out_w = combine_linear([10.0, 5.0, 3.0], cov, names=["Cr", "PCr", "NAA"], weights=[2, 3, 1])
    assert out_w["tCr"][1] == pytest.approx(math.sqrt(79.0))


def test_sum_and_ratio_sd_agree_with_monte_carlo():
    rng = np.random.default_rng(20260101)
    mean = np.array([8.0, 4.0, 10.0])
    cov = np.array([[0.25, -0.12, 0.02], [-0.12, 0.16, 0.0], [0.02, 0.0, 0.3]])
    draws = rng.multivariate_normal(mean, cov, size=200_000)
    res = quantify(Amplitudes.from_mapping(dict(zip(["Cr", "PCr", "NAA"], mean, strict=True)),
                                           covariance=cov, per_molecule=True))
    # sum: sample SD of Cr + PCr
    assert res.amplitude_sd["tCr"] == pytest.approx(np.std(draws[:, 0] + draws[:, 1]), rel=0.01)
    # ratio NAA/tCr and Cr/tCr: delta method against the sample SD (small relative errors)
    assert res.ratio_sd["NAA"] == pytest.approx(
        np.std(draws[:, 2] / (draws[:, 0] + draws[:, 1])), rel=0.03
    )
    assert res.ratio_sd["Cr"] == pytest.approx(
        np.std(draws[:, 0] / (draws[:, 0] + draws[:, 1])), rel=0.03
    )
    assert res.ratios["tCr"] == 1.0 and res.ratio_sd["tCr"] == pytest.approx(0.0, abs=1e-12)
    r, sd = ratio_linear(np.array([0, 0, 1.0]), np.array([1.0, 1, 0]), mean, cov)
    assert r == pytest.approx(10.0 / 12.0)
    assert sd == pytest.approx(res.ratio_sd["NAA"])


def test_concentration_sd_propagates_covariance():
    water = {t: NO_RELAX for t in ("gm", "wm", "csf")}
    cov = np.array([[4.0, -1.0], [-1.0, 1.0]])
    res = quantify(
        Amplitudes.from_mapping({"Glu": 100.0, "Gln": 30.0}, covariance=cov,
                                protons={"Glu": 5, "Gln": 5}),
        water=WaterSignal(1.0e6), tissue={"gm": 1, "wm": 0, "csf": 0},
        acquisition=Acquisition(0.0, INF),
        relaxation=_table(water, {"Glu": NO_RELAX, "Gln": NO_RELAX}), reference="Glu",
    )
    k = (2 / 5) / 1.0e6 * MOLAR * D_GM  # per-amplitude factor, pure GM, no relaxation
    assert res.conc_molar_mm["Glx"] == pytest.approx(130.0 * k)
    # var(Glu + Gln) = 4 + 1 - 2 = 3 (amplitude units), times k^2
    assert res.conc_molar_sd_mm["Glx"] == pytest.approx(k * math.sqrt(3.0))
    assert res.conc_molar_sd_mm["Glu"] == pytest.approx(2.0 * k)


# ---------------------------------------------------------------------- no water reference
def test_no_water_reference_gives_ratios_only():
    res = quantify(Amplitudes.from_mapping(
        {"NAA": 12.0, "NAAG": 1.0, "Cr": 6.0, "PCr": 2.0, "GPC": 1.0, "PCh": 0.6},
        per_molecule=True,
        sd=[0.5, 0.4, 0.3, 0.3, 0.1, 0.1],
    ))
    assert res.statement == NO_WATER_STATEMENT == "no water reference: ratios to tCr only"
    assert not res.water_referenced
    assert res.conc_molar_mm is None and res.conc_molal_mmol_kg is None
    assert res.ratios["tNAA"] == pytest.approx(13.0 / 8.0)
    assert res.ratios["tCho"] == pytest.approx(1.6 / 8.0)
    d = res.to_dict()
    assert d["statement"] == NO_WATER_STATEMENT
    assert d["conc_molar_mm"] is None
    json.dumps(d, allow_nan=False)
    rows = res.rows()
    assert [r["name"] for r in rows][-3:] == ["tNAA", "tCr", "tCho"]


def test_missing_inputs_are_reported():
    with pytest.raises(InvalidInputError, match="proton"):
        quantify(Amplitudes.from_mapping({"NAA": 1.0, "Cr": 1.0}))
    with pytest.raises(InvalidInputError, match="tissue fractions"):
        quantify({"NAA": 1.0}, water=WaterSignal(1.0), acquisition=Acquisition(None, None, 3.0))
    with pytest.raises(InvalidInputError, match="field"):
        quantify({"NAA": 1.0}, water=WaterSignal(1.0), acquisition=Acquisition(0.03, 2.0),
                 tissue={"gm": 1, "wm": 0, "csf": 0})
    with pytest.raises(InvalidInputError, match="covariance"):
        quantify(Amplitudes.from_mapping({"NAA": 1.0, "Cr": 1.0}, covariance=np.eye(3)))


# ---------------------------------------------------------------------- relaxation table
def _file_entries():
    with open(RELAXATION_FILE, "rb") as fh:
        return tomllib.load(fh)


def test_relaxation_file_entries_are_cited_and_plausible():
    raw = _file_entries()
    groups = [raw["default"], *raw["water"].values(), *raw["metabolite"].values()]
    refs = raw["references"]
    for entries in groups:
        for e in entries:
            # every time has its own provenance record naming a reference (project rule)
            for q in ("t1_s", "t2_s"):
                if q in e:
                    prov = e[q.replace("_s", "_provenance")]
                    assert prov["status"] in STATUSES and prov["at"], e
                    assert prov["status"] == "common practice" or prov["ref"] in refs, e
            if "t1_s" in e and "t2_s" in e:
                assert 0 < e["t2_s"] < e["t1_s"] < 6.0
    # the required fields are present
    assert {e["field_t"] for e in raw["water"]["gm"]} >= {1.5, 3.0, 7.0}
    for name in ("NAA", "Cr", "Cho", "mI", "Glu", "Gln", "GABA", "Lac"):
        assert name in raw["metabolite"]


def test_relaxation_loader_field_choice():
    raw = _file_entries()
    gm = {e["field_t"]: e for e in raw["water"]["gm"] if "t1_s" in e}
    # 2.89 T (a "3 T" scanner) takes the 3 T entry
    at_289 = load_relaxation_times(2.89)
    assert at_289.water["gm"].t1_s == gm[3.0]["t1_s"]
    # 5 T lies halfway between the 3 T and 7 T entries: linear interpolation
    at_5 = load_relaxation_times(5.0)
    assert at_5.water["gm"].t1_s == pytest.approx(0.5 * (gm[3.0]["t1_s"] + gm[7.0]["t1_s"]))
    assert "interpolated" in at_5.water["gm"].note
    # outside the range: nearest tabulated field
    assert load_relaxation_times(9.4).water["gm"].t1_s == gm[7.0]["t1_s"]
    assert load_relaxation_times(1.0).water["gm"].t1_s == gm[1.5]["t1_s"]
    # aliases and defaults
    pcr, cr = at_289.metabolite("PCr"), at_289.metabolite("Cr")
    assert (pcr.t1_s, pcr.t2_s) == (cr.t1_s, cr.t2_s)
    assert "alias" in pcr.note
    tau = at_289.metabolite("Tau")
    assert (tau.t1_s, tau.t2_s) == (at_289.default.t1_s, at_289.default.t2_s)
    assert "default" in tau.note
    # a metabolite tabulated at 3 T only is carried to 7 T with the default's field dependence
    # T(7 T) = T(3 T) * T_default(7 T) / T_default(3 T)
    gln3 = next(e for e in raw["metabolite"]["Gln"] if e["field_t"] == 3.0)
    d = {e["field_t"]: e for e in raw["default"]}
    gln7 = load_relaxation_times(7.0).metabolite("Gln")
    assert gln7.t2_s == pytest.approx(gln3["t2_s"] * d[7.0]["t2_s"] / d[3.0]["t2_s"])
    assert gln7.t1_s == pytest.approx(gln3["t1_s"] * d[7.0]["t1_s"] / d[3.0]["t1_s"])
    assert "field dependence of the default" in gln7.note
    # a quantity missing from an entry (Lac T1) falls back to the default's
    lac = at_289.metabolite("Lac")
    assert lac.t1_s == at_289.default.t1_s
    assert lac.t2_s == next(e["t2_s"] for e in raw["metabolite"]["Lac"])


def test_relaxation_overrides_dict_and_file(tmp_path):
    over = {"water": {"gm": {"t2_s": 0.09}}, "metabolite": {"NAA": {"t1_s": 1.5, "t2_s": 0.3}}}
    base = load_relaxation_times(3.0)
    table = load_relaxation_times(3.0, overrides=over)
    assert table.water["gm"].t2_s == 0.09
    assert table.water["gm"].t1_s == base.water["gm"].t1_s  # untouched
    assert (table.metabolite("NAA").t1_s, table.metabolite("NAA").t2_s) == (1.5, 0.3)
    assert table.metabolite("NAA").note == "user override"
    path = tmp_path / "mine.toml"
    path.write_text('[metabolite.GABA]\nt2_s = 0.075\nsource = "our measurement"\n')
    from_file = load_relaxation_times(3.0, overrides=path)
    assert from_file.metabolite("GABA").t2_s == 0.075
    assert "our measurement" in from_file.metabolite("GABA").source
    assert str(path) in from_file.file
    bad = tmp_path / "bad.toml"
    bad.write_text("[water.bone]\nt1_s = 1.0\n")
    with pytest.raises(InvalidInputError, match="bone") as info:
        load_relaxation_times(3.0, overrides=bad)
    assert str(bad) in str(info.value)
    with pytest.raises(InvalidInputError, match="unknown keys"):
        load_relaxation_times(3.0, overrides={"metabolite": {"NAA": {"t3_s": 1.0}}})
    with pytest.raises(InvalidInputError, match="positive"):
        load_relaxation_times(3.0, overrides={"water": {"wm": {"t1_s": -1.0}}})
    broken = tmp_path / "broken.toml"
    broken.write_text("[water\n")
    with pytest.raises(InvalidInputError, match="TOML"):
        load_relaxation_times(3.0, overrides=broken)


def test_quantify_with_the_bundled_table_records_sources():
    res = quantify(
        {"NAA": 10.0, "Cr": 6.0, "PCr": 2.0, "Tau": 1.0},
        water=WaterSignal(2.0e4),
        tissue={"gm": 0.6, "wm": 0.3, "csf": 0.1},
        acquisition=Acquisition(0.03, 2.0, 2.89),
    )
    consts = res.to_dict()["constants"]
    assert "Wansapura" in consts["water_relaxation"]["gm"]["source"]
    assert consts["water_relaxation"]["csf"]["t1_provenance"]["status"] == "checked"
    assert consts["field_t"] == 2.89
    assert any("default relaxation" in n for n in res.notes)  # Tau has no entry
    # plausible order of magnitude for a brain-like example (a few to tens of mM)
    assert 1.0 < res.conc_molar_mm["NAA"] < 100.0


def test_forward_model_of_a_voxel_is_inverted():
    """Count molecules in a simulated voxel and check both concentrations are recovered.

    Independent of the paper's algebra: water molecules per compartment V·f_t·d_t·[H2O] with
    [H2O] = 55.138 mol/L (pure water at 37 C; d_t relative to it), each with 2 protons
    attenuated by its own R; the metabolite (molar concentration c per litre of GM+WM tissue)
    in GM and WM only, N protons each, attenuated by R_M; the molal truth divides the moles by
    the mass of the GM+WM water, its moles times 18.015268 g/mol.
    """
    volume_l = 8e-6  # an 8 mL voxel, L
    f = {"gm": 0.45, "wm": 0.35, "csf": 0.20}
    d = {"gm": 0.837, "wm": 0.691, "csf": 1.0}
    water_t = {"gm": (1.331, 0.110), "wm": (0.832, 0.0796), "csf": (3.817, 0.503)}
    te, tr, water_tr = 0.035, 1.8, 6.0  # water reference with a longer TR
    c_true_mm, n_protons, t1_m, t2_m = 9.5, 3, 1.40, 0.25

    def attenuation(t1, t2, rep):
        return math.exp(-te / t2) * (1 - math.exp(-rep / t1))

    moles_water = {t: volume_l * f[t] * d[t] * 55.138 for t in f}  # mol
    s_w = sum(2 * moles_water[t] * attenuation(*water_t[t], water_tr) for t in f)
    moles_m = c_true_mm * 1e-3 * volume_l * (f["gm"] + f["wm"])  # mol
    s_m = n_protons * moles_m * attenuation(t1_m, t2_m, tr)
    tissue_water_kg = (moles_water["gm"] + moles_water["wm"]) * WATER_MOLAR_MASS_G_PER_MOL / 1e3
    molal_true = moles_m * 1e3 / tissue_water_kg  # mmol/kg

    table = _table(
        {t: Relaxation(*water_t[t]) for t in f}, {"NAA": Relaxation(t1_m, t2_m)}
    )
    res = quantify(
        Amplitudes.from_mapping({"NAA": s_m}, protons={"NAA": n_protons}),
        water=WaterSignal(s_w, tr_s=water_tr), tissue=f, acquisition=Acquisition(te, tr),
        relaxation=table, reference="NAA",
    )
    # 55.138 is the 5-digit value of WATER_MOLAR_37C_MM / 1000; the molal result does not depend
    # on it (it cancels)
    assert res.conc_molar_mm["NAA"] == pytest.approx(c_true_mm, rel=1e-5)
    assert res.conc_molal_mmol_kg["NAA"] == pytest.approx(molal_true, rel=1e-10)


def test_docstring_examples_run():
    import doctest

    from specproc.quantify import result as result_module

    result = doctest.testmod(result_module)
    assert result.attempted > 0 and result.failed == 0


def test_solution_concentration_of_a_phantom():
    """Analytic: a solution of c_M molecules (amplitude k c_M per molecule) in water of c_W
    (signal k N_W c_W, N_W = 2) gives back c_M; relaxation attenuations divide the signals."""
    from specproc.quantify import solution_concentration_mm

    k, c_m, c_w = 3.7e-3, 12.5, 55_510.0
    assert solution_concentration_mm(k * c_m, k * 2 * c_w, water_mm=c_w) == pytest.approx(c_m)
    got = solution_concentration_mm(0.8 * k * c_m, 0.5 * k * 2 * c_w, metabolite_relaxation=0.8,
                                    water_relaxation=0.5, water_mm=c_w)
    assert got == pytest.approx(c_m)
