"""Zero- and first-order phase correction, manual or automatic.

Phase model: a spectral point at shift δ is multiplied by
``exp(i (p0 + p1 · (δ - pivot_ppm)))`` with ``p0`` in degrees and ``p1`` in degrees per ppm.
Zero-order phase multiplies the FID by a constant; a first-order phase is applied in the
frequency domain and transformed back (equivalent to a fractional, circular time shift).

Automatic zero-order phase:

``"peak"``
    The largest peaks (local maxima of the magnitude spectrum inside a ppm window with a
    prominence of at least 5 % of the largest, :mod:`specproc.peaks`; typically the NAA,
    creatine and choline singlets) are made absorptive and positive: ``p0 = -arg Σ_k S(δ_k)``
    (their complex values, interpolated at the magnitude maxima of the zero-filled spectrum,
    summed, so the largest peaks weigh most). Common practice.
``"acme"``
    Minimum of the entropy of the first derivative of the real spectrum plus a penalty on
    negative intensities (ACME, Chen et al. 2002), minimised over ``p0`` with the Nelder-Mead
    driver :func:`nmrglue.process.proc_autophase.autops` (``disp=False``) from four starting
    phases.

The automatic phases are estimated on a zero-filled spectrum of the FID with its first point
halved: the DFT of a sampled decaying signal otherwise carries a constant offset ``x0/2`` whose
phase follows ``p0`` and biases both estimators by a few degrees (first-point scaling, Otting
et al. 1986).

References
----------
.. [1] Chen L, Weng Z, Goh L, Garland M. An efficient algorithm for automatic phase correction of
   NMR spectra based on entropy minimization. J Magn Reson 2002;158:164-168.
.. [2] Otting G, Widmer H, Wagner G, Wüthrich K. Origin of τ1 and τ2 ridges in 2D NMR spectra
   and procedures for suppression. J Magn Reson 1986;66:187-193 (first-point scaling).
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from specproc._versions import library_versions
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.peaks import peak_indices
from specproc.preprocess.transform import ppm_axis, ppm_window_mask, to_fid, to_spectrum

__all__ = [
    "acme_score",
    "apply_phase",
    "estimate_zero_order_phase",
    "phase_fid",
    "phase_scan",
]

PhaseMethod = Literal["peak", "acme", "manual"]
_METHODS = ("peak", "acme", "manual")
#: Weight of the negative-intensity penalty of ACME (Chen et al. 2002 use 1000; from memory).
ACME_PENALTY = 1000.0
#: Zero-filling factor of the spectrum on which automatic phases are estimated.
ZERO_FILL_FACTOR = 8


def apply_phase(
    spectrum: np.ndarray,
    ppm: np.ndarray,
    *,
    p0_deg: float = 0.0,
    p1_deg_per_ppm: float = 0.0,
    pivot_ppm: float = 4.65,
) -> np.ndarray:
    """Multiply a spectrum by ``exp(i (p0 + p1 (ppm - pivot)))`` (degrees, degrees/ppm)."""
    phase = np.radians(p0_deg + p1_deg_per_ppm * (np.asarray(ppm) - pivot_ppm))
    return np.asarray(spectrum) * np.exp(1j * phase)


def phase_fid(
    fid: np.ndarray,
    *,
    dwell_s: float,
    spectrometer_mhz: float,
    centre_ppm: float,
    p0_deg: float = 0.0,
    p1_deg_per_ppm: float = 0.0,
    pivot_ppm: float = 4.65,
) -> np.ndarray:
    """Apply a zero- and first-order phase to an FID (see :func:`apply_phase`)."""
    data = np.asarray(fid)
    if p1_deg_per_ppm == 0:
        return data * np.exp(1j * np.radians(p0_deg))
    ppm = ppm_axis(data.shape[-1], dwell_s=dwell_s, spectrometer_mhz=spectrometer_mhz,
                   centre_ppm=centre_ppm)
    spec = apply_phase(to_spectrum(data), ppm, p0_deg=p0_deg, p1_deg_per_ppm=p1_deg_per_ppm,
                       pivot_ppm=pivot_ppm)
    return to_fid(spec)


def acme_score(real_spectrum: np.ndarray, *, penalty: float = ACME_PENALTY) -> float:
    """ACME objective of a real spectrum (Chen et al. 2002).

    With ``R`` the spectrum scaled to ``max |R| = 1``, ``h = |R'| / Σ|R'|`` the normalised
    absolute first derivative, the score is ``-Σ h ln h + penalty · Σ_{R<0} R²``.
    """
    r = np.asarray(real_spectrum, dtype=float)
    scale = float(np.max(np.abs(r)))
    if not scale > 0:
        return 0.0
    r = r / scale
    deriv = np.abs(np.diff(r))
    total = float(deriv.sum())
    if not total > 0:
        return 0.0
    h = deriv / total
    h = h[h > 0]
    entropy = float(-np.sum(h * np.log(h)))
    negative = r[r < 0]
    return entropy + penalty * float(np.sum(negative**2))


def _value_at_peak(spec: np.ndarray, k: int) -> complex:
    """Complex spectrum at the interpolated maximum of its magnitude near index ``k``.

    The sub-sample position comes from a parabola through the magnitudes at ``k-1, k, k+1``;
    the complex value from quadratic (Lagrange) interpolation of the three complex samples. A
    sample beside the true maximum of a Lorentzian carries a dispersive phase error up to
    ``atan(spacing / linewidth)``, which this removes.
    """
    if k <= 0 or k >= spec.size - 1:
        return complex(spec[k])
    m0, m1, m2 = np.abs(spec[k - 1 : k + 2])
    denom = m0 - 2 * m1 + m2
    d = 0.0 if denom == 0 else float(np.clip(0.5 * (m0 - m2) / denom, -0.5, 0.5))
    s0, s1, s2 = spec[k - 1 : k + 2]
    return complex(s0 * d * (d - 1) / 2 + s1 * (1 - d * d) + s2 * d * (d + 1) / 2)


def estimate_zero_order_phase(
    spectrum: np.ndarray,
    ppm: np.ndarray,
    *,
    method: Literal["peak", "acme"] = "peak",
    window_ppm: tuple[float, float] = (1.8, 4.2),
    n_peaks: int = 3,
) -> float:
    """Zero-order phase (degrees) that makes a spectrum absorptive inside ``window_ppm``.

    Apply the result with ``spectrum · exp(i p0)`` (:func:`apply_phase`).

    Parameters
    ----------
    spectrum : (n,) complex ndarray
    ppm : (n,) ndarray
        Shift axis of the spectrum.
    method : {"peak", "acme"}
        See the module notes.
    window_ppm : (float, float)
        Part of the spectrum used.
    n_peaks : int
        Number of largest peaks used by ``"peak"``.
    """
    spec = np.asarray(spectrum)[ppm_window_mask(np.asarray(ppm), window_ppm)]
    if not np.any(np.abs(spec) > 0):
        raise InvalidInputError("no signal in the phasing window")
    if method == "peak":
        magnitude = np.abs(spec)
        # peaks standing out by at least 5 % of the largest: no ripples on a tail
        peaks = peak_indices(magnitude, min_prominence=0.05 * float(magnitude.max()))
        if peaks.size == 0:
            peaks = np.array([int(np.argmax(magnitude))])
        top = peaks[np.argsort(magnitude[peaks])[::-1][: max(1, int(n_peaks))]]
        return float(-np.degrees(np.angle(sum(_value_at_peak(spec, int(k)) for k in top))))
    if method == "acme":
        from nmrglue.process import proc_autophase  # loads scipy.signal: only when asked

        def score(ph: np.ndarray, data: np.ndarray) -> float:
            return acme_score(np.real(data * np.exp(1j * np.radians(ph[0]))))

        best_p0, best_score = 0.0, np.inf
        for start in (0.0, 90.0, 180.0, 270.0):
            _, opt = proc_autophase.autops(spec, score, p0=start, p1=0.0, return_phases=True,
                                           disp=False)
            value = score(opt, spec)
            if value < best_score:
                best_p0, best_score = float(opt[0]), value
        return float((best_p0 + 180.0) % 360.0 - 180.0)
    raise InvalidInputError(f"unknown phasing method {method!r}; valid: peak, acme")


def phase_scan(
    scan: Scan,
    *,
    method: PhaseMethod = "peak",
    window_ppm: tuple[float, float] = (1.8, 4.2),
    n_peaks: int = 3,
    p0_deg: float = 0.0,
    p1_deg_per_ppm: float = 0.0,
    pivot_ppm: float = 4.65,
) -> Scan:
    """Phase an averaged Scan: automatic zero order (``"peak"``, ``"acme"``) or manual.

    With ``method="manual"`` the given ``p0_deg`` is applied; ``p1_deg_per_ppm`` is always
    applied (manual first order about ``pivot_ppm``). The record holds the phases applied.
    """
    if method not in _METHODS:
        raise InvalidInputError(f"unknown phasing method {method!r}; valid: {', '.join(_METHODS)}")
    if scan.dims != ():
        raise InvalidInputError("phasing needs one averaged FID", scan.source)
    centre = scan.reference_ppm
    if method == "manual":
        p0 = float(p0_deg)
    else:
        n_fine = scan.n_points * ZERO_FILL_FACTOR
        ppm = ppm_axis(n_fine, dwell_s=scan.dwell_s,
                       spectrometer_mhz=scan.spectrometer_mhz, centre_ppm=centre)
        halved = np.array(scan.data)
        halved[0] /= 2  # first point halved: no constant offset in the spectrum (see notes)
        spec = apply_phase(to_spectrum(halved, n_points=n_fine), ppm,
                           p1_deg_per_ppm=p1_deg_per_ppm, pivot_ppm=pivot_ppm)
        p0 = estimate_zero_order_phase(spec, ppm, method=method, window_ppm=window_ppm,
                                       n_peaks=n_peaks)
    data = phase_fid(scan.data, dwell_s=scan.dwell_s, spectrometer_mhz=scan.spectrometer_mhz,
                     centre_ppm=centre, p0_deg=p0, p1_deg_per_ppm=p1_deg_per_ppm,
                     pivot_ppm=pivot_ppm)
    details = {"method": method, "window_ppm": [float(v) for v in window_ppm],
               "p0_deg": p0, "p1_deg_per_ppm": float(p1_deg_per_ppm),
               "pivot_ppm": float(pivot_ppm),
               "libraries": library_versions(*(("numpy", "scipy", "nmrglue") if method == "acme"
                                               else ("numpy",)))}
    return scan.with_step("phase correction", details, data=data.astype(scan.data.dtype))
