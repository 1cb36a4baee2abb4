"""Running a cohort: protocols and shared bases, executors, resume, then the cohort summary.

Flow of :func:`run_batch`:

1. For each entry (streamed, one scan in memory at a time) the parent reads the scan's header
   to find its **protocol** (:func:`specproc.protocol.resolve_protocol`: field, sequence, TE
   and sub-timings, dwell time, number of points, receiver centre, basis members) and hashes
   the inputs (SHA-256 of the scan and water files, of the effective configuration and of
   the entry's manifest values, the protocol's basis key and the specproc version). A scan
   that cannot be read fails here, with its reason.
2. A scan whose ``done.json`` records the same hashes is skipped (resume).
3. The basis of each distinct protocol is simulated once, in the parent, and saved to
   ``OUTDIR/basis/<key>.npz`` (the simulation cache of :mod:`specproc.basis` is used too); the
   workers load it by path. An edited scan (``DIM_EDIT`` axis, :mod:`specproc.edited`) has no
   plain basis: its protocol is PRESS with its editing pulses, whose key includes the pulses,
   and its ON, OFF and DIFF bases are saved to ``OUTDIR/basis/<key>-{on,off,diff}.npz``.
4. The remaining scans go to an executor: in-process (``workers=1``), local worker processes
   (:class:`concurrent.futures.ProcessPoolExecutor`, ``spawn`` start method), or a Dask
   distributed cluster (``scheduler="tcp://host:port"``; the workers must see the same file
   system). At most a few tasks per worker are in flight, so memory stays flat.
5. The cohort tables are rebuilt from the per-scan folders (:mod:`specproc.batch.cohort`).

Faults: a batch holds ``OUTDIR/.specproc-batch.lock`` (an advisory ``flock`` that the system
releases when the process dies, with the owner's pid inside), so a second batch into the same
folder is refused while the first lives. Local workers die with their parent: on Linux the
parent-death signal (``prctl(PR_SET_PDEATHSIG, SIGKILL)``), everywhere a watchdog thread that
ends the worker within :data:`WATCHDOG_PERIOD_S` once its parent is gone.
"""

from __future__ import annotations

import contextlib
import os
import socket
import sys
import threading
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from specproc._hash import file_sha256, json_sha256
from specproc.batch.manifest import ScanEntry
from specproc.batch.task import (
    done_matches,
    failed_summary,
    failure_reason,
    run_task,
    write_outcome,
)
from specproc.errors import InvalidInputError
from specproc.protocol import Protocol, simulated_members

__all__ = [
    "LOCK_NAME",
    "WATCHDOG_PERIOD_S",
    "BatchSummary",
    "config_sha256",
    "default_workers",
    "output_lock",
    "run_batch",
]

#: Environment variables that keep numerical libraries single-threaded in worker processes
#: (one process per core is the parallelism; nested threads only compete for the cores).
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


@dataclass
class BatchSummary:
    """What a batch did.

    Attributes
    ----------
    n_scans, n_processed, n_skipped, n_failed, n_flagged : int
        Counts (``n_skipped``: up to date from an earlier run).
    failures : list of (str, str)
        (key, reason) of the failed scans, sorted by key.
    out_dir : Path
        The output folder.
    tables : dict of str to Path
        ``cohort.tsv``, ``cohort_qc.tsv``, ``cohort.html``.
    """

    n_scans: int = 0
    n_processed: int = 0
    n_skipped: int = 0
    n_failed: int = 0
    n_flagged: int = 0
    failures: list[tuple[str, str]] = field(default_factory=list)
    out_dir: Path = Path()
    tables: dict[str, Path] = field(default_factory=dict)

    def counts_line(self) -> str:
        """One line of the counts, as the commands print it."""
        return (f"{self.n_scans} scans: {self.n_processed} processed, {self.n_skipped} already "
                f"done, {self.n_flagged} flagged, {self.n_failed} failed")


def config_sha256(config: Mapping[str, Any]) -> str:
    """SHA-256 of the canonical JSON of an effective configuration."""
    return json_sha256(config)


def _simulate(protocol: Protocol, path: Path, conditions: Any = None) -> None:
    """Simulate (or take from the cache) the basis of a protocol and save it to ``path``.

    With the editing ``conditions`` of an edited scan, its ON, OFF and DIFF bases
    (:func:`specproc.edited.workflow.simulate_for_protocol`) are saved to
    ``<path>-on.npz``, ``<path>-off.npz`` and ``<path>-diff.npz``.
    """
    if conditions is None:
        protocol.simulate().save(path)
        return
    from specproc.batch.task import edited_basis_paths
    from specproc.edited.workflow import simulate_for_protocol

    basis = simulate_for_protocol(protocol, conditions)
    for part, file in edited_basis_paths(path).items():
        getattr(basis, part).save(file)


@dataclass(frozen=True)
class _Prepared:
    entry: ScanEntry
    inputs: dict[str, Any]
    protocol: Protocol | None
    reason: str = ""
    conditions: Any = None  # EditConditions of an edited scan


def _prepare(entries: Sequence[ScanEntry], *, config: Mapping[str, Any], config_hash: str,
             metabolites: Sequence[str] | None, macromolecules: bool | None
             ) -> Iterator[_Prepared]:
    """Read each scan's header (one at a time) and hash its inputs."""
    from specproc import __version__
    from specproc.batch.task import apply_overrides
    from specproc.edited.conditions import edit_conditions, is_edited
    from specproc.edited.workflow import edited_basis_key, edited_protocol
    from specproc.io import load
    from specproc.protocol import resolve_protocol

    for entry in entries:
        inputs: dict[str, Any] = {
            "scan_sha256": None, "water_sha256": None, "config_sha256": config_hash,
            "entry_sha256": json_sha256(entry.describe()), "basis": None,
            "specproc_version": __version__,
        }
        try:
            inputs["scan_sha256"] = file_sha256(entry.scan_path)
            inputs["water_sha256"] = file_sha256(entry.water_path)
            if entry.tissue_maps is not None:  # a changed map reruns the scan
                inputs["tissue_maps_sha256"] = {
                    role: file_sha256(Path(path)) for role, path in
                    entry.tissue_maps.describe().items()
                    if path is not None and (role != "label_table" or Path(path).is_file())}
            scan = apply_overrides(load(entry.scan_path), entry.overrides)
            # the protocol as `specproc fit` resolves it (PRESS for an edited scan)
            protocol = resolve_protocol(scan, manifest=entry.protocol_layer(), config=config,
                                        metabolites=metabolites, macromolecules=macromolecules,
                                        phantom=entry.is_phantom)
            conditions = None
            basis_key = protocol.key()
            if is_edited(scan):  # its own ON, OFF and DIFF bases, keyed with the pulses
                conditions = edit_conditions(scan)
                if protocol.sequence != "press":
                    edited_protocol(scan, config)  # refuses it: editing is simulated in PRESS
                basis_key = edited_basis_key(protocol, conditions)
            del scan
        except Exception as exc:  # recorded as a failed scan
            yield _Prepared(entry, inputs, None, failure_reason(exc))
            continue
        inputs["basis"] = basis_key
        yield _Prepared(entry, inputs, protocol, conditions=conditions)


# ============================================================================ executors
class _Executor:
    """submit(fn, arg) -> future; wait_any(futures) -> (done, pending); result(f); close()."""

    def submit(self, fn: Callable[[Any], Any], arg: Any) -> Any:
        raise NotImplementedError

    def wait_any(self, futures: set[Any]) -> tuple[set[Any], set[Any]]:
        raise NotImplementedError

    def result(self, future: Any) -> Any:
        return future.result()

    def close(self) -> None:
        """Release the workers."""

    capacity = 1


class _InlineFuture:
    def __init__(self, value: Any) -> None:
        self.value = value

    def result(self) -> Any:
        return self.value


class _InProcess(_Executor):
    capacity = 1

    def submit(self, fn: Callable[[Any], Any], arg: Any) -> Any:
        return _InlineFuture(fn(arg))

    def wait_any(self, futures: set[Any]) -> tuple[set[Any], set[Any]]:
        return set(futures), set()


#: How often a worker checks that its parent still lives, s.
WATCHDOG_PERIOD_S: float = 0.5


def _die_with_parent(parent_pid: int) -> None:
    """Worker initialiser: end this process as soon as the batch process that started it dies.

    Linux delivers SIGKILL on the parent's death (``prctl``); the watchdog thread covers other
    systems and the moment before the signal was armed. Outputs are written atomically, so a
    worker ended mid-scan leaves no partial file and the rerun does the scan again.
    """
    if sys.platform.startswith("linux"):
        with contextlib.suppress(Exception):  # best effort; the watchdog remains
            import ctypes
            import signal

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG

    def watch() -> None:
        while True:
            if os.getppid() != parent_pid:
                os._exit(70)  # EX_SOFTWARE: the batch is gone, nobody waits for the result
            time.sleep(WATCHDOG_PERIOD_S)

    threading.Thread(target=watch, name="specproc-parent-watchdog", daemon=True).start()


class _LocalPool(_Executor):
    def __init__(self, workers: int) -> None:
        import multiprocessing

        self.capacity = 2 * workers
        self.pool = ProcessPoolExecutor(
            max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
            initializer=_die_with_parent, initargs=(os.getpid(),),
        )

    def submit(self, fn: Callable[[Any], Any], arg: Any) -> Any:
        return self.pool.submit(fn, arg)

    def wait_any(self, futures: set[Any]) -> tuple[set[Any], set[Any]]:
        done, pending = wait(futures, return_when=FIRST_COMPLETED)
        return set(done), set(pending)

    def close(self) -> None:
        self.pool.shutdown(wait=True, cancel_futures=True)


class _Dask(_Executor):
    def __init__(self, address: str) -> None:
        try:
            from distributed import Client
        except ImportError:
            raise InvalidInputError(
                "--scheduler needs dask.distributed: pip install 'specproc[cohort]'"
            ) from None
        try:
            self.client = Client(address, timeout="20s", set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise InvalidInputError(
                f"cannot connect to the Dask scheduler at {address}: {exc}"
            ) from None
        from distributed import as_completed

        n = sum(self.client.nthreads().values()) or 1
        self.capacity = 2 * n
        self.completed = as_completed(loop=self.client.loop)

    def submit(self, fn: Callable[[Any], Any], arg: Any) -> Any:
        future = self.client.submit(fn, arg, pure=False)
        self.completed.add(future)
        return future

    def wait_any(self, futures: set[Any]) -> tuple[set[Any], set[Any]]:
        while True:
            finished = next(self.completed)
            if finished in futures:
                break
        done = {finished} | {f for f in futures if f.done()}
        return done, set(futures) - done

    def close(self) -> None:
        self.client.close()


@contextlib.contextmanager
def _single_threaded_children() -> Iterator[None]:
    """Set the thread-count variables (if unset) while worker processes are started.

    They hold each worker's libraries at the per-scan BLAS limit from start-up (see
    :mod:`specproc._threads`); the context around each scan applies it again.
    """
    from specproc._threads import blas_thread_limit

    limit = blas_thread_limit()  # the per-scan setting; None: leave the libraries alone
    saved = {k: os.environ.get(k) for k in _THREAD_VARS}
    for k in _THREAD_VARS:
        if limit is not None:
            os.environ.setdefault(k, str(limit))
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def default_workers(n_scans: int) -> int:
    """Local worker processes for ``n_scans`` scans: one per CPU this process may use, at most
    one per scan (each worker holds about 200 MB and one BLAS thread)."""
    if hasattr(os, "sched_getaffinity"):
        cpus = len(os.sched_getaffinity(0))
    else:  # pragma: no cover - macOS, Windows
        cpus = os.cpu_count() or 1
    return max(1, min(cpus, n_scans))


def _make_executor(workers: int, scheduler: str | None) -> _Executor:
    if scheduler:
        return _Dask(scheduler)
    if workers <= 1:
        return _InProcess()
    return _LocalPool(workers)


# ============================================================================ the batch

def _prepare_basis(protocol: Protocol, out: Path, key: str, conditions: Any = None
                   ) -> Path | str:
    """Path of the protocol's basis file (simulated now if missing), or the failure reason.

    For an edited scan (``conditions`` given) the path is the stem ``basis/<key>`` of its
    three files (:func:`specproc.batch.task.edited_basis_paths`).
    """
    from specproc.batch.task import edited_basis_paths

    if conditions is None:
        path = out / "basis" / f"{key}.npz"
        missing = not path.is_file()
    else:
        path = out / "basis" / key
        missing = not all(p.is_file() for p in edited_basis_paths(path).values())
    if missing:
        try:
            _simulate(protocol, path, conditions)
        except InvalidInputError as exc:
            return str(exc)
    return path


class _Dispatcher:
    """Feeds tasks to an executor with a bounded number in flight and collects outcomes.

    When a local pool breaks (a worker process killed by the system, e.g. out of memory),
    every task it held is lost: they are submitted once more to a fresh pool; a task lost
    twice gets no ``done.json`` and is reported as not processed, so a rerun does it again.
    """

    def __init__(self, workers: int, scheduler: str | None, summary: BatchSummary,
                 advance: Callable[[str], None]) -> None:
        self.workers, self.scheduler = workers, scheduler
        self.summary, self.advance = summary, advance
        self.executor: _Executor | None = None
        self.pending: dict[Any, tuple[dict[str, Any], int]] = {}

    def _finish(self, key: str) -> None:
        self.summary.n_processed += 1
        self.advance(key)

    def _collect(self, done: set[Any]) -> None:
        lost: list[tuple[dict[str, Any], int]] = []
        for fut in done:
            task, attempt = self.pending.pop(fut)
            try:
                self.executor.result(fut)  # type: ignore[union-attr]
            except Exception:  # the executor lost the task (run_task itself never raises)
                lost.append((task, attempt))
                continue
            self._finish(task["key"])
        if lost and isinstance(self.executor, _LocalPool):
            lost += list(self.pending.values())  # a broken pool loses every task it holds
            self.pending.clear()
            self.executor.close()
            self.executor = None
        for task, attempt in lost:
            if attempt < 2:
                self.submit(task, attempt=attempt + 1)
            else:
                self._finish(task["key"])

    def _wait(self) -> None:
        done, _ = self.executor.wait_any(set(self.pending))  # type: ignore[union-attr]
        self._collect(done)

    def submit(self, task: dict[str, Any], *, attempt: int = 1) -> None:
        """Run ``run_task(task)`` on the executor (waiting while too many are in flight)."""
        if self.executor is None:
            self.executor = _make_executor(self.workers, self.scheduler)
        while self.pending and len(self.pending) >= self.executor.capacity:
            self._wait()
            if self.executor is None:
                self.executor = _make_executor(self.workers, self.scheduler)
        future = self.executor.submit(run_task, task)
        self.pending[future] = (task, attempt)
        if isinstance(self.executor, _InProcess):
            self._collect({future})

    def drain(self) -> None:
        """Wait for every task in flight."""
        while self.pending and self.executor is not None:
            self._wait()

    def close(self) -> None:
        """Release the executor."""
        if self.executor is not None:
            self.executor.close()


def _progress(total: int, enabled: bool) -> tuple[Callable[[str], None], Callable[[], None]]:
    if not enabled:
        return (lambda _text: None), (lambda: None)
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeRemainingColumn,
    )

    bar = Progress(TextColumn("{task.description:<28.28}"), BarColumn(), MofNCompleteColumn(),
                   TimeRemainingColumn(), console=Console(stderr=True), transient=False)
    bar.start()
    task = bar.add_task("scans", total=total)

    def advance(text: str) -> None:
        bar.update(task, advance=1, description=text)

    return advance, bar.stop


#: Name of the lock file a running batch keeps in its output folder.
LOCK_NAME: str = ".specproc-batch.lock"


def _lock_owner(path: Path) -> str:
    try:
        text = path.read_text("utf-8").strip()
    except OSError:
        return "another batch"
    return f"another batch ({text[:120]})" if text else "another batch"


@contextlib.contextmanager
def output_lock(out: Path) -> Iterator[Path]:
    """Hold ``out/.specproc-batch.lock`` for the duration of the block.

    The lock is an advisory ``flock`` on the file, which the system releases when the process
    ends in any way (so a killed batch never leaves a stale lock); the file records the
    owner's pid, host and start time for the message a second batch gets.

    Raises
    ------
    InvalidInputError
        When a live batch holds the lock, naming the folder and the owner.
    """
    path = out / LOCK_NAME
    try:
        import fcntl
    except ImportError:  # no flock (Windows): run unlocked
        yield path
        return
    while True:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise InvalidInputError(
                f"the output folder is in use by {_lock_owner(path)}; wait for it to finish "
                "or choose another folder",
                out,
            ) from None
        try:  # the file may have been removed and made anew between open and flock
            same = os.fstat(fd).st_ino == os.stat(path).st_ino
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)
    try:
        stamp = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        os.ftruncate(fd, 0)
        os.write(fd, f"pid {os.getpid()} on {socket.gethostname()} since {stamp}\n".encode())
        yield path
    finally:
        with contextlib.suppress(OSError):
            os.unlink(path)
        os.close(fd)


def scan_folder(out_dir: Path, key: str) -> Path:
    """Output folder of one scan: ``OUTDIR/scans/<key>``."""
    return out_dir / "scans" / key


def run_batch(
    entries: Sequence[ScanEntry],
    out_dir: str | os.PathLike[str],
    *,
    config: Mapping[str, Any] | None = None,
    workers: int = 1,
    scheduler: str | None = None,
    metabolites: Sequence[str] | None = None,
    macromolecules: bool | None = None,
    retry_failed: bool = False,
    progress: bool = False,
    title: str = "specproc cohort",
    outputs: str = "all",
) -> BatchSummary:
    """Process a cohort, resuming what an earlier run left, and write the cohort summary.

    Parameters
    ----------
    entries : sequence of ScanEntry
        The scans (from :func:`specproc.batch.read_entries`), with unique keys.
    out_dir : path
        Output folder (created). Layout: ``scans/<key>/`` (per-scan outputs,
        ``summary.json``, ``done.json``), ``basis/<key>.npz``, ``cohort.tsv``,
        ``cohort_qc.tsv``, ``cohort.html``.
    config : mapping, optional
        Effective configuration (``specproc.config.load_config``); defaults when omitted.
    workers : int
        Local worker processes (1: in this process).
    scheduler : str, optional
        Address of a Dask distributed scheduler; overrides ``workers``.
    metabolites : sequence of str, optional
        Basis members to simulate (default: the ``[fit] members`` of the configuration when
        given, else every metabolite definition).
    macromolecules : bool, optional
        Add the macromolecule components to the basis (default: the rule of
        :mod:`specproc.protocol`: tissue at every TE, not a phantom).
    retry_failed : bool
        Process again scans recorded as failed with unchanged inputs.
    progress : bool
        Show a progress bar on stderr.
    title : str
        Title of ``cohort.html``.
    outputs : {"all", "tables"}
        What each scan folder gets (:func:`specproc.analysis.write_scan_outputs`): tables,
        figures and report, or the tables only (with the saved result, for ``specproc render``
        later). A scan done in the other mode counts as not done.

    Returns
    -------
    BatchSummary
    """
    from specproc.analysis import OUTPUT_MODES
    from specproc.batch.cohort import write_cohort
    from specproc.config import load_config

    if workers < 1:
        raise InvalidInputError(f"--workers must be at least 1, got {workers}")
    if outputs not in OUTPUT_MODES:
        raise InvalidInputError(f"outputs must be one of {', '.join(OUTPUT_MODES)}, got "
                                f"{outputs!r}")
    out = Path(out_dir).resolve()
    out.mkdir(parents=True, exist_ok=True)
    cfg = dict(config) if config is not None else load_config(None)
    if metabolites is None:
        metabolites = simulated_members(cfg)
    keys = [e.key.casefold() for e in entries]
    if len(set(keys)) != len(keys) or not all(keys):
        raise InvalidInputError("scan identifiers are not unique (ignoring case) or empty")
    entries = sorted(entries, key=lambda e: e.key)
    summary = BatchSummary(n_scans=len(entries), out_dir=out)
    config_hash = config_sha256(cfg)
    if metabolites is not None:
        from specproc.spins.systems import load_metabolites

        load_metabolites(list(metabolites))  # unknown names: one clear error before any work
    mm_file = str((cfg.get("protocol") or {}).get("mm_spectrum") or "")
    if mm_file and mm_file.strip().lower() != "none":
        from specproc.mmspectrum import load_mm_spectrum

        load_mm_spectrum(mm_file)  # an unreadable configured file: one error before any work
    with output_lock(out):
        _run_entries(entries, out, cfg, summary, workers=workers, scheduler=scheduler,
                     metabolites=metabolites, macromolecules=macromolecules,
                     retry_failed=retry_failed, progress=progress, config_hash=config_hash,
                     outputs=outputs)
        counts = write_cohort(entries, out, title=title, qc_config=cfg.get("qc"))
    summary.n_failed = counts["failed"]
    summary.n_flagged = counts["flagged"]
    summary.failures = counts["failures"]
    summary.tables = {name: out / name for name in ("cohort.tsv", "cohort_qc.tsv",
                                                    "cohort.html")}
    return summary


def _run_entries(entries: Sequence[ScanEntry], out: Path, cfg: dict[str, Any],
                 summary: BatchSummary, *, workers: int, scheduler: str | None,
                 metabolites: Sequence[str] | None, macromolecules: bool | None,
                 retry_failed: bool, progress: bool, config_hash: str, outputs: str) -> None:
    """Prepare, skip or submit every entry and wait for the workers (the lock is held)."""
    advance, stop = _progress(len(entries), progress)
    runner = _Dispatcher(workers, scheduler, summary, advance)
    bases: dict[str, Path | str] = {}
    try:
        with _single_threaded_children():
            for prep in _prepare(entries, config=cfg, config_hash=config_hash,
                                 metabolites=metabolites,
                                 macromolecules=macromolecules):
                folder = scan_folder(out, prep.entry.key)
                if outputs != "all":  # the outputs of a scan folder are part of its inputs
                    prep.inputs["outputs"] = outputs
                previous = done_matches(folder, prep.inputs)
                if previous is not None and not (
                    retry_failed and previous.get("status") == "failed"
                ):
                    summary.n_skipped += 1
                    advance(prep.entry.key)
                    continue
                reason = prep.reason
                if prep.protocol is not None:
                    basis_key = prep.inputs["basis"]
                    if basis_key not in bases:
                        bases[basis_key] = _prepare_basis(prep.protocol, out, basis_key,
                                                          prep.conditions)
                    if isinstance(bases[basis_key], str):
                        reason = f"basis simulation failed: {bases[basis_key]}"
                if reason:
                    folder.mkdir(parents=True, exist_ok=True)
                    write_outcome(folder, key=prep.entry.key, inputs=prep.inputs,
                                  summary=failed_summary(reason))
                    summary.n_processed += 1
                    advance(prep.entry.key)
                    continue
                runner.submit({
                    "key": prep.entry.key,
                    "scan_path": str(prep.entry.scan_path),
                    "water_path": None if prep.entry.water_path is None
                    else str(prep.entry.water_path),
                    "out_dir": str(folder),
                    "basis_path": str(bases[prep.inputs["basis"]]),
                    "edited": prep.conditions is not None,
                    "protocol": prep.protocol,
                    "config": cfg,
                    "tissue": None if prep.entry.tissue is None else dict(prep.entry.tissue),
                    "tissue_maps": None if prep.entry.tissue_maps is None
                    else prep.entry.tissue_maps.describe(),
                    "overrides": dict(prep.entry.overrides),
                    "inputs": prep.inputs,
                    "outputs": outputs,
                })
            runner.drain()
    finally:
        runner.close()
        stop()
