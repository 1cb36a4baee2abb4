"""Metabolite spin-system definitions: the data model and the reader of the definition files.

Every metabolite is described in one TOML file under ``specproc/data/basis/`` that people can
read and check against the literature. The layout of such a file::

    name = "Lac"                         # short name used in tables and the fit
    full_name = "lactate"
    kind = "metabolite"                  # "metabolite" | "water"

    [references]                         # key -> full citation, used by the records below
    govindaraju2000 = "Govindaraju V, Young K, Maudsley AA. NMR Biomed 2000;13:129-153"

    [[group]]                            # one group of magnetically equivalent protons
    label = "2CH"
    shift_ppm = 4.0974
    protons = 1
    provenance = { status = "from memory", ref = "govindaraju2000", at = "table 2, lactate 2CH" }

    [[group]]
    label = "3CH3"
    shift_ppm = 1.3142
    protons = 3
    provenance = { status = "checked", ref = "...", at = "..." }

    [[coupling]]
    groups = ["2CH", "3CH3"]
    j_hz = 6.933
    provenance = { status = "...", ref = "...", at = "..." }

Every group (its shift) and every coupling (its J) must carry a ``provenance`` record: status,
source and where in it (see :mod:`specproc.provenance`); a group with a ``fraction`` also needs
``fraction_provenance``. The optional top-level ``source`` is a free-text summary for people.

A metabolite with several non-interacting parts (e.g. the singlet and the coupled part of
creatine, or the two anomers of glucose with their fractions) may give ``[[group]]`` a
``fraction`` (default 1): the signal of that group is scaled by it, which is how the 36:64
α:β glucose mixture is written. Couplings join groups into spin systems; groups joined by no
coupling are simulated separately (analytically when they are singlets).

Macromolecule and lipid components are Gaussian lines without couplings; they live in
``specproc/data/basis/macromolecules.toml`` as a list of ``[[component]]`` tables with
``name``, ``shift_ppm``, ``fwhm_ppm``, ``protons`` (relative weight) and ``source``; a
component may have several ``[[component.peak]]`` entries when it is one moiety with several lines.
"""

from __future__ import annotations

import hashlib
import math
import os
import tomllib
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from specproc._paths import basis_dir
from specproc.constants import larmor_mhz
from specproc.errors import InvalidInputError
from specproc.provenance import (
    Provenance,
    ProvenanceItem,
    parse_provenance,
    read_references,
)

__all__ = [
    "Coupling",
    "GaussianPeak",
    "Macromolecule",
    "Metabolite",
    "SpinGroup",
    "definitions_hash",
    "list_metabolites",
    "load_macromolecules",
    "load_metabolite",
    "load_metabolites",
    "provenance_items",
]

MACROMOLECULE_FILE = "macromolecules.toml"


@dataclass(frozen=True)
class SpinGroup:
    """A group of magnetically equivalent protons.

    Attributes
    ----------
    label : str
        Position label as in the literature table, e.g. ``"2CH"``, ``"3CH2a"``.
    shift_ppm : float
        Chemical shift, ppm (DSS = 0).
    protons : int
        Number of equivalent protons in the group.
    fraction : float
        Scale of this group's signal (e.g. anomer fraction), 1 by default.
    source : str
        Literature source of the shift, one line for people (from ``provenance``).
    provenance : Provenance or None
        Where the shift comes from (always set for groups read from a file).
    fraction_provenance : Provenance or None
        Where ``fraction`` comes from (set when the file gives a fraction).
    """

    label: str
    shift_ppm: float
    protons: int
    fraction: float = 1.0
    source: str = ""
    provenance: Provenance | None = None
    fraction_provenance: Provenance | None = None


@dataclass(frozen=True)
class Coupling:
    """A scalar coupling J (Hz) between two groups (every proton of one with every of the other)."""

    a: str
    b: str
    j_hz: float
    source: str = ""
    provenance: Provenance | None = None


@dataclass(frozen=True)
class Metabolite:
    """A metabolite: spin groups, couplings, and where the values come from.

    ``in_default_basis`` (file key, default true) says whether the metabolite belongs to the
    basis simulated when no metabolites are named (free choline, for example, is defined but
    left out: in brain it is far below its phosphorylated forms and would only share their
    3.2 ppm singlet in the fit).
    """

    name: str
    full_name: str
    groups: tuple[SpinGroup, ...]
    couplings: tuple[Coupling, ...] = ()
    kind: str = "metabolite"
    source: str = ""
    path: str | None = None
    in_default_basis: bool = True

    @property
    def protons(self) -> float:
        """Total number of (non-exchangeable) protons, weighted by group fractions."""
        return float(sum(g.protons * g.fraction for g in self.groups))

    def group(self, label: str) -> SpinGroup:
        """The group with ``label``."""
        for g in self.groups:
            if g.label == label:
                return g
        raise KeyError(label)

    def spin_systems(self) -> list[tuple[tuple[SpinGroup, ...], tuple[Coupling, ...]]]:
        """Split into independent spin systems: groups connected by non-zero couplings."""
        labels = [g.label for g in self.groups]
        parent = {label: label for label in labels}

        def find(x: str) -> str:
            while parent[x] != x:
                parent[x] = parent[parent[x]]
                x = parent[x]
            return x

        for c in self.couplings:
            if c.j_hz != 0.0:
                parent[find(c.a)] = find(c.b)
        systems: dict[str, list[SpinGroup]] = {}
        for g in self.groups:
            systems.setdefault(find(g.label), []).append(g)
        out = []
        for members in systems.values():
            names = {g.label for g in members}
            couplings = tuple(c for c in self.couplings if c.a in names and c.b in names)
            out.append((tuple(members), couplings))
        return out


#: Weight of a tentative peak in the basis, relative to its ``protons``: the expectation of a
#: size known only to lie between none and the full value (a uniform distribution; JCGM
#: 100:2008 (GUM) 4.3.7). The model-uncertainty refits try it absent and at full size.
TENTATIVE_WEIGHT = 0.5


@dataclass(frozen=True)
class GaussianPeak:
    """One Gaussian line of a macromolecule/lipid component.

    ``tentative`` marks a peak whose presence is not established (e.g. "to be confirmed" in
    the consensus table): the basis holds it at :data:`TENTATIVE_WEIGHT` of ``protons``
    (:attr:`basis_protons`).
    """

    shift_ppm: float
    fwhm_ppm: float
    protons: float
    provenance: Provenance | None = None
    tentative: bool = False

    @property
    def basis_protons(self) -> float:
        """Weight of the peak in the basis: ``protons``, times :data:`TENTATIVE_WEIGHT` for a
        tentative peak."""
        return self.protons * (TENTATIVE_WEIGHT if self.tentative else 1.0)


@dataclass(frozen=True)
class Macromolecule:
    """A macromolecule or lipid component: one or more broad Gaussian lines.

    ``provenance`` covers the line positions (a peak may carry its own), ``shape_provenance``
    the widths and weights.
    """

    name: str
    peaks: tuple[GaussianPeak, ...]
    source: str = ""
    kind: str = "macromolecule"
    provenance: Provenance | None = None
    shape_provenance: Provenance | None = None
    width_field_t: float | None = None
    width_field_provenance: Provenance | None = None

    @property
    def protons(self) -> float:
        """Sum of the relative proton weights of the peaks in the basis
        (:attr:`GaussianPeak.basis_protons`)."""
        return float(sum(p.basis_protons for p in self.peaks))

    def fwhm_hz(self, spectrometer_mhz: float) -> tuple[float, ...]:
        """Full width at half maximum of each peak at a spectrometer frequency, Hz.

        ``fwhm_ppm`` is the width at ``width_field_t``; at higher fields the width in Hz of
        that field is kept (the part of a macromolecule line width set by its short T2 and its
        unresolved J multiplets does not grow with the field, so a width fixed in ppm would
        outgrow the line, and the fit can only broaden a basis line), at lower fields the
        width in ppm. Without ``width_field_t`` the width is ``fwhm_ppm`` at every field.
        """
        mhz = float(spectrometer_mhz)
        if self.width_field_t is not None:
            mhz = min(mhz, larmor_mhz(self.width_field_t))
        return tuple(p.fwhm_ppm * mhz for p in self.peaks)


# ---------------------------------------------------------------------------- reading
KINDS = ("metabolite", "water")


def _require(
    table: dict[str, Any], key: str, kind: type | tuple[type, ...], path: Path, where: str = ""
) -> Any:
    prefix = f"{where}: " if where else ""
    if key not in table:
        raise InvalidInputError(f"{prefix}missing key {key!r}", path)
    value = table[key]
    if not isinstance(value, kind) or isinstance(value, bool):
        raise InvalidInputError(
            f"{prefix}key {key!r} has the wrong type ({type(value).__name__})", path
        )
    return value


def _number(table: dict[str, Any], key: str, path: Path, where: str) -> float:
    value = float(_require(table, key, (int, float), path, where))
    if not math.isfinite(value):
        raise InvalidInputError(f"{where}: key {key!r} must be a finite number", path)
    return value


def _tables(table: dict[str, Any], key: str, path: Path) -> list[dict[str, Any]]:
    """The array of tables ``[[key]]`` (empty when absent)."""
    raw = table.get(key, [])
    if not isinstance(raw, list) or not all(isinstance(r, dict) for r in raw):
        raise InvalidInputError(f"{key!r} must be an array of tables ([[{key}]])", path)
    return raw


def _read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InvalidInputError(f"cannot read: {exc}", path) from None


def _read_toml(path: Path, text: str | None = None) -> dict[str, Any]:
    try:
        return tomllib.loads(_read_text(path) if text is None else text)
    except tomllib.TOMLDecodeError as exc:
        raise InvalidInputError(f"not valid TOML: {exc}", path) from None


#: Parsed definitions by (file, its text): a scan reads the same files for its basis and for
#: the provenance of its results; checking and parsing them costs tens of ms each time. The
#: values are frozen dataclasses, safe to share.
_PARSED: dict[tuple[str, str], Metabolite] = {}


def load_metabolite(path: str | os.PathLike[str]) -> Metabolite:
    """Read one metabolite definition file (see the module docstring for the layout).

    Raises
    ------
    InvalidInputError
        Naming the file, when it cannot be read, is not TOML, misses a key, has a value of the
        wrong type, a non-positive proton count, a fraction outside (0, 1], an unknown
        ``kind``, repeated group labels, a coupling that does not name two different
        existing groups or repeats a pair, coupled groups with different fractions, or a
        value without a valid provenance record (unknown status or reference, missing
        source or place; :func:`specproc.provenance.parse_provenance`).
    """
    path = Path(path)
    text = _read_text(path)
    cached = _PARSED.get((str(path), text))
    if cached is not None:
        return cached
    table = _read_toml(path, text)
    refs = read_references(table, path)
    name = _require(table, "name", str, path)
    if not name.strip():
        raise InvalidInputError("key 'name' is empty", path)
    kind = str(table.get("kind", "metabolite"))
    if kind not in KINDS:
        raise InvalidInputError(f"kind {kind!r} is not one of {', '.join(KINDS)}", path)
    in_default = table.get("in_default_basis", True)
    if not isinstance(in_default, bool):
        raise InvalidInputError("key 'in_default_basis' must be true or false", path)
    groups = []
    for i, raw in enumerate(_tables(table, "group", path), start=1):
        where = f"group {i}"
        protons = _require(raw, "protons", int, path, where)
        if protons < 1:
            raise InvalidInputError(f"{where}: 'protons' must be at least 1", path)
        fraction = _number(raw, "fraction", path, where) if "fraction" in raw else 1.0
        if not 0.0 < fraction <= 1.0:
            raise InvalidInputError(f"{where}: 'fraction' must be in (0, 1]", path)
        label = _require(raw, "label", str, path, where)
        where = f"{where} ({label})"
        prov = parse_provenance(raw.get("provenance"), refs, where, path)
        fraction_prov = None
        if "fraction" in raw:
            fraction_prov = parse_provenance(
                raw.get("fraction_provenance"), refs, f"{where} fraction", path
            )
        groups.append(
            SpinGroup(
                label=label,
                shift_ppm=_number(raw, "shift_ppm", path, where),
                protons=int(protons),
                fraction=fraction,
                source=prov.text(),
                provenance=prov,
                fraction_provenance=fraction_prov,
            )
        )
    if not groups:
        raise InvalidInputError("no [[group]] entries", path)
    labels = [g.label for g in groups]
    if len(set(labels)) != len(labels):
        raise InvalidInputError(f"repeated group labels in {labels}", path)
    couplings = []
    pairs: set[frozenset[str]] = set()
    for i, raw in enumerate(_tables(table, "coupling", path), start=1):
        where = f"coupling {i}"
        pair = _require(raw, "groups", list, path, where)
        if len(pair) != 2 or any(p not in labels for p in pair) or pair[0] == pair[1]:
            raise InvalidInputError(
                f"{where}: {pair} must name two different groups of {labels}", path
            )
        key = frozenset(pair)
        if key in pairs:
            raise InvalidInputError(f"{where}: the pair {pair} is coupled twice", path)
        pairs.add(key)
        prov = parse_provenance(raw.get("provenance"), refs, f"{where} {pair}", path)
        couplings.append(
            Coupling(
                a=pair[0],
                b=pair[1],
                j_hz=_number(raw, "j_hz", path, where),
                source=prov.text(),
                provenance=prov,
            )
        )
    met = Metabolite(
        name=name,
        full_name=str(table.get("full_name", name)),
        groups=tuple(groups),
        couplings=tuple(couplings),
        kind=kind,
        source=str(table.get("source", "")),
        path=str(path),
        in_default_basis=in_default,
    )
    for members, _ in met.spin_systems():
        if len({g.fraction for g in members}) > 1:
            labels_ = [g.label for g in members]
            raise InvalidInputError(
                f"coupled groups {labels_} must have the same fraction (one molecule)", path
            )
    _PARSED[(str(path), text)] = met
    return met


def _definition_files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.glob("*.toml") if p.name != MACROMOLECULE_FILE)


def list_metabolites(folder: str | os.PathLike[str] | None = None) -> list[str]:
    """Names of all metabolites defined in ``folder`` (default: the bundled definitions)."""
    return [m.name for m in load_metabolites(folder=folder)]


def load_metabolites(
    names: Iterable[str] | None = None, *, folder: str | os.PathLike[str] | None = None
) -> list[Metabolite]:
    """Read the named metabolites (all, when ``names`` is None) from ``folder``.

    Names are matched case-insensitively against each file's ``name``.

    Raises
    ------
    InvalidInputError
        For an unknown name (the message lists the known ones) or a malformed file.
    """
    folder = Path(folder) if folder is not None else basis_dir()
    found: dict[str, Metabolite] = {}
    for path in _definition_files(folder):
        met = load_metabolite(path)
        key = met.name.lower()
        if key in found:
            raise InvalidInputError(
                f"metabolite name {met.name!r} is also defined in {found[key].path}", path
            )
        found[key] = met
    if names is None:
        return [found[k] for k in sorted(found)]
    out = []
    for name in names:
        key = str(name).strip().lower()
        if key not in found:
            known = ", ".join(sorted(m.name for m in found.values()))
            raise InvalidInputError(f"unknown metabolite {name!r}; known: {known}")
        out.append(found[key])
    return out


def _flag(table: Any, key: str, path: Path, where: str) -> bool:
    value = table.get(key, False)
    if not isinstance(value, bool):
        raise InvalidInputError(f"{where}: {key!r} must be true or false", path)
    return value


def load_macromolecules(folder: str | os.PathLike[str] | None = None) -> list[Macromolecule]:
    """Read the macromolecule/lipid components from ``macromolecules.toml``.

    Raises
    ------
    InvalidInputError
        Naming the file, when it is missing or malformed, a name repeats, a line has a
        non-positive width or weight, or a component lacks a valid ``provenance`` or
        ``shape_provenance`` record.
    """
    folder = Path(folder) if folder is not None else basis_dir()
    path = folder / MACROMOLECULE_FILE
    table = _read_toml(path)
    refs = read_references(table, path)
    width_field_t = None
    width_prov = None
    if "width_field_t" in table:
        width_field_t = _number(table, "width_field_t", path, "top level")
        if not width_field_t > 0:
            raise InvalidInputError("top level: 'width_field_t' must be > 0", path)
        width_prov = parse_provenance(table.get("width_field_provenance"), refs,
                                      "width_field_t", path)
    out = []
    names: set[str] = set()
    for i, raw in enumerate(_tables(table, "component", path), start=1):
        name = _require(raw, "name", str, path, f"component {i}")
        if name in names:
            raise InvalidInputError(f"component name {name!r} is repeated", path)
        names.add(name)
        prov = parse_provenance(raw.get("provenance"), refs, f"component {name!r}", path)
        shape = parse_provenance(
            raw.get("shape_provenance"), refs, f"component {name!r} shape", path
        )
        peaks_raw = _tables(raw, "peak", path) or [raw]
        peaks = []
        for j, p in enumerate(peaks_raw, start=1):
            where = f"component {name!r} peak {j}"
            own = p.get("provenance") if p is not raw else None
            peak = GaussianPeak(
                shift_ppm=_number(p, "shift_ppm", path, where),
                fwhm_ppm=_number(p, "fwhm_ppm", path, where),
                protons=_number(p, "protons", path, where),
                provenance=prov if own is None else parse_provenance(own, refs, where, path),
                tentative=_flag(p, "tentative", path, where),
            )
            if peak.fwhm_ppm <= 0 or peak.protons <= 0:
                raise InvalidInputError(f"{where}: 'fwhm_ppm' and 'protons' must be > 0", path)
            peaks.append(peak)
        out.append(
            Macromolecule(
                name=name, peaks=tuple(peaks), source=str(raw.get("source", prov.text())),
                provenance=prov, shape_provenance=shape, width_field_t=width_field_t,
                width_field_provenance=width_prov,
            )
        )
    return out


def provenance_items(
    metabolites: Iterable[Metabolite], macromolecules: Iterable[Macromolecule] = ()
) -> list[ProvenanceItem]:
    """One :class:`~specproc.provenance.ProvenanceItem` per shift, coupling, fraction and
    macromolecule position, width and weight of the given definitions (kind ``"spin"``).

    Values constructed in code without a record count as ``from memory``.
    """
    unknown = Provenance(status="from memory", at="no record (constructed in code)")
    out = []
    for met in metabolites:
        for g in met.groups:
            out.append(ProvenanceItem(
                "spin", f"{met.name} {g.label} shift_ppm", g.shift_ppm, g.provenance or unknown
            ))
            if g.fraction_provenance is not None:
                out.append(ProvenanceItem(
                    "spin", f"{met.name} {g.label} fraction", g.fraction, g.fraction_provenance
                ))
        for c in met.couplings:
            out.append(ProvenanceItem(
                "spin", f"{met.name} {c.a}-{c.b} j_hz", c.j_hz, c.provenance or unknown
            ))
    for mm in macromolecules:
        for k, p in enumerate(mm.peaks, start=1):
            out.append(ProvenanceItem(
                "spin", f"{mm.name} peak {k} shift_ppm", p.shift_ppm,
                p.provenance or mm.provenance or unknown,
            ))
            shape = mm.shape_provenance or unknown
            out.append(ProvenanceItem("spin", f"{mm.name} peak {k} fwhm_ppm", p.fwhm_ppm, shape))
            out.append(ProvenanceItem("spin", f"{mm.name} peak {k} protons", p.protons, shape))
        if mm.width_field_t is not None:
            out.append(ProvenanceItem("spin", f"{mm.name} width_field_t", mm.width_field_t,
                                      mm.width_field_provenance or unknown))
    return out


def definitions_hash(folder: str | os.PathLike[str] | None = None) -> str:
    """SHA-256 (hex) of the content of every definition file in ``folder``, in name order."""
    folder = Path(folder) if folder is not None else basis_dir()
    digest = hashlib.sha256()
    for path in sorted(folder.glob("*.toml")):
        digest.update(path.name.encode())
        digest.update(b"\0")
        digest.update(path.read_bytes())
        digest.update(b"\0")
    return digest.hexdigest()
