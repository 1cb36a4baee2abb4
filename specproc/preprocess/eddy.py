"""Eddy-current correction with the phase of the water reference (Klose 1990).

Eddy currents after the gradients make the phase of the acquired signal a function of time,
``φ_ec(t)``, common to every resonance of the voxel. The unsuppressed water signal is a single
strong resonance, so its point-wise phase ``φ_w(t) = arg w(t)`` measures ``φ_ec(t)`` (plus the
water's own frequency offset and phase). Multiplying the metabolite FID and the water FID by
``exp(-i φ_w(t))`` removes it.

Plain Klose correction also removes the water's frequency offset and zero-order phase, so it
moves the metabolites by the water's offset and leaves the water exactly on the receiver centre.
With ``preserve_water_offset=True`` the linear phase ``2π f_w t`` of the water's frequency
``f_w`` (its magnitude-spectrum peak, which the eddy phase itself can pull by a fraction of a Hz)
is kept, and only the remainder is removed: the water peak then stays where it was (its
zero-order phase is still removed).

Where the water signal has decayed into the noise its phase is noise as well; the correction
then randomises the phase of those late points (a unit-modulus factor: it adds no noise power,
but the very end of the FID carries no usable signal afterwards).

References
----------
.. [1] Klose U. In vivo proton spectroscopy in presence of eddy currents. Magn Reson Med
   1990;14:26-30.
"""

from __future__ import annotations

import numpy as np

from specproc.data import Scan
from specproc.errors import InvalidInputError

__all__ = ["correct_eddy_currents", "correct_eddy_currents_scan", "eddy_phase"]


def eddy_phase(
    water_fid: np.ndarray, *, dwell_s: float, preserve_water_offset: bool = False
) -> np.ndarray:
    """The phase to remove, rad: the unwrapped point-wise phase of the water FID.

    Parameters
    ----------
    water_fid : (n_points,) complex ndarray
        Averaged water reference FID.
    dwell_s : float
        Sampling interval, s.
    preserve_water_offset : bool
        Keep the water's frequency offset: ``2π f_w t`` (``f_w`` the peak of the water's
        magnitude spectrum) is subtracted from the phase to remove.

    Returns
    -------
    phase_rad : (n_points,) ndarray
    """
    w = np.asarray(water_fid)
    if w.ndim != 1:
        raise InvalidInputError(f"the water reference must be one FID, got shape {w.shape}")
    if not np.any(np.abs(w) > 0):
        raise InvalidInputError("the water reference is all zero: no phase to remove")
    phase = np.unwrap(np.angle(w))
    if preserve_water_offset:
        t = np.arange(w.size) * dwell_s
        phase = phase - 2 * np.pi * _peak_frequency_hz(w, dwell_s) * t
    return phase


def _peak_frequency_hz(fid: np.ndarray, dwell_s: float, zero_fill: int = 8) -> float:
    """FFT-axis frequency of the magnitude maximum (zero-filled, parabolic interpolation)."""
    n = fid.size * zero_fill
    magnitude = np.abs(np.fft.fft(fid, n))
    k = int(np.argmax(magnitude))
    y0, y1, y2 = magnitude[k - 1], magnitude[k], magnitude[(k + 1) % n]
    denom = y0 - 2 * y1 + y2
    delta = 0.0 if denom == 0 else 0.5 * (y0 - y2) / denom
    return float(np.fft.fftfreq(n, dwell_s)[k] + delta / (n * dwell_s))


def correct_eddy_currents(fid: np.ndarray, phase_rad: np.ndarray) -> np.ndarray:
    """``fid · exp(-i φ(t))`` on the last axis (Klose 1990).

    Parameters
    ----------
    fid : (..., n_points) complex ndarray
    phase_rad : (n_points,) ndarray
        Phase from :func:`eddy_phase`.
    """
    data = np.asarray(fid)
    phase = np.asarray(phase_rad, dtype=float)
    if phase.shape != (data.shape[-1],):
        raise InvalidInputError(
            f"the eddy-current phase has {phase.size} points, the data {data.shape[-1]}"
        )
    return data * np.exp(-1j * phase)


def correct_eddy_currents_scan(
    scan: Scan, water: Scan, *, preserve_water_offset: bool = False
) -> tuple[Scan, Scan]:
    """Klose correction of a Scan and of its (averaged) water reference.

    Parameters
    ----------
    scan : Scan
        Metabolite data (any extra axes; time last).
    water : Scan
        Averaged water reference, ``dims == ()``, same points and dwell as ``scan``.
    preserve_water_offset : bool
        See :func:`eddy_phase`.

    Returns
    -------
    scan, water : Scan
        Both corrected, each with a provenance record.
    """
    if water.dims != ():
        raise InvalidInputError("the water reference must be averaged first", water.source)
    if water.n_points != scan.n_points or not np.isclose(water.dwell_s, scan.dwell_s):
        raise InvalidInputError(
            "the water reference has a different number of points or dwell time", water.source
        )
    phase = eddy_phase(water.data, dwell_s=water.dwell_s,
                       preserve_water_offset=preserve_water_offset)
    n_show = min(8, phase.size)
    details = {
        "method": "point-wise phase of the water reference removed (Klose 1990)",
        "preserve_water_offset": bool(preserve_water_offset),
        "water_source": water.source,
        "phase_first_points_deg": [float(v) for v in np.degrees(phase[:n_show])],
    }
    dtype = scan.data.dtype
    new_scan = scan.with_step("eddy-current correction", details,
                              data=correct_eddy_currents(scan.data, phase).astype(dtype))
    new_water = water.with_step("eddy-current correction", details,
                                data=correct_eddy_currents(water.data, phase).astype(
                                    water.data.dtype))
    return new_scan, new_water
