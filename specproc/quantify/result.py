"""The quantification of one scan: :func:`quantify` and its result :class:`Quantification`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from specproc._json import to_jsonable
from specproc.errors import InvalidInputError
from specproc.quantify.inputs import Acquisition, Amplitudes, Tissue, WaterSignal
from specproc.quantify.relaxation import _RELAX_FORMULA, RelaxationTimes, load_relaxation_times
from specproc.quantify.sums import (
    _ratio_formula,
    combine_linear,
    ratio_linear,
    systematic_sd,
)
from specproc.quantify.water import (
    _MOLAL_FORMULA,
    _MOLAR_FORMULA,
    _SYMBOLS,
    _positive,
    concentration_factors,
)
from specproc.sums import SUMS

__all__ = ["NO_WATER_STATEMENT", "Quantification", "quantify"]

#: The plain statement recorded when there is no water reference.
NO_WATER_STATEMENT = "no water reference: ratios to tCr only"


@dataclass(frozen=True)
class Quantification:
    """Ratios and (with a water reference) concentrations of one scan.

    Attributes
    ----------
    names : tuple of str
        Fitted members followed by the combined sums present.
    combinations : dict
        Sum name -> members used.
    amplitudes, amplitude_sd : dict
        Amplitudes as given (and sums), with SDs (NaN without covariance).
    reference : str
        Denominator of ``ratios`` (``"tCr"``).
    ratios, ratio_sd : dict
        Molecule ratios to the reference (proton-normalised, no relaxation correction).
    ratios_to_water, ratios_to_water_sd : dict or None
        ``(S_M/N_M) / (S_W/N_W)``: molecule ratio to water without tissue or relaxation
        corrections; ``None`` without a water reference.
    conc_molar_mm, conc_molar_sd_mm : dict or None
        mmol per litre of GM+WM tissue (CSF-corrected), ``None`` without a water reference.
    conc_molal_mmol_kg, conc_molal_sd_mmol_kg : dict or None
        mmol per kg of GM+WM tissue water.
    statement : str
        Plain statement of what was computed (e.g. :data:`NO_WATER_STATEMENT`).
    formula : dict
        The equations as text.
    constants : dict
        Every constant used (JSON-serialisable).
    notes : tuple of str
        Warnings and assumptions.
    amplitude_model_sd, ratio_model_sd : dict or None
        Model uncertainty (systematic SD) of the amplitudes and of the ratios: the spread over
        the refits under alternative model choices (:mod:`specproc.fit.sensitivity`), each
        ratio formed in every refit; ``None`` when it was not estimated. The SDs above
        (``amplitude_sd``, ``ratio_sd``, ...) stay the Cramér-Rao (statistical) ones; the
        total is ``sqrt(SD² + model SD²)`` (:func:`specproc.quantify.sums.total_sd`).
    conc_molar_model_sd_mm, conc_molal_model_sd_mmol_kg : dict or None
        The same for the water-referenced concentrations (the water signal and the tissue
        and relaxation factors held).
    """

    names: tuple[str, ...]
    combinations: dict[str, tuple[str, ...]]
    amplitudes: dict[str, float]
    amplitude_sd: dict[str, float]
    reference: str
    ratios: dict[str, float]
    ratio_sd: dict[str, float]
    ratios_to_water: dict[str, float] | None
    ratios_to_water_sd: dict[str, float] | None
    conc_molar_mm: dict[str, float] | None
    conc_molar_sd_mm: dict[str, float] | None
    conc_molal_mmol_kg: dict[str, float] | None
    conc_molal_sd_mmol_kg: dict[str, float] | None
    statement: str
    formula: dict[str, str]
    constants: dict[str, Any]
    notes: tuple[str, ...] = ()
    amplitude_model_sd: dict[str, float] | None = None
    ratio_model_sd: dict[str, float] | None = None
    conc_molar_model_sd_mm: dict[str, float] | None = None
    conc_molal_model_sd_mmol_kg: dict[str, float] | None = None

    @property
    def water_referenced(self) -> bool:
        """True when concentrations were computed."""
        return self.conc_molar_mm is not None

    def rows(self) -> list[dict[str, Any]]:
        """One plain dict per member or sum (for tidy tables)."""
        nan = float("nan")
        rows = []
        for n in self.names:
            row: dict[str, Any] = {
                "name": n,
                "members": list(self.combinations.get(n, (n,))),
                "amplitude": self.amplitudes[n],
                "amplitude_sd": self.amplitude_sd[n],
                f"ratio_to_{self.reference}": self.ratios.get(n, nan),
                f"ratio_to_{self.reference}_sd": self.ratio_sd.get(n, nan),
            }
            columns = {
                "amplitude_model_sd": self.amplitude_model_sd,
                f"ratio_to_{self.reference}_model_sd": self.ratio_model_sd,
                "ratio_to_water": self.ratios_to_water,
                "ratio_to_water_sd": self.ratios_to_water_sd,
                "conc_molar_mm": self.conc_molar_mm,
                "conc_molar_sd_mm": self.conc_molar_sd_mm,
                "conc_molal_mmol_kg": self.conc_molal_mmol_kg,
                "conc_molal_sd_mmol_kg": self.conc_molal_sd_mmol_kg,
                "conc_molar_model_sd_mm": self.conc_molar_model_sd_mm,
                "conc_molal_model_sd_mmol_kg": self.conc_molal_model_sd_mmol_kg,
            }
            for key, table in columns.items():
                if table is not None:
                    row[key] = table.get(n, nan)
            rows.append(row)
        return rows

    def to_dict(self) -> dict[str, Any]:
        """JSON-serialisable dict (NaN and infinity written as ``None``)."""
        return to_jsonable(
            {
                "statement": self.statement,
                "reference": self.reference,
                "water_referenced": self.water_referenced,
                "names": list(self.names),
                "combinations": {k: list(v) for k, v in self.combinations.items()},
                "amplitudes": self.amplitudes,
                "amplitude_sd": self.amplitude_sd,
                "ratios": self.ratios,
                "ratio_sd": self.ratio_sd,
                "ratios_to_water": self.ratios_to_water,
                "ratios_to_water_sd": self.ratios_to_water_sd,
                "conc_molar_mm": self.conc_molar_mm,
                "conc_molar_sd_mm": self.conc_molar_sd_mm,
                "conc_molal_mmol_kg": self.conc_molal_mmol_kg,
                "conc_molal_sd_mmol_kg": self.conc_molal_sd_mmol_kg,
                "amplitude_model_sd": self.amplitude_model_sd,
                "ratio_model_sd": self.ratio_model_sd,
                "conc_molar_model_sd_mm": self.conc_molar_model_sd_mm,
                "conc_molal_model_sd_mmol_kg": self.conc_molal_model_sd_mmol_kg,
                "units": {
                    "conc_molar_mm": "mmol per litre of GM+WM tissue (CSF-corrected)",
                    "conc_molal_mmol_kg": "mmol per kg of GM+WM tissue water",
                    "ratios": f"molecule ratio to {self.reference} (no relaxation correction)",
                },
                "formula": self.formula,
                "constants": self.constants,
                "notes": list(self.notes),
            }
        )


def quantify(
    amplitudes: Amplitudes | Mapping[str, float],
    *,
    water: WaterSignal | None = None,
    tissue: Tissue | Mapping[str, float] | None = None,
    acquisition: Acquisition | None = None,
    relaxation: RelaxationTimes | Mapping[str, Any] | str | os.PathLike[str] | None = None,
    combinations: Mapping[str, Sequence[str]] = SUMS,
    reference: str = "tCr",
) -> Quantification:
    """Ratios to tCr and, with a water reference, tissue-corrected concentrations.

    Parameters
    ----------
    amplitudes : Amplitudes or mapping of str to float
        Fitted amplitudes (:meth:`Amplitudes.from_fit` for a fit); a plain mapping is taken
        as per-molecule amplitudes without covariance. Macromolecules may be included: they get
        ratios, and concentrations with the default relaxation and their proton weights.
    water : WaterSignal, optional
        The water reference signal (:meth:`WaterSignal.measure`); ``None`` gives ratios only.
    tissue : Tissue or mapping, optional
        The voxel's GM/WM/CSF fractions (a mapping: the fractions with the default water
        constants); required with a water reference. (Without segmentation a caller may pass
        pure-tissue fractions and say so.)
    acquisition : Acquisition, optional
        TE and TR of the metabolite scan, and the field to pick relaxation times; required with
        a water reference.
    relaxation : RelaxationTimes, mapping or path, optional
        Relaxation times, or overrides merged over the bundled table
        (:func:`load_relaxation_times` at ``acquisition.field_t``).
    combinations : mapping
        Sums to report (default :data:`specproc.sums.SUMS`; members matched
        case-insensitively).
    reference : str
        Member or sum used as the ratio denominator (default ``"tCr"``).

    Returns
    -------
    Quantification

    Examples
    --------
    >>> q = quantify({"NAA": 12.0, "Cr": 6.0, "PCr": 2.0})
    >>> q.statement
    'no water reference: ratios to tCr only'
    >>> round(q.ratios["NAA"], 3)
    1.5
    >>> q = quantify({"NAA": 12.0, "Cr": 6.0, "PCr": 2.0}, water=WaterSignal(3.0e4),
    ...              tissue={"gm": 0.6, "wm": 0.3, "csf": 0.1},
    ...              acquisition=Acquisition(te_s=0.030, tr_s=2.0, field_t=3.0))
    >>> round(q.conc_molar_mm["tNAA"], 2), round(q.conc_molal_mmol_kg["tNAA"], 2)
    (33.85, 43.23)
    """
    amps_in = amplitudes if isinstance(amplitudes, Amplitudes) else Amplitudes.from_mapping(
        amplitudes, per_molecule=True)
    member_names = list(amps_in.names)
    values = amps_in.values
    protons = amps_in.protons
    proton_normalised = amps_in.per_molecule
    n = values.size
    cov = amps_in.covariance
    notes: list[str] = []
    if cov is None:
        notes.append("no covariance given: SDs are NaN")
    lowered = {m.lower() for m in member_names}
    clash = [c for c in combinations if c.lower() in lowered]
    combos = {k: v for k, v in combinations.items() if k.lower() not in lowered}
    if clash:
        notes.append(f"fitted members named like sums kept as fitted: {clash}")

    # molecule units u_i = A_i (per proton) or A_i / N_i (signal areas)
    if proton_normalised:
        per_molecule = np.ones(n)
    else:
        if protons is None:
            raise InvalidInputError(
                "the proton counts of the members are needed (amplitudes are not "
                "proton-normalised)"
            )
        missing = [m for m in member_names if m not in protons]
        if missing:
            raise InvalidInputError(f"no proton count for {missing}")
        per_molecule = np.array(
            [1.0 / _positive(protons[m], f"protons of {m}", None) for m in member_names]
        )

    amp_sums = combine_linear(values, cov, names=member_names, combinations=combos)
    out_names = [*member_names, *amp_sums]
    combos_used = {k: v[2] for k, v in amp_sums.items()}
    sd_members = (
        np.full(n, np.nan) if cov is None else np.sqrt(np.clip(np.diag(cov), 0.0, None))
    )
    amps = {m: float(values[i]) for i, m in enumerate(member_names)}
    amp_sd = {m: float(sd_members[i]) for i, m in enumerate(member_names)}
    for k, (val, sd, _members) in amp_sums.items():
        amps[k] = val
        amp_sd[k] = sd

    def selector(name: str, weights: np.ndarray) -> np.ndarray:
        u = np.zeros(n)
        for m in combos_used.get(name, (name,)):
            i = member_names.index(m)
            u[i] = weights[i]
        return u

    alts = amps_in.alternatives
    factors = amps_in.alternative_factors

    def model_sd(u: np.ndarray, w: np.ndarray | None = None) -> float:
        """Systematic SD of ``u·v`` (or of ``u·v / w·v``) over the alternative fits."""
        assert alts is not None
        if w is None:
            return systematic_sd(float(u @ values), alts @ u, factors)
        den0, dens = float(w @ values), alts @ w
        if not den0 > 0 or not np.all(dens > 0):
            return float("nan")
        return systematic_sd(float(u @ values) / den0, (alts @ u) / dens, factors)

    amp_model = None
    if alts is not None:
        amp_model = {name: model_sd(selector(name, np.ones(n))) for name in out_names}

    # ---- ratios to the reference (molecule ratios)
    ratios: dict[str, float] = {}
    ratio_sd: dict[str, float] = {}
    ratio_model: dict[str, float] | None = None if alts is None else {}
    if reference in out_names:
        den = selector(reference, per_molecule)
        for name in out_names:
            ratios[name], ratio_sd[name] = ratio_linear(
                selector(name, per_molecule), den, values, cov
            )
            if ratio_model is not None:
                ratio_model[name] = model_sd(selector(name, per_molecule), den)
        if not ratios[reference] == ratios[reference]:  # NaN: zero denominator
            notes.append(f"{reference} amplitude is zero: ratios undefined")
    else:
        notes.append(f"reference {reference!r} not fitted: no ratios")

    formula = {"relaxation": _RELAX_FORMULA, "symbols": _SYMBOLS}
    if water is None:
        statement = NO_WATER_STATEMENT if reference == "tCr" else (
            f"no water reference: ratios to {reference} only"
        )
        formula["ratio"] = _ratio_formula(reference)
        constants: dict[str, Any] = {
            "reference": reference,
            "proton_normalised": bool(proton_normalised),
            "protons": None if protons is None else {m: protons.get(m) for m in member_names},
        }
        return Quantification(
            names=tuple(out_names), combinations=combos_used, amplitudes=amps,
            amplitude_sd=amp_sd, reference=reference, ratios=ratios, ratio_sd=ratio_sd,
            ratios_to_water=None, ratios_to_water_sd=None, conc_molar_mm=None,
            conc_molar_sd_mm=None, conc_molal_mmol_kg=None, conc_molal_sd_mmol_kg=None,
            statement=statement, formula=formula, constants=to_jsonable(constants),
            notes=tuple(notes), amplitude_model_sd=amp_model, ratio_model_sd=ratio_model,
        )

    # ---- water referencing
    if tissue is None or acquisition is None or acquisition.te_s is None or (
            acquisition.tr_s is None):
        raise InvalidInputError(
            "water-referenced concentrations need the tissue fractions (gm, wm, csf) and the "
            "acquisition's TE and TR"
        )
    tissue = tissue if isinstance(tissue, Tissue) else Tissue(dict(tissue))
    if not isinstance(relaxation, RelaxationTimes):
        if acquisition.field_t is None:
            raise InvalidInputError(
                "the field (acquisition.field_t) or relaxation times are needed with a water "
                "reference"
            )
        relaxation = load_relaxation_times(acquisition.field_t, overrides=relaxation)
    water_amplitude = water.amplitude
    metab_relax = {m: relaxation.metabolite(m) for m in member_names}
    defaulted = [m for m, r in metab_relax.items() if "default (no entry" in r.note]
    if defaulted:
        notes.append(f"default relaxation times used for {defaulted}")
    k_molar, k_molal, water_consts = concentration_factors(
        member_names,
        water_amplitude=water_amplitude,
        volume_fractions=tissue.fractions,
        te_s=acquisition.te_s,
        tr_s=acquisition.tr_s,
        metabolite_relaxation=metab_relax,
        water_relaxation=relaxation.water,
        protons=protons,
        proton_normalised=proton_normalised,
        water_proton_normalised=water.per_proton,
        water_te_s=water.te_s,
        water_tr_s=water.tr_s,
        water_protons=tissue.water_protons,
        water_content=tissue.water_content,
        water_molal_mm=tissue.water_molal_mm,
        water_molar_mm=tissue.water_molar_mm,
        fraction_atol=tissue.atol,
    )
    water_protons = tissue.water_protons
    s_w = water_consts["water_signal"]
    w_sd = float(water.amplitude_sd)
    if w_sd < 0 or not math.isfinite(w_sd):
        raise InvalidInputError(f"water amplitude SD must be >= 0, got {water.amplitude_sd!r}")
    rel_w_var = (w_sd / float(water_amplitude)) ** 2

    def scaled(k: Mapping[str, float] | np.ndarray) -> tuple[dict[str, float], dict[str, float]]:
        weights = np.array([k[m] for m in member_names]) if isinstance(k, Mapping) else k
        vals: dict[str, float] = {}
        sds: dict[str, float] = {}
        for name in out_names:
            u = selector(name, weights)
            vals[name] = float(u @ values)
            var = float("nan") if cov is None else float(max(u @ cov @ u, 0.0))
            sds[name] = math.sqrt(var + vals[name] ** 2 * rel_w_var)
        return vals, sds

    def scaled_model(k: Mapping[str, float]) -> dict[str, float] | None:
        if alts is None:
            return None
        weights = np.array([k[m] for m in member_names])
        return {name: model_sd(selector(name, weights)) for name in out_names}

    molar, molar_sd = scaled(k_molar)
    molal, molal_sd = scaled(k_molal)
    to_water, to_water_sd = scaled(per_molecule * float(water_protons) / s_w)
    formula.update(
        molal=_MOLAL_FORMULA,
        molar=_MOLAR_FORMULA,
        ratio=_ratio_formula(reference),
        ratio_to_water="ratio_to_water_M = (S_M / N_M) / (S_W / N_W)",
        references=(
            "Gasparovic et al., Magn Reson Med 2006;55:1219-1226; Near et al., NMR Biomed "
            "2021;34:e4257"
        ),
    )
    constants = {
        "reference": reference,
        "field_t": relaxation.field_t,
        "relaxation_file": relaxation.file,
        "protons": None if protons is None else {m: protons.get(m) for m in member_names},
        "water_amplitude_sd": w_sd,
        "concentration_factor_molar": k_molar,
        "concentration_factor_molal": k_molal,
        **water_consts,
    }
    statement = (
        "water-referenced concentrations (tissue water, CSF-corrected, relaxation-corrected; "
        "Gasparovic et al. 2006) and ratios to " + reference
    )
    return Quantification(
        names=tuple(out_names), combinations=combos_used, amplitudes=amps, amplitude_sd=amp_sd,
        reference=reference, ratios=ratios, ratio_sd=ratio_sd, ratios_to_water=to_water,
        ratios_to_water_sd=to_water_sd, conc_molar_mm=molar, conc_molar_sd_mm=molar_sd,
        conc_molal_mmol_kg=molal, conc_molal_sd_mmol_kg=molal_sd, statement=statement,
        formula=formula, constants=to_jsonable(constants), notes=tuple(notes),
        amplitude_model_sd=amp_model, ratio_model_sd=ratio_model,
        conc_molar_model_sd_mm=scaled_model(k_molar),
        conc_molal_model_sd_mmol_kg=scaled_model(k_molal),
    )



