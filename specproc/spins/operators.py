"""Spin operators in the Zeeman product basis, with composite spins for equivalent protons.

A group of N magnetically equivalent spin-1/2 nuclei is exactly equivalent to a set of
*composite spins*: the N-spin Hilbert space splits into irreducible representations of total
spin S = N/2, N/2 - 1, ... (down to 0 or 1/2), the irreducible representation S occurring
``multiplicity(N, S)`` times. A Hamiltonian and pulses that treat the N protons alike never mix
these subspaces, so the signal of the group is the multiplicity-weighted sum of the signals of
the composite spins S (Levitt, *Spin Dynamics*, 2nd ed. 2008, ch. 14, on magnetic equivalence;
the multiplicities are the Clebsch-Gordan counting
``C(N, N/2 - S) - C(N, N/2 - S - 1)``).

Conventions
-----------
* Basis states of one spin S are ordered by decreasing m: ``m = S, S-1, ..., -S``.
* A product space of spins ``S_1, ..., S_n`` is ordered as ``numpy.kron`` orders it (the first
  spin is the slowest index).
* Rotations follow Levitt's sign convention: a pulse of flip angle β and phase φ is
  ``R = exp(-i β (cos φ · Fx + sin φ · Fy))`` and transforms ``ρ → R ρ R†``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from math import comb

import numpy as np
from scipy.linalg import expm

__all__ = [
    "SpinOperators",
    "build_operators",
    "composite_spins",
    "multiplicity",
    "product_rotation",
    "spin_matrices",
]


def multiplicity(n_spins: int, total_spin: Fraction | float) -> int:
    """Number of times total spin ``S`` occurs among ``n_spins`` coupled spin-1/2 nuclei.

    Parameters
    ----------
    n_spins : int
        Number of equivalent spin-1/2 nuclei, N ≥ 1.
    total_spin : Fraction or float
        Total spin S (N/2, N/2 - 1, ...).

    Returns
    -------
    int
        ``C(N, N/2 - S) - C(N, N/2 - S - 1)`` (zero when S is not allowed).
    """
    k2 = Fraction(n_spins, 2) - Fraction(total_spin)
    if k2 < 0 or k2.denominator != 1:
        return 0
    k = int(k2)
    return comb(n_spins, k) - (comb(n_spins, k - 1) if k >= 1 else 0)


def composite_spins(n_spins: int) -> list[tuple[Fraction, int]]:
    """Composite spins ``(S, multiplicity)`` of a group of ``n_spins`` equivalent protons.

    The dimensions ``(2S + 1) · multiplicity`` add up to ``2 ** n_spins``.

    Examples
    --------
    >>> composite_spins(3)
    [(Fraction(3, 2), 1), (Fraction(1, 2), 2)]
    """
    if n_spins < 1:
        raise ValueError("a group needs at least one spin")
    out = []
    s = Fraction(n_spins, 2)
    while s >= 0:
        out.append((s, multiplicity(n_spins, s)))
        s -= 1
    return out


@lru_cache(maxsize=64)
def spin_matrices(spin: Fraction) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(Sz, S+, S-)`` of one spin S, shape ``(2S+1, 2S+1)``, basis ordered m = S ... -S."""
    s = float(spin)
    dim = round(2 * s) + 1
    m = s - np.arange(dim)
    sz = np.diag(m).astype(np.complex128)
    sp = np.zeros((dim, dim), dtype=np.complex128)
    for k in range(1, dim):  # <m+1| S+ |m>, m = m[k], m + 1 = m[k-1]
        sp[k - 1, k] = np.sqrt(s * (s + 1) - m[k] * (m[k] + 1))
    for arr in (sz, sp):
        arr.flags.writeable = False
    sm = sp.T.copy()
    sm.flags.writeable = False
    return sz, sp, sm


@lru_cache(maxsize=512)
def _single_rotation(spin: Fraction, flip_rad: float, phase_rad: float) -> np.ndarray:
    _sz, sp, sm = spin_matrices(spin)
    sx = (sp + sm) / 2
    sy = (sp - sm) / 2j
    rot = expm(-1j * flip_rad * (np.cos(phase_rad) * sx + np.sin(phase_rad) * sy))
    rot.flags.writeable = False
    return rot


def product_rotation(
    spins: Sequence[Fraction], flip_rad: float, phase_rad: float
) -> np.ndarray:
    """Rotation ``exp(-i β (cos φ Fx + sin φ Fy))`` of all spins alike (an ideal hard pulse).

    Parameters
    ----------
    spins : sequence of Fraction
        Spin quantum number of each (composite) spin.
    flip_rad, phase_rad : float
        Flip angle β and phase φ, radians.

    Returns
    -------
    (D, D) complex ndarray
        The Kronecker product of the single-spin rotations, D = Π (2S + 1).
    """
    out = np.ones((1, 1), dtype=np.complex128)
    for s in spins:
        out = np.kron(out, _single_rotation(Fraction(s), float(flip_rad), float(phase_rad)))
    return out


@dataclass(frozen=True)
class SpinOperators:
    """Operators of a product space of (composite) spins.

    Attributes
    ----------
    spins : tuple of Fraction
        Spin quantum number of each spin.
    dim : int
        Dimension of the product space.
    m_total : (dim,) ndarray
        Total magnetic quantum number M of each basis state.
    iz : tuple of (dim,) ndarray
        Diagonals of ``Iz`` of each spin (Iz is diagonal in the Zeeman basis).
    ip : tuple of (dim, dim) ndarray
        Raising operators ``I+`` of each spin.
    """

    spins: tuple[Fraction, ...]
    dim: int
    m_total: np.ndarray
    iz: tuple[np.ndarray, ...]
    ip: tuple[np.ndarray, ...]

    def coherence_order(self) -> np.ndarray:
        """Coherence order ``p = M_row - M_col`` of each density-matrix element, (dim, dim)."""
        return np.rint(self.m_total[:, None] - self.m_total[None, :]).astype(int)


def build_operators(spins: Sequence[Fraction]) -> SpinOperators:
    """Build the Zeeman-basis operators of a product of spins (see :class:`SpinOperators`)."""
    spins = tuple(Fraction(s) for s in spins)
    dims = [int(2 * s) + 1 for s in spins]
    total = int(np.prod(dims))
    iz = []
    ip = []
    for k, s in enumerate(spins):
        sz, sp, _ = spin_matrices(s)
        before = int(np.prod(dims[:k])) if k else 1
        after = int(np.prod(dims[k + 1:])) if k + 1 < len(dims) else 1
        iz.append(np.kron(np.ones(before), np.kron(np.diag(sz).real, np.ones(after))))
        ip.append(np.kron(np.eye(before), np.kron(sp, np.eye(after))))
    m_total = np.sum(iz, axis=0) if iz else np.zeros(total)
    return SpinOperators(
        spins=spins, dim=total, m_total=m_total, iz=tuple(iz), ip=tuple(ip)
    )
