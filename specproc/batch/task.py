"""The unit of work of a cohort run: one scan, processed in a worker, written to its folder.

:func:`run_task` is what the executors call (it is a top-level function of a plain dict, so
it pickles for local worker processes and for Dask). It

1. removes a stale ``done.json`` of the scan folder (a crash from now on leaves the scan
   "not done");
2. processes the scan through :func:`process_one`, i.e. the per-scan analysis
   :func:`specproc.analysis.analyse_scan` with the protocol's shared basis (manifest overrides
   of the header are applied to the scan in memory) and
   :func:`specproc.analysis.write_scan_outputs`;
3. writes ``summary.json`` (the numbers the cohort tables are made of), then ``done.json``
   (the content hashes of the inputs). Both are atomic writes; ``done.json`` is written last.

A scan that fails is not an error of the batch: the reason (the text of the
:class:`~specproc.errors.InvalidInputError`, or ``"<ExceptionType>: message"`` for an
unexpected error) is recorded in both files with ``status = "failed"``.
"""

from __future__ import annotations

import hashlib
import json
import math
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from specproc._atomic import write_text
from specproc._threads import blas_threads
from specproc.errors import InvalidInputError

__all__ = [
    "DONE_NAME",
    "SUMMARY_NAME",
    "done_matches",
    "failure_reason",
    "mm_model_label",
    "process_one",
    "read_json",
    "run_task",
    "summarise_fit_json",
    "write_outcome",
]

DONE_NAME = "done.json"
SUMMARY_NAME = "summary.json"
_DONE_FORMAT = "specproc-batch-done"
_SUMMARY_FORMAT = "specproc-batch-summary"
_FORMAT_VERSION = 1

#: QC numbers copied into ``summary.json`` (and the cohort tables), in this order.
QC_FIELDS: tuple[str, ...] = (
    "snr", "noise_sd", "naa_fwhm_hz", "naa_fwhm_ppm", "water_fwhm_hz", "water_fwhm_ppm",
    "residual_ratio", "n_transients", "n_rejected", "drift_range_hz",
)

_BASIS_CACHE: dict[str, Any] = {}


# ============================================================================ small helpers
def read_json(path: Path) -> dict[str, Any] | None:
    """A JSON object from a file, or ``None`` when missing or unreadable."""
    try:
        value = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None
    return value if isinstance(value, dict) else None


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def failure_reason(exc: BaseException) -> str:
    """One-line reason: ``str(exc)`` for an InvalidInputError, else ``"Type: message"``."""
    if isinstance(exc, InvalidInputError):
        return _one_line(str(exc))
    message = _one_line(str(exc))
    return f"{type(exc).__name__}: {message}" if message else type(exc).__name__


def _num(value: Any) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def _dumps(value: Mapping[str, Any]) -> str:
    return json.dumps(value, indent=1, sort_keys=True, allow_nan=False) + "\n"


def done_matches(folder: Path, inputs: Mapping[str, Any]) -> dict[str, Any] | None:
    """The scan's ``summary.json`` if ``done.json`` records exactly ``inputs``, else ``None``.

    The summary's own hash, recorded in ``done.json``, must match too: a folder is trusted
    only when both files are complete and belong together.
    """
    done = read_json(folder / DONE_NAME)
    if not done or done.get("format") != _DONE_FORMAT or done.get("inputs") != dict(inputs):
        return None
    summary_path = folder / SUMMARY_NAME
    try:
        raw = summary_path.read_bytes()
    except OSError:
        return None
    if hashlib.sha256(raw).hexdigest() != done.get("summary_sha256"):
        return None
    return read_json(summary_path)


def write_outcome(folder: Path, *, key: str, inputs: Mapping[str, Any],
                  summary: Mapping[str, Any]) -> None:
    """Write ``summary.json`` then ``done.json`` (atomically, in that order)."""
    text = _dumps({"format": _SUMMARY_FORMAT, "format_version": _FORMAT_VERSION, "key": key,
                   **summary})
    write_text(folder / SUMMARY_NAME, text)
    done = {
        "format": _DONE_FORMAT,
        "format_version": _FORMAT_VERSION,
        "key": key,
        "status": summary.get("status"),
        "inputs": dict(inputs),
        "summary_sha256": hashlib.sha256(text.encode("utf-8")).hexdigest(),
    }
    write_text(folder / DONE_NAME, _dumps(done))


def failed_summary(reason: str) -> dict[str, Any]:
    """Summary of a scan that could not be processed."""
    return {"status": "failed", "reason": reason, "qc": {}, "flags": [], "metabolites": []}


# ============================================================================ processing
def _load_basis(path: str) -> Any:
    from specproc.basis import BasisSet

    basis = _BASIS_CACHE.get(path)
    if basis is None:
        if len(_BASIS_CACHE) > 8:  # a worker sees few protocols; keep memory bounded
            _BASIS_CACHE.clear()
        basis = BasisSet.load(path)
        _BASIS_CACHE[path] = basis
    return basis


def edited_basis_paths(stem: str | Path) -> dict[str, Path]:
    """Files of the ON, OFF and DIFF bases of an edited protocol saved under ``stem``."""
    return {part: Path(f"{stem}-{part}.npz") for part in ("on", "off", "diff")}


def _load_edited_basis(stem: str, scan: Any) -> Any:
    """The :class:`~specproc.edited.basis.EditedBasis` saved by the batch parent, with the
    scan's editing pulses (the same conditions that keyed it)."""
    from specproc.basis import BasisSet
    from specproc.edited.basis import EditedBasis
    from specproc.edited.conditions import edit_conditions

    parts = _BASIS_CACHE.get(stem)
    if parts is None:
        if len(_BASIS_CACHE) > 8:
            _BASIS_CACHE.clear()
        parts = {k: BasisSet.load(p) for k, p in edited_basis_paths(stem).items()}
        _BASIS_CACHE[stem] = parts
    conditions = edit_conditions(scan)
    return EditedBasis(on=parts["on"], off=parts["off"], diff=parts["diff"],
                       edit_on=conditions.on, edit_off=conditions.off)


def apply_overrides(scan: Any, overrides: Mapping[str, Any]) -> Any:
    """The Scan with manifest or option overrides (``te_s``, ``tm_s``, ``tr_s``, ``sequence``).

    A value that differs from the file's is recorded in the header under ``HeaderOverrides``
    (``{key: {"header": old, "given": new}}``), so that the analysis can say so.
    """
    if not overrides:
        return scan
    from specproc.io import normalise_sequence_name

    changes = {k: overrides[k] for k in ("te_s", "tm_s", "tr_s") if k in overrides}
    if "sequence" in overrides:
        changes["sequence"] = normalise_sequence_name(str(overrides["sequence"]))
    replaced = {k: {"header": getattr(scan, k), "given": v} for k, v in changes.items()
                if getattr(scan, k) is not None and getattr(scan, k) != v}
    if replaced:
        changes["header"] = {**dict(scan.header), "HeaderOverrides": replaced}
    from specproc.io._util import check_physical_ranges

    changed = scan.replace(**changes)
    check_physical_ranges(changed, {k: f"the given {k[:2].upper()}" for k in overrides},
                          scan.source)
    return changed


def _metabolite_rows(table: list[Mapping[str, Any]], quant: Mapping[str, Any]
                     ) -> list[dict[str, Any]]:
    """Rows of the tidy cohort table from the fit table and quantification of ``fit.json``."""

    def pick(name: str, key: str) -> float | None:
        values = quant.get(key)
        return _num(values.get(name)) if isinstance(values, Mapping) else None

    from specproc.quantify.sums import total_sd
    from specproc.report.tables import CONCENTRATION_KINDS

    rows = []
    for r in table:
        name = str(r.get("metabolite"))
        ratio = pick(name, "ratios")
        molar = r.get("kind") in CONCENTRATION_KINDS  # one rule: no mM for macromolecules
        ratio_model = pick(name, "ratio_model_sd")
        molar_model = pick(name, "conc_molar_model_sd_mm") if molar else None
        rows.append({
            "metabolite": name,
            "kind": r.get("kind"),
            "amplitude": _num(r.get("amplitude")),
            "crlb_sd": _num(r.get("crlb_sd")),
            "crlb_percent": _num(r.get("crlb_percent")),
            "ratio_tcr": ratio if ratio is not None else _num(r.get("ratio_tcr")),
            "ratio_tcr_sd": pick(name, "ratio_sd"),
            "ratio_tcr_model_sd": ratio_model,
            "ratio_tcr_total_sd": _num(total_sd(pick(name, "ratio_sd"), ratio_model)),
            "ratio_water": pick(name, "ratios_to_water"),
            "conc_molar_mm": pick(name, "conc_molar_mm") if molar else None,
            "conc_molar_sd_mm": pick(name, "conc_molar_sd_mm") if molar else None,
            "conc_molar_model_sd_mm": molar_model,
            "conc_molar_total_sd_mm": _num(total_sd(pick(name, "conc_molar_sd_mm"),
                                                    molar_model)) if molar else None,
            "conc_molal_mmol_kg": pick(name, "conc_molal_mmol_kg") if molar else None,
            "conc_molal_sd_mmol_kg": pick(name, "conc_molal_sd_mmol_kg") if molar else None,
            "fit_flag": r.get("flag") or "",
        })
    return rows


def summarise_fit_json(document: Mapping[str, Any]) -> dict[str, Any]:
    """``summary.json`` content of a processed scan from the ``fit.json`` of its folder.

    The scan is ``"flagged"`` when a QC flag was raised or the fit did not converge, and
    ``"failed"`` when the fit collapsed (:func:`specproc.sanity.collapse_reason`).
    """
    fit = document.get("fit") or {}
    qc = document.get("qc") or {}
    quant = document.get("quantification") or {}
    numbers: dict[str, Any] = {}
    for k in QC_FIELDS:
        v = qc.get(k)
        numbers[k] = v if isinstance(v, int) and not isinstance(v, bool) else _num(v)
    flags = [str(f.get("name")) for f in qc.get("flags") or [] if isinstance(f, Mapping)]
    if "not_converged" in (fit.get("flags") or []):
        flags.append("fit:not_converged")
    from specproc.report.messages import fit_flag_sentence

    collapsed = [f for f in fit.get("flags") or [] if str(f).startswith("collapsed:")]
    metabolites = _metabolite_rows(list(fit.get("table") or []), quant)
    edited = document.get("edited")
    if isinstance(edited, Mapping):  # J-difference edited scan: GABA+ and the edited QC
        from specproc.report.edited import EDITED_QC_FIELDS, edited_members

        edited_qc = edited.get("qc") or {}
        for k in EDITED_QC_FIELDS:
            numbers[k] = _num(edited_qc.get(k))
        if numbers.get("pairs_rejected") is not None:
            numbers["pairs_rejected"] = int(numbers["pairs_rejected"])
        keys = [str(k) for k in edited.get("flag_keys") or []]
        flags += [f"edited:{k}" for k in keys]
        members = edited_members(edited.get("values") or {}, flagged=bool(keys))
        metabolites += [{**{k: _num(v) if isinstance(v, float) else v
                            for k, v in m.items()},
                         "ratio_water": None, "conc_molal_mmol_kg": None,
                         "conc_molal_sd_mmol_kg": None} for m in members]
    return {
        "status": "failed" if collapsed else "flagged" if flags else "ok",
        "reason": fit_flag_sentence(str(collapsed[0]))
        if collapsed else "",
        "qc": numbers,
        "flags": flags,
        "statement": str(quant.get("statement") or ""),
        "metabolites": metabolites,
        "edited_flags": [str(f) for f in (edited or {}).get("flags") or []]
        if isinstance(edited, Mapping) else [],
        "spectrum": {k: (document.get("spectrum") or {}).get(k) for k in ("ppm", "fit")}
        if isinstance(document.get("spectrum"), Mapping) else None,
        "tissue": _tissue_summary(document.get("tissue")),
        "mm_model": mm_model_label((document.get("basis") or {}).get("mm_model")),
    }


def mm_model_label(model: Any) -> str:
    """The macromolecule model of fit.json's ``basis.mm_model`` in one cell: ``none``,
    ``parametrised`` or ``measured:<file>:<first 12 digits of its SHA-256>`` ("" unknown)."""
    if not isinstance(model, Mapping):
        return ""
    kind = str(model.get("model") or "")
    if kind != "measured":
        return kind
    return f"measured:{model.get('file', '')}:{str(model.get('sha256') or '')[:12]}"


def _tissue_summary(tissue: Any) -> dict[str, Any] | None:
    """GM, WM, CSF, unsegmented share and source of fit.json's ``tissue`` (None without)."""
    if not isinstance(tissue, Mapping) or not isinstance(tissue.get("fractions"), Mapping):
        return None
    given = tissue.get("method") == "given"
    return {**{t: _num(tissue["fractions"].get(t)) for t in ("gm", "wm", "csf")},
            "unsegmented": None if given else _num(tissue.get("unsegmented")),
            "tissue_source": "given" if given else str(tissue.get("maps_kind") or "maps")
            .replace("probability", "maps")}


def process_one(task: Mapping[str, Any]) -> dict[str, Any]:
    """Analyse one scan into its folder (:func:`specproc.analysis.analyse_scan`, then
    :func:`specproc.analysis.write_scan_outputs`) with the protocol's shared basis.

    Manifest overrides of the header are applied to the scan in memory. Returns its summary
    (raises on failure).
    """
    from specproc.analysis import analyse_scan, write_scan_outputs
    from specproc.io import load

    folder = Path(task["out_dir"])
    folder.mkdir(parents=True, exist_ok=True)
    scan = apply_overrides(load(task["scan_path"]), task.get("overrides") or {})
    basis = (_load_edited_basis(task["basis_path"], scan) if task.get("edited")
             else _load_basis(task["basis_path"]))
    water = load(task["water_path"]) if task.get("water_path") else None
    tissue = task.get("tissue")
    if task.get("tissue_maps"):
        from specproc.tissue import TissueMapFiles, tissue_fractions_from_files

        paths = {k: None if v is None or k == "label_table" else Path(v)
                 for k, v in task["tissue_maps"].items()}
        files = TissueMapFiles(**{**paths, "label_table": task["tissue_maps"].get("label_table")})
        tissue = tissue_fractions_from_files(task["scan_path"], files)
    result = analyse_scan(
        scan, water, tissue=tissue, basis=basis, protocol=task.get("protocol"),
        config=task.get("config"), title=task["key"],
    )
    write_scan_outputs(result, folder, outputs=task.get("outputs", "all"))
    document = read_json(folder / "fit.json")
    if document is None:
        raise RuntimeError("the per-scan analysis wrote no readable fit.json")
    return summarise_fit_json(document)


@blas_threads()
def run_task(task: Mapping[str, Any]) -> dict[str, Any]:
    """Process one scan and record the outcome in its folder; never raises for a bad scan.

    Parameters
    ----------
    task : mapping
        ``key``, ``scan_path``, ``water_path`` (or None), ``out_dir``, ``basis_path``,
        ``protocol`` (the :class:`~specproc.protocol.Protocol` of the basis), ``config``
        (dict), ``tissue`` (dict or None), ``tissue_maps`` (the segmentation files of
        :class:`~specproc.tissue.TissueMapFiles` as a dict, or None: the fractions are then
        computed from them), ``overrides`` (dict), ``inputs`` (the hashes
        recorded in ``done.json``).

    Returns
    -------
    dict
        ``key``, ``status`` (``"ok"``, ``"flagged"`` or ``"failed"``), ``reason``, ``seconds``.
    """
    start = time.perf_counter()
    folder = Path(task["out_dir"])
    folder.mkdir(parents=True, exist_ok=True)
    try:
        (folder / DONE_NAME).unlink()
    except FileNotFoundError:
        pass
    try:
        summary = process_one(task)
    except MemoryError:
        summary = failed_summary("MemoryError: out of memory")
    except Exception as exc:  # a bad scan must not stop the cohort
        summary = failed_summary(failure_reason(exc))
    write_outcome(folder, key=task["key"], inputs=task["inputs"], summary=summary)
    return {"key": task["key"], "status": summary["status"], "reason": summary["reason"],
            "seconds": time.perf_counter() - start}
