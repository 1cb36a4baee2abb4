"""The liquid-state spin Hamiltonian of a coupled proton system and its block diagonalisation.

In the rotating frame at the receiver centre the Hamiltonian (rad/s) is

    H = Σ_k Ω_k I_zk + 2π Σ_{k<l} J_kl (I_zk I_zl + (I_+k I_-l + I_-k I_+l) / 2),

the full (strong-coupling) scalar-coupling term included. For protons (γ > 0) the Larmor
frequency is negative, so the rotating-frame offset of a nucleus at shift δ is
``Ω = -2π (δ - centre_ppm) · spectrometer_mhz`` (Levitt, J Magn Reson 1997;126:164-182). With
this sign and detection of the p = -1 coherence the signal of a singlet is
``exp(-2πi (δ - centre_ppm) · MHz · t)``, the NIfTI-MRS convention.

H commutes with the total ``F_z``, so it is block-diagonal in the Zeeman basis grouped by total
magnetic quantum number M; each block is diagonalised on its own (Levitt, *Spin Dynamics*,
2nd ed. 2008, ch. 14-15).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from specproc.spins.operators import SpinOperators

__all__ = ["Eigensystem", "build_hamiltonian", "diagonalise"]


def build_hamiltonian(
    ops: SpinOperators, offsets_hz: Sequence[float], j_hz: np.ndarray
) -> np.ndarray:
    """Dense Hamiltonian (rad/s) of a spin system in the Zeeman basis.

    Parameters
    ----------
    ops : SpinOperators
        Operators of the (composite) spins.
    offsets_hz : sequence of float
        ``ν_k = (δ_k - centre_ppm) · MHz`` of each spin, Hz (NIfTI-MRS frequency: positive for
        shifts above the centre). The Zeeman term uses ``Ω_k = -2π ν_k``.
    j_hz : (n, n) ndarray
        Symmetric matrix of scalar couplings, Hz (the diagonal is ignored).

    Returns
    -------
    (dim, dim) complex ndarray
        Hermitian H, rad/s.
    """
    n = len(ops.spins)
    offsets = np.asarray(offsets_hz, dtype=float)
    j_hz = np.asarray(j_hz, dtype=float)
    if offsets.shape != (n,) or j_hz.shape != (n, n):
        raise ValueError("offsets/J do not match the number of spins")
    diag = np.zeros(ops.dim)
    for k in range(n):
        diag += -2 * np.pi * offsets[k] * ops.iz[k]
    h = np.zeros((ops.dim, ops.dim), dtype=np.complex128)
    for k in range(n):
        for m in range(k + 1, n):
            j = j_hz[k, m]
            if j == 0.0:
                continue
            diag += 2 * np.pi * j * ops.iz[k] * ops.iz[m]
            flip = ops.ip[k] @ ops.ip[m].conj().T
            h += np.pi * j * (flip + flip.conj().T)
    h[np.diag_indices(ops.dim)] += diag
    return h


@dataclass(frozen=True)
class Eigensystem:
    """Eigenvalues and eigenvectors of a Hamiltonian that conserves total M.

    Attributes
    ----------
    energies : (dim,) ndarray
        Eigenvalues, rad/s.
    vectors : (dim, dim) complex ndarray
        Unitary matrix of eigenvectors (columns), block-structured by M.
    m_total : (dim,) ndarray
        Total M of each eigenvector (equal to the M of the Zeeman block it came from).
    blocks : dict of int to (k,) ndarray
        For each ``2M`` (an integer), the indices of the eigenvectors with that M.
    """

    energies: np.ndarray
    vectors: np.ndarray
    m_total: np.ndarray
    blocks: dict[int, np.ndarray]

    def to_eigenbasis(self, op: np.ndarray) -> np.ndarray:
        """``V† A V``."""
        return self.vectors.conj().T @ op @ self.vectors

    def from_eigenbasis(self, op: np.ndarray) -> np.ndarray:
        """``V A V†``."""
        return self.vectors @ op @ self.vectors.conj().T


def diagonalise(h: np.ndarray, m_total: np.ndarray) -> Eigensystem:
    """Diagonalise ``h`` block by block of total magnetic quantum number M.

    Parameters
    ----------
    h : (dim, dim) complex ndarray
        Hermitian matrix that does not couple states of different M.
    m_total : (dim,) ndarray
        M of each Zeeman basis state.

    Returns
    -------
    Eigensystem
        Eigenvectors placed in the rows of their own Zeeman block (so the eigenbasis keeps the
        M labels and coherence orders of the Zeeman basis).
    """
    dim = h.shape[0]
    twice_m = np.rint(2 * np.asarray(m_total)).astype(int)
    energies = np.zeros(dim)
    vectors = np.zeros((dim, dim), dtype=np.complex128)
    blocks: dict[int, np.ndarray] = {}
    for key in np.unique(twice_m):
        idx = np.flatnonzero(twice_m == key)
        sub = h[np.ix_(idx, idx)]
        vals, vecs = np.linalg.eigh(sub)
        energies[idx] = vals
        vectors[np.ix_(idx, idx)] = vecs
        blocks[int(key)] = idx
    return Eigensystem(
        energies=energies, vectors=vectors, m_total=np.asarray(m_total, float), blocks=blocks
    )
