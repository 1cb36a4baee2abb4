"""Frequency referencing: put known singlets at their trade chemical shifts.

The reference peaks are the NAA acetyl singlet at 2.008 ppm, the total-creatine methyl singlet at
3.027 ppm (Govindaraju et al. 2000) and the total-choline trimethyl peak near 3.2 ppm (the
Govindaraju table lists 3.185 ppm for free choline and about 3.21 ppm for GPC and PCh, which
dominate in vivo; 3.2 is common practice), or water, whose shift depends on temperature: 4.65 ppm
at 37 °C, about -0.01 ppm per °C (common practice).

Method: the magnitude spectrum (phase-independent) is zero-filled, cross-correlated with a comb
of Lorentzians at the expected shifts to find a coarse offset within ``±max_offset_ppm``, then
each peak is located within ``±search_ppm`` of its coarse position with three-point parabolic
interpolation; the offset is the median of the per-peak offsets.

Applying the offset: by default the FID is frequency-shifted (``apply_to="fid"``) so that the
peaks land at their trade values on the Scan's existing axis (``centre_ppm`` unchanged, which is
what a basis set simulated for the nominal centre expects); ``apply_to="axis"`` instead changes
the Scan's ``centre_ppm`` and leaves the samples untouched.

References
----------
.. [1] Govindaraju V, Young K, Maudsley AA. Proton NMR chemical shifts and coupling constants for
   brain metabolites. NMR Biomed 2000;13:129-153.
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.transform import ppm_axis, shift_frequency, to_spectrum

__all__ = [
    "METABOLITE_SINGLETS_PPM",
    "estimate_reference_offset",
    "locate_peak_ppm",
    "reference_scan",
    "water_shift_ppm",
]

#: NAA 2.008 and creatine 3.027 ppm (Govindaraju et al. 2000), choline 3.2 ppm (common practice).
METABOLITE_SINGLETS_PPM: tuple[float, ...] = (2.008, 3.027, 3.2)

ApplyTo = Literal["fid", "axis"]


def water_shift_ppm(temperature_c: float = 37.0) -> float:
    """Shift of water at a temperature: ``4.65 - 0.01 (T - 37 °C)`` ppm (common practice)."""
    return 4.65 - 0.01 * (float(temperature_c) - 37.0)


def locate_peak_ppm(
    magnitude: np.ndarray, ppm: np.ndarray, *, around_ppm: float, search_ppm: float
) -> tuple[float, float]:
    """Position (ppm) and height of the maximum of ``magnitude`` within ``around ± search``.

    Three-point parabolic interpolation refines the position between samples.

    Returns
    -------
    shift_ppm, height : float
        ``nan`` position when the window is empty or the maximum lies on its edge.
    """
    mag = np.asarray(magnitude, dtype=float)
    ppm = np.asarray(ppm, dtype=float)
    inside = np.flatnonzero(np.abs(ppm - around_ppm) <= search_ppm)
    if inside.size < 3:
        return float("nan"), float("nan")
    k = int(inside[np.argmax(mag[inside])])
    if k in (inside[0], inside[-1]) or k == 0 or k == mag.size - 1:
        return float("nan"), float(mag[k])
    y0, y1, y2 = mag[k - 1], mag[k], mag[k + 1]
    denom = y0 - 2 * y1 + y2
    delta = 0.0 if denom == 0 else 0.5 * (y0 - y2) / denom
    step = ppm[k + 1] - ppm[k]
    return float(ppm[k] + delta * step), float(y1 - 0.25 * (y0 - y2) * delta)


def estimate_reference_offset(
    fid: np.ndarray,
    *,
    dwell_s: float,
    spectrometer_mhz: float,
    centre_ppm: float,
    peaks_ppm: tuple[float, ...] = METABOLITE_SINGLETS_PPM,
    search_ppm: float = 0.1,
    max_offset_ppm: float = 0.5,
    zero_fill_factor: int = 8,
    min_peak_snr: float = 5.0,
) -> tuple[float, dict[str, Any]]:
    """How far (ppm) the given singlets sit above their expected shifts.

    Parameters
    ----------
    fid : (n_points,) complex ndarray
    dwell_s, spectrometer_mhz, centre_ppm : float
        Sampling interval (s), spectrometer frequency (MHz), shift at the centre (ppm).
    peaks_ppm : tuple of float
        Expected shifts of the reference peaks, ppm.
    search_ppm : float
        Half-width of the search window of each peak around its coarse position, ppm.
    max_offset_ppm : float
        Largest offset considered by the coarse comb search, ppm.
    zero_fill_factor : int
        Zero-filling factor of the spectrum used.
    min_peak_snr : float
        A peak counts as found only if its magnitude exceeds this multiple of the noise SD
        (1.4826 × MAD of the real spectrum, robust to the peaks; Rousseeuw & Croux 1993).

    Returns
    -------
    offset_ppm : float
        Measured minus expected shift (median over the peaks found); subtract it from the axis.
    details : dict
        ``expected_ppm``, ``found_ppm`` (``None`` where a peak was not found), ``coarse_ppm``.

    Raises
    ------
    InvalidInputError
        If no reference peak is found.
    """
    x = np.asarray(fid)
    n = x.shape[-1] * max(1, int(zero_fill_factor))
    ppm = ppm_axis(n, dwell_s=dwell_s, spectrometer_mhz=spectrometer_mhz, centre_ppm=centre_ppm)
    spectrum = to_spectrum(x, n_points=n)
    mag = np.abs(spectrum)
    if not np.any(mag > 0):
        raise InvalidInputError("cannot reference an all-zero spectrum")
    real = spectrum.real
    noise_sd = 1.4826 * float(np.median(np.abs(real - np.median(real))))
    expected = np.asarray(peaks_ppm, dtype=float)
    # coarse: correlate the magnitude with a comb of 0.03 ppm wide Lorentzians
    step = abs(ppm[1] - ppm[0])
    lags = np.arange(-int(max_offset_ppm / step), int(max_offset_ppm / step) + 1)
    region = (ppm > expected.min() - max_offset_ppm - 0.2) & (
        ppm < expected.max() + max_offset_ppm + 0.2)
    idx = np.flatnonzero(region)
    gamma = 0.015
    best_lag, best_value = 0, -np.inf
    for lag in lags[:: max(1, len(lags) // 400)]:
        comb = np.sum(1 / (1 + ((ppm[idx, None] - (expected + lag * step)) / gamma) ** 2), axis=1)
        value = float(mag[idx] @ comb)
        if value > best_value:
            best_lag, best_value = int(lag), value
    coarse = best_lag * step
    found: list[float | None] = []
    offsets = []
    for e in expected:
        where, height = locate_peak_ppm(mag, ppm, around_ppm=e + coarse, search_ppm=search_ppm)
        if np.isfinite(where) and height > min_peak_snr * noise_sd:
            found.append(float(where))
            offsets.append(where - e)
        else:
            found.append(None)
    if not offsets:
        raise InvalidInputError(
            f"none of the reference peaks {list(map(float, expected))} ppm stands out of the "
            f"noise (peak SNR > {min_peak_snr:g})"
        )
    offset = float(np.median(offsets))
    return offset, {"expected_ppm": [float(v) for v in expected], "found_ppm": found,
                    "coarse_offset_ppm": float(coarse)}


def reference_scan(
    scan: Scan,
    *,
    offset_ppm: float | None = None,
    peaks_ppm: tuple[float, ...] = METABOLITE_SINGLETS_PPM,
    search_ppm: float = 0.1,
    max_offset_ppm: float = 0.5,
    apply_to: ApplyTo = "fid",
    details: dict[str, Any] | None = None,
) -> Scan:
    """Reference an averaged Scan so that the chosen peaks sit at their expected shifts.

    Parameters
    ----------
    scan : Scan
        One averaged FID (``dims == ()``).
    offset_ppm : float, optional
        Apply this offset instead of measuring it (e.g. one measured on another scan).
    peaks_ppm, search_ppm, max_offset_ppm :
        See :func:`estimate_reference_offset`.
    apply_to : {"fid", "axis"}
        Shift the FID by ``offset · MHz`` Hz (default) or lower ``centre_ppm`` by the offset.
    details : dict, optional
        Extra items for the provenance record.
    """
    if apply_to not in ("fid", "axis"):
        raise InvalidInputError(f"unknown apply_to {apply_to!r}; valid: fid, axis")
    record: dict[str, Any] = dict(details or {})
    if offset_ppm is None:
        offset_ppm, found = estimate_reference_offset(
            scan.data, dwell_s=scan.dwell_s, spectrometer_mhz=scan.spectrometer_mhz,
            centre_ppm=scan.reference_ppm, peaks_ppm=peaks_ppm, search_ppm=search_ppm,
            max_offset_ppm=max_offset_ppm,
        )
        record.update(found)
    record.update({"offset_ppm": float(offset_ppm), "apply_to": apply_to,
                   "shift_hz": float(offset_ppm * scan.spectrometer_mhz)})
    if apply_to == "fid":
        data = shift_frequency(scan.data, shift_hz=offset_ppm * scan.spectrometer_mhz,
                               dwell_s=scan.dwell_s).astype(scan.data.dtype)
        return scan.with_step("frequency referencing", record, data=data)
    return scan.with_step("frequency referencing", record,
                          centre_ppm=scan.reference_ppm - offset_ppm)
