"""Combination of the signals of several receive coils.

Two weightings are offered, both applied as ``combined = Σ_i conj(w_i) · fid_i``:

``"whitened"``
    Signal- and noise-weighted combination (Hall et al. 2014): the complex coil signal ``s_i`` is
    taken from the first points of a reference FID (the water reference, or the data themselves),
    the coil noise covariance ``Ψ`` from the FID tail or a noise scan, and ``w = Ψ⁻¹ s``. This is
    prewhitening followed by a phase-aligned matched filter; with uncorrelated noise it reduces to
    ``w_i = s_i / σ_i²`` of Hall et al. and it maximises the SNR of the sum (Roemer et al. 1990).
``"svd"``
    The coil sensitivities are the first left singular vector of the (prewhitened) coils × time
    matrix of the reference FID, an alternative that uses the whole FID rather than its first
    points.

Weights are scaled so that the combined reference signal equals ``Σ_i |s_i|``: the size of a
phase-aligned plain sum, so that amplitudes keep a familiar scale. The same weights must be used
for the metabolite data and their water reference (ratios to water are then unaffected).

References
----------
.. [1] Hall EL, Stephenson MC, Price D, Morris PG. Methodology for improved detection of low
   concentration metabolites in MRS: optimised combination of signals from multi-element coil
   arrays. NeuroImage 2014;86:35-42.
.. [2] Roemer PB, Edelstein WA, Hayes CE, Souza SP, Mueller OM. The NMR phased array. Magn Reson
   Med 1990;16:192-225.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from specproc.data import Scan
from specproc.errors import InvalidInputError

__all__ = [
    "coil_combination_snr_gain",
    "combine_coils",
    "combine_coils_scan",
    "compute_coil_weights",
    "estimate_noise_covariance",
]

CoilMethod = Literal["whitened", "svd"]
_METHODS = ("whitened", "svd")


def estimate_noise_covariance(
    fids: np.ndarray, *, tail_fraction: float = 0.25
) -> np.ndarray:
    """Coil noise covariance from the end of the FIDs (or from a noise-only scan).

    Each trace's tail (the last ``tail_fraction`` of its points, where the signal has decayed)
    has its mean removed; the covariance is ``Ψ = X Xᴴ / K`` over all K tail samples.

    Parameters
    ----------
    fids : (n_coils, ..., n_points) complex ndarray
        Coils on the first axis, time on the last. For a noise scan pass ``tail_fraction=1``.
    tail_fraction : float
        Fraction of the points, at the end of each FID, treated as noise (0 < f <= 1).

    Returns
    -------
    noise_cov : (n_coils, n_coils) complex ndarray
        Hermitian noise covariance per complex sample.
    """
    data = np.asarray(fids)
    if data.ndim < 2:
        raise InvalidInputError("noise covariance needs a coil axis and a time axis")
    if not 0 < tail_fraction <= 1:
        raise InvalidInputError(f"noise_tail_fraction must be in (0, 1], got {tail_fraction}")
    n_tail = max(2, round(data.shape[-1] * tail_fraction))
    tail = data[..., -n_tail:]
    tail = tail - tail.mean(axis=-1, keepdims=True)
    x = tail.reshape(data.shape[0], -1)
    n_segments = x.shape[1] // n_tail
    dof = max(1, x.shape[1] - n_segments)
    return (x @ x.conj().T) / dof


def _whitener(noise_cov: np.ndarray | None, n_coils: int) -> np.ndarray:
    """Lower-triangular inverse Cholesky factor ``L⁻¹`` of ``Ψ`` (diagonal loading if singular)."""
    if noise_cov is None:
        return np.eye(n_coils)
    psi = np.asarray(noise_cov, dtype=complex)
    if psi.shape != (n_coils, n_coils):
        raise InvalidInputError(
            f"noise covariance of shape {psi.shape} does not match {n_coils} coils"
        )
    psi = (psi + psi.conj().T) / 2
    scale = float(np.real(np.trace(psi))) / n_coils
    if not scale > 0:
        return np.eye(n_coils)
    psi = psi + np.eye(n_coils) * scale * 1e-9  # diagonal loading for dead coils
    lower = np.linalg.cholesky(psi)
    return np.linalg.inv(lower)


def compute_coil_weights(
    reference: np.ndarray,
    *,
    noise_cov: np.ndarray | None = None,
    method: CoilMethod = "whitened",
    weight_points: int = 4,
) -> np.ndarray:
    """Complex coil weights from a reference FID and the coil noise covariance.

    Parameters
    ----------
    reference : (n_coils, ..., n_points) complex ndarray
        Reference signal per coil (the water reference or the data); all axes between the first
        and the last are averaged.
    noise_cov : (n_coils, n_coils) complex ndarray, optional
        Coil noise covariance (:func:`estimate_noise_covariance`); identity when omitted.
    method : {"whitened", "svd"}
        Weighting, see the module notes (Hall et al. 2014; first singular vector).
    weight_points : int
        Number of first FID points averaged into the coil signal ``s_i``.

    Returns
    -------
    weights : (n_coils,) complex ndarray
        Apply as ``Σ_i conj(w_i) · fid_i`` (:func:`combine_coils`).

    Raises
    ------
    InvalidInputError
        For an unknown method or a reference without signal.
    """
    if method not in _METHODS:
        raise InvalidInputError(
            f"unknown coil combination method {method!r}; valid: {', '.join(_METHODS)}"
        )
    ref = np.asarray(reference)
    if ref.ndim < 2:
        raise InvalidInputError("coil weights need a coil axis and a time axis")
    n_coils = ref.shape[0]
    ref = ref.reshape(n_coils, -1, ref.shape[-1]).mean(axis=1)
    n_first = int(min(max(1, weight_points), ref.shape[-1]))
    signal = ref[:, :n_first].mean(axis=-1)
    if not np.any(np.abs(signal) > 0):
        raise InvalidInputError("the coil reference signal is zero: cannot weight the coils")
    whiten = _whitener(noise_cov, n_coils)
    if method == "whitened":
        white_signal = whiten @ signal
        weights = whiten.conj().T @ white_signal  # Ψ⁻¹ s
    else:
        white = whiten @ ref
        u, _, _ = np.linalg.svd(white, full_matrices=False)
        weights = whiten.conj().T @ u[:, 0]
    gain = np.vdot(weights, signal)  # wᴴ s
    if abs(gain) == 0:
        raise InvalidInputError("the coil weights cancel the reference signal")
    # scale so that wᴴ s = Σ|s_i| (a real, positive number): conj(c) · gain = target
    target = float(np.sum(np.abs(signal)))
    weights = weights * np.conj(target / gain)
    return weights


def combine_coils(fids: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted sum over the first (coil) axis: ``Σ_i conj(w_i) · fid_i``.

    Parameters
    ----------
    fids : (n_coils, ..., n_points) complex ndarray
    weights : (n_coils,) complex ndarray

    Returns
    -------
    combined : (..., n_points) complex ndarray
    """
    data = np.asarray(fids)
    w = np.asarray(weights)
    if w.shape != (data.shape[0],):
        raise InvalidInputError(f"{w.size} coil weights for {data.shape[0]} coils")
    return np.tensordot(w.conj(), data, axes=(0, 0))


def coil_combination_snr_gain(signal: np.ndarray, noise_cov: np.ndarray) -> float:
    """Theoretical best SNR of a combination relative to unit noise: ``sqrt(sᴴ Ψ⁻¹ s)``.

    The matched-filter bound of Roemer et al. (1990); with identical coils of signal ``s`` and
    noise ``σ`` it is ``√N · |s| / σ``.
    """
    s = np.asarray(signal, dtype=complex)
    psi = np.asarray(noise_cov, dtype=complex)
    return float(np.sqrt(np.real(np.vdot(s, np.linalg.solve(psi, s)))))


def combine_coils_scan(
    scan: Scan,
    *,
    weights_from: Scan | None = None,
    weights: np.ndarray | None = None,
    noise_cov: np.ndarray | None = None,
    method: CoilMethod = "whitened",
    weight_points: int = 4,
    noise_tail_fraction: float = 0.25,
    use_noise: bool = True,
    weights_label: str | None = None,
) -> Scan:
    """Combine the ``DIM_COIL`` axis of a Scan (see :func:`compute_coil_weights`).

    Parameters
    ----------
    scan : Scan
        Data with a ``DIM_COIL`` axis.
    weights_from : Scan, optional
        Reference for the coil signals (typically the water reference, with the same number of
        coils); the scan itself when omitted.
    weights : (n_coils,) complex ndarray, optional
        Precomputed weights (e.g. those used for the metabolite data, to combine the water).
    noise_cov : (n_coils, n_coils) ndarray, optional
        Noise covariance (e.g. from a noise scan); estimated from the tail of ``scan`` otherwise.
    method, weight_points :
        See :func:`compute_coil_weights`.
    noise_tail_fraction : float
        Tail fraction for :func:`estimate_noise_covariance`.
    use_noise : bool
        If false the noise covariance is taken as the identity (signal weighting only).
    weights_label : str, optional
        Where the weights came from, for the provenance record.

    Returns
    -------
    Scan
        Without the ``DIM_COIL`` axis; the provenance records the weights.
    """
    axis = scan.axis_of("DIM_COIL")
    if axis is None:
        raise InvalidInputError("the data have no DIM_COIL axis to combine", scan.source)
    data = np.moveaxis(scan.data, axis, 0)
    n_coils = data.shape[0]
    source = "given"
    noise_desc = "as used for the given weights"
    if weights is None:
        noise_desc = "given covariance" if noise_cov is not None else "covariance from FID tail"
        if use_noise and noise_cov is None:
            noise_cov = estimate_noise_covariance(data, tail_fraction=noise_tail_fraction)
        if not use_noise:
            noise_cov = None
            noise_desc = "identity"
        if weights_from is not None:
            ref_axis = weights_from.axis_of("DIM_COIL")
            if ref_axis is None or weights_from.data.shape[ref_axis] != n_coils:
                raise InvalidInputError(
                    f"the coil reference does not have the {n_coils} coils of the data",
                    weights_from.source,
                )
            ref = np.moveaxis(weights_from.data, ref_axis, 0)
            source = "reference scan"
        else:
            ref = data
            source = "data"
        weights = compute_coil_weights(
            ref, noise_cov=noise_cov, method=method, weight_points=weight_points
        )
    combined = combine_coils(data, weights)
    details = {
        "method": method if (source != "given" or weights_label) else "given weights",
        "weights_from": weights_label or source,
        "weight_points": int(weight_points),
        "noise": noise_desc,
        "noise_tail_fraction": float(noise_tail_fraction),
        "n_coils": int(n_coils),
        "weights_abs": [float(v) for v in np.abs(weights)],
        "weights_phase_deg": [float(v) for v in np.degrees(np.angle(weights))],
    }
    reduced = scan.drop_axis("DIM_COIL", combined)
    return reduced.with_step("coil combination", details)
