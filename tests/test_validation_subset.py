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
@pytest.mark.xfail(strict=True, reason="macromolecule signals under NAA whose shape differs "
                   "from the fit's components still bias tNAA/tCr (about +19 % here; without "
                   "them the per-metabolite widths give 1-3 %); issue 10")
def test_ci_subset_ratio_bias(ci_run) -> None:
    truths, run = ci_run
    naa = _relative_errors(truths, run, "tNAA")
    cho = _relative_errors(truths, run, "tCho")
    # issue 10: |tNAA/tCr bias| < 6 % on narrow-line scans with distinct T2
    assert abs(np.median(naa)) < 6.0, f"tNAA/tCr median error {np.median(naa):+.1f} %"
    assert abs(np.median(cho)) < 6.0, f"tCho/tCr median error {np.median(cho):+.1f} %"
    assert np.percentile(np.abs(naa), 90) < 12.0
