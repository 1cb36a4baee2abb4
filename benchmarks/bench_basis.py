"""Benchmark: simulate the 20-metabolite PRESS basis at 3 T, cold and cached.

Prints a table of the cold simulation time of the whole set (no cache; wall and CPU time, the
latter for a loaded machine), the time of a cache hit, and the time of each metabolite.
Targets (issue 3): ≤ 20 s cold on one core, ≤ 0.5 s cached.

Run with ``python benchmarks/bench_basis.py [--points 2048] [--bandwidth 4000] [--te 30]``.
BLAS threads are limited to one before numpy is imported, so the figures are single-core.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=2048)
    parser.add_argument("--bandwidth", type=float, default=4000.0, help="Hz")
    parser.add_argument("--te", type=float, default=30.0, help="ms")
    parser.add_argument("--field", type=float, default=3.0, help="T")
    parser.add_argument("--repeats", type=int, default=3, help="cold runs (best is reported)")
    opts = parser.parse_args()

    with tempfile.TemporaryDirectory() as cache:
        os.environ["SPECPROC_CACHE_DIR"] = cache
        from specproc.basis import simulate_basis
        from specproc.spins.systems import load_metabolites

        names = [m.name for m in load_metabolites() if m.kind == "metabolite"]
        args = dict(sequence="press", field_t=opts.field, te_s=opts.te * 1e-3,
                    dwell_s=1 / opts.bandwidth, n_points=opts.points, metabolites=names)
        cold = []
        cold_cpu = []
        result = None
        for _ in range(opts.repeats):
            start = time.perf_counter()
            start_cpu = time.process_time()
            result = simulate_basis(**args, cache=False)
            cold.append(time.perf_counter() - start)
            cold_cpu.append(time.process_time() - start_cpu)
        start = time.perf_counter()
        simulate_basis(**args)  # fills the cache
        fill = time.perf_counter() - start
        hits = []
        for _ in range(5):
            start = time.perf_counter()
            simulate_basis(**args)
            hits.append(time.perf_counter() - start)

    assert result is not None
    per = result.metadata["simulation_time_s"]
    print(f"PRESS basis, {opts.field:g} T, TE {opts.te:g} ms, {opts.points} points, "
          f"{opts.bandwidth:g} Hz, {len(names)} metabolites, one BLAS thread")
    print()
    print(f"{'case':<34}{'time (s)':>10}")
    print(f"{'cold, whole set (best of ' + str(opts.repeats) + ')':<34}{min(cold):>10.3f}")
    print(f"{'cold, whole set (worst)':<34}{max(cold):>10.3f}")
    print(f"{'cold, whole set, CPU time (best)':<34}{min(cold_cpu):>10.3f}")
    print(f"{'first cached run (simulate + save)':<34}{fill:>10.3f}")
    print(f"{'cache hit (best of 5)':<34}{min(hits):>10.3f}")
    print(f"{'cache hit (worst of 5)':<34}{max(hits):>10.3f}")
    print()
    print(f"{'metabolite':<12}{'protons':>8}{'lines':>8}{'engine (s)':>12}")
    for i, name in enumerate(result.names):
        print(f"{name:<12}{result.protons[i]:>8g}{len(result.lines[i]):>8}{per[name]:>12.4f}")
    engine = sum(per.values())
    print(f"{'sum':<12}{'':>8}{'':>8}{engine:>12.4f}")
    print(f"(FID synthesis and bookkeeping: {min(cold) - engine:.3f} s of the best cold run)")


if __name__ == "__main__":
    main()
