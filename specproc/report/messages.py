"""Flags and warnings in words: the one table from machine keys to sentences.

Every flag the fit and QC raise is a short machine key (kept in ``fit.json``, ``results.tsv``
and the cohort tables so that scripts can filter on it); what a person reads (command-line
output, scan report, cohort page, phantom report) is the sentence this module makes of it.

Keys
----
Fit flags (:attr:`specproc.fit.FitResult.flags`): ``fisher_singular``, ``not_converged``,
``collapsed:principal_metabolites_zero``, ``collapsed:shift_at_limit``,
``zero_filled_data``, ``apodized_data``, ``at_zero_bound:<member>`` and
``at_bound:<parameter>`` with the parameter names of :mod:`specproc.fit.model`
(``dshift_<member>_hz``, ``ddamping_<member>_per_s``, ``shift_<group>_hz``,
``damping_<group>_per_s``, ``gauss_s2``, ``phase0_rad``, ``phase1_s``).
Row flags of the results table: ``zero_bound``, ``no_crlb``.
QC flags (:class:`specproc.qc.QCFlag` names): ``snr``, ``naa_fwhm_ppm``, ``water_fwhm_ppm``,
``residual_ratio``, ``drift_range_hz``, ``rejected_fraction``, ``crlb:<member>``; in the cohort
summary the fit's ``fit:not_converged``.

Unknown keys are returned as they are, so that nothing is ever hidden.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Mapping
from typing import Any

from specproc.errors import InvalidInputError
from specproc.report.tables import sig

__all__ = [
    "CRLB_UNDEFINED",
    "crlb_text",
    "fit_flag_sentence",
    "fit_sentences",
    "fit_status_sentence",
    "flag_sentence",
    "member_label",
    "qc_flag_sentence",
    "sentences",
]

#: Shown instead of a number when a Cramér-Rao bound is not defined (zero amplitude, singular
#: information matrix).
CRLB_UNDEFINED = "—"

#: Long names of the combined sums and lipid components (metabolites' own come from their
#: definition files).
_LONG_NAMES: Mapping[str, str] = {
    "tNAA": "total NAA (NAA + NAAG)",
    "tCr": "total creatine (Cr + PCr)",
    "tCho": "total choline (GPC + PCh)",
    "Glx": "glutamate + glutamine (Glx)",
    "FatCH3": "lipid methyl groups (FatCH3)",
    "FatCH2": "lipid methylene chain (FatCH2)",
}

#: Flags without a value: key -> sentence.
_FIXED: Mapping[str, str] = {
    "fisher_singular": "Some fit parameters cannot be told apart (the information matrix is "
                       "singular); their error bounds are undefined.",
    "not_converged": "The fit stopped before it converged; treat its numbers with caution.",
    "fit:not_converged": "The fit stopped before it converged; treat its numbers with caution.",
    "zero_filled_data": "The data were zero-filled before the fit, so the error bounds "
                        "(which count every point as independent) are too small.",
    "apodized_data": "The data were apodized before the fit; the noise is no longer white and "
                     "the error bounds are too small.",
    "collapsed:principal_metabolites_zero": (
        "The fit failed: NAA and creatine both came out as zero, so it found no brain "
        "spectrum and every ratio to creatine is undefined."),
    "collapsed:shift_at_limit": (
        "The fit failed: its frequency shift ended at the limit (fit.shift_limit_ppm), so it "
        "did not find the peaks; check the referencing of the data."),
    "zero_bound": "fitted at zero (not detected)",
    "no_crlb": "error bound undefined",
}

#: QC flags: key -> (sentence with the value and the limit, sentence without numbers).
_QC: Mapping[str, tuple[str, str]] = {
    "snr": ("The signal-to-noise ratio (NAA height / noise SD) is {value}, below the minimum "
            "of {limit}.", "The signal-to-noise ratio is below its minimum."),
    "naa_fwhm_ppm": ("The NAA line is {value} ppm wide (FWHM), wider than the limit of "
                     "{limit} ppm.", "The NAA line is wider than its limit."),
    "water_fwhm_ppm": ("The water line is {value} ppm wide (FWHM), wider than the limit of "
                       "{limit} ppm.", "The water line is wider than its limit."),
    "residual_ratio": ("The fit residual is {value} times the noise, above the limit of "
                       "{limit}: the model misses part of the signal.",
                       "The fit residual is large compared with the noise."),
    "drift_range_hz": ("The frequency drifted by {value} Hz during the scan, more than the "
                       "limit of {limit} Hz.", "The frequency drifted more than its limit."),
    "rejected_fraction": ("{value} % of the transients were rejected as outliers, more than "
                          "the limit of {limit} %.",
                          "Too many transients were rejected as outliers."),
}


@functools.cache
def _full_names() -> dict[str, str]:
    try:
        from specproc.spins.systems import load_metabolites

        return {m.name: m.full_name for m in load_metabolites()}
    except (InvalidInputError, OSError):  # names are a courtesy; bad definitions fail elsewhere
        return {}


def member_label(name: str) -> str:
    """Readable name of a basis member or sum: ``"ascorbate (Asc)"``, ``"MM1.22"``."""
    if name in _LONG_NAMES:
        return _LONG_NAMES[name]
    full = _full_names().get(name)
    if full and full.lower() != name.lower():
        return f"{full} ({name})"
    if name.startswith("MM"):
        return f"macromolecule {name}"
    if name.startswith("Fat"):
        return f"lipid {name}"
    return name


def crlb_text(percent: float | None) -> str:
    """A CRLB in % as shown to people: two significant figures, ``"—"`` when undefined."""
    if percent is None or not math.isfinite(float(percent)):
        return CRLB_UNDEFINED
    value = float(percent)
    return sig(value, 2) if value < 100 else f"{value:.0f}"


def _value_at_bound(parameter: str, fit: Any) -> float:
    if fit is None:
        return math.nan
    return float(getattr(fit, "nonlinear", {}).get(parameter, math.nan))


def _member_of(parameter: str, prefix: str, suffix: str) -> str:
    return parameter[len(prefix):len(parameter) - len(suffix)]


def fit_flag_sentence(flag: str, fit: Any = None) -> str:
    """Sentence for one fit flag.

    Parameters
    ----------
    flag : str
        A key of :attr:`FitResult.flags`.
    fit : FitResult, optional
        Gives the values at the bound (the limits) and the spectrometer frequency.
    """
    if flag in _FIXED:
        return _FIXED[flag]
    kind, _, what = flag.partition(":")
    if kind == "at_zero_bound":
        label = member_label(what)
        return (f"{label[:1].upper()}{label[1:]} was fitted at zero: not detected in this "
                "spectrum (its error bound is not a symmetric SD).")
    if kind != "at_bound":
        return flag
    value = _value_at_bound(what, fit)
    mhz = float(getattr(fit, "spectrometer_mhz", math.nan)) if fit is not None else math.nan
    if what.startswith("dshift_") and what.endswith("_hz"):
        member = member_label(_member_of(what, "dshift_", "_hz"))
        limit = f"±{sig(abs(value), 2)} Hz" if math.isfinite(value) else "its limit"
        if math.isfinite(value) and math.isfinite(mhz) and mhz > 0:
            limit += f" (±{sig(abs(value) / mhz, 2)} ppm)"
        return f"The {member} shift hit its limit of {limit} from the shared shift."
    if what.startswith("ddamping_") and what.endswith("_per_s"):
        member = member_label(_member_of(what, "ddamping_", "_per_s"))
        limit = f"±{sig(abs(value) / math.pi, 2)} Hz" if math.isfinite(value) else "its limit"
        return f"The {member} line width hit its limit of {limit} from the shared width."
    if what.startswith("shift_") and what.endswith("_hz"):
        group = _member_of(what, "shift_", "_hz")
        limit = "its limit"
        if math.isfinite(value) and math.isfinite(mhz) and mhz > 0:
            limit = f"its limit of ±{sig(abs(value) / mhz, 2)} ppm"
        return (f"The frequency shift of the '{group}' group hit {limit}: check the "
                "frequency referencing.")
    if what.startswith("damping_") and what.endswith("_per_s"):
        group = _member_of(what, "damping_", "_per_s")
        if math.isfinite(value) and value <= 0:
            return (f"The Lorentzian line width of the '{group}' group went to zero (the lines "
                    "are narrower than the model's shared Gaussian).")
        limit = f" of {sig(value / math.pi, 2)} Hz" if math.isfinite(value) else ""
        return (f"The Lorentzian line width of the '{group}' group hit its upper limit{limit}: "
                "the lines are broader than expected.")
    if what == "gauss_s2":
        width = float(getattr(fit, "gauss_fwhm_hz", math.nan)) if fit is not None else math.nan
        if math.isfinite(width) and width <= 1e-6:
            return "The shared Gaussian line broadening went to zero."
        limit = f" of {sig(width, 2)} Hz" if math.isfinite(width) else ""
        return f"The shared Gaussian line broadening hit its upper limit{limit}."
    if what in ("phase0_rad", "phase1_s"):
        order = "zero" if what == "phase0_rad" else "first"
        return f"The {order}-order phase hit its limit."
    return f"The fit parameter {what} hit its limit."


def fit_sentences(fit: Any) -> list[str]:
    """Sentences for all flags of a fit, the members fitted at zero named in one sentence."""
    zero = [f.split(":", 1)[1] for f in fit.flags if f.startswith("at_zero_bound:")]
    out = [fit_flag_sentence(f, fit) for f in fit.flags if not f.startswith("at_zero_bound:")]
    if zero:
        out.append("Fitted at zero (not detected in this spectrum): " + ", ".join(zero) + ".")
    return out


def qc_flag_sentence(name: str, value: float | None = None, limit: float | None = None) -> str:
    """Sentence for one QC flag (``value`` and ``limit`` from the QC report, when known)."""
    if name in _FIXED:
        return _FIXED[name]
    v = math.nan if value is None else float(value)
    lim = math.nan if limit is None else float(limit)
    if name.startswith("crlb:"):
        member = member_label(name.split(":", 1)[1])
        text = f"The error bound (CRLB) of {member}"
        if math.isfinite(v):
            text += f" is {crlb_text(v)} %"
        if math.isfinite(lim):
            text += f", above the limit of {lim:g} %"
        else:
            text += " is above its limit"
        return text + "."
    if name in _QC:
        with_numbers, without = _QC[name]
        if not (math.isfinite(v) and math.isfinite(lim)):
            return without
        if name == "rejected_fraction":
            v, lim = 100.0 * v, 100.0 * lim
        return with_numbers.format(value=sig(v), limit=f"{lim:g}")
    return name


def flag_sentence(key: str, *, fit: Any = None, value: float | None = None,
                  limit: float | None = None) -> str:
    """Sentence for any flag key (fit, QC or row flag)."""
    kind = key.partition(":")[0]
    if kind in ("at_bound", "at_zero_bound") or key in ("fisher_singular", "not_converged",
                                                        "zero_filled_data", "apodized_data"):
        return fit_flag_sentence(key, fit)
    if key in _FIXED:
        return _FIXED[key]
    return qc_flag_sentence(key, value, limit)


def sentences(keys: Iterable[str], *, fit: Any = None,
              qc: Mapping[str, Any] | None = None,
              thresholds: Mapping[str, Any] | None = None) -> list[str]:
    """Sentences for many flag keys, values and limits looked up where they are known.

    Parameters
    ----------
    keys : iterable of str
        Flag keys.
    fit : FitResult, optional
        For the fit flags.
    qc : mapping, optional
        QC metric values by name (``snr``, ``naa_fwhm_ppm`` ..., ``crlb_percent`` a mapping).
    thresholds : mapping, optional
        :meth:`specproc.qc.QCThresholds.to_dict`.
    """
    qc = dict(qc or {})
    th = dict(thresholds or {})
    limit_of = {"snr": "snr_min", "naa_fwhm_ppm": "naa_fwhm_ppm_max",
                "water_fwhm_ppm": "water_fwhm_ppm_max", "residual_ratio": "residual_ratio_max",
                "drift_range_hz": "drift_range_hz_max",
                "rejected_fraction": "rejected_fraction_max"}
    out = []
    for key in keys:
        value: Any = None
        limit: Any = None
        if key.startswith("crlb:"):
            value = dict(qc.get("crlb_percent") or {}).get(key.split(":", 1)[1])
            limit = th.get("crlb_percent_max")
        elif key == "rejected_fraction":
            n, r = qc.get("n_transients"), qc.get("n_rejected")
            value = (float(r) / float(n)) if n and r is not None else None
            limit = th.get(limit_of[key])
        elif key in limit_of:
            value = qc.get(key)
            limit = th.get(limit_of[key])
        out.append(flag_sentence(key, fit=fit, value=_maybe(value), limit=_maybe(limit)))
    return out


def _maybe(value: Any) -> float | None:
    try:
        return None if value is None else float(value)
    except (TypeError, ValueError):
        return None


def fit_status_sentence(fit: Any) -> str:
    """One line on how the fit ended, without the optimiser's own wording."""
    n = int(getattr(fit, "nfev", 0) or 0)
    flags = tuple(getattr(fit, "flags", ()) or ())
    for flag in flags:
        if flag.startswith("collapsed:"):
            return fit_flag_sentence(flag, fit)
    if getattr(fit, "success", False):
        return f"The fit converged ({n} model evaluations)."
    if "not_converged" in tuple(getattr(fit, "flags", ()) or ()):
        return (f"The fit did not converge within its evaluation limit ({n} model evaluations); "
                "raise fit.max_iterations or check the data.")
    return ("The fit ended but its error bounds are not all defined "
            f"({n} model evaluations).")
