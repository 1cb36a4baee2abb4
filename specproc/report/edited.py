"""Rendering of the edited part of a scan's result: table rows and the ON/OFF/DIFF figure.

The figure has three panels on one ppm axis (decreasing to the right): the OFF and the aligned
ON spectra overlaid; the DIFF spectrum with its fit (GABA+ and Glx); and the DIFF residual.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from specproc.report import palette

__all__ = ["EDITED_QC_FIELDS", "edited_members", "edited_rows", "plot_edited"]

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


def plot_edited(edited: Any, *, title: str = "") -> Any:
    """Figure of the OFF, ON and DIFF spectra with the DIFF fit (matplotlib, Agg)."""
    from matplotlib.figure import Figure

    spectra = edited.spectra
    fig = Figure(figsize=(8.0, 6.4))
    axes = [fig.add_axes((0.08, 0.56, 0.88, 0.36)), fig.add_axes((0.08, 0.22, 0.88, 0.30)),
            fig.add_axes((0.08, 0.08, 0.88, 0.12))]
    ppm = spectra.off.ppm()
    keep = (ppm > 0.5) & (ppm < 4.3)
    off = np.real(spectra.off.spectrum())[keep]
    on = np.real(spectra.on.spectrum())[keep]
    axes[0].plot(ppm[keep], off, color=palette.DATA, lw=1.6, label="OFF")
    axes[0].plot(ppm[keep], on, color=palette.FIT, lw=0.7, label="ON (aligned)")
    axes[0].legend(loc="upper left", frameon=False, fontsize=8)
    axes[0].set_title(title, fontsize=10, loc="left")
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
    for ax in axes:
        ax.set_xlim(4.3, 0.5)
        ax.set_yticks([])
        for side in ("top", "right", "left"):
            ax.spines[side].set_visible(False)
    for ax in axes[:2]:
        ax.tick_params(labelbottom=False)
    gp = edited.values.get("GABA+/tCr", float("nan"))
    axes[1].text(0.99, 0.92, f"GABA+/tCr {gp:.3g}", transform=axes[1].transAxes, ha="right",
                 fontsize=9)
    return fig
