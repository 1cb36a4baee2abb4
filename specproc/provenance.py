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
