"""Tables of a scan report: tidy results rows, the methods (reporting checklist) table, TOML.

Rendering only: everything here reads results computed elsewhere (fit, quantification, QC) and
returns plain rows (lists of dicts of str/float) or text.

The methods table follows the sections of the minimum reporting standards for in vivo MRS
(Lin et al., NMR Biomed 2021;34:e4484): hardware, acquisition, analysis and data quality; the
wording of the rows is our own.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from specproc.data import user_value

__all__ = [
    "CONCENTRATION_KINDS",
    "RESULT_COLUMNS",
    "config_to_toml",
    "crlb_reliable",
    "format_number",
    "methods_rows",
    "processing_rows",
    "qc_rows",
    "results_rows",
    "sig",
]

#: Columns of ``results.tsv`` (one row per scan × fitted member or combined sum).
RESULT_COLUMNS: tuple[str, ...] = (
    "scan",
    "metabolite",
    "kind",
    "amplitude",
    "crlb_sd",
    "crlb_percent",
    "amplitude_model_sd",
    "ratio_tcr",
    "ratio_tcr_sd",
    "ratio_tcr_model_sd",
    "ratio_tcr_total_sd",
    "conc_molar_mm",
    "conc_molar_sd_mm",
    "conc_molar_model_sd_mm",
    "conc_molar_total_sd_mm",
    "conc_molal_mmol_kg",
    "conc_molal_sd_mmol_kg",
    "conc_molal_model_sd_mmol_kg",
    "conc_molal_total_sd_mmol_kg",
    "fit_flag",
    "crlb_reliable",
    "snr",
    "naa_fwhm_hz",
    "qc_passed",
    "qc_flags",
)


def sig(value: Any, digits: int = 3) -> str:
    """A number with ``digits`` significant figures, as shown to people.

    Fixed notation from 0.001 to below 10⁶ (``0.0123``, ``8.05``, ``12300``), else an exponent
    (``1.2e-05``); ``—`` for a missing or non-finite value.
    """
    if value is None or isinstance(value, bool):
        return "—"
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(v):
        return "—"
    if v == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(v)))
    if abs(round(v, digits - 1 - magnitude)) >= 10.0 ** (magnitude + 1):
        magnitude += 1  # 9.996 rounds up to 10.0, which has one decimal fewer
    if -3 <= magnitude < 6:
        decimals = digits - 1 - magnitude
        rounded = round(v, decimals)
        return f"{rounded:.{max(0, decimals)}f}"
    return f"{v:.{digits - 1}e}"


def format_number(value: Any, digits: int = 3) -> str:
    """A table cell: :func:`sig` for floats, ``yes``/``no`` for booleans, text as it is."""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float | np.floating):
        return sig(value, digits)
    if value is None:
        return ""
    return str(value)


#: Row kinds that carry a molar concentration. Macromolecule and lipid components have no
#: defined molecule (so no proton count per molecule and no relaxation times): their rows carry
#: amplitudes, bounds and ratios only, in results.tsv, the report and the cohort summaries.
CONCENTRATION_KINDS: frozenset[str] = frozenset({"metabolite", "sum"})


def crlb_reliable(crlb_percent: Any, limit: float | None) -> bool:
    """Whether a row's Cramér-Rao bound is defined and within ``limit`` (%; None: no limit)."""
    try:
        value = float(crlb_percent)
    except (TypeError, ValueError):
        return False
    if not math.isfinite(value):
        return False
    return limit is None or value <= float(limit)


def results_rows(fit: Any, quant: Any, qc: Any, *, scan_label: str) -> list[dict[str, Any]]:
    """Tidy results: the fit table with ratio SDs, concentrations and scan-level QC columns.

    Parameters
    ----------
    fit : FitResult
        From :func:`specproc.fit.fit_spectrum`.
    quant : Quantification
        From :func:`specproc.quantify.quantify` (names: fitted members then sums).
    qc : QCReport
        From :func:`specproc.qc.qc_from_scan`.
    scan_label : str
        Value of the ``scan`` column.

    Returns
    -------
    list of dict
        Keys :data:`RESULT_COLUMNS`; concentrations NaN without water referencing and for
        rows whose kind is not in :data:`CONCENTRATION_KINDS`. The ``*_sd`` columns are the
        Cramér-Rao (statistical) SDs, ``*_model_sd`` the model uncertainty from the refits
        under alternative model choices (:mod:`specproc.fit.sensitivity`) and ``*_total_sd``
        ``sqrt(sd² + model_sd²)``; model and total NaN when the model uncertainty was not
        estimated. ``crlb_reliable`` applies the
        CRLB limit of the QC thresholds (``[qc] crlb_percent_max``). ``fit_flag`` and
        ``qc_flags`` hold machine keys (``;``-separated); their sentences are in the report.
    """
    from specproc.fit import results_table
    from specproc.quantify.sums import total_sd

    nan = float("nan")
    flags = ";".join(f.name for f in qc.flags)
    limit = getattr(getattr(qc, "thresholds", None), "crlb_percent_max", None)
    out = []
    for row in results_table(fit):
        name = row["metabolite"]

        def get(table: Mapping[str, float] | None, key: str = name) -> float:
            return nan if table is None else float(table.get(key, nan))

        molar = row["kind"] in CONCENTRATION_KINDS
        ratio_model = get(quant.ratio_model_sd)
        molar_model = get(quant.conc_molar_model_sd_mm) if molar else nan
        molal_model = get(quant.conc_molal_model_sd_mmol_kg) if molar else nan

        out.append({
            "scan": scan_label,
            "metabolite": name,
            "kind": row["kind"],
            "amplitude": float(row["amplitude"]),
            "crlb_sd": float(row["crlb_sd"]),
            "crlb_percent": float(row["crlb_percent"]),
            "amplitude_model_sd": get(quant.amplitude_model_sd),
            "ratio_tcr": get(quant.ratios),
            "ratio_tcr_sd": get(quant.ratio_sd),
            "ratio_tcr_model_sd": ratio_model,
            "ratio_tcr_total_sd": total_sd(get(quant.ratio_sd), ratio_model),
            "conc_molar_mm": get(quant.conc_molar_mm) if molar else nan,
            "conc_molar_sd_mm": get(quant.conc_molar_sd_mm) if molar else nan,
            "conc_molar_model_sd_mm": molar_model,
            "conc_molar_total_sd_mm": total_sd(
                get(quant.conc_molar_sd_mm) if molar else nan, molar_model),
            "conc_molal_mmol_kg": get(quant.conc_molal_mmol_kg) if molar else nan,
            "conc_molal_sd_mmol_kg": get(quant.conc_molal_sd_mmol_kg) if molar else nan,
            "conc_molal_model_sd_mmol_kg": molal_model,
            "conc_molal_total_sd_mmol_kg": total_sd(
                get(quant.conc_molal_sd_mmol_kg) if molar else nan, molal_model),
            "fit_flag": row["flag"],
            "crlb_reliable": crlb_reliable(row["crlb_percent"], limit),
            "snr": float(qc.snr),
            "naa_fwhm_hz": float(qc.naa_fwhm_hz),
            "qc_passed": bool(qc.passed),
            "qc_flags": flags,
        })
    return out


def _noise_definition(qc: Any) -> str:
    """How the noise SD was measured: the regions actually used (from the QC settings)."""
    regions = qc.settings.get("noise_region_ppm") if isinstance(qc.settings, Mapping) else None
    if not regions:
        return "SD (ddof=1) of the real spectrum in a signal-free region"
    items = regions if isinstance(regions[0], list | tuple) else [regions]
    where = ", ".join(f"{sig(lo)} to {sig(hi)} ppm" for lo, hi in items)
    return f"SD (ddof=1) of the real spectrum in the signal-free region(s) {where}"


def qc_rows(qc: Any) -> list[dict[str, str]]:
    """QC measures with their limits, a status sentence and the definition of each."""
    from specproc.qc import QC_DEFINITIONS, QCThresholds
    from specproc.report.messages import qc_flag_sentence

    flagged = {f.name: f for f in qc.flags}
    th = qc.thresholds
    default = QCThresholds()

    def row(label: str, value: Any, unit: str, metric: str, definition: str,
            limit: str = "") -> dict[str, str]:
        flag = flagged.get(metric)
        status = ""
        if flag is not None:
            status = qc_flag_sentence(flag.name, flag.value, flag.threshold)
        elif limit and limit != "off":
            status = "within the limit"
        return {
            "metric": label,
            "value": format_number(value),
            "unit": unit,
            "rule": limit,
            "status": status,
            "definition": definition,
            "_class": "unreliable" if flag is not None else "",
        }

    def limit(rule: str, name: str) -> str:
        value = getattr(th, name)
        if value is None:
            return "off"
        origin = "common practice" if value == getattr(default, name) else "your setting"
        return f"{rule} {value:g} ({origin})"

    rows = [
        row("SNR (NAA)", qc.snr, "", "snr", QC_DEFINITIONS["snr"], limit("at least", "snr_min")),
        row("noise SD", qc.noise_sd, "a.u.", "noise_sd", _noise_definition(qc)),
        row("NAA FWHM", qc.naa_fwhm_hz, "Hz", "naa_fwhm_hz", QC_DEFINITIONS["fwhm"]),
        row("NAA FWHM", qc.naa_fwhm_ppm, "ppm", "naa_fwhm_ppm", QC_DEFINITIONS["fwhm"],
            limit("at most", "naa_fwhm_ppm_max")),
        row("water FWHM", qc.water_fwhm_hz, "Hz", "water_fwhm_hz", QC_DEFINITIONS["fwhm"]),
        row("water FWHM", qc.water_fwhm_ppm, "ppm", "water_fwhm_ppm", QC_DEFINITIONS["fwhm"],
            limit("at most", "water_fwhm_ppm_max")),
        row("fit residual / noise", qc.residual_ratio, "", "residual_ratio",
            QC_DEFINITIONS["residual_ratio"], limit("at most", "residual_ratio_max")),
        row("transients", qc.n_transients, "", "n_transients", "number acquired"),
        row("rejected transients", qc.n_rejected, "", "rejected_fraction",
            QC_DEFINITIONS["n_rejected"], limit("fraction at most", "rejected_fraction_max")),
        row("frequency drift range", qc.drift_range_hz, "Hz", "drift_range_hz",
            QC_DEFINITIONS["drift_range_hz"], limit("at most", "drift_range_hz_max")),
    ]
    for name, value in qc.crlb_percent.items():
        rows.append(row(f"CRLB {name}", value, "%", f"crlb:{name}",
                        "Cramér-Rao SD / amplitude", limit("at most", "crlb_percent_max")))
    return rows


def _timing_text(key: str, value: Any) -> str:
    """``"TE1 15 ms"`` for a timing key ``te1_s``; delay lists as ``"delays 3.75, 7.5 ms"``."""
    label = key.removesuffix("_s")
    label = label.upper() if label.lower() in ("te", "te1", "te2", "tm", "tr") else label
    if isinstance(value, list | tuple):
        return f"{label} " + ", ".join(f"{float(v) * 1e3:g}" for v in value) + " ms"
    return f"{label} {float(value) * 1e3:g} ms"


def _ms(value: float | None) -> str:
    return "not given" if value is None else f"{value * 1e3:g} ms"


def methods_rows(
    *,
    scan: Any,
    water: Any,
    pre: Any,
    fit: Any,
    quant: Any,
    qc: Any,
    basis_info: Mapping[str, Any],
    versions: Mapping[str, str],
    water_info: Mapping[str, Any] | None,
    tissue: Mapping[str, float] | None,
) -> list[dict[str, str]]:
    """The methods table: one row per checklist item, grouped by section.

    Sections after Lin et al. 2021 (MRSinMRS): 1 hardware, 2 acquisition, 3 analysis,
    4 data quality. Returned strings are plain text (the HTML renderer escapes them).
    """
    header = dict(scan.header)
    rows: list[dict[str, str]] = []

    def add(section: str, item: str, value: Any) -> None:
        rows.append({"section": section, "item": item, "value": format_number(value)})

    hw = "1 Hardware"
    add(hw, "field strength", f"{scan.field_t:.3g} T ({scan.spectrometer_mhz:.4f} MHz, "
        f"{scan.nucleus})")
    add(hw, "receive coil elements",
        scan.extra_shape.get("DIM_COIL", "1 (or combined before export)"))
    if "ManufacturersModelName" in header or "Manufacturer" in header:
        add(hw, "scanner", f"{header.get('Manufacturer', '')} "
            f"{header.get('ManufacturersModelName', '')}".strip())
    acq = "2 Acquisition"
    add(acq, "sequence", scan.sequence or "not given")
    add(acq, "protocol (from the file header)", scan.protocol or "not given")
    add(acq, "TE / TR", f"{_ms(scan.te_s)} / {_ms(scan.tr_s)}")
    if scan.tm_s is not None:
        add(acq, "TM", _ms(scan.tm_s))
    if scan.voxel_mm is not None:
        add(acq, "voxel size", " x ".join(format_number(v) for v in scan.voxel_mm) + " mm")
        add(acq, "voxel centre (scanner coordinates)",
            ", ".join(format_number(v) for v in scan.voxel_position_mm) + " mm")
    region = user_value(header, "specproc_voxel_region")
    if region is not None:
        add(acq, "voxel location", str(region))
    n_tr = qc.n_transients
    add(acq, "transients", "not known" if n_tr is None else n_tr)
    add(acq, "spectral width / points", f"{scan.spectral_width_hz:g} Hz / {scan.n_points}")
    add(acq, "water suppression", {True: "yes", False: "no", None: "not given"}[
        scan.water_suppressed])
    add(acq, "shimming", header.get("Shimming", "not recorded in the file"))
    add(acq, "triggering / motion correction",
        header.get("MotionCorrection", "not recorded in the file (transients screened for "
                   "outliers in the analysis)"))
    add(acq, "water reference", "none" if water is None else (
        f"unsuppressed, TE {_ms(water.te_s)}, TR {_ms(water.tr_s)}, "
        f"{water.extra_shape.get('DIM_DYN', 1)} transient(s)"))
    ana = "3 Analysis"
    add(ana, "software", f"specproc {versions.get('specproc', '')} (numpy "
        f"{versions.get('numpy', '')}, scipy {versions.get('scipy', '')})")
    steps = [r.get("Method", "") for r in pre.scan.provenance]
    add(ana, "processing steps", "; ".join(s for s in steps if s))
    add(ana, "basis", f"{basis_info.get('origin', '')}; {basis_info.get('sequence', '')} "
        f"{', '.join(_timing_text(k, v) for k, v in basis_info.get('timings_s', {}).items())}"
        f"; {len(basis_info.get('names', []))} members")
    if basis_info.get("timing"):
        add(ana, "basis sub-timing (source)", basis_info["timing"])
    if basis_info.get("mm_text"):
        add(ana, "macromolecule model", basis_info["mm_text"])
    add(ana, "fitting model", (
        f"linear combination over {fit.fit_range_ppm[0]:g}-{fit.fit_range_ppm[1]:g} ppm, "
        "shared Lorentzian damping per group, shared Gaussian broadening, zero/first-order "
        "phase, penalised cubic B-spline baseline (knots every "
        f"{fit.settings.get('baseline_knot_ppm', '')} ppm); variable projection; "
        "Cramér-Rao lower bounds"))
    add(ana, "output measure", quant.statement)
    if quant.water_referenced:
        consts = quant.constants
        add(ana, "tissue fractions (GM/WM/CSF)", "/".join(
            format_number(float(tissue[t]), 3) for t in ("gm", "wm", "csf")) if tissue else "")
        add(ana, "tissue water content (GM/WM/CSF)", "/".join(
            format_number(float(consts["water_content"][t]), 3) for t in ("gm", "wm", "csf")))
        add(ana, "quantification reference", quant.formula.get("references", ""))
        add(ana, "relaxation times", f"{consts.get('relaxation_file', '')} at "
            f"{format_number(consts.get('field_t'))} T")
        if water_info:
            add(ana, "water signal", water_info.get("method", ""))
    dq = "4 Data quality"
    add(dq, "SNR", f"{format_number(qc.snr)} (NAA height / noise SD)")
    add(dq, "linewidth", f"NAA {format_number(qc.naa_fwhm_hz)} Hz; water "
        f"{format_number(qc.water_fwhm_hz)} Hz (FWHM, absorption)")
    add(dq, "fit quality", f"residual SD / noise SD {format_number(qc.residual_ratio)}; "
        f"reduced chi-square {format_number(fit.reduced_chi_square)}")
    add(dq, "exclusion criteria (flags)", "; ".join(f.message for f in qc.flags) or "none raised")
    add(dq, "transients rejected", "not known" if qc.n_rejected is None else qc.n_rejected)
    add(dq, "sample spectrum", "the fit figure of this report (data, fit, residual)")
    return rows


_UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_ppm", "ppm"), ("_hz", "Hz"), ("_deg", "°"), ("_s", "s"), ("_ms", "ms"),
    ("_percent", "%"), ("_c", "°C"),
)


def _detail_text(key: str, value: Any) -> str | None:
    """``"window 1.8 to 4.2 ppm"``-style text of one provenance detail (None: left out)."""
    label, unit = key, ""
    for suffix, text in _UNIT_SUFFIXES:
        if key.endswith(suffix):
            label, unit = key[: -len(suffix)], text
            break
    label = label.replace("_", " ")
    if isinstance(value, Mapping):
        return None  # nested records are in fit.json
    if isinstance(value, list | tuple):
        if not value:
            return f"{label}: none"
        if len(value) == 2 and all(isinstance(v, int | float) and not isinstance(v, bool)
                                   for v in value):
            return f"{label} {sig(value[0])} to {sig(value[1])} {unit}".rstrip()
        if len(value) > 6:
            return f"{label}: {len(value)} values (in fit.json)"
        return f"{label} " + ", ".join(format_number(v) for v in value) + (f" {unit}" if unit
                                                                             else "")
    if isinstance(value, bool):
        return f"{label}: {'yes' if value else 'no'}"
    if isinstance(value, int | np.integer) or (isinstance(value, float | np.floating)
                                               and float(value).is_integer()
                                               and abs(float(value)) < 1e6 and not unit):
        return f"{label} {int(value)} {unit}".rstrip()  # counts stay whole numbers
    if isinstance(value, int | float | np.floating | np.integer):
        return f"{label} {sig(value)} {unit}".rstrip()
    text = str(value)
    return f"{label}: {text}" if text else None


def processing_rows(provenance: Sequence[Mapping[str, Any]]) -> list[dict[str, str]]:
    """One row per processing record: the step and its settings and outcome in words."""
    rows = []
    for k, record in enumerate(provenance, start=1):
        details = record.get("Details", {}) or {}
        if not isinstance(details, Mapping):  # the standard's form: free text
            details = {"details": " ".join(str(details).split())[:200]}
        parts = [t for t in (_detail_text(str(key), value) for key, value in details.items())
                 if t]
        rows.append({
            "step": str(k),
            "method": str(record.get("Method", "")),
            "details": "; ".join(parts),
            "program": f"{record.get('Program', '')} {record.get('Version', '')}".strip(),
        })
    return rows


# ============================================================================ TOML
def config_to_toml(config: Mapping[str, Any], *, header: str | None = None) -> str:
    """A nested configuration dict as TOML text (:func:`tomli_w.dumps`), readable back with
    :mod:`tomllib`; ``header`` becomes comment lines at the top.

    Raises
    ------
    TypeError
        For a value TOML cannot hold (e.g. ``None``).
    """
    import tomli_w

    comments = "".join(f"# {line}\n" for line in (header or "").splitlines())
    return (comments + "\n" if comments else "") + tomli_w.dumps(_toml_ready(config))


def _toml_ready(value: Any) -> Any:
    """numpy scalars as Python numbers, tuples as lists (what tomli_w accepts)."""
    if isinstance(value, Mapping):
        return {str(k): _toml_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_toml_ready(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value
