"""Long fuzz run of the command line: hostile headers, data and settings (issue 17).

The generators and the judge are those of the CI fuzz test (``tests/_fuzz_cases.py``):
hypothesis draws NIfTI-MRS files (header values, data kinds, dwell times, data types,
intensity scaling, compression, truncation or trailing bytes, odd file names) and TOML settings;
each case runs through the CLI entry point in process and is classified as ``ok`` (exit 0, every
output, sane numbers), ``clean_error`` (exit 2, one line naming the file, nothing written),
``traceback``, ``partial``, ``bad_message`` or ``insane``. The target is 0 of the last four.

Run::

    python benchmarks/bench_fuzz.py                  # 10,000 cases (about 15 min CPU)
    python benchmarks/bench_fuzz.py --scale 0.1      # a tenth of each kind

Default mix: 5,500 ``info --json``, 2,000 ``config check``, 1,200 ``preprocess`` of hostile
files, 800 ``preprocess`` of a plausible file with hostile settings and 500 ``fit``
(4-singlet basis, 512 points) cases. Times are CPU seconds of this process
(``time.process_time``; the machine may be shared). BLAS is kept at one thread.
"""

from __future__ import annotations

import argparse
import collections
import os
import sys
import tempfile
import time
import warnings
from pathlib import Path

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

MIX = {"info": 5500, "config": 2000, "preprocess": 1200, "preprocess+config": 800, "fit": 500}


def _run_kind(kind: str, n: int, work: Path, basis: Path, seed: int,
              examples: list[tuple[str, str]]) -> collections.Counter:
    from _fuzz_cases import (
        NIFTI_CASES,
        config_strategy,
        run_config,
        run_fit,
        run_info,
        run_preprocess,
        run_preprocess_with_config,
    )
    from hypothesis import HealthCheck, given, settings
    from hypothesis import seed as hyp_seed

    counts: collections.Counter = collections.Counter()
    strategy = config_strategy() if kind in ("config", "preprocess+config") else NIFTI_CASES
    runner = {"info": run_info, "preprocess": run_preprocess, "config": run_config,
              "preprocess+config": run_preprocess_with_config,
              "fit": lambda case, w: run_fit(case, w, basis)}[kind]

    @hyp_seed(seed)
    @settings(max_examples=n, deadline=None, database=None, phases=["generate"],
              suppress_health_check=list(HealthCheck))
    @given(case=strategy)
    def one(case):
        outcome = runner(case, work)
        counts[outcome] += 1
        if outcome not in ("ok", "clean_error") and len(examples) < 20:
            examples.append((kind, f"{outcome}: {case!r}"[:400]))

    one()
    return counts


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0, help="fraction of the default mix")
    parser.add_argument("--seed", type=int, default=17)
    args = parser.parse_args()
    warnings.simplefilter("ignore", RuntimeWarning)
    from _fuzz_cases import OUTCOMES, small_basis
    from threadpoolctl import threadpool_limits

    examples: list[tuple[str, str]] = []
    rows = []
    with tempfile.TemporaryDirectory() as tmp, threadpool_limits(1):
        work = Path(tmp) / "work"
        work.mkdir()
        basis = small_basis(Path(tmp) / "basis.npz")
        for kind, n in MIX.items():
            n = max(1, round(n * args.scale))
            start = time.process_time()
            counts = _run_kind(kind, n, work, basis, args.seed, examples)
            rows.append((kind, counts, time.process_time() - start))
            print(f"  {kind:<17} {sum(counts.values()):>6} cases  "
                  + "  ".join(f"{o} {counts[o]}" for o in OUTCOMES), flush=True)
    total: collections.Counter = collections.Counter()
    for _kind, counts, _cpu in rows:
        total.update(counts)
    print()
    print(f"{'command':<18}{'cases':>7}" + "".join(f"{o:>13}" for o in OUTCOMES)
          + f"{'CPU s':>9}")
    for kind, counts, cpu in rows:
        print(f"{kind:<18}{sum(counts.values()):>7}" + "".join(f"{counts[o]:>13}"
                                                          for o in OUTCOMES) + f"{cpu:>9.1f}")
    print(f"{'total':<18}{sum(total.values()):>7}" + "".join(f"{total[o]:>13}"
                                                         for o in OUTCOMES)
          + f"{sum(r[2] for r in rows):>9.1f}")
    bad = sum(total[o] for o in OUTCOMES[2:])
    print(f"\ntracebacks {total['traceback']}, partial outputs {total['partial']}, "
          f"bad messages {total['bad_message']}, insane results {total['insane']}")
    for kind, text in examples:
        print(f"  [{kind}] {text}")
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
