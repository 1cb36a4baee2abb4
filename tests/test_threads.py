"""The per-scan BLAS thread limit (threadpoolctl reports what the libraries are set to)."""

import numpy as np
import pytest
import scipy.linalg  # noqa: F401  (loads scipy's own BLAS, which must be limited too)
from threadpoolctl import threadpool_info

from specproc._threads import BLAS_THREADS_ENV, blas_thread_limit, blas_threads
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess import pipeline


def blas_counts():
    return [pool["num_threads"] for pool in threadpool_info() if pool["user_api"] == "blas"]


def test_default_is_one_thread_and_restored(monkeypatch):
    monkeypatch.delenv(BLAS_THREADS_ENV, raising=False)
    before = blas_counts()
    assert len(before) >= 1
    with blas_threads():
        assert blas_counts() == [1] * len(before)
    assert blas_counts() == before


def test_setting_from_the_environment(monkeypatch):
    monkeypatch.setenv(BLAS_THREADS_ENV, "0")
    assert blas_thread_limit() is None
    before = blas_counts()
    with blas_threads():
        assert blas_counts() == before  # 0: the libraries' own setting
    monkeypatch.setenv(BLAS_THREADS_ENV, "2")
    assert blas_thread_limit() == 2
    monkeypatch.setenv(BLAS_THREADS_ENV, "many")
    with pytest.raises(InvalidInputError, match=BLAS_THREADS_ENV):
        blas_thread_limit()


def test_preprocessing_runs_at_one_thread(monkeypatch):
    monkeypatch.delenv(BLAS_THREADS_ENV, raising=False)
    seen = []
    original = pipeline.remove_water_scan

    def spy(scan, **kw):
        seen.append(blas_counts())
        return original(scan, **kw)

    monkeypatch.setattr(pipeline, "remove_water_scan", spy)
    t = np.arange(2048) * 2.5e-4
    fid = np.exp(-2j * np.pi * (2.008 - 4.65) * 123.2 * t - np.pi * 4 * t) + 0.5 * np.exp(
        -np.pi * 6 * t)
    pipeline.run_pipeline(Scan(fid, dwell_s=2.5e-4, spectrometer_mhz=123.2))
    assert seen and all(count == 1 for count in seen[0])


_FRESH_PROBE = """
import json
from threadpoolctl import threadpool_info
from specproc._threads import blas_threads
with blas_threads():
    import scipy.linalg  # first imported inside the context, as a per-scan function does
    print(json.dumps([p["num_threads"] for p in threadpool_info() if p["user_api"] == "blas"]))
"""


def test_libraries_first_loaded_inside_the_context_are_limited():
    import json
    import os
    import subprocess
    import sys

    env = {k: v for k, v in os.environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS",
                        BLAS_THREADS_ENV)}
    proc = subprocess.run([sys.executable, "-c", _FRESH_PROBE], capture_output=True, text=True,
                          env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr
    counts = json.loads(proc.stdout.strip().splitlines()[-1])
    assert counts and all(count == 1 for count in counts)  # numpy's and scipy's own OpenBLAS
