"""The fit result, its table of rows and its plain dict for JSON.

Computing lives in :mod:`specproc.fit.fitter`; the text, TSV and figure renderings of a
:class:`FitResult` live in :mod:`specproc.report` (``fit_text``, ``fit_figure``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc._json import to_jsonable

__all__ = ["FitResult", "result_to_dict", "results_table"]


@dataclass(frozen=True, eq=False)
class FitResult:
    """Outcome of :func:`specproc.fit.fit_spectrum`.

    Amplitudes are in the units of the data relative to the basis (a basis member of N protons
    has amplitude N per unit concentration, so ``amplitude`` is proportional to concentration).

    Attributes
    ----------
    names, kinds : tuple of str
        Fitted basis members and their kinds.
    amplitudes : (M,) ndarray
        c_m ≥ 0.
    crlb_sd : (M,) ndarray
        Cramér-Rao SD of each amplitude (NaN when not identifiable).
    crlb_percent : (M,) ndarray
        ``100 · crlb_sd / amplitude`` (NaN for a zero amplitude).
    covariance : (M, M) ndarray
        Cramér-Rao covariance of the amplitudes (block of the full inverse Fisher matrix).
    correlation : (M, M) ndarray
        Correlation matrix of the amplitudes.
    at_zero_bound : (M,) bool ndarray
        Amplitudes held at the bound c = 0.
    combined : dict
        Combined sums (``tNAA``, ``tCr``, ``tCho``, ``Glx``): components, amplitude, crlb_sd,
        crlb_percent.
    nonlinear : dict of str to float
        Every nonlinear parameter (free or held) at the solution.
    nonlinear_sd : dict of str to float
        Cramér-Rao SD of the free nonlinear parameters (NaN for held ones).
    member_shift_hz, member_damping_per_s : (M,) ndarray
        Total shift δ_m (Hz; positive = towards higher ppm) and Lorentzian damping γ_m (s⁻¹).
    lorentz_fwhm_hz : (M,) ndarray
        γ_m / π, Hz.
    gauss_fwhm_hz : float
        FWHM of the shared Gaussian broadening, Hz.
    phase0_deg, phase1_deg_per_ppm : float
        Zero- and first-order phase: the model's phase at shift δ is
        ``phase0_deg + phase1_deg_per_ppm · (δ - phase1_pivot_ppm)`` degrees.
    phase1_pivot_ppm : float
        Pivot of the first-order phase (centre of the fit range), ppm.
    parameter_names : tuple of str
        Names of the full parameter vector of the Fisher matrix (amplitudes ``amp:<name>``,
        baseline ``baseline_re:<k>``, ``baseline_im:<k>``, free nonlinear parameters).
    parameter_values : (P,) ndarray
        Their values.
    parameter_covariance : (P, P) ndarray
        Full inverse Fisher matrix.
    baseline_coef : (n_b,) complex ndarray
        B-spline coefficients of the baseline.
    noise_sd : float
        Noise SD of one spectral component used for the bounds (not rescaled by χ²).
    noise_ppm : list of (float, float)
        Regions it was measured in (empty when given in the settings).
    chi_square : float
        ``Σ |residual|² / noise_sd²`` over the fit range (real and imaginary parts).
    dof : int
        ``2 K`` minus the number of fitted parameters.
    reduced_chi_square : float
        ``chi_square / dof``.
    fit_range_ppm : (float, float)
        Fit range, ppm.
    success : bool
        Whether the optimiser reported convergence and the bounds are finite.
    message : str
        Optimiser message.
    flags : tuple of str
        Warnings: ``fisher_singular``, ``at_zero_bound:<name>``, ``at_bound:<parameter>``,
        ``not_converged``, ``zero_filled_data`` (the FID ends in zeros: the bounds, which treat
        the spectral points as independent, are too small; fit data without zero filling),
        ``apodized_data`` (an apodization step is in the provenance: coloured noise, the same
        caveat).
    nfev : int
        Number of model evaluations.
    elapsed_s : float
        Wall time of the fit, s.
    ppm : (K,) ndarray
        Chemical shift of the fit-range points (decreasing).
    data, fit, baseline, residual : (K,) complex ndarray
        Spectra on the fit range, phase-corrected by the fitted φ0/φ1 (the real part is the
        absorption spectrum).
    contributions : (M, K) complex ndarray
        ``c_m A_m`` of each member, phase-corrected.
    spectrometer_mhz : float
        Spectrometer frequency, MHz.
    settings : dict
        The fit settings used (``FitSettings.to_dict()``).
    baseline_penalty : float
        Relative roughness-penalty weight of the baseline used (chosen from the data with
        ``baseline_auto``); NaN without a baseline.
    """

    names: tuple[str, ...]
    kinds: tuple[str, ...]
    amplitudes: np.ndarray
    crlb_sd: np.ndarray
    crlb_percent: np.ndarray
    covariance: np.ndarray
    correlation: np.ndarray
    at_zero_bound: np.ndarray
    combined: dict[str, dict[str, Any]]
    nonlinear: dict[str, float]
    nonlinear_sd: dict[str, float]
    member_shift_hz: np.ndarray
    member_damping_per_s: np.ndarray
    lorentz_fwhm_hz: np.ndarray
    gauss_fwhm_hz: float
    phase0_deg: float
    phase1_deg_per_ppm: float
    phase1_pivot_ppm: float
    parameter_names: tuple[str, ...]
    parameter_values: np.ndarray
    parameter_covariance: np.ndarray
    baseline_coef: np.ndarray
    noise_sd: float
    noise_ppm: list[tuple[float, float]]
    chi_square: float
    dof: int
    reduced_chi_square: float
    fit_range_ppm: tuple[float, float]
    success: bool
    message: str
    flags: tuple[str, ...]
    nfev: int
    elapsed_s: float
    ppm: np.ndarray
    data: np.ndarray
    fit: np.ndarray
    baseline: np.ndarray
    residual: np.ndarray
    contributions: np.ndarray
    spectrometer_mhz: float
    settings: dict[str, Any] = field(default_factory=dict)
    baseline_penalty: float = float("nan")

    def amplitude(self, name: str) -> float:
        """Amplitude of a member or combined sum (case-insensitive)."""
        for i, n in enumerate(self.names):
            if n.lower() == name.lower():
                return float(self.amplitudes[i])
        for n, entry in self.combined.items():
            if n.lower() == name.lower():
                return float(entry["amplitude"])
        raise KeyError(name)

    def crlb(self, name: str) -> float:
        """Cramér-Rao SD of a member or combined sum (case-insensitive)."""
        for i, n in enumerate(self.names):
            if n.lower() == name.lower():
                return float(self.crlb_sd[i])
        for n, entry in self.combined.items():
            if n.lower() == name.lower():
                return float(entry["crlb_sd"])
        raise KeyError(name)

    def to_text(self) -> str:
        """Human-readable summary (see :func:`specproc.report.fit_text.result_to_text`)."""
        from specproc.report.fit_text import result_to_text

        return result_to_text(self)

    def to_dict(self) -> dict[str, Any]:
        """JSON-able dict (see :func:`result_to_dict`)."""
        return result_to_dict(self)

    def __repr__(self) -> str:
        shown = ", ".join(f"{n}={float(a):.4g}" for n, a in zip(self.names[:6], self.amplitudes,
                                                              strict=False))
        more = f", ... ({len(self.names)} members)" if len(self.names) > 6 else ""
        return (f"FitResult({shown}{more}; success={bool(self.success)}, "
                f"flags={list(self.flags)})")


# ---------------------------------------------------------------------- tables
def results_table(result: FitResult) -> list[dict[str, Any]]:
    """One row per member and per combined sum.

    Columns: ``metabolite``, ``kind``, ``amplitude``, ``crlb_sd``, ``crlb_percent``,
    ``ratio_tcr`` (amplitude / tCr amplitude; NaN without creatine), ``flag``.
    """
    tcr = float("nan")
    if "tCr" in result.combined:
        tcr = float(result.combined["tCr"]["amplitude"])
    else:
        for i, n in enumerate(result.names):
            if n.lower() in ("cr", "tcr"):
                tcr = float(result.amplitudes[i])

    def ratio(value: float) -> float:
        return value / tcr if np.isfinite(tcr) and tcr > 0 else float("nan")

    rows = []
    for i, name in enumerate(result.names):
        flag = []
        if result.at_zero_bound[i]:
            flag.append("zero_bound")
        if not np.isfinite(result.crlb_sd[i]):
            flag.append("no_crlb")
        rows.append({
            "metabolite": name,
            "kind": result.kinds[i],
            "amplitude": float(result.amplitudes[i]),
            "crlb_sd": float(result.crlb_sd[i]),
            "crlb_percent": float(result.crlb_percent[i]),
            "ratio_tcr": ratio(float(result.amplitudes[i])),
            "flag": ",".join(flag),
        })
    for name, entry in result.combined.items():
        rows.append({
            "metabolite": name,
            "kind": "sum",
            "amplitude": float(entry["amplitude"]),
            "crlb_sd": float(entry["crlb_sd"]),
            "crlb_percent": float(entry["crlb_percent"]),
            "ratio_tcr": ratio(float(entry["amplitude"])),
            "flag": "" if np.isfinite(entry["crlb_sd"]) else "no_crlb",
        })
    return rows


def result_to_dict(result: FitResult, *, spectra: bool = True) -> dict[str, Any]:
    """Every field as plain JSON values (NaN becomes None; complex arrays ``{"re", "im"}``).

    Parameters
    ----------
    spectra : bool
        Include the plotted spectra (``ppm``, ``data``, ``fit``, ``baseline``, ``residual``,
        ``contributions``).
    """
    out: dict[str, Any] = {"table": results_table(result)}
    for name in FitResult.__dataclass_fields__:
        if not spectra and name in ("ppm", "data", "fit", "baseline", "residual",
                                    "contributions"):
            continue
        out[name] = getattr(result, name)
    return to_jsonable(out)
