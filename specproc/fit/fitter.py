"""``fit_spectrum``: the linear-combination fit of one averaged spectrum.

Steps: check the inputs; put the basis on the scan's grid; measure the noise in a signal-free
region; coarse search of the common shift and zero-order phase by cross-correlation and of the
starting linewidth on a small grid; stage 1 refines phase0, group shifts, group dampings and the
Gaussian broadening; stage 2 refines everything that is not held (first-order phase, per-member
deviations); then the Cramér-Rao bounds of the full model. The model is documented in
:mod:`specproc.fit.model`, the solver in :mod:`specproc.fit.varpro` and the bounds in
:mod:`specproc.fit.crlb`.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Mapping
from typing import Any

import numpy as np

from specproc._threads import blas_threads
from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.fit.baseline import bspline_design, penalty_scale, second_difference
from specproc.fit.crlb import combine_sums, covariance_from_fisher, estimate_noise_sd
from specproc.fit.model import (
    I_GAUSS,
    I_PHASE0,
    I_PHASE1,
    SpectralModel,
    basis_on_scan,
    build_model,
    gauss_fwhm_hz,
    matches,
    start_values,
)
from specproc.fit.result import FitResult
from specproc.fit.settings import FitSettings, settings_from_config
from specproc.fit.varpro import VarproProblem, coarse_search
from specproc.sanity import collapse_reason

__all__ = ["fit_spectrum", "select_members"]

#: Largest relative difference between the basis and scan spectrometer frequencies accepted.
FIELD_TOLERANCE = 0.01


def select_members(basis: BasisSet, settings: FitSettings) -> list[int]:
    """Indices of the basis members to fit (settings.members, or all but water).

    Raises
    ------
    InvalidInputError
        For unknown names or an empty selection.
    """
    if settings.members:
        idx = [basis.index(name) for name in settings.members]
    else:
        idx = [i for i, k in enumerate(basis.kinds) if k != "water"]
    if not idx:
        raise InvalidInputError("the list of basis members to fit is empty")
    if len(set(idx)) != len(idx):
        raise InvalidInputError(f"repeated members in the fit list {list(settings.members)}")
    return idx


def _check_inputs(scan: Scan, basis: BasisSet) -> None:
    if scan.dims != ():
        raise InvalidInputError(
            f"fit needs one averaged FID, got extra axes {list(scan.dims)} "
            "(run the preprocessing first)",
            scan.source,
        )
    if len(basis.names) == 0:
        raise InvalidInputError("the basis set has no members")
    rel = abs(basis.spectrometer_mhz / scan.spectrometer_mhz - 1.0)
    if rel > FIELD_TOLERANCE:
        raise InvalidInputError(
            f"the basis was made for {basis.spectrometer_mhz:.3f} MHz "
            f"({basis.field_t:.2f} T) but the scan is at {scan.spectrometer_mhz:.3f} MHz "
            f"({scan.field_t:.2f} T)",
            scan.source,
        )


def fit_spectrum(
    scan: Scan, basis: BasisSet, *, config: Any = None, start: Mapping[str, float] | None = None
) -> FitResult:
    """Fit a spectrum as a linear combination of basis signals plus a spline baseline.

    Parameters
    ----------
    scan : Scan
        One averaged FID (``dims == ()``), NIfTI-MRS convention.
    basis : BasisSet
        Basis of the same field (within 1 %); resampled to the scan's dwell time, length and
        receiver centre.
    config : None, FitSettings or mapping, optional
        Fit settings, or a configuration whose ``[fit]`` table holds them (defaults otherwise).
    start : mapping of str to float, optional
        Warm start: nonlinear parameters by name, as in :attr:`FitResult.nonlinear` of an
        earlier fit of the same scan (parameters it does not name keep their usual starting
        values). The coarse search, the linewidth grid and the first refinement stage are then
        skipped; the baseline penalty choice, the amplitude tie and the second stage run as
        usual from there (with every family in ``fixed``, nothing is refined and the
        amplitudes and baseline are solved at the given parameters). Used by
        :mod:`specproc.fit.sensitivity` to refit a scan under other model choices cheaply.

    Returns
    -------
    FitResult
        Amplitudes, Cramér-Rao bounds, parameters, spectra for plotting.

    Raises
    ------
    InvalidInputError
        Basis of another field, fit range outside the spectrum, empty member list, a scan with
        several FIDs, unknown settings.

    Notes
    -----
    The model and the sign of the shift parameters are given in :mod:`specproc.fit.model`;
    the bounds are those of :mod:`specproc.fit.crlb` (noise measured in a signal-free region,
    not rescaled by the reduced chi-square).

    References
    ----------
    .. [1] Golub GH, Pereyra V. SIAM J Numer Anal 1973;10:413-432.
    .. [2] Cavassila S, et al. NMR Biomed 2001;14:278-283.

    Examples
    --------
    >>> import numpy as np
    >>> from specproc.data import Scan
    >>> from specproc.basis import BasisSet
    >>> t = np.arange(1024) * 5e-4
    >>> mhz = 123.2
    >>> line = lambda ppm: np.exp(-2j * np.pi * (ppm - 4.65) * mhz * t)
    >>> basis = BasisSet(names=("NAA", "Cr"), fids=np.stack([3 * line(2.008), 3 * line(3.027)]),
    ...                  dwell_s=5e-4, spectrometer_mhz=mhz, protons=(3, 3))
    >>> fid = (2.0 * basis.fids[0] + 1.0 * basis.fids[1]) * np.exp(-8 * t)
    >>> result = fit_spectrum(Scan(fid, dwell_s=5e-4, spectrometer_mhz=mhz), basis,
    ...                       config={"noise_sd": 1e-3, "start_lorentz_hz": 2.5})
    >>> np.round(result.amplitudes, 4).tolist()
    [2.0, 1.0]
    """
    with blas_threads():
        return _fit(scan, basis, config, start)


def _fit(scan: Scan, basis: BasisSet, config: Any,
         warm_start: Mapping[str, float] | None = None) -> FitResult:
    start = time.perf_counter()
    settings = settings_from_config(config)
    _check_inputs(scan, basis)
    members = select_members(basis, settings)
    names = tuple(basis.names[i] for i in members)
    kinds = tuple(basis.kinds[i] for i in members)
    fids = basis_on_scan(basis, scan)[members]
    model = build_model(scan, fids, names, kinds, settings,
                        relaxation=_relaxation(config, scan, settings))
    data = np.fft.fft(np.asarray(scan.data, dtype=complex))[model.index]

    noise_regions: list[tuple[float, float]]
    if settings.noise_sd > 0:
        noise_sd, noise_regions = settings.noise_sd, []
    else:
        noise_sd, noise_regions = estimate_noise_sd(scan, settings.noise_ppm)
    floor = 1e-12 * float(np.abs(data).max(initial=0.0)) or 1e-300
    noise_sd = max(noise_sd, floor)

    if settings.baseline:
        bmat = bspline_design(model.ppm, knot_ppm=settings.baseline_knot_ppm)
    else:
        bmat = np.zeros((model.ppm.size, 0))
    problem = VarproProblem(model, data, bmat, _penalty_matrix(bmat, settings.baseline_penalty),
                            noise_sd)
    tied = np.array([settings.mm_amplitude_sd > 0 and matches(n, k, settings.mm_amplitude_members)
                     for n, k in zip(names, kinds, strict=True)], dtype=bool)
    theta0 = None if warm_start is None else _warm_start(model, settings, names, warm_start)
    problem, weight, theta, messages, ok, nfev = _optimise(problem, model, settings, tied,
                                                           theta0)
    result = _assemble(problem, model, theta, settings, names, kinds, noise_sd, noise_regions,
                       messages, ok, nfev, start)
    if problem.nb:
        result = dataclasses.replace(result, baseline_penalty=weight)
    if _zero_filled_points(scan.data):
        # Zero filling makes neighbouring spectral points correlated while F = JᵀJ/s² treats
        # them as independent: the bounds come out too small (by about √factor).
        result = dataclasses.replace(result, flags=(*result.flags, "zero_filled_data"))
    if any(record.get("Method") == "apodization" for record in scan.provenance):
        # An apodized FID has coloured noise: the same independence assumption fails.
        result = dataclasses.replace(result, flags=(*result.flags, "apodized_data"))
    return result


def _relaxation(config: Any, scan: Scan, settings: FitSettings) -> Any:
    """Relaxation times of the width prior: the ``[relaxation]`` overrides of a whole
    configuration applied to the bundled table (the values the relaxation corrections use),
    or None for the bundled table itself."""
    if settings.width_prior != "relaxation" or not isinstance(config, Mapping):
        return None
    overrides = config.get("relaxation") if "fit" in config else None
    if not overrides:
        return None
    from specproc.quantify import load_relaxation_times

    return load_relaxation_times(scan.field_t, overrides=overrides)


def _zero_filled_points(fid: np.ndarray) -> int:
    """Length of the run of exact zeros at the end of the FID if it looks zero-filled, else 0.

    A measured FID never ends in a long run of exact zeros; a run of at least 8 points and an
    eighth of the FID is taken as zero filling.
    """
    nonzero = np.flatnonzero(np.asarray(fid) != 0)
    n = int(np.asarray(fid).shape[-1])
    run = n if nonzero.size == 0 else n - 1 - int(nonzero[-1])
    return run if run >= max(8, n // 8) else 0


def _penalty_matrix(bmat: np.ndarray, weight: float) -> np.ndarray:
    """``√λ D₂`` for a relative penalty weight (see :func:`penalty_scale`)."""
    if not bmat.shape[1]:
        return np.zeros((0, 0))
    lam = weight * penalty_scale(bmat.shape[0], bmat.shape[1])
    return np.sqrt(lam) * second_difference(bmat.shape[1])


def _choose_penalty(
    problem: VarproProblem, theta: np.ndarray, settings: FitSettings
) -> tuple[VarproProblem, float]:
    """The baseline penalty weight that minimises ``χ² + 2 · edf`` at θ (log grid).

    The unbiased risk estimate (Mallows' Cp) with the measured noise: the data choose between
    a stiff baseline (small edf, larger χ²) and a flexible one that absorbs what the basis does
    not model (broad signals of other shape). Two grid points per decade of
    ``baseline_penalty_range``, refined by a parabola in log λ through the best point and its
    neighbours.

    References
    ----------
    .. [1] Mallows CL. Some comments on Cp. Technometrics 1973;15:661-675.
    .. [2] Craven P, Wahba G. Smoothing noisy data with spline functions. Numer Math
       1979;31:377-403.
    """
    lo, hi = np.log10(settings.baseline_penalty_range)
    n_grid = max(2, int(np.ceil(2 * (hi - lo))) + 1)
    grid = np.linspace(lo, hi, n_grid)
    spectra, fids, phase = problem.model.member_spectra(theta)
    s2 = problem.noise_sd**2
    scores = []
    for log_w in grid:
        trial = VarproProblem(problem.model, problem.y, problem.bmat,
                              _penalty_matrix(problem.bmat, 10.0**log_w), problem.noise_sd,
                              amplitude_prior=problem.lmat)
        sol = trial.solve_given(spectra, fids, phase)
        chi2 = float(np.vdot(sol.residual, sol.residual).real) / s2
        scores.append(chi2 + 2.0 * trial.effective_dof(sol))
    best = int(np.argmin(scores))
    log_w = grid[best]
    if 0 < best < n_grid - 1:
        a, b, c = scores[best - 1:best + 2]
        denom = a - 2 * b + c
        if denom > 0:
            log_w += 0.5 * (a - c) / denom * (grid[1] - grid[0])
    weight = float(10.0**log_w)
    chosen = VarproProblem(problem.model, problem.y, problem.bmat,
                           _penalty_matrix(problem.bmat, weight), problem.noise_sd,
                           amplitude_prior=problem.lmat)
    return chosen, weight


def _amplitude_tie(
    problem: VarproProblem, theta: np.ndarray, settings: FitSettings, tied_mask: np.ndarray
) -> np.ndarray:
    """Rows of the prior that ties the macromolecule amplitudes to their common level.

    The members matching ``mm_amplitude_members`` have expected amplitudes in the ratios that
    the basis already holds (one level ``c̄`` for all); each deviation ``c_m - mean(c)`` gets a
    zero-mean Gaussian prior of SD ``mm_amplitude_sd · s``, with the level ``s`` the mean of
    those amplitudes fitted without the tie at θ. The rows are ``noise_sd / (sd · s) · (e_m -
    1/n)``: the objective gains ``Σ_m (c_m - c̄)² / (sd s)²`` in units of the noise variance,
    and the bounds include the prior. Empty when the tie is off, fewer than two members
    match, or they are all zero.
    """
    m = problem.model.n_members
    tied = np.flatnonzero(tied_mask)
    if tied.size < 2:
        return np.zeros((0, m))
    level = float(problem.solve_linear(theta).amplitudes[tied].mean())
    if not level > 0:
        return np.zeros((0, m))
    rows = np.zeros((tied.size, m))
    rows[np.arange(tied.size), tied] = 1.0
    rows[:, tied] -= 1.0 / tied.size
    return rows * (problem.noise_sd / (settings.mm_amplitude_sd * level))


def _public_names(layout_names: tuple[str, ...], names: tuple[str, ...]) -> dict[str, str]:
    """The name of each nonlinear parameter in :attr:`FitResult.nonlinear` (per-member
    parameters carry the member's name instead of its index)."""
    public = {}
    for i, member in enumerate(names):
        public[f"dshift_{i}_hz"] = f"dshift_{member}_hz"
        public[f"ddamping_{i}_per_s"] = f"ddamping_{member}_per_s"
        public[f"damping_member{i}_per_s"] = f"damping_{member}_per_s"
    return {n: public.get(n, n) for n in layout_names}


def _warm_start(model: SpectralModel, settings: FitSettings, names: tuple[str, ...],
                start: Mapping[str, float]) -> np.ndarray:
    """θ from the named parameters of ``start`` (the rest at their usual start), inside the
    bounds."""
    lay = model.layout
    theta = start_values(model, settings)
    for j, public in enumerate(_public_names(lay.names, names).values()):
        value = start.get(public)
        if value is not None and np.isfinite(value):
            theta[j] = float(value)
    return np.clip(theta, lay.lower, lay.upper)


def _optimise(
    problem: VarproProblem, model: SpectralModel, settings: FitSettings, tied: np.ndarray,
    warm: np.ndarray | None = None,
) -> tuple[VarproProblem, float, np.ndarray, str, bool, int]:
    lay = model.layout
    fixed = set(settings.fixed)
    if warm is not None:
        return _optimise_from(problem, model, settings, tied, warm)
    theta = start_values(model, settings)
    search_hz = settings.shift_search_ppm * model.mhz
    shift_free = "shift" not in fixed
    phase_free = "phase0" not in fixed
    nfev = 0
    if shift_free or phase_free:
        theta = coarse_search(model, problem.y, theta, search_hz=search_hz,
                              shift_free=shift_free, phase_free=phase_free)
    if "damping" not in fixed:
        best, best_cost = theta, problem.objective(theta)
        for fwhm in (1.0, 3.0, 6.0, 10.0):
            trial = theta.copy()
            trial[lay.i_damp] = np.pi * fwhm
            cost = problem.objective(trial)
            nfev += 1
            if cost < best_cost:
                best, best_cost = trial, cost
        theta = best
    # stage 1: the shared parameters (the separately damped members keep their start)
    stage1 = lay.mask(["phase0", "shift", "damping", "gauss"]) & ~lay.mask(list(fixed))
    stage1[lay.i_damp_separate] = False
    theta, res1 = problem.refine(theta, stage1, max_nfev=settings.max_iterations, tight=False)
    nfev += res1.nfev if res1 is not None else 0
    problem, weight, theta, res2, nfev2 = _final_stage(problem, model, settings, tied, theta)
    nfev += nfev2
    last = res2 if res2 is not None else res1
    if last is None:
        return problem, weight, theta, "all nonlinear parameters held", True, nfev
    return problem, weight, theta, str(last.message), bool(last.status > 0), nfev


def _final_stage(
    problem: VarproProblem, model: SpectralModel, settings: FitSettings, tied: np.ndarray,
    theta: np.ndarray,
) -> tuple[VarproProblem, float, np.ndarray, Any, int]:
    """Baseline penalty from the data, amplitude tie, then stage 2 (everything not held)."""
    weight = settings.baseline_penalty
    if settings.baseline and settings.baseline_auto and problem.nb:
        problem, weight = _choose_penalty(problem, theta, settings)
    tie = _amplitude_tie(problem, theta, settings, tied)
    if tie.shape[0]:
        problem = VarproProblem(model, problem.y, problem.bmat, problem.pmat, problem.noise_sd,
                                amplitude_prior=tie)
    stage2 = ~model.layout.mask(list(settings.fixed))
    theta, res2 = problem.refine(theta, stage2, max_nfev=settings.max_iterations, tight=True)
    return problem, weight, theta, res2, res2.nfev if res2 is not None else 0


def _optimise_from(
    problem: VarproProblem, model: SpectralModel, settings: FitSettings, tied: np.ndarray,
    theta: np.ndarray,
) -> tuple[VarproProblem, float, np.ndarray, str, bool, int]:
    """:func:`_optimise` from a warm start: only the final stage."""
    problem, weight, theta, res, nfev = _final_stage(problem, model, settings, tied, theta)
    if res is None:
        return problem, weight, theta, "all nonlinear parameters held", True, nfev
    return problem, weight, theta, str(res.message), bool(res.status > 0), nfev


def _assemble(
    problem: VarproProblem,
    model: SpectralModel,
    theta: np.ndarray,
    settings: FitSettings,
    names: tuple[str, ...],
    kinds: tuple[str, ...],
    noise_sd: float,
    noise_regions: list[tuple[float, float]],
    message: str,
    converged: bool,
    nfev: int,
    start: float,
) -> FitResult:
    lay = model.layout
    sol = problem.solve_linear(theta)
    c = sol.amplitudes
    m = c.size
    nb = problem.nb
    free_nl = ~lay.mask(list(settings.fixed))
    i_free = np.flatnonzero(free_nl)
    cols = model.derivative_columns(theta, c, sol.spectra, sol.fids, sol.phase)[:, i_free]

    # Jacobian of every residual row w.r.t. every parameter (signs do not matter in JᵀJ)
    k = model.ppm.size
    n_pen = problem.pmat.shape[0]
    n_prior = problem.prior_index.size
    n_tie = problem.lmat.shape[0]
    n_par = m + 2 * nb + i_free.size
    jac = np.zeros((2 * k + 2 * n_pen + n_tie + n_prior, n_par))
    jac[2 * k + 2 * n_pen:2 * k + 2 * n_pen + n_tie, :m] = problem.lmat
    jac[:k, :m] = sol.spectra.real
    jac[k:2 * k, :m] = sol.spectra.imag
    if nb:
        jac[:k, m:m + nb] = problem.bmat
        jac[k:2 * k, m + nb:m + 2 * nb] = problem.bmat
        jac[2 * k:2 * k + n_pen, m:m + nb] = problem.pmat
        jac[2 * k + n_pen:2 * k + 2 * n_pen, m + nb:m + 2 * nb] = problem.pmat
    jac[:k, m + 2 * nb:] = cols.real
    jac[k:2 * k, m + 2 * nb:] = cols.imag
    prior_pos = {int(j): r for r, j in enumerate(problem.prior_index)}
    for col, j in enumerate(i_free):
        if int(j) in prior_pos:
            jac[2 * k + 2 * n_pen + n_tie + prior_pos[int(j)], m + 2 * nb + col] = (
                problem.prior_weight[prior_pos[int(j)]]
            )
    fisher = (jac.T @ jac) / noise_sd**2
    cov, bad = covariance_from_fisher(fisher)

    flags: list[str] = []
    if bad.any():
        flags.append("fisher_singular")
    amp_cov = cov[:m, :m]
    sd = np.sqrt(np.clip(np.diag(amp_cov), 0.0, None))
    sd[~np.isfinite(np.diag(amp_cov))] = np.nan
    at_zero = c <= 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        pct = np.where(c > 0, 100.0 * sd / np.where(c > 0, c, 1.0), np.nan)
        corr = amp_cov / np.outer(sd, sd)
    for i in np.flatnonzero(at_zero):
        flags.append(f"at_zero_bound:{names[i]}")
    span = lay.upper - lay.lower
    for j in i_free:
        lo, hi = lay.lower[j], lay.upper[j]
        tol = 1e-6 * (span[j] if np.isfinite(span[j]) else 1.0)
        if (np.isfinite(lo) and theta[j] - lo <= tol) or (np.isfinite(hi) and hi - theta[j] <= tol):
            flags.append(f"at_bound:{lay.names[j]}")
    if not converged:
        flags.append("not_converged")

    nl_sd = {name: float("nan") for name in lay.names}
    for col, j in enumerate(i_free):
        var = cov[m + 2 * nb + col, m + 2 * nb + col]
        nl_sd[lay.names[j]] = float(np.sqrt(var)) if np.isfinite(var) and var >= 0 else np.nan
    damp, shift = model.rates(theta)
    resid = sol.residual
    chi2 = float((resid.real @ resid.real + resid.imag @ resid.imag) / noise_sd**2)
    dof = int(2 * k - n_par)
    ph_inv = np.conj(sol.phase)
    base = problem.bmat @ sol.baseline_coef if nb else np.zeros(k, dtype=complex)
    contributions = (sol.spectra * c).T * ph_inv[None, :]
    fit_all = sol.spectra @ c + base
    par_names = (
        tuple(f"amp:{n}" for n in names)
        + tuple(f"baseline_re:{i}" for i in range(nb))
        + tuple(f"baseline_im:{i}" for i in range(nb))
        + tuple(lay.names[j] for j in i_free)
    )
    par_values = np.concatenate([c, sol.baseline_coef.real, sol.baseline_coef.imag,
                                 theta[i_free]])
    fixed_names = _public_names(lay.names, names)

    def rename(name: str) -> str:
        return fixed_names.get(name, name)

    par_names = tuple(rename(n) for n in par_names)
    collapsed = collapse_reason(names, c, flags)  # converged, but on no spectrum
    if collapsed is not None:
        flags.append(f"collapsed:{collapsed}")
    flags = [f"at_bound:{rename(f.split(':', 1)[1])}" if f.startswith("at_bound:") else f
             for f in flags]
    # phase(ppm) = φ0 + 2π φ1 ν with ν = -(ppm - pivot) · MHz
    deg_per_ppm = -360.0 * theta[I_PHASE1] * model.mhz
    pivot_ppm = 0.5 * float(model.ppm.max() + model.ppm.min())
    return FitResult(
        names=names,
        kinds=kinds,
        amplitudes=c.copy(),
        crlb_sd=sd,
        crlb_percent=pct,
        covariance=amp_cov,
        correlation=corr,
        at_zero_bound=at_zero,
        combined=combine_sums(names, c, amp_cov),
        nonlinear={rename(n): float(v) for n, v in zip(lay.names, theta, strict=True)},
        nonlinear_sd={rename(n): v for n, v in nl_sd.items()},
        member_shift_hz=shift,
        member_damping_per_s=damp,
        lorentz_fwhm_hz=damp / np.pi,
        gauss_fwhm_hz=gauss_fwhm_hz(theta[I_GAUSS]),
        phase0_deg=float(np.degrees(theta[I_PHASE0])),
        phase1_deg_per_ppm=float(deg_per_ppm),
        phase1_pivot_ppm=pivot_ppm,
        parameter_names=par_names,
        parameter_values=par_values,
        parameter_covariance=cov,
        baseline_coef=sol.baseline_coef.copy(),
        noise_sd=float(noise_sd),
        noise_ppm=noise_regions,
        chi_square=chi2,
        dof=dof,
        reduced_chi_square=chi2 / dof if dof > 0 else float("nan"),
        fit_range_ppm=settings.range_ppm,
        success=bool(converged and not bad[:m].any() and collapsed is None),
        message=message,
        flags=tuple(flags),
        nfev=int(nfev),
        elapsed_s=time.perf_counter() - start,
        ppm=model.ppm.copy(),
        data=problem.y * ph_inv,
        fit=fit_all * ph_inv,
        baseline=base * ph_inv,
        residual=resid * ph_inv,
        contributions=contributions,
        spectrometer_mhz=model.mhz,
        settings=settings.to_dict(),
    )
