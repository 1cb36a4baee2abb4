"""A CI-sized subset of the independent validation corpus, run through ``specproc batch``.

Outside check: the scans come from ``benchmarks/validation/generate.py``, a generator that
shares no line-shape, macromolecule, baseline or water code with the fit (per-metabolite T2
from the literature, asymmetric Voigt line shapes, its own macromolecule multiplets, residual
water with dispersive tails, uneven PRESS TE1/TE2; see its docstring and
``benchmarks/validation/README.md``). The truth is the relaxation-weighted ratio to tCr that
the generator put in.

The 20 scans are 3 T PRESS TE 30 with narrow lines (NAA 3-5 Hz), SNR 60-150 and distinct T2
(NAA about 210 ms, creatine about 140 ms; literature values, see the generator), TE1 in the
``specproc_timings`` header key. The limits are the issue's: a fit with one damping for all
metabolites overestimates tNAA/tCr here (about +15 to +40 %), so the check is expected to fail
until the fit has per-metabolite line widths and a macromolecule model that survives
mismatch.
"""

from __future__ import annotations

import numpy as np
import pytest
from _validation import batch_on_corpus, validation_module


@pytest.fixture(scope="module")
def ci_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[list[dict], dict]:
    corpus = tmp_path_factory.mktemp("validation-ci")
    validation_module("generate").generate(corpus, preset="ci")
    return batch_on_corpus(corpus)


def _relative_errors(truths: list[dict], run: dict, measure: str) -> np.ndarray:
    errors = run["score"].errors(truths, run["est"], measure, measure, "ratio")
    assert errors["missing"] == 0, f"{measure}: {errors['missing']} scans without an estimate"
    return np.asarray(errors["rel_pct"])


@pytest.mark.slow
def test_ci_subset_is_what_it_claims(ci_run) -> None:
    truths, run = ci_run
    assert len(truths) == 20
    assert all(s != "failed" for s in run["status"].values())
    for t in truths:
        spec = t["spec"]
        assert spec["field_t"] == 3.0 and spec["te_s"] == 0.030
        assert 3.0 <= spec["naa_fwhm_hz"] <= 5.0
        # distinct T2: NAA narrower than creatine in every scan's draw (literature centres
        # 0.21 and 0.14 s, 10 % scatter)
        assert t["t2_s"]["NAA"] > t["t2_s"]["Cr"]


@pytest.mark.slow
def test_ci_subset_ratio_bias(ci_run) -> None:
    truths, run = ci_run
    naa = _relative_errors(truths, run, "tNAA")
    cho = _relative_errors(truths, run, "tCho")
    # issue 10: |tNAA/tCr bias| < 6 % on narrow-line scans with distinct T2
    assert abs(np.median(naa)) < 6.0, f"tNAA/tCr median error {np.median(naa):+.1f} %"
    assert abs(np.median(cho)) < 6.0, f"tCho/tCr median error {np.median(cho):+.1f} %"
    assert np.percentile(np.abs(naa), 90) < 12.0


def test_requantification_with_the_generators_constants_returns_its_truth() -> None:
    """The scorer's tNAA in mM with the generator's constants (score.requantified_tnaa) goes
    back to the generator's concentration when the amplitudes are the generator's own signals:
    metabolite ``c (1 - f_CSF) exp(-TE/T2)(1 - exp(-TR/T1))`` per molecule and water
    ``2 [H2O] Σ f_t d_t exp(-TE/T2_t)(1 - exp(-TR/T1_t))`` (the generator's water model, built
    here from its tables, not with specproc); with no constant switched it is specproc's own
    reported value."""
    gen = validation_module("generate")
    score = validation_module("score")
    from specproc.quantify import Acquisition, Tissue, WaterSignal, quantify

    te, tr, field = 0.144, 2.5, 3.0
    fractions = {"gm": 0.55, "wm": 0.35, "csf": 0.10}
    conc = {"NAA": 10.0, "NAAG": 1.5, "Cr": 4.5, "PCr": 4.0}

    def weight(t1: float, t2: float) -> float:
        return float(np.exp(-te / t2) * (1.0 - np.exp(-tr / t1)))

    amps = {m: c * (1 - fractions["csf"]) * weight(gen.T1_S[field][m], gen.T2_S[field][m])
            for m, c in conc.items()}
    s_w = 2 * gen.WATER_MM * sum(
        f * gen.WATER_CONTENT[t] * weight(gen.WATER_T1_S[field][t], gen.WATER_T2_S[field][t])
        for t, f in fractions.items())
    q = quantify(amps, water=WaterSignal(s_w, 0.0, te, tr), tissue=Tissue(fractions),
                 acquisition=Acquisition(te_s=te, tr_s=tr, field_t=field)).to_dict()
    every = [p for p, _ in score.CONSTANT_PARTS]
    assert score.requantified_tnaa(q, field, every) == pytest.approx(11.5, rel=1e-9)
    assert score.requantified_tnaa(q, field, []) == pytest.approx(q["conc_molar_mm"]["tNAA"],
                                                                  rel=1e-9)
    # specproc's own constants give a higher value here (TE 144: its water T2 are longer)
    assert q["conc_molar_mm"]["tNAA"] > 11.5 * 1.1
