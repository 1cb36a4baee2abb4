"""The preprocessing pipeline: raw multi-coil, multi-transient data to one corrected FID.

Order of the steps (each configured in ``[preprocess.<step>]`` of the TOML configuration, see
:mod:`specproc.config`; every step applied is recorded in the Scan's provenance):

1. arrange the axes: ``DIM_PHASE_CYCLE`` is averaged, ``DIM_DYN`` and ``DIM_MEAS`` are merged into
   one axis of transients; ``DIM_EDIT`` and other axes are rejected;
2. ``coil_combination`` (:mod:`~specproc.preprocess.coils`; weights from the water reference when
   it has the same coils, the same weights for both);
3. ``drift_correction`` (:mod:`~specproc.preprocess.align`, spectral registration);
4. ``outlier_rejection``;
5. averaging of the kept transients (always; the water reference is averaged as it is);
6. ``eddy_current`` (:mod:`~specproc.preprocess.eddy`, needs the water reference);
7. ``water_removal`` (:mod:`~specproc.preprocess.water`, HLSVD);
8. ``referencing`` (:mod:`~specproc.preprocess.reference`; the same shift is applied to the
   water reference so the two stay consistent);
9. ``phasing`` (:mod:`~specproc.preprocess.phase`; the water reference is phased on its peak);
10. ``apodization`` and ``zero_filling`` (off by default: display only).

The result for the fit is a time-domain FID (``dims == ()``); spectra are computed from it with
:func:`~specproc.preprocess.transform.to_spectrum` when needed.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from math import prod
from typing import Any

import numpy as np

from specproc._threads import blas_threads
from specproc.config import merge_config
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.align import (
    align_transients_scan,
    average_transients_scan,
    reject_outliers_scan,
)
from specproc.preprocess.apodize import apodize_scan, zero_fill_scan
from specproc.preprocess.coils import (
    combine_coils_scan,
    compute_coil_weights,
    estimate_noise_covariance,
)
from specproc.preprocess.eddy import correct_eddy_currents_scan
from specproc.preprocess.phase import phase_scan
from specproc.preprocess.reference import (
    estimate_reference_offset,
    reference_scan,
    water_shift_ppm,
)
from specproc.preprocess.water import HLSVD_SOLVERS, remove_water_scan
from specproc.sanity import check_signal

__all__ = ["PreprocessResult", "TransientReport", "run_pipeline", "step_details"]

_TRANSIENT_AXES = ("DIM_DYN", "DIM_MEAS")
_SUPPORTED_AXES = ("DIM_COIL", "DIM_DYN", "DIM_MEAS", "DIM_PHASE_CYCLE")


@dataclass(frozen=True)
class TransientReport:
    """What happened to each transient.

    Attributes
    ----------
    shifts_hz : (n_transients,) ndarray
        Frequency displacement found by the drift correction, Hz (FFT axis; ``nan`` if not run).
    phases_deg : (n_transients,) ndarray
        Phase found by the drift correction, degrees (``nan`` if not run).
    scores : (n_transients,) ndarray
        Robust outlier score (``nan`` if not run).
    kept : (n_transients,) bool ndarray
        Whether the transient went into the average.
    """

    shifts_hz: np.ndarray
    phases_deg: np.ndarray
    scores: np.ndarray
    kept: np.ndarray

    @property
    def n_transients(self) -> int:
        """Number of transients before rejection."""
        return int(self.kept.size)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (``nan`` becomes ``None``; :func:`specproc._json.to_jsonable`)."""
        from specproc._json import to_jsonable

        return to_jsonable({
            "shifts_hz": np.asarray(self.shifts_hz, dtype=float),
            "phases_deg": np.asarray(self.phases_deg, dtype=float),
            "scores": np.asarray(self.scores, dtype=float),
            "kept": [bool(v) for v in self.kept]})


@dataclass(frozen=True)
class PreprocessResult:
    """Output of :func:`run_pipeline`.

    Attributes
    ----------
    scan : Scan
        One averaged, corrected FID (``dims == ()``) with the provenance of every step.
    water : Scan or None
        The processed, averaged water reference.
    transient_report : TransientReport or None
        Per-transient shifts, phases, scores and kept flags.
    transients_before : (n_transients, n_points) complex ndarray or None
        Coil-combined transients before the drift correction (for figures).
    transients_after : (n_transients, n_points) complex ndarray or None
        The same after the drift correction (all transients, rejected ones included).
    transients_centre_ppm : float or None
        Shift at the centre of the axis of the transients (before any referencing), ppm.
    notes : tuple of str
        Steps skipped and why.
    config : dict
        The full configuration used.
    """

    scan: Scan
    water: Scan | None
    transient_report: TransientReport | None
    transients_before: np.ndarray | None = None
    transients_after: np.ndarray | None = None
    transients_centre_ppm: float | None = None
    notes: tuple[str, ...] = ()
    config: dict[str, Any] = field(default_factory=dict)


def _arrange_axes(scan: Scan, what: str) -> Scan:
    """Average the phase cycle, merge transient axes, move coils first: dims (COIL?, DYN)."""
    for tag in scan.dims:
        if tag == "DIM_EDIT":
            raise InvalidInputError(
                f"the {what} have a DIM_EDIT axis: the pipeline takes one sub-spectrum "
                "(edited data: specproc.edited.preprocess.preprocess_edited)", scan.source
            )
        if tag not in _SUPPORTED_AXES:
            raise InvalidInputError(
                f"the {what} have a {tag} axis, which preprocessing does not support yet "
                f"(supported: {', '.join(_SUPPORTED_AXES)})",
                scan.source,
            )
    data = np.asarray(scan.data)
    dims = list(scan.dims)
    details: dict[str, Any] = {"dims_in": list(scan.dims),
                               "shape_in": [int(v) for v in scan.data.shape]}
    if "DIM_PHASE_CYCLE" in dims:
        axis = dims.index("DIM_PHASE_CYCLE")
        data = data.mean(axis=axis)
        dims.pop(axis)
        details["phase_cycle"] = "averaged"
    transient_axes = [i for i, d in enumerate(dims) if d in _TRANSIENT_AXES]
    coil_axes = [i for i, d in enumerate(dims) if d == "DIM_COIL"]
    order = [*coil_axes, *transient_axes, len(dims)]
    data = np.transpose(data, order)
    n_coil = [data.shape[0]] if coil_axes else []
    n_tr = prod(data.shape[len(n_coil):-1]) if transient_axes else 1
    data = data.reshape(*n_coil, n_tr, data.shape[-1])
    new_dims = ("DIM_COIL", "DIM_DYN") if coil_axes else ("DIM_DYN",)
    headers = {k: v for k, v in scan.dim_headers.items() if k == "DIM_COIL"}
    if tuple(scan.dims) == new_dims:
        return scan
    details["dims_out"] = list(new_dims)
    details["n_transients"] = int(n_tr)
    return scan.with_step("axes arranged", details, data=data, dims=new_dims,
                          dim_headers=headers)


def _check_water(scan: Scan, water: Scan) -> None:
    if water.n_points != scan.n_points:
        raise InvalidInputError(
            f"the water reference has {water.n_points} points, the data {scan.n_points}",
            water.source,
        )
    if not np.isclose(water.dwell_s, scan.dwell_s, rtol=1e-6, atol=0):
        raise InvalidInputError(
            f"the water reference has a dwell time of {water.dwell_s:g} s, "
            f"the data {scan.dwell_s:g} s",
            water.source,
        )
    if not np.isclose(water.spectrometer_mhz, scan.spectrometer_mhz, rtol=1e-3, atol=0):
        raise InvalidInputError(
            f"the water reference was acquired at {water.spectrometer_mhz:g} MHz, "
            f"the data at {scan.spectrometer_mhz:g} MHz",
            water.source,
        )
    check_signal(water)


def _window(values: list[float]) -> tuple[float, float]:
    return float(values[0]), float(values[1])


def _choice(section: dict[str, Any], key: str, name: str, valid: tuple[str, ...]) -> Any:
    value = section[key]
    if value not in valid:
        raise InvalidInputError(
            f"configuration key 'preprocess.{name}.{key}' must be one of {', '.join(valid)}, "
            f"got {value!r}"
        )
    return value


_CHOICES: tuple[tuple[str, str, tuple[str, ...]], ...] = (
    ("coil_combination", "method", ("whitened", "svd")),
    ("drift_correction", "reference", ("median", "mean")),
    ("referencing", "method", ("metabolites", "water")),
    ("referencing", "apply_to", ("fid", "axis")),
    ("phasing", "method", ("peak", "acme", "manual")),
    ("apodization", "kind", ("exponential", "gaussian")),
    ("water_removal", "solver", HLSVD_SOLVERS),
)


def _check_choices(cfg: dict[str, Any]) -> None:
    """Reject a bad choice before any work is done."""
    for section, key, valid in _CHOICES:
        _choice(cfg[section], key, section, valid)


def _skip(scan: Scan, method: str, note: str, notes: list[str]) -> Scan:
    notes.append(f"{method}: {note}")
    return scan.with_step(method, {"skipped": True, "note": note})


def step_details(scan: Scan, method: str, since: int = 0) -> dict[str, Any] | None:
    """Details of the latest provenance record of ``method`` among records ``since`` on."""
    for record in reversed(scan.provenance[since:]):
        details = record.get("Details", {})
        if record.get("Method") == method and isinstance(details, dict):
            return details
    return None


def _combine(scan: Scan, water: Scan | None, cfg: dict[str, Any],
             notes: list[str]) -> tuple[Scan, Scan | None]:
    method = _choice(cfg, "method", "coil_combination", ("whitened", "svd"))
    scan_axis = scan.axis_of("DIM_COIL")
    water_axis = None if water is None else water.axis_of("DIM_COIL")
    if scan_axis is None:
        if water is not None and water_axis is not None:
            raise InvalidInputError(
                "the water reference has a DIM_COIL axis but the data have none", water.source
            )
        return scan, water
    n_coils = scan.data.shape[scan_axis]
    if water is not None and water_axis is not None and water.data.shape[water_axis] != n_coils:
        raise InvalidInputError(
            f"the water reference has {water.data.shape[water_axis]} coils, the data {n_coils}",
            water.source,
        )
    if water is not None and water_axis is None:
        raise InvalidInputError(
            f"the data have {n_coils} coils but the water reference has no DIM_COIL axis "
            "(combine both the same way)",
            water.source,
        )
    if not cfg["enabled"]:
        note = "disabled: coils summed with equal weights"
        notes.append(f"coil combination: {note}")
        ones = np.ones(n_coils, dtype=complex)
        scan = combine_coils_scan(scan, weights=ones, weights_label="equal weights (disabled)")
        if water is not None:
            water = combine_coils_scan(water, weights=ones,
                                       weights_label="equal weights (disabled)")
        return scan, water
    coil_data = np.moveaxis(scan.data, scan_axis, 0)
    noise_cov = None
    if cfg["use_noise"]:
        noise_cov = estimate_noise_covariance(coil_data,
                                              tail_fraction=cfg["noise_tail_fraction"])
    reference = (coil_data if water is None or water_axis is None
                 else np.moveaxis(water.data, water_axis, 0))
    weights = compute_coil_weights(reference, noise_cov=noise_cov, method=method,
                                   weight_points=cfg["weight_points"])
    label = "water reference" if water is not None else "data (no water reference)"
    label += (", noise covariance from the FID tail of the data" if cfg["use_noise"]
              else ", no noise weighting")
    common = {"method": method, "weight_points": cfg["weight_points"],
              "noise_tail_fraction": cfg["noise_tail_fraction"], "use_noise": cfg["use_noise"]}
    scan = combine_coils_scan(scan, weights=weights, weights_label=label, **common)
    if water is not None:
        water = combine_coils_scan(water, weights=weights,
                                   weights_label=f"{label}, same as the data", **common)
    return scan, water


def _transient_report(scan: Scan, n_transients: int, since: int = 0) -> TransientReport:
    # only the records of this run count (a scan preprocessed before carries older ones)
    shifts = np.full(n_transients, np.nan)
    phases = np.full(n_transients, np.nan)
    scores = np.full(n_transients, np.nan)
    kept = np.ones(n_transients, dtype=bool)
    align = step_details(scan, "frequency and phase drift correction", since)
    if align and not align.get("skipped"):
        idx = align["transient_index"]
        shifts[idx] = align["shifts_hz"]
        phases[idx] = align["phases_deg"]
    outliers = step_details(scan, "outlier transient rejection", since)
    if outliers and not outliers.get("skipped"):
        scores[outliers["transient_index"]] = outliers["scores"]
        kept[outliers["dropped"]] = False
    return TransientReport(shifts_hz=shifts, phases_deg=phases, scores=scores, kept=kept)


@blas_threads()
def run_pipeline(
    scan: Scan, *, water: Scan | None = None, config: dict[str, Any] | None = None
) -> PreprocessResult:
    """Preprocess a scan (and its water reference) into one averaged, corrected FID.

    Parameters
    ----------
    scan : Scan
        Metabolite data; extra axes among ``DIM_COIL``, ``DIM_DYN``, ``DIM_MEAS``,
        ``DIM_PHASE_CYCLE``.
    water : Scan, optional
        Water reference with the same points, dwell time and coils.
    config : dict, optional
        Configuration (as from :func:`specproc.config.load_config`; a partial dict is merged
        over the defaults).

    Returns
    -------
    PreprocessResult

    Raises
    ------
    InvalidInputError
        For all-zero data, a mismatched water reference, unsupported axes (``DIM_EDIT``:
        one sub-spectrum at a time) or a bad configuration value.
    """
    cfg_all = merge_config(config, source="configuration")
    cfg = cfg_all["preprocess"]
    _check_choices(cfg)
    notes: list[str] = []
    check_signal(scan)  # zero, constant, too short or overflowing data are refused
    if water is not None:
        _check_water(scan, water)
    scan = _arrange_axes(scan, "data")
    first_record = len(scan.provenance)
    if water is not None:
        water = _arrange_axes(water, "water reference data")

    scan, water = _combine(scan, water, cfg["coil_combination"], notes)
    before = np.array(scan.data)
    transients_centre = scan.reference_ppm
    n_transients = before.shape[0]

    drift = cfg["drift_correction"]
    if drift["enabled"]:
        _choice(drift, "reference", "drift_correction", ("median", "mean"))
        scan = align_transients_scan(
            scan, window_ppm=_window(drift["window_ppm"]), reference=drift["reference"],
            passes=drift["passes"], fit_duration_s=drift["fit_duration_s"],
            max_shift_hz=drift["max_shift_hz"],
        )
        record = step_details(scan, "frequency and phase drift correction")
        if record and record.get("skipped"):
            notes.append(f"frequency and phase drift correction: {record['note']}")
    after = np.array(scan.data)

    outlier = cfg["outlier_rejection"]
    if outlier["enabled"]:
        scan = reject_outliers_scan(scan, threshold=outlier["threshold"],
                                    window_ppm=_window(outlier["window_ppm"]),
                                    fit_duration_s=outlier["fit_duration_s"])
        record = step_details(scan, "outlier transient rejection")
        if record and record.get("skipped"):
            notes.append(f"outlier transient rejection: {record['note']}")
    report = _transient_report(scan, n_transients, first_record)
    scan = average_transients_scan(scan)
    if water is not None:
        water = average_transients_scan(water)

    eddy = cfg["eddy_current"]
    if eddy["enabled"]:
        if water is None:
            scan = _skip(scan, "eddy-current correction", "no water reference", notes)
        else:
            scan, water = correct_eddy_currents_scan(
                scan, water, preserve_water_offset=eddy["preserve_water_offset"]
            )

    removal = cfg["water_removal"]
    if removal["enabled"]:
        scan = remove_water_scan(scan, band_ppm=_window(removal["band_ppm"]),
                                 model_order=removal["model_order"],
                                 fit_points=removal["fit_points"],
                                 solver=removal["solver"])

    ref_cfg = cfg["referencing"]
    if ref_cfg["enabled"]:
        scan, water = _reference(scan, water, ref_cfg, notes)

    phasing = cfg["phasing"]
    if phasing["enabled"]:
        method = _choice(phasing, "method", "phasing", ("peak", "acme", "manual"))
        common = {"p1_deg_per_ppm": phasing["p1_deg_per_ppm"],
                  "pivot_ppm": phasing["pivot_ppm"]}
        try:
            scan = phase_scan(scan, method=method, window_ppm=_window(phasing["window_ppm"]),
                              n_peaks=phasing["n_peaks"], p0_deg=phasing["p0_deg"], **common)
        except InvalidInputError as exc:
            scan = _skip(scan, "phase correction", exc.message, notes)
        if water is not None:
            w_ppm = water.reference_ppm
            water = phase_scan(water, method="peak", window_ppm=(w_ppm - 1.0, w_ppm + 1.0),
                               n_peaks=1, **common)

    apod = cfg["apodization"]
    if apod["enabled"]:
        kind = _choice(apod, "kind", "apodization", ("exponential", "gaussian"))
        scan = apodize_scan(scan, kind=kind, lw_hz=apod["lw_hz"])
        if water is not None:
            water = apodize_scan(water, kind=kind, lw_hz=apod["lw_hz"])
    zero = cfg["zero_filling"]
    if zero["enabled"]:
        scan = zero_fill_scan(scan, factor=zero["factor"])
        if water is not None:
            water = zero_fill_scan(water, factor=zero["factor"])

    return PreprocessResult(scan=scan, water=water, transient_report=report,
                            transients_before=before, transients_after=after,
                            transients_centre_ppm=transients_centre,
                            notes=tuple(notes), config=cfg_all)


def _reference(scan: Scan, water: Scan | None, cfg: dict[str, Any],
               notes: list[str]) -> tuple[Scan, Scan | None]:
    method = _choice(cfg, "method", "referencing", ("metabolites", "water"))
    apply_to = _choice(cfg, "apply_to", "referencing", ("fid", "axis"))
    if method == "metabolites":
        peaks = tuple(float(v) for v in cfg["peaks_ppm"])
        measured_on = scan
    else:
        if water is None:
            return _skip(scan, "frequency referencing", "method 'water' needs a water reference",
                         notes), water
        peaks = (water_shift_ppm(cfg["temperature_c"]),)
        measured_on = water
    try:
        offset, found = estimate_reference_offset(
            measured_on.data, dwell_s=measured_on.dwell_s,
            spectrometer_mhz=measured_on.spectrometer_mhz, centre_ppm=measured_on.reference_ppm,
            peaks_ppm=peaks, search_ppm=cfg["search_ppm"], max_offset_ppm=cfg["max_offset_ppm"],
        )
    except InvalidInputError as exc:
        return _skip(scan, "frequency referencing", exc.message, notes), water
    details = {"method": method, **found}
    if method == "water":
        details["temperature_c"] = float(cfg["temperature_c"])
    scan = reference_scan(scan, offset_ppm=offset, apply_to=apply_to, details=details)
    if water is not None:
        water = reference_scan(water, offset_ppm=offset, apply_to=apply_to,
                               details={**details, "note": "same shift as the data"})
    return scan, water
