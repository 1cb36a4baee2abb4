"""Relaxation times (bundled table ``specproc/data/relaxation.toml`` and user overrides) and the
relaxation attenuation ``R = exp(-TE/T2) * (1 - exp(-TR/T1))``.

Each time of the table carries a provenance record (``t1_provenance``, ``t2_provenance``; see
:mod:`specproc.provenance`); :class:`Relaxation` keeps the records of the values chosen at the
scan's field: an interpolated or field-scaled value is ``derived`` from its records (or stays
``from memory`` when one of them is), an overridden one is ``override``.
"""

from __future__ import annotations

import copy
import math
import os
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError
from specproc.provenance import (
    Provenance,
    override_provenance,
    parse_provenance,
    read_references,
)
from specproc.quantify._common import TISSUES, _json_number, _positive

__all__ = [
    "RELAXATION_FILE",
    "Relaxation",
    "RelaxationTimes",
    "load_relaxation_times",
    "relaxation_factor",
]

#: The bundled relaxation table.
RELAXATION_FILE: Path = Path(__file__).resolve().parents[1] / "data" / "relaxation.toml"

#: A scanner field within this distance of a tabulated field uses that field's values, T.
_FIELD_SNAP_T = 0.15

_RELAX_FORMULA = "R = exp(-TE/T2) * (1 - exp(-TR/T1))"


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
    t1_provenance, t2_provenance : Provenance or None
        Where each time comes from (None: no record, e.g. built in code).
    """

    t1_s: float
    t2_s: float
    source: str = ""
    note: str = ""
    t1_provenance: Provenance | None = None
    t2_provenance: Provenance | None = None

    def factor(self, *, te_s: float, tr_s: float) -> float:
        """Attenuation ``exp(-TE/T2)·(1 - exp(-TR/T1))`` (see :func:`relaxation_factor`)."""
        return relaxation_factor(te_s=te_s, tr_s=tr_s, t1_s=self.t1_s, t2_s=self.t2_s)

    def to_dict(self) -> dict[str, Any]:
        """Plain dict (JSON-serialisable; infinite times as ``None``)."""
        out: dict[str, Any] = {
            "t1_s": _json_number(self.t1_s),
            "t2_s": _json_number(self.t2_s),
            "source": self.source,
            "note": self.note,
        }
        for key, prov in (("t1_provenance", self.t1_provenance),
                          ("t2_provenance", self.t2_provenance)):
            if prov is not None:
                out[key] = prov.to_dict()
        return out


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
            return replace(rel, note=note)
        d = self.default
        note = f"{d.note}; default (no entry for {name})".strip("; ")
        return replace(d, note=note)

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


_WEAK = ("from memory", "common practice", "override")


def _combined(records: Sequence[Provenance | None], how: str) -> Provenance:
    """Record of a value computed from tabulated values (interpolation, field scaling)."""
    known = [r for r in records if r is not None]
    weak = [r.status for r in known if r.status in _WEAK] or (
        ["from memory"] if len(known) < len(records) else []
    )
    status = weak[0] if weak else "derived"
    sources = "; ".join(dict.fromkeys(f"{r.ref or r.at} ({r.status})" for r in known))
    return Provenance(status=status, ref=known[0].ref if known else "",
                      citation=known[0].citation if known else "",
                      at=f"{how} from: {sources}" if sources else how)


def _note_on(prov: Provenance | None, note: str) -> Provenance | None:
    if prov is None:
        return None
    return replace(prov, note=f"{prov.note}; {note}" if prov.note else note)


def _pick_quantity(
    entries: Sequence[Mapping[str, Any]], quantity: str, field_t: float
) -> tuple[float, str, str, float | None, Provenance | None] | None:
    """Value of ``quantity`` at ``field_t`` from per-field entries.

    Returns (value, source, note, nearest field when outside the tabulated range or None,
    provenance record of the value).
    """
    prov_key = quantity.replace("_s", "_provenance")
    points: dict[float, tuple[float, str, Provenance | None]] = {}
    for e in entries:
        if quantity in e:
            points[float(e["field_t"])] = (
                float(e[quantity]), str(e.get("source", "")), e.get(prov_key))
    if not points:
        return None
    fields = sorted(points)
    nearest = min(fields, key=lambda b: abs(b - field_t))
    if abs(nearest - field_t) <= _FIELD_SNAP_T:
        value, source, prov = points[nearest]
        return value, source, f"{quantity} tabulated at {nearest:g} T", None, prov
    if field_t < fields[0] or field_t > fields[-1]:
        value, source, prov = points[nearest]
        where = (
            f"only tabulated at {nearest:g} T" if len(fields) == 1
            else f"outside the tabulated range {fields[0]:g}-{fields[-1]:g} T"
        )
        note = f"{quantity} from the nearest tabulated field ({where})"
        return value, source, note, nearest, _note_on(prov, f"used at {field_t:g} T")
    lo = max(b for b in fields if b < field_t)
    hi = min(b for b in fields if b > field_t)
    w = (field_t - lo) / (hi - lo)
    value = (1 - w) * points[lo][0] + w * points[hi][0]
    source = "; ".join(dict.fromkeys([points[lo][1], points[hi][1]]))
    how = f"interpolated linearly between {lo:g} T and {hi:g} T"
    prov = _combined([points[lo][2], points[hi][2]], how)
    return value, source, f"{quantity} {how}", None, prov


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
    records: dict[str, Provenance | None] = {}
    sources: list[str] = []
    notes: list[str] = []
    for quantity in ("t1_s", "t2_s"):
        picked = _pick_quantity(entries, quantity, field_t)
        if picked is None:
            own = None if fallback is None else _pick_quantity(fallback, quantity, field_t)
            if own is None:
                raise InvalidInputError(f"{where}: no {quantity} at any field strength", path)
            values[quantity] = own[0]
            records[quantity] = own[4]
            sources.append(own[1])
            notes.append(f"{quantity} from the default ({own[2]})")
            continue
        value, source, note, nearest, prov = picked
        if nearest is not None and fallback is not None:
            d_here = _pick_quantity(fallback, quantity, field_t)
            d_near = _pick_quantity(fallback, quantity, nearest)
            if d_here is not None and d_near is not None and d_near[0] > 0:
                value = value * d_here[0] / d_near[0]
                note = (
                    f"{note}; carried from {nearest:g} T to {field_t:g} T with the field "
                    "dependence of the default (assumption)"
                )
                prov = _combined(
                    [prov, d_here[4], d_near[4]],
                    f"carried from {nearest:g} T to {field_t:g} T with the field dependence "
                    "of the default",
                )
        elif nearest is not None:
            note = f"{note}; value of {nearest:g} T used unchanged"
        values[quantity] = value
        records[quantity] = prov
        sources.append(source)
        notes.append(note)
    if not any(sources):
        sources = [r.citation or r.at for r in records.values() if r is not None]
    source = "; ".join(dict.fromkeys(s for s in sources if s))
    return Relaxation(values["t1_s"], values["t2_s"], source, "; ".join(notes),
                      records["t1_s"], records["t2_s"])


_ENTRY_KEYS = {"field_t", "t1_s", "t2_s", "source", "t1_provenance", "t2_provenance"}


def _check_entries(
    raw: Any, where: str, path: Path, references: Mapping[str, str]
) -> list[dict[str, Any]]:
    """Checked copies of per-field entries, with their provenance records parsed.

    A time without a record (a table of an older layout) gets a ``from memory`` record naming
    the entry's ``source``.
    """
    if not isinstance(raw, list) or not raw:
        raise InvalidInputError(f"{where} must be a non-empty list of tables", path)
    out = []
    for i, e in enumerate(raw):
        if not isinstance(e, dict):
            raise InvalidInputError(f"{where}[{i}] must be a table", path)
        unknown = set(e) - _ENTRY_KEYS
        if unknown:
            raise InvalidInputError(f"{where}[{i}]: unknown keys {sorted(unknown)}", path)
        if "field_t" not in e:
            raise InvalidInputError(f"{where}[{i}]: missing 'field_t'", path)
        for key in ("field_t", "t1_s", "t2_s"):
            if key in e:
                _positive(e[key], f"{where}[{i}].{key}", path)
        entry = dict(e)
        for quantity in ("t1_s", "t2_s"):
            key = quantity.replace("_s", "_provenance")
            label = f"{where}[{i}] {quantity} at {float(e['field_t']):g} T"
            if key in e:
                if quantity not in e:
                    raise InvalidInputError(f"{label}: {key} without {quantity}", path)
                entry[key] = parse_provenance(e[key], references, label, path)
            elif quantity in e:
                entry[key] = Provenance(
                    status="from memory", at=str(e.get("source", "")) or "no record"
                )
        out.append(entry)
    return out


#: The parsed bundled table (package data: it does not change while the program runs; every
#: fit reads it for the width prior, so it is parsed once per process).
_BUNDLED: dict[str, Any] = {}


def _read_toml(path: Path) -> dict[str, Any]:
    if path == RELAXATION_FILE:
        if not _BUNDLED:
            _BUNDLED.update(_parse_toml(path))
        return copy.deepcopy(_BUNDLED)
    return _parse_toml(path)


def _parse_toml(path: Path) -> dict[str, Any]:
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
    p1 = override_provenance(source) if "t1_s" in raw else base.t1_provenance
    p2 = override_provenance(source) if "t2_s" in raw else base.t2_provenance
    if len(changed) == 2:
        return Relaxation(t1, t2, source, "user override", p1, p2)
    return Relaxation(
        t1, t2, f"{base.source}; {changed[0]}: {source}" if changed else base.source,
        f"{base.note}; {', '.join(changed)} user override" if changed else base.note, p1, p2,
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
    unknown = set(raw) - {"schema", "references", "water", "metabolite", "default", "aliases"}
    if unknown:
        raise InvalidInputError(f"unknown top-level keys {sorted(unknown)}", table_path)
    refs = read_references(raw, table_path)
    default_entries = _check_entries(raw.get("default"), "default", table_path, refs)
    default = _resolve_entry(default_entries, field_t, None, "default", table_path)
    water_raw = raw.get("water")
    if not isinstance(water_raw, dict) or set(water_raw) != set(TISSUES):
        raise InvalidInputError("[water] must have exactly the tissues gm, wm, csf", table_path)
    water = {
        t: _resolve_entry(
            _check_entries(water_raw[t], f"water.{t}", table_path, refs), field_t, None,
            f"water.{t}", table_path,
        )
        for t in TISSUES
    }
    metab_raw = raw.get("metabolite", {})
    if not isinstance(metab_raw, dict):
        raise InvalidInputError("[metabolite] must be a table of metabolites", table_path)
    metabolites = {
        name: _resolve_entry(
            _check_entries(entries, f"metabolite.{name}", table_path, refs), field_t,
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
