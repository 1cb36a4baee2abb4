"""The spectral model of the linear-combination fit and its derivatives.

Model (frequency domain, fit-range points ν_k, Hz)::

    S(ν) = exp(i(φ0 + 2π (ν - ν_p) φ1)) · Σ_m c_m · F{ b_m(t) · exp(-(γ_m + 2πi δ_m) t)
                                                     · exp(-σ² t²) }(ν)  +  B(ν)

* ``F{x}`` is the DFT in the order of :meth:`specproc.data.Scan.spectrum`
  (``fftshift(fft(x))``), without zero filling; ``ν`` is the frequency relative to the receiver
  centre, so that ``ppm = centre_ppm - ν / MHz`` (NIfTI-MRS convention), and ``ν_p`` that of the
  centre of the fit range (the pivot of the first-order phase; ``φ1`` in s).
* ``b_m`` are the basis FIDs resampled to the scan; ``c_m ≥ 0`` the amplitudes.
* ``γ_m = γ_g(m) + γ⁰_m + Δγ_m`` (s⁻¹; Lorentzian FWHM γ/π Hz) and ``δ_m = δ_h(m) + Δδ_m``
  (Hz): ``γ_g`` and ``δ_h`` are shared within damping groups ``g`` and shift groups ``h``;
  ``γ⁰_m`` is the expected intrinsic damping of the member, ``1 / T2_m`` from the relaxation
  table at the scan's field (setting ``width_prior = "relaxation"``; 0 otherwise), so that
  ``γ_g`` is the broadening beyond T2 that all metabolites share; the per-member deviations
  ``Δ`` are held by zero-mean Gaussian priors (SD ``damping_sd_hz``, ``shift_sd_hz`` and, for
  macromolecules, ``mm_shift_sd_ppm``). Members named by ``separate_damping`` (default: the
  macromolecules) form damping groups of one member each, bounded and without a prior.
  **Sign**: with the NIfTI-MRS convention a line at shift δ_ppm evolves as
  ``exp(-2πi (δ_ppm - centre_ppm) MHz t)``, so the factor ``exp(-2πi δ_m t)`` moves member m to
  *higher* ppm by ``δ_m / MHz``: a positive shift in Hz means a line further left in the plot.
* ``σ²`` (s⁻², parameter ``gauss_s2``) is a Gaussian broadening shared by all members
  (FWHM ``2 √(ln 2) σ / π`` Hz).
* ``B`` is the cubic B-spline baseline of :mod:`specproc.fit.baseline`.
"""

from __future__ import annotations

import fnmatch
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft

from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.fit.settings import FitSettings, MemberGroup

__all__ = [
    "NonlinearLayout",
    "SpectralModel",
    "assign_groups",
    "basis_on_scan",
    "build_model",
    "expected_damping",
    "gauss_fwhm_hz",
    "lorentz_fwhm_hz",
    "matches",
]

_GAUSS_FWHM_PER_SIGMA = 2.0 * np.sqrt(np.log(2.0)) / np.pi  # FWHM (Hz) = this · σ (s⁻¹)


def lorentz_fwhm_hz(damping_per_s: float) -> float:
    """Lorentzian FWHM (Hz) of the damping ``exp(-γ t)``: γ / π."""
    return float(damping_per_s) / np.pi


def gauss_fwhm_hz(gauss_s2: float) -> float:
    """Gaussian FWHM (Hz) of ``exp(-σ² t²)`` given σ² in s⁻²: 2 √(ln 2) σ / π."""
    return _GAUSS_FWHM_PER_SIGMA * float(np.sqrt(max(gauss_s2, 0.0)))


def _gauss_s2_from_fwhm(fwhm_hz: float) -> float:
    return (float(fwhm_hz) / _GAUSS_FWHM_PER_SIGMA) ** 2


def matches(name: str, kind: str, patterns: Sequence[str]) -> bool:
    """Whether a member matches one of ``patterns``: a name or shell-style pattern of names
    (``"*"``, ``"MM*"``; case-insensitive) or ``"kind:<kind>"``."""
    for pattern in patterns:
        p = pattern.lower()
        if p == f"kind:{kind.lower()}" or fnmatch.fnmatchcase(name.lower(), p):
            return True
    return False


def assign_groups(
    names: Sequence[str], kinds: Sequence[str], groups: Sequence[MemberGroup], what: str
) -> np.ndarray:
    """Index of the group of each member: the first group with a matching pattern.

    Raises
    ------
    InvalidInputError
        When a member matches no group.
    """
    out = np.full(len(names), -1, dtype=int)
    for m, (name, kind) in enumerate(zip(names, kinds, strict=True)):
        for g, group in enumerate(groups):
            if matches(name, kind, group.members):
                out[m] = g
                break
        if out[m] < 0:
            raise InvalidInputError(f"basis member {name!r} belongs to no fit {what} group")
    return out


def _resample_fids(
    fids: np.ndarray, dwell_b: float, dwell_s: float, n_points: int
) -> np.ndarray:
    """Resampling of FIDs from ``dwell_b`` to ``dwell_s`` (private fallback).

    For a whole-number ratio of the dwell times every k-th sample is taken (what a sampler at
    the coarser rate records); otherwise the basis spectrum (DFT of the basis FID) is cropped
    to the scan's bandwidth and the inverse DFT evaluated at ``t_n = n · dwell_s``; valid while
    the scan's duration does not exceed the basis duration.
    """
    n_b = fids.shape[1]
    if abs(dwell_b - dwell_s) <= 1e-9 * dwell_s:
        if n_b < n_points:
            raise InvalidInputError(
                f"the basis has {n_b} points, fewer than the scan's {n_points}"
            )
        return fids[:, :n_points].copy()
    if dwell_b > dwell_s * (1 + 1e-9):
        raise InvalidInputError(
            f"the basis bandwidth {1 / dwell_b:.1f} Hz is narrower than the scan's "
            f"{1 / dwell_s:.1f} Hz"
        )
    if n_points * dwell_s > n_b * dwell_b * (1 + 1e-9):
        raise InvalidInputError(
            f"the basis lasts {n_b * dwell_b:.4f} s, shorter than the scan's "
            f"{n_points * dwell_s:.4f} s"
        )
    ratio = dwell_s / dwell_b
    step = round(ratio)
    if abs(ratio - step) <= 1e-9 * ratio:  # whole-number ratio: take every step-th sample
        return fids[:, ::step][:, :n_points].copy()
    spectrum = np.fft.fft(fids, axis=1)
    freq = np.fft.fftfreq(n_b, dwell_b)
    keep = np.abs(freq) < 0.5 / dwell_s
    t = np.arange(n_points) * dwell_s
    kernel = np.exp(2j * np.pi * np.outer(freq[keep], t))
    return (spectrum[:, keep] @ kernel) / n_b


def basis_on_scan(basis: BasisSet, scan: Scan) -> np.ndarray:
    """Basis FIDs on the scan's time grid and centre, shape (n_members, n_points).

    The FIDs are used as they are when the grids agree (same dwell and centre, at least as
    many points); otherwise :meth:`BasisSet.resample` is used when it exists, else a private
    band-limited resampling and a frequency shift for a different receiver centre.
    """
    resample = getattr(basis, "resample", None)
    same_grid = (
        abs(basis.dwell_s - scan.dwell_s) <= 1e-9 * scan.dwell_s
        and abs(basis.centre_ppm - scan.reference_ppm) <= 1e-12
        and basis.n_points >= scan.n_points
    )
    if same_grid:
        return np.array(basis.fids[:, : scan.n_points])
    if callable(resample):
        out = resample(dwell_s=scan.dwell_s, n_points=scan.n_points,
                       centre_ppm=scan.reference_ppm)
        return np.asarray(out.fids)
    fids = np.asarray(basis.fids)
    d_centre = basis.centre_ppm - scan.reference_ppm
    if d_centre != 0.0:
        t_b = np.arange(basis.n_points) * basis.dwell_s
        fids = fids * np.exp(-2j * np.pi * d_centre * basis.spectrometer_mhz * t_b)
    return _resample_fids(fids, basis.dwell_s, scan.dwell_s, scan.n_points)


@dataclass(frozen=True)
class NonlinearLayout:
    """Names, bounds and roles of the nonlinear parameters.

    Attributes
    ----------
    names : tuple of str
        Parameter names: ``phase0_rad``, ``phase1_s``, ``gauss_s2``, ``damping_<group>_per_s``,
        ``shift_<group>_hz``, then ``dshift_<k>_hz`` / ``ddamping_<k>_per_s`` per member k.
    families : tuple of str
        Family of each parameter (see :data:`specproc.fit.settings.FIXABLE`).
    lower, upper : (p,) ndarray
        Bounds.
    prior_sd : (p,) ndarray
        SD of the zero-mean Gaussian prior of each parameter (``inf``: none).
    damping_group, shift_group : (n_members,) int ndarray
        Group index of each member.
    i_damp, i_shift : int ndarray
        Positions of the group dampings and group shifts in θ.
    i_ddamp, i_dshift : int ndarray
        Positions of the per-member damping and shift deviations in θ.
    ddamp_member, dshift_member : int ndarray
        The member of each of those deviations.
    i_damp_separate : int ndarray
        Positions in θ of the dampings of the members damped separately (a subset of
        ``i_damp``).
    """

    names: tuple[str, ...]
    families: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    prior_sd: np.ndarray
    damping_group: np.ndarray
    shift_group: np.ndarray
    i_damp: np.ndarray
    i_shift: np.ndarray
    i_ddamp: np.ndarray
    i_dshift: np.ndarray
    ddamp_member: np.ndarray
    dshift_member: np.ndarray
    i_damp_separate: np.ndarray

    @property
    def size(self) -> int:
        """Number of nonlinear parameters."""
        return len(self.names)

    def mask(self, families: Sequence[str]) -> np.ndarray:
        """Boolean mask of the parameters whose family is in ``families``."""
        return np.array([f in families for f in self.families], dtype=bool)


I_PHASE0, I_PHASE1, I_GAUSS = 0, 1, 2


def _make_layout(
    damping_group: np.ndarray,
    shift_group: np.ndarray,
    damping_names: Sequence[str],
    shift_names: Sequence[str],
    shift_sd_hz: np.ndarray,
    damping_sd_per_s: np.ndarray,
    damping_offset: np.ndarray,
    n_separate: int,
    settings: FitSettings,
    mhz: float,
) -> NonlinearLayout:
    names = ["phase0_rad", "phase1_s", "gauss_s2"]
    families = ["phase0", "phase1", "gauss"]
    lower = [-np.inf, -np.inf, 0.0]
    upper = [np.inf, np.inf, _gauss_s2_from_fwhm(settings.max_gauss_hz)]
    prior = [np.inf, np.inf, np.inf]
    max_damp = np.pi * settings.max_lorentz_hz
    limit_hz = settings.shift_limit_ppm * mhz
    i_damp, i_shift, i_ddamp, i_dshift = [], [], [], []
    ddamp_member, dshift_member = [], []
    sep_sd = np.pi * settings.separate_damping_sd_hz
    for k, g in enumerate(damping_names):
        i_damp.append(len(names))
        names.append(f"damping_{g}_per_s")
        families.append("damping")
        lower.append(0.0)
        upper.append(max_damp)
        separate = k >= len(damping_names) - n_separate
        prior.append(sep_sd if separate and sep_sd > 0 else np.inf)
    for g in shift_names:
        i_shift.append(len(names))
        names.append(f"shift_{g}_hz")
        families.append("shift")
        lower.append(-limit_hz)
        upper.append(limit_hz)
        prior.append(np.inf)
    for m in np.flatnonzero(shift_sd_hz > 0):
        i_dshift.append(len(names))
        dshift_member.append(m)
        names.append(f"dshift_{m}_hz")
        families.append("shift_dev")
        lower.append(-4.0 * shift_sd_hz[m])
        upper.append(4.0 * shift_sd_hz[m])
        prior.append(shift_sd_hz[m])
    for m in np.flatnonzero(damping_sd_per_s > 0):
        # the setting is a Lorentzian FWHM in Hz; the parameter a damping rate γ = π·FWHM, s⁻¹
        sd = damping_sd_per_s[m]
        i_ddamp.append(len(names))
        ddamp_member.append(m)
        names.append(f"ddamping_{m}_per_s")
        families.append("damping_dev")
        # with an expected damping γ⁰ > 0 the bound -γ⁰ keeps the member's damping >= 0
        lower.append(-min(4.0 * sd, damping_offset[m]) if damping_offset[m] > 0 else -4.0 * sd)
        upper.append(4.0 * sd)
        prior.append(sd)
    as_int = lambda x: np.array(x, dtype=int)  # noqa: E731
    return NonlinearLayout(
        names=tuple(names),
        families=tuple(families),
        lower=np.array(lower, dtype=float),
        upper=np.array(upper, dtype=float),
        prior_sd=np.array(prior, dtype=float),
        damping_group=as_int(damping_group),
        shift_group=as_int(shift_group),
        i_damp=as_int(i_damp),
        i_shift=as_int(i_shift),
        i_ddamp=as_int(i_ddamp),
        i_dshift=as_int(i_dshift),
        ddamp_member=as_int(ddamp_member),
        dshift_member=as_int(dshift_member),
        i_damp_separate=as_int(i_damp[len(i_damp) - n_separate:]),
    )


@dataclass(frozen=True, eq=False)
class SpectralModel:
    """Everything about the model that does not change during a fit (precomputed arrays).

    Attributes
    ----------
    fids : (M, N) complex ndarray
        Basis FIDs on the scan's grid.
    time_s : (N,) ndarray
        Sample times, s.
    index : (K,) int ndarray
        Positions of the fit-range points in the *unshifted* DFT output.
    ppm : (K,) ndarray
        Chemical shift of the fit-range points (decreasing), ppm.
    nu_hz : (K,) ndarray
        Frequency of the fit-range points relative to the phase pivot, Hz.
    mhz : float
        Spectrometer frequency, MHz.
    layout : NonlinearLayout
        Nonlinear parameters.
    group_damp, group_shift : (M, G) ndarray
        One-hot membership matrices of the damping and shift groups.
    damping_offset : (M,) ndarray
        Expected intrinsic damping γ⁰_m of each member, s⁻¹ (zeros without a width prior).
    """

    fids: np.ndarray
    time_s: np.ndarray
    index: np.ndarray
    ppm: np.ndarray
    nu_hz: np.ndarray
    mhz: float
    layout: NonlinearLayout
    group_damp: np.ndarray
    group_shift: np.ndarray
    damping_offset: np.ndarray

    @property
    def n_members(self) -> int:
        """Number of basis members M."""
        return int(self.fids.shape[0])

    def rates(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per-member damping γ_m (s⁻¹) and shift δ_m (Hz)."""
        lay = self.layout
        damp = theta[lay.i_damp][lay.damping_group] + self.damping_offset
        shift = theta[lay.i_shift][lay.shift_group]
        if lay.i_ddamp.size:
            damp[lay.ddamp_member] += theta[lay.i_ddamp]
        if lay.i_dshift.size:
            shift[lay.dshift_member] += theta[lay.i_dshift]
        return damp, shift

    def member_fids(self, theta: np.ndarray) -> np.ndarray:
        """Modulated member FIDs ``b_m(t) exp(-(γ_m + 2πi δ_m) t - σ² t²)``, shape (M, N)."""
        damp, shift = self.rates(theta)
        decay = _geometric_rows(-(damp + 2j * np.pi * shift) * (self.time_s[1] - self.time_s[0]),
                                self.time_s.size)
        gauss = np.exp(-theta[I_GAUSS] * (self.time_s * self.time_s))
        return self.fids * (decay * gauss)

    def phase(self, theta: np.ndarray) -> np.ndarray:
        """Phase factor ``exp(i(φ0 + 2π ν φ1))`` on the fit range, shape (K,)."""
        return np.exp(1j * (theta[I_PHASE0] + 2.0 * np.pi * self.nu_hz * theta[I_PHASE1]))

    def to_range(self, x: np.ndarray, phase: np.ndarray) -> np.ndarray:
        """DFT of the rows of ``x`` (..., N) on the fit range times ``phase``: (K, ...)."""
        spec = scipy.fft.fft(x, axis=-1, workers=1)[..., self.index]
        return (spec * phase).T

    def member_spectra(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Member spectra A (K, M) on the fit range, with the FIDs X (M, N) and the phase."""
        x = self.member_fids(theta)
        ph = self.phase(theta)
        return self.to_range(x, ph), x, ph

    def derivative_columns(
        self,
        theta: np.ndarray,
        amplitudes: np.ndarray,
        spectra: np.ndarray,
        fids: np.ndarray,
        phase: np.ndarray,
        *,
        member_level: bool = True,
    ) -> np.ndarray:
        """∂(A c)/∂θ_j for every nonlinear parameter, shape (K, p) complex.

        With ``member_level=False`` the columns of the per-member deviations are left at zero
        (cheaper: one DFT per group instead of one per member).

        Analytic: ∂/∂γ_m brings a factor ``-t``, ∂/∂δ_m ``-2πi t``, ∂/∂σ² ``-t²``,
        ∂/∂φ0 ``i`` and ∂/∂φ1 ``2πi ν``.
        """
        lay = self.layout
        c = amplitudes
        t = self.time_s
        total = spectra @ c
        cols = np.zeros((spectra.shape[0], lay.size), dtype=complex)
        cols[:, I_PHASE0] = 1j * total
        cols[:, I_PHASE1] = 2j * np.pi * self.nu_hz * total
        cols[:, I_GAUSS] = -self.to_range((t * t) * (c @ fids), phase)
        need_member = member_level and (lay.i_ddamp.size or lay.i_dshift.size)
        if need_member:
            tspec = self.to_range(fids * t, phase) * c  # (K, M): F{t x_m} c_m
            cols[:, lay.i_damp] = -(tspec @ self.group_damp)
            cols[:, lay.i_shift] = -2j * np.pi * (tspec @ self.group_shift)
            if lay.i_ddamp.size:
                cols[:, lay.i_ddamp] = -tspec[:, lay.ddamp_member]
            if lay.i_dshift.size:
                cols[:, lay.i_dshift] = -2j * np.pi * tspec[:, lay.dshift_member]
        else:
            # groups only: one DFT per group of Σ_{m∈g} c_m t x_m
            gd = self.group_damp.T * c  # (G, M)
            gs = self.group_shift.T * c
            tx = fids * t
            cols[:, lay.i_damp] = -self.to_range(gd @ tx, phase)
            cols[:, lay.i_shift] = -2j * np.pi * self.to_range(gs @ tx, phase)
        return cols


def _geometric_rows(log_ratio: np.ndarray, n: int) -> np.ndarray:
    """``exp(log_ratio[m] · k)`` for k = 0..n-1, shape (M, n), with ~2√n complex exponentials.

    Written as ``exp(r · (b·j)) · exp(r · i)`` for ``k = b·j + i``; exact to rounding.
    """
    block = max(1, int(np.ceil(np.sqrt(n))))
    n_blocks = -(-n // block)
    inner = np.exp(np.outer(log_ratio, np.arange(block)))
    outer = np.exp(np.outer(log_ratio, block * np.arange(n_blocks)))
    return (outer[:, :, None] * inner[:, None, :]).reshape(log_ratio.size, -1)[:, :n]


def fit_indices(scan: Scan, range_ppm: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Shifted-order indices and ppm of the spectral points inside ``range_ppm``.

    Raises
    ------
    InvalidInputError
        When the range is not inside the spectrum or holds fewer than 8 points.
    """
    ppm = scan.ppm()
    lo, hi = range_ppm
    tol = 1e-9 * max(1.0, abs(ppm[0]))
    if lo < ppm.min() - tol or hi > ppm.max() + tol:
        raise InvalidInputError(
            f"fit range {lo:g}-{hi:g} ppm is outside the spectrum "
            f"({ppm.min():.3f} to {ppm.max():.3f} ppm)",
            scan.source,
        )
    sel = np.flatnonzero((ppm >= lo - tol) & (ppm <= hi + tol))
    if sel.size < 8:
        raise InvalidInputError(
            f"fit range {lo:g}-{hi:g} ppm holds only {sel.size} spectral points", scan.source
        )
    return sel, ppm[sel]


def expected_damping(
    names: Sequence[str], kinds: Sequence[str], field_t: float, relaxation: Any = None
) -> np.ndarray:
    """Intrinsic Lorentzian damping ``1 / T2`` (s⁻¹) of each metabolite member at ``field_t``.

    T2 comes from ``relaxation`` (a :class:`specproc.quantify.RelaxationTimes`) or, when None,
    from the project's relaxation table at ``field_t``; members not of kind ``"metabolite"``
    get 0. The line width of a metabolite is ``1 / (π T2)`` plus the broadening of the field
    inhomogeneity, which all metabolites share (de Graaf, In Vivo NMR Spectroscopy, 3rd ed.
    2019, ch. 1, from memory).
    """
    if relaxation is None:
        from specproc.quantify import load_relaxation_times

        relaxation = load_relaxation_times(field_t)
    out = np.zeros(len(names))
    for m, (name, kind) in enumerate(zip(names, kinds, strict=True)):
        if kind == "metabolite":
            out[m] = 1.0 / float(relaxation.metabolite(name).t2_s)
    return out


def build_model(
    scan: Scan, fids: np.ndarray, names: Sequence[str], kinds: Sequence[str],
    settings: FitSettings, *, relaxation: Any = None,
) -> SpectralModel:
    """Precompute the :class:`SpectralModel` of a scan and basis FIDs on its grid.

    ``relaxation`` (a :class:`specproc.quantify.RelaxationTimes`) gives the T2 of the width
    prior; default: the relaxation table at the scan's field.
    """
    n = scan.n_points
    m = len(names)
    sel, ppm = fit_indices(scan, settings.range_ppm)
    index = (sel - n // 2) % n  # fftshift position j holds unshifted bin (j - n//2) mod n
    freq = scan.freq_hz()[sel]
    pivot = 0.5 * (freq.min() + freq.max())
    separate = np.array([matches(nm, kd, settings.separate_damping)
                         for nm, kd in zip(names, kinds, strict=True)], dtype=bool)
    dg = np.full(m, -1, dtype=int)
    shared = np.flatnonzero(~separate)
    if shared.size:
        dg[shared] = assign_groups([names[int(i)] for i in shared],
                                   [kinds[int(i)] for i in shared],
                                   settings.damping_groups, "damping")
    sg = assign_groups(names, kinds, settings.shift_groups, "shift")
    # groups without members get no parameter; each separately damped member is a group
    used_d = np.unique(dg[shared])
    damping_names = [settings.damping_groups[i].name for i in used_d]
    dg[shared] = np.searchsorted(used_d, dg[shared])
    for k, i in enumerate(np.flatnonzero(separate)):
        dg[i] = used_d.size + k
        damping_names.append(f"member{i}")
    used_s, sg = np.unique(sg, return_inverse=True)
    shift_names = [settings.shift_groups[i].name for i in used_s]
    is_mm = np.array([k == "macromolecule" for k in kinds], dtype=bool)
    mhz = scan.spectrometer_mhz
    shift_sd = np.where(is_mm, settings.mm_shift_sd_ppm * mhz, settings.shift_sd_hz)
    damping_sd = np.where(separate, 0.0, np.pi * settings.damping_sd_hz)
    offset = np.zeros(m)
    if settings.width_prior == "relaxation":
        offset = np.where(separate, 0.0,
                          expected_damping(names, kinds, scan.field_t, relaxation))
    layout = _make_layout(dg, sg, damping_names, shift_names, shift_sd, damping_sd, offset,
                          int(separate.sum()), settings, mhz)
    group_damp = np.zeros((m, len(damping_names)))
    group_damp[np.arange(m), dg] = 1.0
    group_shift = np.zeros((m, used_s.size))
    group_shift[np.arange(m), sg] = 1.0
    return SpectralModel(
        fids=np.ascontiguousarray(fids, dtype=complex),
        time_s=scan.time_s(),
        index=index,
        ppm=ppm,
        nu_hz=freq - pivot,
        mhz=mhz,
        layout=layout,
        group_damp=group_damp,
        group_shift=group_shift,
        damping_offset=offset,
    )


def start_values(model: SpectralModel, settings: FitSettings) -> np.ndarray:
    """Starting nonlinear parameters from the settings (phases 0, no shift)."""
    theta = np.zeros(model.layout.size)
    theta[I_GAUSS] = _gauss_s2_from_fwhm(settings.start_gauss_hz)
    theta[model.layout.i_damp] = np.pi * settings.start_lorentz_hz
    return theta
