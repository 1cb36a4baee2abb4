"""Score specproc on the independent validation corpus, run through the command line.

Usage::

    python benchmarks/validation/score.py CORPUS [-o RUNDIR] [--subset N] [--workers 2]
                                          [--score-only] [--json FILE]
                                          [--mm-spectra DIR] [--baseline RUNDIR]

1. When ``CORPUS/manifest.tsv`` does not exist the corpus is generated first
   (``generate.py``; with ``--subset N`` only those scans).
2. ``specproc batch MANIFEST -o RUNDIR --workers N`` runs with default settings, exactly as a
   user would (with ``--subset N`` on a manifest of about N scans spread over the
   categories). The scans whose TE1 the manifest gives (column ``te1_ms``) are also run one by
   one as ``specproc fit SCAN --water REF --gm .. --wm .. --csf .. --te1-ms X -o DIR``
   (``--no-fit-cli`` skips this). ``--score-only`` skips both and scores an existing RUNDIR.
3. The estimates in ``RUNDIR/cohort.tsv`` are compared with ``CORPUS/truth.json``: relative
   error ``estimate / truth - 1`` of the ratios to tCr (tNAA, tCho, mI, Glu, Glx, Lac) and of the
   water-referenced tNAA (mM of GM+WM tissue, tissue scans only). The reported bound is the
   total uncertainty when specproc reports one (``ratio_tcr_total_sd``: the Cramér-Rao SD and
   the model SD from the refits under alternative model choices in quadrature; for tNAA in mM
   ``conc_molar_total_sd_mm``), else the Cramér-Rao SD alone (``ratio_tcr_sd``,
   ``conc_molar_sd_mm``); an error counts as covered when ``|estimate - truth| <= 2 × SD``. The
   coverage of the Cramér-Rao SD alone is printed as a second table.
   The water-referenced tNAA is also quantified again with the generator's own constants
   (column ``tNAA mM gen``), and a further table states the part of its error that each
   constant makes (:func:`constants_breakdown`).

With ``--mm-spectra DIR`` (the folder ``mm/`` that ``generate.py`` writes beside the corpus;
``generate.py OUT --mm-only`` writes it alone) the run uses the "measured" macromolecule
spectrum of each tissue scan's field and TE: a copy of the manifest with absolute paths and
the column ``mm_spectrum`` is written into RUNDIR (``manifest-mm.tsv``) and run instead (and
``specproc fit`` gets ``--mm-spectrum``). ``--baseline RUNDIR0`` adds a table of the median
|error| of RUNDIR0 (for example a run with the parametrised components) beside this run's.

It prints markdown tables per category (3 T TE 30 by SNR band, 1.5 T, 7 T, TE 144, lactate,
phantoms, timing not given): median and 95th percentile of |error| and the covered fraction,
the covered fraction with the Cramér-Rao SD only, the signed median error, and the issue's
targets with PASS / MISS. CPU time of the run is that
of the child processes (``resource.getrusage``), since the machine may be shared.

Research use only; not a medical device.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import os
import resource
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import generate as gen  # noqa: E402

#: Measures of the tables: (label, cohort metabolite, kind) with kind "ratio", "conc" (specproc's
#: water-referenced mM) or "conc_gen" (the same fit and water signal quantified with the
#: generator's constants, :func:`generator_constants_estimates`).
MEASURES: tuple[tuple[str, str, str], ...] = (
    ("tNAA", "tNAA", "ratio"), ("tCho", "tCho", "ratio"), ("mI", "mI", "ratio"),
    ("Glu", "Glu", "ratio"), ("Glx", "Glx", "ratio"), ("Lac", "Lac", "ratio"),
    ("tNAA mM", "tNAA", "conc"), ("tNAA mM gen", "tNAA", "conc_gen"),
)

SNR_BANDS = ((20.0, 40.0), (40.0, 80.0), (80.0, 151.0))

#: Columns read from cohort.tsv and results.tsv (the total SDs are absent from older runs).
ESTIMATE_KEYS = ("ratio_tcr", "ratio_tcr_sd", "ratio_tcr_total_sd", "conc_molar_mm",
                 "conc_molar_sd_mm", "conc_molar_total_sd_mm")


def _rows(truths: Sequence[dict[str, Any]]) -> list[tuple[str, Callable[[dict[str, Any]], bool],
                                                          tuple[str, ...]]]:
    """Row label, scan predicate, measures shown."""
    base = ("tNAA", "tCho", "mI", "Glu", "Glx", "tNAA mM", "tNAA mM gen")
    rows: list[tuple[str, Callable[[dict[str, Any]], bool], tuple[str, ...]]] = []
    for lo, hi in SNR_BANDS:
        rows.append((f"3 T TE 30, SNR {lo:g}-{min(hi, 150):g}",
                     lambda t, lo=lo, hi=hi: t["category"] == "3T-TE30"
                     and lo <= t["spec"]["snr"] < hi, base))
    rows.append(("3 T TE 30, SNR >= 25 (target)",
                 lambda t: t["category"] == "3T-TE30" and t["spec"]["snr"] >= 25, base))
    rows.append(("3 T TE 30, TE1 in manifest",
                 lambda t: t["category"] == "3T-TE30" and t["spec"]["timing"] == "manifest", base))
    rows.append(("1.5 T TE 30", lambda t: t["category"] == "1.5T-TE30", base))
    rows.append(("7 T TE 30", lambda t: t["category"] == "7T-TE30", base))
    rows.append(("3 T TE 144", lambda t: t["category"] == "3T-TE144", base))
    rows.append(("lactate >= 3 mM (TE 144)",
                 lambda t: t["category"] == "lactate" and t["spec"]["te_s"] > 0.1,
                 (*base, "Lac")))
    rows.append(("lactate >= 3 mM (TE 30)",
                 lambda t: t["category"] == "lactate" and t["spec"]["te_s"] < 0.1,
                 (*base, "Lac")))
    rows.append(("phantoms", lambda t: t["category"] == "phantom",
                 ("tNAA", "tCho", "mI", "Glu", "Glx", "Lac")))
    rows.append(("timing not given (TE 30)",
                 lambda t: t["category"] == "timing-none" and t["spec"]["te_s"] < 0.1, base))
    rows.append(("timing not given (TE 144)",
                 lambda t: t["category"] == "timing-none" and t["spec"]["te_s"] > 0.1, base))
    return rows


# ------------------------------------------------------------------ running
def specproc_command() -> list[str]:
    """The ``specproc`` console script of this interpreter's environment."""
    script = Path(sys.executable).with_name("specproc")
    if script.exists():
        return [str(script)]
    return [sys.executable, "-c", "from specproc.cli import main; main()"]


def subset_manifest(corpus: Path, n: int) -> Path:
    """A manifest of about ``n`` scans of the corpus, spread over the categories."""
    truth = json.loads((corpus / "truth.json").read_text())
    present = {t["scan_id"] for t in truth["scans"]}
    plan = gen.plan_corpus(truth["seed"], truth["preset"])
    wanted = {s.scan_id for s in gen.select_subset([s for s in plan if s.scan_id in present], n)}
    with open(corpus / "manifest.tsv", newline="") as fh:
        reader = csv.DictReader(fh, delimiter="\t")
        fields = list(reader.fieldnames or [])
        kept = [row for row in reader if row["scan_id"] in wanted]
    path = corpus / f"manifest-subset-{n}.tsv"
    with open(path, "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields, delimiter="\t", lineterminator="\n")
        writer.writeheader()
        writer.writerows(kept)
    return path


def manifest_with_kind(corpus: Path, manifest: Path, run_dir: Path) -> Path:
    """The manifest to run: ``manifest`` itself, or, for a corpus written before the generator
    marked its phantoms (no ``kind`` column), a copy in ``run_dir`` with absolute paths and
    ``kind = phantom`` on the phantom rows (from ``truth.json``), as a user marks them."""
    with open(manifest, newline="") as fh:
        reader = csv.DictReader(fh, delimiter="\t")
        fields = list(reader.fieldnames or [])
        rows = list(reader)
    if "kind" in fields:
        return manifest
    truth = json.loads((corpus / "truth.json").read_text())["scans"]
    phantoms = {t["scan_id"] for t in truth if t["spec"]["phantom"]}
    run_dir.mkdir(parents=True, exist_ok=True)
    path = run_dir / "manifest-with-kind.tsv"
    with open(path, "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=[*fields, "kind"], delimiter="\t",
                                lineterminator="\n")
        writer.writeheader()
        for row in rows:
            for key in ("scan", "water"):
                if row.get(key):
                    row[key] = str((manifest.parent / row[key]).resolve())
            writer.writerow({**row, "kind": "phantom" if row["scan_id"] in phantoms else ""})
    print(f"{manifest} has no kind column: running {path} (phantoms marked)", file=sys.stderr)
    return path


def mm_manifest(corpus: Path, manifest: Path, mm_dir: Path, run_dir: Path) -> Path:
    """A copy of ``manifest`` with absolute paths and the column ``mm_spectrum`` (the measured MM
    spectrum of each tissue scan's field and TE in ``mm_dir``; empty for phantoms), in RUNDIR."""
    truth = {t["scan_id"]: t for t in json.loads((corpus / "truth.json").read_text())["scans"]}
    with open(manifest, newline="") as fh:
        reader = csv.DictReader(fh, delimiter="\t")
        fields = [*list(reader.fieldnames or []), "mm_spectrum"]
        rows = list(reader)
    base = manifest.resolve().parent
    for row in rows:
        for column in ("scan", "water"):
            if row.get(column):
                row[column] = str(base / row[column])
        spec = truth[row["scan_id"]]["spec"]
        path = mm_dir.resolve() / gen.measured_mm_name(spec["field_t"], spec["te_s"])
        row["mm_spectrum"] = "" if spec["phantom"] or not path.is_file() else str(path)
    run_dir.mkdir(parents=True, exist_ok=True)
    out = run_dir / "manifest-mm.tsv"
    with open(out, "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields, delimiter="\t", lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    return out


def run_batch(manifest: Path, run_dir: Path, workers: int) -> dict[str, float]:
    """``specproc batch MANIFEST -o RUNDIR --workers N``; wall and children's CPU time, s."""
    cmd = [*specproc_command(), "batch", str(manifest), "-o", str(run_dir),
           "--workers", str(workers), "--no-progress"]
    print("$ " + " ".join(cmd), file=sys.stderr)
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    sys.stderr.write(proc.stdout[-2000:] + proc.stderr[-2000:])
    if proc.returncode != 0:
        raise SystemExit(f"specproc batch failed with exit status {proc.returncode}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return {"wall_s": wall, "cpu_s": cpu}


def run_fit_cli(corpus: Path, manifest: Path, out_root: Path, workers: int) -> dict[str, float]:
    """``specproc fit`` per scan for the manifest rows with ``te1_ms`` (TE1 on the command line)."""
    with open(manifest, newline="") as fh:
        rows = [r for r in csv.DictReader(fh, delimiter="\t") if r.get("te1_ms")]
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")

    def one(row: dict[str, str]) -> int:
        cmd = [*specproc_command(), "fit", str(manifest.parent / row["scan"]), "--water",
               str(manifest.parent / row["water"]), "--te1-ms", row["te1_ms"],
               "-o", str(out_root / row["scan_id"])]
        if row.get("kind") == "phantom":
            cmd.append("--phantom")
        if row.get("mm_spectrum"):
            cmd += ["--mm-spectrum", row["mm_spectrum"]]
        for tissue in ("gm", "wm", "csf"):
            if row.get(tissue):
                cmd += [f"--{tissue}", row[tissue]]
        return subprocess.run(cmd, env=env, capture_output=True, text=True).returncode

    print(f"$ specproc fit ... --te1-ms X on {len(rows)} scans", file=sys.stderr)
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    with ThreadPoolExecutor(max_workers=workers) as pool:
        codes = list(pool.map(one, rows))
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return {"wall_s": time.perf_counter() - start, "cpu_s": cpu, "n": len(rows),
            "n_failed": sum(1 for c in codes if c != 0)}


def read_fit_cli(out_root: Path) -> dict[str, dict[str, dict[str, float]]]:
    """Estimates of the ``specproc fit`` runs, by scan and metabolite (results.tsv)."""
    est: dict[str, dict[str, dict[str, float]]] = {}
    if not out_root.is_dir():
        return est
    for folder in sorted(out_root.iterdir()):
        table = folder / "results.tsv"
        if not table.is_file():
            continue
        with open(table, newline="") as fh:
            for row in csv.DictReader(fh, delimiter="\t"):
                est.setdefault(folder.name, {})[row["metabolite"]] = {
                    k: _num(row.get(k)) for k in ESTIMATE_KEYS}
    return est


# ------------------------------------------------------------------ the generator's constants
def generator_constants(field_t: float) -> dict[str, Any]:
    """The water and relaxation constants of the generator at a field, in the form of
    specproc's ``[water]`` and ``[relaxation]`` settings (the centres of its tables, without the
    per-subject scatter: what a user who knows their study's values would give).

    Returns
    -------
    dict
        ``water`` (``content``, ``molar_mm``) and ``relaxation`` (``water``, ``metabolite``,
        ``default`` tables of ``t1_s``/``t2_s``).
    """
    nf = gen._nominal_field(field_t)
    source = "benchmarks/validation/generate.py"
    metabolites = {
        name: {"t1_s": gen.T1_S[nf].get(name, gen.T1_DEFAULT_S[nf]), "t2_s": t2, "source": source}
        for name, t2 in gen.T2_S[nf].items()}
    return {
        "water": {"content": dict(gen.WATER_CONTENT), "molar_mm": gen.WATER_MM},
        "relaxation": {
            "water": {t: {"t1_s": gen.WATER_T1_S[nf][t], "t2_s": gen.WATER_T2_S[nf][t],
                          "source": source} for t in ("gm", "wm", "csf")},
            "metabolite": metabolites,
            "default": {"t1_s": gen.T1_DEFAULT_S[nf], "t2_s": gen.T2_DEFAULT_S[nf],
                        "source": source},
        },
    }


#: The constants of the water-referenced concentration, in the order they are switched from
#: specproc's to the generator's in the breakdown (:func:`constants_breakdown`).
CONSTANT_PARTS: tuple[tuple[str, str], ...] = (
    ("content", "water contents (specproc 0.837/0.691/1.0, generator 0.78/0.65/0.97)"),
    ("molarity", "pure water (specproc 55.14 mol/L at 37 °C, generator 55.51)"),
    ("water_relaxation", "water T1/T2 of GM, WM, CSF"),
    ("metabolite_relaxation", "metabolite T1/T2"),
)


def requantified_tnaa(quant: dict[str, Any], field_t: float, parts: Sequence[str],
                      subject: dict[str, Any] | None = None) -> float:
    """tNAA in mM of one scan's quantification (fit.json) with the generator's constants for
    ``parts`` (names of :data:`CONSTANT_PARTS`) and specproc's own for the rest; with
    ``subject`` (the scan's truth record) the relaxation times are instead the subject's own
    draws (water of each compartment, NAA and NAAG), which no user knows.

    The fitted amplitudes, the measured water signal, the tissue fractions, TE and TR are those
    of the scan; the formula is specproc's own :func:`specproc.quantify.concentration_factors`
    (Gasparovic et al. 2006).
    """
    from specproc.quantify import Relaxation, concentration_factors, load_relaxation_times

    const = quant["constants"]
    members = list(quant["combinations"]["tNAA"])
    c = generator_constants(field_t)
    overrides: dict[str, Any] = {}
    if "water_relaxation" in parts:
        overrides["water"] = c["relaxation"]["water"]
    if "metabolite_relaxation" in parts:
        overrides["metabolite"] = c["relaxation"]["metabolite"]
        overrides["default"] = c["relaxation"]["default"]
    relax = load_relaxation_times(const["field_t"], overrides=overrides or None)
    if "metabolite_relaxation" not in parts:  # exactly the times specproc used
        metab = {m: Relaxation(const["metabolites"][m]["t1_s"], const["metabolites"][m]["t2_s"])
                 for m in members}
    else:
        metab = {m: relax.metabolite(m) for m in members}
    water = ({k: Relaxation(v.t1_s, v.t2_s) for k, v in relax.water.items()}
             if "water_relaxation" in parts else
             {k: Relaxation(v["t1_s"], v["t2_s"]) for k, v in const["water_relaxation"].items()})
    if subject is not None:
        water = {k: Relaxation(v["t1_s"], v["t2_s"]) for k, v in subject["water_model"].items()}
        metab = {m: Relaxation(subject["t1_s"][m], subject["t2_s"][m]) for m in members}
    k_molar, _, _ = concentration_factors(
        members, water_amplitude=const["water_amplitude"],
        volume_fractions=const["volume_fractions"], te_s=const["te_s"], tr_s=const["tr_s"],
        metabolite_relaxation=metab, water_relaxation=water,
        proton_normalised=bool(const["metabolite_proton_normalised"]),
        protons=const.get("protons"),
        water_proton_normalised=bool(const["water_proton_normalised"]),
        water_te_s=const["water_te_s"], water_tr_s=const["water_tr_s"],
        water_content=c["water"]["content"] if "content" in parts else const["water_content"],
        water_molar_mm=(c["water"]["molar_mm"] if "molarity" in parts
                        else const["water_molar_mm"]))
    return float(sum(k_molar[m] * quant["amplitudes"][m] for m in members))


def _water_referenced(run_dir: Path, t: dict[str, Any]) -> dict[str, Any] | None:
    path = run_dir / "scans" / t["scan_id"] / "fit.json"
    if not t.get("conc_molar_mm") or not path.is_file():
        return None
    quant = json.loads(path.read_text()).get("quantification") or {}
    if not quant.get("water_referenced") or "tNAA" not in (quant.get("conc_molar_mm") or {}):
        return None
    return quant


def generator_constants_estimates(
        run_dir: Path, truths: Sequence[dict[str, Any]]) -> dict[str, dict[str, dict[str, float]]]:
    """tNAA in mM of every tissue scan of a run, quantified again with all the generator's
    constants (:func:`requantified_tnaa`).

    The difference to specproc's reported mM is the part of its error that comes from the two
    sets of published constants; what is left comes from the fit and the water signal (and the
    generator's per-subject scatter of T1 and T2). The SDs (Cramér-Rao, and the total with the
    model uncertainty when the run reports it) are the reported ones scaled by the same factor.
    """
    from specproc.quantify.sums import total_sd

    out: dict[str, dict[str, dict[str, float]]] = {}
    every = [p for p, _ in CONSTANT_PARTS]
    for t in truths:
        quant = _water_referenced(run_dir, t)
        if quant is None:
            continue
        value = requantified_tnaa(quant, t["spec"]["field_t"], every)
        reported = quant["conc_molar_mm"]["tNAA"]
        sd = quant["conc_molar_sd_mm"]["tNAA"]
        model = (quant.get("conc_molar_model_sd_mm") or {}).get("tNAA")
        scale = value / reported if reported else math.nan
        out[t["scan_id"]] = {"tNAA": {
            "conc_molar_mm": value,
            "conc_molar_sd_mm": math.nan if sd is None else sd * scale,
            "conc_molar_total_sd_mm": total_sd(sd, model) * scale}}
    return out


def constants_breakdown(run_dir: Path,
                        truths: Sequence[dict[str, Any]]) -> dict[str, dict[str, float]]:
    """By how much (%) each constant of specproc raises its tNAA in mM over the generator's, per
    scan: the constants are switched to the generator's one after the other in the order of
    :data:`CONSTANT_PARTS`, and each step gives ``before / after - 1``; ``all`` is every
    constant at once; ``subject`` the step from the generator's table centres to the subject's
    own relaxation times; ``left`` the error that then remains (the fit and the water signal)."""
    out: dict[str, dict[str, float]] = {}
    for t in truths:
        quant = _water_referenced(run_dir, t)
        if quant is None:
            continue
        done: list[str] = []
        before = first = requantified_tnaa(quant, t["spec"]["field_t"], done)
        row: dict[str, float] = {}
        for part, _ in CONSTANT_PARTS:
            done.append(part)
            after = requantified_tnaa(quant, t["spec"]["field_t"], done)
            row[part] = 100.0 * (before / after - 1.0)
            before = after
        row["all"] = 100.0 * (first / before - 1.0)
        own = requantified_tnaa(quant, t["spec"]["field_t"], done, subject=t)
        row["subject"] = 100.0 * (before / own - 1.0)
        row["left"] = 100.0 * (own / t["conc_molar_mm"]["tNAA"] - 1.0)
        out[t["scan_id"]] = row
    return out


# ------------------------------------------------------------------ scoring
def read_cohort(run_dir: Path) -> tuple[dict[str, dict[str, dict[str, float]]], dict[str, str]]:
    """Estimates by scan and metabolite, and the status of every scan."""
    est: dict[str, dict[str, dict[str, float]]] = {}
    with open(run_dir / "cohort.tsv", newline="") as fh:
        for row in csv.DictReader(fh, delimiter="\t"):
            est.setdefault(row["scan_id"], {})[row["metabolite"]] = {
                k: _num(row.get(k)) for k in ESTIMATE_KEYS}
    status: dict[str, str] = {}
    with open(run_dir / "cohort_qc.tsv", newline="") as fh:
        for row in csv.DictReader(fh, delimiter="\t"):
            status[row["scan_id"]] = row["status"]
    return est, status


def _num(text: str | None) -> float:
    try:
        return float(text) if text not in (None, "", "n/a") else math.nan
    except ValueError:
        return math.nan


def errors(truths: Sequence[dict[str, Any]], est: dict[str, dict[str, dict[str, float]]],
           label: str, metabolite: str, kind: str) -> dict[str, Any]:
    """Relative errors (%), coverage flags (total uncertainty when reported, else the
    Cramér-Rao SD; and the Cramér-Rao SD alone) and the number of missing estimates."""
    rel: list[float] = []
    covered: list[bool] = []
    covered_crlb: list[bool] = []
    missing = 0
    for t in truths:
        if kind == "ratio":
            true = t["ratio_tcr"][label]
            key, sd_key, total_key = "ratio_tcr", "ratio_tcr_sd", "ratio_tcr_total_sd"
        else:
            if not t.get("conc_molar_mm"):
                continue
            true = t["conc_molar_mm"][metabolite]
            key, sd_key, total_key = "conc_molar_mm", "conc_molar_sd_mm", "conc_molar_total_sd_mm"
        row = est.get(t["scan_id"], {}).get(metabolite)
        value = math.nan if row is None else row[key]
        if not math.isfinite(value) or true <= 0:
            missing += 1
            continue
        rel.append(100.0 * (value / true - 1.0))
        sd = math.nan if row is None else row[sd_key]
        total = math.nan if row is None else row.get(total_key, math.nan)
        bound = total if math.isfinite(total) else sd
        covered.append(math.isfinite(bound) and abs(value - true) <= 2 * bound)
        covered_crlb.append(math.isfinite(sd) and abs(value - true) <= 2 * sd)
    return {"rel_pct": rel, "covered": covered, "covered_crlb": covered_crlb,
            "missing": missing}


def summarise(e: dict[str, Any]) -> dict[str, float]:
    rel = np.asarray(e["rel_pct"], dtype=float)
    if rel.size == 0:
        return {"n": 0, "missing": e["missing"]}
    return {
        "n": int(rel.size), "missing": e["missing"],
        "median_abs_pct": float(np.median(np.abs(rel))),
        "p95_abs_pct": float(np.percentile(np.abs(rel), 95)),
        "median_pct": float(np.median(rel)),
        "covered_pct": 100.0 * float(np.mean(e["covered"])),
        "covered_crlb_pct": 100.0 * float(np.mean(e["covered_crlb"])),
    }


def score(corpus: Path, run_dir: Path) -> dict[str, Any]:
    """Every row × measure summary, and the scan counts."""
    truths = json.loads((corpus / "truth.json").read_text())["scans"]
    est, status = read_cohort(run_dir)
    truths = [t for t in truths if t["scan_id"] in status]
    measures = {m[0]: m for m in MEASURES}
    sources = {"ratio": est, "conc": est,
               "conc_gen": generator_constants_estimates(run_dir, truths)}
    parts = constants_breakdown(run_dir, truths)
    out: dict[str, Any] = {"rows": [], "n_scans": len(truths),
                           "n_failed": sum(1 for s in status.values() if s == "failed")}
    for label, pred, shown in _rows(truths):
        sel = [t for t in truths if pred(t)]
        if not sel:
            continue
        failed = sum(1 for t in sel if status.get(t["scan_id"]) == "failed")
        cells = {name: summarise(errors(sel, sources[measures[name][2]], *measures[name]))
                 for name in shown}
        out["rows"].append({"label": label, "n": len(sel), "failed": failed, "cells": cells})
        found = [parts[t["scan_id"]] for t in sel if t["scan_id"] in parts]
        if found:
            out.setdefault("constants", []).append({
                "label": label, "n": len(found),
                **{k: float(np.median([f[k] for f in found]))
                   for k in [*(p for p, _ in CONSTANT_PARTS), "all", "subject", "left"]}})
    fit_est = read_fit_cli(run_dir / "fit-cli")
    if fit_est:
        for label, source in (("TE1 given: specproc batch, manifest column", est),
                              ("TE1 given: specproc fit --te1-ms", fit_est)):
            sel = [t for t in truths if t["spec"]["timing"] == "manifest"]
            failed = sum(1 for t in sel if t["scan_id"] not in source)
            cells = {name: summarise(errors(sel, source, *measures[name]))
                     for name in ("tNAA", "tCho", "mI", "Glu", "Glx", "tNAA mM")}
            out["rows"].append({"label": label, "n": len(sel), "failed": failed,
                                "cells": cells})
    return out


def _cell(c: dict[str, float] | None, what: str) -> str:
    if not c or c.get("n", 0) == 0:
        return ""
    if what == "abs":
        return f"{c['median_abs_pct']:.1f} / {c['p95_abs_pct']:.0f} / {c['covered_pct']:.0f}"
    if what == "crlb":
        return f"{c.get('covered_crlb_pct', math.nan):.0f}"
    return f"{c['median_pct']:+.1f}"


def markdown(result: dict[str, Any]) -> str:
    """The tables as markdown text."""
    names = [m[0] for m in MEASURES]
    head = "| scans | n | " + " | ".join(names) + " |"
    rule = "|---|---|" + "---|" * len(names)
    lines = [
        "Median |error| % / 95th percentile |error| % / % of errors inside 2 × the reported SD "
        "(the total uncertainty, Cramér-Rao and model, when reported; ratios to tCr; tNAA mM "
        "water-referenced):", "", head, rule,
    ]
    for row in result["rows"]:
        n = f"{row['n']}" + (f" ({row['failed']} failed)" if row["failed"] else "")
        lines.append(f"| {row['label']} | {n} | "
                     + " | ".join(_cell(row["cells"].get(m), "abs") for m in names) + " |")
    lines += ["", "% of errors inside 2 × the Cramér-Rao SD alone:", "", head, rule]
    for row in result["rows"]:
        lines.append(f"| {row['label']} | {row['n']} | "
                     + " | ".join(_cell(row["cells"].get(m), "crlb") for m in names) + " |")
    lines += ["", "Signed median error % (bias):", "", head, rule]
    for row in result["rows"]:
        lines.append(f"| {row['label']} | {row['n']} | "
                     + " | ".join(_cell(row["cells"].get(m), "bias") for m in names) + " |")
    if result.get("constants"):
        keys = [p for p, _ in CONSTANT_PARTS]
        lines += ["", "Where the water-referenced tNAA error comes from (median %): by how much "
                  "each of specproc's constants raises tNAA mM over the generator's (switched "
                  "one after the other; all: together, as in the column tNAA mM gen), the step "
                  "from the generator's table to the subject's own relaxation times (subject), "
                  "and the error left with those (left: the fit and the water signal):", "",
                  "| scans | n | " + " | ".join(keys) + " | all | subject | left |",
                  "|---|---|" + "---|" * (len(keys) + 3)]
        for row in result["constants"]:
            lines.append(f"| {row['label']} | {row['n']} | " + " | ".join(
                f"{row[k]:+.1f}" for k in [*keys, "all", "subject", "left"]) + " |")
        lines += ["", "; ".join(f"{p}: {text}" for p, text in CONSTANT_PARTS) + "."]
    lines += ["", "Targets of issue 10:", ""]
    lines += [f"- {t}" for t in targets(result)]
    return "\n".join(lines)


def comparison(baseline: dict[str, Any], result: dict[str, Any], *, before: str = "before",
               after: str = "after") -> str:
    """Median |error| % of two scored runs side by side (``before -> after``), row by row."""
    names = [m[0] for m in MEASURES]
    old = {r["label"]: r for r in baseline["rows"]}
    lines = [f"Median |error| % ({before} -> {after}); signed median of {after} in brackets:", "",
             "| scans | n | " + " | ".join(names) + " |", "|---|---|" + "---|" * len(names)]
    for row in result["rows"]:
        prev = old.get(row["label"])
        if prev is None:
            continue
        cells = []
        for m in names:
            a, b = prev["cells"].get(m), row["cells"].get(m)
            if not a or not b or not a.get("n") or not b.get("n"):
                cells.append("")
                continue
            cells.append(f"{a['median_abs_pct']:.1f} -> {b['median_abs_pct']:.1f} "
                         f"({b['median_pct']:+.1f})")
        lines.append(f"| {row['label']} | {row['n']} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


def targets(result: dict[str, Any]) -> list[str]:
    """PASS / MISS against the issue's targets (rows that were scored)."""
    rows = {r["label"]: r["cells"] for r in result["rows"]}
    out: list[str] = []

    def check(row: str, measure: str, limit: float, stat: str = "median_abs_pct") -> None:
        c = rows.get(row, {}).get(measure)
        if not c or c.get("n", 0) == 0:
            return
        value = c[stat]
        ok = value >= limit if stat == "covered_pct" else value <= limit
        rel = ">=" if stat == "covered_pct" else "<="
        what = {"median_abs_pct": "median |err|", "p95_abs_pct": "p95 |err|",
                "covered_pct": "inside 2 SD"}[stat]
        out.append(f"{'PASS' if ok else 'MISS'} {row}: {measure} {what} {value:.1f} % "
                   f"(target {rel} {limit:g} %)")

    main = "3 T TE 30, SNR >= 25 (target)"
    for measure, limit in (("tNAA", 4), ("tCho", 4), ("mI", 7), ("Glx", 7), ("Glu", 10)):
        check(main, measure, limit)
        check(main, measure, 2.5 * limit, "p95_abs_pct")
    for row in ("1.5 T TE 30", "7 T TE 30", "3 T TE 144"):
        for measure in ("tNAA", "tCho"):
            check(row, measure, 6)
    check("lactate >= 3 mM (TE 144)", "Lac", 15)
    check("lactate >= 3 mM (TE 30)", "Lac", 15)
    for measure in ("tNAA", "tCho", "mI", "Glu", "Lac"):
        check("phantoms", measure, 3, "p95_abs_pct")
    for row in (main, "1.5 T TE 30", "7 T TE 30", "3 T TE 144", "lactate >= 3 mM (TE 144)"):
        for measure in ("tNAA", "tCho", "mI", "Glx", "Lac"):
            if measure == "Lac" and not row.startswith("lactate"):
                continue
            check(row, measure, 85, "covered_pct")
    return out


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("corpus", type=Path, help="corpus folder (generated when missing)")
    parser.add_argument("-o", "--output", type=Path, default=None,
                        help="run folder of specproc batch (default CORPUS/run[-subset-N])")
    parser.add_argument("--subset", type=int, default=None, metavar="N",
                        help="about N scans spread over the categories (quick run)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--score-only", action="store_true",
                        help="score an existing run folder without running specproc")
    parser.add_argument("--no-fit-cli", action="store_true",
                        help="do not run `specproc fit --te1-ms` on the scans whose TE1 the "
                             "manifest gives")
    parser.add_argument("--json", type=Path, default=None, help="also write the scores here")
    parser.add_argument("--mm-spectra", type=Path, default=None, metavar="DIR",
                        help="fit each tissue scan with the measured macromolecule spectrum of "
                             "its field and TE from DIR (generate.py's mm/ folder)")
    parser.add_argument("--baseline", type=Path, default=None, metavar="RUNDIR",
                        help="also print this run's median |error| beside that of RUNDIR")
    args = parser.parse_args(argv)
    corpus: Path = args.corpus
    if not (corpus / "manifest.tsv").exists():
        gen.generate(corpus, subset=args.subset, progress=True)
    manifest = corpus / "manifest.tsv"
    if args.subset is not None:
        manifest = subset_manifest(corpus, args.subset)
    run_dir = args.output or corpus / ("run" if args.subset is None else
                                       f"run-subset-{args.subset}")
    if args.mm_spectra is not None:
        manifest = mm_manifest(corpus, manifest, args.mm_spectra, run_dir)
    cost = None
    fit_cost = None
    if not args.score_only:
        manifest = manifest_with_kind(corpus, manifest, run_dir)
        cost = run_batch(manifest, run_dir, args.workers)
        if not args.no_fit_cli:
            fit_cost = run_fit_cli(corpus, manifest, run_dir / "fit-cli", args.workers)
    result = score(corpus, run_dir)
    result["cost"] = cost
    result["fit_cli_cost"] = fit_cost
    print(f"specproc on the validation corpus: {result['n_scans']} scans, "
          f"{result['n_failed']} failed"
          + (f"; batch {cost['wall_s']:.0f} s wall, {cost['cpu_s']:.0f} s CPU (children)"
             if cost else "")
          + (f"; specproc fit on {fit_cost['n']} scans ({fit_cost['n_failed']} failed) "
             f"{fit_cost['wall_s']:.0f} s wall, {fit_cost['cpu_s']:.0f} s CPU" if fit_cost else ""))
    print()
    print(markdown(result))
    if args.baseline is not None:
        print()
        print(comparison(score(corpus, args.baseline), result, before=args.baseline.name,
                         after=run_dir.name))
    if args.json:
        args.json.write_text(json.dumps(result, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
