"""Rendering of the edited part of a scan's result: table rows, the report's section and the
ON/OFF/DIFF figures.

The analysis figure (:func:`plot_edited`) has three panels on one ppm axis (decreasing to the
right): the OFF and the ON spectra overlaid (ON labelled aligned when the alignment was
applied); the DIFF spectrum with its fit (GABA+ and Glx); and the DIFF residual. The "Edited
spectroscopy" section of the scan report (:func:`edited_section`) gives GABA+/tCr and the mM
values with their bounds, the edited QC with its limits, the pairs rejected and the notes
(offsets assumed, alignment not applied). The preprocessing figure
(:func:`plot_edited_preprocessing`, ``specproc preprocess``) has the same ON/OFF panel, the
DIFF spectrum, and the frequency of each ON and OFF transient over the pair index with the
pairs left out marked.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from specproc.report import palette

__all__ = ["EDITED_QC_FIELDS", "edited_members", "edited_rows", "edited_section",
           "plot_edited", "plot_edited_preprocessing"]

#: Edited QC measures of the tables (keys of ``EditedResult.qc``), in this order.
EDITED_QC_FIELDS: tuple[str, ...] = (
    "diff_fit_error_percent", "subtraction_artefact_3p2_percent", "pairs_rejected",
)


def edited_members(values: Mapping[str, Any], *, flagged: bool) -> list[dict[str, Any]]:
    """The edited members of a scan's tables (kind ``edited``), from ``EditedResult.values``
    (or the ``values`` of fit.json's ``edited`` block).

    ``GABA+``: amplitude and CRLB (GABA-equivalent units), GABA+/tCr with its bound and the
    water-referenced mM; ``GABA+_alpha``: the alpha-corrected mM (only with tissue fractions).
    The bound of an mM value is the relative bound of GABA+/tCr (the water reference adds
    little). ``flagged`` (an edited QC flag was raised) sets ``fit_flag`` to ``edited_qc``.
    """
    nan = float("nan")

    def num(key: str) -> float:
        try:
            return float(values.get(key, nan))
        except (TypeError, ValueError):
            return nan

    gp, gp_sd = num("GABA+"), num("GABA+_sd")
    ratio, ratio_sd = num("GABA+/tCr"), num("GABA+/tCr_sd")
    rel = ratio_sd / ratio if ratio > 0 else nan
    flag = "edited_qc" if flagged else ""
    crlb = 100 * gp_sd / gp if gp > 0 else nan
    rows = [{"metabolite": "GABA+", "kind": "edited", "amplitude": gp, "crlb_sd": gp_sd,
             "crlb_percent": crlb, "ratio_tcr": ratio, "ratio_tcr_sd": ratio_sd,
             "conc_molar_mm": num("GABA+_mM"), "conc_molar_sd_mm": num("GABA+_mM") * rel,
             "fit_flag": flag}]
    if "GABA+_mM_alpha" in values:
        rows.append({"metabolite": "GABA+_alpha", "kind": "edited", "amplitude": nan,
                     "crlb_sd": nan, "crlb_percent": crlb, "ratio_tcr": nan,
                     "ratio_tcr_sd": nan, "conc_molar_mm": num("GABA+_mM_alpha"),
                     "conc_molar_sd_mm": num("GABA+_mM_alpha") * rel, "fit_flag": flag})
    return rows


def edited_rows(edited: Any, *, scan_label: str, base: dict[str, Any]) -> list[dict[str, Any]]:
    """``results.tsv`` rows of the edited values (:func:`edited_members`), in its columns.

    ``base`` is a row of the scan (for the scan-level QC columns).
    """
    nan = float("nan")
    rows = []
    for member in edited_members(edited.values, flagged=bool(edited.flags)):
        row = {k: base.get(k, "") for k in base}
        row.update({"scan": scan_label, "conc_molal_mmol_kg": nan,
                    "conc_molal_sd_mmol_kg": nan, **member})
        rows.append(row)
    return rows


def _pm(value: float, sd: float, unit: str = "") -> str:
    from specproc.report.tables import sig

    if not np.isfinite(value):
        return "—"
    text = f"{sig(value)} ± {sig(sd, 2)}" if np.isfinite(sd) and sd > 0 else sig(value)
    return f"{text} {unit}".rstrip()


def edited_section(edited: Any) -> dict[str, Any]:
    """What the scan report's "Edited spectroscopy" section shows, as display text.

    Returns
    -------
    dict
        ``values``: rows (``measure``, ``value``, ``note``) of GABA+/tCr, the water-referenced
        and alpha-corrected mM and Glx (DIFF)/tCr; ``qc``: rows (``measure``, ``value``,
        ``rule``, ``status``) of the edited QC; ``pulses``: one sentence on the editing
        pulses; ``flags``: the edited QC flags in words; ``notes``: what was assumed or not done.
    """
    from specproc.edited.analysis import FIT_ERROR_LIMIT_PERCENT, SUBTRACTION_LIMIT_PERCENT
    from specproc.report.tables import sig

    nan = float("nan")
    v, qc = edited.values, edited.qc
    (gaba, *alpha) = edited_members(v, flagged=bool(edited.flags))
    values = [
        {"measure": "GABA+/tCr", "value": _pm(gaba["ratio_tcr"], gaba["ratio_tcr_sd"]),
         "note": "GABA-equivalent DIFF signal at 3.0 ppm (GABA and co-edited macromolecules) "
                 "over tCr of the OFF fit"},
        {"measure": "GABA+ (water-referenced)",
         "value": _pm(gaba["conc_molar_mm"], gaba["conc_molar_sd_mm"], "mM"),
         "note": "GABA+/tCr × water-referenced tCr, with GABA's relaxation; SD: the "
                 "relative bound of GABA+/tCr"
         if np.isfinite(gaba["conc_molar_mm"]) else
         "not computed: needs a water reference and tissue fractions"},
    ]
    if alpha:
        values.append({"measure": "GABA+ (alpha-corrected)",
                       "value": _pm(alpha[0]["conc_molar_mm"], alpha[0]["conc_molar_sd_mm"],
                                    "mM"),
                       "note": "for the voxel's GM/WM composition (Harris et al. 2015)"})
    values.append({"measure": "Glx (DIFF)/tCr", "value": _pm(v.get("Glx_diff/tCr", nan), nan),
                   "note": "edited Glx at 3.75 ppm"})

    def status(value: float, limit: float) -> str:
        if not np.isfinite(value):
            return "not measured"
        return "passed" if value <= limit else "flagged"

    err, art = qc.get("diff_fit_error_percent", nan), qc.get("subtraction_artefact_3p2_percent",
                                                             nan)
    spectra = edited.spectra
    n_pairs = int(np.asarray(spectra.pairs_kept).size)
    rejected = int(qc.get("pairs_rejected", 0))
    shift, phase = qc.get("on_off_shift_hz", nan), qc.get("on_off_phase_deg", nan)
    applied = bool(spectra.on_to_off.get("applied", 0.0))
    rows = [
        {"measure": "DIFF fit error", "value": f"{sig(err, 2)} %",
         "rule": f"≤ {FIT_ERROR_LIMIT_PERCENT:g} %", "status": status(err,
                                                                       FIT_ERROR_LIMIT_PERCENT)},
        {"measure": "subtraction artefact at 3.2 ppm", "value": f"{sig(art, 2)} %",
         "rule": f"≤ {SUBTRACTION_LIMIT_PERCENT:g} %",
         "status": status(art, SUBTRACTION_LIMIT_PERCENT)},
        {"measure": "ON/OFF pairs rejected", "value": f"{rejected} of {n_pairs}", "rule": "",
         "status": ""},
        {"measure": "ON relative to OFF (choline)",
         "value": f"{sig(shift, 2)} Hz, {sig(phase, 2)}°", "rule": "",
         "status": "corrected" if applied else "measured, not corrected"},
    ]
    if "non_edited_residue_percent" in qc:
        rows.append({"measure": "non-edited residue under GABA+ (removed before the fit)",
                     "value": f"{sig(qc['non_edited_residue_percent'], 2)} %", "rule": "",
                     "status": ""})
    on, off = edited.spectra.conditions.on, edited.spectra.conditions.off
    pulses = (f"Editing pulses: ON at {on.shift_ppm:g} ppm, OFF at {off.shift_ppm:g} ppm, "
              f"{on.duration_s * 1e3:g} ms, simulated with J evolution inside the PRESS "
              "localisation of the scan's timings.")
    notes = [f"{n[:1].upper()}{n[1:]}." for n in edited.notes]
    if not applied:
        notes.append("The ON spectrum was not aligned to OFF (the offset above was measured "
                     "but not applied; [edited] align_subspectra = true applies it).")
    return {"values": values, "qc": rows, "pulses": pulses,
            "flags": [f"{f[:1].upper()}{f[1:]}." for f in edited.flags], "notes": notes}


def plot_edited(edited: Any, *, title: str = "") -> Any:
    """Figure of the OFF, ON and DIFF spectra with the DIFF fit (matplotlib, Agg)."""
    from matplotlib.figure import Figure

    spectra = edited.spectra
    fig = Figure(figsize=(8.0, 6.4))
    axes = [fig.add_axes((0.08, 0.56, 0.88, 0.36)), fig.add_axes((0.08, 0.22, 0.88, 0.30)),
            fig.add_axes((0.08, 0.08, 0.88, 0.12))]
    _plot_on_off(axes[0], spectra, title)
    fit = edited.diff_fit
    fppm = np.asarray(fit.ppm)
    axes[1].plot(fppm, np.real(fit.data), color=palette.DATA, lw=1.6, label="DIFF")
    axes[1].plot(fppm, np.real(fit.fit), color=palette.FIT, lw=0.9, label="fit")
    for name, contrib in zip(fit.names, np.asarray(fit.contributions), strict=True):
        if np.max(np.abs(contrib.real)) > 0:
            axes[1].plot(fppm, np.real(contrib), color=palette.member_colour(name), lw=0.8,
                         label=name)
    axes[1].legend(loc="upper left", frameon=False, fontsize=7, ncol=4)
    axes[2].plot(fppm, np.real(fit.residual), color=palette.RESIDUAL, lw=0.7)
    axes[2].set_xlabel("chemical shift (ppm)")
    _tidy(axes)
    gp = edited.values.get("GABA+/tCr", float("nan"))
    axes[1].text(0.99, 0.92, f"GABA+/tCr {gp:.3g}", transform=axes[1].transAxes, ha="right",
                 fontsize=9)
    return fig


def _plot_on_off(ax: Any, spectra: Any, title: str) -> None:
    """The OFF and ON spectra overlaid, 0.5-4.3 ppm."""
    ppm = spectra.off.ppm()
    keep = (ppm > 0.5) & (ppm < 4.3)
    ax.plot(ppm[keep], np.real(spectra.off.spectrum())[keep], color=palette.DATA, lw=1.6,
            label="OFF")
    aligned = bool(spectra.on_to_off.get("applied", 0.0))
    ax.plot(ppm[keep], np.real(spectra.on.spectrum())[keep], color=palette.FIT, lw=0.7,
            label="ON (aligned)" if aligned else "ON")
    ax.legend(loc="upper left", frameon=False, fontsize=8)
    ax.set_title(title, fontsize=10, loc="left")


def _tidy(axes: list[Any]) -> None:
    """One decreasing ppm axis without y ticks; labels on the lowest panel only."""
    for ax in axes:
        ax.set_xlim(4.3, 0.5)
        ax.set_yticks([])
        for side in ("top", "right", "left"):
            ax.spines[side].set_visible(False)
    for ax in axes[:-1]:
        ax.tick_params(labelbottom=False)


def plot_edited_preprocessing(spectra: Any, *, title: str = "") -> Any:
    """Figure of preprocessed edited spectra (matplotlib, Agg): ON and OFF, DIFF, and the
    frequency of the transients of each condition over the pair index.

    Parameters
    ----------
    spectra : EditedSpectra
        From :func:`specproc.edited.preprocess.preprocess_edited`.
    title : str, optional
        Figure title.
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(8.0, 7.6))
    axes = [fig.add_axes((0.08, 0.62, 0.88, 0.32)), fig.add_axes((0.08, 0.36, 0.88, 0.24))]
    _plot_on_off(axes[0], spectra, title)
    ppm = spectra.diff.ppm()
    keep = (ppm > 0.5) & (ppm < 4.3)
    axes[1].plot(ppm[keep], np.real(spectra.diff.spectrum())[keep], color=palette.DATA, lw=1.0,
                 label="DIFF = ON − OFF")
    axes[1].axhline(0.0, color=palette.RESIDUAL, lw=0.5)
    axes[1].legend(loc="upper left", frameon=False, fontsize=8)
    _tidy(axes)
    axes[1].set_xlabel("chemical shift (ppm)")
    drift = fig.add_axes((0.08, 0.07, 0.88, 0.2))
    kept = np.flatnonzero(np.asarray(spectra.pairs_kept))
    for name, result, colour in (("OFF", spectra.off_result, palette.DATA),
                                 ("ON", spectra.on_result, palette.FIT)):
        report = result.transient_report
        if report is not None and np.asarray(report.shifts_hz).size == kept.size:
            drift.plot(kept, np.asarray(report.shifts_hz), ".", ms=3, color=colour, label=name)
    for k, index in enumerate(np.flatnonzero(~np.asarray(spectra.pairs_kept))):
        drift.axvline(float(index), color=palette.RESIDUAL, lw=0.6, ls=":",
                      label="pair left out" if k == 0 else None)
    drift.set_xlabel("ON/OFF pair")
    drift.set_ylabel("frequency (Hz)", fontsize=8)
    drift.legend(loc="upper right", frameon=False, fontsize=7, ncol=3)
    for side in ("top", "right"):
        drift.spines[side].set_visible(False)
    return fig
