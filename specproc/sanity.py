"""Checks that refuse impossible inputs and mark impossible results (pure functions).

* :func:`check_signal`: data no analysis can make sense of (every sample zero, every FID
  constant in time, too few points, magnitudes beyond what double precision can square) are
  refused before any processing, with a message naming the file.
* :func:`collapse_reason`: a fit whose principal metabolites are all at zero, or whose
  frequency shift ended at its limit, found no spectrum; it is reported as failed, not as a
  success with numbers.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError

__all__ = ["MAX_SAMPLE_MAGNITUDE", "MIN_POINTS", "MIN_SAMPLE_MAGNITUDE", "PRINCIPAL_METABOLITES",
           "ZERO_FRACTION", "check_signal", "collapse_reason"]

#: Fewest time-domain points an analysis accepts (a spectrum of fewer points cannot separate
#: the singlets of NAA, creatine and choline at any field; common practice).
MIN_POINTS: int = 64
#: Largest sample magnitude accepted: its square must stay far from the float64 limit
#: (1.8e308) through sums over thousands of points.
MAX_SAMPLE_MAGNITUDE: float = 1e150
#: Smallest largest-sample magnitude accepted: below it squares underflow float64 (1e-308).
MIN_SAMPLE_MAGNITUDE: float = 1e-150
#: Members of tNAA and tCr, the two largest singlets of every brain spectrum and the reference
#: of every ratio: when all that the basis holds are fitted as zero, the fit found no spectrum
#: (and every ratio to tCr is undefined).
PRINCIPAL_METABOLITES: tuple[str, ...] = ("NAA", "NAAG", "Cr", "PCr")
#: An amplitude below this fraction of the largest one counts as zero (round-off of the
#: non-negative least squares leaves 1e-13-sized remainders).
ZERO_FRACTION: float = 1e-6


def check_signal(scan: Any) -> None:
    """Refuse data without a usable signal.

    Parameters
    ----------
    scan : Scan
        Raw or processed data (time on the last axis).

    Raises
    ------
    InvalidInputError
        For fewer than :data:`MIN_POINTS` points, every sample zero, every FID constant over
        time (no decay: a single spike at 0 Hz), or samples larger than
        :data:`MAX_SAMPLE_MAGNITUDE`; the message names the scan's file.
    """
    data = np.asarray(scan.data)
    where = scan.source
    if scan.n_points < MIN_POINTS:
        raise InvalidInputError(
            f"{scan.n_points} time-domain points are too few to analyse (at least {MIN_POINTS})",
            where)
    parts = np.maximum(np.abs(data.real), np.abs(data.imag))
    largest = float(parts.max())
    if largest == 0.0:
        raise InvalidInputError("every sample is zero: the data hold no signal", where)
    if largest < MIN_SAMPLE_MAGNITUDE:
        raise InvalidInputError(
            f"sample magnitudes of at most {largest:.3g} are too small to be processed "
            f"(at least {MIN_SAMPLE_MAGNITUDE:g}); check the scaling of the data", where)
    if largest > MAX_SAMPLE_MAGNITUDE:
        raise InvalidInputError(
            f"sample magnitudes up to {largest:.3g} are beyond what can be processed "
            f"(at most {MAX_SAMPLE_MAGNITUDE:g}); check the scaling of the data", where)
    flat = data.reshape(-1, data.shape[-1])
    spread = np.max(np.abs(flat - flat[:, :1]), axis=-1)
    if np.all(spread <= 1e-9 * largest):
        raise InvalidInputError(
            "every FID is constant in time (no decaying signal): not MR spectroscopy data",
            where)


def collapse_reason(names: Sequence[str], amplitudes: Sequence[float] | np.ndarray,
                    flags: Sequence[str]) -> str | None:
    """Why a fit is to be called failed although the optimiser converged, or ``None``.

    Parameters
    ----------
    names : sequence of str
        Basis members, in the order of ``amplitudes``.
    amplitudes : sequence of float or (n_members,) ndarray
        Fitted amplitudes.
    flags : sequence of str
        The fit's flags (``at_bound:shift_<group>_hz`` for a group shift at its limit).

    Returns
    -------
    str or None
        ``"principal_metabolites_zero"`` when every principal metabolite of the basis
        (:data:`PRINCIPAL_METABOLITES`) is at zero (below :data:`ZERO_FRACTION` of the
        largest amplitude); ``"shift_at_limit"`` when a group
        frequency shift ended at its bound; ``None`` otherwise.
    """
    values = [float(a) for a in amplitudes]
    principal = [a for n, a in zip(names, values, strict=True) if n in PRINCIPAL_METABOLITES]
    largest = max((a for a in values if a == a), default=0.0)
    if principal and all(not a > ZERO_FRACTION * largest for a in principal):
        return "principal_metabolites_zero"
    for flag in flags:
        name = flag.split(":", 1)[1] if flag.startswith("at_bound:") else ""
        if name.startswith("shift_") and name.endswith("_hz"):
            return "shift_at_limit"
    return None
