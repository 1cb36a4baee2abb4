"""Frequency and phase drift correction, outlier transient rejection and averaging.

Spectral registration in the time domain (Near et al. 2015): each transient ``x`` is matched to a
reference ``r`` by the frequency ``Δf`` and zero-order phase ``Δφ`` that minimise
``Σ_t |x(t) · exp(-i(2π Δf t + Δφ)) - r(t)|²``. Before the fit both signals are limited to a ppm
window (the other spectral points set to zero, back to the time domain; :func:`window_filter`), so
that a residual water peak or lipids do not steer the fit, and only the first ``fit_duration_s`` of
the filtered FIDs are used (where the signal lies). The least-squares fit
(:func:`scipy.optimize.least_squares`, analytic Jacobian) starts from the best frequency of a
coarse grid search of the correlation ``|Σ_t conj(r) x exp(-2πi f t)|``.

Sign convention: ``shift_hz`` is the frequency by which the transient is *displaced* on the FFT
axis (a positive value means its peaks sit at lower ppm by ``shift_hz / spectrometer_mhz``) and
``phase_deg`` its phase; the correction multiplies it by ``exp(-i(2π shift_hz t + phase))``.

References
----------
.. [1] Near J, Edden R, Evans CJ, Paquin R, Harris A, Jezzard P. Frequency and phase drift
   correction of magnetic resonance spectroscopy data by spectral registration in the time
   domain. Magn Reson Med 2015;73:44-50.
.. [2] Rousseeuw PJ, Croux C. Alternatives to the median absolute deviation. J Am Stat Assoc
   1993;88:1273-1283 (the 1.4826 consistency factor of the MAD).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from scipy.optimize import least_squares

from specproc._versions import library_versions
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.transform import ppm_axis, ppm_window_mask, to_fid, to_spectrum

__all__ = [
    "RegistrationResult",
    "align_transients_scan",
    "apply_registration",
    "average_transients_scan",
    "outlier_scores",
    "register_transients",
    "reject_outliers_scan",
    "robust_z_scores",
    "window_filter",
]

ReferenceKind = Literal["median", "mean"]
_REFERENCES = ("median", "mean")
TRANSIENT_AXIS = "DIM_DYN"
#: Floor of the outlier-score scale, as a fraction of the median residual (common practice).
MIN_RELATIVE_SCALE = 0.05
#: Transients whose first-pass residual has a robust z-score above this are left out of the
#: mean reference of later passes (a spike or a corrupt transient would dominate the mean).
_REFERENCE_Z_LIMIT = 10.0


@dataclass(frozen=True)
class RegistrationResult:
    """Per-transient result of :func:`register_transients`.

    Attributes
    ----------
    shifts_hz : (n_transients,) ndarray
        Frequency displacement of each transient relative to the reference, Hz (FFT axis).
    phases_deg : (n_transients,) ndarray
        Zero-order phase of each transient relative to the reference, degrees.
    residuals : (n_transients,) ndarray
        RMS of the windowed registration residual (data units).
    reference : (n_points,) complex ndarray
        The (unfiltered) reference FID of the last pass.
    passes : int
        Number of registration passes made.
    """

    shifts_hz: np.ndarray
    phases_deg: np.ndarray
    residuals: np.ndarray
    reference: np.ndarray
    passes: int


def window_filter(
    fids: np.ndarray,
    *,
    dwell_s: float,
    spectrometer_mhz: float,
    centre_ppm: float,
    window_ppm: tuple[float, float],
) -> np.ndarray:
    """Keep only the spectral content inside ``window_ppm`` and return to the time domain.

    The FIDs are zero-filled to twice their length before the FFT, so that the filter acts as a
    linear (not circular) convolution in time: otherwise the ringing of the FID's start would
    wrap around to its end and bias a fit that uses late points. The result is cut back to the
    original length.

    Parameters
    ----------
    fids : (..., n_points) complex ndarray
    dwell_s, spectrometer_mhz, centre_ppm : float
        Sampling interval (s), spectrometer frequency (MHz), shift at the centre (ppm).
    window_ppm : (float, float)
        Window kept, ppm.
    """
    data = np.asarray(fids)
    n = data.shape[-1]
    ppm = ppm_axis(2 * n, dwell_s=dwell_s, spectrometer_mhz=spectrometer_mhz,
                   centre_ppm=centre_ppm)
    mask = ppm_window_mask(ppm, window_ppm)
    return to_fid(to_spectrum(data, n_points=2 * n) * mask)[..., :n]


def _robust_reference(fids: np.ndarray, kind: str) -> np.ndarray:
    if kind == "median":  # element-wise median of the real and imaginary parts
        return np.median(fids.real, axis=0) + 1j * np.median(fids.imag, axis=0)
    if kind == "mean":
        return fids.mean(axis=0)
    raise InvalidInputError(f"unknown reference {kind!r}; valid: {', '.join(_REFERENCES)}")


def _register_one(
    x: np.ndarray, ref: np.ndarray, t: np.ndarray, grid_hz: np.ndarray, grid_kernel: np.ndarray
) -> tuple[float, float, float]:
    """Fit (Δf, Δφ) of one filtered transient to the filtered reference; returns RMS residual."""
    corr = grid_kernel @ (np.conj(ref) * x)
    best = int(np.argmax(np.abs(corr)))
    f0 = float(grid_hz[best])
    p0 = float(np.angle(corr[best]))
    two_pi_t = 2 * np.pi * t

    def residual(params: np.ndarray) -> np.ndarray:
        r = x * np.exp(-1j * (two_pi_t * params[0] + params[1])) - ref
        return np.concatenate([r.real, r.imag])

    def jacobian(params: np.ndarray) -> np.ndarray:
        y = x * np.exp(-1j * (two_pi_t * params[0] + params[1]))
        d_f = -1j * two_pi_t * y
        d_p = -1j * y
        return np.column_stack(
            [np.concatenate([d_f.real, d_f.imag]), np.concatenate([d_p.real, d_p.imag])]
        )

    fit = least_squares(residual, x0=[f0, p0], jac=jacobian, method="lm", xtol=1e-12)
    shift, phase = float(fit.x[0]), float(np.angle(np.exp(1j * fit.x[1])))
    rms = float(np.sqrt(2 * np.mean(residual(fit.x) ** 2)))
    return shift, phase, rms


def register_transients(
    fids: np.ndarray,
    *,
    dwell_s: float,
    spectrometer_mhz: float,
    centre_ppm: float,
    window_ppm: tuple[float, float] = (1.8, 4.2),
    reference: ReferenceKind | np.ndarray = "median",
    passes: int = 2,
    fit_duration_s: float | None = 0.2,
    max_shift_hz: float = 20.0,
) -> RegistrationResult:
    """Spectral registration of transients in the time domain (Near et al. 2015).

    Parameters
    ----------
    fids : (n_transients, n_points) complex ndarray
        Transients, time on the last axis.
    dwell_s : float
        Sampling interval, s.
    spectrometer_mhz, centre_ppm : float
        Spectrometer frequency (MHz) and shift at the receiver centre (ppm) for the window.
    window_ppm : (float, float)
        Spectral window used for the fit, ppm.
    reference : {"median", "mean"} or (n_points,) complex ndarray
        Reference: element-wise median (robust) or mean of the transients, or a given FID. With
        ``"median"``/``"mean"`` later passes use the mean of the transients aligned by the
        previous pass.
    passes : int
        Number of registration passes (a given reference FID always takes one pass).
    fit_duration_s : float or None
        Length of the start of the filtered FIDs used in the fit, s (``None``: all points).
    max_shift_hz : float
        Half-width of the coarse frequency search, Hz.

    Returns
    -------
    RegistrationResult
    """
    raw = np.asarray(fids)
    if raw.ndim != 2:
        raise InvalidInputError(f"registration needs (transients, points) data, got {raw.shape}")
    # the fit runs in float64 on data scaled so that the median transient peaks at 1: samples
    # near the float32 limit (3e38) in one transient, or every sample scaled by 1e300, neither
    # overflow nor swamp the others
    scale = _magnitude_scale(raw)
    data = raw.astype(np.complex128) / scale
    n_tr, n_pts = data.shape
    where: dict[str, Any] = {"dwell_s": dwell_s, "spectrometer_mhz": spectrometer_mhz,
             "centre_ppm": centre_ppm, "window_ppm": window_ppm}
    filtered = window_filter(data, **where)
    n_fit = n_pts if fit_duration_s is None else int(np.clip(fit_duration_s / dwell_s, 8, n_pts))
    t = np.arange(n_fit) * dwell_s
    step_hz = min(0.25, 0.2 / (n_fit * dwell_s))  # well below the 1/T resolution
    grid = np.arange(-abs(max_shift_hz), abs(max_shift_hz) + step_hz / 2, step_hz)
    kernel = np.exp(-2j * np.pi * grid[:, None] * t[None, :])

    given = not isinstance(reference, str)
    if given:
        ref_fid = np.asarray(reference, dtype=complex)
        if ref_fid.shape != (n_pts,):
            raise InvalidInputError(
                f"the reference FID has shape {ref_fid.shape}, expected ({n_pts},)"
            )
        ref_fid = ref_fid / scale
        n_passes = 1
    else:
        ref_fid = _robust_reference(data, str(reference))
        n_passes = max(1, int(passes))
    shifts = np.zeros(n_tr)
    phases = np.zeros(n_tr)
    rms = np.zeros(n_tr)
    for k in range(n_passes):
        if k > 0:  # mean of the aligned transients, leaving out gross outliers (spikes)
            keep = robust_z_scores(rms, min_scale=MIN_RELATIVE_SCALE * float(np.median(rms)))
            keep = keep <= _REFERENCE_Z_LIMIT
            ref_fid = apply_registration(data[keep], shifts[keep], np.degrees(phases[keep]),
                                         dwell_s).mean(axis=0)
        ref_filtered = window_filter(ref_fid, **where)[:n_fit]
        if not np.any(np.abs(ref_filtered) > 0):
            raise InvalidInputError("the registration reference has no signal in the window")
        for j in range(n_tr):
            shifts[j], phases[j], rms[j] = _register_one(
                filtered[j, :n_fit], ref_filtered, t, grid, kernel
            )
    return RegistrationResult(
        shifts_hz=shifts, phases_deg=np.degrees(phases), residuals=rms * scale,
        reference=ref_fid * scale, passes=n_passes,
    )


def _magnitude_scale(data: np.ndarray) -> float:
    """Largest magnitude of the element-wise median transient (float64; robust to one spike),
    or of any sample when that median is zero: the scale the registration divides by."""
    wide = data.astype(np.complex128)
    for candidate in (_robust_reference(wide, "median"), wide):
        parts = np.abs(np.concatenate([candidate.real.ravel(), candidate.imag.ravel()]))
        scale = float(parts.max()) if parts.size else 0.0
        if np.isfinite(scale) and scale > 0:
            return scale
    raise InvalidInputError("the transients hold no signal (every sample is zero)")


def apply_registration(
    fids: np.ndarray, shifts_hz: np.ndarray, phases_deg: np.ndarray, dwell_s: float
) -> np.ndarray:
    """Undo per-transient shifts and phases: ``x · exp(-i(2π shift t + phase))``.

    Parameters
    ----------
    fids : (n_transients, n_points) complex ndarray
    shifts_hz, phases_deg : (n_transients,) ndarray
        As returned by :func:`register_transients`.
    dwell_s : float
        Sampling interval, s.
    """
    data = np.asarray(fids)
    t = np.arange(data.shape[-1]) * dwell_s
    arg = 2 * np.pi * np.asarray(shifts_hz)[:, None] * t + np.radians(phases_deg)[:, None]
    return data * np.exp(-1j * arg)


def robust_z_scores(values: np.ndarray, *, min_scale: float = 0.0) -> np.ndarray:
    """``(v - median) / max(1.4826 · MAD, min_scale)`` (Rousseeuw & Croux 1993).

    Zeros when the scale vanishes (all values equal and ``min_scale = 0``).
    """
    v = np.asarray(values, dtype=float)
    med = np.median(v)
    scale = max(1.4826 * float(np.median(np.abs(v - med))), float(min_scale))
    if not scale > 0:
        return np.zeros_like(v)
    return (v - med) / scale


def outlier_scores(
    fids: np.ndarray,
    *,
    dwell_s: float,
    spectrometer_mhz: float,
    centre_ppm: float,
    window_ppm: tuple[float, float] = (1.8, 4.2),
    fit_duration_s: float | None = 0.2,
) -> tuple[np.ndarray, np.ndarray]:
    """Robust outlier score of each transient from its distance to the median transient.

    The residual is the RMS, over the window-filtered start of the FID, of the difference
    between a transient and the element-wise median of all transients (after alignment this is
    the registration residual); the score is its robust z-score (:func:`robust_z_scores`) with
    the scale floored at ``MIN_RELATIVE_SCALE`` (5 %) of the median residual. Without the floor
    a few transients of nearly equal residual (a small MAD) would give large scores to
    differences of a few percent that no one would call an outlier.

    Returns
    -------
    residuals, scores : (n_transients,) ndarray
    """
    raw = np.asarray(fids)
    scale = _magnitude_scale(raw)  # float64 and scaled, as in the registration
    data = raw.astype(np.complex128) / scale
    n_pts = data.shape[-1]
    filtered = window_filter(data, dwell_s=dwell_s, spectrometer_mhz=spectrometer_mhz,
                             centre_ppm=centre_ppm, window_ppm=window_ppm)
    n_fit = n_pts if fit_duration_s is None else int(np.clip(fit_duration_s / dwell_s, 8, n_pts))
    filtered = filtered[:, :n_fit]
    ref = _robust_reference(filtered, "median")
    residuals = np.sqrt(np.mean(np.abs(filtered - ref) ** 2, axis=-1))
    floor = MIN_RELATIVE_SCALE * float(np.median(residuals))
    return residuals * scale, robust_z_scores(residuals, min_scale=floor)


def _transients(scan: Scan) -> np.ndarray:
    if scan.dims != (TRANSIENT_AXIS,):
        raise InvalidInputError(
            f"expected one {TRANSIENT_AXIS} axis of transients, got dims {list(scan.dims)}",
            scan.source,
        )
    return np.asarray(scan.data)


def _original_indices(scan: Scan, n: int) -> list[int]:
    info = scan.dim_headers.get(TRANSIENT_AXIS)
    if isinstance(info, dict) and isinstance(info.get("specproc_index"), list):
        idx = info["specproc_index"]
        if len(idx) == n:
            return [int(i) for i in idx]
    return list(range(n))


def align_transients_scan(
    scan: Scan,
    *,
    window_ppm: tuple[float, float] = (1.8, 4.2),
    reference: ReferenceKind = "median",
    passes: int = 2,
    fit_duration_s: float | None = 0.2,
    max_shift_hz: float = 20.0,
) -> Scan:
    """Align the transients (``DIM_DYN`` axis) of a Scan by spectral registration.

    With a single transient nothing is done and the record says so. The provenance details
    hold the per-transient ``shifts_hz`` and ``phases_deg`` and the registration ``residuals``.
    See :func:`register_transients` for the parameters.
    """
    data = _transients(scan)
    params = {
        "window_ppm": [float(v) for v in window_ppm],
        "reference": str(reference),
        "passes": int(passes),
        "fit_duration_s": fit_duration_s,
        "max_shift_hz": float(max_shift_hz),
    }
    if data.shape[0] < 2:
        return scan.with_step(
            "frequency and phase drift correction",
            {**params, "skipped": True, "note": "only one transient: nothing to align"},
        )
    result = register_transients(
        data,
        dwell_s=scan.dwell_s,
        spectrometer_mhz=scan.spectrometer_mhz,
        centre_ppm=scan.reference_ppm,
        window_ppm=window_ppm,
        reference=reference,
        passes=passes,
        fit_duration_s=fit_duration_s,
        max_shift_hz=max_shift_hz,
    )
    aligned = apply_registration(data, result.shifts_hz, result.phases_deg, scan.dwell_s)
    details = {
        **params,
        "method": "spectral registration in the time domain (Near et al. 2015)",
        "libraries": library_versions("numpy", "scipy"),
        "transient_index": _original_indices(scan, data.shape[0]),
        "shifts_hz": [float(v) for v in result.shifts_hz],
        "phases_deg": [float(v) for v in result.phases_deg],
        "residuals": [float(v) for v in result.residuals],
    }
    return scan.with_step("frequency and phase drift correction", details,
                          data=aligned.astype(scan.data.dtype))


def reject_outliers_scan(
    scan: Scan,
    *,
    threshold: float = 3.0,
    window_ppm: tuple[float, float] = (1.8, 4.2),
    fit_duration_s: float | None = 0.2,
) -> Scan:
    """Drop transients whose robust score exceeds ``threshold`` (see :func:`outlier_scores`).

    The record lists each transient's score and the (original) indices dropped; fewer than three
    transients are kept unchanged (a robust score needs a few) with a note.
    """
    data = _transients(scan)
    indices = _original_indices(scan, data.shape[0])
    params = {"threshold": float(threshold), "window_ppm": [float(v) for v in window_ppm],
              "fit_duration_s": fit_duration_s,
              "score": "robust z-score of the RMS distance to the median transient "
                       f"(scale at least {MIN_RELATIVE_SCALE:g} x the median)"}
    if data.shape[0] < 3:
        return scan.with_step(
            "outlier transient rejection",
            {**params, "skipped": True, "note": f"{data.shape[0]} transient(s): too few to score"},
        )
    residuals, scores = outlier_scores(
        data, dwell_s=scan.dwell_s, spectrometer_mhz=scan.spectrometer_mhz,
        centre_ppm=scan.reference_ppm, window_ppm=window_ppm, fit_duration_s=fit_duration_s,
    )
    keep = scores <= float(threshold)
    kept_indices = [i for i, k in zip(indices, keep, strict=True) if k]
    details = {
        **params,
        "transient_index": indices,
        "residuals": [float(v) for v in residuals],
        "scores": [float(v) for v in scores],
        "dropped": [i for i, k in zip(indices, keep, strict=True) if not k],
        "n_kept": int(keep.sum()),
    }
    headers = dict(scan.dim_headers)
    info = dict(headers.get(TRANSIENT_AXIS) or {}) if isinstance(
        headers.get(TRANSIENT_AXIS), dict) else {}
    info["specproc_index"] = kept_indices
    headers[TRANSIENT_AXIS] = info
    return scan.with_step("outlier transient rejection", details,
                          data=data[keep], dim_headers=headers)


def average_transients_scan(scan: Scan) -> Scan:
    """Mean of the transients along ``DIM_DYN``; a Scan with ``dims == ()``."""
    data = _transients(scan)
    averaged = data.mean(axis=0)
    reduced = scan.drop_axis(TRANSIENT_AXIS, averaged)
    return reduced.with_step(
        "averaging", {"n_averaged": int(data.shape[0]),
                      "transient_index": _original_indices(scan, data.shape[0])}
    )
