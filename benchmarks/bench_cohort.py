"""Cost of a cohort on realistic inputs: CPU per scan by stage, throughput, memory.

Inputs: 100 invented 3 T PRESS TE 30 ms scans of the independent validation corpus
(``benchmarks/validation/generate.py``, category ``3T-TE30``): 2,048 points, 32 raw transients
(about a third with 4 coils), frequency and phase drift, residual water, a water reference
each, tissue fractions in the manifest, fitted with the full default basis (20 metabolites and
the macromolecule and lipid members) simulated for each scan's protocol (a few TE1 values,
hence a few bases; simulated once and cached before anything is timed).

Printed:

1. CPU seconds per scan by stage (load, preprocess, basis, fit, model uncertainty (the refits
   of :mod:`specproc.fit.sensitivity`), quantify, QC, tables, figures, report, other) for all
   outputs and for tables only, measured in this process by timing the functions the batch
   calls (``time.process_time``, exclusive of nested stages), after one
   warm-up scan so that one-time imports are not counted (they are shown on their own);
2. one dense least-squares solve of the fit's design matrix (``numpy.linalg.lstsq``, members
   plus baseline and penalty rows) as the physical reference of the fit stage;
3. throughput of ``run_batch`` with 1 and 2 local workers, each configuration in a fresh
   process: wall time, scans per minute, CPU seconds per scan (the process and its workers,
   ``resource.getrusage``), peak resident memory of the parent and of the largest worker, and
   the workers' resident memory over the first and the last quarter of the scans (flat memory);
4. optionally (``--compare-solvers N``) the cohort tables of N scans with the truncated HLSVD
   and with the full SVD, compared cell by cell.

CPU time is the meaningful number on a loaded machine: wall-clock throughput is depressed by
whatever else runs, so the load average is printed beside it. BLAS is held at one thread.

Run::

    python benchmarks/bench_cohort.py                    # 100 scans (data in /tmp, generated once)
    python benchmarks/bench_cohort.py --scans 40 --stage-scans 10 --modes tables
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import argparse
import contextlib
import csv
import importlib
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent

#: Stages and the functions whose CPU time is theirs (module, attribute path).
STAGES: dict[str, tuple[tuple[str, str], ...]] = {
    "load": (("specproc.io", "load"),),
    "preprocess": (("specproc.preprocess.pipeline", "run_pipeline"),),
    "basis": (("specproc.batch.task", "_load_basis"), ("specproc.batch.runner", "_prepare_basis"),
              ("specproc.protocol", "Protocol.simulate")),
    "fit": (("specproc.fit", "fit_spectrum"),),
    "model uncertainty": (("specproc.analysis", "_model_sensitivity"),),
    "quantify": (("specproc.quantify", "quantify"), ("specproc.quantify", "WaterSignal.measure")),
    "QC": (("specproc.qc", "qc_from_scan"),),
    "tables": (("specproc._tsv", "tsv_text"), ("specproc.report.tables", "config_to_toml"),
               ("specproc.analysis", "_write_folder"), ("specproc.batch.task", "write_outcome"),
               ("specproc.batch.task", "summarise_fit_json")),
    "figures": (("specproc.report.fit_figure", "plot_fit"),
                ("specproc.report.figures", "figure_png_bytes"),
                ("specproc.report.figures", "figure_pdf_bytes"),
                ("specproc.report.preprocess_figure", "render_preprocess_figure")),
    "report": (("specproc.report.html", "render_report"),),
    "cohort tables": (("specproc.batch.cohort", "write_cohort"),),
}


# ---------------------------------------------------------------- inputs
def make_inputs(root: Path, n: int) -> Path:
    """The first ``n`` 3T-TE30 scans of the validation corpus, generated once; the manifest."""
    manifest = root / f"manifest-{n}.tsv"
    if manifest.exists():
        return manifest
    sys.path.insert(0, str(HERE / "validation"))
    from generate import generate, plan_corpus

    ids = [s.scan_id for s in plan_corpus() if s.category == "3T-TE30"][:n]
    t0 = time.process_time()
    generate(root, scan_ids=ids)
    print(f"generated {len(ids)} scans in {root} ({time.process_time() - t0:.0f} s CPU)")
    (root / "manifest.tsv").rename(manifest)
    return manifest


def entries_of(manifest: Path, n: int | None = None) -> list[Any]:
    from specproc.batch import read_entries

    entries = sorted(read_entries(manifest), key=lambda e: e.key)
    return entries if n is None else entries[:n]


# ---------------------------------------------------------------- stage timing
class StageClock:
    """Exclusive CPU time per stage of the functions in :data:`STAGES` while installed."""

    def __init__(self) -> None:
        self.cpu: dict[str, float] = dict.fromkeys(STAGES, 0.0)
        self._stack: list[list[float]] = []

    def _wrap(self, stage: str, fn: Any) -> Any:
        def timed(*args: Any, **kwargs: Any) -> Any:
            frame = [time.process_time(), 0.0]  # start, CPU of nested stages
            self._stack.append(frame)
            try:
                return fn(*args, **kwargs)
            finally:
                self._stack.pop()
                spent = time.process_time() - frame[0]
                self.cpu[stage] += spent - frame[1]
                if self._stack:
                    self._stack[-1][1] += spent

        timed.__wrapped__ = fn  # type: ignore[attr-defined]
        return timed

    @contextlib.contextmanager
    def installed(self) -> Iterator[StageClock]:
        undo = []
        for stage, targets in STAGES.items():
            for module_name, attr in targets:
                owner: Any = importlib.import_module(module_name)
                *path, name = attr.split(".")
                for part in path:
                    owner = getattr(owner, part)
                # the attribute as stored (a classmethod object, say) is what is put back
                stored = vars(owner)[name] if isinstance(owner, type) else getattr(owner, name)
                setattr(owner, name, self._wrap(stage, getattr(owner, name)))
                undo.append((owner, name, stored))
        try:
            yield self
        finally:
            for owner, name, original in reversed(undo):
                setattr(owner, name, original)


def stage_table(manifest: Path, n: int, modes: list[str]) -> dict[str, dict[str, float]]:
    """CPU s per scan by stage, in this process (one worker), for each output mode."""
    from specproc.batch import run_batch

    entries = entries_of(manifest, n + 1)
    warm, timed = entries[:1], entries[1:]
    out: dict[str, dict[str, float]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.process_time()
        for mode in modes:  # imports and bases of every mode before anything is timed
            run_batch(warm, Path(tmp) / f"warm-{mode}", workers=1, outputs=mode)
        print(f"warm-up (imports, basis cache, one scan per mode): "
              f"{time.process_time() - t0:.1f} s CPU")
        for mode in modes:
            clock = StageClock()
            t0 = time.process_time()
            with clock.installed():
                run_batch(timed, Path(tmp) / mode, workers=1, outputs=mode)
            total = time.process_time() - t0
            row = {k: v / len(timed) for k, v in clock.cpu.items()}
            row["other"] = total / len(timed) - sum(row.values())
            row["total"] = total / len(timed)
            out[mode] = row
    return out


def print_stage_table(table: dict[str, dict[str, float]], n: int) -> None:
    modes = list(table)
    print(f"\n1. CPU s per scan by stage ({n} scans, one process, BLAS 1 thread)")
    print(f"{'stage':>17}" + "".join(f"{m:>12}" for m in modes))
    for stage in [*STAGES, "other", "total"]:
        print(f"{stage:>17}" + "".join(f"{table[m][stage]:>12.3f}" for m in modes))


# ---------------------------------------------------------------- physical reference
def dense_reference(manifest: Path) -> tuple[float, float, tuple[int, int]]:
    """(lstsq s, fit s) CPU on the first scan: the design matrix of its fit, one dense solve."""
    import numpy as np

    sys.path.insert(0, str(HERE))
    from bench_fit_speed import design_matrix

    from specproc.analysis import resolve_config
    from specproc.fit import fit_spectrum, settings_from_config
    from specproc.io import load
    from specproc.preprocess.pipeline import run_pipeline
    from specproc.protocol import resolve_protocol

    entry = entries_of(manifest, 1)[0]
    scan = load(entry.scan_path)
    water = load(entry.water_path) if entry.water_path else None
    cfg, _ = resolve_config(None)
    pre = run_pipeline(scan, water=water, config=cfg)
    basis = resolve_protocol(scan, config=cfg).simulate()
    settings = settings_from_config(cfg)
    a = design_matrix(pre.scan, basis, settings)
    b = np.random.default_rng(0).standard_normal(a.shape[0])
    solves, fits = [], []
    for _ in range(5):
        t0 = time.process_time()
        np.linalg.lstsq(a, b, rcond=None)
        solves.append(time.process_time() - t0)
        t0 = time.process_time()
        fit_spectrum(pre.scan, basis, config=cfg)
        fits.append(time.process_time() - t0)
    return float(np.median(solves)), float(np.median(fits)), a.shape


# ---------------------------------------------------------------- throughput
def _rss_mib(pid: int) -> float:
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return float("nan")


def child(manifest: Path, out: Path, workers: int, mode: str, n: int) -> None:
    """One batch in this fresh process; prints one JSON line."""
    import multiprocessing

    from specproc.batch import run_batch

    entries = entries_of(manifest, n)
    samples: list[tuple[int, float]] = []  # (scans done, largest worker RSS MiB)
    stop = threading.Event()

    def sample() -> None:
        while not stop.wait(0.5):
            done = sum(1 for p in (out / "scans").glob("*/done.json")) if out.exists() else 0
            pids = [p.pid for p in multiprocessing.active_children() if p.pid]
            rss = max([_rss_mib(p) for p in pids] or [_rss_mib(os.getpid())])
            samples.append((done, rss))

    sampler = threading.Thread(target=sample, daemon=True)
    load0 = os.getloadavg()[0]
    sampler.start()
    t0, c0 = time.perf_counter(), time.process_time()
    summary = run_batch(entries, out, workers=workers, outputs=mode)
    wall = time.perf_counter() - t0
    parent_cpu = time.process_time() - c0
    stop.set()
    sampler.join()
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime)
    quarter = max(1, n // 4)
    first = [r for d, r in samples if 0 < d <= quarter]
    last = [r for d, r in samples if d >= n - quarter]
    print(json.dumps({
        "workers": workers, "mode": mode, "scans": summary.n_scans, "failed": summary.n_failed,
        "wall_s": wall, "cpu_s": cpu, "parent_cpu_s": parent_cpu,
        "parent_mib": own.ru_maxrss / 1024.0, "worker_mib": kids.ru_maxrss / 1024.0,
        "rss_first_quarter_mib": max(first) if first else None,
        "rss_last_quarter_mib": max(last) if last else None,
        "load_before": load0, "load_after": os.getloadavg()[0],
    }))


def run_child(manifest: Path, out: Path, workers: int, mode: str, n: int) -> dict[str, Any]:
    shutil.rmtree(out, ignore_errors=True)
    proc = subprocess.run(
        [sys.executable, __file__, "--child", str(manifest), str(out), str(workers), mode,
         str(n)], capture_output=True, text=True, check=True, env=os.environ.copy())
    return json.loads(proc.stdout.strip().splitlines()[-1])


def print_throughput(rows: list[dict[str, Any]]) -> None:
    print("\n3. throughput (fresh process per row; CPU = process + workers, incl. start-up; "
          "wall depends on the machine's load)")
    print(f"{'mode':>7} {'workers':>7} {'scans':>5} {'wall s':>7} {'scans/min':>9} "
          f"{'CPU s/scan':>10} {'parent CPU s':>12} {'parent MiB':>10} {'worker MiB':>10} "
          f"{'RSS 1st/last q':>15} {'load avg':>9}")
    for r in rows:
        rate = 60.0 * r["scans"] / r["wall_s"]
        q = (f"{r['rss_first_quarter_mib'] or float('nan'):.0f}/"
             f"{r['rss_last_quarter_mib'] or float('nan'):.0f}")
        print(f"{r['mode']:>7} {r['workers']:>7} {r['scans']:>5} {r['wall_s']:>7.1f} "
              f"{rate:>9.1f} {r['cpu_s'] / r['scans']:>10.2f} {r['parent_cpu_s']:>12.1f} "
              f"{r['parent_mib']:>10.0f} "
              f"{r['worker_mib']:>10.0f} {q:>15} "
              f"{r['load_before']:>4.1f}-{r['load_after']:<4.1f}")
    by = {(r["mode"], r["workers"]): r for r in rows}
    for mode in sorted({r["mode"] for r in rows}):
        if (mode, 1) in by and (mode, 2) in by:
            speedup = by[(mode, 1)]["wall_s"] / by[(mode, 2)]["wall_s"]
            one, two = by[(mode, 1)], by[(mode, 2)]
            # on 2 free cores, counting the parent's own work as serial (conservative): the
            # workers' CPU shared by the two cores, plus the parent's
            serial = two["parent_cpu_s"]
            ideal = one["cpu_s"] / (serial + (two["cpu_s"] - serial) / 2.0)
            print(f"{mode}: 2 workers {speedup:.2f} x the throughput of 1 (wall, under the "
                  f"load shown); from the CPU times, {ideal:.2f} x on 2 free cores (target 1.8)")


# ---------------------------------------------------------------- results unchanged
def compare_solvers(manifest: Path, n: int) -> None:
    from specproc.batch import run_batch
    from specproc.config import merge_config

    entries = entries_of(manifest, n)
    tables, cpu = {}, {}
    with tempfile.TemporaryDirectory() as tmp:
        for solver in ("full", "lanczos"):
            cfg = merge_config({"preprocess": {"water_removal": {"solver": solver}}})
            out = Path(tmp) / solver
            t0 = time.process_time()
            run_batch(entries, out, config=cfg, workers=1, outputs="tables")
            cpu[solver] = (time.process_time() - t0) / n
            with open(out / "cohort.tsv", encoding="utf-8", newline="") as handle:
                tables[solver] = list(csv.reader(handle, delimiter="\t"))
    a, b = tables["full"], tables["lanczos"]
    cells = sum(len(r) for r in a)
    differ = [(i, j, x, y) for i, (ra, rb) in enumerate(zip(a, b, strict=True))
              for j, (x, y) in enumerate(zip(ra, rb, strict=True)) if x != y]
    print(f"\n4. cohort.tsv of {n} scans, HLSVD by full SVD vs truncated: {len(a)} rows, "
          f"{cells} cells, {len(differ)} differ; tables-only CPU per scan {cpu['full']:.3f} s "
          f"(full SVD) and {cpu['lanczos']:.3f} s (truncated)")
    for i, j, x, y in differ[:10]:
        print(f"   row {i} column {a[0][j]}: {x} -> {y}")


# ---------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scans", type=int, default=100, help="scans of the throughput runs")
    parser.add_argument("--stage-scans", type=int, default=20,
                        help="scans of the stage table (after one warm-up scan)")
    parser.add_argument("--modes", default="tables,all", help="output modes to measure")
    parser.add_argument("--workers", default="1,2", help="worker counts of the throughput runs")
    parser.add_argument("--data", type=Path, default=Path(tempfile.gettempdir()) /
                        "specproc-bench-cohort", help="folder of the generated inputs")
    parser.add_argument("--skip", default="", help="comma-separated parts to skip: "
                        "stages,reference,throughput")
    parser.add_argument("--compare-solvers", type=int, default=0, metavar="N",
                        help="also compare the cohort tables of N scans, full vs truncated SVD")
    parser.add_argument("--child", nargs=5, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        manifest, out, workers, mode, n = args.child
        child(Path(manifest), Path(out), int(workers), mode, int(n))
        return 0
    from threadpoolctl import threadpool_limits

    threadpool_limits(1, user_api="blas")
    skip = set(filter(None, args.skip.split(",")))
    modes = [m for m in args.modes.split(",") if m]
    args.data.mkdir(parents=True, exist_ok=True)
    manifest = make_inputs(args.data, max(args.scans, args.stage_scans + 1))
    print(f"inputs: {manifest} ({len(entries_of(manifest))} scans; 2,048 points, 32 "
          "transients, water references, full default basis)")
    print(f"machine: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f} at start; "
          "CPU seconds are the meaningful numbers on a loaded machine")
    if "stages" not in skip:
        print_stage_table(stage_table(manifest, args.stage_scans, modes), args.stage_scans)
    if "reference" not in skip:
        solve, fit, shape = dense_reference(manifest)
        print(f"\n2. physical reference: one dense lstsq of the fit's {shape[0]} x {shape[1]} "
              f"design matrix {solve * 1e3:.1f} ms CPU; one fit {fit:.3f} s CPU "
              f"({fit / solve:.0f} solves)")
    if "throughput" not in skip:
        rows = []
        with tempfile.TemporaryDirectory() as tmp:
            for mode in modes:
                for workers in (int(w) for w in args.workers.split(",")):
                    rows.append(run_child(manifest, Path(tmp) / f"{mode}-{workers}", workers,
                                          mode, args.scans))
        print_throughput(rows)
    if args.compare_solvers:
        compare_solvers(manifest, args.compare_solvers)
    print(f"\nload average at the end {os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
