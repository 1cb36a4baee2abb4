"""Fourier transform and unit conversion in the NIfTI-MRS convention (axes: :mod:`specproc.axes`).

Convention (Clarke et al., Magn Reson Med 2022;88:2358-2370, and :mod:`specproc.data`): with
``S = fftshift(fft(fid))`` and ``f = fftshift(fftfreq(n, dwell_s))`` the chemical shift of a
spectral point is ``ppm = centre_ppm - f / spectrometer_mhz``; high ppm lies at low indices (on the
left of a plot). A resonance at shift δ has the time dependence
``exp(-2πi (δ - centre_ppm) · spectrometer_mhz · t)``.

Throughout ``specproc.preprocess`` a *frequency* in Hz means a frequency on the FFT axis ``f``;
a positive frequency shift therefore moves peaks to lower ppm.
"""

from __future__ import annotations

import numpy as np

from specproc.axes import freq_axis_hz, hz_to_ppm, ppm_axis, ppm_to_hz
from specproc.errors import InvalidInputError

__all__ = [
    "freq_axis_hz",
    "hz_to_ppm",
    "ppm_axis",
    "ppm_to_hz",
    "ppm_window_mask",
    "shift_frequency",
    "to_fid",
    "to_spectrum",
    "zero_fill",
]


def ppm_window_mask(ppm: np.ndarray, window_ppm: tuple[float, float]) -> np.ndarray:
    """Boolean mask of the points of a ppm axis inside ``window_ppm`` (either order, inclusive).

    Raises
    ------
    InvalidInputError
        If the window holds no point of the axis.
    """
    low, high = sorted(float(v) for v in window_ppm)
    mask = (ppm >= low) & (ppm <= high)
    if not np.any(mask):
        raise InvalidInputError(
            f"the window {low:g}-{high:g} ppm lies outside the spectrum "
            f"({float(np.min(ppm)):.2f} to {float(np.max(ppm)):.2f} ppm)"
        )
    return mask


def zero_fill(fid: np.ndarray, *, n_points: int) -> np.ndarray:
    """Append zeros to ``n_points`` points on the last axis (the dtype kept).

    Raises
    ------
    InvalidInputError
        If ``n_points`` is below the number of points.
    """
    data = np.asarray(fid)
    n = int(n_points)
    if n < data.shape[-1]:
        raise InvalidInputError(f"cannot zero-fill {data.shape[-1]} points to fewer ({n})")
    zeros = np.zeros((*data.shape[:-1], n - data.shape[-1]), dtype=data.dtype)
    return np.concatenate((data, zeros), axis=-1)


def to_spectrum(fid: np.ndarray, *, n_points: int | None = None) -> np.ndarray:
    """Spectrum of an FID in the NIfTI-MRS convention, ``fftshift(fft(fid))`` on the last axis.

    After optional zero-filling (:func:`zero_fill`); the spectrum keeps the complex dtype of
    the FID (a real FID gives complex128).

    Parameters
    ----------
    fid : (..., n) complex ndarray
        Time-domain data, time on the last axis.
    n_points : int, optional
        Zero-fill to this many points first (must be at least ``n``).

    Returns
    -------
    spectrum : (..., n_points) complex ndarray
    """
    data = np.asarray(fid)
    if not np.iscomplexobj(data):  # a real input would otherwise lose its imaginary part
        data = data.astype(np.complex128)
    if n_points is not None and int(n_points) != data.shape[-1]:
        data = zero_fill(data, n_points=int(n_points))
    spectrum = np.fft.fft(data, axis=-1).astype(data.dtype, copy=False)
    return np.fft.fftshift(spectrum, axes=-1)


def to_fid(spectrum: np.ndarray) -> np.ndarray:
    """Inverse of :func:`to_spectrum` (without zero-filling): ``ifft(ifftshift(spectrum))``."""
    data = np.asarray(spectrum)
    return np.fft.ifft(np.fft.ifftshift(data, axes=-1), axis=-1)


def shift_frequency(fid: np.ndarray, *, shift_hz: float | np.ndarray, dwell_s: float) -> np.ndarray:
    """Move every resonance by ``shift_hz`` on the FFT frequency axis: ``fid · exp(2πi Δf t)``.

    A positive shift moves peaks to lower ppm by ``shift_hz / spectrometer_mhz``.

    Parameters
    ----------
    fid : (..., n) complex ndarray
    shift_hz : float or (...,) ndarray
        Shift per trace, Hz (broadcast over the leading axes).
    dwell_s : float
        Sampling interval, s.
    """
    data = np.asarray(fid)
    t = np.arange(data.shape[-1]) * float(dwell_s)
    shift = np.asarray(shift_hz, dtype=float)[..., None]
    return data * np.exp(2j * np.pi * shift * t)
