"""Where each physics value comes from: per-value provenance records and their summary.

Every chemical shift and coupling in ``specproc/data/basis/*.toml``, every relaxation time in
``specproc/data/relaxation.toml`` and every water constant carries a :class:`Provenance`: a
status, the source it was taken from (a key of the file's ``[references]`` table), and where in
that source (table, row, compound) or how it was derived. In the TOML files a record is an
inline table::

    provenance = { status = "checked", ref = "govindaraju2015", at = "table 1, glutamate 2CH" }

Statuses (:data:`STATUSES`):

``checked``
    read from the cited source (or a reproduction of it) under the conditions of the file;
``corroborated``
    recalled from the cited source and found to agree, within the tolerance stated in ``note``,
    with an independent source read under other conditions (``checked_against``);
``from memory``
    recalled from the cited source and not compared with it;
``derived``
    computed from other values (``at`` says how);
``common practice``
    a convention of the field, not a measurement;
``override``
    replaced by the user (configuration file or argument).

:func:`summarise` turns a list of records into the short block shown in ``fit.json`` and in
the report: how many values are checked, corroborated, from memory ..., and which were
overridden.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError

__all__ = [
    "STATUSES",
    "Provenance",
    "ProvenanceItem",
    "override_provenance",
    "parse_provenance",
    "physics_provenance",
    "provenance_rows",
    "read_references",
    "summarise",
]

#: Allowed values of :attr:`Provenance.status`, from best to weakest evidence.
STATUSES: tuple[str, ...] = (
    "checked", "corroborated", "derived", "from memory", "common practice", "override",
)

_KEYS = {"status", "ref", "at", "note", "checked_against"}


@dataclass(frozen=True)
class Provenance:
    """Where one value comes from.

    Attributes
    ----------
    status : str
        One of :data:`STATUSES`.
    ref : str
        Key of the source in the file's ``[references]`` table (empty for ``common practice``
        and ``override``).
    citation : str
        The full citation of ``ref``.
    at : str
        Where in the source (table, row, column), or how the value was derived.
    note : str
        Conditions, tolerances, disagreements between sources, the range of published values.
    checked_against : str
        For ``corroborated``: key of the independent source the value was compared with.
    """

    status: str
    ref: str = ""
    citation: str = ""
    at: str = ""
    note: str = ""
    checked_against: str = ""

    def text(self) -> str:
        """One line for people: ``"<citation>, <at> (<status>)"``."""
        where = ", ".join(s for s in (self.citation or self.ref, self.at) if s)
        return f"{where} ({self.status})" if where else self.status

    def to_dict(self) -> dict[str, str]:
        """Plain dict (JSON-serialisable); empty fields left out."""
        fields = {
            "status": self.status, "ref": self.ref, "citation": self.citation, "at": self.at,
            "note": self.note, "checked_against": self.checked_against,
        }
        return {k: v for k, v in fields.items() if v}


def read_references(table: Mapping[str, Any], path: Path | str | None) -> dict[str, str]:
    """The ``[references]`` table of a data file: key -> full citation.

    Raises
    ------
    InvalidInputError
        When ``references`` is not a table of strings.
    """
    raw = table.get("references", {})
    if not isinstance(raw, Mapping) or not all(
        isinstance(k, str) and isinstance(v, str) and v.strip() for k, v in raw.items()
    ):
        raise InvalidInputError("[references] must map keys to citations (strings)", path)
    return dict(raw)


def parse_provenance(
    raw: Any, references: Mapping[str, str], where: str, path: Path | str | None
) -> Provenance:
    """Check and resolve one provenance record of a data file.

    Parameters
    ----------
    raw : mapping
        The inline table (keys ``status``, ``ref``, ``at``, optional ``note`` and
        ``checked_against``).
    references : mapping
        The file's ``[references]`` (see :func:`read_references`).
    where : str
        Position in the file for the error message (e.g. ``"group 2 (2CH)"``).
    path : path or str, optional
        The file, for the error message.

    Raises
    ------
    InvalidInputError
        Missing record, unknown key or status, a ``ref`` not in ``[references]``, a
        ``checked``/``corroborated``/``from memory`` record without ``ref`` or ``at``, a
        ``corroborated`` record without ``checked_against`` and ``note``.
    """
    if raw is None:
        raise InvalidInputError(
            f"{where}: missing 'provenance' (status, ref and at of the value)", path
        )
    if not isinstance(raw, Mapping):
        raise InvalidInputError(f"{where}: provenance must be a table", path)
    unknown = sorted(set(raw) - _KEYS)
    if unknown:
        raise InvalidInputError(f"{where}: unknown provenance keys {unknown}", path)
    if not all(isinstance(v, str) for v in raw.values()):
        raise InvalidInputError(f"{where}: provenance values must be strings", path)
    status = raw.get("status", "")
    if status not in STATUSES:
        raise InvalidInputError(
            f"{where}: provenance status {status!r} is not one of {', '.join(STATUSES)}", path
        )
    ref = raw.get("ref", "")
    needs_source = status in ("checked", "corroborated", "from memory")
    if needs_source and not (ref and raw.get("at")):
        raise InvalidInputError(
            f"{where}: a {status!r} value needs 'ref' (a key of [references]) and 'at' "
            "(where in the source)", path,
        )
    if status in ("derived", "common practice") and not raw.get("at"):
        raise InvalidInputError(f"{where}: a {status!r} value needs 'at' (how or why)", path)
    for key in (ref, raw.get("checked_against", "")):
        if key and key not in references:
            known = ", ".join(sorted(references)) or "none"
            raise InvalidInputError(
                f"{where}: reference {key!r} is not in [references] (known: {known})", path
            )
    if status == "corroborated" and not (raw.get("checked_against") and raw.get("note")):
        raise InvalidInputError(
            f"{where}: a 'corroborated' value needs 'checked_against' and a 'note' with the "
            "agreement found", path,
        )
    return Provenance(
        status=status, ref=ref, citation=references.get(ref, ""), at=raw.get("at", ""),
        note=raw.get("note", ""), checked_against=raw.get("checked_against", ""),
    )


def override_provenance(source: str = "") -> Provenance:
    """The record of a value replaced by the user (``source``: what the user said, if any)."""
    return Provenance(status="override", at=source or "user override")


@dataclass(frozen=True)
class ProvenanceItem:
    """One value of the physics data used by a computation, with its provenance.

    Attributes
    ----------
    kind : str
        ``"spin"`` (shift or coupling), ``"relaxation"``, ``"water"`` (contents, concentration).
    name : str
        What the value is, e.g. ``"Glu 3CH2a-4CH2b J"``, ``"water.csf T1 at 3 T"``.
    value : float
        The value (units in ``name`` or implied by the kind: ppm, Hz, s, fraction, mol/kg).
    provenance : Provenance
    """

    kind: str
    name: str
    value: float
    provenance: Provenance


def summarise(items: Iterable[ProvenanceItem]) -> dict[str, Any]:
    """The provenance block of a result: counts by status and kind, and the overridden values.

    Returns
    -------
    dict
        ``{"values": n, "by_status": {status: n}, "by_kind": {kind: {status: n}},
        "overridden": [name, ...], "from_memory": [name, ...]}`` (JSON-serialisable; the
        ``from_memory`` list names the relaxation and water values only, the spin values are
        counted).
    """
    items = list(items)
    by_status = Counter(i.provenance.status for i in items)
    by_kind: dict[str, Counter[str]] = {}
    for i in items:
        by_kind.setdefault(i.kind, Counter())[i.provenance.status] += 1
    order = {s: k for k, s in enumerate(STATUSES)}
    return {
        "values": len(items),
        "by_status": {s: by_status[s] for s in sorted(by_status, key=order.__getitem__)},
        "by_kind": {
            k: {s: c[s] for s in sorted(c, key=order.__getitem__)} for k, c in by_kind.items()
        },
        "overridden": [i.name for i in items if i.provenance.status == "override"],
        "from_memory": [
            i.name for i in items if i.provenance.status == "from memory" and i.kind != "spin"
        ],
    }


_KIND_LABELS = {
    "spin": "chemical shifts and couplings of the basis",
    "relaxation": "relaxation times (T1, T2)",
    "water": "water contents and concentrations of pure water",
}


def _record_item(kind: str, name: str, value: Any, raw: Any) -> ProvenanceItem | None:
    if not isinstance(raw, Mapping) or raw.get("status") not in STATUSES:
        return None
    number = float(value) if isinstance(value, int | float) else float("nan")
    prov = Provenance(
        status=str(raw["status"]), ref=str(raw.get("ref", "")),
        citation=str(raw.get("citation", "")), at=str(raw.get("at", "")),
        note=str(raw.get("note", "")),
    )
    return ProvenanceItem(kind, name, number, prov)


def physics_provenance(
    members: Iterable[str], constants: Mapping[str, Any] | None = None
) -> dict[str, Any]:
    """The provenance block of one result (``fit.json`` key ``provenance``, the report).

    Parameters
    ----------
    members : iterable of str
        Basis member names of the fit; those defined in ``specproc/data/basis`` (metabolites
        and macromolecule components) contribute their shifts, couplings, widths and weights.
    constants : mapping, optional
        ``Quantification.constants`` (``to_dict()["constants"]``). With water-referenced
        concentrations it holds the records of the relaxation times, water contents and
        water concentrations used; without, only the spin values are counted.

    Returns
    -------
    dict
        :func:`summarise` of every value used (``values``, ``by_status``, ``by_kind``,
        ``overridden``, ``from_memory``) plus ``unknown_members`` (members without a
        definition, e.g. from a basis file of other origin).
    """
    # specproc.spins.systems imports this module: import it here
    from specproc.spins.systems import load_macromolecules, load_metabolites, provenance_items

    wanted = {str(m).lower(): str(m) for m in members}
    mets = [m for m in load_metabolites() if m.name.lower() in wanted]
    mms = [c for c in load_macromolecules() if c.name.lower() in wanted]
    items = provenance_items(mets, mms)
    known = {m.name.lower() for m in mets} | {c.name.lower() for c in mms}
    consts = dict(constants or {})
    candidates: list[ProvenanceItem | None] = []
    for tissue, rel in dict(consts.get("water_relaxation") or {}).items():
        for q in ("t1", "t2"):
            candidates.append(_record_item(
                "relaxation", f"water.{tissue} {q.upper()}", rel.get(f"{q}_s"),
                rel.get(f"{q}_provenance")))
    for name, rel in dict(consts.get("metabolites") or {}).items():
        for q in ("t1", "t2"):
            candidates.append(_record_item(
                "relaxation", f"{name} {q.upper()}", rel.get(f"{q}_s"),
                rel.get(f"{q}_provenance")))
    content = dict(consts.get("water_content") or {})
    for tissue, raw in dict(consts.get("water_content_provenance") or {}).items():
        candidates.append(_record_item(
            "water", f"water content {tissue}", content.get(tissue), raw))
    values = {"molal": consts.get("water_molal_mm"), "molar": consts.get("water_molar_mm")}
    for which, raw in dict(consts.get("water_constant_provenance") or {}).items():
        candidates.append(_record_item(
            "water", f"pure water ({which} formula)", values.get(which), raw))
    items += [i for i in candidates if i is not None]
    block = summarise(items)
    block["unknown_members"] = sorted(v for k, v in wanted.items() if k not in known)
    return block


def provenance_rows(block: Mapping[str, Any]) -> list[dict[str, str]]:
    """Short table of a provenance block for a report: rows ``quantity``, ``value``, ``source``.

    One row per kind of value (counts by status), one for the overridden values, one for the
    relaxation and water values from memory.
    """
    def counts(by_status: Mapping[str, int]) -> str:
        return ", ".join(f"{n} {status}" for status, n in by_status.items())

    files = {"spin": "specproc/data/basis/*.toml", "relaxation": "specproc/data/relaxation.toml",
             "water": "specproc/constants.py"}
    by_kind: Mapping[str, Mapping[str, int]] = block.get("by_kind") or {}
    rows = [
        {"quantity": _KIND_LABELS.get(kind, kind), "value": counts(by_status),
         "source": files.get(kind, "")}
        for kind, by_status in by_kind.items()
    ]
    overridden = list(block.get("overridden", []))
    rows.append({"quantity": "overridden by the settings",
                 "value": ", ".join(overridden) if overridden else "none",
                 "source": "configuration file / arguments"})
    memory = list(block.get("from_memory", []))
    if memory:
        rows.append({"quantity": "relaxation and water values from memory",
                     "value": ", ".join(memory), "source": "check before publication"})
    return rows
