"""The cohort summary, rebuilt from the per-scan folders: two tidy tables and an HTML page.

``cohort.tsv``
    One row per scan × fitted member (and combined sum) of every scan that was processed,
    sorted by scan identifier, members in fit order. Columns: :data:`COHORT_COLUMNS`.
``cohort_qc.tsv``
    One row per scan (failed ones included), sorted by scan identifier. Columns:
    :data:`QC_COLUMNS`. ``status`` is ``ok``, ``flagged`` (a QC flag was raised; ``flags``
    lists them, ``;``-separated) or ``failed`` (``reason`` says why, in one line). ``gm``,
    ``wm``, ``csf`` are the voxel's tissue fractions used, ``tissue_source`` says where they
    came from (``maps`` or ``labels``: computed from the anatomy, :mod:`specproc.tissue`, with
    the share of the voxel in no map in ``unsegmented``; ``given``: manifest numbers).
    ``mm_model`` is the macromolecule model of the scan's basis
    (:func:`specproc.batch.task.mm_model_label`: ``none``, ``parametrised`` or
    ``measured:<file>:<hash>``). The edited QC columns
    (:data:`specproc.report.edited.EDITED_QC_FIELDS`: fit error of the DIFF model and
    subtraction artefact at 3.2 ppm in per cent, ON/OFF pairs rejected) are filled
    for J-difference edited scans only; their flags are ``edited:<key>``. In ``cohort.tsv`` an
    edited scan has the rows ``GABA+`` (ratio to tCr, water-referenced mM, bounds) and, with
    tissue fractions, ``GABA+_alpha`` (alpha-corrected mM), of kind ``edited``.
``cohort.html``
    One self-contained page (:class:`specproc.report.cohort.CohortPage`): summary statistics
    with the exclusion rules of the ``[qc]`` settings, one point per scan, the mean fitted
    spectrum, QC distributions, and the flagged and failed scans with their reasons in words
    and links to their reports.

Cells are written by :mod:`specproc._tsv` (6 significant digits, missing values as ``n/a``,
the BIDS spelling); there is no time stamp or absolute output path in the tables, so a run resumed
after a crash, a run with any number of workers and a run on a Dask cluster give the same
bytes. The tables are written line by line (only the per-metabolite values needed for the
page are kept in memory: three floats per scan and member, and one running mean spectrum).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

from specproc._atomic import atomic_path, write_text
from specproc._tsv import TsvWriter
from specproc.batch.manifest import ScanEntry
from specproc.batch.task import DONE_NAME, QC_FIELDS, SUMMARY_NAME, read_json
from specproc.report.edited import EDITED_QC_FIELDS

__all__ = ["COHORT_COLUMNS", "QC_COLUMNS", "write_cohort"]

_ID_COLUMNS = ("scan_id", "subject", "session")
#: Columns of ``cohort.tsv``.
COHORT_COLUMNS: tuple[str, ...] = (
    *_ID_COLUMNS, "metabolite", "kind", "amplitude", "crlb_sd", "crlb_percent",
    "ratio_tcr", "ratio_tcr_sd", "ratio_tcr_model_sd", "ratio_tcr_total_sd", "ratio_water",
    "conc_molar_mm", "conc_molar_sd_mm", "conc_molar_model_sd_mm", "conc_molar_total_sd_mm",
    "conc_molal_mmol_kg", "conc_molal_sd_mmol_kg", "fit_flag", "scan_status", "snr",
    "naa_fwhm_hz",
)
#: Columns of ``cohort_qc.tsv``.
QC_COLUMNS: tuple[str, ...] = (
    *_ID_COLUMNS, "scan", "water", "status", *QC_FIELDS, *EDITED_QC_FIELDS, "gm", "wm", "csf",
    "unsegmented", "tissue_source", "mm_model", "flags", "reason",
)
_TISSUE_FIELDS = ("gm", "wm", "csf", "unsegmented", "tissue_source")


def _read_scan(folder: Path) -> dict[str, Any] | None:
    """The summary of a finished scan folder (``done.json`` present and matching), or None."""
    import hashlib

    done = read_json(folder / DONE_NAME)
    if not done:
        return None
    try:
        raw = (folder / SUMMARY_NAME).read_bytes()
    except OSError:
        return None
    if hashlib.sha256(raw).hexdigest() != done.get("summary_sha256"):
        return None
    return read_json(folder / SUMMARY_NAME)


def _relative_reason(reason: str, entry: ScanEntry) -> str:
    text = str(reason)
    for path, label in ((entry.scan_path, entry.scan_label),
                        (entry.water_path, entry.water_label)):
        if path is not None and label:
            text = text.replace(str(path), label)
    return text


def _iter_scans(entries: Sequence[ScanEntry], out_dir: Path
                ) -> Iterator[tuple[ScanEntry, dict[str, Any]]]:
    for entry in sorted(entries, key=lambda e: e.key):
        summary = _read_scan(out_dir / "scans" / entry.key)
        if summary is None:
            summary = {"status": "failed", "qc": {}, "flags": [], "metabolites": [],
                       "reason": "no result: processing stopped before the end (interrupted, "
                       "or its worker process died); run the batch again"}
        yield entry, summary


def write_cohort(entries: Sequence[ScanEntry], out_dir: str | Path, *,
                 title: str = "specproc cohort",
                 qc_config: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Write ``cohort.tsv``, ``cohort_qc.tsv`` and ``cohort.html`` from the scan folders.

    Parameters
    ----------
    entries : sequence of ScanEntry
        The scans of the cohort (folders ``out_dir/scans/<key>``).
    out_dir : path
        The batch output folder.
    title : str
        Title of the HTML page (escaped).
    qc_config : mapping, optional
        The ``[qc]`` table of the configuration: the exclusion rules of the page's summaries
        (default: the bundled defaults).

    Returns
    -------
    dict
        ``ok``, ``flagged``, ``failed`` counts and ``failures`` [(key, reason)].
    """
    from specproc import __version__
    from specproc.config import default_config
    from specproc.report.cohort import CohortPage

    out = Path(out_dir)
    counts: dict[str, Any] = {"ok": 0, "flagged": 0, "failed": 0, "failures": []}
    page = CohortPage(title, default_config()["qc"] if qc_config is None else qc_config)
    with atomic_path(out / "cohort.tsv") as tmp_main, atomic_path(out / "cohort_qc.tsv") as tmp_qc:
        with open(tmp_main, "w", encoding="utf-8", newline="") as main, \
                open(tmp_qc, "w", encoding="utf-8", newline="") as qc_file:
            main_table = TsvWriter(main, COHORT_COLUMNS)
            qc_table = TsvWriter(qc_file, QC_COLUMNS)
            for entry, summary in _iter_scans(entries, out):
                _write_scan(entry, summary, main_table, qc_table, counts)
                report = out / "scans" / entry.key / "report.html"
                page.add(entry.key, summary,
                         report_href=f"scans/{entry.key}/report.html" if report.is_file()
                         else None, phantom=entry.is_phantom)
    write_text(out / "cohort.html", page.render(version=__version__, n_scans=len(entries)))
    return counts


def _write_scan(entry: ScanEntry, summary: Mapping[str, Any], main: TsvWriter,
                qc_file: TsvWriter, counts: dict[str, Any]) -> None:
    status = str(summary.get("status", "failed"))
    ids = (entry.key, entry.subject, entry.session)
    qc = dict(summary.get("qc") or {})
    flags = [str(f) for f in summary.get("flags") or []]
    reason = _relative_reason(str(summary.get("reason") or ""), entry)
    if isinstance(summary, dict):
        summary["reason"] = reason  # the page shows the same relative text
    tissue = dict(summary.get("tissue") or {})
    qc_file.write((*ids, entry.scan_label, entry.water_label, status,
                   *(qc.get(k) for k in (*QC_FIELDS, *EDITED_QC_FIELDS)),
                   *(tissue.get(k) for k in _TISSUE_FIELDS), summary.get("mm_model", ""),
                   ";".join(flags), reason))
    if status == "failed":
        counts["failed"] += 1
        counts["failures"].append((entry.key, reason))
        return
    counts["flagged" if status == "flagged" else "ok"] += 1
    for row in summary.get("metabolites") or []:
        main.write((*ids, *(row.get(c) for c in COHORT_COLUMNS[3:-3]), status,
                    qc.get("snr"), qc.get("naa_fwhm_hz")))
