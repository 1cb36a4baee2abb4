"""One edited scan end to end: preprocessing, the OFF analysis, the DIFF fit, GABA+.

:func:`analyse_edited_scan` is what :func:`specproc.analysis.analyse_scan` does for a scan with a
``DIM_EDIT`` axis: the OFF spectrum goes through the ordinary per-scan analysis (fit, ratios,
water-referenced concentrations, QC, with the OFF basis simulated with its editing pulses), and
the result carries the edited part (:class:`~specproc.edited.analysis.EditedResult`) in
``ScanResult.edited``.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

import numpy as np

from specproc.edited.analysis import fit_difference, non_edited_residue, summarise_edited
from specproc.edited.basis import EditedBasis, simulate_edited_basis
from specproc.edited.conditions import edit_conditions
from specproc.edited.preprocess import preprocess_edited
from specproc.errors import InvalidInputError

__all__ = ["analyse_edited_scan", "edited_basis_key", "edited_protocol", "simulate_for_protocol"]


def edited_protocol(scan: Any, config: Mapping[str, Any] | None) -> Any:
    """The PRESS protocol of a MEGA-PRESS scan (sub-timings resolved as for any scan).

    The header of an edited scan often names the sequence "MEGA-PRESS", which is not a plain
    localisation name; the localisation is PRESS unless the name says semi-LASER, which specproc
    does not simulate with editing pulses yet. The macromolecule members are included although
    TE is above the ordinary rule's limit: at TE 68 ms their signal under creatine is still a
    few per cent of it (docs/methods.md, edited spectroscopy).
    """
    from specproc.protocol import resolve_protocol

    name = str((scan.header or {}).get("SequenceName") or scan.sequence or "")
    if "laser" in name.lower() or (scan.sequence not in (None, "press")):
        raise InvalidInputError(
            f"edited data acquired with {name or scan.sequence!r}: specproc simulates editing "
            "in PRESS localisation only (MEGA-PRESS)", scan.source)
    return resolve_protocol(scan, sequence="press", config=config, macromolecules=True)


def edited_basis_key(protocol: Any, conditions: Any) -> str:
    """Short content hash of an edited protocol: the PRESS protocol's key
    (:meth:`specproc.protocol.Protocol.key`: timings, versions, definitions) and both editing
    pulses. Equal keys simulate equal ON, OFF and DIFF bases."""
    from specproc._hash import json_sha256

    return json_sha256({"protocol": protocol.key(), "edit_on": conditions.on.describe(),
                        "edit_off": conditions.off.describe()})[:20]


def simulate_for_protocol(protocol: Any, conditions: Any, *, dwell_s: float | None = None,
                          n_points: int | None = None) -> EditedBasis:
    """The ON, OFF and DIFF bases of a PRESS protocol with the scan's editing pulses (cached).

    ``dwell_s`` and ``n_points`` default to the protocol's (those of the raw scan).
    """
    return simulate_edited_basis(
        field_t=protocol.field_t, te_s=protocol.te_s, te1_s=protocol.te1_s,
        dwell_s=protocol.dwell_s if dwell_s is None else dwell_s,
        n_points=protocol.n_points if n_points is None else n_points,
        centre_ppm=protocol.centre_ppm, edit_on=conditions.on, edit_off=conditions.off)


def analyse_edited_scan(
    scan: Any,
    water: Any = None,
    *,
    tissue: Mapping[str, float] | None = None,
    basis: EditedBasis | None = None,
    config: Any = None,
    title: str | None = None,
    protocol: Any = None,
) -> Any:
    """Analyse a J-difference edited scan (see the module docstring).

    ``protocol`` (a :class:`specproc.protocol.Protocol` of PRESS) gives the field, TE and TE1
    when the caller resolved them (command-line or manifest timings); by default they are
    resolved from the scan and the configuration.

    Returns
    -------
    ScanResult
        The OFF spectrum's analysis with ``edited`` set; ``scan`` is the raw edited scan.
    """
    from specproc.analysis import analyse_scan, resolve_config

    cfg, _source = resolve_config(config)
    conditions = edit_conditions(scan)
    if protocol is None or protocol.sequence != "press":
        protocol = edited_protocol(scan, cfg)
    spectra = preprocess_edited(scan, water=water, config=cfg, conditions=conditions)
    if basis is None:
        basis = simulate_for_protocol(protocol, conditions, dwell_s=spectra.off.dwell_s,
                                      n_points=spectra.off.n_points)
    # the OFF sub-spectrum through the ordinary analysis: its raw transients, the settings and
    # the preprocessing that made spectra.off (so its QC and figures show the real steps)
    off_input = spectra.off_input if spectra.off_input is not None else spectra.off
    result = analyse_scan(off_input.replace(sequence="press"), water, tissue=tissue,
                          basis=dataclasses.replace(basis.off, sequence="press"),
                          config=spectra.off_config or cfg, protocol=protocol,
                          title=title if title is not None else _title(scan),
                          preprocessing=spectra.off_result)
    fit = result.fit
    residue = non_edited_residue(result.preprocessing.scan, fit, basis)
    diff_fit = fit_difference(spectra.diff.replace(data=np.asarray(spectra.diff.data) - residue),
                              basis.diff, config=cfg)
    tcr = fit.combined.get("tCr", {})
    conc = result.quantification.conc_molar_mm or {}
    from specproc.quantify import load_relaxation_times

    table = load_relaxation_times(protocol.field_t, overrides=result.relaxation_overrides)
    cr, gaba = table.metabolite("Cr"), table.metabolite("GABA")
    edited = summarise_edited(
        spectra, basis, diff_fit, residue=residue, tcr=float(tcr.get("amplitude", float("nan"))),
        tcr_sd=float(tcr.get("crlb_sd", float("nan"))),
        tcr_mm=float(conc["tCr"]) if "tCr" in conc else None,
        tissue=result.tissue, te_s=scan.te_s, tr_s=scan.tr_s,
        cr_t1_t2_s=(cr.t1_s, cr.t2_s), gaba_t1_t2_s=(gaba.t1_s, gaba.t2_s))
    notes = (*result.notes, *(f"edited: {n}" for n in edited.notes),
             *(f"edited QC: {f}" for f in edited.flags))
    inputs = dict(result.inputs)
    from specproc.analysis import _input_record  # the same record as any scan's input

    inputs["scan"] = _input_record(scan)
    return dataclasses.replace(result, scan=scan, water=water, edited=edited, notes=notes,
                               inputs=inputs, config=cfg, config_source=_source)


def _title(scan: Any) -> str:
    from specproc.analysis import _default_title

    return _default_title(scan)
