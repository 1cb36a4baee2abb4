"""The cohort summary, rebuilt from the per-scan folders: two tidy tables and an HTML page.

``cohort.tsv``
    One row per scan × fitted member (and combined sum) of every scan that was processed,
    sorted by scan identifier, members in fit order. Columns: :data:`COHORT_COLUMNS`.
``cohort_qc.tsv``
    One row per scan (failed ones included), sorted by scan identifier. Columns:
    :data:`QC_COLUMNS`. ``status`` is ``ok``, ``flagged`` (a QC flag was raised; ``flags``
    lists them, ``;``-separated) or ``failed`` (``reason`` says why, in one line).
``cohort.html``
    One self-contained page: the distribution of each metabolite over the cohort, the QC
    distributions (embedded PNG), and the flagged and failed scans.

Cells are written by :mod:`specproc._tsv` (6 significant digits, missing values as ``n/a``,
the BIDS spelling); there is no time stamp or absolute output path in the tables, so a run resumed
after a crash, a run with any number of workers and a run on a Dask cluster give the same
bytes. The tables are written line by line (only the per-metabolite values needed for the
figures are kept in memory: one float per scan and metabolite).
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

from specproc._atomic import atomic_path, write_text
from specproc._tsv import TsvWriter
from specproc.batch.manifest import ScanEntry
from specproc.batch.task import DONE_NAME, QC_FIELDS, SUMMARY_NAME, read_json

__all__ = ["COHORT_COLUMNS", "QC_COLUMNS", "write_cohort"]

_ID_COLUMNS = ("scan_id", "subject", "session")
#: Columns of ``cohort.tsv``.
COHORT_COLUMNS: tuple[str, ...] = (
    *_ID_COLUMNS, "metabolite", "kind", "amplitude", "crlb_sd", "crlb_percent",
    "ratio_tcr", "ratio_tcr_sd", "ratio_water", "conc_molar_mm", "conc_molar_sd_mm",
    "conc_molal_mmol_kg", "conc_molal_sd_mmol_kg", "fit_flag", "scan_status", "snr",
    "naa_fwhm_hz",
)
#: Columns of ``cohort_qc.tsv``.
QC_COLUMNS: tuple[str, ...] = (
    *_ID_COLUMNS, "scan", "water", "status", *QC_FIELDS, "flags", "reason",
)

CAUTION = (
    "Research use only. specproc is not a medical device; its results are not a diagnosis "
    "and must be interpreted by qualified professionals."
)


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
                 title: str = "specproc cohort") -> dict[str, Any]:
    """Write ``cohort.tsv``, ``cohort_qc.tsv`` and ``cohort.html`` from the scan folders.

    Parameters
    ----------
    entries : sequence of ScanEntry
        The scans of the cohort (folders ``out_dir/scans/<key>``).
    out_dir : path
        The batch output folder.
    title : str
        Title of the HTML page (escaped).

    Returns
    -------
    dict
        ``ok``, ``flagged``, ``failed`` counts and ``failures`` [(key, reason)].
    """
    out = Path(out_dir)
    counts: dict[str, Any] = {"ok": 0, "flagged": 0, "failed": 0, "failures": []}
    values: dict[str, list[float]] = {}
    units: dict[str, str] = {}
    qc_values: dict[str, list[float]] = {"snr": [], "naa_fwhm_hz": [], "residual_ratio": []}
    flagged: list[tuple[str, str]] = []
    with atomic_path(out / "cohort.tsv") as tmp_main, atomic_path(out / "cohort_qc.tsv") as tmp_qc:
        with open(tmp_main, "w", encoding="utf-8", newline="") as main, \
                open(tmp_qc, "w", encoding="utf-8", newline="") as qc_file:
            main_table = TsvWriter(main, COHORT_COLUMNS)
            qc_table = TsvWriter(qc_file, QC_COLUMNS)
            for entry, summary in _iter_scans(entries, out):
                _write_scan(entry, summary, main_table, qc_table, counts, values, qc_values,
                            flagged)
    chosen: dict[str, list[float]] = {}
    for label, data in values.items():  # concentrations where any scan has them, else ratios
        name, unit = label.split("\t")
        if unit == "mM" or f"{name}\tmM" not in values:
            chosen[name] = data
            units[name] = unit
    page = render_html(title=title, counts=counts, values=chosen, units=units,
                       qc_values=qc_values, flagged=flagged, n_scans=len(entries))
    write_text(out / "cohort.html", page)
    return counts


def _write_scan(entry: ScanEntry, summary: Mapping[str, Any], main: TsvWriter, qc_file: TsvWriter,
                counts: dict[str, Any], values: dict[str, list[float]],
                qc_values: dict[str, list[float]], flagged: list[tuple[str, str]]) -> None:
    status = str(summary.get("status", "failed"))
    ids = (entry.key, entry.subject, entry.session)
    qc = dict(summary.get("qc") or {})
    flags = [str(f) for f in summary.get("flags") or []]
    reason = _relative_reason(str(summary.get("reason") or ""), entry)
    qc_file.write((*ids, entry.scan_label, entry.water_label, status,
                   *(qc.get(k) for k in QC_FIELDS), ";".join(flags), reason))
    if status == "failed":
        counts["failed"] += 1
        counts["failures"].append((entry.key, reason))
        return
    counts["flagged" if status == "flagged" else "ok"] += 1
    if flags:
        flagged.append((entry.key, "; ".join(flags)))
    for name in qc_values:
        v = qc.get(name)
        if isinstance(v, int | float) and math.isfinite(v):
            qc_values[name].append(float(v))
    for row in summary.get("metabolites") or []:
        main.write((*ids, *(row.get(c) for c in COHORT_COLUMNS[3:-3]), status,
                    qc.get("snr"), qc.get("naa_fwhm_hz")))
        name = str(row.get("metabolite"))
        for column, unit in (("conc_molar_mm", "mM"), ("ratio_tcr", "/ tCr")):
            v = row.get(column)
            if isinstance(v, int | float) and math.isfinite(v):
                values.setdefault(f"{name}\t{unit}", []).append(float(v))


# ============================================================================ HTML
def _png_data_uri(fig: Any) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=90, metadata={"Software": None})
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _figure_metabolites(values: Mapping[str, list[float]], units: Mapping[str, str]) -> str:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    names = [n for n in values if values[n]]
    if not names:
        return ""
    ncol = min(4, len(names))
    nrow = math.ceil(len(names) / ncol)
    fig = Figure(figsize=(2.6 * ncol, 2.1 * nrow), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrow, ncol, squeeze=False)
    for ax, name in zip(axes.flat, names, strict=False):
        data = values[name]
        ax.hist(data, bins=max(5, min(30, int(math.sqrt(len(data))) + 1)), color="#4a7ba6",
                edgecolor="white", linewidth=0.5)
        ax.set_title(f"{name} ({units.get(name, '')}, n={len(data)})", fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in list(axes.flat)[len(names):]:
        ax.set_axis_off()
    return _png_data_uri(fig)


def _figure_qc(qc_values: Mapping[str, list[float]]) -> str:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    labels = {"snr": "SNR (NAA height / noise SD)", "naa_fwhm_hz": "NAA FWHM (Hz)",
              "residual_ratio": "fit residual SD / noise SD"}
    present = [k for k in labels if qc_values.get(k)]
    if not present:
        return ""
    fig = Figure(figsize=(3.0 * len(present), 2.4), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, len(present), squeeze=False)[0]
    for ax, key in zip(axes, present, strict=True):
        data = qc_values[key]
        ax.hist(data, bins=max(5, min(30, int(math.sqrt(len(data))) + 1)), color="#8a6d3b",
                edgecolor="white", linewidth=0.5)
        ax.set_title(f"{labels[key]}, n={len(data)}", fontsize=8)
        ax.tick_params(labelsize=7)
    return _png_data_uri(fig)


def _rows(pairs: Sequence[tuple[str, str]], heads: tuple[str, str]) -> str:
    if not pairs:
        return "<p>None.</p>"
    body = "".join(
        f"<tr><td>{html.escape(a)}</td><td>{html.escape(b)}</td></tr>" for a, b in pairs
    )
    return (f"<table><thead><tr><th>{html.escape(heads[0])}</th><th>{html.escape(heads[1])}"
            f"</th></tr></thead><tbody>{body}</tbody></table>")


def render_html(*, title: str, counts: Mapping[str, Any], values: Mapping[str, list[float]],
                units: Mapping[str, str], qc_values: Mapping[str, list[float]],
                flagged: Sequence[tuple[str, str]], n_scans: int) -> str:
    """The self-contained cohort page (every string from files is HTML-escaped)."""
    from specproc import __version__

    met_uri = _figure_metabolites(values, units)
    qc_uri = _figure_qc(qc_values)
    summary_rows = "".join(
        f"<tr><th>{html.escape(label)}</th><td>{value}</td></tr>"
        for label, value in (("scans", n_scans), ("processed, no flag", counts["ok"]),
                             ("processed, flagged", counts["flagged"]),
                             ("failed", counts["failed"]))
    )

    def img(uri: str, alt: str) -> str:
        return f'<img src="{uri}" alt="{html.escape(alt)}">' if uri else "<p>No values.</p>"

    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>{html.escape(title)}</title>
<style>
body {{ font-family: sans-serif; max-width: 62em; margin: 1.5em auto; color: #222; }}
.caution {{ border: 1px solid #b58900; background: #fdf6e3; padding: 0.6em 0.9em; }}
table {{ border-collapse: collapse; margin: 0.5em 0; }}
th, td {{ border: 1px solid #ccc; padding: 0.2em 0.6em; text-align: left; font-size: 0.9em; }}
img {{ max-width: 100%; }}
</style></head><body>
<h1>{html.escape(title)}</h1>
<p class="caution">{html.escape(CAUTION)}</p>
<p>specproc {html.escape(__version__)}. Tables: <code>cohort.tsv</code> (one row per scan and
metabolite), <code>cohort_qc.tsv</code> (one row per scan); per-scan outputs in
<code>scans/</code>.</p>
<table>{summary_rows}</table>
<h2>Metabolites across the cohort</h2>
<p>Water-referenced concentrations (mM) where a water reference and tissue fractions were
given, else ratios to total creatine.</p>
{img(met_uri, "distribution of each metabolite")}
<h2>Quality control</h2>
{img(qc_uri, "distributions of SNR, NAA linewidth and fit residual")}
<h2>Flagged scans</h2>
{_rows(list(flagged), ("scan", "flags"))}
<h2>Failed scans</h2>
{_rows(list(counts["failures"]), ("scan", "reason"))}
</body></html>
"""
