"""The self-contained HTML report of one scan.

One file, no external assets: the style sheet is inline, figures are embedded as base64 PNG
``data:`` URIs, and there is no script. Links point only to the files written beside the report
(``fit.json``, ``config.toml``, ``results.tsv``, ``fit.pdf``) and to the methods document of the
source tree.

Safety: every string that comes from a data file (protocol names, header values, file names,
free text) and every other value is escaped with :func:`html.escape` (``quote=True``) before it
is put into the page; the only markup is the page's own.
"""

from __future__ import annotations

import datetime as _dt
import html
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from specproc._atomic import write_text
from specproc.report.figures import png_data_uri
from specproc.report.tables import (
    format_number,
    methods_rows,
    processing_rows,
    qc_rows,
)

__all__ = ["CAUTION_TEXT", "escape", "html_table", "methods_doc_uri", "render_report",
           "write_report"]

#: The caution shown at the top of every report.
CAUTION_TEXT = (
    "For research use only. specproc is not a medical device, and nothing in this report is a "
    "diagnosis. The numbers depend on the assumptions listed below; interpreting them is for "
    "qualified professionals, within the rules that apply where you work."
)

_STYLE = """
:root { --ink:#1d2a33; --muted:#5b6b75; --line:#d5dde2; --band:#24566b; --soft:#f3f6f8;
        --warn:#8a5a00; --warnbg:#fff4dc; --bad:#a3312a; --good:#2f6b3a; }
* { box-sizing: border-box; }
body { margin:0; font-family: "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif;
       color:var(--ink); background:#ffffff; font-size:14px; line-height:1.45; }
header.band { background:var(--band); color:#fff; padding:18px 28px 14px; }
header.band h1 { margin:0 0 4px; font-size:21px; font-weight:600; }
header.band p { margin:0; font-size:12.5px; opacity:.9; }
main { padding:14px 28px 40px; max-width:1150px; }
section { margin-top:22px; }
h2 { font-size:16px; border-bottom:2px solid var(--band); padding-bottom:3px; margin:0 0 8px; }
.caution { background:var(--warnbg); border-left:5px solid var(--warn); padding:9px 14px;
           color:#4a3200; margin-top:14px; }
.chips span { display:inline-block; padding:3px 10px; border-radius:12px; margin:2px 6px 2px 0;
              font-size:12.5px; background:var(--soft); border:1px solid var(--line); }
.chips span.ok { color:var(--good); border-color:#9cc3a3; }
.chips span.flag { color:var(--bad); border-color:#dba39e; }
table { border-collapse:collapse; width:100%; font-size:12.5px; }
th, td { border-bottom:1px solid var(--line); padding:4px 7px; text-align:left;
         vertical-align:top; }
th { background:var(--soft); font-weight:600; }
td.num { text-align:right; font-variant-numeric: tabular-nums; white-space:nowrap; }
tr.sum td { font-weight:600; background:#f8fbfc; }
td.flag { color:var(--bad); }
td.nowrap { white-space:nowrap; }
figure { margin:10px 0 18px; }
figure img { max-width:100%; border:1px solid var(--line); }
figcaption { color:var(--muted); font-size:12.5px; }
code, pre { font-family: "DejaVu Sans Mono", Consolas, monospace; font-size:12px; }
pre { background:var(--soft); padding:8px 10px; white-space:pre-wrap; word-break:break-word; }
.muted { color:var(--muted); }
footer { margin-top:30px; color:var(--muted); font-size:12px; }
"""


def escape(value: Any) -> str:
    """HTML-escaped text of any value (``&``, ``<``, ``>``, ``"`` and ``'``)."""
    if isinstance(value, float):
        value = format_number(value)
    return html.escape("" if value is None else str(value), quote=True)


def html_table(
    columns: Sequence[tuple[str, str]],
    rows: Sequence[Mapping[str, Any]],
    *,
    numeric: Sequence[str] = (),
    row_class: Any = None,
    cell_class: Mapping[str, Any] | None = None,
) -> str:
    """An HTML table; every header and cell is escaped.

    Parameters
    ----------
    columns : sequence of (key, label)
        Row keys and column headings.
    rows : sequence of mapping
        Cell values by key (floats formatted by :func:`format_number`).
    numeric : sequence of str
        Keys of right-aligned numeric columns.
    row_class : callable, optional
        ``row -> CSS class or ""`` (class names are ours, not data).
    cell_class : mapping, optional
        ``key -> callable(row) -> CSS class or ""``.
    """
    head = "".join(f"<th>{escape(label)}</th>" for _, label in columns)
    body = []
    for row in rows:
        cls = row_class(row) if row_class else ""
        cells = []
        for key, _ in columns:
            classes = []
            if key in numeric:
                classes.append("num")
            if cell_class and key in cell_class:
                extra = cell_class[key](row)
                if extra:
                    classes.append(extra)
            attr = f' class="{escape(" ".join(classes))}"' if classes else ""
            cells.append(f"<td{attr}>{escape(row.get(key))}</td>")
        attr = f' class="{escape(cls)}"' if cls else ""
        body.append(f"<tr{attr}>{''.join(cells)}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def methods_doc_uri() -> str | None:
    """``file://`` URI of ``docs/methods.md`` in the source tree, or None when it is absent."""
    from specproc._paths import source_root

    path = source_root() / "docs" / "methods.md"
    return path.as_uri() if path.is_file() else None


def _pm(value: float, sd: float, digits: int = 3) -> str:
    if not math.isfinite(value):
        return "nan"
    if math.isfinite(sd):
        return f"{value:.{digits}g} ± {sd:.2g}"
    return f"{value:.{digits}g}"


def _results_section(rows: Sequence[Mapping[str, Any]], water_referenced: bool) -> str:
    table_rows = []
    for r in rows:
        mm = r["kind"] == "macromolecule"  # no meaningful molar unit for MM components
        table_rows.append({
            "metabolite": r["metabolite"],
            "kind": r["kind"],
            "amplitude": r["amplitude"],
            "crlb": r["crlb_percent"],
            "ratio": _pm(r["ratio_tcr"], r["ratio_tcr_sd"]),
            "molar": "n/a" if mm else _pm(r["conc_molar_mm"], r["conc_molar_sd_mm"]),
            "molal": "n/a" if mm else _pm(r["conc_molal_mmol_kg"],
                                          r["conc_molal_sd_mmol_kg"]),
            "flag": r["fit_flag"],
        })
    columns = [("metabolite", "member"), ("kind", "kind"), ("amplitude", "amplitude (a.u.)"),
               ("crlb", "CRLB (%)"), ("ratio", "/ tCr ± SD")]
    if water_referenced:
        columns += [("molar", "mM (tissue) ± SD"), ("molal", "mmol/kg water ± SD")]
    columns.append(("flag", "fit note"))
    return html_table(
        columns, table_rows, numeric=("amplitude", "crlb", "ratio", "molar", "molal"),
        row_class=lambda row: "sum" if row["kind"] == "sum" else "",
        cell_class={"flag": lambda row: "flag" if row["flag"] else ""},
    )


def _header_rows(scan: Any, water: Any) -> list[dict[str, str]]:
    rows = []
    for label, obj in (("data", scan), ("water reference", water)):
        if obj is None:
            continue
        rows.append({"file": label, "key": "source", "value": obj.source or ""})
        rows.append({"file": label, "key": "format", "value": obj.format or ""})
        for key, value in dict(obj.header).items():
            if key == "ProcessingApplied":
                continue
            if isinstance(value, list | tuple) and len(value) > 8:
                value = f"[{len(value)} values]"
            rows.append({"file": label, "key": str(key), "value": str(value)})
    return rows


def render_report(
    *,
    title: str,
    scan: Any,
    water: Any,
    pre: Any,
    fit: Any,
    quant: Any,
    qc: Any,
    rows: Sequence[Mapping[str, Any]],
    figures: Sequence[tuple[str, bytes]],
    versions: Mapping[str, str],
    basis_info: Mapping[str, Any],
    water_info: Mapping[str, Any] | None = None,
    tissue: Mapping[str, float] | None = None,
    notes: Sequence[str] = (),
    links: Mapping[str, str] | None = None,
    cfg_source: str = "",
    generated: str | None = None,
) -> str:
    """The report page as a string (see the module docstring for its rules).

    Parameters
    ----------
    title : str
        Scan label (escaped).
    scan, water : Scan
        The raw inputs as loaded (header strings shown escaped); ``water`` may be None.
    pre : PreprocessResult
        Preprocessing outcome (provenance of every step).
    fit, quant, qc
        :class:`~specproc.fit.FitResult`, :class:`~specproc.quantify.Quantification`,
        :class:`~specproc.qc.QCReport`.
    rows : sequence of dict
        :func:`specproc.report.tables.results_rows`.
    figures : sequence of (caption, PNG bytes)
        Embedded as data URIs.
    versions : mapping
        Software versions.
    basis_info : mapping
        Description of the basis used.
    water_info : mapping, optional
        How the water signal was measured.
    tissue : mapping, optional
        Tissue fractions used.
    notes : sequence of str
        Notes of the run.
    links : mapping, optional
        Link text -> relative file name (files beside the report).
    cfg_source : str
        Where the settings came from.
    generated : str, optional
        Time stamp (default: now, UTC).
    """
    stamp = generated or _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
    parts: list[str] = []
    parts.append(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<title>specproc report: {escape(title)}</title><style>{_STYLE}</style></head><body>"
    )
    parts.append(
        f"<header class=\"band\"><h1>Spectroscopy report: {escape(title)}</h1>"
        f"<p>specproc {escape(versions.get('specproc', ''))} · generated {escape(stamp)} · "
        f"source <code>{escape(scan.source or '')}</code></p></header><main>"
    )
    parts.append(f"<div class=\"caution\" role=\"note\"><strong>Caution.</strong> "
                 f"{escape(CAUTION_TEXT)}</div>")

    # ---- overview
    chips = []
    if qc.passed:
        chips.append("<span class=\"ok\">QC: no flag raised</span>")
    else:
        chips.append(f"<span class=\"flag\">QC: {len(qc.flags)} flag(s)</span>")
    chips.append(f"<span class=\"{'ok' if fit.success else 'flag'}\">fit: "
                 f"{'converged' if fit.success else 'not converged'}</span>")
    chips.append(f"<span>SNR {escape(format_number(qc.snr, 3))}</span>")
    chips.append(f"<span>NAA FWHM {escape(format_number(qc.naa_fwhm_hz, 3))} Hz</span>")
    parts.append("<section><h2>Overview</h2>"
                 f"<div class=\"chips\">{''.join(chips)}</div>"
                 f"<p>{escape(quant.statement)}.</p>")
    if not quant.water_referenced:
        parts.append("<p class=\"muted\">No water-referenced concentrations: "
                     + ("no tissue fractions were given for this scan."
                        if water is not None else "there is no water reference for this scan.")
                     + " Ratios to total creatine are not corrected for relaxation.</p>")
    parts.append("</section>")

    # ---- results
    parts.append("<section id=\"results\"><h2>Results</h2>")
    parts.append(_results_section(rows, quant.water_referenced))
    parts.append("<p class=\"muted\">Amplitudes are per molecule (the basis carries the proton "
                 "counts). CRLB: Cramér-Rao lower bound of the amplitude, in % of it. Sums "
                 "(bold) take the covariance of their members into account.</p></section>")

    # ---- QC
    parts.append("<section id=\"qc\"><h2>Quality control</h2>")
    parts.append(html_table(
        [("metric", "metric"), ("value", "value"), ("unit", "unit"),
         ("threshold", "flag rule"), ("flag", "flag"), ("definition", "definition")],
        qc_rows(qc), numeric=("value",),
        cell_class={"flag": lambda row: "flag" if row["flag"] else ""},
    ))
    if qc.notes:
        parts.append("<ul>" + "".join(f"<li>{escape(n)}</li>" for n in qc.notes) + "</ul>")
    parts.append("</section>")

    # ---- figures
    parts.append("<section id=\"figures\"><h2>Figures</h2>")
    for k, (caption, png) in enumerate(figures, start=1):
        parts.append(f"<figure><img alt=\"{escape(caption)}\" src=\"{png_data_uri(png)}\">"
                     f"<figcaption>Figure {k}. {escape(caption)}</figcaption></figure>")
    parts.append("</section>")

    # ---- methods
    parts.append("<section id=\"methods\"><h2>Methods (minimum reporting items)</h2>"
                 "<p class=\"muted\">Grouped after the sections of the minimum reporting "
                 "standards for in vivo MRS (Lin et al., NMR Biomed 2021;34:e4484).</p>")
    parts.append(html_table(
        [("section", "section"), ("item", "item"), ("value", "value")],
        methods_rows(scan=scan, water=water, pre=pre, fit=fit, quant=quant, qc=qc,
                     basis_info=basis_info, versions=versions, water_info=water_info,
                     tissue=tissue),
        cell_class={"section": lambda row: "nowrap"},
    ))
    parts.append("</section>")
    parts.append("<section id=\"processing\"><h2>Processing steps</h2>")
    parts.append(html_table(
        [("step", "#"), ("method", "step"), ("details", "parameters"), ("program", "program")],
        processing_rows(pre.scan.provenance),
    ))
    if pre.water is not None:
        parts.append("<p class=\"muted\">Water reference: "
                     + escape("; ".join(r.get("Method", "") for r in pre.water.provenance))
                     + "</p>")
    parts.append("</section>")

    # ---- quantification
    parts.append("<section id=\"quantification\"><h2>Quantification</h2>")
    formula_lines = [f"{k}: {v}" for k, v in quant.formula.items()]
    parts.append(f"<pre>{escape(chr(10).join(formula_lines))}</pre>")
    if quant.notes:
        parts.append("<ul>" + "".join(f"<li>{escape(n)}</li>" for n in quant.notes) + "</ul>")
    parts.append("<p class=\"muted\">Every constant used is in <code>fit.json</code> "
                 "(key <code>quantification.constants</code>).</p></section>")

    # ---- header strings of the files
    parts.append("<section id=\"header\"><h2>File header</h2>")
    parts.append(html_table([("file", "file"), ("key", "key"), ("value", "value")],
                            _header_rows(scan, water)))
    parts.append("</section>")

    # ---- versions and settings
    parts.append("<section id=\"software\"><h2>Software and settings</h2>")
    parts.append(html_table([("name", "software"), ("version", "version")],
                            [{"name": k, "version": v} for k, v in versions.items()]))
    link_items = []
    for text, target in (links or {}).items():
        link_items.append(f"<li><a href=\"{escape(target)}\">{escape(text)}</a></li>")
    doc = methods_doc_uri()
    if doc:
        link_items.append(f"<li><a href=\"{escape(doc)}\">methods document "
                          "(docs/methods.md)</a>: every step with its equation and "
                          "reference</li>")
    else:
        link_items.append("<li>methods document: docs/methods.md in the specproc source</li>")
    parts.append(f"<p>Settings: {escape(cfg_source)}. The exact settings used are in "
                 "<code>config.toml</code> (reusable with <code>--config</code>) and, with every "
                 "fitted value, in <code>fit.json</code>:</p><ul>" + "".join(link_items)
                 + "</ul>")
    if notes:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{escape(n)}</li>" for n in notes)
                     + "</ul>")
    parts.append("</section>")
    parts.append(f"<footer>{escape(CAUTION_TEXT)}</footer></main></body></html>\n")
    return "".join(parts)


def write_report(path: str | os.PathLike[str], **kwargs: Any) -> Path:
    """Render with :func:`render_report` and write the page atomically; returns the path."""
    target = Path(path)
    write_text(target, render_report(**kwargs))
    return target
