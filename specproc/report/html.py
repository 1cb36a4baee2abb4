"""HTML pages: the scan report, through Jinja2 templates with autoescaping.

Every page is one self-contained file: the style sheet is inline, figures are embedded as
base64 PNG ``data:`` URIs, and there is no script. Links point only to the files written beside
the page and to the methods document of the source tree.

Safety: the templates (``specproc/report/templates``) are rendered by a Jinja2 environment
with autoescaping on for every template, so every string that comes from a data file (protocol
names, header values, file names, free text) is escaped where it is put into the page; the
Python side hands over plain text and numbers already formatted, never markup.
"""

from __future__ import annotations

import datetime as _dt
import functools
import html
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from specproc._atomic import write_text
from specproc.report.figures import png_data_uri
from specproc.report.messages import (
    crlb_text,
    fit_flag_sentence,
    fit_status_sentence,
    member_label,
    qc_flag_sentence,
)
from specproc.report.palette import member_colour
from specproc.report.tables import (
    CONCENTRATION_KINDS,
    format_number,
    methods_rows,
    processing_rows,
    qc_rows,
    sig,
)
from specproc.report.voxel import with_tissue_methods

__all__ = ["CAUTION_TEXT", "environment", "escape", "methods_doc_uri", "render_page",
           "render_report", "write_report"]

#: The caution shown at the top and the foot of every page.
CAUTION_TEXT = (
    "For research use only. specproc is not a medical device, and nothing in this report is a "
    "diagnosis. The numbers depend on the assumptions listed below; interpreting them is for "
    "qualified professionals, within the rules that apply where you work."
)


@functools.cache
def environment() -> Any:
    """The Jinja2 environment of the report templates (autoescaping on for every template)."""
    import jinja2

    return jinja2.Environment(
        loader=jinja2.PackageLoader("specproc.report", "templates"),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )


def render_page(template: str, **context: Any) -> str:
    """Render a template of ``specproc/report/templates`` with ``context`` (escaped)."""
    context.setdefault("caution", CAUTION_TEXT)
    return environment().get_template(template).render(**context)


def escape(value: Any) -> str:
    """HTML-escaped text of any value (floats with three significant figures)."""
    if isinstance(value, float):
        value = format_number(value)
    return html.escape("" if value is None else str(value), quote=True)


def methods_doc_uri() -> str | None:
    """``file://`` URI of ``docs/methods.md`` in the source tree, or None when it is absent."""
    from specproc._paths import source_root

    path = source_root() / "docs" / "methods.md"
    return path.as_uri() if path.is_file() else None


def _sd_text(sd: Any) -> str:
    """An SD with two significant figures, ``—`` when missing."""
    try:
        value = float(sd)
    except (TypeError, ValueError):
        return "—"
    return sig(value, 2) if math.isfinite(value) else "—"


def _pm(value: float, sd: float) -> str:
    """``"8.05 ± 0.41"``: the value with three significant figures, its SD with two."""
    if not math.isfinite(value):
        return "—"
    if math.isfinite(sd) and sd > 1e-9 * abs(value):
        return f"{sig(value)} ± {sig(sd, 2)}"
    return sig(value)


_SUM_ORDER = ("tNAA", "tCr", "tCho", "Glx")


def result_display_rows(rows: Sequence[Mapping[str, Any]], crlb_limit: float | None
                        ) -> list[dict[str, Any]]:
    """The results rows as shown: sums first, then metabolites, then macromolecules.

    Every value is text (three significant figures, SD two, ``—`` where undefined); a row whose
    CRLB is undefined or above ``crlb_limit`` is marked unreliable.
    """
    def order(row: Mapping[str, Any]) -> tuple[int, int]:
        kind = row["kind"]
        if kind == "sum":
            name = str(row["metabolite"])
            return 0, _SUM_ORDER.index(name) if name in _SUM_ORDER else len(_SUM_ORDER)
        return (1 if kind in CONCENTRATION_KINDS else 2), 0

    out = []
    for r in sorted(rows, key=order):
        name = str(r["metabolite"])
        kind = str(r["kind"])
        pct = float(r["crlb_percent"])
        zero = "zero_bound" in str(r.get("fit_flag") or "")
        if zero:
            reliability, mark = "not detected", "mark-bad"
        elif not math.isfinite(pct):
            reliability, mark = "bound undefined", "mark-bad"
        elif crlb_limit is not None and pct > crlb_limit:
            reliability, mark = f"CRLB above {crlb_limit:g} %", "mark-bad"
        else:
            reliability, mark = "reliable", "mark-ok"
        classes = []
        if kind == "sum":
            classes.append("sum")
        if kind not in CONCENTRATION_KINDS:
            classes.append("context")
            reliability = f"{reliability}; no molar unit" if mark == "mark-ok" else reliability
        if mark == "mark-bad":
            classes.append("unreliable")
        label = member_label(name)
        is_reference = name == "tCr"
        out.append({
            "metabolite": name,
            "_long": label.removesuffix(f" ({name})").removesuffix(f" {name}").strip()
            if label != name else "",
            "_colour": member_colour(name),
            "_class": " ".join(classes),
            "_mark_class": mark,
            "kind": kind,
            "conc": _pm(float(r["conc_molar_mm"]), float(r["conc_molar_sd_mm"])),
            "molal": _pm(float(r["conc_molal_mmol_kg"]), float(r["conc_molal_sd_mmol_kg"])),
            "ratio": "1 (reference)" if is_reference else _pm(float(r["ratio_tcr"]),
                                                               float(r["ratio_tcr_sd"])),
            "ratio_total": "" if is_reference else _sd_text(r.get("ratio_tcr_total_sd")),
            "conc_total": _sd_text(r.get("conc_molar_total_sd_mm")),
            "amplitude": sig(r["amplitude"]),
            "crlb": crlb_text(pct),
            "reliability": reliability,
        })
    return out


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
            if isinstance(value, Mapping) and "Value" in value:  # a NIfTI-MRS user key
                described = value.get("Description")
                value = f"{value['Value']}" + (f" ({described})" if described else "")
            elif isinstance(value, list | tuple) and len(value) > 8:
                value = f"[{len(value)} values]"
            elif isinstance(value, list | tuple):
                value = ", ".join(format_number(v) if isinstance(v, float) else str(v)
                                  for v in value)
            rows.append({"file": label, "key": str(key), "value": str(value)})
    return rows


def _noise_statement(fit: Any, qc: Any) -> str:
    regions = qc.settings.get("noise_region_ppm") or qc.settings.get("noise_regions_ppm")
    fit_regions = list(getattr(fit, "noise_ppm", []) or [])

    def ranges(value: Any) -> str:
        if not value:
            return "not recorded"
        items = value if isinstance(value[0], list | tuple) else [value]
        return ", ".join(f"{sig(lo)} to {sig(hi)} ppm" for lo, hi in items)

    if math.isclose(float(qc.noise_sd), float(fit.noise_sd), rel_tol=1e-12):
        return (f"Noise: one noise SD, {sig(fit.noise_sd)}, measured in {ranges(fit_regions)}, "
                "gives both the SNR above and the fit's error bounds.")
    fit_where = ranges(fit_regions) if fit_regions else "the regions of the settings"
    if math.isclose(float(qc.noise_sd), float(fit.noise_sd), rel_tol=1e-9):
        return (f"Noise: one noise SD, {sig(fit.noise_sd)}, measured in {fit_where}, is used by "
                "both the SNR and the fit's error bounds.")
    return (f"Noise: the SNR above uses the noise SD {sig(qc.noise_sd)} of the spectrum in "
            f"{ranges(regions)}; the fit's error bounds use the noise SD {sig(fit.noise_sd)} "
            f"measured in {fit_where}. The two differ because the regions differ.")


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
    tissue_info: Mapping[str, Any] | None = None,
    notes: Sequence[str] = (),
    links: Mapping[str, str] | None = None,
    cfg_source: str = "",
    generated: str | None = None,
    physics: Sequence[Mapping[str, Any]] = (),
    edited: Mapping[str, Any] | None = None,
) -> str:
    """The report page of one scan as a string (see the module docstring for its rules).

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
    tissue_info : mapping, optional
        How they were obtained and where the voxel was (rows added to the methods table by
        :func:`specproc.report.voxel.with_tissue_methods`).
    notes : sequence of str
        Notes of the run (sentences; shown with the warnings).
    links : mapping, optional
        Link text -> relative file name (files beside the report).
    cfg_source : str
        Where the settings came from.
    generated : str, optional
        Time stamp (default: now, UTC).
    physics : sequence of mapping, optional
        Provenance of the physical values used: rows with ``quantity``, ``value``, ``source``.
    edited : mapping, optional
        The "Edited spectroscopy" section of a J-difference edited scan
        (:func:`specproc.report.edited.edited_section`); the rest of the page is then the
        analysis of its OFF spectrum.
    """
    stamp = generated or _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
    limit = qc.thresholds.crlb_percent_max
    display = result_display_rows(rows, limit)
    columns: list[tuple[str, str]] = [("metabolite", "metabolite")]
    model = quant.ratio_model_sd is not None
    if quant.water_referenced:
        columns += [("conc", "mM in tissue ± SD")]
        if model:
            columns += [("conc_total", "mM total SD (noise + model)")]
        columns += [("molal", "mmol/kg tissue water ± SD")]
    columns += [("ratio", "ratio to tCr ± SD")]
    if model:
        columns += [("ratio_total", "ratio total SD (noise + model)")]
    columns += [("amplitude", "amplitude (a.u.)"), ("crlb", "CRLB %"),
                ("reliability", "reliability")]
    warnings = [qc_flag_sentence(f.name, f.value, f.threshold) for f in qc.flags]
    warnings += [fit_flag_sentence(f, fit) for f in fit.flags  # collapsed: in the statement
                 if not f.startswith(("at_zero_bound:", "collapsed:"))]
    not_detected = [str(r["metabolite"]) for r in rows
                    if "zero_bound" in str(r.get("fit_flag") or "")]
    # an edited scan's own notes and flags are in its section
    remarks = [n for n in notes if not (edited and str(n).startswith(("edited: ",
                                                                       "edited QC: ")))]
    if not_detected:
        remarks.append("Fitted at zero (not detected): " + ", ".join(not_detected) + ".")
    if not quant.water_referenced:
        remarks.append(
            "No water-referenced concentrations: "
            + ("no tissue fractions were given for this scan."
               if water is not None else "there is no water reference for this scan.")
            + " Ratios to total creatine are not corrected for relaxation.")
    n_unreliable = sum(1 for r in display if "unreliable" in r["_class"])
    cards = [
        {"label": "quality control", "cls": "good" if qc.passed else "bad",
         "value": "passed" if qc.passed else f"{len(qc.flags)} flag(s)"},
        {"label": "fit", "cls": "good" if fit.success else "bad",
         "value": "converged" if fit.success else "not converged"},
        {"label": "SNR (NAA)", "cls": "", "value": sig(qc.snr)},
        {"label": "NAA FWHM", "cls": "", "value": f"{sig(qc.naa_fwhm_hz)} Hz"},
        {"label": "rows above CRLB limit", "cls": "", "value": str(n_unreliable)},
    ]
    if edited:
        cards.append({"label": "GABA+/tCr (edited)", "cls": "bad" if edited["flags"] else "",
                      "value": edited["values"][0]["value"]})
    legend = (
        "Amplitudes are per molecule (the basis carries the proton counts). CRLB: Cramér-Rao "
        "lower bound of the amplitude, in % of it; '—' where it is undefined. Rows whose CRLB "
        + (f"is above {limit:g} % ([qc] crlb_percent_max) " if limit is not None else
           "is undefined ")
        + "are marked unreliable. Sums take the covariance of their members into account. "
        "Macromolecule and lipid components (grey) have amplitudes and ratios but no molar "
        "concentration."
        + (" ± SD is the Cramér-Rao (noise) SD, valid only if the fit model is right. The total "
           "SD (noise + model) adds in quadrature a model SD: the spread of the value when the "
           "scan is refitted under alternative, equally defensible model choices (baseline "
           "stiffness and knots, macromolecule amplitudes tied or free, width-prior spread, fit "
           "range start). It is not a bound on every model error: a bias that all these "
           "choices share does not show in it." if model else ""))
    figure_items = [{"caption": caption, "uri": png_data_uri(png)} for caption, png in figures]
    formula = "\n".join(f"{k}: {v}" for k, v in quant.formula.items())
    water_steps = ""
    if pre.water is not None:
        water_steps = "; ".join(str(r.get("Method", "")) for r in pre.water.provenance)
    return render_page(
        "scan.html.j2",
        page_title=f"specproc report: {title}",
        heading=f"Spectroscopy report: {title}",
        subheading=f"specproc {versions.get('specproc', '')} · generated {stamp} · source "
                   f"{scan.source or ''}",
        cards=cards,
        statement=f"{quant.statement[:1].upper()}{quant.statement[1:]}. "
                  f"{fit_status_sentence(fit)}",
        warnings=warnings,
        remarks=remarks,
        result_columns=columns,
        result_numeric=("conc", "conc_total", "molal", "ratio", "ratio_total", "amplitude",
                        "crlb"),
        result_rows=display,
        results_legend=legend,
        figures=figure_items,
        qc_rows=qc_rows(qc),
        qc_notes=list(qc.notes),
        noise_statement=_noise_statement(fit, qc),
        methods=with_tissue_methods(
            methods_rows(scan=scan, water=water, pre=pre, fit=fit, quant=quant, qc=qc,
                         basis_info=basis_info, versions=versions, water_info=water_info,
                         tissue=tissue), tissue_info),
        processing=processing_rows(pre.scan.provenance),
        water_steps=water_steps,
        formula=formula,
        quant_notes=list(quant.notes),
        physics=[{k: format_number(v) if isinstance(v, float) else v for k, v in row.items()}
                 for row in physics],
        header_rows=_header_rows(scan, water),
        versions=[{"name": k, "version": v} for k, v in versions.items()],
        cfg_source=cfg_source,
        links=list((links or {}).items()),
        methods_doc=methods_doc_uri(),
        edited=edited,
    )


def write_report(path: str | os.PathLike[str], **kwargs: Any) -> Path:
    """Render with :func:`render_report` and write the page atomically; returns the path."""
    target = Path(path)
    write_text(target, render_report(**kwargs))
    return target
