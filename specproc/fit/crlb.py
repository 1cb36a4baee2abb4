"""Cramér-Rao lower bounds of the fitted parameters, noise estimate and combined sums.

The Fisher information of the full model at the solution is ``F = Jᵀ J / s²`` where J is the
Jacobian of all residual rows — data (real and imaginary parts), baseline-penalty rows and prior
rows — with respect to *all* parameters: amplitudes, real and imaginary baseline coefficients
and the free nonlinear parameters (Cavassila et al. 2001). ``s`` is the noise SD of one
spectral component measured in a signal-free region (:func:`estimate_noise_sd`); the covariance
is **not** rescaled by the reduced chi-square. The penalty and prior rows enter as the Gaussian
priors they represent, so the bound is the Bayesian (posterior) Cramér-Rao bound for the
regularised problem; with no baseline and no priors it is the classical bound.

A singular Fisher matrix (e.g. two identical basis members) never raises: the parameters that
the null space touches get NaN variances and the flag ``"fisher_singular"``.

References
----------
.. [1] Cavassila S, Deval S, Huegen C, van Ormondt D, Graveron-Demilly D. Cramér-Rao bounds: an
   evaluation tool for quantitation. NMR Biomed 2001;14:278-283.
.. [2] Kay SM. Fundamentals of Statistical Signal Processing, vol. 1: Estimation Theory.
   Prentice Hall 1993 (ch. 3, the Cramér-Rao bound; ch. 4, linear models).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from specproc.data import Scan

__all__ = [
    "combine_sums",
    "covariance_from_fisher",
    "estimate_noise_sd",
]

def estimate_noise_sd(
    scan: Scan,
    regions_ppm: Sequence[tuple[float, float]],
    *,
    min_points: int = 32,
    edge_fraction: float = 0.06,
) -> tuple[float, list[tuple[float, float]]]:
    """Noise SD of one spectral component (real or imaginary part) from signal-free regions.

    In each region the real and imaginary parts are detrended by a quadratic (removing a
    baseline or the tail of water) and the residual variance is pooled with the degrees of
    freedom left; ``s = sqrt(pooled variance)``. The spectrum is ``fftshift(fft(fid))`` without
    zero filling, so white time-domain noise of SD σ_t per component gives ``s = σ_t √N``.

    Parameters
    ----------
    scan : Scan
        One FID (``dims == ()``).
    regions_ppm : sequence of (float, float)
        Signal-free regions, ppm; the parts outside the spectrum are ignored.
    min_points : int
        If the regions inside the spectrum hold fewer points, the outer ``edge_fraction`` of
        the spectrum on each side are used instead.

    Returns
    -------
    sd : float
        Noise SD per spectral component (data units).
    used : list of (float, float)
        The ppm regions actually used.
    """
    ppm = scan.ppm()
    spec = scan.spectrum()
    masks = []
    used = []
    for lo, hi in regions_ppm:
        mask = (ppm >= lo) & (ppm <= hi)
        if mask.sum() >= 8:
            masks.append(mask)
            used.append((float(ppm[mask].min()), float(ppm[mask].max())))
    if sum(int(m.sum()) for m in masks) < min_points:
        n = ppm.size
        k = max(8, round(edge_fraction * n))
        masks, used = [], []
        for sl in (slice(0, k), slice(n - k, n)):
            mask = np.zeros(n, dtype=bool)
            mask[sl] = True
            masks.append(mask)
            used.append((float(ppm[mask].min()), float(ppm[mask].max())))
    ss, dof = 0.0, 0
    for mask in masks:
        x = np.linspace(-1.0, 1.0, int(mask.sum()))
        design = np.vander(x, 3)
        for part in (spec[mask].real, spec[mask].imag):
            coef, *_ = np.linalg.lstsq(design, part, rcond=None)
            r = part - design @ coef
            ss += float(r @ r)
            dof += part.size - 3
    return float(np.sqrt(ss / max(dof, 1))), used


def covariance_from_fisher(
    fisher: np.ndarray, *, rcond: float = 1e-11
) -> tuple[np.ndarray, np.ndarray]:
    """Covariance (inverse Fisher) with NaN for parameters that are not identifiable.

    The Fisher matrix is scaled to unit diagonal and eigen-decomposed; eigenvalues below
    ``rcond · max`` span its null space. A parameter with a weight above 1e-8 in the null space
    (or with zero information) gets NaN in its row and column; the rest comes from the
    pseudo-inverse on the identifiable part, which equals the inverse when F is regular.

    Returns
    -------
    covariance : (p, p) ndarray
    bad : (p,) bool ndarray
        Parameters whose variance is NaN.
    """
    f = np.asarray(fisher, dtype=float)
    f = 0.5 * (f + f.T)
    p = f.shape[0]
    diag = np.diag(f).copy()
    scale_ok = diag > 0
    d = np.where(scale_ok, np.sqrt(np.where(scale_ok, diag, 1.0)), 1.0)
    fs = f / np.outer(d, d)
    fs[~scale_ok, :] = 0.0
    fs[:, ~scale_ok] = 0.0
    if not np.all(np.isfinite(fs)):
        return np.full((p, p), np.nan), np.ones(p, dtype=bool)
    w, v = np.linalg.eigh(fs)
    top = float(w.max(initial=0.0))
    null = w <= rcond * top if top > 0 else np.ones(p, dtype=bool)
    weight = (v[:, null] ** 2).sum(axis=1)
    bad = (weight > 1e-8) | ~scale_ok
    keep = ~null
    inv_s = (v[:, keep] / w[keep]) @ v[:, keep].T
    cov = inv_s / np.outer(d, d)
    cov[bad, :] = np.nan
    cov[:, bad] = np.nan
    return cov, bad


def combine_sums(
    names: Sequence[str], amplitudes: np.ndarray, covariance: np.ndarray
) -> dict[str, dict[str, object]]:
    """Combined sums (:func:`specproc.sums.sum_members`) with variances including covariances.

    ``var(Σ c_i) = Σ_i Σ_j Cov(c_i, c_j)`` over the components present.

    Returns
    -------
    dict
        name -> ``{"components": [...], "amplitude": float, "crlb_sd": float,
        "crlb_percent": float}``.
    """
    from specproc.sums import sum_members

    out: dict[str, dict[str, object]] = {}
    for total, members in sum_members(names).items():
        idx = list(members)
        amp = float(np.sum(amplitudes[idx]))
        var = float(np.sum(covariance[np.ix_(idx, idx)]))
        sd = float(np.sqrt(var)) if np.isfinite(var) and var >= 0 else float("nan")
        pct = 100.0 * sd / amp if amp > 0 and np.isfinite(sd) else float("nan")
        out[total] = {
            "components": [names[i] for i in idx],
            "amplitude": amp,
            "crlb_sd": sd,
            "crlb_percent": pct,
        }
    return out
