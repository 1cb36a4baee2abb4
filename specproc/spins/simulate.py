"""Density-matrix simulation of metabolite signals as lists of spectral lines.

The density operator starts at thermal equilibrium (deviation ``ρ0 = F_z``), goes through the
events of a :class:`~specproc.spins.sequences.Sequence` — ideal pulses ``ρ → R ρ R†`` followed
by a coherence-order filter, and free precession under the full Hamiltonian — and is then
acquired. Because the Hamiltonian is diagonalised once per spin system, the acquired signal is
an exact sum of lines

    s(t) = Σ_ab A_ab exp(-2πi ν_ab t),   ν_ab = (E_a - E_b) / 2π,

over the p = -1 elements (a, b) of the final density matrix in the eigenbasis, with amplitude
``A_ab = ρ_ab (F+)_ba``. Any dwell time and number of points are then a cheap synthesis
(:func:`synthesize_fid`). Lines are returned in the NIfTI-MRS frequency convention (positive ν
for shifts above the receiver centre).

Normalisation: the signal is ``4 / 2**n · Tr[ρ F+]`` for a system of n protons, so that an
uncoupled singlet of N protons has amplitude N at t = 0 after a 90° pulse. The receiver phase is
set so that an on-resonance singlet gives a real, positive echo (a STEAM echo then has amplitude
N / 2). Each group's contribution to the detected ``F+`` is scaled by its ``fraction``.

Speed (structure used):

* an isolated group (no couplings) is simulated as one spin-1/2 (2×2) and scaled by its proton
  count;
* a group of N magnetically equivalent protons is replaced by composite spins
  (:func:`~specproc.spins.operators.composite_spins`), each combination simulated on its own and
  weighted by its multiplicity (exact);
* H is diagonalised block by block of total M (:mod:`specproc.spins.hamiltonian`) and the
  free-precession propagators are phase factors in the eigenbasis.

References
----------
Levitt MH. Spin Dynamics, 2nd ed. Wiley 2008 (density operator, rotations, coherence orders).
Levitt MH. The signs of frequencies and phases in NMR. J Magn Reson 1997;126:164-182.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence as _Seq
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from scipy.linalg import expm

from specproc.errors import InvalidInputError
from specproc.spins.hamiltonian import build_hamiltonian, diagonalise
from specproc.spins.operators import (
    SpinOperators,
    build_operators,
    composite_spins,
    product_rotation,
)
from specproc.spins.sequences import (
    Delay,
    Pulse,
    Sequence,
    ShapedPulse,
    without_shaped_pulses,
)
from specproc.spins.systems import Coupling, GaussianPeak, Macromolecule, Metabolite, SpinGroup

__all__ = [
    "MAX_DIMENSION",
    "LineList",
    "sequence_singlet_amplitude",
    "shaped_pulse_propagator",
    "simulate_macromolecule",
    "simulate_metabolite",
    "simulate_spin_system",
    "synthesize_fid",
]

#: Largest product-space dimension of one coupled spin system (about 11 independent protons).
MAX_DIMENSION = 2048

#: Lines weaker than this (in protons) are dropped.
_AMPLITUDE_TOL = 1e-10
#: Lines closer than this (Hz) are merged.
_FREQ_MERGE_HZ = 1e-7


@dataclass(frozen=True, eq=False)
class LineList:
    """A signal as a sum of lines ``Σ a_k exp(-2πi ν_k t) · g_k(t)``.

    Attributes
    ----------
    freq_hz : (n,) ndarray
        Line frequencies ν_k relative to the receiver centre, Hz (NIfTI-MRS convention: the
        line lies at ``centre_ppm + ν / MHz`` ppm).
    amp : (n,) complex ndarray
        Complex amplitudes a_k at t = 0 (in protons).
    gauss_fwhm_hz : (n,) ndarray
        Gaussian full width at half maximum of each line, Hz (0 for undamped lines):
        ``g_k(t) = exp(-(π · fwhm · t)² / (4 ln 2))``.
    """

    freq_hz: np.ndarray
    amp: np.ndarray
    gauss_fwhm_hz: np.ndarray

    def __post_init__(self) -> None:
        f = np.array(self.freq_hz, dtype=float).ravel()
        a = np.array(self.amp, dtype=np.complex128).ravel()
        g = np.array(self.gauss_fwhm_hz, dtype=float).ravel()
        if not (f.shape == a.shape == g.shape):
            raise ValueError("line arrays differ in length")
        for arr in (f, a, g):
            arr.flags.writeable = False
        object.__setattr__(self, "freq_hz", f)
        object.__setattr__(self, "amp", a)
        object.__setattr__(self, "gauss_fwhm_hz", g)

    def __len__(self) -> int:
        return int(self.freq_hz.size)

    @classmethod
    def empty(cls) -> LineList:
        """No lines."""
        return cls(np.zeros(0), np.zeros(0, complex), np.zeros(0))

    @classmethod
    def concatenate(cls, parts: _Seq[LineList]) -> LineList:
        """All lines of ``parts``."""
        if not parts:
            return cls.empty()
        return cls(
            np.concatenate([p.freq_hz for p in parts]),
            np.concatenate([p.amp for p in parts]),
            np.concatenate([p.gauss_fwhm_hz for p in parts]),
        )

    def shifted(self, delta_hz: float) -> LineList:
        """The same lines moved by ``delta_hz`` (e.g. for a new receiver centre)."""
        return LineList(self.freq_hz + float(delta_hz), self.amp, self.gauss_fwhm_hz)

    def scaled(self, factor: complex) -> LineList:
        """The same lines with amplitudes multiplied by ``factor``."""
        return LineList(self.freq_hz, self.amp * factor, self.gauss_fwhm_hz)

    def merged(self) -> LineList:
        """Lines of equal frequency and width summed, weak lines dropped, sorted by frequency."""
        if len(self) == 0:
            return self
        key_f = np.round(self.freq_hz / _FREQ_MERGE_HZ).astype(np.int64)
        key_g = np.round(self.gauss_fwhm_hz / _FREQ_MERGE_HZ).astype(np.int64)
        keys = np.stack([key_f, key_g], axis=1)
        uniq, inverse = np.unique(keys, axis=0, return_inverse=True)
        inverse = inverse.ravel()
        amp = np.zeros(len(uniq), dtype=np.complex128)
        np.add.at(amp, inverse, self.amp)
        freq = np.zeros(len(uniq))
        np.add.at(freq, inverse, self.freq_hz)
        counts = np.bincount(inverse, minlength=len(uniq))
        freq /= counts
        fwhm = uniq[:, 1] * _FREQ_MERGE_HZ
        keep = np.abs(amp) > _AMPLITUDE_TOL
        order = np.argsort(freq[keep], kind="stable")
        return LineList(freq[keep][order], amp[keep][order], fwhm[keep][order])


def synthesize_fid(
    lines: LineList,
    *,
    dwell_s: float,
    n_points: int,
    lb_hz: float = 0.0,
    shift_hz: float = 0.0,
) -> np.ndarray:
    """Sample a line list on ``t_n = n · dwell_s``.

    Parameters
    ----------
    lines : LineList
        The lines.
    dwell_s : float
        Sampling interval, s.
    n_points : int
        Number of samples.
    lb_hz : float, optional
        Lorentzian line broadening (FWHM, Hz), ``exp(-π lb t)``; 0 (default) for basis use.
    shift_hz : float, optional
        Added to every line frequency, Hz.

    Returns
    -------
    (n_points,) complex ndarray
        ``Σ a_k exp(-2πi (ν_k + shift) t) g_k(t) · exp(-π lb t)``.
    """
    n_points = int(n_points)
    dwell_s = float(dwell_s)
    t = np.arange(n_points) * dwell_s
    out = np.zeros(t.size, dtype=np.complex128)
    if len(lines) == 0:
        return out
    freq = lines.freq_hz + float(shift_hz)
    plain = np.flatnonzero(lines.gauss_fwhm_hz == 0)
    if plain.size:
        out += _sum_of_exponentials(freq[plain], lines.amp[plain], dwell_s, n_points)
    damped = np.flatnonzero(lines.gauss_fwhm_hz != 0)
    chunk = max(1, 2_000_000 // max(t.size, 1))
    for start in range(0, damped.size, chunk):
        sel = damped[start:start + chunk]
        phase = np.exp(-2j * np.pi * np.outer(t, freq[sel]))
        width = lines.gauss_fwhm_hz[sel]
        phase *= np.exp(-((np.pi * np.outer(t, width)) ** 2) / (4 * np.log(2)))
        out += phase @ lines.amp[sel]
    if lb_hz:
        out *= np.exp(-np.pi * float(lb_hz) * t)
    return out


def _sum_of_exponentials(
    freq_hz: np.ndarray, amp: np.ndarray, dwell_s: float, n_points: int
) -> np.ndarray:
    """``Σ_k a_k exp(-2πi ν_k n dwell)`` for n < n_points, by splitting n = q·B + r.

    ``exp(-2πi ν (qB + r) dwell) = W_qk · Z_rk`` with both factors computed directly (no
    accumulated powers), so the sum is one matrix product with about ``2 √n`` exponentials
    per line instead of n.
    """
    block = max(1, int(np.ceil(np.sqrt(n_points))))
    n_blocks = -(-n_points // block)
    r = np.arange(block) * dwell_s
    q = np.arange(n_blocks) * (block * dwell_s)
    out = np.zeros(n_blocks * block, dtype=np.complex128)
    chunk = max(1, 4_000_000 // (block + n_blocks))
    for start in range(0, freq_hz.size, chunk):
        f = freq_hz[start:start + chunk]
        w = np.exp(-2j * np.pi * np.outer(q, f)) * amp[start:start + chunk]  # (n_blocks, k)
        z = np.exp(-2j * np.pi * np.outer(f, r))  # (k, block)
        out += (w @ z).ravel()
    return out[:n_points]


# ------------------------------------------------------------------------------ engine
def _propagate(
    spins: tuple[Fraction, ...],
    offsets_hz: np.ndarray,
    j_hz: np.ndarray,
    weights: np.ndarray,
    sequence: Sequence,
) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies (Hz) and amplitudes (unnormalised: Tr[ρ F+_weighted]) of one product space."""
    ops = build_operators(spins)
    hamiltonian = build_hamiltonian(ops, list(offsets_hz), j_hz)
    eig = diagonalise(hamiltonian, ops.m_total)
    order = ops.coherence_order()
    rho = np.diag(np.sum(ops.iz, axis=0)).astype(np.complex128)  # F_z
    gaps = eig.energies[:, None] - eig.energies[None, :]
    pulses: dict[tuple[float, float], np.ndarray] = {}
    for event in sequence.events:
        if isinstance(event, Pulse):
            key = (event.flip_deg, event.phase_deg)
            if key not in pulses:
                pulses[key] = product_rotation(
                    spins, np.deg2rad(event.flip_deg), np.deg2rad(event.phase_deg)
                )
            rot = pulses[key]
            rho = rot @ rho @ rot.conj().T
            if event.keep is not None:
                rho = np.where(order == event.keep, rho, 0.0)
        elif isinstance(event, Delay):
            if event.duration_s == 0:
                continue
            r = eig.to_eigenbasis(rho)
            r *= np.exp(-1j * gaps * event.duration_s)
            rho = eig.from_eigenbasis(r)
        elif isinstance(event, ShapedPulse):
            prop = shaped_pulse_propagator(event, hamiltonian, ops)
            rho = prop @ rho @ prop.conj().T
            if event.keep is not None:
                rho = np.where(order == event.keep, rho, 0.0)
        else:  # pragma: no cover - Sequence only holds the three kinds
            raise TypeError(f"unknown event {event!r}")
    detect = np.zeros((ops.dim, ops.dim), dtype=np.complex128)
    for w, ip in zip(weights, ops.ip, strict=True):
        detect += w * ip
    r = eig.to_eigenbasis(rho)
    d = eig.to_eigenbasis(detect)
    freqs = []
    amps = []
    twice_m = sorted(eig.blocks)
    for block in twice_m:
        upper = block + 2  # M + 1
        if upper not in eig.blocks:
            continue
        a_idx = eig.blocks[block]
        b_idx = eig.blocks[upper]
        amp = r[np.ix_(a_idx, b_idx)] * d[np.ix_(b_idx, a_idx)].T
        freq = (eig.energies[a_idx][:, None] - eig.energies[b_idx][None, :]) / (2 * np.pi)
        freqs.append(freq.ravel())
        amps.append(amp.ravel())
    if not freqs:
        return np.zeros(0), np.zeros(0, complex)
    return np.concatenate(freqs), np.concatenate(amps)


def shaped_pulse_propagator(
    pulse: ShapedPulse, hamiltonian: np.ndarray, ops: SpinOperators
) -> np.ndarray:
    """Propagator of a shaped pulse over its whole length, by time slicing.

    Each slice k of length ``dt = duration / n`` is ``exp(-i (H + ω1_k (cos φ_k Fx +
    sin φ_k Fy)) dt)`` with ``φ_k = ω_rf t_k + φ0`` at the slice centre ``t_k``; the carrier
    ``ω_rf = -2π · offset_hz`` is the Zeeman frequency of a spin on resonance (the sign of
    :func:`~specproc.spins.hamiltonian.build_hamiltonian`). ``ω1`` is scaled so that
    ``Σ ω1_k dt`` is the nominal flip angle. The slices are exact for a piecewise-constant RF
    envelope (Levitt, *Spin Dynamics*, 2nd ed. 2008, section 12; the time-slicing scheme of
    shaped-pulse simulations).

    Parameters
    ----------
    pulse : ShapedPulse
        The pulse.
    hamiltonian : (D, D) ndarray
        Free-precession Hamiltonian in the Zeeman basis, rad/s.
    ops : SpinOperators
        The operators of the same product space.

    Returns
    -------
    (D, D) complex ndarray
        The unitary propagator (first slice rightmost).
    """
    shape = np.asarray(pulse.shape, dtype=float)
    if shape.ndim != 1 or shape.size == 0 or not np.all(np.isfinite(shape)) or shape.sum() == 0:
        raise InvalidInputError("a shaped pulse needs a finite, non-zero envelope")
    if not (np.isfinite(pulse.duration_s) and pulse.duration_s > 0):
        raise InvalidInputError(f"a shaped pulse needs a positive length, got {pulse.duration_s}")
    dt = pulse.duration_s / shape.size
    w1 = shape * (np.deg2rad(pulse.flip_deg) / (dt * shape.sum()))
    f_plus = np.sum(ops.ip, axis=0)
    fx = (f_plus + f_plus.conj().T) / 2
    fy = (f_plus - f_plus.conj().T) / 2j
    omega_rf = -2 * np.pi * float(pulse.offset_hz)
    phases = omega_rf * (np.arange(shape.size) + 0.5) * dt + np.deg2rad(pulse.phase_deg)
    total = np.eye(ops.dim, dtype=np.complex128)
    for amp, phi in zip(w1, phases, strict=True):
        h = hamiltonian + amp * (np.cos(phi) * fx + np.sin(phi) * fy)
        total = expm(-1j * dt * h) @ total
    return total


def _reference_phase(sequence: Sequence) -> complex:
    """Signal of one on-resonance spin-1/2 at the echo top (2·Tr[ρ I+]), complex."""
    _freq, amp = _propagate(
        (Fraction(1, 2),), np.zeros(1), np.zeros((1, 1)), np.ones(1), sequence
    )
    return complex(2 * amp.sum())


def sequence_singlet_amplitude(sequence: Sequence) -> float:
    """Echo amplitude of an on-resonance singlet of one proton (1 for a 90°-180° echo, ½ STEAM)."""
    return abs(_reference_phase(sequence))


def _receiver(sequence: Sequence) -> complex:
    # the receiver phase is set by the hard pulses: editing pulses (shaped, selective) leave it
    # alone, so ON and OFF sub-spectra of an edited scan share one phase
    ref = _reference_phase(without_shaped_pulses(sequence))
    if abs(ref) < 1e-12:
        raise InvalidInputError(f"the {sequence.name} sequence gives no signal from a singlet")
    return abs(ref) / ref  # multiply by this to make the singlet echo real and positive


def simulate_spin_system(
    groups: _Seq[SpinGroup],
    couplings: _Seq[Coupling],
    sequence: Sequence,
    *,
    spectrometer_mhz: float,
    centre_ppm: float = 4.65,
) -> LineList:
    """Lines of one spin system (groups joined by couplings) after ``sequence``.

    Parameters
    ----------
    groups : sequence of SpinGroup
        The groups of equivalent protons.
    couplings : sequence of Coupling
        Couplings between the groups (labels must be among ``groups``).
    sequence : Sequence
        The pulse sequence.
    spectrometer_mhz : float
        Proton Larmor frequency, MHz.
    centre_ppm : float, optional
        Shift at the receiver centre, ppm (default 4.65).

    Returns
    -------
    LineList
        Merged lines, amplitudes in protons (scaled by the group fractions).
    """
    groups = tuple(groups)
    labels = [g.label for g in groups]
    offsets = np.array([(g.shift_ppm - centre_ppm) * spectrometer_mhz for g in groups])
    n = len(groups)
    j = np.zeros((n, n))
    for c in couplings:
        ia, ib = labels.index(c.a), labels.index(c.b)
        j[ia, ib] = j[ib, ia] = j[ia, ib] + c.j_hz
    weights = np.array([g.fraction for g in groups], dtype=float)
    receiver = _receiver(sequence)
    if not np.any(j):
        # isolated groups: N independent equivalent protons = N × one spin-1/2
        parts = []
        for g, off, w in zip(groups, offsets, weights, strict=True):
            f, a = _propagate(
                (Fraction(1, 2),), np.array([off]), np.zeros((1, 1)), np.ones(1), sequence
            )
            parts.append(LineList(f, 2 * a * g.protons * w * receiver, np.zeros(f.size)))
        return LineList.concatenate(parts).merged()
    total = sum(g.protons for g in groups)
    largest = int(np.prod([g.protons + 1 for g in groups], dtype=float))
    if largest > MAX_DIMENSION:
        names = ", ".join(g.label for g in groups)
        raise InvalidInputError(
            f"the coupled spin system ({names}) needs a {largest}-dimensional space; at most "
            f"{MAX_DIMENSION} is supported (merge equivalent protons into groups)"
        )
    choices = [composite_spins(g.protons) for g in groups]
    freqs = []
    amps = []
    for combo in itertools.product(*choices):
        spins = tuple(s for s, _ in combo)
        weight = float(np.prod([mult for _, mult in combo]))
        f, a = _propagate(spins, offsets, j, weights, sequence)
        freqs.append(f)
        amps.append(a * weight)
    scale = 4.0 / 2.0**total * receiver
    lines = LineList(
        np.concatenate(freqs), np.concatenate(amps) * scale, np.zeros(sum(map(len, freqs)))
    )
    return lines.merged()


def simulate_metabolite(
    metabolite: Metabolite,
    sequence: Sequence,
    *,
    spectrometer_mhz: float,
    centre_ppm: float = 4.65,
) -> LineList:
    """Lines of a whole metabolite: the sum over its independent spin systems."""
    parts = [
        simulate_spin_system(
            groups, couplings, sequence, spectrometer_mhz=spectrometer_mhz, centre_ppm=centre_ppm
        )
        for groups, couplings in metabolite.spin_systems()
    ]
    return LineList.concatenate(parts).merged()


def simulate_macromolecule(
    component: Macromolecule,
    sequence: Sequence,
    *,
    spectrometer_mhz: float,
    centre_ppm: float = 4.65,
) -> LineList:
    """Gaussian lines of a macromolecule/lipid component (uncoupled; scaled like a singlet echo).

    The widths are :meth:`~specproc.spins.systems.Macromolecule.fwhm_hz` at the spectrometer
    frequency.
    """
    amplitude = sequence_singlet_amplitude(sequence)
    peaks: tuple[GaussianPeak, ...] = component.peaks
    return LineList(
        np.array([(p.shift_ppm - centre_ppm) * spectrometer_mhz for p in peaks]),
        np.array([p.basis_protons * amplitude for p in peaks], dtype=complex),
        np.array(component.fwhm_hz(spectrometer_mhz)),
    )
