"""Helpers of the tests that run scans of the independent validation corpus through the CLI.

The generator and scorer live in ``benchmarks/validation/`` (not a package); they are loaded
from there by path.
"""

from __future__ import annotations

import importlib.util
import json
import os
import subprocess
import sys
from pathlib import Path
from types import ModuleType
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
VALIDATION = ROOT / "benchmarks" / "validation"


def validation_module(name: str) -> ModuleType:
    """``benchmarks/validation/<name>.py`` as a module (``generate`` or ``score``)."""
    spec = importlib.util.spec_from_file_location(name, VALIDATION / f"{name}.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


def batch_on_corpus(corpus: Path, timeout_s: float = 600) -> tuple[list[dict[str, Any]], dict]:
    """``specproc batch`` with default settings on a generated corpus folder.

    Returns the truth records and ``{"est", "status", "score"}`` (the estimates and scan
    status read by the scorer, and the scorer module).
    """
    score = validation_module("score")
    run = corpus / "run"
    env = {**os.environ, "SPECPROC_CACHE_DIR": str(corpus / "cache"),
           "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    cmd = [*score.specproc_command(), "batch", str(corpus / "manifest.tsv"), "-o", str(run),
           "--workers", "2", "--no-progress"]
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=timeout_s)
    assert proc.returncode == 0, proc.stderr
    truths = json.loads((corpus / "truth.json").read_text())["scans"]
    est, status = score.read_cohort(run)
    return truths, {"est": est, "status": status, "score": score}


def run_scans(tmp_path_factory: Any, name: str, scan_ids: tuple[str, ...],
              timeout_s: float = 900) -> tuple[list[dict[str, Any]], dict]:
    """Generate ``scan_ids`` of the corpus in a fresh folder and run :func:`batch_on_corpus`;
    every scan must be there and none may fail."""
    corpus = tmp_path_factory.mktemp(name)
    validation_module("generate").generate(corpus, scan_ids=scan_ids)
    truths, run = batch_on_corpus(corpus, timeout_s=timeout_s)
    assert sorted(t["scan_id"] for t in truths) == sorted(scan_ids)
    assert all(s != "failed" for s in run["status"].values())
    return truths, run


def ratio_errors(truths_run: tuple[list[dict[str, Any]], dict], measure: str) -> dict[str, Any]:
    """The scorer's errors of the ratio to tCr of ``measure`` (``rel_pct``, ``covered`` ...);
    every scan must have an estimate."""
    truths, run = truths_run
    errors = run["score"].errors(truths, run["est"], measure, measure, "ratio")
    assert errors["missing"] == 0, f"{measure}: {errors['missing']} scans without an estimate"
    return errors
