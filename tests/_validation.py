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
