"""Quality control of a spectrum: SNR, linewidth, fit residual, transients, flags.

Pure functions on a ppm axis and a complex spectrum (any order of the axis, e.g. the
``fftshift(fft(fid))`` order of :class:`specproc.data.Scan` with ppm decreasing), plus one thin
helper :func:`qc_from_scan` that computes the spectra of a Scan.

Definitions (also in ``docs/quantification.md``):

* **Noise SD**: standard deviation (ddof = 1) of the real part of the spectrum in a signal-free
  region (default -2 to 0 ppm, then 9 to 10 ppm if the first is not covered), after removing a
  least-squares straight line (as ``scipy.signal.detrend``, linear: :func:`linear_detrended`).
* **NAA peak height**: maximum of the real part of the phased spectrum within 2.008 ± 0.1 ppm,
  refined by a parabola through the maximum and its two neighbours. No baseline is subtracted
  by default (``baseline="none"``); ``baseline="linear"`` subtracts the straight line through the
  mean real values of two 0.05-ppm windows just outside the search window.
* **SNR** = NAA peak height / noise SD (one SD, not two).
* **Linewidth** (FWHM): full width at half of the peak height (same parabolic height, same
  baseline option), from the two half-height crossings located by linear interpolation between
  neighbouring points, on the real part (default; the absorption line of a phased spectrum, whose
  FWHM for a Lorentzian is 1/(π T2*)) or the magnitude (phase-insensitive, but √3 times wider for
  a Lorentzian). Reported in Hz and ppm.
* **Residual ratio** = SD of the real part of the fit residual within the fit range / noise SD
  (1 for a fit that leaves only noise).
* **Transients**: number rejected, and the frequency drift range max - min of the per-transient
  frequency shifts (Hz) over the kept transients.

Flags are raised at configurable thresholds; the defaults are **common practice** values (not
from a single published standard): SNR < 10, NAA FWHM > 0.1 ppm (at 3 T), CRLB > 20 %,
residual ratio > 1.5, drift range > 5 Hz.

References
----------
.. [1] Near J, et al. Preprocessing, analysis and quantification in single-voxel magnetic
   resonance spectroscopy: experts' consensus recommendations. NMR Biomed 2021;34:e4257.
.. [2] Lin A, et al. Minimum reporting standards for in vivo magnetic resonance spectroscopy
   (MRSinMRS). NMR Biomed 2021;34:e4484 (report SNR and linewidth with their reference peaks).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field, fields
from typing import Any, Literal

import numpy as np

from specproc.errors import InvalidInputError

__all__ = [
    "DEFAULT_NOISE_REGIONS_PPM",
    "NAA_PPM",
    "QC_DEFINITIONS",
    "WATER_PPM",
    "QCFlag",
    "QCReport",
    "QCThresholds",
    "evaluate_flags",
    "linear_detrended",
    "linewidth",
    "noise_sd",
    "peak_height",
    "qc_from_scan",
    "qc_report",
    "residual_ratio",
    "snr",
    "transient_summary",
]

#: NAA methyl singlet, ppm (Govindaraju et al., NMR Biomed 2000;13:129-153).
NAA_PPM: float = 2.008
#: Water at body temperature, ppm (common practice, 4.65 ppm at 37 °C).
WATER_PPM: float = 4.65
#: Signal-free regions tried in order for the noise SD, ppm (common practice).
DEFAULT_NOISE_REGIONS_PPM: tuple[tuple[float, float], ...] = ((-2.0, 0.0), (9.0, 10.0))
_MIN_NOISE_POINTS = 16
_BASELINE_WINDOW_PPM = 0.05

#: Text definitions of every metric (for reports and fit.json).
QC_DEFINITIONS: Mapping[str, str] = {
    "noise_sd": (
        "SD (ddof=1) of the real spectrum in a signal-free region (-2 to 0 ppm, else 9 to 10 ppm) "
        "after removing a least-squares straight line"
    ),
    "snr": (
        "NAA peak height (max of the real phased spectrum within 2.008 +/- 0.1 ppm, parabolic "
        "refinement, no baseline subtraction unless stated) / noise SD"
    ),
    "fwhm": (
        "full width at half height from half-height crossings found by linear interpolation, "
        "on the real (absorption) spectrum unless stated; Hz and ppm"
    ),
    "residual_ratio": "SD of the real fit residual within the fit range / noise SD",
    "drift_range_hz": "max - min of the per-transient frequency shifts of the kept transients, Hz",
    "n_rejected": "number of transients rejected by the preprocessing",
}

Part = Literal["real", "magnitude"]
Baseline = Literal["none", "linear"]


# ============================================================================ helpers
def _arrays(ppm: Any, spectrum: Any) -> tuple[np.ndarray, np.ndarray]:
    p = np.asarray(ppm, dtype=float).reshape(-1)
    s = np.asarray(spectrum)
    if s.ndim != 1 or s.size != p.size:
        raise InvalidInputError(
            f"spectrum of shape {s.shape} does not match a ppm axis of {p.size} points"
        )
    if p.size < 3 or not np.all(np.isfinite(p)) or not np.all(np.isfinite(s)):
        raise InvalidInputError("ppm axis and spectrum must be finite with at least 3 points")
    d = np.diff(p)
    if not (np.all(d > 0) or np.all(d < 0)):
        raise InvalidInputError("the ppm axis must be strictly monotonic")
    return p, s


def linear_detrended(y: np.ndarray) -> np.ndarray:
    """``y`` less its least-squares straight line over the sample index.

    The computation of ``scipy.signal.detrend(y, type="linear")`` (the design ``[k / n, 1]``,
    ``k = 1 ... n``, solved by least squares), in numpy: scipy.signal would cost tenths of a
    second to import for these lines. Checked against scipy in ``tests/test_qc.py``.
    """
    values = np.asarray(y, dtype=float)
    n = values.shape[0]
    design = np.ones((n, 2))
    design[:, 0] = np.arange(1, n + 1, dtype=float) / n
    coef = np.linalg.lstsq(design, values, rcond=None)[0]
    return values - design @ coef


def _part(s: np.ndarray, part: str) -> np.ndarray:
    if part == "real":
        return np.real(s).astype(float)
    if part == "magnitude":
        return np.abs(s).astype(float)
    raise InvalidInputError(f"unknown spectrum part {part!r}; choose 'real' or 'magnitude'")


def _window(p: np.ndarray, lo: float, hi: float) -> np.ndarray:
    lo, hi = min(lo, hi), max(lo, hi)
    return np.flatnonzero((p >= lo) & (p <= hi))


def _baseline_line(
    p: np.ndarray, y: np.ndarray, centre: float, half_width: float, baseline: str
) -> np.ndarray:
    """Straight baseline under a search window (zeros for ``"none"``)."""
    if baseline == "none":
        return np.zeros_like(y)
    if baseline != "linear":
        raise InvalidInputError(f"unknown baseline {baseline!r}; choose 'none' or 'linear'")
    left = _window(p, centre + half_width, centre + half_width + _BASELINE_WINDOW_PPM)
    right = _window(p, centre - half_width - _BASELINE_WINDOW_PPM, centre - half_width)
    if left.size == 0 or right.size == 0:
        raise InvalidInputError("the spectrum does not cover the baseline windows of the peak")
    x0, y0 = float(np.mean(p[left])), float(np.mean(y[left]))
    x1, y1 = float(np.mean(p[right])), float(np.mean(y[right]))
    return y0 + (y1 - y0) * (p - x0) / (x1 - x0)


def _peak(y: np.ndarray, idx: np.ndarray, power: int = 1) -> tuple[int, float, float]:
    """Index of the maximum of ``y`` over ``idx``, interpolated offset (points) and height.

    The top is refined with a parabola through ``1 / y**power`` at the maximum and its two
    neighbours: exact for a Lorentzian absorption line (``power=1``) and for the magnitude of a
    Lorentzian (``power=2``); an ordinary parabola through ``y`` is the fallback when a
    neighbour is not positive.
    """
    if idx.size == 0:
        raise InvalidInputError("the spectrum has no points in the peak search window")
    i = int(idx[np.argmax(y[idx])])
    if 0 < i < y.size - 1:
        a, b, c = y[i - 1], y[i], y[i + 1]
        if min(a, b, c) > 0:
            za, zb, zc = a**-power, b**-power, c**-power
            denom = za - 2 * zb + zc
            if denom > 0:
                offset = 0.5 * (za - zc) / denom
                if abs(offset) <= 0.5:
                    z_min = zb - 0.25 * (za - zc) * offset
                    if z_min > 0:
                        return i, float(offset), float(z_min ** (-1.0 / power))
        denom = a - 2 * b + c
        if denom < 0:
            offset = 0.5 * (a - c) / denom
            if abs(offset) <= 0.5:
                return i, float(offset), float(b - 0.25 * (a - c) * offset)
    return i, 0.0, float(y[i])


def _interp_ppm(p: np.ndarray, x: float) -> float:
    return float(np.interp(x, np.arange(p.size), p))


def _hz_per_point(p: np.ndarray, spectrometer_mhz: float) -> float:
    return float(abs(p[-1] - p[0]) / (p.size - 1) * spectrometer_mhz)


# ============================================================================ metrics
def noise_sd(
    ppm: Any,
    spectrum: Any,
    *,
    region_ppm: tuple[float, float] = DEFAULT_NOISE_REGIONS_PPM[0],
    detrend_linear: bool = True,
) -> float:
    """SD of the real spectrum in a signal-free region.

    Parameters
    ----------
    ppm : (n,) array_like
        Chemical shift of each point, ppm (monotonic).
    spectrum : (n,) complex array_like
        Spectrum (phased for a meaningful real part).
    region_ppm : (float, float)
        Signal-free region, ppm (default -2 to 0 ppm).
    detrend_linear : bool
        Remove a least-squares straight line first (default), so that a sloping baseline does
        not count as noise.

    Returns
    -------
    float
        SD with ddof = 1, in the units of the spectrum.

    Raises
    ------
    InvalidInputError
        If the region holds fewer than 16 points.
    """
    p, s = _arrays(ppm, spectrum)
    idx = _window(p, *region_ppm)
    if idx.size < _MIN_NOISE_POINTS:
        raise InvalidInputError(
            f"the noise region {region_ppm[0]:g} to {region_ppm[1]:g} ppm holds {idx.size} "
            f"points (at least {_MIN_NOISE_POINTS} needed)"
        )
    y = np.real(s[idx]).astype(float)
    if detrend_linear:
        y = linear_detrended(y)
    return float(np.std(y, ddof=1))


def peak_height(
    ppm: Any,
    spectrum: Any,
    *,
    centre_ppm: float = NAA_PPM,
    half_width_ppm: float = 0.1,
    baseline: Baseline = "none",
    part: Part = "real",
) -> tuple[float, float]:
    """Height and position of the highest point of a peak.

    Maximum of the real part (or magnitude) within ``centre_ppm ± half_width_ppm``, refined by
    a parabola through the maximum and its neighbours; ``baseline="linear"`` subtracts the line
    through the mean values of two 0.05-ppm windows just outside the search window.

    Returns
    -------
    height : float
        Peak height above the baseline, units of the spectrum.
    position_ppm : float
        Shift of the (interpolated) maximum, ppm.
    """
    p, s = _arrays(ppm, spectrum)
    y = _part(s, part)
    y = y - _baseline_line(p, y, centre_ppm, half_width_ppm, baseline)
    window = _window(p, centre_ppm - half_width_ppm, centre_ppm + half_width_ppm)
    i, offset, height = _peak(y, window, 2 if part == "magnitude" else 1)
    return height, _interp_ppm(p, i + offset)


def snr(
    ppm: Any,
    spectrum: Any,
    *,
    peak_ppm: float = NAA_PPM,
    half_width_ppm: float = 0.1,
    noise_region_ppm: tuple[float, float] = DEFAULT_NOISE_REGIONS_PPM[0],
    baseline: Baseline = "none",
) -> float:
    """Signal-to-noise ratio: peak height (real part) / noise SD (see :func:`noise_sd`)."""
    height, _ = peak_height(
        ppm, spectrum, centre_ppm=peak_ppm, half_width_ppm=half_width_ppm, baseline=baseline
    )
    sd = noise_sd(ppm, spectrum, region_ppm=noise_region_ppm)
    return float(height / sd) if sd > 0 else float("inf")


def linewidth(
    ppm: Any,
    spectrum: Any,
    *,
    spectrometer_mhz: float,
    centre_ppm: float = NAA_PPM,
    half_width_ppm: float = 0.1,
    part: Part = "real",
    baseline: Baseline = "none",
    max_search_ppm: float = 0.5,
) -> tuple[float, float]:
    """Full width at half maximum of a peak, Hz and ppm.

    Parameters
    ----------
    ppm, spectrum : (n,) array_like
        Axis (ppm, monotonic) and complex spectrum.
    spectrometer_mhz : float
        Spectrometer frequency, MHz (converts ppm to Hz).
    centre_ppm, half_width_ppm : float
        Search window of the maximum, ppm.
    part : {"real", "magnitude"}
        Real part (absorption of a phased spectrum; default) or magnitude. For a Lorentzian of
        decay time T2* the real-part FWHM is 1/(π T2*), the magnitude FWHM √3/(π T2*).
    baseline : {"none", "linear"}
        As in :func:`peak_height`.
    max_search_ppm : float
        How far from the maximum to look for the half-height crossings, ppm.

    Returns
    -------
    fwhm_hz, fwhm_ppm : float
        NaN when a crossing is not found within ``max_search_ppm``.

    Notes
    -----
    The height is the parabola-refined maximum; each crossing is located by linear
    interpolation between the last point above and the first point below half height, walking
    outwards from the maximum.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(2048) / 2000.0                      # 2 kHz, 2048 points
    >>> fid = np.exp(-2j * np.pi * (2.008 - 4.65) * 123.2 * t - t / 0.05)
    >>> fid[0] *= 0.5
    >>> spec = np.fft.fftshift(np.fft.fft(fid, 4096))
    >>> ppm = 4.65 - np.fft.fftshift(np.fft.fftfreq(4096, 1 / 2000.0)) / 123.2
    >>> hz, _ = linewidth(ppm, spec, spectrometer_mhz=123.2)
    >>> round(hz, 1), round(1 / (np.pi * 0.05), 1)          # 1/(pi T2*)
    (6.4, 6.4)
    """
    mhz = float(spectrometer_mhz)
    if not math.isfinite(mhz) or mhz <= 0:
        raise InvalidInputError(f"spectrometer frequency must be positive, got {spectrometer_mhz}")
    p, s = _arrays(ppm, spectrum)
    y = _part(s, part)
    y = y - _baseline_line(p, y, centre_ppm, half_width_ppm, baseline)
    window = _window(p, centre_ppm - half_width_ppm, centre_ppm + half_width_ppm)
    i, _offset, height = _peak(y, window, 2 if part == "magnitude" else 1)
    if height <= 0:
        return float("nan"), float("nan")
    half = 0.5 * height
    step_ppm = abs(p[-1] - p[0]) / (p.size - 1)
    reach = max(1, math.ceil(max_search_ppm / step_ppm))

    def crossing(direction: int) -> float | None:
        j = i
        for _ in range(reach):
            k = j + direction
            if k < 0 or k >= y.size:
                return None
            if y[k] < half:
                # linear interpolation between j (>= half) and k (< half)
                return j + direction * (y[j] - half) / (y[j] - y[k])
            j = k
        return None

    left, right = crossing(-1), crossing(+1)
    if left is None or right is None:
        return float("nan"), float("nan")
    width_points = right - left
    return float(width_points * _hz_per_point(p, mhz)), float(width_points * step_ppm)


def residual_ratio(
    ppm: Any,
    residual: Any,
    *,
    noise_sd: float,
    fit_range_ppm: tuple[float, float] = (0.2, 4.2),
) -> float:
    """SD of the real fit residual in the fit range divided by the noise SD.

    Parameters
    ----------
    ppm : (n,) array_like
        Axis of the residual spectrum, ppm.
    residual : (n,) complex array_like
        Data minus model, in the frequency domain and on the scale of the data spectrum.
    noise_sd : float
        Noise SD of the data spectrum (:func:`noise_sd`), > 0.
    fit_range_ppm : (float, float)
        Range the model was fitted over, ppm.
    """
    p, r = _arrays(ppm, residual)
    sd = float(noise_sd)
    if not math.isfinite(sd) or sd <= 0:
        raise InvalidInputError(f"noise SD must be positive, got {noise_sd}")
    idx = _window(p, *fit_range_ppm)
    if idx.size < 2:
        raise InvalidInputError("the residual has fewer than 2 points in the fit range")
    return float(np.std(np.real(r[idx]), ddof=1) / sd)


def transient_summary(
    shifts_hz: Sequence[float] | np.ndarray | None = None,
    kept: Sequence[bool] | np.ndarray | None = None,
) -> dict[str, Any]:
    """Count of transients and rejected transients, and the frequency drift range.

    Parameters
    ----------
    shifts_hz : (n_transients,) array_like, optional
        Frequency shift estimated for each transient, Hz.
    kept : (n_transients,) array_like of bool, optional
        Whether each transient was kept (default all).

    Returns
    -------
    dict
        ``n_transients``, ``n_rejected``, ``drift_range_hz`` (max - min of the shifts of the kept
        transients; NaN without shifts or with no kept transient).
    """
    shifts = None if shifts_hz is None else np.asarray(shifts_hz, dtype=float).reshape(-1)
    keep = None if kept is None else np.asarray(kept, dtype=bool).reshape(-1)
    if shifts is not None and keep is not None and shifts.size != keep.size:
        raise InvalidInputError(f"{shifts.size} shifts but {keep.size} kept flags")
    if shifts is None and keep is None:
        return {"n_transients": None, "n_rejected": None, "drift_range_hz": float("nan")}
    n = int(shifts.size if shifts is not None else keep.size)  # type: ignore[union-attr]
    if keep is None:
        keep = np.ones(n, dtype=bool)
    drift = float("nan")
    if shifts is not None and np.any(keep):
        kept_shifts = shifts[keep]
        if not np.all(np.isfinite(kept_shifts)):
            raise InvalidInputError("per-transient shifts must be finite numbers")
        drift = float(np.max(kept_shifts) - np.min(kept_shifts))
    return {"n_transients": n, "n_rejected": int(np.count_nonzero(~keep)), "drift_range_hz": drift}


# ============================================================================ flags
@dataclass(frozen=True)
class QCThresholds:
    """Flag thresholds (defaults: common practice; ``None`` switches a rule off).

    Attributes
    ----------
    snr_min : float or None
        Flag SNR below this (common practice: 10).
    naa_fwhm_ppm_max : float or None
        Flag an NAA FWHM above this, ppm (common practice at 3 T: 0.1 ppm).
    water_fwhm_ppm_max : float or None
        Flag a water FWHM above this, ppm (off by default).
    crlb_percent_max : float or None
        Flag a metabolite whose CRLB exceeds this, % (common practice: 20 %).
    residual_ratio_max : float or None
        Flag a residual ratio above this (common practice: 1.5).
    drift_range_hz_max : float or None
        Flag a frequency drift range above this, Hz (common practice: 5 Hz).
    rejected_fraction_max : float or None
        Flag when more than this fraction of transients was rejected (off by default).
    """

    snr_min: float | None = 10.0
    naa_fwhm_ppm_max: float | None = 0.1
    water_fwhm_ppm_max: float | None = None
    crlb_percent_max: float | None = 20.0
    residual_ratio_max: float | None = 1.5
    drift_range_hz_max: float | None = 5.0
    rejected_fraction_max: float | None = None

    @classmethod
    def from_mapping(cls, values: Mapping[str, Any] | None) -> QCThresholds:
        """Thresholds from a mapping (e.g. a ``[qc]`` config table); unknown keys rejected."""
        if values is None:
            return cls()
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise InvalidInputError(
                f"unknown QC threshold(s) {unknown}; known: {', '.join(sorted(known))}"
            )
        out: dict[str, float | None] = {}
        for k, v in values.items():
            if v is None or v is False:
                out[k] = None
                continue
            try:
                number = float(v)
            except (TypeError, ValueError):
                raise InvalidInputError(f"QC threshold {k} is not a number: {v!r}") from None
            if not math.isfinite(number) or number < 0:
                raise InvalidInputError(f"QC threshold {k} must be a non-negative number")
            out[k] = number
        return cls(**out)

    @classmethod
    def from_config(cls, table: Mapping[str, Any] | None) -> QCThresholds:
        """Thresholds from the ``[qc]`` table of the configuration, where 0 switches a rule off.

        Keys that are not thresholds (``crlb_checked``) are ignored here.
        """
        known = {f.name for f in fields(cls)}
        values = {k: (None if v == 0 else v) for k, v in dict(table or {}).items() if k in known}
        return cls.from_mapping(values)

    def to_dict(self) -> dict[str, float | None]:
        """Plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class QCFlag:
    """One raised flag.

    Attributes
    ----------
    name : str
        Metric flagged (``"snr"``, ``"naa_fwhm_ppm"``, ``"crlb:GABA"`` ...).
    value : float
        Measured value.
    threshold : float
        Threshold crossed.
    rule : str
        ``"<"`` (flag when below) or ``">"`` (flag when above).
    basis : str
        Where the threshold comes from (``"common practice"`` or ``"user"``).
    message : str
        One-line description.
    """

    name: str
    value: float
    threshold: float
    rule: str
    basis: str
    message: str

    def to_dict(self) -> dict[str, Any]:
        """Plain dict."""
        return asdict(self)


def evaluate_flags(
    metrics: Mapping[str, Any],
    thresholds: QCThresholds | Mapping[str, Any] | None = None,
) -> list[QCFlag]:
    """Flags for metrics crossing thresholds.

    Parameters
    ----------
    metrics : mapping
        Any of ``snr``, ``naa_fwhm_ppm``, ``water_fwhm_ppm``, ``residual_ratio``,
        ``drift_range_hz``, ``n_rejected`` with ``n_transients``, and ``crlb_percent`` (a mapping
        metabolite -> %). Missing or NaN metrics raise no flag.
    thresholds : QCThresholds or mapping, optional
        Default :class:`QCThresholds` (common practice).

    Returns
    -------
    list of QCFlag
        A value exactly at a threshold is not flagged (flag when strictly beyond).
    """
    th = thresholds if isinstance(thresholds, QCThresholds) else QCThresholds.from_mapping(
        thresholds
    )
    default = QCThresholds()
    flags: list[QCFlag] = []

    def basis(name: str) -> str:
        return "common practice" if getattr(th, name) == getattr(default, name) else "user"

    def check(metric: str, value: Any, limit_name: str, rule: str, text: str) -> None:
        limit = getattr(th, limit_name)
        if limit is None or value is None:
            return
        v = float(value)
        if not math.isfinite(v):
            return
        if (rule == "<" and v < limit) or (rule == ">" and v > limit):
            word = "below" if rule == "<" else "above"
            flags.append(
                QCFlag(metric, v, float(limit), rule, basis(limit_name),
                       f"{text} {v:.4g} is {word} the threshold {limit:g}")
            )

    check("snr", metrics.get("snr"), "snr_min", "<", "SNR")
    check("naa_fwhm_ppm", metrics.get("naa_fwhm_ppm"), "naa_fwhm_ppm_max", ">", "NAA FWHM (ppm)")
    check("water_fwhm_ppm", metrics.get("water_fwhm_ppm"), "water_fwhm_ppm_max", ">",
          "water FWHM (ppm)")
    check("residual_ratio", metrics.get("residual_ratio"), "residual_ratio_max", ">",
          "fit residual / noise")
    check("drift_range_hz", metrics.get("drift_range_hz"), "drift_range_hz_max", ">",
          "frequency drift range (Hz)")
    n_tr, n_rej = metrics.get("n_transients"), metrics.get("n_rejected")
    if n_tr and n_rej is not None:
        check("rejected_fraction", float(n_rej) / float(n_tr), "rejected_fraction_max", ">",
              "fraction of rejected transients")
    for name, value in dict(metrics.get("crlb_percent") or {}).items():
        check(f"crlb:{name}", value, "crlb_percent_max", ">", f"CRLB of {name} (%)")
    return flags


# ============================================================================ report
@dataclass(frozen=True)
class QCReport:
    """Quality metrics and flags of one spectrum (see :data:`QC_DEFINITIONS`).

    Attributes
    ----------
    snr, noise_sd, naa_height : float
        SNR, noise SD and NAA height (NaN when not measurable).
    naa_fwhm_hz, naa_fwhm_ppm, water_fwhm_hz, water_fwhm_ppm : float
        Linewidths (NaN when not measured).
    residual_ratio : float
        Residual SD / noise SD (NaN without a residual).
    n_transients, n_rejected : int or None
        Transient counts (``None`` without a transient report).
    drift_range_hz : float
        Frequency drift range, Hz (NaN without shifts).
    crlb_percent : dict
        CRLB of each metabolite, %.
    flags : tuple of QCFlag
        Raised flags.
    thresholds : QCThresholds
        Thresholds used.
    settings : dict
        Regions and options used (noise region, part, baseline ...).
    notes : tuple of str
        What could not be measured, and why.
    """

    snr: float
    noise_sd: float
    naa_height: float
    naa_fwhm_hz: float
    naa_fwhm_ppm: float
    water_fwhm_hz: float
    water_fwhm_ppm: float
    residual_ratio: float
    n_transients: int | None
    n_rejected: int | None
    drift_range_hz: float
    crlb_percent: dict[str, float] = field(default_factory=dict)
    flags: tuple[QCFlag, ...] = ()
    thresholds: QCThresholds = field(default_factory=QCThresholds)
    settings: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """True when no flag was raised."""
        return not self.flags

    def to_dict(self) -> dict[str, Any]:
        """JSON-serialisable dict (NaN written as ``None``; :func:`specproc._json.to_jsonable`)."""
        from specproc._json import to_jsonable

        num = to_jsonable
        return to_jsonable({
            "passed": self.passed,
            "snr": num(self.snr),
            "noise_sd": num(self.noise_sd),
            "naa_height": num(self.naa_height),
            "naa_fwhm_hz": num(self.naa_fwhm_hz),
            "naa_fwhm_ppm": num(self.naa_fwhm_ppm),
            "water_fwhm_hz": num(self.water_fwhm_hz),
            "water_fwhm_ppm": num(self.water_fwhm_ppm),
            "residual_ratio": num(self.residual_ratio),
            "n_transients": self.n_transients,
            "n_rejected": self.n_rejected,
            "drift_range_hz": num(self.drift_range_hz),
            "crlb_percent": {k: num(v) for k, v in self.crlb_percent.items()},
            "flags": [
                {**f.to_dict(), "value": num(f.value)} for f in self.flags
            ],
            "thresholds": self.thresholds.to_dict(),
            "threshold_basis": "common practice defaults unless marked 'user'",
            "definitions": dict(QC_DEFINITIONS),
            "settings": self.settings,
            "notes": list(self.notes),
        })


def qc_report(
    ppm: Any,
    spectrum: Any,
    *,
    spectrometer_mhz: float,
    water_ppm: Any = None,
    water_spectrum: Any = None,
    residual: Any = None,
    residual_ppm: Any = None,
    fit_range_ppm: tuple[float, float] = (0.2, 4.2),
    shifts_hz: Sequence[float] | np.ndarray | None = None,
    kept: Sequence[bool] | np.ndarray | None = None,
    crlb_percent: Mapping[str, float] | None = None,
    thresholds: QCThresholds | Mapping[str, Any] | None = None,
    noise_regions_ppm: Sequence[tuple[float, float]] = DEFAULT_NOISE_REGIONS_PPM,
    known_noise_sd: float | None = None,
    naa_ppm: float = NAA_PPM,
    naa_half_width_ppm: float = 0.1,
    water_centre_ppm: float = WATER_PPM,
    water_half_width_ppm: float = 0.4,
    baseline: Baseline = "none",
    part: Part = "real",
) -> QCReport:
    """All QC metrics and flags of one spectrum (arrays in, :class:`QCReport` out).

    Parameters
    ----------
    ppm, spectrum : (n,) array_like
        Axis (ppm) and phased complex metabolite spectrum.
    spectrometer_mhz : float
        Spectrometer frequency, MHz.
    water_ppm, water_spectrum : (m,) array_like, optional
        Water reference spectrum (phased if ``part="real"``) for the water linewidth.
    residual, residual_ppm : (k,) array_like, optional
        Fit residual spectrum and its axis (default ``ppm``), on the scale of ``spectrum``.
    fit_range_ppm : (float, float)
        Fit range for the residual ratio, ppm.
    shifts_hz, kept : (n_transients,) array_like, optional
        Per-transient frequency shifts (Hz) and kept flags (see :func:`transient_summary`).
    crlb_percent : mapping, optional
        CRLB of each metabolite, %.
    thresholds : QCThresholds or mapping, optional
        Flag thresholds (default: common practice).
    noise_regions_ppm : sequence of (float, float)
        Signal-free regions tried in order for the noise SD; with ``known_noise_sd``, the
        regions that value was measured in (recorded only).
    known_noise_sd : float, optional
        The noise SD of one spectral component already measured on this spectrum (the fit's,
        :func:`specproc.fit.crlb.estimate_noise_sd`), so that a scan reports one noise SD.
    naa_ppm, naa_half_width_ppm, water_centre_ppm, water_half_width_ppm : float
        Peak search windows, ppm.
    baseline : {"none", "linear"}
        Baseline option of the NAA height and linewidth.
    part : {"real", "magnitude"}
        Spectrum part used for the linewidths.
    """
    th = thresholds if isinstance(thresholds, QCThresholds) else QCThresholds.from_mapping(
        thresholds
    )
    notes: list[str] = []
    p, s = _arrays(ppm, spectrum)
    nan = float("nan")
    sd = nan
    region_used: list[Any] | None = None
    if known_noise_sd is not None:
        sd = float(known_noise_sd)
        region_used = [[float(a), float(b)] for a, b in noise_regions_ppm]
    for region in noise_regions_ppm if known_noise_sd is None else ():
        try:
            sd = noise_sd(p, s, region_ppm=(float(region[0]), float(region[1])))
            region_used = [float(region[0]), float(region[1])]
            break
        except InvalidInputError:
            continue
    if region_used is None:
        notes.append("no signal-free noise region is covered by the spectrum: SNR not measured")
    try:
        height, naa_pos = peak_height(
            p, s, centre_ppm=naa_ppm, half_width_ppm=naa_half_width_ppm, baseline=baseline
        )
    except InvalidInputError as exc:
        height, naa_pos = nan, nan
        notes.append(f"NAA peak not measured: {exc}")
    value_snr = height / sd if (sd > 0 and math.isfinite(height)) else nan
    try:
        naa_fwhm_hz, naa_fwhm_ppm = linewidth(
            p, s, spectrometer_mhz=spectrometer_mhz, centre_ppm=naa_ppm,
            half_width_ppm=naa_half_width_ppm, part=part, baseline=baseline,
        )
    except InvalidInputError as exc:
        naa_fwhm_hz = naa_fwhm_ppm = nan
        notes.append(f"NAA linewidth not measured: {exc}")
    if not math.isfinite(naa_fwhm_hz) and math.isfinite(height):
        notes.append("NAA half-height crossings not found")
    water_fwhm_hz = water_fwhm_ppm = nan
    if water_spectrum is not None:
        wp = p if water_ppm is None else water_ppm
        try:
            water_fwhm_hz, water_fwhm_ppm = linewidth(
                wp, water_spectrum, spectrometer_mhz=spectrometer_mhz,
                centre_ppm=water_centre_ppm, half_width_ppm=water_half_width_ppm, part=part,
            )
        except InvalidInputError as exc:
            notes.append(f"water linewidth not measured: {exc}")
    else:
        notes.append("no water reference: water linewidth not measured")
    res_ratio = nan
    if residual is not None:
        if math.isfinite(sd) and sd > 0:
            res_ratio = residual_ratio(
                p if residual_ppm is None else residual_ppm, residual, noise_sd=sd,
                fit_range_ppm=fit_range_ppm,
            )
        else:
            notes.append("residual ratio not measured (no noise SD)")
    tr = transient_summary(shifts_hz, kept)
    crlb = {str(k): float(v) for k, v in dict(crlb_percent or {}).items()}
    metrics = {
        "snr": value_snr,
        "naa_fwhm_ppm": naa_fwhm_ppm,
        "water_fwhm_ppm": water_fwhm_ppm,
        "residual_ratio": res_ratio,
        "drift_range_hz": tr["drift_range_hz"],
        "n_transients": tr["n_transients"],
        "n_rejected": tr["n_rejected"],
        "crlb_percent": crlb,
    }
    flags = evaluate_flags(metrics, th)
    settings = {
        "noise_region_ppm": region_used,
        "naa_search_ppm": [naa_ppm - naa_half_width_ppm, naa_ppm + naa_half_width_ppm],
        "naa_position_ppm": naa_pos if math.isfinite(naa_pos) else None,
        "water_search_ppm": [
            water_centre_ppm - water_half_width_ppm, water_centre_ppm + water_half_width_ppm
        ],
        "fit_range_ppm": [float(fit_range_ppm[0]), float(fit_range_ppm[1])],
        "baseline": baseline,
        "linewidth_part": part,
        "spectrometer_mhz": float(spectrometer_mhz),
    }
    return QCReport(
        snr=value_snr, noise_sd=sd, naa_height=height, naa_fwhm_hz=naa_fwhm_hz,
        naa_fwhm_ppm=naa_fwhm_ppm, water_fwhm_hz=water_fwhm_hz, water_fwhm_ppm=water_fwhm_ppm,
        residual_ratio=res_ratio, n_transients=tr["n_transients"], n_rejected=tr["n_rejected"],
        drift_range_hz=tr["drift_range_hz"], crlb_percent=crlb, flags=tuple(flags),
        thresholds=th, settings=settings, notes=tuple(notes),
    )


def qc_from_scan(
    scan: Any,
    *,
    water: Any = None,
    residual_fid: Any = None,
    zero_fill: int = 2,
    phase_water: bool = True,
    **options: Any,
) -> QCReport:
    """:func:`qc_report` for an averaged, phased :class:`specproc.data.Scan`.

    Parameters
    ----------
    scan : Scan
        One averaged FID (``dims == ()``), phased and referenced (NAA at 2.008 ppm).
    water : Scan, optional
        Averaged water reference. With ``phase_water`` its spectrum is given zero-order phase
        so that the point of largest magnitude is real and positive (the water peak is then in
        absorption for the real-part linewidth).
    residual_fid : (n_points,) complex array_like, optional
        Fit residual in the time domain (data - model), transformed like the data.
    zero_fill : int
        Zero-filling factor of the spectra (>= 1). Zero filling keeps the per-point noise SD and
        the peak heights of ``fftshift(fft(·))`` and refines the linewidth measurement.
    **options
        Passed to :func:`qc_report` (thresholds, crlb_percent, shifts_hz, kept ...).
    """
    from specproc.data import Scan

    if not isinstance(scan, Scan):
        raise InvalidInputError("qc_from_scan needs a Scan")
    if scan.dims != ():
        raise InvalidInputError(
            f"QC needs one averaged FID; the scan still has axes {list(scan.dims)}", scan.source
        )
    factor = int(zero_fill)
    if factor < 1:
        raise InvalidInputError(f"zero_fill must be >= 1, got {zero_fill}")
    n = scan.n_points * factor
    ppm = scan.ppm(n)
    spectrum = scan.spectrum(n)
    kwargs: dict[str, Any] = dict(options)
    if water is not None:
        if not isinstance(water, Scan) or water.dims != ():
            raise InvalidInputError("the water reference must be one averaged FID (a Scan)")
        nw = water.n_points * factor
        ws = water.spectrum(nw)
        if phase_water:
            k = int(np.argmax(np.abs(ws)))
            ws = ws * np.exp(-1j * np.angle(ws[k]))
        kwargs.update(water_ppm=water.ppm(nw), water_spectrum=ws)
    if residual_fid is not None:
        r = np.asarray(residual_fid)
        if r.shape != (scan.n_points,):
            raise InvalidInputError(
                f"residual of shape {r.shape} does not match the scan's {scan.n_points} points"
            )
        kwargs.update(residual=np.fft.fftshift(np.fft.fft(r, n=n)), residual_ppm=ppm)
    return qc_report(ppm, spectrum, spectrometer_mhz=scan.spectrometer_mhz, **kwargs)
