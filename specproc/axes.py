"""The frequency and chemical-shift axes of a spectrum (one definition for every module).

In the NIfTI-MRS convention the spectrum is ``S = fftshift(fft(fid))`` and its frequency axis
``f = fftshift(fftfreq(n, dwell_s))`` (Hz, increasing, relative to the receiver centre); the
chemical shift of a point is ``ppm = centre_ppm - f / spectrometer_mhz`` (decreasing). Used by
:class:`specproc.data.Scan`, :class:`specproc.basis.BasisSet`, the preprocessing steps and the
figures.
"""

from __future__ import annotations

import numpy as np

__all__ = ["freq_axis_hz", "hz_to_ppm", "ppm_axis", "ppm_to_hz"]


def freq_axis_hz(n_points: int, dwell_s: float) -> np.ndarray:
    """Frequency of each spectral point relative to the receiver centre, Hz (fftshift order).

    Parameters
    ----------
    n_points : int
        Number of spectral points.
    dwell_s : float
        Sampling interval of the FID, s.

    Returns
    -------
    freq_hz : (n_points,) ndarray
        Increasing frequencies ``fftshift(fftfreq(n_points, dwell_s))``.
    """
    return np.fft.fftshift(np.fft.fftfreq(int(n_points), float(dwell_s)))


def hz_to_ppm(
    freq_hz: float | np.ndarray, *, spectrometer_mhz: float, centre_ppm: float
) -> float | np.ndarray:
    """Shift of an FFT-axis frequency: ``ppm = centre_ppm - freq_hz / spectrometer_mhz``."""
    return centre_ppm - np.asarray(freq_hz, dtype=float) / spectrometer_mhz


def ppm_to_hz(
    shift_ppm: float | np.ndarray, *, spectrometer_mhz: float, centre_ppm: float
) -> float | np.ndarray:
    """FFT-axis frequency of a chemical shift: ``freq_hz = (centre_ppm - shift_ppm) · MHz``."""
    return (centre_ppm - np.asarray(shift_ppm, dtype=float)) * spectrometer_mhz


def ppm_axis(
    n_points: int, *, dwell_s: float, spectrometer_mhz: float, centre_ppm: float
) -> np.ndarray:
    """Chemical shift of each spectral point (fftshift order, decreasing), ppm."""
    return np.asarray(hz_to_ppm(
        freq_axis_hz(n_points, dwell_s), spectrometer_mhz=spectrometer_mhz, centre_ppm=centre_ppm
    ))
