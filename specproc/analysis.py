"""The analysis of one scan: the only per-scan computation, and the only writer of its folder.

:func:`analyse_scan` runs, for one scan and its optional water reference::

    preprocess -> protocol and basis -> fit -> quantify (water-referenced with tissue
    fractions) -> QC -> notes

and returns a frozen :class:`ScanResult` in memory (nothing is written). Every command
(``specproc fit``, ``specproc batch``, ``specproc demo``, ``specproc phantom``) and a notebook
share it. :func:`write_scan_outputs` writes a result's folder::

    results.tsv   one row per fitted member and combined sum (columns
                  :data:`specproc.report.tables.RESULT_COLUMNS`)
    fit.json      the full record (see below)
    config.toml   the settings used (pass back with --config)
    fit.png, fit.pdf, preprocess.png   figures
    report.html   self-contained report

Every file is rendered before the first is written, and each is written atomically
(:mod:`specproc._atomic`). Both functions run with one BLAS thread by default
(:mod:`specproc._threads`).

Top-level keys of ``fit.json`` (``format = "specproc-scan-result"``, ``format_version = 1``):
``caution``, ``versions``, ``inputs`` (paths, SHA-256, acquisition summary, tissue fractions),
``header`` (the files' headers as read), ``settings`` (the full configuration, QC thresholds,
relaxation overrides), ``preprocessing`` (every step record, transient report, notes),
``protocol`` (:meth:`specproc.protocol.Protocol.to_dict`: the basis protocol with the source of
each timing, or null for a basis given by the caller), ``basis`` (origin, members, protons,
timings, hashes), ``fit`` (:func:`specproc.fit.result_to_dict` without spectra and without the
full parameter covariance), ``water_amplitude`` (or null), ``quantification``
(:meth:`specproc.quantify.Quantification.to_dict`: formula and constants, and the model SDs),
``model_uncertainty`` (:meth:`specproc.fit.sensitivity.ModelSensitivity.to_dict`: the
alternative model choices, their amplitudes and the member model SDs; null when off),
``provenance``
(:func:`specproc.provenance.physics_provenance`: how many of the spin, relaxation and water
values used are checked, derived, from memory or overridden, and which), ``qc``
(:meth:`specproc.qc.QCReport.to_dict`), ``spectrum`` (``ppm``, and the real parts of the
phased ``data`` and ``fit`` on the fit range, for overlays), ``notes`` and ``outputs`` (file
names by role). The
document holds no absolute path, so that one scan analysed by ``specproc fit`` and by
``specproc batch`` gives the same numbers (only the time stamps of the processing records and
the wall time differ).
"""

from __future__ import annotations

import dataclasses
import html
import os
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from specproc._threads import blas_threads
from specproc.errors import InvalidInputError
from specproc.protocol import FIELD_TOLERANCE

__all__ = [
    "KEY_RATIOS",
    "OUTPUT_FILES",
    "OUTPUT_MODES",
    "STATE_FILE",
    "WATER_DOMINANCE_MIN",
    "WATER_DOMINANCE_WINDOW_PPM",
    "ScanResult",
    "analyse_scan",
    "input_notes",
    "load_scan_result",
    "render_saved_result",
    "resolve_config",
    "save_scan_result",
    "write_scan_outputs",
]

#: Output file names of a folder with all outputs, by role (``voxel.png`` only when the
#: tissue fractions came from a segmentation with its anatomical image, ``edited.png`` only
#: for an edited scan).
OUTPUT_FILES: Mapping[str, str] = {
    "results": "results.tsv",
    "json": "fit.json",
    "config": "config.toml",
    "figure_png": "fit.png",
    "figure_pdf": "fit.pdf",
    "preprocess_png": "preprocess.png",
    "voxel_png": "voxel.png",
    "edited_png": "edited.png",
    "report": "report.html",
}

#: The saved result of a tables-only folder, for drawing its figures and report later.
STATE_FILE = "result.pickle"
_FILE_NAMES: Mapping[str, str] = {**OUTPUT_FILES, "state": STATE_FILE}

#: What :func:`write_scan_outputs` writes: ``"all"`` (tables, figures, report) or ``"tables"``
#: (results.tsv, fit.json, config.toml and, for rendering later, result.pickle).
OUTPUT_MODES: tuple[str, ...] = ("all", "tables")

#: Roles written in each mode.
_MODE_ROLES: Mapping[str, tuple[str, ...]] = {
    "all": ("results", "json", "config", "figure_png", "figure_pdf", "preprocess_png",
            "voxel_png", "edited_png", "report"),
    "tables": ("results", "json", "config", "state"),
}

_STATE_FORMAT = "specproc-scan-state"

#: Ratios summarised by :meth:`ScanResult.summary` (``<name>/tCr``).
KEY_RATIOS: tuple[str, ...] = ("NAA", "tNAA", "tCho", "mI", "Glx")

_CONC_SUMMARY = ("tNAA", "tCr", "tCho", "mI", "Glx")


# ============================================================================ inputs
def resolve_config(config: Any = None) -> tuple[dict[str, Any], str]:
    """The full configuration and a description of where it came from.

    Parameters
    ----------
    config : None, path or mapping
        ``None``: the bundled defaults; a path: a user TOML file merged over the defaults; a
        mapping: a (partial or full) configuration merged over the defaults.
    """
    from specproc.config import default_config, load_config, merge_config

    if config is None:
        return load_config(None), "bundled defaults"
    if isinstance(config, str | os.PathLike):
        return load_config(config), f"defaults merged with {Path(config).name}"
    if isinstance(config, Mapping):
        merged = merge_config(dict(config), source="configuration")
        if merged == default_config():
            return merged, "bundled defaults"
        return merged, "defaults merged with a table"
    raise InvalidInputError(
        f"a configuration must be a path or a table, got {type(config).__name__}"
    )


def _as_scan(value: Any, what: str) -> Any:
    from specproc.data import Scan
    from specproc.io import load

    if value is None or isinstance(value, Scan):
        return value
    if isinstance(value, str | os.PathLike):
        return load(value)
    raise InvalidInputError(f"the {what} must be a Scan or a path, got {type(value).__name__}")


def _input_record(scan: Any) -> dict[str, Any]:
    from specproc._hash import file_sha256

    source = scan.source
    digest = None
    if source is not None and Path(source).is_file():
        digest = file_sha256(source)
    return {"path": None if source is None else Path(source).name, "sha256": digest,
            **{k: v for k, v in scan.summary().items() if k != "source"}}


def _default_title(scan: Any) -> str:
    if not scan.source:
        return "scan"
    name = Path(scan.source).name
    for suffix in (".nii.gz", ".nii", ".npz", ".dcm", ".txt", ".dx", ".jdx"):
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return name


def _basis_summary(basis: Any, origin: str, protocol: Any) -> dict[str, Any]:
    info: dict[str, Any] = {
        "origin": origin,
        "names": list(basis.names),
        "protons": list(basis.protons),
        "kinds": list(basis.kinds),
        "sequence": basis.sequence,
        "timings_s": dict(basis.timings_s),
        "spectrometer_mhz": basis.spectrometer_mhz,
        "definitions_hash": basis.definitions_hash,
        "version": basis.version,
        "cache_key": basis.metadata.get("cache_key"),
    }
    if protocol is not None:
        info["macromolecules"] = protocol.macromolecules
        info["macromolecule_rule"] = protocol.macromolecule_source
        info["timing"] = protocol.timing_text()
        info["timing_sources"] = dict(protocol.timing_sources)
        info["mm_model"] = protocol.mm_model()
        info["mm_text"] = protocol.mm_text()
    else:
        measured = basis.metadata.get("mm_model")
        info["mm_model"] = dict(measured) if measured else {
            "model": "parametrised" if "macromolecule" in basis.kinds else "none"}
    return info


# ============================================================================ the result
@dataclass(frozen=True, eq=False)
class ScanResult:
    """Everything the analysis of one scan computed (in memory; see :func:`analyse_scan`).

    Attributes
    ----------
    title : str
        Label of the scan (plain text, not escaped).
    scan, water : Scan, Scan or None
        The inputs as given (before preprocessing).
    preprocessing : PreprocessResult
        :func:`specproc.preprocess.pipeline.run_pipeline` outcome: the averaged, corrected
        scan and water FIDs, step records, transient report, notes.
    protocol : Protocol or None
        The basis protocol (:mod:`specproc.protocol`); ``None`` when the caller gave the basis.
    basis : BasisSet
        The basis fitted with.
    basis_info : dict
        Origin, members, protons, timings (and their sources) and hashes of the basis.
    fit : FitResult
        :func:`specproc.fit.fit_spectrum` outcome.
    water_info : dict or None
        How the water signal S_W was measured (:meth:`specproc.quantify.WaterSignal.measure`).
    quantification : Quantification
        Ratios, and with water and tissue fractions water-referenced concentrations.
    qc : QCReport
        Quality metrics and flags.
    tissue : dict or None
        Validated GM/WM/CSF volume fractions.
    tissue_info : dict or None
        How they were obtained: :meth:`specproc.tissue.TissueFractions.to_dict` (voxel, maps,
        method, unsegmented remainder) or ``{"method": "given", "fractions": ...}``.
    tissue_planes : VoxelPlanes or None
        The voxel on the anatomy (:mod:`specproc.report.voxel`), drawn as ``voxel.png``.
    config : dict
        The full configuration used.
    config_source : str
        Where the configuration came from.
    qc_thresholds : dict
        The QC thresholds used.
    relaxation_overrides : mapping, str or None
        Relaxation overrides used (a path as text).
    inputs : dict
        File names, SHA-256 and acquisition summaries of the scan and water reference.
    versions : dict
        Software versions.
    notes : tuple of str
        Notes of the run (what was not done and why).
    elapsed_s : float
        Wall time of the analysis, s.
    edited : EditedResult or None
        The edited part (GABA+, DIFF fit, edited QC) of a J-difference edited scan
        (:mod:`specproc.edited`); this result is then the analysis of its OFF spectrum.
    sensitivity : ModelSensitivity or None
        The refits under alternative model choices that give the model uncertainty
        (:mod:`specproc.fit.sensitivity`); None when ``[uncertainty] model`` is off.
    """

    title: str
    scan: Any
    water: Any
    preprocessing: Any
    protocol: Any
    basis: Any
    basis_info: dict[str, Any]
    fit: Any
    water_info: dict[str, Any] | None
    quantification: Any
    qc: Any
    tissue: dict[str, float] | None
    config: dict[str, Any]
    config_source: str
    qc_thresholds: dict[str, Any]
    relaxation_overrides: Any
    inputs: dict[str, Any]
    versions: dict[str, str]
    notes: tuple[str, ...] = field(default_factory=tuple)
    elapsed_s: float = 0.0
    tissue_info: dict[str, Any] | None = None
    tissue_planes: Any = None
    edited: Any = None
    sensitivity: Any = None

    # ------------------------------------------------------------------ summaries
    @property
    def water_referenced(self) -> bool:
        """Whether concentrations were computed."""
        return bool(self.quantification.water_referenced)

    @property
    def ratios(self) -> dict[str, float]:
        """``<name>/tCr`` molecule ratios of :data:`KEY_RATIOS` (NaN when not fitted)."""
        q = self.quantification.ratios
        return {f"{n}/tCr": float(q.get(n, float("nan"))) for n in KEY_RATIOS}

    @property
    def conc_mm(self) -> dict[str, float] | None:
        """Water-referenced molar concentrations (mM of GM+WM tissue) of the main sums."""
        conc = self.quantification.conc_molar_mm
        if conc is None:
            return None
        return {k: float(conc[k]) for k in _CONC_SUMMARY if k in conc}

    @property
    def qc_passed(self) -> bool:
        """True when no QC flag was raised."""
        return not self.qc.flags

    def rows(self) -> list[dict[str, Any]]:
        """Rows of ``results.tsv`` (:func:`specproc.report.tables.results_rows`)."""
        from specproc.report.tables import results_rows

        rows = results_rows(self.fit, self.quantification, self.qc, scan_label=self.title)
        if self.edited is not None and rows:
            from specproc.report.edited import edited_rows

            rows += edited_rows(self.edited, scan_label=self.title, base=rows[0])
        return rows

    def summary(self) -> dict[str, Any]:
        """The main numbers as a plain dict (ratios, concentrations, QC, flags)."""
        return {
            "title": self.title,
            "ratios": self.ratios,
            "conc_mm": self.conc_mm,
            "snr": float(self.qc.snr),
            "naa_fwhm_hz": float(self.qc.naa_fwhm_hz),
            "water_fwhm_hz": float(self.qc.water_fwhm_hz),
            "n_transients": self.qc.n_transients,
            "n_rejected": self.qc.n_rejected,
            "qc_flags": [f.message for f in self.qc.flags],
            "fit_flags": list(self.fit.flags),
            "fit_success": bool(self.fit.success),
            "statement": self.quantification.statement,
        }

    def to_dict(self) -> dict[str, Any]:
        """The ``fit.json`` document (without ``outputs``), plain JSON values."""
        from specproc._json import to_jsonable
        from specproc.fit import result_to_dict

        pre = self.preprocessing
        report = pre.transient_report
        fit = result_to_dict(self.fit, spectra=False)
        fit.pop("parameter_covariance", None)  # large and derivable; keep the amplitude block
        relax = self.relaxation_overrides
        return to_jsonable({
            "format": "specproc-scan-result",
            "format_version": 1,
            "caution": "Research use only; not a medical device.",
            "versions": self.versions,
            "inputs": {**self.inputs, "tissue_fractions": self.tissue, "title": self.title},
            "tissue": self.tissue_info,
            "header": {"scan": dict(self.scan.header),
                       "water": None if self.water is None else dict(self.water.header)},
            "settings": {"config_source": self.config_source, "config": self.config,
                         "qc_thresholds": self.qc_thresholds,
                         "relaxation_overrides": str(relax) if isinstance(relax, os.PathLike)
                         else relax},
            "preprocessing": {
                "steps": list(pre.scan.provenance),
                "water_steps": None if pre.water is None else list(pre.water.provenance),
                "transients": None if report is None else report.to_dict(),
                "notes": list(pre.notes),
            },
            "protocol": None if self.protocol is None else self.protocol.to_dict(),
            "basis": self.basis_info,
            "fit": fit,
            "water_amplitude": self.water_info,
            "quantification": self.quantification.to_dict(),
            "model_uncertainty": None if self.sensitivity is None
            else self.sensitivity.to_dict(),
            "provenance": self.provenance(),
            "qc": self.qc.to_dict(),
            "notes": list(self.notes),
            "edited": None if self.edited is None else self.edited.to_dict(),
        })

    def provenance(self) -> dict[str, Any]:
        """Provenance block of the physics values used: counts of checked, from-memory and
        overridden values, and which were overridden
        (:func:`specproc.provenance.physics_provenance`)."""
        from specproc.provenance import physics_provenance

        return physics_provenance(self.fit.names, self.quantification.constants)

    # ------------------------------------------------------------------ display
    def _headline(self) -> list[tuple[str, str]]:
        def num(v: Any, fmt: str) -> str:
            return "n/a" if v is None or not np.isfinite(v) else format(v, fmt)

        conc = self.conc_mm or {}
        items = [
            ("NAA/tCr", num(self.ratios["NAA/tCr"], ".3f")),
            ("tCho/tCr", num(self.ratios["tCho/tCr"], ".3f")),
            ("tNAA mM", num(conc.get("tNAA"), ".2f") if conc else "not water-referenced"),
            ("SNR", num(float(self.qc.snr), ".0f")),
            ("NAA FWHM Hz", num(float(self.qc.naa_fwhm_hz), ".1f")),
            ("QC", "passed" if self.qc_passed else
             f"{len(self.qc.flags)} flag(s): " + "; ".join(f.name for f in self.qc.flags)),
        ]
        return items

    def __repr__(self) -> str:
        inner = ", ".join(f"{k}={v}" for k, v in self._headline())
        return (f"ScanResult({self.title!r}, {len(self.fit.names)} members, {inner}; "
                f"{self.quantification.statement})")

    def _repr_html_(self) -> str:
        cells = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
                        f"<td>{html.escape(v)}</td></tr>" for k, v in self._headline())
        return (f"<div><strong>ScanResult {html.escape(self.title)}</strong> "
                f"({len(self.fit.names)} basis members; "
                f"{html.escape(self.quantification.statement)})"
                f"<table>{cells}</table></div>")


# ============================================================================ input checks
#: Difference of echo time above which a basis does not match its scan, s.
_TE_TOLERANCE_S = 0.001
#: In an unsuppressed water reference the water peak is hundreds to thousands of times the
#: tallest metabolite peak (common practice, from memory); below this ratio it is not a water
#: reference (a suppressed scan, or a phantom of low water content).
WATER_DOMINANCE_MIN = 20.0
#: Shifts of the metabolite peaks (NAA to choline) that the water peak is compared with, ppm.
WATER_DOMINANCE_WINDOW_PPM = (1.8, 3.4)


def _ms_text(value_s: float) -> str:
    return f"{value_s * 1e3:g} ms"


def input_notes(scan: Any, water: Any, basis: Any, water_processed: Any = None) -> list[str]:
    """Warnings about the inputs of one analysis, as sentences (empty when all is well).

    * What the reader did to the samples (:func:`specproc.io.reader_notes`: intensity scaling).
    * Header values replaced by an option or a manifest column (``HeaderOverrides`` in the
      header, written by :func:`specproc.batch.task.apply_overrides`).
    * A basis whose sequence, field strength or TE differs from the scan's header.
    * A water reference that is the metabolite scan itself, or whose spectrum is not
      dominated by water (:data:`WATER_DOMINANCE_MIN`).

    Parameters
    ----------
    scan, water : Scan
        The inputs as given (``water`` may be None).
    basis : BasisSet
        The basis the scan is fitted with.
    water_processed : Scan, optional
        The preprocessed water reference (one FID), used for the dominance check.
    """
    from specproc.io import reader_notes
    from specproc.preprocess.transform import ppm_axis, to_spectrum

    notes: list[str] = list(reader_notes(scan))  # e.g. intensity scaling applied on reading
    for key, change in dict(scan.header.get("HeaderOverrides") or {}).items():
        before, after = change.get("header"), change.get("given")
        if key.endswith("_s") and isinstance(before, int | float) and isinstance(after,
                                                                                  int | float):
            before, after = _ms_text(float(before)), _ms_text(float(after))
        name = {"te_s": "TE", "tr_s": "TR", "tm_s": "TM", "sequence": "sequence"}.get(key, key)
        if before is not None and before != after:
            notes.append(f"The {name} given ({after}) replaces the file header's ({before}); the "
                         "basis and the relaxation corrections use the given value.")
    seq_scan = (scan.sequence or "").lower()
    seq_basis = str(getattr(basis, "sequence", "") or "").lower()
    if seq_scan and seq_basis and seq_basis != "unknown" and seq_scan != seq_basis:
        notes.append(f"The basis was made for the {seq_basis} sequence but the scan header "
                     f"says {seq_scan}; the fit may be biased.")
    mhz_basis = float(getattr(basis, "spectrometer_mhz", 0.0) or 0.0)
    if mhz_basis > 0 and scan.spectrometer_mhz > 0 and abs(
            mhz_basis / scan.spectrometer_mhz - 1.0) > FIELD_TOLERANCE:
        notes.append(f"The basis was made for {mhz_basis:.1f} MHz but the scan was acquired at "
                     f"{scan.spectrometer_mhz:.1f} MHz; the fit may be biased.")
    te_basis = dict(getattr(basis, "timings_s", {}) or {}).get("te_s")
    if te_basis is not None and scan.te_s is not None and abs(
            float(te_basis) - scan.te_s) > _TE_TOLERANCE_S:
        notes.append(f"The basis was made for TE {_ms_text(float(te_basis))} but the scan "
                     f"header says TE {_ms_text(scan.te_s)}; the fit may be biased.")
    if water is None:
        return notes
    same_file = bool(scan.source) and Path(str(scan.source)).resolve() == Path(
        str(water.source or "")).resolve()
    same_data = (np.shape(scan.data) == np.shape(water.data)
                 and np.array_equal(np.asarray(scan.data), np.asarray(water.data)))
    if same_file or same_data:
        notes.append("The water reference is the metabolite scan itself; give the "
                     "unsuppressed water acquisition (concentrations are not meaningful).")
        return notes
    ref = water_processed if water_processed is not None else water
    fid = np.asarray(ref.data)
    fid = fid.reshape(-1, fid.shape[-1]).mean(axis=0) if fid.ndim > 1 else fid
    ppm = ppm_axis(fid.size, dwell_s=ref.dwell_s, spectrometer_mhz=ref.spectrometer_mhz,
                   centre_ppm=ref.reference_ppm)
    spectrum = to_spectrum(fid)
    in_water = (ppm > 4.65 - 0.5) & (ppm < 4.65 + 0.5)
    in_metab = (ppm > WATER_DOMINANCE_WINDOW_PPM[0]) & (ppm < WATER_DOMINANCE_WINDOW_PPM[1])
    if in_water.any() and in_metab.any():
        # Heights in the real part phased at the water peak: absorption tails fall as
        # 1/offset², magnitude tails only as 1/offset, so a broad water line's magnitude tail
        # would pass for a metabolite peak (at 1.5 T, 3.4 ppm is only 80 Hz from water).
        peak = spectrum[in_water][np.argmax(np.abs(spectrum[in_water]))]
        absorption = (spectrum * np.exp(-1j * np.angle(peak))).real
        ratio = float(np.abs(peak)) / max(float(np.abs(absorption[in_metab]).max()), 1e-300)
        if ratio < WATER_DOMINANCE_MIN:
            low, high = WATER_DOMINANCE_WINDOW_PPM
            notes.append(f"The water reference is not dominated by water (its water peak is "
                         f"only {ratio:.3g} times its tallest peak between {low:g} and "
                         f"{high:g} ppm; "
                         "usually hundreds of times): is it a suppressed scan, or a phantom "
                         "of low water content? Water-referenced values are not meaningful.")
    return notes


# ============================================================================ analysis
@blas_threads()
def analyse_scan(
    scan: Any,
    water: Any = None,
    *,
    tissue: Any = None,
    basis: Any = None,
    config: Any = None,
    protocol: Any = None,
    title: str | None = None,
    preprocessing: Any = None,
    phantom: bool | None = None,
) -> ScanResult:
    """Analyse one scan: preprocessing, basis, fit, quantification, QC and notes.

    Parameters
    ----------
    scan : Scan or path
        Metabolite data (raw transients and coils are preprocessed; an averaged FID goes
        through the same steps).
    water : Scan or path, optional
        Unsuppressed water reference (same points, dwell time and coils).
    tissue : mapping or TissueFractions, optional
        GM/WM/CSF volume fractions of the voxel (keys ``gm``, ``wm``, ``csf``), or a
        :class:`~specproc.tissue.TissueFractions` computed from the subject's segmented
        anatomy (:func:`specproc.tissue.tissue_fractions_from_files`; its method, maps and
        voxel picture are kept). With a water reference they give water-referenced
        concentrations; without them only ratios are computed, and the notes say so.
    basis : BasisSet or path, optional
        Basis to fit with; default simulated for ``protocol`` (cached).
    config : None, path or mapping, optional
        Configuration (see :func:`resolve_config`): preprocessing, ``[protocol]``, ``[fit]``,
        the QC thresholds ``[qc]`` (with ``crlb_checked``, the metabolites whose bound is
        checked), relaxation overrides ``[relaxation]`` and the water constants ``[water]``.
    protocol : Protocol, optional
        Basis protocol (default :func:`specproc.protocol.resolve_protocol` of the scan and the
        configuration). With ``basis`` too, the caller says that the basis was simulated for
        this protocol (a cohort run shares one basis file per protocol); it is then recorded.
    title : str, optional
        Label of the scan (default from the file name).
    preprocessing : PreprocessResult, optional
        The result of :func:`specproc.preprocess.pipeline.run_pipeline` for ``scan``, ``water``
        and ``config``, when the caller has it already (the edited analysis preprocesses the
        OFF sub-spectrum together with ON); it is then used instead of running the pipeline
        again.
    phantom : bool, optional
        The scan is of a phantom (default: what ``protocol`` says, else no). A phantom is
        fitted with one expected width for every metabolite (``[fit] width_prior = "none"``,
        :data:`specproc.protocol.PHANTOM_WIDTH_RULE`); the configuration recorded with the
        result says so.

    Returns
    -------
    ScanResult

    Raises
    ------
    InvalidInputError
        For unreadable inputs, bad settings, a mismatched water reference or tissue fractions.
    """
    from specproc._versions import software_versions
    from specproc.basis import BasisSet
    from specproc.fit import fit_spectrum
    from specproc.preprocess.pipeline import run_pipeline
    from specproc.protocol import phantom_fit_config, resolve_protocol
    from specproc.qc import QCThresholds, qc_from_scan
    from specproc.quantify import (
        Acquisition,
        Amplitudes,
        Tissue,
        WaterSignal,
        quantify,
        validate_tissue_fractions,
        water_settings,
    )

    start = time.perf_counter()
    scan = _as_scan(scan, "scan")
    water = _as_scan(water, "water reference")
    if "DIM_EDIT" in scan.dims:
        from specproc.edited.workflow import analyse_edited_scan

        # a BasisSet given for the scan's protocol is a plain PRESS basis: the edited analysis
        # simulates (and caches) its own ON, OFF and DIFF bases
        return analyse_edited_scan(scan, water, tissue=tissue, config=config, title=title,
                                   protocol=protocol,
                                   basis=basis if basis is not None and not isinstance(
                                       basis, BasisSet | str | os.PathLike) else None)
    cfg, cfg_source = resolve_config(config)
    thresholds = QCThresholds.from_config(cfg.get("qc"))
    relaxation_overrides = cfg.get("relaxation") or None
    water_constants = water_settings(cfg.get("water"))
    tissue_info: dict[str, Any] | None = None
    tissue_planes = None
    if hasattr(tissue, "as_mapping"):  # a TissueFractions from segmentation maps
        tissue_info = tissue.to_dict()
        tissue_planes = getattr(tissue, "planes", None)
        tissue = tissue.as_mapping()
    tissue_fractions = None if tissue is None else validate_tissue_fractions(tissue)
    if tissue_fractions is not None and tissue_info is None:
        tissue_info = {"method": "given", "fractions": dict(tissue_fractions)}
    label = title if title is not None else _default_title(scan)
    notes: list[str] = []

    # ---- basis protocol (from the scan as acquired, so every command resolves the same one)
    simulated = "simulated for the scan protocol (specproc.protocol, cached)"
    used_protocol = protocol
    if isinstance(basis, BasisSet):
        used_basis = basis
        origin = "given by the caller" if protocol is None else simulated
    elif isinstance(basis, str | os.PathLike):
        used_basis = BasisSet.load(basis)
        origin = f"file {Path(basis).name}" if protocol is None else simulated
    elif basis is not None:
        raise InvalidInputError(f"basis must be a BasisSet or a path, got {type(basis).__name__}")
    else:
        if used_protocol is None:
            used_protocol = resolve_protocol(scan, config=cfg)
        used_basis = None
        origin = simulated

    if phantom is None:
        phantom = bool(getattr(used_protocol, "phantom", False))
    if phantom:
        cfg, phantom_note = phantom_fit_config(cfg)
        if phantom_note:
            notes.append(phantom_note)

    pre = (preprocessing if preprocessing is not None
           else run_pipeline(scan, water=water, config=cfg))
    notes.extend(pre.notes)
    if used_basis is None:
        used_basis = used_protocol.simulate()
    notes.extend(input_notes(scan, water, used_basis, pre.water))
    if used_protocol is not None and getattr(used_protocol, "mm_unused", None):
        rule = used_protocol.macromolecule_source
        notes.append(f"The macromolecule spectrum {used_protocol.mm_unused} was given but not "
                     f"used: this protocol has no macromolecules ({rule}); choose them "
                     "(--macromolecules) to fit it.")
    fit = fit_spectrum(pre.scan, used_basis, config=cfg)
    sensitivity = _model_sensitivity(pre.scan, used_basis, fit, cfg)

    # ---- quantification
    water_info: dict[str, Any] | None = None
    water_signal = None
    if pre.water is not None and tissue_fractions is not None:
        if pre.scan.te_s is None or pre.scan.tr_s is None:
            raise InvalidInputError(
                "water-referenced concentrations need the scan's TE and TR", scan.source)
        water_signal = WaterSignal.measure(pre.water)
        water_info = dict(water_signal.details)
    elif pre.water is not None:
        notes.append("a water reference was given but no tissue fractions: ratios only")
    elif tissue_fractions is not None:
        notes.append("tissue fractions were given but no water reference: ratios only")
    quant = quantify(
        Amplitudes.from_fit(fit, used_basis, sensitivity), water=water_signal,
        tissue=None if water_signal is None or tissue_fractions is None
        else Tissue(tissue_fractions, **water_constants),
        acquisition=Acquisition.from_scan(pre.scan), relaxation=relaxation_overrides,
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
    for name in (cfg.get("qc") or {}).get("crlb_checked", ()):
        if name in fit.names:
            crlb[name] = float(fit.crlb_percent[fit.names.index(name)])
        elif name in fit.combined:
            crlb[name] = float(fit.combined[name]["crlb_percent"])
    qc = qc_from_scan(
        pre.scan, water=pre.water, residual=fit.residual, residual_ppm=fit.ppm,
        fit_range_ppm=fit.fit_range_ppm, crlb_percent=crlb, thresholds=thresholds,
        known_noise_sd=fit.noise_sd, noise_regions_ppm=[tuple(r) for r in fit.noise_ppm],
        **transients,
    )

    inputs = {"scan": _input_record(scan),
              "water": None if water is None else _input_record(water)}
    return ScanResult(
        title=label, scan=scan, water=water, preprocessing=pre, protocol=used_protocol,
        basis=used_basis, basis_info=_basis_summary(used_basis, origin, used_protocol),
        fit=fit, water_info=water_info, quantification=quant, qc=qc,
        tissue=None if tissue_fractions is None else dict(tissue_fractions),
        config=cfg, config_source=cfg_source, qc_thresholds=thresholds.to_dict(),
        relaxation_overrides=relaxation_overrides, inputs=inputs,
        versions=software_versions(), notes=tuple(notes),
        elapsed_s=time.perf_counter() - start, tissue_info=tissue_info,
        tissue_planes=tissue_planes, sensitivity=sensitivity,
    )


def _model_sensitivity(scan: Any, basis: Any, fit: Any, cfg: Mapping[str, Any]) -> Any:
    """The refits under alternative model choices (:mod:`specproc.fit.sensitivity`), or None
    when ``[uncertainty] model`` is off or the main fit collapsed."""
    from specproc.fit.sensitivity import model_sensitivity, sensitivity_settings

    options = sensitivity_settings(cfg)
    if not options.model or any(str(f).startswith("collapsed:") for f in fit.flags):
        return None
    return model_sensitivity(scan, basis, fit, config=cfg, options=options)


# ============================================================================ outputs
@blas_threads()
def write_scan_outputs(result: ScanResult, outdir: str | os.PathLike[str], *,
                       outputs: str = "all") -> dict[str, Path]:
    """Write the folder of one analysed scan (the only writer of a scan folder).

    Parameters
    ----------
    result : ScanResult
        From :func:`analyse_scan`.
    outdir : path
        Folder (created). Every file is rendered, then all are written into a temporary
        folder beside it and moved in (:func:`specproc._atomic.write_folder`): an error
        leaves the folder as it was.
    outputs : {"all", "tables"}
        ``"all"``: tables, figures and report.html. ``"tables"``: results.tsv, fit.json and
        config.toml only (about half the cost of a scan), with the result saved as
        result.pickle (:func:`save_scan_result`) so that :func:`render_saved_result` (``specproc
        render``) can draw the figures and the report later with the same numbers. The files
        of the other mode left by an earlier run are removed: a folder never holds figures of
        other numbers than its tables.

    Returns
    -------
    dict of str to Path
        The files written, by role (:data:`OUTPUT_FILES`, and ``state`` in tables mode;
        ``preprocess_png`` may be missing when that figure could not be drawn, a note then
        says why).

    Raises
    ------
    InvalidInputError
        When the folder is a file or cannot be written (disk full, read-only), naming it, or
        for an unknown ``outputs``.
    """
    from specproc._tsv import tsv_text
    from specproc.report.tables import RESULT_COLUMNS, config_to_toml

    if outputs not in OUTPUT_MODES:
        raise InvalidInputError(
            f"outputs must be one of {', '.join(OUTPUT_MODES)}, got {outputs!r}")
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise InvalidInputError("the output must be a folder", out)
    notes = list(result.notes)
    rows = result.rows()
    document = result.to_dict()
    fit = result.fit
    # the phased absorption spectra on the fit range, for cohort overlays (6 digits suffice)
    document["spectrum"] = {"ppm": [round(float(v), 5) for v in fit.ppm],
                            "data": [float(f"{v:.6g}") for v in fit.data.real],
                            "fit": [float(f"{v:.6g}") for v in fit.fit.real]}
    texts: dict[str, str] = {}
    blobs: dict[str, bytes] = {}
    texts["results"] = tsv_text(RESULT_COLUMNS, rows)
    texts["config"] = config_to_toml(result.config, header=(
        f"specproc settings used for {result.title} ({result.config_source}); "
        "pass back with --config"))
    if outputs == "tables":
        blobs["state"] = _state_bytes(result)
        return _write_folder(out, document, notes, texts, blobs, outputs)
    from specproc.provenance import provenance_rows
    from specproc.report.edited import edited_section
    from specproc.report.figures import figure_pdf_bytes, figure_png_bytes
    from specproc.report.fit_figure import plot_fit
    from specproc.report.html import render_report

    # the figure functions show titles literally (report.figures.plain_text)
    fig = plot_fit(result.fit, title=f"{result.title}: linear-combination fit")
    blobs["figure_png"] = figure_png_bytes(fig)
    fig.set_layout_engine("none")  # keep the layout of the PNG; the PDF need not redo it
    blobs["figure_pdf"] = figure_pdf_bytes(fig)
    figures = [("Linear-combination fit: data, fit, baseline, residual and members",
                blobs["figure_png"])]
    try:
        from specproc.report.preprocess_figure import render_preprocess_figure

        blobs["preprocess_png"] = render_preprocess_figure(
            result.preprocessing, title=f"{result.title}: preprocessing")
        figures.append(("Preprocessing: transients before and after alignment, drift, average",
                        blobs["preprocess_png"]))
    except Exception as exc:  # an optional figure must not stop the results
        notes.append(f"preprocessing figure not drawn: {type(exc).__name__}: {exc}")
    if result.tissue_planes is not None:
        from specproc.report.voxel import VOXEL_CAPTION, voxel_picture_png

        blobs["voxel_png"] = voxel_picture_png(result.tissue_planes, fractions=result.tissue,
                                               title=result.title)
        figures.append((VOXEL_CAPTION, blobs["voxel_png"]))
    if result.edited is not None:
        from specproc.report.edited import plot_edited

        blobs["edited_png"] = figure_png_bytes(plot_edited(
            result.edited, title=f"{result.title}: edited spectra and the DIFF fit"))
        figures.append(("Edited spectra: OFF and ON; DIFF with its fit (GABA+, Glx)",
                        blobs["edited_png"]))
    texts["report"] = render_report(
        title=result.title, scan=result.scan, water=result.water, pre=result.preprocessing,
        fit=result.fit, quant=result.quantification, qc=result.qc, rows=rows,
        figures=figures, versions=result.versions, basis_info=result.basis_info,
        water_info=result.water_info, tissue=result.tissue, tissue_info=result.tissue_info,
        notes=notes,
        links={"fit.json": OUTPUT_FILES["json"], "config.toml": OUTPUT_FILES["config"],
               "results.tsv": OUTPUT_FILES["results"], "fit.pdf": OUTPUT_FILES["figure_pdf"]},
        cfg_source=result.config_source,
        physics=provenance_rows(document["provenance"]),
        edited=None if result.edited is None else edited_section(result.edited),
    )
    return _write_folder(out, document, notes, texts, blobs, outputs)


def _write_folder(out: Path, document: dict[str, Any], notes: list[str],
                  texts: dict[str, str], blobs: dict[str, bytes],
                  outputs: str) -> dict[str, Path]:
    """fit.json (listing the files of this mode), then every file at once."""
    from specproc._atomic import write_folder
    from specproc._json import dumps

    roles = [r for r in _MODE_ROLES[outputs] if r in texts or r in blobs or r == "json"]
    document["notes"] = notes
    document["outputs"] = {role: _FILE_NAMES[role] for role in roles}
    texts["json"] = dumps(document, indent=1, allow_nan=False) + "\n"
    # text in UTF-8; characters it cannot hold (a file name that is not valid UTF-8) as "?"
    content = {_FILE_NAMES[role]: texts[role].encode("utf-8", "replace") if role in texts
               else blobs[role] for role in roles}
    try:  # every file at once: a full disk or a read-only folder changes nothing
        written = write_folder(out, content, owned=_FILE_NAMES.values())
    except OSError as exc:
        raise InvalidInputError(
            f"cannot write the output folder: {exc.strerror or exc}", out) from None
    return {role: written[_FILE_NAMES[role]] for role in roles}


# ============================================================================ saved state
def _state_bytes(result: ScanResult) -> bytes:
    import pickle

    from specproc import __version__

    header = {"format": _STATE_FORMAT, "specproc": __version__}
    return pickle.dumps((header, result), protocol=pickle.HIGHEST_PROTOCOL)


def save_scan_result(result: ScanResult, path: str | os.PathLike[str]) -> None:
    """Save a result with everything needed to draw its figures and report later.

    A Python pickle (about 6 MB for 32 transients of 2,048 points with 4 coils): read it back
    only with :func:`load_scan_result` of the same specproc version, and only from folders you
    wrote yourself, since loading a pickle can run code.
    """
    from specproc._atomic import write_bytes

    write_bytes(Path(path), _state_bytes(result))


def load_scan_result(path: str | os.PathLike[str]) -> ScanResult:
    """A result saved by :func:`save_scan_result` (or by ``outputs="tables"``).

    Raises
    ------
    InvalidInputError
        For a missing or unreadable file, or one written by another specproc version.
    """
    import pickle

    from specproc import __version__

    p = Path(path)
    try:
        with open(p, "rb") as handle:
            header, result = pickle.load(handle)
    except FileNotFoundError:
        raise InvalidInputError("no saved result (run the analysis with tables only)",
                                p) from None
    except Exception as exc:  # a truncated or foreign file
        raise InvalidInputError(f"not a saved specproc result: {type(exc).__name__}",
                                p) from None
    if not isinstance(header, dict) or header.get("format") != _STATE_FORMAT or not isinstance(
            result, ScanResult):
        raise InvalidInputError("not a saved specproc result", p)
    if header.get("specproc") != __version__:
        raise InvalidInputError(
            f"saved by specproc {header.get('specproc')}, this is {__version__}: analyse the "
            "scan again", p)
    return result


def render_saved_result(folder: str | os.PathLike[str]) -> dict[str, Path]:
    """Draw the figures and report of a scan folder written with ``outputs="tables"``.

    The saved result (``result.pickle``) is written out with ``outputs="all"``: the same
    results.tsv, fit.json and config.toml, plus the figures and report.html, exactly as if
    they had been drawn at analysis time; the saved result is then removed.
    """
    out = Path(folder)
    state = out / STATE_FILE
    return write_scan_outputs(load_scan_result(state), out, outputs="all")
