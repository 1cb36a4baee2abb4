"""Peaks of a sampled 1-D signal: local maxima, their prominence, selection by height.

The definitions are those of :func:`scipy.signal.find_peaks` (checked against it in
``tests/test_peaks.py``), written with numpy alone because importing ``scipy.signal`` costs
tenths of a second (it loads ``scipy.stats``) and a scan needs only these few lines of it:

* A **local maximum** is a sample, or a run of equal samples (a plateau), higher than both its
  neighbours; the first and the last sample are never one. A plateau's peak is its middle
  sample (the left one of the two middle samples of an even run).
* The **prominence** of a peak at ``x[p]``: going left from ``p`` until a sample higher than
  ``x[p]`` (or the start), the lowest sample passed is the left base; likewise to the right;
  the prominence is ``x[p]`` minus the higher of the two bases.
"""

from __future__ import annotations

import numpy as np

__all__ = ["local_maxima", "peak_indices", "prominences"]


def local_maxima(x: np.ndarray) -> np.ndarray:
    """Indices of the local maxima of ``x`` (plateaus at their middle sample), ascending."""
    values = np.asarray(x, dtype=float).ravel()
    if values.size < 3:
        return np.zeros(0, dtype=np.intp)
    change = np.flatnonzero(values[1:] != values[:-1]) + 1
    starts = np.concatenate(([0], change))
    ends = np.concatenate((change - 1, [values.size - 1]))
    run = values[starts]  # one value per run of equal samples
    k = np.flatnonzero((run[1:-1] > run[:-2]) & (run[1:-1] > run[2:])) + 1
    return ((starts[k] + ends[k]) // 2).astype(np.intp)


def prominences(x: np.ndarray, peaks: np.ndarray) -> np.ndarray:
    """Prominence of each peak index of ``x`` (module notes), over the whole signal."""
    values = np.asarray(x, dtype=float).ravel()
    out = np.empty(len(peaks), dtype=float)
    for m, p in enumerate(np.asarray(peaks, dtype=np.intp)):
        top = values[p]
        higher_left = np.flatnonzero(values[:p] > top)
        higher_right = np.flatnonzero(values[p + 1:] > top)
        lo = int(higher_left[-1]) + 1 if higher_left.size else 0
        hi = p + 1 + int(higher_right[0]) if higher_right.size else values.size
        out[m] = top - max(float(values[lo:p + 1].min()), float(values[p:hi].min()))
    return out


def peak_indices(x: np.ndarray, *, min_height: float | None = None,
                 min_prominence: float | None = None) -> np.ndarray:
    """Local maxima of ``x`` at least ``min_height`` high and ``min_prominence`` prominent.

    The same indices as ``scipy.signal.find_peaks(x, height=min_height,
    prominence=min_prominence)[0]``.
    """
    values = np.asarray(x, dtype=float).ravel()
    peaks = local_maxima(values)
    if min_height is not None:
        peaks = peaks[values[peaks] >= float(min_height)]
    if min_prominence is not None:
        peaks = peaks[prominences(values, peaks) >= float(min_prominence)]
    return peaks
