"""Cohort runs (specproc.batch, ``specproc batch``): discovery, failures, resume, executors.

One small invented cohort (2 good scans of 1024 points made of a 3-member basis, one with a
water reference and tissue fractions, plus 4 deliberately broken files) is processed once
in-process; the other runs (2 worker processes, a Dask LocalCluster, a run killed with SIGKILL
and resumed) must give byte-identical cohort tables. The expected amplitudes come from the
invented truth the scans are built from (the weights below), not from a previous run.
"""

from __future__ import annotations

import csv
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import simulate_basis
from specproc.batch import discover_bids, read_manifest, run_batch
from specproc.cli import main
from specproc.config import load_config
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io import save
from specproc.synthetic import synthetic_scan, synthetic_water

MEMBERS = ("NAA", "Cr", "GPC")
#: Invented truth of the good scans (weights per molecule).
TRUTH = {
    "sub-01": {"NAA": 10.0, "Cr": 8.0, "GPC": 2.0},
    "sub-02": {"NAA": 12.0, "Cr": 8.0, "GPC": 2.5},
}
BROKEN = ("sub-04", "sub-05", "sub-06", "sub-07")
FAST_CONFIG = "[preprocess.water_removal]\nenabled = false\n"


@pytest.fixture(scope="session")
def cache_env(tmp_path_factory: pytest.TempPathFactory) -> dict[str, str]:
    """A basis cache in tmp for this session (also given to subprocesses)."""
    cache = tmp_path_factory.mktemp("basis-cache")
    old = os.environ.get("SPECPROC_CACHE_DIR")
    os.environ["SPECPROC_CACHE_DIR"] = str(cache)
    yield {**os.environ, "SPECPROC_CACHE_DIR": str(cache)}
    if old is None:
        os.environ.pop("SPECPROC_CACHE_DIR", None)
    else:
        os.environ["SPECPROC_CACHE_DIR"] = old


@pytest.fixture(scope="session")
def small_basis(cache_env: dict[str, str]):
    # TE 80 ms PRESS at 3 T; the data are made without macromolecules (simulate_basis default),
    # the batch fits them with the components of every tissue scan (specproc.protocol)
    return simulate_basis(sequence="press", field_t=3.0, te_s=0.08, dwell_s=5e-4,
                          n_points=1024, metabolites=list(MEMBERS))


def _nan_file(good: Scan, path: Path) -> None:
    """A NIfTI-MRS file whose samples include NaN (written with nibabel directly)."""
    import nibabel as nib

    tmp = path.with_name("tmp_nan.nii")
    save(good, tmp)
    img = nib.load(tmp)
    data = np.asanyarray(img.dataobj).copy()
    data.flat[5] = np.nan
    header = img.header.copy()
    nib.save(nib.Nifti2Image(data, img.affine, header=header), path)
    tmp.unlink()


@pytest.fixture(scope="session")
def cohort(small_basis, tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("bids")
    rng = np.random.default_rng(20261202)
    for sub, conc in TRUTH.items():
        folder = root / sub / "mrs"
        folder.mkdir(parents=True)
        save(synthetic_scan(small_basis, conc, noise_sd=0.05, rng=rng),
             folder / f"{sub}_svs.nii.gz")
    mrs = root / "sub-01" / "mrs"
    save(synthetic_water(small_basis, amplitude=2000.0, rng=rng), mrs / "sub-01_mrsref.nii.gz")
    (mrs / "sub-01_svs.json").write_text(
        json.dumps({"TissueFractions": {"GM": 0.6, "WM": 0.3, "CSF": 0.1}}), "utf-8")
    folders = {sub: root / sub / "mrs" for sub in BROKEN}
    for folder in folders.values():
        folder.mkdir(parents=True)
    good = synthetic_scan(small_basis, TRUTH["sub-01"], rng=rng)
    # truncated: the first half of a valid gzip-compressed NIfTI-MRS file
    save(good, root / "tmp.nii.gz")
    raw = (root / "tmp.nii.gz").read_bytes()
    (folders["sub-04"] / "sub-04_svs.nii.gz").write_bytes(raw[: len(raw) // 2])
    (root / "tmp.nii.gz").unlink()
    _nan_file(good, folders["sub-05"] / "sub-05_svs.nii")
    save(good.replace(nucleus="31P", spectrometer_mhz=51.7),
         folders["sub-06"] / "sub-06_svs.nii.gz")
    (folders["sub-07"] / "sub-07_svs.nii.gz").write_bytes(
        np.random.default_rng(7).integers(0, 256, 3000, dtype=np.uint8).tobytes())
    (root / "fast.toml").write_text(FAST_CONFIG, "utf-8")
    return root


def _run(cohort: Path, out: Path, **kwargs):
    return run_batch(discover_bids(cohort), out, config=load_config(cohort / "fast.toml"),
                     metabolites=list(MEMBERS), **kwargs)


@pytest.fixture(scope="session")
def reference(cohort: Path, tmp_path_factory: pytest.TempPathFactory):
    out = tmp_path_factory.mktemp("ref")
    summary = _run(cohort, out, workers=1)
    return out, summary


def _tables(out: Path) -> tuple[bytes, bytes]:
    return (out / "cohort.tsv").read_bytes(), (out / "cohort_qc.tsv").read_bytes()


def _rows(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle, delimiter="\t"))


# ------------------------------------------------------------------ discovery and manifests
def test_bids_discovery_pairs_water_and_tissue(cohort: Path) -> None:
    entries = {e.key: e for e in discover_bids(cohort)}
    assert sorted(entries) == ["sub-01_svs", "sub-02_svs", "sub-04_svs", "sub-05_svs",
                               "sub-06_svs", "sub-07_svs"]
    first = entries["sub-01_svs"]
    assert first.water_label == "sub-01/mrs/sub-01_mrsref.nii.gz"
    assert first.subject == "01"
    assert first.tissue == pytest.approx({"gm": 0.6, "wm": 0.3, "csf": 0.1})
    assert entries["sub-02_svs"].water_path is None and entries["sub-02_svs"].tissue is None


def test_manifest_reads_relative_paths_and_overrides(cohort: Path, tmp_path: Path) -> None:
    manifest = tmp_path / "m.csv"
    rel = os.path.relpath(cohort / "sub-02/mrs/sub-02_svs.nii.gz", tmp_path)
    manifest.write_text(f"scan,subject,session,te_ms,group\n{rel},sub-x,ses-2,80,control\n",
                        "utf-8")
    (entry,) = read_manifest(manifest)
    assert entry.key == "sub-x_ses-2_sub-02_svs"
    assert entry.overrides == {"te_s": pytest.approx(0.08)}
    assert entry.scan_path == (cohort / "sub-02/mrs/sub-02_svs.nii.gz").resolve()


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("subject\tsession\nsub-01\tses-01\n", "no 'scan' column"),
        ("scan\tsubject\nmissing_svs.nii.gz\t01\n", "line 2: the scan file 'missing_svs.nii.gz'"),
        ("scan\tgm\twm\n{good}\t0.5\t0.5\n", "line 2: give all of gm, wm and csf"),
        ("scan\tte_ms\n{good}\tthirty\n", "line 2: column te_ms is not a number"),
        # issue 17 item 7: identifiers that clean to nothing or collide ignoring case
        ("scan\tscan_id\n{good}\t..\n", "line 2: scan_id '..' has no letter or digit"),
        ("scan\tscan_id\n{good}\t.\n", "line 2: scan_id '.' has no letter or digit"),
        ("scan\tscan_id\n{good}\t-\n", "line 2: scan_id '-' has no letter or digit"),
        ("scan\tscan_id\n{good}\tA1\n{good}\ta1\n",
         "identifiers differing only in case 'A1', 'a1'"),
    ],
)
def test_manifest_errors_one_line_exit_2(cohort: Path, tmp_path: Path, text: str,
                                         match: str) -> None:
    good = cohort / "sub-02/mrs/sub-02_svs.nii.gz"
    manifest = tmp_path / "manifest.tsv"
    manifest.write_text(text.format(good=good), "utf-8")
    with pytest.raises(InvalidInputError, match=match):
        read_manifest(manifest)
    result = CliRunner().invoke(main, ["batch", str(manifest), "-o", str(tmp_path / "o"),
                                       "--no-progress"])
    assert result.exit_code == 2
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("specproc: error: ")
    assert str(manifest) in lines[0]
    assert not (tmp_path / "o" / "cohort.tsv").exists()


# ------------------------------------------------------------------ good and broken scans
def test_batch_good_scans_have_results_broken_ones_reasons(reference) -> None:
    out, summary = reference
    assert summary.n_scans == 6 and summary.n_failed == 4
    qc = {r["scan_id"]: r for r in _rows(out / "cohort_qc.tsv")}
    reasons = {k: qc[f"{k}_svs"]["reason"] for k in BROKEN}
    for sub in BROKEN:
        assert qc[f"{sub}_svs"]["status"] == "failed"
        assert "\n" not in reasons[sub] and reasons[sub] != "n/a"
    assert "gzip" in reasons["sub-04"] or "truncated" in reasons["sub-04"]
    assert "NaN" in reasons["sub-05"]
    assert "31P" in reasons["sub-06"]
    assert reasons["sub-07"].startswith("sub-07/mrs/sub-07_svs.nii.gz: ")  # path made relative
    rows = _rows(out / "cohort.tsv")
    for sub, conc in TRUTH.items():
        assert qc[f"{sub}_svs"]["status"] in ("ok", "flagged")
        got = {r["metabolite"]: r for r in rows if r["scan_id"] == f"{sub}_svs"}
        # the fitted amplitudes recover the invented weights (SNR of the scans is high)
        for name, value in conc.items():
            assert float(got[name]["amplitude"]) == pytest.approx(value, rel=0.05)
            assert float(got[name]["crlb_percent"]) < 5
        assert float(got["NAA"]["ratio_tcr"]) == pytest.approx(conc["NAA"] / conc["Cr"],
                                                               rel=0.05)
        assert (out / "scans" / f"{sub}_svs" / "report.html").is_file()
    # water reference + tissue fractions give concentrations for sub-01 only
    assert all(r["conc_molar_mm"] != "n/a" for r in rows if r["scan_id"] == "sub-01_svs"
               and r["kind"] != "macromolecule")
    assert all(r["conc_molar_mm"] == "n/a" for r in rows if r["scan_id"] == "sub-02_svs")
    page = (out / "cohort.html").read_text("utf-8")
    assert "not a medical device" in page and "<svg" in page  # plots are inline SVG
    assert "sub-07_svs" in page and "<script" not in page
    assert 'href="scans/sub-01_svs/report.html"' in page


def test_strict_exit_code_and_resume_skips_everything(reference, cohort: Path,
                                                      tmp_path: Path) -> None:
    out, _ = reference
    copy = tmp_path / "copy"
    shutil.copytree(out, copy)
    args = ["batch", str(cohort), "-o", str(copy), "--config", str(cohort / "fast.toml"),
            "--metabolites", ",".join(MEMBERS), "--workers", "1", "--no-progress"]
    result = CliRunner().invoke(main, [*args, "--strict"])
    assert result.exit_code == 1, result.output
    assert "0 processed, 6 already done" in result.output
    assert "4 failed" in result.output
    assert _tables(copy) == _tables(out)
    assert CliRunner().invoke(main, args).exit_code == 0


def test_changed_input_is_recomputed(reference, cohort: Path, tmp_path: Path,
                                     small_basis) -> None:
    out, _ = reference
    copy_out, copy_in = tmp_path / "out", tmp_path / "in"
    shutil.copytree(out, copy_out)
    shutil.copytree(cohort, copy_in)
    bad = copy_in / "sub-02/mrs/sub-02_svs.nii.gz"
    bad.write_bytes(b"not a scan any more")
    summary = _run(copy_in, copy_out, workers=1)
    assert summary.n_processed == 1 and summary.n_skipped == 5
    qc = {r["scan_id"]: r for r in _rows(copy_out / "cohort_qc.tsv")}
    assert qc["sub-02_svs"]["status"] == "failed"


def test_manifest_overrides_reach_the_processed_scan(cohort: Path, tmp_path: Path) -> None:
    from specproc.io import load

    scan = cohort / "sub-02/mrs/sub-02_svs.nii.gz"
    header_te = load(scan).te_s
    manifest = tmp_path / "m.tsv"
    manifest.write_text(f"scan\tscan_id\tte_ms\tsequence\n{scan}\tover\t80\tPRESS\n", "utf-8")
    summary = run_batch(read_manifest(manifest), tmp_path / "o",
                        config=load_config(cohort / "fast.toml"), metabolites=list(MEMBERS))
    assert summary.n_failed == 0
    doc = json.loads((tmp_path / "o/scans/over/fit.json").read_text(encoding="utf-8"))
    assert doc["inputs"]["scan"]["te_s"] == pytest.approx(0.08)
    assert doc["inputs"]["scan"]["sequence"] == "press"
    assert not (tmp_path / "o/scans/over/input_with_overrides.nii.gz").exists()
    assert header_te == pytest.approx(0.08)  # same protocol: the shared basis fits
    rows = [r for r in _rows(tmp_path / "o/cohort.tsv") if r["metabolite"] == "NAA"]
    assert float(rows[0]["amplitude"]) == pytest.approx(TRUTH["sub-02"]["NAA"], rel=0.05)


# ------------------------------------------------------------------ executors
@pytest.mark.slow
def test_two_workers_give_identical_tables(reference, cohort: Path, tmp_path: Path) -> None:
    out, _ = reference
    summary = _run(cohort, tmp_path / "w2", workers=2)
    assert summary.n_processed == 6
    assert _tables(tmp_path / "w2") == _tables(out)


@pytest.mark.slow
def test_dask_local_cluster_gives_identical_tables(reference, cohort: Path,
                                                   tmp_path: Path) -> None:
    import distributed  # in the test extra: a missing install must fail, not skip
    out, _ = reference
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        summary = _run(cohort, tmp_path / "dask", scheduler=cluster.scheduler_address)
    assert summary.n_processed == 6
    assert _tables(tmp_path / "dask") == _tables(out)


@pytest.mark.slow
def test_sigkill_then_resume_matches_clean_run(reference, cohort: Path, tmp_path: Path,
                                               cache_env: dict[str, str]) -> None:
    out, _ = reference
    target = tmp_path / "killed"
    args = [sys.executable, "-c", "from specproc.cli import main; main()", "batch",
            str(cohort), "-o", str(target), "--config", str(cohort / "fast.toml"),
            "--metabolites", ",".join(MEMBERS), "--workers", "1", "--no-progress"]
    proc = subprocess.Popen(args, env=cache_env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    first = target / "scans" / "sub-01_svs" / "done.json"
    deadline = time.monotonic() + 60
    while not first.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    proc.send_signal(signal.SIGKILL)
    proc.communicate()
    assert proc.returncode == -signal.SIGKILL
    assert first.exists()
    assert not (target / "cohort.tsv").exists()  # killed before the summary
    stamp = first.stat().st_mtime_ns
    summary = _run(cohort, target, workers=1)  # the rerun
    assert summary.n_skipped >= 1 and summary.n_skipped + summary.n_processed == 6
    assert first.stat().st_mtime_ns == stamp  # the finished scan was not redone
    assert _tables(target) == _tables(out)
    assert not list(target.rglob(".*.tmp*"))  # no temporary file left behind


def _children(pid: int) -> set[int]:
    """Live processes whose parent is ``pid`` (Linux /proc)."""
    found = set()
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except (OSError, IndexError):
            continue
        if int(fields[1]) == pid and fields[0] != "Z":
            found.add(int(stat.parent.name))
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state != "Z"  # a zombie has ended; only its exit status waits for a reaper


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")
def test_killed_batch_leaves_no_live_worker(cohort: Path, tmp_path: Path,
                                            cache_env: dict[str, str]) -> None:
    """Issue 17 item 2: after kill -9 of a 2-worker batch, its workers end within 5 s."""
    target = tmp_path / "orphans"
    args = [sys.executable, "-c", "from specproc.cli import main; main()", "batch",
            str(cohort), "-o", str(target), "--config", str(cohort / "fast.toml"),
            "--metabolites", ",".join(MEMBERS), "--workers", "2", "--no-progress"]
    # output to a file: orphaned workers would hold a pipe open
    with open(tmp_path / "batch.log", "wb") as log:
        proc = subprocess.Popen(args, env=cache_env, stdout=log, stderr=log)
    deadline = time.monotonic() + 120
    children: set[int] = set()
    while len(children) < 3 and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)  # two workers and the resource tracker
        children = _children(proc.pid)
    assert len(children) >= 3, "the batch did not start its workers"
    time.sleep(0.5)  # let the workers pick up scans
    proc.send_signal(signal.SIGKILL)
    killed = time.monotonic()
    proc.wait()
    try:
        while any(_alive(pid) for pid in children) and time.monotonic() - killed < 10:
            time.sleep(0.05)
        elapsed = time.monotonic() - killed
        assert not any(_alive(pid) for pid in children)
        print(f"workers gone {elapsed:.2f} s after the kill")
        assert elapsed < 5.0, f"workers outlived the batch by {elapsed:.1f} s"
    finally:  # never leave an orphan behind, whatever the outcome
        for pid in children:
            if _alive(pid):
                os.kill(pid, signal.SIGKILL)
    # the folder is free again: a new batch may take it over (the flock died with the owner)
    summary = _run(cohort, target, workers=1)
    assert summary.n_scans == 6


def test_second_batch_into_a_live_folder_is_refused(cohort: Path, tmp_path: Path) -> None:
    """Issue 17 item 2: a lock file with the owner's pid keeps two batches apart."""
    from specproc.batch.runner import LOCK_NAME, output_lock

    target = tmp_path / "busy"
    target.mkdir()
    with output_lock(target):
        assert f"pid {os.getpid()} on " in (target / LOCK_NAME).read_text()
        with pytest.raises(InvalidInputError, match=rf"in use by another batch \(pid "
                                                    rf"{os.getpid()} on .*\); wait"):
            _run(cohort, target, workers=1)
        result = CliRunner().invoke(main, ["batch", str(cohort), "-o", str(target),
                                           "--no-progress"])
        assert result.exit_code == 2
        assert result.stderr.startswith(f"specproc: error: {target}: the output folder is in")
    assert not (target / LOCK_NAME).exists()  # released and removed
    assert not (target / "scans").exists()  # the refused batch wrote nothing


def test_cohort_tables_quote_cells_with_quote_characters(cohort: Path, tmp_path: Path) -> None:
    """Issue 17 item 8: a cell holding a quote character keeps the row's cell count."""
    broken = cohort / "sub-07" / "mrs" / "sub-07_svs.nii.gz"  # fails fast: random bytes
    manifest = tmp_path / "quotes.tsv"
    manifest.write_text(f'scan\tsubject\tscan_id\n{broken}\tsay "hi"\tq1\n'
                        f'{broken}\tx"y\tq2\n', "utf-8")
    out = tmp_path / "out"
    run_batch(read_manifest(manifest), out, config=load_config(cohort / "fast.toml"),
              metabolites=list(MEMBERS))
    for name in ("cohort.tsv", "cohort_qc.tsv"):
        with open(out / name, encoding="utf-8", newline="") as handle:
            table = list(csv.reader(handle, delimiter="\t"))
        assert all(len(row) == len(table[0]) for row in table), name
    subjects = [row[table[0].index("subject")] for row in table[1:]]  # cohort_qc: every scan
    assert subjects == ['say "hi"', 'x"y']


def test_demo_study_manifest_and_folder_agree() -> None:
    from specproc._paths import demo_dir

    demo = demo_dir()
    from specproc.batch import ignored_columns

    listed = read_manifest(demo / "manifest.tsv")
    found = discover_bids(demo)
    assert [e.key for e in listed] == [e.key for e in found]
    assert [e.water_path for e in listed] == [e.water_path for e in found]
    assert ignored_columns(demo / "manifest.tsv") == []
    assert {e.key: e.kind for e in listed}["sub-phantom_ses-01_svs"] == "phantom"
    assert sum(e.is_phantom for e in listed) == 1
    with_tissue = [e for e in listed if e.tissue is not None]
    for e in with_tissue:  # fractions renormalised to sum to 1 (quantify's rule)
        assert sum(e.tissue.values()) == pytest.approx(1.0)


def test_empty_folder_is_one_line_error(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["batch", str(tmp_path), "-o", str(tmp_path / "o")])
    assert result.exit_code == 2
    assert result.output.strip().startswith("specproc: error: ")
    assert "no scans found" in result.output and len(result.output.strip().splitlines()) == 1
