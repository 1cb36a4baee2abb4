"""The fit result and its renderings (text, plain dict for JSON, TSV table, figure).

Computing lives in :mod:`specproc.fit.fitter`; this module only presents a :class:`FitResult`.
"""

from __future__ import annotations

import io
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc._atomic import write_bytes, write_text
from specproc._json import to_jsonable

__all__ = [
    "FitResult",
    "figure_png",
    "plot_fit",
    "result_to_dict",
    "result_to_text",
    "results_table",
    "results_tsv_text",
    "save_figure",
    "write_results_tsv",
]


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
        """Human-readable summary (see :func:`result_to_text`)."""
        return result_to_text(self)

    def to_dict(self) -> dict[str, Any]:
        """JSON-able dict (see :func:`result_to_dict`)."""
        return result_to_dict(self)


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


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return "nan" if not np.isfinite(value) else f"{value:.6g}"
    return str(value)


def results_tsv_text(result: FitResult) -> str:
    """:func:`results_table` as tab-separated values (header line first)."""
    rows = results_table(result)
    columns = ["metabolite", "kind", "amplitude", "crlb_sd", "crlb_percent", "ratio_tcr", "flag"]
    lines = ["\t".join(columns)]
    lines += ["\t".join(_fmt(row[c]) for c in columns) for row in rows]
    return "\n".join(lines) + "\n"


def write_results_tsv(result: FitResult, path: str | os.PathLike[str]) -> None:
    """Write :func:`results_tsv_text` to ``path`` (atomic write)."""
    write_text(path, results_tsv_text(result))


def result_to_text(result: FitResult) -> str:
    """Plain-text report: a table of amplitudes and bounds, then the fit parameters."""
    rows = results_table(result)
    out = [
        f"Linear-combination fit over {result.fit_range_ppm[0]:g}-{result.fit_range_ppm[1]:g} ppm"
        f" ({'converged' if result.success else 'NOT converged'}: {result.message})",
        f"{'member':<12}{'amplitude':>13}{'CRLB SD':>13}{'CRLB %':>9}{'/tCr':>9}  flag",
    ]
    for row in rows:
        pct = row["crlb_percent"]
        ratio = row["ratio_tcr"]
        out.append(
            f"{row['metabolite']:<12}{row['amplitude']:>13.5g}{row['crlb_sd']:>13.4g}"
            f"{(f'{pct:.1f}' if np.isfinite(pct) else 'nan'):>9}"
            f"{(f'{ratio:.3f}' if np.isfinite(ratio) else '-'):>9}"
            f"  {row['flag']}"
        )
    out.append(
        f"phase0 {result.phase0_deg:.2f} deg, phase1 {result.phase1_deg_per_ppm:.3f} deg/ppm, "
        f"Gaussian FWHM {result.gauss_fwhm_hz:.2f} Hz"
    )
    out.append(
        f"noise SD {result.noise_sd:.4g}, chi-square {result.chi_square:.1f} on {result.dof} "
        f"dof (reduced {result.reduced_chi_square:.3f}), {result.nfev} evaluations, "
        f"{result.elapsed_s:.3f} s"
    )
    if result.flags:
        out.append("flags: " + ", ".join(result.flags))
    return "\n".join(out) + "\n"


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


# ---------------------------------------------------------------------- figure
def plot_fit(result: FitResult, *, title: str | None = None, max_members: int = 30) -> Any:
    """Figure of the fit: data, fit, baseline, residual and each member's contribution.

    Two panels sharing the ppm axis (decreasing to the right): the top shows the real
    (absorption) parts of the data, the fit and the baseline, with the residual offset above;
    the bottom stacks the contribution of each member with its name. Uses matplotlib's Agg
    canvas (no display needed).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    ppm = result.ppm
    data = result.data.real
    fit = result.fit.real
    base = result.baseline.real
    resid = result.residual.real
    contrib = result.contributions.real
    order = np.argsort(-result.amplitudes)[:max_members]
    # fixed margins: a layout engine would cost more than drawing the figure (cohort runs)
    fig = Figure(figsize=(8.5, 9.0))
    FigureCanvasAgg(fig)
    top, bottom = fig.subplots(
        2, 1, sharex=True, height_ratios=[1.3, 1.7],
        gridspec_kw={"left": 0.09, "right": 0.98, "top": 0.95, "bottom": 0.06, "hspace": 0.06},
    )
    span = float(np.ptp(data)) or 1.0
    offset = float(data.max()) + 0.15 * span - float(resid.min())
    top.plot(ppm, data, color="0.25", lw=0.9, label="data")
    top.plot(ppm, fit, color="#c0392b", lw=1.1, label="fit")
    top.plot(ppm, base, color="#2e86c1", lw=1.0, ls="--", label="baseline")
    top.plot(ppm, resid + offset, color="#7d8c2a", lw=0.8, label="residual (offset)")
    top.axhline(offset, color="0.8", lw=0.5)
    top.legend(loc="center right", fontsize=8, frameon=False)
    top.set_ylabel("real part (a.u.)")
    if title:
        top.set_title(title, fontsize=10)
    step = 0.0
    if order.size:
        step = 1.1 * float(max(np.ptp(contrib[i]) for i in order) or 1.0)
    for k, i in enumerate(order):
        y = contrib[i] - k * step
        bottom.plot(ppm, y, lw=0.9, color=f"C{k % 10}")
        bottom.text(float(ppm.min()), -k * step, f"{result.names[i]} ", fontsize=7,
                    va="bottom", ha="right", color=f"C{k % 10}")
    bottom.set_yticks([])
    bottom.set_ylabel("member contributions")
    bottom.set_xlabel("chemical shift (ppm)")
    bottom.set_xlim(float(ppm.max()), float(ppm.min()))
    return fig


def figure_png(fig: Any, *, dpi: int = 110) -> bytes:
    """A matplotlib figure rendered to PNG bytes."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    return buffer.getvalue()


def save_figure(fig: Any, path: str | os.PathLike[str], *, dpi: int = 110) -> None:
    """Save a matplotlib figure as PNG through an atomic write."""
    write_bytes(path, figure_png(fig, dpi=dpi))
