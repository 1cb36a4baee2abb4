"""Text rendering of a fit alone: the terminal summary (tables go through :mod:`specproc._tsv`).

Numbers follow :func:`specproc.report.tables.sig`: three significant figures for amplitudes and
ratios, two for error bounds in %, ``—`` where a bound is undefined. Flags are written as
sentences (:mod:`specproc.report.messages`).
"""

from __future__ import annotations

from typing import Any

from specproc.report.messages import crlb_text, fit_sentences, fit_status_sentence
from specproc.report.tables import sig

__all__ = ["result_to_text"]

def result_to_text(result: Any) -> str:
    """Plain-text summary: one line on the fit, a table of members, then the notes in words."""
    from specproc.fit import results_table

    rows = results_table(result)
    lo, hi = result.fit_range_ppm
    out = [
        f"Fit over {lo:g} to {hi:g} ppm. {fit_status_sentence(result)}",
        f"{'member':<10}{'amplitude':>12}{'± SD':>11}{'CRLB %':>8}{'ratio to tCr':>14}",
    ]
    for row in rows:
        out.append(
            f"{row['metabolite']:<10}{sig(row['amplitude']):>12}{sig(row['crlb_sd'], 2):>11}"
            f"{crlb_text(row['crlb_percent']):>8}{sig(row['ratio_tcr']):>14}"
        )
    out.append(
        f"Phase {sig(result.phase0_deg)} deg (zero order), {sig(result.phase1_deg_per_ppm)} "
        f"deg/ppm (first order); shared Gaussian width {sig(result.gauss_fwhm_hz)} Hz."
    )
    out.append(
        f"Noise SD {sig(result.noise_sd)}; chi-square {sig(result.chi_square)} on {result.dof} "
        f"degrees of freedom (reduced {sig(result.reduced_chi_square)}); "
        f"{sig(result.elapsed_s, 2)} s."
    )
    out += ["Note: " + sentence for sentence in fit_sentences(result)]
    return "\n".join(out) + "\n"
