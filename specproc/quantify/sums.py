"""Combined sums (tNAA, tCr, tCho, Glx; members in :data:`specproc.sums.SUMS`) and ratios of
linear combinations of amplitudes, with their
SDs from the amplitude covariance (first-order propagation).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError
from specproc.sums import SUMS, sum_members

__all__ = ["combine_linear", "ratio_linear", "systematic_sd", "total_sd"]


def _as_cov(covariance: Any, sd: Any, n: int) -> np.ndarray | None:
    if covariance is not None:
        cov = np.array(covariance, dtype=float)
        if cov.shape != (n, n):
            raise InvalidInputError(
                f"covariance of shape {cov.shape} does not match {n} amplitudes"
            )
        if not np.all(np.isfinite(cov)):
            return np.full((n, n), np.nan)
        return 0.5 * (cov + cov.T)
    if sd is not None:
        s = np.array(sd, dtype=float).reshape(-1)
        if s.shape != (n,):
            raise InvalidInputError(f"{s.size} amplitude SDs do not match {n} amplitudes")
        return np.diag(s**2)
    return None


def combine_linear(
    values: Sequence[float] | np.ndarray,
    covariance: Any = None,
    *,
    names: Sequence[str],
    combinations: Mapping[str, Sequence[str]] = SUMS,
    weights: Sequence[float] | np.ndarray | None = None,
) -> dict[str, tuple[float, float, tuple[str, ...]]]:
    """Weighted sums of members with their SD: ``x = Σ w_i v_i``, ``var x = wᵀ Σ w``.

    Parameters
    ----------
    values : (n,) array_like
        Values (amplitudes) in the order of ``names``.
    covariance : (n, n) array_like, optional
        Their covariance (e.g. the Cramér-Rao covariance of the fit); ``None`` gives NaN SDs.
    names : sequence of str
        Member names (matched case-insensitively, :func:`specproc.sums.sum_members`).
    combinations : mapping
        Name of each sum -> its member names (default :data:`specproc.sums.SUMS`); members not
        in ``names`` are skipped, a sum with no member present or named like a member is left
        out.
    weights : (n,) array_like, optional
        Per-member weights (default 1; concentration factors turn amplitude sums into
        concentration sums).

    Returns
    -------
    dict
        Sum name -> (value, SD, members used).

    Notes
    -----
    For two members, ``var(a + b) = var a + var b + 2 cov(a, b)``; fitted amplitudes of
    overlapping signals (Cr/PCr, GPC/PCh, NAA/NAAG) are anti-correlated, which makes the SD of
    their sum smaller than the root-sum-square of their SDs.
    """
    v = np.asarray(values, dtype=float).reshape(-1)
    names = [str(n) for n in names]
    if v.size != len(names):
        raise InvalidInputError(f"{v.size} values but {len(names)} names")
    w = np.ones_like(v) if weights is None else np.asarray(weights, dtype=float).reshape(-1)
    cov = _as_cov(covariance, None, v.size)
    out: dict[str, tuple[float, float, tuple[str, ...]]] = {}
    for combo, members in sum_members(names, combinations).items():
        idx = list(members)
        u = np.zeros_like(v)
        u[idx] = w[idx]
        value = float(u @ v)
        sd = float("nan") if cov is None else float(np.sqrt(max(u @ cov @ u, 0.0)))
        out[combo] = (value, sd, tuple(names[i] for i in idx))
    return out


def ratio_linear(
    numerator: np.ndarray, denominator: np.ndarray, values: np.ndarray, covariance: Any = None
) -> tuple[float, float]:
    """Ratio of two linear combinations ``r = (uᵀv)/(wᵀv)`` with its first-order SD.

    ``var r = gᵀ Σ g`` with ``g = u/(wᵀv) - (uᵀv) w/(wᵀv)²`` (delta method), which keeps the
    covariance between numerator and denominator (e.g. Cr in Cr/tCr).
    """
    u = np.asarray(numerator, dtype=float)
    w = np.asarray(denominator, dtype=float)
    v = np.asarray(values, dtype=float)
    x = float(u @ v)
    y = float(w @ v)
    if y == 0 or not math.isfinite(y):
        return float("nan"), float("nan")
    r = x / y
    cov = _as_cov(covariance, None, v.size)
    if cov is None:
        return r, float("nan")
    g = u / y - x * w / y**2
    return r, float(np.sqrt(max(g @ cov @ g, 0.0)))



def systematic_sd(main: float, alternatives: Sequence[float] | np.ndarray,
                  factors: Sequence[str]) -> float:
    """Systematic SD of a quantity from its values under alternative model choices.

    ``δ_f² = mean_{k in f} (x_k - x_0)²`` for each factor ``f`` (the RMS difference of its
    alternatives from the main value ``x_0``), and ``SD² = Σ_f δ_f²``: each alternative is
    taken as a one-SD change of its choice and the factors as independent, added in
    quadrature (Barlow, arXiv:hep-ex/0207026, 2002; JCGM 100:2008 (GUM) 5.1). NaN when
    there are no alternatives or a value is not finite.

    Examples
    --------
    >>> round(systematic_sd(1.0, [1.1, 0.9, 1.3], ["a", "a", "b"]), 4)
    0.3162
    """
    x = np.asarray(alternatives, dtype=float).reshape(-1)
    if x.size == 0 or x.size != len(factors) or not (np.isfinite(main) and np.all(np.isfinite(x))):
        return float("nan")
    d2 = (x - float(main)) ** 2
    labels = np.asarray(list(factors), dtype=object)
    return float(np.sqrt(sum(float(d2[labels == f].mean()) for f in dict.fromkeys(factors))))


def total_sd(statistical: float | None, systematic: float | None) -> float:
    """``sqrt(statistical² + systematic²)``; NaN when either is missing (None or NaN): a
    total is not reported when the model uncertainty was not estimated."""
    s = float("nan") if statistical is None else float(statistical)
    m = float("nan") if systematic is None else float(systematic)
    return math.hypot(s, m) if math.isfinite(s) and math.isfinite(m) else float("nan")


def _ratio_formula(reference: str) -> str:
    return (
        f"ratio_M = u_M / u_{reference}; u = A / N (signal areas) or u = A (per-proton "
        "amplitudes); no relaxation correction"
    )
