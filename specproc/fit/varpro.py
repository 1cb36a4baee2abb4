"""Variable projection: nonlinear parameters by least squares, linear ones solved inside.

For each trial of the nonlinear parameters θ, the amplitudes c ≥ 0 and the complex baseline
coefficients β minimise

    ||y - A(θ) c - B β||² + λ ||D₂ β||²

(stacked real and imaginary parts). β is eliminated in closed form (its normal equations are
constant), leaving a small non-negative least-squares problem in c on the normal equations,
solved by :func:`scipy.optimize.nnls` on their Cholesky factor. θ is refined by
:func:`scipy.optimize.least_squares` (trust-region reflective, bounds) on the projected
residual, with the Kaufman (1975) approximation of the Golub-Pereyra Jacobian built from the
analytic derivative columns of :class:`~specproc.fit.model.SpectralModel`; the amplitudes at
the zero bound are treated as fixed (an active constraint) in the projection. Soft priors on
nonlinear parameters are extra residual rows ``s · θ_j / sd_j`` (``s`` the noise SD of one
spectral component), so that the objective is ``s² (χ² + Σ_j θ_j² / sd_j²)``.

References
----------
.. [1] Golub GH, Pereyra V. The differentiation of pseudo-inverses and nonlinear least squares
   problems whose variables separate. SIAM J Numer Anal 1973;10:413-432.
.. [2] Kaufman L. A variable projection method for solving separable nonlinear least squares
   problems. BIT 1975;15:49-57.
.. [3] Lawson CL, Hanson RJ. Solving Least Squares Problems. Prentice-Hall 1974 (NNLS).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.optimize

from specproc.fit.model import I_PHASE0, SpectralModel

__all__ = ["LinearSolution", "VarproProblem", "coarse_search"]


@dataclass(frozen=True, eq=False)
class LinearSolution:
    """Linear part of the fit at one θ.

    Attributes
    ----------
    amplitudes : (M,) ndarray
        c ≥ 0.
    baseline_coef : (n_b,) complex ndarray
        β.
    residual : (K,) complex ndarray
        ``y - A c - B β``.
    penalty : (n_b - 2,) complex ndarray
        ``√λ D₂ β``.
    amp_penalty : (r,) ndarray
        ``L c``, the rows of the amplitude prior.
    spectra, fids, phase : ndarrays
        Member spectra A (K, M), modulated FIDs (M, N) and phase factor (K,) at θ.
    """

    amplitudes: np.ndarray
    baseline_coef: np.ndarray
    residual: np.ndarray
    penalty: np.ndarray
    amp_penalty: np.ndarray
    spectra: np.ndarray
    fids: np.ndarray
    phase: np.ndarray


class VarproProblem:
    """The separable least-squares problem of one scan and basis.

    Parameters
    ----------
    model : SpectralModel
        Precomputed model.
    data : (K,) complex ndarray
        Data spectrum on the fit range.
    baseline : (K, n_b) ndarray
        Baseline design (n_b may be 0).
    penalty_matrix : (n_b - 2, n_b) ndarray
        ``√λ D₂`` (already weighted).
    noise_sd : float
        Noise SD of one spectral component (weights the prior rows).
    amplitude_prior : (r, M) ndarray, optional
        Rows ``L`` of a zero-mean Gaussian prior on linear combinations of the amplitudes
        (already weighted: the objective gains ``||L c||²``), e.g. ties between the
        macromolecule amplitudes.
    """

    def __init__(
        self,
        model: SpectralModel,
        data: np.ndarray,
        baseline: np.ndarray,
        penalty_matrix: np.ndarray,
        noise_sd: float,
        amplitude_prior: np.ndarray | None = None,
    ) -> None:
        self.model = model
        self.y = np.asarray(data, dtype=complex)
        self.bmat = np.asarray(baseline, dtype=float)
        self.pmat = np.asarray(penalty_matrix, dtype=float)
        self.noise_sd = float(noise_sd)
        m = model.n_members
        self.lmat = (np.zeros((0, m)) if amplitude_prior is None
                     else np.asarray(amplitude_prior, dtype=float))
        self.ltl = self.lmat.T @ self.lmat
        nb = self.bmat.shape[1]
        self.nb = nb
        if nb:
            h = self.bmat.T @ self.bmat + self.pmat.T @ self.pmat
            try:
                self.chol_b = scipy.linalg.cholesky(h, lower=True)
            except np.linalg.LinAlgError:  # too few points for the knots and no penalty
                ridge = 1e-10 * float(np.trace(h)) / nb
                self.chol_b = scipy.linalg.cholesky(h + ridge * np.eye(nb), lower=True)
            self.q = scipy.linalg.solve_triangular(self.chol_b, self.bmat.T, lower=True)
        else:
            self.chol_b = np.zeros((0, 0))
            self.q = np.zeros((0, self.y.size))
        self.qy = self.q @ self.y
        prior = model.layout.prior_sd
        self.prior_index = np.flatnonzero(np.isfinite(prior))
        self.prior_weight = self.noise_sd / prior[self.prior_index]
        self._cache_key: bytes | None = None
        self._cache: LinearSolution | None = None

    # ------------------------------------------------------------------ linear part
    def _baseline_from(self, rb: np.ndarray) -> np.ndarray:
        if not self.nb:
            return np.zeros((0, *rb.shape[1:]), dtype=complex)
        return scipy.linalg.solve_triangular(self.chol_b, rb, lower=True, trans="T")

    def reduced_normal(
        self, spectra: np.ndarray, members: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Normal equations of c with β eliminated: G (M, M), h (M,), and Q A (n_b, M).

        ``spectra`` are the columns of all members, or of the members selected by the boolean
        mask ``members``; G includes the amplitude prior ``LᵀL`` of those members.
        """
        qa = self.q @ spectra
        g = (spectra.conj().T @ spectra).real - (qa.conj().T @ qa).real
        if self.lmat.shape[0]:
            g = g + (self.ltl if members is None else self.ltl[np.ix_(members, members)])
        h = (spectra.conj().T @ self.y).real - (qa.conj().T @ self.qy).real
        return g, h, qa

    def solve_linear(self, theta: np.ndarray) -> LinearSolution:
        """Amplitudes c ≥ 0 and baseline β at θ (cached for the last θ)."""
        key = np.asarray(theta, dtype=float).tobytes()
        if key == self._cache_key and self._cache is not None:
            return self._cache
        spectra, fids, phase = self.model.member_spectra(theta)
        sol = self.solve_given(spectra, fids, phase)
        self._cache_key, self._cache = key, sol
        return sol

    def solve_given(
        self, spectra: np.ndarray, fids: np.ndarray, phase: np.ndarray
    ) -> LinearSolution:
        """Amplitudes c ≥ 0 and baseline β for given member spectra A (K, M) (no cache)."""
        g, h, qa = self.reduced_normal(spectra)
        c = _nnls_normal(g, h)
        rb = self.qy - qa @ c
        beta = self._baseline_from(rb)
        residual = self.y - spectra @ c - (self.bmat @ beta if self.nb else 0.0)
        penalty = self.pmat @ beta if self.nb else np.zeros(0, dtype=complex)
        return LinearSolution(c, beta, residual, penalty, self.lmat @ c, spectra, fids, phase)

    def effective_dof(self, sol: LinearSolution) -> float:
        """Effective number of linear parameters ``tr((XᵀX + PᵀP + LᵀL)⁻¹ XᵀX)`` at a solution.

        ``X`` is the real design of the free amplitudes (c > 0) and of the real and imaginary
        baseline coefficients, ``P`` the penalty; the trace of the hat matrix of the penalised
        linear fit (Hastie & Tibshirani, Generalized Additive Models, 1990, ch. 3).
        """
        a = sol.spectra[:, sol.amplitudes > 0]
        nf, nb = a.shape[1], self.nb
        if not nb and not self.lmat.shape[0]:
            return float(nf)
        btb = self.bmat.T @ self.bmat
        ptp = self.pmat.T @ self.pmat
        bta = self.bmat.T @ a  # (nb, nf) complex: B real, so Re/Im parts separate
        xtx = np.zeros((nf + 2 * nb, nf + 2 * nb))
        xtx[:nf, :nf] = (a.conj().T @ a).real
        xtx[:nf, nf:nf + nb] = bta.real.T
        xtx[:nf, nf + nb:] = bta.imag.T
        xtx[nf:nf + nb, :nf] = bta.real
        xtx[nf + nb:, :nf] = bta.imag
        xtx[nf:nf + nb, nf:nf + nb] = btb
        xtx[nf + nb:, nf + nb:] = btb
        h = xtx.copy()
        free = sol.amplitudes > 0
        h[:nf, :nf] += self.ltl[np.ix_(free, free)]
        h[nf:nf + nb, nf:nf + nb] += ptp
        h[nf + nb:, nf + nb:] += ptp
        return float(np.trace(_solve_psd(h, xtx)))

    # ------------------------------------------------------------------ residual, Jacobian
    def residual_vector(self, theta: np.ndarray) -> np.ndarray:
        """Real residual: data (re, im), baseline penalty (re, im), prior rows."""
        sol = self.solve_linear(theta)
        prior = self.prior_weight * theta[self.prior_index]
        return np.concatenate(
            [sol.residual.real, sol.residual.imag, sol.penalty.real, sol.penalty.imag,
             sol.amp_penalty, prior]
        )

    def objective(self, theta: np.ndarray) -> float:
        """Sum of squares of :meth:`residual_vector`."""
        r = self.residual_vector(theta)
        return float(r @ r)

    def jacobian(self, theta: np.ndarray, columns: np.ndarray | None = None) -> np.ndarray:
        """Kaufman Jacobian of :meth:`residual_vector` w.r.t. the nonlinear parameters.

        Parameters
        ----------
        columns : (q,) int ndarray, optional
            Parameters to differentiate (default: all); the result has q columns.
        """
        sol = self.solve_linear(theta)
        lay = self.model.layout
        if columns is None:
            columns = np.arange(lay.size)
        member = np.isin(columns, np.concatenate([lay.i_dshift, lay.i_ddamp])).any()
        cols = self.model.derivative_columns(theta, sol.amplitudes, sol.spectra, sol.fids,
                                             sol.phase, member_level=bool(member))[:, columns]
        free = sol.amplitudes > 0
        a_f = sol.spectra[:, free]
        v = cols
        amp_rows = np.zeros((self.lmat.shape[0], v.shape[1]))
        if a_f.shape[1] or self.nb:
            g, _, qa = self.reduced_normal(a_f, free)
            qv = self.q @ v
            hv = (a_f.conj().T @ v).real - (qa.conj().T @ qv).real
            cv = _solve_psd(g, hv)
            bv = self._baseline_from(qv - qa @ cv)
            proj = v - a_f @ cv - (self.bmat @ bv if self.nb else 0.0)
            pen = self.pmat @ bv if self.nb else np.zeros((0, v.shape[1]), dtype=complex)
            amp_rows = -(self.lmat[:, free] @ cv)
        else:
            proj = v
            pen = np.zeros((0, v.shape[1]), dtype=complex)
        n_prior = self.prior_index.size
        prior_rows = np.zeros((n_prior, v.shape[1]))
        where = {int(j): q for q, j in enumerate(columns)}
        for r, j in enumerate(self.prior_index):
            if int(j) in where:
                prior_rows[r, where[int(j)]] = self.prior_weight[r]
        return np.vstack([-proj.real, -proj.imag, -pen.real, -pen.imag, amp_rows, prior_rows])

    # ------------------------------------------------------------------ optimisation
    def refine(
        self, theta: np.ndarray, free: np.ndarray, *, max_nfev: int, tight: bool = True
    ) -> tuple[np.ndarray, scipy.optimize.OptimizeResult | None]:
        """Refine the free entries of θ by trust-region least squares (bounds respected)."""
        theta = np.array(theta, dtype=float)
        idx = np.flatnonzero(free)
        if idx.size == 0:
            return theta, None
        lay = self.model.layout
        lower, upper = lay.lower[idx], lay.upper[idx]
        x0 = np.clip(theta[idx], lower, upper)
        # keep strictly inside finite bounds (trf needs a feasible interior start)
        span = np.where(np.isfinite(upper - lower), upper - lower, 1.0)
        x0 = np.clip(x0, lower + 1e-9 * span, upper - 1e-9 * span)

        def full(x: np.ndarray) -> np.ndarray:
            th = theta.copy()
            th[idx] = x
            return th

        def fun(x: np.ndarray) -> np.ndarray:
            return self.residual_vector(full(x))

        def jac(x: np.ndarray) -> np.ndarray:
            return self.jacobian(full(x), idx)

        # ftol 1e-6: a step changing χ² (≈ 2K) by less than ~1e-3 ends the fit, far below what
        # matters statistically (parameters move by < 0.03 SD); at zero residual (noiseless
        # data) the convergence is quadratic and xtol/gtol decide.
        ftol, xtol = (1e-6, 1e-10) if tight else (1e-5, 1e-5)
        res = scipy.optimize.least_squares(
            fun, x0, jac=jac, bounds=(lower, upper), method="trf", x_scale="jac",
            ftol=ftol, xtol=xtol, gtol=xtol, max_nfev=max_nfev,
        )
        return full(res.x), res


def _nnls_normal(g: np.ndarray, h: np.ndarray) -> np.ndarray:
    """min cᵀ G c - 2 hᵀ c subject to c ≥ 0 (G symmetric PSD), via NNLS on a Cholesky factor."""
    m = h.size
    d = np.sqrt(np.clip(np.diag(g), 0.0, None))
    ok = d > 1e-300 * max(1.0, float(d.max(initial=0.0)))
    c = np.zeros(m)
    if not ok.any():
        return c
    gs = g[np.ix_(ok, ok)] / np.outer(d[ok], d[ok])
    hs = h[ok] / d[ok]
    k = gs.shape[0]
    try:
        r = scipy.linalg.cholesky(gs + 1e-13 * np.eye(k), lower=False)
    except np.linalg.LinAlgError:
        w, v = np.linalg.eigh(gs)
        w = np.clip(w, 1e-13 * max(w.max(), 1e-300), None)
        r = (v * np.sqrt(w)).T
        z = np.linalg.lstsq(r.T, hs, rcond=None)[0]
    else:
        z = scipy.linalg.solve_triangular(r, hs, trans="T")
    cs, _ = scipy.optimize.nnls(r, z, maxiter=50 * k)
    c[ok] = cs / d[ok]
    return c


def _solve_psd(g: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Solve G x = h for symmetric PSD G (least-norm solution when singular)."""
    if g.shape[0] == 0:
        return np.zeros((0, *h.shape[1:]))
    d = np.sqrt(np.clip(np.diag(g), 1e-300, None))
    gs = g / np.outer(d, d)
    try:
        cf = scipy.linalg.cho_factor(gs + 1e-13 * np.eye(g.shape[0]))
        x = scipy.linalg.cho_solve(cf, h / d[:, None])
    except np.linalg.LinAlgError:
        x = np.linalg.lstsq(gs, h / d[:, None], rcond=1e-12)[0]
    return x / d[:, None]


def coarse_search(
    model: SpectralModel,
    data: np.ndarray,
    theta: np.ndarray,
    *,
    search_hz: float,
    shift_free: bool = True,
    phase_free: bool = True,
) -> np.ndarray:
    """Coarse common frequency shift and zero-order phase by cross-correlation.

    The first differences (along frequency) of the data and of the sum of the basis members
    (broadened as in ``theta``, full spectrum) are correlated over whole-bin shifts within
    ``±search_hz``; the maximum of ``|C|`` (refined by a parabola through its neighbours) gives
    the shift and ``-arg C`` the phase. Differencing suppresses smooth baselines.

    Returns
    -------
    (p,) ndarray
        ``theta`` with the group shifts and ``phase0_rad`` set.
    """
    theta = np.array(theta, dtype=float)
    lay = model.layout
    base = theta.copy()
    if shift_free:
        base[lay.i_shift] = 0.0
    template = np.fft.fftshift(scipy.fft.fft(model.member_fids(base).sum(axis=0), workers=1))
    n = template.size
    df = 1.0 / (n * (model.time_s[1] - model.time_s[0]))
    pos = (model.index + n // 2) % n  # fit-range positions in fftshift order
    max_bins = int(search_hz // df) if shift_free else 0
    bins = np.arange(-max_bins, max_bins + 1)
    # a shift of +δ Hz (exp(-2πiδt)) moves the template to lower frequency: T_s[j] = T[j + s]
    rows = np.clip(pos[None, :] + bins[:, None], 0, n - 1)
    dt_ = np.diff(template[rows], axis=1)  # (n_bins, K-1)
    dy = np.diff(data)
    corr = dt_ @ dy.conj()  # C(s) = Σ conj(dY) dT_s
    best = int(np.argmax(np.abs(corr)))
    shift = bins[best] * df
    if 0 < best < bins.size - 1:
        a, b, c = np.abs(corr[best - 1 : best + 2])
        denom = a - 2 * b + c
        frac = 0.5 * (a - c) / denom if denom != 0 else 0.0
        shift += float(np.clip(frac, -0.5, 0.5)) * df
    if shift_free:
        theta[lay.i_shift] = shift
    if phase_free:
        theta[I_PHASE0] = -float(np.angle(corr[best]))
    return theta
