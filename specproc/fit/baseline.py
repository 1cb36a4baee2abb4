"""Penalised cubic B-spline baseline (P-spline) on the ppm axis.

The baseline is ``B(ν) = Σ_k β_k N_k(ppm(ν))`` with complex coefficients β_k and cubic
B-splines ``N_k`` on equally spaced knots, plus a roughness penalty ``λ ||D₂ β||²`` on the second
differences of the coefficients (Eilers & Marx 1996).

References
----------
.. [1] Eilers PHC, Marx BD. Flexible smoothing with B-splines and penalties. Stat Sci
   1996;11:89-121.
"""

from __future__ import annotations

import numpy as np
from scipy.interpolate import BSpline

__all__ = ["bspline_design", "penalty_scale", "second_difference"]


def bspline_design(ppm: np.ndarray, *, knot_ppm: float, degree: int = 3) -> np.ndarray:
    """Design matrix of cubic B-splines on equally spaced knots covering ``ppm``.

    Parameters
    ----------
    ppm : (n,) ndarray
        Positions, ppm (any order).
    knot_ppm : float
        Knot spacing, ppm; it is shrunk slightly so that a whole number of intervals spans the
        range of ``ppm``.
    degree : int
        Spline degree (3: cubic).

    Returns
    -------
    (n, n_basis) ndarray
        ``N_k(ppm_i)``; every row sums to 1 (partition of unity).
    """
    x = np.asarray(ppm, dtype=float)
    lo, hi = float(x.min()), float(x.max())
    n_int = max(1, int(np.ceil((hi - lo) / float(knot_ppm) - 1e-9)))
    step = (hi - lo) / n_int if hi > lo else 1.0
    knots = lo + step * np.arange(-degree, n_int + degree + 1)
    # the end knots are computed, so clip to them (not to lo, hi) against rounding
    xc = np.clip(x, knots[degree], knots[-degree - 1])
    matrix = BSpline.design_matrix(xc, knots, degree, extrapolate=False)
    return np.asarray(matrix.toarray())


def second_difference(n_basis: int) -> np.ndarray:
    """Second-difference matrix D₂ of shape (n_basis - 2, n_basis) (zero rows if n < 3)."""
    if n_basis < 3:
        return np.zeros((0, n_basis))
    return np.diff(np.eye(n_basis), 2, axis=0)


def penalty_scale(n_points: int, n_basis: int) -> float:
    """Scale that makes the penalty weight independent of the sampling density.

    The data term grows with the number of spectral points that each coefficient touches, about
    ``n_points / n_basis``; the penalty weight used is ``baseline_penalty · n_points /
    n_basis``.
    """
    return float(n_points) / max(int(n_basis), 1)
