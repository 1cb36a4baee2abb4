"""The per-scan workflow: one data file in, a folder of results out.

:func:`process_scan` runs, for one scan and its optional water reference::

    load -> preprocess -> basis -> fit -> quantify -> QC -> results.tsv, fit.json, config.toml,
                                                          fit.png, fit.pdf, report.html

It is a pure function of its inputs (files, settings, basis definitions): it reads nothing
else, writes only into ``out_dir`` (every file atomically, through :mod:`specproc._atomic`) and
returns a small :class:`ScanOutcome` record. A cohort run maps it over a manifest.

Top-level keys of ``fit.json`` (``format = "specproc-scan-result"``, ``format_version = 1``):
``caution``, ``versions``, ``inputs`` (paths, SHA-256, acquisition summary, tissue fractions),
``header`` (the files' headers as read), ``settings`` (the full configuration, QC thresholds,
relaxation overrides), ``preprocessing`` (every step record, transient report, notes),
``basis`` (origin, members, protons, timings, hashes), ``fit``
(:func:`specproc.fit.result_to_dict` without spectra and without the full parameter
covariance), ``water_amplitude`` (or null), ``quantification``
(:meth:`specproc.quantify.Quantification.to_dict`: formula and constants), ``qc``
(:meth:`specproc.qc.QCReport.to_dict`), ``notes`` and ``outputs`` (file names by role).

The water signal for quantification is measured by :func:`water_amplitude`: the averaged,
corrected water FID's magnitude is extrapolated to t = 0 with a Lorentzian-Gaussian (Voigt)
decay fitted to its first 150 ms, so that it is on the scale of the fitted metabolite
amplitudes (which are the metabolite signals at t = 0 per molecule; the basis carries the proton
counts).
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import platform
import time
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np

from specproc._atomic import write_bytes, write_text
from specproc._json import dumps
from specproc.basis import BasisSet, basis_for_scan
from specproc.config import load_config, merge_config
from specproc.data import Scan
from specproc.errors import InvalidInputError

__all__ = [
    "KEY_RATIOS",
    "OUTPUT_FILES",
    "SHORT_TE_S",
    "ScanOutcome",
    "process_scan",
    "resolve_config",
    "software_versions",
    "water_amplitude",
]

#: Output file names, by role.
OUTPUT_FILES: Mapping[str, str] = {
    "results": "results.tsv",
    "json": "fit.json",
    "config": "config.toml",
    "figure_png": "fit.png",
    "figure_pdf": "fit.pdf",
    "preprocess_png": "preprocess.png",
    "report": "report.html",
}

#: Ratios summarised in :class:`ScanOutcome` (numerator members are looked up in the fit).
KEY_RATIOS: tuple[str, ...] = ("NAA", "tNAA", "tCho", "mI", "Glx")

#: Metabolites whose CRLB is checked against the QC threshold (common practice: the reported
#: main metabolites, not every basis member).
QC_CRLB_METABOLITES: tuple[str, ...] = ("NAA", "tNAA", "tCr", "tCho", "mI", "Glx")

#: Echo times below this include the macromolecule components in a simulated basis, s
#: (common practice: macromolecules matter at short TE).
SHORT_TE_S = 0.06

_PACKAGES = ("numpy", "scipy", "nibabel", "matplotlib", "lmfit", "nmrglue", "click")


@dataclass(frozen=True)
class ScanOutcome:
    """Summary of one processed scan (the full record is in ``fit.json``).

    Attributes
    ----------
    scan_path, water_path : str or None
        Inputs.
    out_dir : str
        Folder of the outputs.
    title : str
        Label of the scan (plain text, not escaped).
    files : dict of str to str
        Output files by role (see :data:`OUTPUT_FILES`).
    ratios : dict of str to float
        ``<name>/tCr`` molecule ratios of :data:`KEY_RATIOS` (NaN when not fitted).
    conc_mm : dict of str to float or None
        Water-referenced molar concentrations (mM of GM+WM tissue); ``None`` without water
        referencing.
    snr, naa_fwhm_hz, naa_fwhm_ppm, water_fwhm_hz : float
        QC metrics (NaN when not measured).
    n_transients, n_rejected : int or None
        Transient counts.
    qc_flags : tuple of str
        Raised QC flag messages.
    fit_flags : tuple of str
        Warnings of the fitter.
    fit_success : bool
        Whether the fit converged with finite bounds.
    water_referenced : bool
        Whether concentrations were computed.
    statement : str
        What the quantification computed.
    elapsed_s : float
        Wall time, s.
    """

    scan_path: str
    water_path: str | None
    out_dir: str
    title: str
    files: dict[str, str]
    ratios: dict[str, float]
    conc_mm: dict[str, float] | None
    snr: float
    naa_fwhm_hz: float
    naa_fwhm_ppm: float
    water_fwhm_hz: float
    n_transients: int | None
    n_rejected: int | None
    qc_flags: tuple[str, ...]
    fit_flags: tuple[str, ...]
    fit_success: bool
    water_referenced: bool
    statement: str
    elapsed_s: float
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def qc_passed(self) -> bool:
        """True when no QC flag was raised."""
        return not self.qc_flags

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-able dict (NaN as ``None``)."""
        from specproc._json import to_jsonable

        return to_jsonable({**asdict(self), "qc_passed": self.qc_passed})


# ============================================================================ helpers
def resolve_config(config: Any = None) -> tuple[dict[str, Any], str]:
    """The full configuration and a description of where it came from.

    Parameters
    ----------
    config : None, path or mapping
        ``None``: the bundled defaults; a path: a user TOML file merged over the defaults; a
        mapping: a (partial) configuration merged over the defaults.
    """
    if config is None:
        return load_config(None), "bundled defaults"
    if isinstance(config, str | os.PathLike):
        return load_config(config), f"defaults merged with {Path(config)}"
    if isinstance(config, Mapping):
        return merge_config(dict(config), source="configuration"), "defaults merged with a dict"
    raise InvalidInputError(
        f"a configuration must be a path or a table, got {type(config).__name__}"
    )


def software_versions() -> dict[str, str]:
    """Versions of Python, specproc and the libraries it computes with."""
    from specproc import __version__

    out = {"python": platform.python_version(), "specproc": __version__}
    for name in _PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def water_amplitude(
    water: Scan, *, window_s: tuple[float, float] = (0.0, 0.15), min_fraction: float = 0.05
) -> tuple[float, float, dict[str, Any]]:
    """Water signal at t = 0 from the decay of an averaged water FID.

    The magnitude ``|w(t)|`` is fitted over ``window_s`` (points above ``min_fraction`` of its
    maximum) by weighted linear least squares of ``ln|w(t)| = ln S_W - a t - b t²`` (a Voigt
    decay: Lorentzian ``a = π Γ_L``, Gaussian ``b = (π Γ_G)² / (4 ln 2)``), with weights
    ``|w(t)|²`` (the noise of ``ln|w|`` is about σ/|w|). ``S_W`` is the extrapolated signal at
    t = 0, on the scale of the fitted metabolite amplitudes.

    Parameters
    ----------
    water : Scan
        One averaged water FID (``dims == ()``).
    window_s : (float, float)
        Time window of the fit, s.
    min_fraction : float
        Points whose magnitude is below this fraction of the maximum are left out.

    Returns
    -------
    amplitude : float
        S_W (units of the data).
    amplitude_sd : float
        Its SD from the least-squares covariance scaled by the residual variance.
    details : dict
        Method, window, fitted decay constants, number of points.

    Raises
    ------
    InvalidInputError
        For a water scan with extra axes or fewer than 8 usable points.
    """
    if water.dims != ():
        raise InvalidInputError("the water reference must be averaged first", water.source)
    t = water.time_s()
    mag = np.abs(np.asarray(water.data, dtype=complex))
    peak = float(mag.max(initial=0.0))
    sel = (t >= window_s[0]) & (t <= window_s[1]) & (mag > min_fraction * peak)
    if np.count_nonzero(sel) < 8 or peak <= 0:
        raise InvalidInputError(
            "the water reference decays too fast to measure its amplitude", water.source
        )
    tt, yy = t[sel], np.log(mag[sel])
    w = mag[sel]
    design = np.stack([np.ones_like(tt), -tt, -(tt**2)], axis=1)
    coef, *_ = np.linalg.lstsq(design * w[:, None], yy * w, rcond=None)
    resid = (yy - design @ coef) * w
    dof = max(1, tt.size - 3)
    sigma2 = float(resid @ resid) / dof
    cov = np.linalg.pinv((design * w[:, None]).T @ (design * w[:, None])) * sigma2
    amplitude = float(np.exp(coef[0]))
    sd = amplitude * float(np.sqrt(max(cov[0, 0], 0.0)))
    lorentz = float(coef[1]) / np.pi
    gauss_sq = float(coef[2]) * 4.0 * np.log(2.0)
    details = {
        "method": "ln|w(t)| = ln S_W - a t - b t^2 fitted by weighted least squares "
                  "(weights |w|^2); S_W extrapolated to t = 0",
        "window_s": [float(window_s[0]), float(window_s[1])],
        "n_points": int(tt.size),
        "first_point_magnitude": float(mag[0]),
        "lorentz_fwhm_hz": lorentz,
        "gauss_fwhm_hz": float(np.sqrt(gauss_sq)) / np.pi if gauss_sq > 0 else 0.0,
    }
    return amplitude, sd, details


def _basis_for(basis: Any, scan: Scan) -> tuple[BasisSet, dict[str, Any]]:
    if isinstance(basis, BasisSet):
        return basis, {"origin": "given by the caller"}
    if isinstance(basis, str | os.PathLike):
        return BasisSet.load(basis), {"origin": f"file {Path(basis)}"}
    if basis is not None:
        raise InvalidInputError(f"basis must be a BasisSet or a path, got {type(basis).__name__}")
    short = scan.te_s is not None and scan.te_s < SHORT_TE_S
    simulated = basis_for_scan(scan, macromolecules=short)
    return simulated, {
        "origin": "simulated for the scan (specproc.basis.basis_for_scan, cached)",
        "macromolecules": bool(short),
        "macromolecule_rule": f"included when TE < {SHORT_TE_S * 1e3:g} ms (common practice)",
    }


def _load_inputs(scan_path: Path, water_path: Path | None) -> tuple[Scan, Scan | None]:
    from specproc.io import load

    scan = load(scan_path)
    water = load(water_path) if water_path is not None else None
    return scan, water


def _ratio_summary(quant: Any) -> dict[str, float]:
    out = {}
    for name in KEY_RATIOS:
        out[f"{name}/tCr"] = float(quant.ratios.get(name, float("nan")))
    return out


def _default_title(scan_path: Path) -> str:
    name = scan_path.name
    for suffix in (".nii.gz", ".nii", ".npz", ".dcm", ".txt"):
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return name


# ============================================================================ workflow
def process_scan(
    scan_path: str | os.PathLike[str],
    *,
    water_path: str | os.PathLike[str] | None = None,
    out_dir: str | os.PathLike[str],
    config: Any = None,
    tissue: Mapping[str, float] | None = None,
    basis: BasisSet | str | os.PathLike[str] | None = None,
    title: str | None = None,
    qc_thresholds: Mapping[str, Any] | None = None,
    relaxation_overrides: Mapping[str, Any] | str | os.PathLike[str] | None = None,
) -> ScanOutcome:
    """Process one scan end to end and write its report folder.

    Parameters
    ----------
    scan_path : path
        Metabolite data (any format :func:`specproc.io.load` reads); raw transients and coils
        are preprocessed, an averaged FID goes through the same steps.
    water_path : path, optional
        Unsuppressed water reference (same points, dwell time and coils).
    out_dir : path
        Folder for the outputs (created; files replaced atomically).
    config : None, path or mapping, optional
        Configuration (see :func:`resolve_config`): ``[preprocess.*]`` and ``[fit]``.
    tissue : mapping, optional
        GM/WM/CSF volume fractions of the voxel (keys ``gm``, ``wm``, ``csf``). With a water
        reference they enable water-referenced concentrations; without them only ratios are
        computed, and the report says so.
    basis : BasisSet or path, optional
        Basis to fit with; default simulated for the scan (cached).
    title : str, optional
        Label of the scan in the report (default from the file name).
    qc_thresholds : mapping, optional
        QC flag thresholds (:class:`specproc.qc.QCThresholds` fields; default common practice).
    relaxation_overrides : mapping or path, optional
        Relaxation times merged over the bundled table (see
        :func:`specproc.quantify.load_relaxation_times`).

    Returns
    -------
    ScanOutcome

    Raises
    ------
    InvalidInputError
        For unreadable inputs, bad settings, a mismatched water reference or tissue fractions.
    """
    from specproc.fit import fit_spectrum
    from specproc.preprocess.pipeline import run_pipeline
    from specproc.qc import QCThresholds, qc_from_scan
    from specproc.quantify import quantify, validate_tissue_fractions
    from specproc.report.figures import figure_pdf_bytes, figure_png_bytes
    from specproc.report.fit_figure import plot_fit
    from specproc.report.html import render_report
    from specproc.report.tables import config_to_toml, results_rows, rows_to_tsv

    start = time.perf_counter()
    scan_path = Path(scan_path)
    water_file = Path(water_path) if water_path is not None else None
    out = Path(out_dir)
    cfg, cfg_source = resolve_config(config)
    thresholds = QCThresholds.from_mapping(qc_thresholds)
    tissue_fractions = None
    if tissue is not None:
        tissue_fractions = validate_tissue_fractions(tissue)
    label = title if title is not None else _default_title(scan_path)
    notes: list[str] = []

    scan, water = _load_inputs(scan_path, water_file)
    pre = run_pipeline(scan, water=water, config=cfg)
    notes.extend(pre.notes)
    used_basis, basis_info = _basis_for(basis, pre.scan)
    fit = fit_spectrum(pre.scan, used_basis, config=cfg)

    # ---- quantification
    amplitudes = dict(zip(fit.names, (float(a) for a in fit.amplitudes), strict=True))
    protons = {n: float(p) for n, p in zip(used_basis.names, used_basis.protons, strict=True)}
    water_info: dict[str, Any] | None = None
    quant_kwargs: dict[str, Any] = {}
    if pre.water is not None and tissue_fractions is not None:
        s_w, s_w_sd, water_info = water_amplitude(pre.water)
        quant_kwargs = dict(
            water_amplitude=s_w, water_amplitude_sd=s_w_sd, water_proton_normalised=False,
            volume_fractions=tissue_fractions, te_s=pre.scan.te_s, tr_s=pre.scan.tr_s,
            water_te_s=pre.water.te_s, water_tr_s=pre.water.tr_s, field_t=pre.scan.field_t,
            relaxation_overrides=relaxation_overrides,
        )
        if pre.scan.te_s is None or pre.scan.tr_s is None:
            raise InvalidInputError(
                "water-referenced concentrations need the scan's TE and TR", scan_path
            )
    elif pre.water is not None:
        notes.append("a water reference was given but no tissue fractions: ratios only")
    elif tissue_fractions is not None:
        notes.append("tissue fractions were given but no water reference: ratios only")
    quant = quantify(
        amplitudes, names=list(fit.names), covariance=fit.covariance, protons=protons,
        proton_normalised=True, **quant_kwargs,
    )
    if pre.water is not None and not quant.water_referenced:
        quant = dataclasses.replace(
            quant, statement="water reference present but no tissue fractions given: "
                             "ratios to tCr only"
        )

    # ---- QC
    report = pre.transient_report
    transients: dict[str, Any] = {}
    if report is not None:
        transients["kept"] = report.kept
        if np.all(np.isfinite(report.shifts_hz)):
            transients["shifts_hz"] = report.shifts_hz
    crlb = {}
    sums = fit.combined
    for name in QC_CRLB_METABOLITES:
        if name in fit.names:
            crlb[name] = float(fit.crlb_percent[fit.names.index(name)])
        elif name in sums:
            crlb[name] = float(sums[name]["crlb_percent"])
    qc = qc_from_scan(
        pre.scan, water=pre.water, residual=fit.residual, residual_ppm=fit.ppm,
        fit_range_ppm=fit.fit_range_ppm, crlb_percent=crlb, thresholds=thresholds,
        **transients,
    )

    # ---- outputs
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InvalidInputError(
            f"cannot create the output folder: {exc.strerror or exc}", out
        ) from None
    files = {role: out / name for role, name in OUTPUT_FILES.items()}
    versions = software_versions()
    rows = results_rows(fit, quant, qc, scan_label=label)
    write_text(files["results"], rows_to_tsv(rows))
    write_text(files["config"], config_to_toml(cfg, header=(
        f"specproc settings used for {label} ({cfg_source}); pass back with --config"
    )))
    safe = label.replace("$", r"\$")  # matplotlib would read $...$ as mathtext
    fig = plot_fit(fit, title=f"{safe}: linear-combination fit")
    png = figure_png_bytes(fig)
    write_bytes(files["figure_png"], png)
    fig.set_layout_engine("none")  # keep the layout of the PNG; the PDF need not redo it
    write_bytes(files["figure_pdf"], figure_pdf_bytes(fig))
    figures = [("Linear-combination fit: data, fit, baseline, residual and members", png)]
    try:
        from specproc.report.preprocess_figure import render_preprocess_figure

        pre_png = render_preprocess_figure(pre, title=f"{safe}: preprocessing")
        write_bytes(files["preprocess_png"], pre_png)
        figures.append(("Preprocessing: transients before and after alignment, drift, average",
                        pre_png))
    except Exception as exc:  # an optional figure must not stop the results
        notes.append(f"preprocessing figure not drawn: {type(exc).__name__}: {exc}")
        files.pop("preprocess_png")

    inputs: dict[str, Any] = {
        "scan": {"path": str(scan_path), "sha256": _sha256(scan_path), **scan.summary()},
        "water": None if water is None else {
            "path": str(water_file), "sha256": _sha256(water_file), **water.summary()
        },
        "tissue_fractions": None if tissue is None else dict(tissue),
        "title": label,
    }
    document = {
        "format": "specproc-scan-result",
        "format_version": 1,
        "caution": "Research use only; not a medical device.",
        "versions": versions,
        "inputs": inputs,
        "header": {"scan": dict(scan.header),
                   "water": None if water is None else dict(water.header)},
        "settings": {"config_source": cfg_source, "config": cfg,
                     "qc_thresholds": thresholds.to_dict(),
                     "relaxation_overrides": relaxation_overrides
                     if not isinstance(relaxation_overrides, os.PathLike)
                     else str(relaxation_overrides)},
        "preprocessing": {
            "steps": list(pre.scan.provenance),
            "water_steps": None if pre.water is None else list(pre.water.provenance),
            "transients": None if report is None else report.to_dict(),
            "notes": list(pre.notes),
        },
        "basis": {
            **basis_info,
            "names": list(used_basis.names),
            "protons": list(used_basis.protons),
            "kinds": list(used_basis.kinds),
            "sequence": used_basis.sequence,
            "timings_s": dict(used_basis.timings_s),
            "spectrometer_mhz": used_basis.spectrometer_mhz,
            "definitions_hash": used_basis.definitions_hash,
            "version": used_basis.version,
            "cache_key": used_basis.metadata.get("cache_key"),
        },
        "fit": _fit_dict(fit),
        "water_amplitude": water_info,
        "quantification": quant.to_dict(),
        "qc": qc.to_dict(),
        "notes": notes,
        "outputs": {role: path.name for role, path in files.items()},
    }
    write_text(files["json"], dumps(document, indent=1, allow_nan=False) + "\n")
    html = render_report(
        title=label, scan=scan, water=water, pre=pre, fit=fit, quant=quant, qc=qc, rows=rows,
        figures=figures, versions=versions, basis_info=document["basis"],
        water_info=water_info, tissue=tissue_fractions, notes=notes,
        links={"fit.json": OUTPUT_FILES["json"], "config.toml": OUTPUT_FILES["config"],
               "results.tsv": OUTPUT_FILES["results"], "fit.pdf": OUTPUT_FILES["figure_pdf"]},
        cfg_source=cfg_source,
    )
    write_text(files["report"], html)

    conc = None
    if quant.conc_molar_mm is not None:
        conc = {k: float(quant.conc_molar_mm[k]) for k in ("tNAA", "tCr", "tCho", "mI", "Glx")
                if k in quant.conc_molar_mm}
    return ScanOutcome(
        scan_path=str(scan_path),
        water_path=None if water_file is None else str(water_file),
        out_dir=str(out),
        title=label,
        files={role: str(path) for role, path in files.items()},
        ratios=_ratio_summary(quant),
        conc_mm=conc,
        snr=float(qc.snr),
        naa_fwhm_hz=float(qc.naa_fwhm_hz),
        naa_fwhm_ppm=float(qc.naa_fwhm_ppm),
        water_fwhm_hz=float(qc.water_fwhm_hz),
        n_transients=qc.n_transients,
        n_rejected=qc.n_rejected,
        qc_flags=tuple(f.message for f in qc.flags),
        fit_flags=tuple(fit.flags),
        fit_success=bool(fit.success),
        water_referenced=quant.water_referenced,
        statement=quant.statement,
        elapsed_s=time.perf_counter() - start,
        notes=tuple(notes),
    )


def _fit_dict(fit: Any) -> dict[str, Any]:
    from specproc.fit import result_to_dict

    out = result_to_dict(fit, spectra=False)
    # the full parameter covariance is large and derivable; keep the amplitude block
    out.pop("parameter_covariance", None)
    return out
