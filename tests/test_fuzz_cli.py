"""Fuzzing through the command line: hostile headers, data and settings (issue 17).

Each run must end in exit 0 with sane numbers and every promised output, or in exit 2 with one
line naming the file and nothing written; never a traceback, never a partial output
(:func:`_fuzz_cases.judge`). The cases are drawn by hypothesis (derandomised, so CI runs the
same ones); ``benchmarks/bench_fuzz.py`` runs the same generators over 10,000 cases.
"""

from __future__ import annotations

import pytest
from _fuzz_cases import (
    NIFTI_CASES,
    config_strategy,
    run_config,
    run_fit,
    run_fit_mm,
    run_info,
    run_preprocess,
    run_preprocess_with_config,
    small_basis,
)
from hypothesis import HealthCheck, given, settings

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")


def _settings(n: int):
    return settings(max_examples=n, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.too_slow,
                                           HealthCheck.function_scoped_fixture,
                                           HealthCheck.data_too_large])


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    small_basis(folder.parent / "fuzz_basis.npz")
    return folder


@_settings(200)
@given(case=NIFTI_CASES)
def test_info_on_hostile_headers(work, case):
    assert run_info(case, work) in ("ok", "clean_error")


@_settings(100)
@given(settings_=config_strategy())
def test_config_check_on_hostile_settings(work, settings_):
    assert run_config(settings_, work) in ("ok", "clean_error")


@_settings(12)
@given(case=NIFTI_CASES)
def test_preprocess_on_hostile_files(work, case):
    assert run_preprocess(case, work) in ("ok", "clean_error")


@_settings(8)
@given(settings_=config_strategy())
def test_preprocess_with_hostile_settings(work, settings_):
    assert run_preprocess_with_config(settings_, work) in ("ok", "clean_error")


@_settings(6)
@given(case=NIFTI_CASES)
def test_fit_on_hostile_files(work, case):
    assert run_fit(case, work, work.parent / "fuzz_basis.npz") in ("ok", "clean_error")


@_settings(10)
@given(case=NIFTI_CASES)
def test_fit_with_a_hostile_mm_spectrum(work, case):
    assert run_fit_mm(case, work) in ("ok", "clean_error")
