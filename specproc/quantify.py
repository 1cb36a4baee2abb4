"""Quantification: ratios to total creatine and water-referenced concentrations.

Turns fitted metabolite amplitudes into numbers a study can use:

* ratios to total creatine (and, when a water reference exists, to water), with standard
  deviations propagated from the amplitude covariance;
* tissue-water-referenced concentrations following Gasparovic et al. (2006) and the consensus
  of Near et al. (2021): partial-volume (GM, WM, CSF) correction with tissue water contents,
  relaxation attenuation of water per tissue compartment and of each metabolite, in molar units
  (mM, mmol per litre of GM+WM tissue, corrected for the CSF fraction) and molal units (mmol per
  kg of GM+WM tissue water);
* combined sums (tNAA, tCr, tCho, Glx) with their SD from the covariance.

Everything works on plain dicts and arrays; it does not depend on the fitter's result class.
The result is a :class:`Quantification` whose :meth:`Quantification.to_dict` records the
formula and every constant used (for ``fit.json``).

Relaxation times come from ``specproc/data/relaxation.toml`` through
:func:`load_relaxation_times` (values by field strength, each with its citation; user
overrides merged on top).

References
----------
.. [1] Gasparovic C, Song T, Devier D, et al. Use of tissue water as a concentration reference
   for proton spectroscopic imaging. Magn Reson Med 2006;55:1219-1226.
.. [2] Near J, Harris AD, Juchem C, et al. Preprocessing, analysis and quantification in
   single-voxel magnetic resonance spectroscopy: experts' consensus recommendations.
   NMR Biomed 2021;34:e4257.
.. [3] Ernst T, Kreis R, Ross BD. Absolute quantitation of water and metabolites in the human
   brain. I. Compartments and water. J Magn Reson B 1993;102:1-8 (tissue water contents
   GM 0.78, WM 0.65, CSF 0.97 as used by [1]; values from memory).
"""

from __future__ import annotations

import math
import os
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from specproc._json import to_jsonable
from specproc.constants import WATER_MOLAR_MM
from specproc.errors import InvalidInputError

if TYPE_CHECKING:
    from specproc.data import Scan

__all__ = [
    "DEFAULT_COMBINATIONS",
    "NO_WATER_STATEMENT",
    "RELAXATION_FILE",
    "TISSUES",
    "TISSUE_WATER_CONTENT",
    "TISSUE_WATER_CONTENT_SOURCE",
    "WATER_PROTONS",
    "Quantification",
    "Relaxation",
    "RelaxationTimes",
    "combine_linear",
    "concentration_factors",
    "load_relaxation_times",
    "quantify",
    "ratio_linear",
    "relaxation_factor",
    "validate_tissue_fractions",
    "water_amplitude",
    "water_mole_fractions",
]

#: Tissue compartments, in this order everywhere.
TISSUES: tuple[str, ...] = ("gm", "wm", "csf")

#: MR-visible water content of each compartment relative to pure water (GM 0.78, WM 0.65,
#: CSF 0.97): Ernst, Kreis & Ross, J Magn Reson B 1993;102:1-8, the values used by Gasparovic
#: et al. 2006 (from memory).
TISSUE_WATER_CONTENT: Mapping[str, float] = {"gm": 0.78, "wm": 0.65, "csf": 0.97}

#: Citation of :data:`TISSUE_WATER_CONTENT`.
TISSUE_WATER_CONTENT_SOURCE = (
    "Ernst T, Kreis R, Ross BD. J Magn Reson B 1993;102:1-8, as used by Gasparovic et al., "
    "Magn Reson Med 2006;55:1219-1226 (from memory)"
)

#: Number of 1H nuclei of a water molecule.
WATER_PROTONS: int = 2

#: Combined sums reported when at least one member was fitted (common practice naming).
DEFAULT_COMBINATIONS: Mapping[str, tuple[str, ...]] = {
    "tNAA": ("NAA", "NAAG"),
    "tCr": ("Cr", "PCr"),
    "tCho": ("GPC", "PCh", "PCho", "Cho"),  # as specproc.fit.crlb.COMBINED_SUMS
    "Glx": ("Glu", "Gln"),
}

#: The plain statement recorded when there is no water reference.
NO_WATER_STATEMENT = "no water reference: ratios to tCr only"

#: The bundled relaxation table.
RELAXATION_FILE: Path = Path(__file__).resolve().parent / "data" / "relaxation.toml"

#: A scanner field within this distance of a tabulated field uses that field's values, T.
_FIELD_SNAP_T = 0.15

_MOLAL_FORMULA = (
    "[M]_molal = (S_M / S_W) * (N_W / N_M) * (a_GM*R_W,GM + a_WM*R_W,WM + a_CSF*R_W,CSF)"
    " / ((1 - a_CSF) * R_M) * [H2O];  a_t = f_t*d_t / (f_GM*d_GM + f_WM*d_WM + f_CSF*d_CSF)"
)
_MOLAR_FORMULA = (
    "[M]_molar = (S_M / S_W) * (N_W / N_M) * (f_GM*d_GM*R_W,GM + f_WM*d_WM*R_W,WM"
    " + f_CSF*d_CSF*R_W,CSF) / ((1 - f_CSF) * R_M) * [H2O]"
)
_RELAX_FORMULA = "R = exp(-TE/T2) * (1 - exp(-TR/T1))"
_SYMBOLS = (
    "S_M, S_W: metabolite and water signal areas; N_M, N_W = 2: their numbers of protons; "
    "f_t: tissue volume fractions (GM, WM, CSF; sum 1); d_t: MR-visible water content of each "
    "tissue relative to pure water; a_t: water mole fractions; R_W,t: relaxation attenuation of "
    "water in tissue t (water TE/TR); R_M: that of the metabolite (metabolite TE/TR); "
    "[H2O] = 55.51 mol/kg = 55.51 mol/L (pure water, density taken as 1 kg/L)"
)


# ============================================================================ relaxation data
@dataclass(frozen=True)
class Relaxation:
    """T1 and T2 of one species in one compartment.

    Attributes
    ----------
    t1_s, t2_s : float
        Longitudinal and transverse relaxation times, s (``t2_s = math.inf``: no transverse
        decay; note that ``t1_s = math.inf`` means no recovery at all, i.e. no signal).
    source : str
        Citation or origin of the values.
    note : str
        How the values were chosen (tabulated field, interpolation, default, override).
    """

    t1_s: float
    t2_s: float
    source: str = ""
    note: str = ""

    def factor(self, *, te_s: float, tr_s: float) -> float:
        """Attenuation ``exp(-TE/T2)·(1 - exp(-TR/T1))`` (see :func:`relaxation_factor`)."""
        return relaxation_factor(te_s=te_s, tr_s=tr_s, t1_s=self.t1_s, t2_s=self.t2_s)

    def to_dict(self) -> dict[str, Any]:
        """Plain dict (JSON-serialisable; infinite times as ``None``)."""
        return {
            "t1_s": _json_number(self.t1_s),
            "t2_s": _json_number(self.t2_s),
            "source": self.source,
            "note": self.note,
        }


@dataclass(frozen=True)
class RelaxationTimes:
    """Relaxation times at one field strength (from :func:`load_relaxation_times`).

    Attributes
    ----------
    field_t : float
        Field strength the values were chosen for, T.
    water : mapping of str to Relaxation
        Water in each compartment, keys ``"gm"``, ``"wm"``, ``"csf"``.
    metabolites : mapping of str to Relaxation
        Metabolites with their own entry, keyed by name.
    default : Relaxation
        Used for a metabolite without an entry (and without an alias).
    aliases : mapping of str to str
        Member name -> name of the entry whose values it takes.
    file : str
        The table file, and any override file, the values came from.
    """

    field_t: float
    water: Mapping[str, Relaxation]
    metabolites: Mapping[str, Relaxation]
    default: Relaxation
    aliases: Mapping[str, str] = field(default_factory=dict)
    file: str = ""

    def metabolite(self, name: str) -> Relaxation:
        """Relaxation of metabolite ``name``: own entry, alias, or the default (said in ``note``).

        Names match case-insensitively.
        """
        by_lower = {k.lower(): k for k in self.metabolites}
        key = by_lower.get(str(name).lower())
        if key is not None:
            return self.metabolites[key]
        alias_lower = {k.lower(): v for k, v in self.aliases.items()}
        target = alias_lower.get(str(name).lower())
        if target is not None and target.lower() in by_lower:
            rel = self.metabolites[by_lower[target.lower()]]
            note = f"{rel.note}; values of {target} (alias)".strip("; ")
            return Relaxation(rel.t1_s, rel.t2_s, rel.source, note)
        d = self.default
        note = f"{d.note}; default (no entry for {name})".strip("; ")
        return Relaxation(d.t1_s, d.t2_s, d.source, note)

    def to_dict(self) -> dict[str, Any]:
        """Plain dict (JSON-serialisable)."""
        return {
            "field_t": self.field_t,
            "file": self.file,
            "water": {t: r.to_dict() for t, r in self.water.items()},
            "metabolites": {m: r.to_dict() for m, r in self.metabolites.items()},
            "default": self.default.to_dict(),
            "aliases": dict(self.aliases),
        }


def _pick_quantity(
    entries: Sequence[Mapping[str, Any]], quantity: str, field_t: float
) -> tuple[float, str, str, float | None] | None:
    """Value of ``quantity`` at ``field_t`` from per-field entries.

    Returns (value, source, note, nearest field when outside the tabulated range or None).
    """
    points: dict[float, tuple[float, str]] = {}
    for e in entries:
        if quantity in e:
            points[float(e["field_t"])] = (float(e[quantity]), str(e.get("source", "")))
    if not points:
        return None
    fields = sorted(points)
    nearest = min(fields, key=lambda b: abs(b - field_t))
    if abs(nearest - field_t) <= _FIELD_SNAP_T:
        value, source = points[nearest]
        return value, source, f"{quantity} tabulated at {nearest:g} T", None
    if field_t < fields[0] or field_t > fields[-1]:
        value, source = points[nearest]
        where = (
            f"only tabulated at {nearest:g} T" if len(fields) == 1
            else f"outside the tabulated range {fields[0]:g}-{fields[-1]:g} T"
        )
        return value, source, f"{quantity} from the nearest tabulated field ({where})", nearest
    lo = max(b for b in fields if b < field_t)
    hi = min(b for b in fields if b > field_t)
    w = (field_t - lo) / (hi - lo)
    value = (1 - w) * points[lo][0] + w * points[hi][0]
    source = "; ".join(dict.fromkeys([points[lo][1], points[hi][1]]))
    return value, source, f"{quantity} interpolated linearly between {lo:g} T and {hi:g} T", None


def _resolve_entry(
    entries: Sequence[Mapping[str, Any]],
    field_t: float,
    fallback: Sequence[Mapping[str, Any]] | None,
    where: str,
    path: Path,
) -> Relaxation:
    """Relaxation of one entry at ``field_t``.

    ``fallback`` are the ``[[default]]`` entries (metabolites only): a quantity the entry lacks
    is taken from them, and a quantity only tabulated at other fields is carried from the
    nearest tabulated field with the field dependence of the default,
    ``T(B) = T(B_near) · T_default(B) / T_default(B_near)``.
    """
    values: dict[str, float] = {}
    sources: list[str] = []
    notes: list[str] = []
    for quantity in ("t1_s", "t2_s"):
        picked = _pick_quantity(entries, quantity, field_t)
        if picked is None:
            own = None if fallback is None else _pick_quantity(fallback, quantity, field_t)
            if own is None:
                raise InvalidInputError(f"{where}: no {quantity} at any field strength", path)
            values[quantity] = own[0]
            sources.append(own[1])
            notes.append(f"{quantity} from the default ({own[2]})")
            continue
        value, source, note, nearest = picked
        if nearest is not None and fallback is not None:
            d_here = _pick_quantity(fallback, quantity, field_t)
            d_near = _pick_quantity(fallback, quantity, nearest)
            if d_here is not None and d_near is not None and d_near[0] > 0:
                value = value * d_here[0] / d_near[0]
                note = (
                    f"{note}; carried from {nearest:g} T to {field_t:g} T with the field "
                    "dependence of the default (assumption)"
                )
        elif nearest is not None:
            note = f"{note}; value of {nearest:g} T used unchanged"
        values[quantity] = value
        sources.append(source)
        notes.append(note)
    source = "; ".join(dict.fromkeys(s for s in sources if s))
    return Relaxation(values["t1_s"], values["t2_s"], source, "; ".join(notes))


def _check_entries(raw: Any, where: str, path: Path) -> list[dict[str, Any]]:
    if not isinstance(raw, list) or not raw:
        raise InvalidInputError(f"{where} must be a non-empty list of tables", path)
    out = []
    for i, e in enumerate(raw):
        if not isinstance(e, dict):
            raise InvalidInputError(f"{where}[{i}] must be a table", path)
        unknown = set(e) - {"field_t", "t1_s", "t2_s", "source"}
        if unknown:
            raise InvalidInputError(f"{where}[{i}]: unknown keys {sorted(unknown)}", path)
        if "field_t" not in e:
            raise InvalidInputError(f"{where}[{i}]: missing 'field_t'", path)
        for key in ("field_t", "t1_s", "t2_s"):
            if key in e:
                _positive(e[key], f"{where}[{i}].{key}", path)
        out.append(e)
    return out


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise InvalidInputError("relaxation file not found", path) from None
    except tomllib.TOMLDecodeError as exc:
        raise InvalidInputError(f"not valid TOML: {exc}", path) from None
    except OSError as exc:
        raise InvalidInputError(f"cannot read: {exc.strerror}", path) from None


def _apply_override(base: Relaxation, raw: Any, where: str, path: Path | None) -> Relaxation:
    if not isinstance(raw, Mapping):
        raise InvalidInputError(f"override {where} must be a table with t1_s/t2_s", path)
    unknown = set(raw) - {"t1_s", "t2_s", "source"}
    if unknown:
        raise InvalidInputError(f"override {where}: unknown keys {sorted(unknown)}", path)
    t1 = _positive(raw["t1_s"], f"{where}.t1_s", path) if "t1_s" in raw else base.t1_s
    t2 = _positive(raw["t2_s"], f"{where}.t2_s", path) if "t2_s" in raw else base.t2_s
    changed = [k for k in ("t1_s", "t2_s") if k in raw]
    source = str(raw.get("source", "user override"))
    if len(changed) == 2:
        return Relaxation(t1, t2, source, "user override")
    return Relaxation(
        t1, t2, f"{base.source}; {changed[0]}: {source}" if changed else base.source,
        f"{base.note}; {', '.join(changed)} user override" if changed else base.note,
    )


def load_relaxation_times(
    field_t: float,
    *,
    path: str | os.PathLike[str] | None = None,
    overrides: Mapping[str, Any] | str | os.PathLike[str] | None = None,
) -> RelaxationTimes:
    """Relaxation times of water (GM, WM, CSF) and metabolites at a field strength.

    Parameters
    ----------
    field_t : float
        Scanner field, T (e.g. ``scan.field_t``; 2.89 T is treated as 3 T).
    path : path, optional
        Relaxation table; default :data:`RELAXATION_FILE`.
    overrides : mapping or path of a TOML file, optional
        Values merged on top at this field: ``{"water": {"gm": {"t1_s": ..., "t2_s": ...}},
        "metabolite": {"NAA": {"t2_s": ..., "source": "..."}}, "default": {...},
        "aliases": {"X": "Cr"}}``; a partial table changes only the times it gives. Unknown
        keys are rejected.

    Returns
    -------
    RelaxationTimes

    Notes
    -----
    Choice by field (each of T1 and T2 separately, per entry): the tabulated value when
    ``field_t`` is within 0.15 T of a tabulated field; linear interpolation in field between the
    two nearest tabulated fields inside the tabulated range; outside it, the value of the nearest
    tabulated field — for water unchanged, for a metabolite scaled by the field dependence of
    the ``[[default]]`` entry, ``T(B) = T(B_near)·T_default(B)/T_default(B_near)`` (an
    assumption: e.g. GABA, tabulated at 3 T only, gets a shorter T2 at 7 T). An entry with no
    value of a quantity at any field takes that quantity from the ``[[default]]`` entry. The
    choice made is written in each value's ``note``.

    Raises
    ------
    InvalidInputError
        Missing or malformed file, unknown keys, non-positive times or field.
    """
    field_t = _positive(field_t, "field_t", None)
    table_path = RELAXATION_FILE if path is None else Path(path)
    raw = _read_toml(table_path)
    unknown = set(raw) - {"schema", "water", "metabolite", "default", "aliases"}
    if unknown:
        raise InvalidInputError(f"unknown top-level keys {sorted(unknown)}", table_path)
    default_entries = _check_entries(raw.get("default"), "default", table_path)
    default = _resolve_entry(default_entries, field_t, None, "default", table_path)
    water_raw = raw.get("water")
    if not isinstance(water_raw, dict) or set(water_raw) != set(TISSUES):
        raise InvalidInputError("[water] must have exactly the tissues gm, wm, csf", table_path)
    water = {
        t: _resolve_entry(
            _check_entries(water_raw[t], f"water.{t}", table_path), field_t, None,
            f"water.{t}", table_path,
        )
        for t in TISSUES
    }
    metab_raw = raw.get("metabolite", {})
    if not isinstance(metab_raw, dict):
        raise InvalidInputError("[metabolite] must be a table of metabolites", table_path)
    metabolites = {
        name: _resolve_entry(
            _check_entries(entries, f"metabolite.{name}", table_path), field_t,
            default_entries, f"metabolite.{name}", table_path,
        )
        for name, entries in metab_raw.items()
    }
    aliases = raw.get("aliases", {})
    if not isinstance(aliases, dict) or not all(isinstance(v, str) for v in aliases.values()):
        raise InvalidInputError("[aliases] must map names to names", table_path)
    aliases = dict(aliases)
    files = [str(table_path)]

    if overrides is not None:
        opath: Path | None = None
        if isinstance(overrides, (str, os.PathLike)):
            opath = Path(overrides)
            overrides = _read_toml(opath)
            files.append(str(opath))
        if not isinstance(overrides, Mapping):
            raise InvalidInputError("relaxation overrides must be a mapping or a TOML file")
        unknown = set(overrides) - {"water", "metabolite", "default", "aliases"}
        if unknown:
            raise InvalidInputError(f"relaxation overrides: unknown keys {sorted(unknown)}", opath)
        for tissue, values in dict(overrides.get("water", {})).items():
            key = str(tissue).lower()
            if key not in water:
                raise InvalidInputError(
                    f"relaxation overrides: unknown tissue {tissue!r}; known: gm, wm, csf", opath
                )
            water[key] = _apply_override(water[key], values, f"water.{key}", opath)
        if "default" in overrides:
            default = _apply_override(default, overrides["default"], "default", opath)
        for name, values in dict(overrides.get("metabolite", {})).items():
            base = metabolites.get(name) or RelaxationTimes(
                field_t, water, metabolites, default, aliases
            ).metabolite(name)
            metabolites[name] = _apply_override(base, values, f"metabolite.{name}", opath)
        extra_aliases = overrides.get("aliases", {})
        if not isinstance(extra_aliases, Mapping):
            raise InvalidInputError("relaxation overrides: aliases must map names to names", opath)
        aliases.update({str(k): str(v) for k, v in extra_aliases.items()})
    return RelaxationTimes(field_t, water, metabolites, default, aliases, "; ".join(files))


# ============================================================================ core formulas
def relaxation_factor(*, te_s: float, tr_s: float, t1_s: float, t2_s: float) -> float:
    """Signal attenuation by relaxation, ``R = exp(-TE/T2) · (1 - exp(-TR/T1))``.

    Parameters
    ----------
    te_s, tr_s : float
        Echo and repetition time, s (TE >= 0, TR > 0; ``math.inf`` allowed for TR).
    t1_s, t2_s : float
        Relaxation times, s (> 0; ``math.inf`` allowed: no T2 decay, or no T1 recovery).

    Returns
    -------
    float
        R in (0, 1]: the fraction of the fully relaxed signal at TE = 0 that is observed with a
        90° excitation repeated every TR (the model of Gasparovic et al. 2006, ignoring the
        echo-train and imperfect-flip-angle effects).
    """
    te = float(te_s)
    if not math.isfinite(te) or te < 0:
        raise InvalidInputError(f"TE must be a non-negative time in s, got {te_s!r}")
    tr = _positive(tr_s, "TR (s)", None, allow_inf=True)
    t1 = _positive(t1_s, "T1 (s)", None, allow_inf=True)
    t2 = _positive(t2_s, "T2 (s)", None, allow_inf=True)
    return math.exp(-te / t2) * (1.0 - math.exp(-tr / t1))


def validate_tissue_fractions(
    fractions: Mapping[str, float], *, atol: float = 0.01
) -> dict[str, float]:
    """Check GM/WM/CSF volume fractions and return them renormalised to sum exactly to 1.

    Parameters
    ----------
    fractions : mapping
        Keys ``gm``, ``wm``, ``csf`` (any case), values in [0, 1].
    atol : float
        Allowed deviation of the sum from 1 (segmentation output is rounded).

    Raises
    ------
    InvalidInputError
        Missing or unknown compartment, negative or non-finite fraction, sum not within ``atol``
        of 1, or a voxel of CSF only (no tissue to refer the concentration to).
    """
    lowered = {str(k).strip().lower(): v for k, v in dict(fractions).items()}
    missing = [t for t in TISSUES if t not in lowered]
    unknown = sorted(set(lowered) - set(TISSUES))
    if missing or unknown:
        raise InvalidInputError(
            f"tissue fractions need exactly gm, wm, csf; missing {missing}, unknown {unknown}"
        )
    values = {}
    for t in TISSUES:
        try:
            v = float(lowered[t])
        except (TypeError, ValueError):
            raise InvalidInputError(
                f"tissue fraction {t} is not a number: {lowered[t]!r}"
            ) from None
        if not math.isfinite(v) or v < 0:
            raise InvalidInputError(f"tissue fraction {t} must be finite and >= 0, got {v}")
        values[t] = v
    total = math.fsum(values.values())
    if abs(total - 1.0) > atol:
        raise InvalidInputError(
            f"tissue fractions sum to {total:.4f}, not 1 within {atol} (gm, wm, csf = "
            f"{values['gm']}, {values['wm']}, {values['csf']})"
        )
    # fractions that already sum to 1 (to rounding) are kept, so that validating twice
    # gives the same numbers
    out = values if abs(total - 1.0) <= 1e-12 else {t: v / total for t, v in values.items()}
    if out["csf"] >= 1.0 - 1e-9:
        raise InvalidInputError("the voxel is CSF only: no tissue to refer concentrations to")
    return out


def water_mole_fractions(
    volume_fractions: Mapping[str, float],
    water_content: Mapping[str, float] | None = None,
) -> dict[str, float]:
    """Fraction of the voxel's MR-visible water in each compartment (Gasparovic et al. 2006).

    ``a_t = f_t·d_t / (f_GM·d_GM + f_WM·d_WM + f_CSF·d_CSF)`` with ``f_t`` the (validated)
    volume fractions and ``d_t`` the relative water contents (default
    :data:`TISSUE_WATER_CONTENT`).
    """
    f = validate_tissue_fractions(volume_fractions)
    d = _water_content(water_content)
    total = sum(f[t] * d[t] for t in TISSUES)
    if total <= 0:
        raise InvalidInputError("the voxel holds no MR-visible water (all f_t·d_t are zero)")
    return {t: f[t] * d[t] / total for t in TISSUES}


def concentration_factors(
    names: Sequence[str],
    *,
    water_amplitude: float,
    volume_fractions: Mapping[str, float],
    te_s: float,
    tr_s: float,
    metabolite_relaxation: Mapping[str, Relaxation],
    water_relaxation: Mapping[str, Relaxation],
    protons: Mapping[str, float] | None = None,
    proton_normalised: bool = False,
    water_proton_normalised: bool = False,
    water_te_s: float | None = None,
    water_tr_s: float | None = None,
    water_protons: float = WATER_PROTONS,
    water_content: Mapping[str, float] | None = None,
    water_mm: float = WATER_MOLAR_MM,
    fraction_atol: float = 0.01,
) -> tuple[dict[str, float], dict[str, float], dict[str, Any]]:
    """Multipliers turning each metabolite amplitude into molar and molal concentrations.

    The concentrations are linear in the amplitudes, ``c_M = k_M · A_M``; this returns the
    ``k_M`` (so that sums and covariances follow by linear algebra) and every constant used.

    Parameters
    ----------
    names : sequence of str
        Metabolites.
    water_amplitude : float
        Water signal area, same scale as the metabolite amplitudes (> 0).
    volume_fractions : mapping
        GM, WM, CSF volume fractions of the voxel (see :func:`validate_tissue_fractions`).
    te_s, tr_s : float
        Echo and repetition time of the metabolite acquisition, s.
    metabolite_relaxation : mapping of str to Relaxation
        T1/T2 of each metabolite in ``names``.
    water_relaxation : mapping of str to Relaxation
        T1/T2 of water in ``gm``, ``wm`` and ``csf``.
    protons : mapping of str to float, optional
        Number of protons N_M of each metabolite; needed unless ``proton_normalised``.
    proton_normalised : bool
        ``False``: amplitudes are signal areas S_M. ``True``: amplitudes are areas per proton
        (``S_M / N_M``, i.e. per molecule, as fitted with a basis whose members carry their
        proton count, such as :class:`specproc.basis.BasisSet`).
    water_proton_normalised : bool
        The same for ``water_amplitude`` (``True``: ``S_W / 2``).
    water_te_s, water_tr_s : float, optional
        TE and TR of the water reference (default: the metabolite TE and TR).
    water_protons : float
        Protons per water molecule, N_W = 2.
    water_content : mapping, optional
        Relative MR-visible water content d_t (default :data:`TISSUE_WATER_CONTENT`).
    water_mm : float
        Concentration of pure water, mM (mmol/L) = mmol/kg: 55 510 (55.51 mol/L,
        :data:`specproc.constants.WATER_MOLAR_MM`).
    fraction_atol : float
        Tolerance of the sum of the volume fractions.

    Returns
    -------
    molar : dict
        ``k`` for mM (mmol per litre of GM+WM tissue).
    molal : dict
        ``k`` for mmol per kg of GM+WM tissue water.
    constants : dict
        Every input constant and intermediate term (JSON-serialisable).

    Notes
    -----
    Molal concentration (Gasparovic et al. 2006, the molal tissue-water equation of their Theory
    section; its equation number was not checked against the paper; also given by Near et al.
    2021):

    .. math::

        [M]_{molal} = \\frac{S_M}{S_W}\\,\\frac{N_W}{N_M}\\,
        \\frac{\\alpha_{GM} R_{W,GM} + \\alpha_{WM} R_{W,WM} + \\alpha_{CSF} R_{W,CSF}}
        {(1 - \\alpha_{CSF})\\, R_M}\\,[\\mathrm{H_2O}]

    with water mole fractions ``α_t = f_t d_t / Σ_u f_u d_u``. Molar concentration per volume
    of GM+WM tissue (the CSF-corrected molar form of Gasparovic et al. 2006):

    .. math::

        [M]_{molar} = \\frac{S_M}{S_W}\\,\\frac{N_W}{N_M}\\,
        \\frac{f_{GM} d_{GM} R_{W,GM} + f_{WM} d_{WM} R_{W,WM} + f_{CSF} d_{CSF} R_{W,CSF}}
        {(1 - f_{CSF})\\, R_M}\\,[\\mathrm{H_2O}]

    where ``R = exp(-TE/T2)(1 - exp(-TR/T1))``, water at the water TE/TR and metabolites at the
    metabolite TE/TR; [H2O] = 55.51 mol/kg (= mol/L taking the density of water as 1 kg/L).
    Both follow from counting molecules: the water signal is
    ``S_W ∝ N_W·V·[H2O]·Σ f_t d_t R_W,t`` and the metabolite signal ``S_M ∝ N_M·n_M·R_M``
    with the metabolite only in GM and WM; dividing the moles ``n_M`` by the tissue volume
    ``V(1 - f_CSF)`` gives the molar form, by the tissue-water mass
    ``V(f_GM d_GM + f_WM d_WM)·1 kg/L`` the molal form.
    """
    s_w = _positive(water_amplitude, "water amplitude", None)
    if water_proton_normalised:
        s_w = s_w * float(water_protons)
    f = validate_tissue_fractions(volume_fractions, atol=fraction_atol)
    d = _water_content(water_content)
    alpha = water_mole_fractions(f, d)
    w_te = te_s if water_te_s is None else water_te_s
    w_tr = tr_s if water_tr_s is None else water_tr_s
    missing = [t for t in TISSUES if t not in water_relaxation]
    if missing:
        raise InvalidInputError(f"water relaxation missing for tissues {missing}")
    r_w = {t: water_relaxation[t].factor(te_s=w_te, tr_s=w_tr) for t in TISSUES}
    if sum(alpha[t] * r_w[t] for t in TISSUES) <= 0:
        raise InvalidInputError("the water relaxation factors are zero (T1 infinite?)")
    water_term_molal = sum(alpha[t] * r_w[t] for t in TISSUES) / (1.0 - alpha["csf"])
    water_term_molar = sum(f[t] * d[t] * r_w[t] for t in TISSUES) / (1.0 - f["csf"])
    molar: dict[str, float] = {}
    molal: dict[str, float] = {}
    metab_consts: dict[str, Any] = {}
    for name in names:
        if name not in metabolite_relaxation:
            raise InvalidInputError(f"no relaxation times for metabolite {name!r}")
        rel = metabolite_relaxation[name]
        r_m = rel.factor(te_s=te_s, tr_s=tr_s)
        if r_m <= 0:
            raise InvalidInputError(f"the relaxation factor of {name!r} is zero (T1 infinite?)")
        if proton_normalised:
            per_proton = 1.0  # A_M = S_M / N_M already
            n_m = None if protons is None or name not in protons else float(protons[name])
        else:
            if protons is None or name not in protons:
                raise InvalidInputError(
                    f"the number of protons of {name!r} is needed (amplitudes are not "
                    "proton-normalised)"
                )
            n_m = _positive(protons[name], f"protons of {name}", None)
            per_proton = 1.0 / n_m
        base = per_proton * float(water_protons) / s_w / r_m * float(water_mm)
        molar[name] = base * water_term_molar
        molal[name] = base * water_term_molal
        metab_consts[name] = {**rel.to_dict(), "relaxation_factor": r_m, "protons": n_m}
    constants = {
        "water_amplitude": float(water_amplitude),
        "water_signal": s_w,
        "water_proton_normalised": bool(water_proton_normalised),
        "metabolite_proton_normalised": bool(proton_normalised),
        "water_protons": float(water_protons),
        "water_mm": float(water_mm),
        "water_mm_note": "pure water 55.51 mol/L (= 55.51 mol/kg, density taken as 1 kg/L)",
        "te_s": float(te_s),
        "tr_s": float(tr_s),
        "water_te_s": float(w_te),
        "water_tr_s": float(w_tr),
        "volume_fractions_given": {str(k): float(v) for k, v in dict(volume_fractions).items()},
        "volume_fractions": f,
        "water_content": d,
        "water_content_source": (
            TISSUE_WATER_CONTENT_SOURCE if water_content is None else "user supplied"
        ),
        "water_mole_fractions": alpha,
        "water_relaxation": {
            t: {**water_relaxation[t].to_dict(), "relaxation_factor": r_w[t]} for t in TISSUES
        },
        "water_term_molal": water_term_molal,
        "water_term_molar": water_term_molar,
        "metabolites": metab_consts,
    }
    return molar, molal, constants


# ============================================================================ linear algebra
def _as_cov(covariance: Any, sd: Any, n: int) -> np.ndarray | None:
    if covariance is not None:
        cov = np.array(covariance, dtype=float)
        if cov.shape != (n, n):
            raise InvalidInputError(
                f"covariance of shape {cov.shape} does not match {n} amplitudes"
            )
        if not np.all(np.isfinite(cov)):
            return np.full((n, n), np.nan)
        return 0.5 * (cov + cov.T)
    if sd is not None:
        s = np.array(sd, dtype=float).reshape(-1)
        if s.shape != (n,):
            raise InvalidInputError(f"{s.size} amplitude SDs do not match {n} amplitudes")
        return np.diag(s**2)
    return None


def combine_linear(
    values: Sequence[float] | np.ndarray,
    covariance: Any = None,
    *,
    names: Sequence[str],
    combinations: Mapping[str, Sequence[str]] = DEFAULT_COMBINATIONS,
    weights: Sequence[float] | np.ndarray | None = None,
) -> dict[str, tuple[float, float, tuple[str, ...]]]:
    """Weighted sums of members with their SD: ``x = Σ w_i v_i``, ``var x = wᵀ Σ w``.

    Parameters
    ----------
    values : (n,) array_like
        Values (amplitudes) in the order of ``names``.
    covariance : (n, n) array_like, optional
        Their covariance (e.g. the Cramér-Rao covariance of the fit); ``None`` gives NaN SDs.
    names : sequence of str
        Member names (matched case-sensitively).
    combinations : mapping
        Name of each sum -> its member names; members not in ``names`` are skipped, a sum with no
        member present is left out.
    weights : (n,) array_like, optional
        Per-member weights (default 1; concentration factors turn amplitude sums into
        concentration sums).

    Returns
    -------
    dict
        Sum name -> (value, SD, members used).

    Notes
    -----
    For two members, ``var(a + b) = var a + var b + 2 cov(a, b)``; fitted amplitudes of
    overlapping signals (Cr/PCr, GPC/PCh, NAA/NAAG) are anti-correlated, which makes the SD of
    their sum smaller than the root-sum-square of their SDs.
    """
    v = np.asarray(values, dtype=float).reshape(-1)
    names = [str(n) for n in names]
    if v.size != len(names):
        raise InvalidInputError(f"{v.size} values but {len(names)} names")
    w = np.ones_like(v) if weights is None else np.asarray(weights, dtype=float).reshape(-1)
    cov = _as_cov(covariance, None, v.size)
    out: dict[str, tuple[float, float, tuple[str, ...]]] = {}
    for combo, members in combinations.items():
        idx = [names.index(m) for m in members if m in names]
        if not idx:
            continue
        u = np.zeros_like(v)
        u[idx] = w[idx]
        value = float(u @ v)
        sd = float("nan") if cov is None else float(np.sqrt(max(u @ cov @ u, 0.0)))
        out[combo] = (value, sd, tuple(names[i] for i in idx))
    return out


def ratio_linear(
    numerator: np.ndarray, denominator: np.ndarray, values: np.ndarray, covariance: Any = None
) -> tuple[float, float]:
    """Ratio of two linear combinations ``r = (uᵀv)/(wᵀv)`` with its first-order SD.

    ``var r = gᵀ Σ g`` with ``g = u/(wᵀv) - (uᵀv) w/(wᵀv)²`` (delta method), which keeps the
    covariance between numerator and denominator (e.g. Cr in Cr/tCr).
    """
    u = np.asarray(numerator, dtype=float)
    w = np.asarray(denominator, dtype=float)
    v = np.asarray(values, dtype=float)
    x = float(u @ v)
    y = float(w @ v)
    if y == 0 or not math.isfinite(y):
        return float("nan"), float("nan")
    r = x / y
    cov = _as_cov(covariance, None, v.size)
    if cov is None:
        return r, float("nan")
    g = u / y - x * w / y**2
    return r, float(np.sqrt(max(g @ cov @ g, 0.0)))


# ============================================================================ result
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
                "ratio_to_water": self.ratios_to_water,
                "ratio_to_water_sd": self.ratios_to_water_sd,
                "conc_molar_mm": self.conc_molar_mm,
                "conc_molar_sd_mm": self.conc_molar_sd_mm,
                "conc_molal_mmol_kg": self.conc_molal_mmol_kg,
                "conc_molal_sd_mmol_kg": self.conc_molal_sd_mmol_kg,
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
    amplitudes: Mapping[str, float] | Sequence[float] | np.ndarray,
    *,
    names: Sequence[str] | None = None,
    covariance: Any = None,
    amplitude_sd: Sequence[float] | np.ndarray | None = None,
    protons: Mapping[str, float] | None = None,
    proton_normalised: bool = False,
    water_amplitude: float | None = None,
    water_amplitude_sd: float | None = None,
    water_proton_normalised: bool = False,
    volume_fractions: Mapping[str, float] | None = None,
    te_s: float | None = None,
    tr_s: float | None = None,
    water_te_s: float | None = None,
    water_tr_s: float | None = None,
    field_t: float | None = None,
    relaxation: RelaxationTimes | None = None,
    relaxation_overrides: Mapping[str, Any] | str | os.PathLike[str] | None = None,
    water_content: Mapping[str, float] | None = None,
    water_protons: float = WATER_PROTONS,
    water_mm: float = WATER_MOLAR_MM,
    combinations: Mapping[str, Sequence[str]] = DEFAULT_COMBINATIONS,
    reference: str = "tCr",
    fraction_atol: float = 0.01,
) -> Quantification:
    """Ratios to tCr and, with a water reference, tissue-corrected concentrations.

    Parameters
    ----------
    amplitudes : mapping of str to float, or (n,) array_like with ``names``
        Fitted amplitudes of the basis members (macromolecules may be included; they get ratios
        but their concentrations use the default relaxation and their proton weights).
    names : sequence of str, optional
        Member names when ``amplitudes`` is an array (default: the mapping's keys in order).
    covariance : (n, n) array_like, optional
        Covariance of the amplitudes in the order of ``names`` (e.g. Cramér-Rao covariance);
        propagated to every sum, ratio and concentration.
    amplitude_sd : (n,) array_like, optional
        SDs, used as an uncorrelated covariance when ``covariance`` is not given.
    protons : mapping of str to float, optional
        Protons per molecule of each member (e.g. ``dict(zip(basis.names, basis.protons))``);
        required unless ``proton_normalised``.
    proton_normalised : bool
        Whether the amplitudes are per proton (per molecule; see :func:`concentration_factors`).
    water_amplitude : float, optional
        Water signal area on the same scale; ``None`` gives ratios only.
    water_amplitude_sd : float, optional
        Its SD (independent of the metabolite amplitudes); default 0.
    water_proton_normalised : bool
        Whether ``water_amplitude`` is per proton.
    volume_fractions : mapping, optional
        GM, WM, CSF volume fractions; required with a water reference. (Without segmentation a
        caller may pass pure-tissue fractions and say so.)
    te_s, tr_s : float, optional
        Metabolite TE and TR, s; required with a water reference.
    water_te_s, water_tr_s : float, optional
        Water reference TE and TR (default: ``te_s``, ``tr_s``).
    field_t : float, optional
        Field, T, to pick relaxation times when ``relaxation`` is not given.
    relaxation : RelaxationTimes, optional
        Relaxation times (default ``load_relaxation_times(field_t, overrides=...)``).
    relaxation_overrides : mapping or path, optional
        Overrides passed to :func:`load_relaxation_times`.
    water_content, water_protons, water_mm, fraction_atol
        See :func:`concentration_factors`.
    combinations : mapping
        Sums to report (default :data:`DEFAULT_COMBINATIONS`).
    reference : str
        Member or sum used as the ratio denominator (default ``"tCr"``).

    Returns
    -------
    Quantification

    Examples
    --------
    >>> q = quantify({"NAA": 12.0, "Cr": 6.0, "PCr": 2.0}, proton_normalised=True)
    >>> q.statement
    'no water reference: ratios to tCr only'
    >>> round(q.ratios["NAA"], 3)
    1.5
    >>> q = quantify({"NAA": 12.0, "Cr": 6.0, "PCr": 2.0}, proton_normalised=True,
    ...              water_amplitude=3.0e4, volume_fractions={"gm": 0.6, "wm": 0.3, "csf": 0.1},
    ...              te_s=0.030, tr_s=2.0, field_t=3.0)
    >>> round(q.conc_molar_mm["tNAA"], 2), round(q.conc_molal_mmol_kg["tNAA"], 2)
    (31.9, 43.3)
    """
    if isinstance(amplitudes, Mapping):
        member_names = [str(k) for k in amplitudes] if names is None else [str(n) for n in names]
        try:
            values = np.array([float(amplitudes[n]) for n in member_names], dtype=float)
        except KeyError as exc:
            raise InvalidInputError(f"no amplitude for {exc.args[0]!r}") from None
    else:
        if names is None:
            raise InvalidInputError("names are needed when amplitudes are given as an array")
        member_names = [str(n) for n in names]
        values = np.asarray(amplitudes, dtype=float).reshape(-1)
        if values.size != len(member_names):
            raise InvalidInputError(f"{values.size} amplitudes but {len(member_names)} names")
    if len(set(member_names)) != len(member_names):
        raise InvalidInputError(f"repeated member names {member_names}")
    if not np.all(np.isfinite(values)):
        raise InvalidInputError("amplitudes must be finite numbers")
    n = values.size
    cov = _as_cov(covariance, amplitude_sd, n)
    notes: list[str] = []
    if cov is None:
        notes.append("no covariance given: SDs are NaN")
    clash = [c for c in combinations if c in member_names]
    combos = {k: v for k, v in combinations.items() if k not in member_names}
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

    # ---- ratios to the reference (molecule ratios)
    ratios: dict[str, float] = {}
    ratio_sd: dict[str, float] = {}
    if reference in out_names:
        den = selector(reference, per_molecule)
        for name in out_names:
            ratios[name], ratio_sd[name] = ratio_linear(
                selector(name, per_molecule), den, values, cov
            )
        if not ratios[reference] == ratios[reference]:  # NaN: zero denominator
            notes.append(f"{reference} amplitude is zero: ratios undefined")
    else:
        notes.append(f"reference {reference!r} not fitted: no ratios")

    formula = {"relaxation": _RELAX_FORMULA, "symbols": _SYMBOLS}
    if water_amplitude is None:
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
            notes=tuple(notes),
        )

    # ---- water referencing
    if volume_fractions is None or te_s is None or tr_s is None:
        raise InvalidInputError(
            "water-referenced concentrations need volume_fractions (gm, wm, csf), te_s and tr_s"
        )
    if relaxation is None:
        if field_t is None:
            raise InvalidInputError(
                "field_t (or relaxation times) is needed with a water reference"
            )
        relaxation = load_relaxation_times(field_t, overrides=relaxation_overrides)
    elif relaxation_overrides is not None:
        raise InvalidInputError("give either relaxation or relaxation_overrides, not both")
    metab_relax = {m: relaxation.metabolite(m) for m in member_names}
    defaulted = [m for m, r in metab_relax.items() if "default (no entry" in r.note]
    if defaulted:
        notes.append(f"default relaxation times used for {defaulted}")
    k_molar, k_molal, water_consts = concentration_factors(
        member_names,
        water_amplitude=water_amplitude,
        volume_fractions=volume_fractions,
        te_s=te_s,
        tr_s=tr_s,
        metabolite_relaxation=metab_relax,
        water_relaxation=relaxation.water,
        protons=protons,
        proton_normalised=proton_normalised,
        water_proton_normalised=water_proton_normalised,
        water_te_s=water_te_s,
        water_tr_s=water_tr_s,
        water_protons=water_protons,
        water_content=water_content,
        water_mm=water_mm,
        fraction_atol=fraction_atol,
    )
    s_w = water_consts["water_signal"]
    w_sd = 0.0 if water_amplitude_sd is None else float(water_amplitude_sd)
    if w_sd < 0 or not math.isfinite(w_sd):
        raise InvalidInputError(f"water amplitude SD must be >= 0, got {water_amplitude_sd!r}")
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
    )


# ============================================================================ helpers
def _ratio_formula(reference: str) -> str:
    return (
        f"ratio_M = u_M / u_{reference}; u = A / N (signal areas) or u = A (per-proton "
        "amplitudes); no relaxation correction"
    )


def _water_content(water_content: Mapping[str, float] | None) -> dict[str, float]:
    if water_content is None:
        return dict(TISSUE_WATER_CONTENT)
    lowered = {str(k).lower(): v for k, v in dict(water_content).items()}
    if set(lowered) != set(TISSUES):
        raise InvalidInputError(f"water content needs exactly gm, wm, csf, got {sorted(lowered)}")
    out = {}
    for t in TISSUES:
        v = float(lowered[t])
        if not math.isfinite(v) or not 0 < v <= 1.0:
            raise InvalidInputError(f"water content of {t} must be in (0, 1], got {v}")
        out[t] = v
    return out


def _positive(
    value: Any, what: str, path: Path | str | None, *, allow_inf: bool = False
) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{what} is not a number: {value!r}", path) from None
    if math.isnan(number) or number <= 0 or (math.isinf(number) and not allow_inf):
        raise InvalidInputError(f"{what} must be positive, got {value!r}", path)
    return number


def _json_number(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


# ============================================================================ water signal
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
