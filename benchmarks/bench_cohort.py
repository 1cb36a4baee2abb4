"""Cohort throughput and memory: N invented scans end to end with 1 and 2 local workers.

Each configuration runs in a fresh Python process (``--child``) so that its peak resident
memory, ``resource.getrusage`` of the process itself and of its worker processes (the largest
child), belongs to that configuration alone. The scans are invented (specproc.synthetic):
1024 points, 4 transients, a 5-member basis (NAA, Cr, PCr, GPC, PCh; PRESS, TE 80 ms, 3 T), no
water reference, so the HLSVD water removal step is switched off. Every scan goes through the
full per-scan workflow (preprocess, fit, quantify, QC, results.tsv, fit.json, figures,
report.html) and the cohort tables.

Run::

    python benchmarks/bench_cohort.py            # 200 scans
    python benchmarks/bench_cohort.py --scans 40 # quicker

Parallel efficiency target: 2 workers at least 1.7 times as fast as 1 (on an otherwise idle
machine with 2 free cores).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

MEMBERS = ["NAA", "Cr", "PCr", "GPC", "PCh"]
CONC = {"NAA": 12.0, "Cr": 5.0, "PCr": 3.0, "GPC": 1.5, "PCh": 0.5}


def _basis():
    from specproc.basis import simulate_basis

    return simulate_basis(sequence="press", field_t=3.0, te_s=0.08, dwell_s=5e-4,
                          n_points=1024, metabolites=MEMBERS)


def make_cohort(root: Path, n: int) -> None:
    """Write ``n`` invented scans in BIDS layout under ``root``."""
    import numpy as np

    from specproc.synthetic import write_synthetic_cohort

    write_synthetic_cohort(root, _basis(), n_subjects=n, concentrations=CONC,
                           rng=np.random.default_rng(2026))
    (root / "bench.toml").write_text("[preprocess.water_removal]\nenabled = false\n", "utf-8")


def child(root: Path, out: Path, workers: int) -> None:
    """Run one batch and print a JSON line of wall time and peak memory."""
    from specproc.batch import discover_bids, run_batch
    from specproc.config import load_config

    entries = discover_bids(root)
    config = load_config(root / "bench.toml")
    start = time.perf_counter()
    summary = run_batch(entries, out, config=config, workers=workers, metabolites=MEMBERS)
    wall = time.perf_counter() - start
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # KiB -> MiB on Linux
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    print(json.dumps({"workers": workers, "scans": summary.n_scans,
                      "failed": summary.n_failed, "wall_s": wall, "self_mib": own,
                      "children_mib": kids}))


def _run_child(root: Path, out: Path, workers: int) -> dict:
    shutil.rmtree(out, ignore_errors=True)
    proc = subprocess.run(
        [sys.executable, __file__, "--child", str(root), str(out), str(workers)],
        capture_output=True, text=True, check=True, env=os.environ.copy(),
    )
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scans", type=int, default=200)
    parser.add_argument("--child", nargs=3, metavar=("ROOT", "OUT", "WORKERS"))
    args = parser.parse_args()
    if args.child:
        child(Path(args.child[0]), Path(args.child[1]), int(args.child[2]))
        return
    with tempfile.TemporaryDirectory(prefix="bench-cohort-") as tmp:
        tmp_path = Path(tmp)
        os.environ.setdefault("SPECPROC_CACHE_DIR", str(tmp_path / "cache"))
        root = tmp_path / "cohort"
        make_cohort(root, args.scans)
        _basis()  # simulate once so both runs find it in the cache
        rows = [_run_child(root, tmp_path / f"out{w}", w) for w in (1, 2)]
        identical = all(
            (tmp_path / "out1" / name).read_bytes() == (tmp_path / "out2" / name).read_bytes()
            for name in ("cohort.tsv", "cohort_qc.tsv")
        )
    print(f"cohort benchmark: {args.scans} invented scans, 1024 points, 4 transients, "
          f"{len(MEMBERS)}-member basis, load average {os.getloadavg()[0]:.1f} "
          f"on {os.cpu_count()} CPUs")
    print(f"{'workers':>7} {'wall s':>8} {'scans/s':>8} {'speed-up':>8} "
          f"{'parent MiB':>10} {'worker MiB':>10} {'failed':>6}")
    base = rows[0]["wall_s"]
    for r in rows:
        print(f"{r['workers']:>7} {r['wall_s']:>8.1f} {r['scans'] / r['wall_s']:>8.2f} "
              f"{base / r['wall_s']:>8.2f} {r['self_mib']:>10.0f} {r['children_mib']:>10.0f} "
              f"{r['failed']:>6}")
    print(f"cohort tables identical for 1 and 2 workers: {identical}")


if __name__ == "__main__":
    main()
