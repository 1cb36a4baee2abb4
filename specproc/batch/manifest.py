"""The list of scans of a cohort: a manifest table, or a BIDS-style folder.

Manifest (TSV or CSV)
---------------------
A text table with a header line; ``.tsv`` files are tab-separated, ``.csv`` files
comma-separated (other names: a tab in the header line means TSV, else CSV). Lines starting
with ``#`` are comments. Paths are relative to the folder of the manifest (absolute paths are
accepted too). Column names are case-insensitive. Other columns (e.g. a ``group`` label) are
allowed and ignored; :func:`read_manifest` returns their names so that the command line can
say so (a misspelt ``te_ms`` is then visible).

=============  ========  ===================================================================
column         required  meaning
=============  ========  ===================================================================
``scan``       yes       metabolite (water-suppressed) data file, any format specproc reads
``water``      no        water reference file (empty: none)
``subject``    no        subject label (``01`` or ``sub-01``; the ``sub-`` prefix is dropped)
``session``    no        session label (``ses-`` prefix dropped)
``scan_id``    no        unique identifier of the row (default: built from subject, session and
                         the file name, see :func:`scan_key`)
``gm``         no        grey-matter volume fraction of the voxel, 0-1
``wm``         no        white-matter volume fraction, 0-1
``csf``        no        CSF volume fraction, 0-1 (give all three or none; they must sum to 1)
``gm_map``     no        grey-matter probability map (NIfTI) of the subject's anatomy: with
                         ``wm_map`` and ``csf_map`` instead of the three numbers; the fractions
                         are computed from the scan's voxel (:mod:`specproc.tissue`)
``wm_map``     no        white-matter probability map
``csf_map``    no        CSF probability map
``labels``     no        one label image instead of the three maps
``label_table`` no       label values of ``labels`` (``gm=2,wm=3,csf=1`` or a table file;
                         default 1 CSF, 2 GM, 3 WM)
``anatomy``    no        anatomical image of the maps (grid checked; drawn in the voxel picture)
``te_ms``      no        echo time, ms (overrides the file's header)
``tm_ms``      no        STEAM mixing time, ms (overrides the header)
``te1_ms``     no        PRESS first echo time, ms (TE2 = TE - TE1; overrides the configuration
                         and the header, see :mod:`specproc.protocol`)
``delays_ms``  no        semi-LASER inter-pulse delays d1..d5, ms, separated by ``;`` or
                         spaces (overrides the configuration and the header)
``tr_ms``      no        repetition time, ms (overrides the header)
``sequence``   no        sequence name (``press``, ``steam``, ``semi-laser``, ...; overrides)
``mm_spectrum`` no       measured macromolecule spectrum of the scan's protocol (one averaged
                         FID; overrides ``[protocol] mm_spectrum``, see
                         :mod:`specproc.mmspectrum`); ``none``: the parametrised components
=============  ========  ===================================================================

An empty cell means "not given". ``n/a`` (the BIDS spelling) is read as empty too.

BIDS-style folder
-----------------
``sub-<label>/[ses-<label>/]mrs/*_svs.nii[.gz]`` are the metabolite scans; the water reference
of ``X_svs.nii.gz`` is ``X_mrsref.nii[.gz]`` in the same folder, or, when there is no such file,
the only ``*_mrsref.nii[.gz]`` of the folder (with several candidates none is chosen). Tissue
fractions come from the JSON sidecar of the scan (``X_svs.json``) when it has a
``TissueFractions`` object with ``GM``, ``WM`` and ``CSF`` (our own key; BIDS has none for it).
Paths in the cohort tables are relative to the BIDS root.

References
----------
.. [1] Brain Imaging Data Structure (BIDS) specification 1.10, "Magnetic Resonance
   Spectroscopy" (``mrs/`` folder; ``svs`` and ``mrsref`` suffixes).
"""

from __future__ import annotations

import csv
import itertools
import json
import math
import os
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError

__all__ = [
    "MANIFEST_COLUMNS",
    "MAP_COLUMNS",
    "ScanEntry",
    "clean_scan_id",
    "discover_bids",
    "ignored_columns",
    "read_entries",
    "read_manifest",
    "scan_key",
]

#: Columns a manifest may have; only ``scan`` is required.
MANIFEST_COLUMNS: tuple[str, ...] = (
    "scan", "water", "subject", "session", "scan_id", "gm", "wm", "csf",
    "te_ms", "tm_ms", "tr_ms", "sequence", "te1_ms", "delays_ms", "kind", "mm_spectrum", *(
        "gm_map", "wm_map", "csf_map", "labels", "label_table", "anatomy"),
)
#: Manifest columns that name segmentation files (paths relative to the manifest).
MAP_COLUMNS: tuple[str, ...] = ("gm_map", "wm_map", "csf_map", "labels", "anatomy")

_SAFE = re.compile(r"[^A-Za-z0-9._+-]+")
_NII = re.compile(r"\.nii(\.gz)?$")


@dataclass(frozen=True)
class ScanEntry:
    """One scan of a cohort (what a manifest row says; nothing is read yet).

    Attributes
    ----------
    key : str
        Unique, file-name-safe identifier; the cohort tables are sorted by it and each scan's
        output folder is ``OUTDIR/scans/<key>``.
    scan_path : Path
        Absolute path of the metabolite data file.
    water_path : Path or None
        Absolute path of the water reference.
    scan_label, water_label : str
        The paths as written in the cohort tables (relative to the manifest or BIDS root).
    subject, session : str
        Labels ("" when not given).
    tissue : mapping of str to float, or None
        Volume fractions ``gm``, ``wm``, ``csf``.
    tissue_maps : TissueMapFiles or None
        Segmentation files the fractions are computed from (instead of ``tissue``).
    overrides : mapping of str to Any
        Acquisition values that replace the file's header: ``te_s``, ``tm_s``, ``tr_s`` (s),
        ``sequence``.
    timings : mapping of str to Any
        Basis sub-timings of the manifest (``te1_s``, ``tm_s`` s, ``delays_s`` tuple of s),
        the ``manifest`` source of :func:`specproc.protocol.resolve_protocol`.
    kind : str
        What was scanned, lower case (``"phantom"``, ``"volunteer"``, ``"patient"`` ...; ""
        when not given). ``"phantom"`` selects the phantom protocol: a basis without
        macromolecules, and the scan is listed on the cohort page but not summarised with
        the others.
    mm_spectrum : str or None
        Absolute path of the measured macromolecule spectrum of the manifest, or ``"none"``
        (the parametrised components), or ``None`` when not given (the ``manifest`` source of
        the macromolecule model of :func:`specproc.protocol.resolve_protocol`).
    """

    key: str
    scan_path: Path
    water_path: Path | None
    scan_label: str
    water_label: str = ""
    subject: str = ""
    session: str = ""
    tissue: Mapping[str, float] | None = None
    overrides: Mapping[str, Any] = field(default_factory=dict)
    timings: Mapping[str, Any] = field(default_factory=dict)
    kind: str = ""
    tissue_maps: Any = None
    mm_spectrum: str | None = None

    @property
    def is_phantom(self) -> bool:
        """Whether the manifest says this scan is of a phantom."""
        return self.kind == "phantom"

    def describe(self) -> dict[str, Any]:
        """Plain dict of everything a result depends on besides file contents (for hashes)."""
        return {
            "key": self.key,
            "subject": self.subject,
            "session": self.session,
            "scan": self.scan_label,
            "water": self.water_label,
            "tissue": None if self.tissue is None else dict(sorted(self.tissue.items())),
            "tissue_maps": None if self.tissue_maps is None else self.tissue_maps.describe(),
            "overrides": dict(sorted(self.overrides.items())),
            **({"timings": {k: list(v) if isinstance(v, tuple) else v
                            for k, v in sorted(self.timings.items())}} if self.timings else {}),
            **({"kind": self.kind} if self.kind else {}),
            **({"mm_spectrum": Path(self.mm_spectrum).name}
               if self.mm_spectrum is not None else {}),
        }

    def protocol_layer(self) -> dict[str, Any]:
        """The manifest layer of :func:`specproc.protocol.resolve_protocol`: the sub-timings
        and the macromolecule spectrum."""
        return {**self.timings, **({"mm_spectrum": self.mm_spectrum}
                                   if self.mm_spectrum is not None else {})}


def _strip_prefix(label: str, prefix: str) -> str:
    label = label.strip()
    return label[len(prefix):] if label.lower().startswith(prefix) else label


def _stem(path: str) -> str:
    name = Path(path).name
    name = _NII.sub("", name)
    if "." in name:
        name = name.rsplit(".", 1)[0]
    return name


def scan_key(*, subject: str = "", session: str = "", scan_label: str) -> str:
    """Identifier ``sub-<subject>[_ses-<session>]_<file stem>`` with unsafe characters as ``-``.

    The ``sub-``/``ses-`` parts are left out when the label is empty, and the stem is not
    repeated when it already starts with them (BIDS file names do).
    """
    stem = _stem(scan_label)
    parts = []
    if subject:
        parts.append(f"sub-{subject}")
    if session:
        parts.append(f"ses-{session}")
    prefix = "_".join(parts)
    key = stem if (not prefix or stem.startswith(prefix)) else f"{prefix}_{stem}"
    key = _SAFE.sub("-", key).strip("-.") or "scan"
    return key


def clean_scan_id(raw: str, line: int, where: Path) -> str:
    """A manifest's ``scan_id`` as a folder name: unsafe characters as ``-``, no leading or
    trailing ``-`` or ``.``.

    Raises
    ------
    InvalidInputError
        When nothing usable is left (``..``, ``.``, ``-``, only symbols): such a name would
        write into ``OUTDIR/scans/`` itself.
    """
    key = _SAFE.sub("-", raw).strip("-.")
    if not key:
        raise InvalidInputError(
            f"line {line}: scan_id {raw[:40]!r} has no letter or digit to name a folder with",
            where,
        )
    return key


def _blank(value: str | None) -> bool:
    return value is None or value.strip() == "" or value.strip().lower() == "n/a"


def _number(value: str, column: str, line: int, where: Path) -> float:
    try:
        number = float(value)
    except ValueError:
        raise InvalidInputError(
            f"line {line}: column {column} is not a number: {value.strip()!r}", where
        ) from None
    if not math.isfinite(number) or number < 0:
        raise InvalidInputError(
            f"line {line}: column {column} must be a non-negative number, got {value.strip()}",
            where,
        )
    return number


def _resolve(base: Path, value: str, column: str, line: int, where: Path) -> Path:
    path = Path(value.strip())
    path = path if path.is_absolute() else base / path
    if not path.is_file():
        raise InvalidInputError(
            f"line {line}: the {column} file {value.strip()!r} does not exist", where
        )
    return path.resolve()


def _tissue(values: Mapping[str, float], line: int, where: Path) -> dict[str, float]:
    from specproc.quantify import validate_tissue_fractions

    try:
        checked = validate_tissue_fractions(values)
    except InvalidInputError as exc:
        raise InvalidInputError(f"line {line}: {exc.message}", where) from None
    return {k: float(checked[k]) for k in ("gm", "wm", "csf")}


def _tissue_maps(row: Mapping[str, str], base: Path, line: int, where: Path) -> Any:
    """The segmentation files of a manifest row (:class:`specproc.tissue.TissueMapFiles`)."""
    if not any(c in row for c in (*MAP_COLUMNS, "label_table")):
        return None
    from specproc.tissue import TissueMapFiles

    paths = {c: _resolve(base, row[c], c, line, where) for c in MAP_COLUMNS if c in row}
    table = row.get("label_table")
    if table is not None:
        candidate = base / table.strip()
        table = str(candidate.resolve()) if candidate.is_file() else table.strip()
    try:
        return TissueMapFiles(gm=paths.get("gm_map"), wm=paths.get("wm_map"),
                              csf=paths.get("csf_map"), labels=paths.get("labels"),
                              label_table=table, anatomy=paths.get("anatomy"))
    except InvalidInputError as exc:
        raise InvalidInputError(f"line {line}: {exc.message}", where) from None


def _dialect(path: Path, header: str) -> str:
    suffix = path.suffix.lower()
    if suffix == ".tsv":
        return "\t"
    if suffix == ".csv":
        return ","
    return "\t" if "\t" in header else ","


def ignored_columns(path: str | os.PathLike[str]) -> list[str]:
    """Header columns of a manifest that :func:`read_manifest` does not use."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError):
        return []
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        return []
    header = next(csv.reader(lines[:1], delimiter=_dialect(Path(path), lines[0])))
    return [h.strip() for h in header if h.strip().lower() not in MANIFEST_COLUMNS]


def read_manifest(path: str | os.PathLike[str]) -> list[ScanEntry]:
    """Read a manifest (format in the module docstring) into entries sorted by key.

    Parameters
    ----------
    path : str or path-like
        The TSV or CSV file.

    Returns
    -------
    list of ScanEntry
        Sorted by :attr:`ScanEntry.key`.

    Raises
    ------
    InvalidInputError
        Naming the manifest and the line for: a missing ``scan`` column, a
        file that does not exist, a bad number, incomplete or invalid tissue fractions, a
        repeated key (also one differing only in case), a ``scan_id`` with no letter or
        digit, or no rows.
    """
    where = Path(path)
    if not where.is_file():
        raise InvalidInputError("the manifest does not exist", where)
    try:
        text = where.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InvalidInputError("the manifest is not UTF-8 text", where) from None
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InvalidInputError("the manifest is empty", where)
    delimiter = _dialect(where, lines[0])
    reader = csv.reader(lines, delimiter=delimiter)
    header = [h.strip().lower() for h in next(reader)]
    if "scan" not in header:
        raise InvalidInputError(
            f"the manifest has no 'scan' column (columns found: {', '.join(header)})", where
        )
    if len(set(header)) != len(header):
        raise InvalidInputError("a manifest column is named twice", where)
    base = where.resolve().parent
    entries: list[ScanEntry] = []
    for line, values in enumerate(reader, start=2):
        if len(values) != len(header):
            raise InvalidInputError(
                f"line {line}: {len(values)} cells but {len(header)} columns", where
            )
        row = {h: v for h, v in zip(header, values, strict=True)
               if h in MANIFEST_COLUMNS and not _blank(v)}
        if "scan" not in row:
            raise InvalidInputError(f"line {line}: the scan cell is empty", where)
        scan_path = _resolve(base, row["scan"], "scan", line, where)
        water_path = (
            _resolve(base, row["water"], "water", line, where) if "water" in row else None
        )
        subject = _strip_prefix(row.get("subject", ""), "sub-")
        session = _strip_prefix(row.get("session", ""), "ses-")
        given = [t for t in ("gm", "wm", "csf") if t in row]
        tissue = None
        if given:
            if len(given) != 3:
                raise InvalidInputError(
                    f"line {line}: give all of gm, wm and csf or none (found {', '.join(given)})",
                    where,
                )
            tissue = _tissue(
                {t: _number(row[t], t, line, where) for t in given}, line, where
            )
        tissue_maps = _tissue_maps(row, base, line, where)
        if tissue_maps is not None and tissue is not None:
            raise InvalidInputError(
                f"line {line}: give tissue fractions (gm, wm, csf) or maps, not both", where)
        overrides: dict[str, Any] = {}
        for column in ("te_ms", "tm_ms", "tr_ms"):
            if column in row:
                overrides[column[:2] + "_s"] = _number(row[column], column, line, where) / 1e3
        if "sequence" in row:
            overrides["sequence"] = row["sequence"].strip()
        timings: dict[str, Any] = {}
        if "tm_s" in overrides:
            timings["tm_s"] = overrides["tm_s"]
        if "te1_ms" in row:
            timings["te1_s"] = _number(row["te1_ms"], "te1_ms", line, where) / 1e3
        if "delays_ms" in row:
            cells = [c for c in re.split(r"[;,\s]+", row["delays_ms"].strip()) if c]
            timings["delays_s"] = tuple(_number(c, "delays_ms", line, where) / 1e3
                                        for c in cells)
        mm_spectrum = None
        if "mm_spectrum" in row:
            cell = row["mm_spectrum"].strip()
            mm_spectrum = "none" if cell.lower() == "none" else str(
                _resolve(base, cell, "mm_spectrum", line, where))
        key = row.get("scan_id", "").strip()
        key = clean_scan_id(key, line, where) if key else scan_key(
            subject=subject, session=session, scan_label=row["scan"].strip()
        )
        entries.append(ScanEntry(
            key=key, scan_path=scan_path, water_path=water_path,
            scan_label=row["scan"].strip(), water_label=row.get("water", "").strip(),
            subject=subject, session=session, tissue=tissue, overrides=overrides,
            timings=timings, kind=row.get("kind", "").strip().lower(),
            tissue_maps=tissue_maps, mm_spectrum=mm_spectrum,
        ))
    if not entries:
        raise InvalidInputError("the manifest lists no scans", where)
    return _sorted_unique(entries, where)


def _sorted_unique(entries: list[ScanEntry], where: Path) -> list[ScanEntry]:
    entries = sorted(entries, key=lambda e: e.key)
    # identifiers are folder names: unique even on file systems that ignore case
    for a, b in itertools.pairwise(sorted(entries, key=lambda e: (e.key.casefold(), e.key))):
        if a.key.casefold() == b.key.casefold():
            same = "the identifier" if a.key == b.key else "identifiers differing only in case"
            raise InvalidInputError(
                f"two scans get {same} {a.key!r}, {b.key!r} ({a.scan_label}, {b.scan_label}); "
                "add a scan_id column with unique values",
                where,
            )
    return entries


def _bids_label(name: str, entity: str) -> str:
    match = re.search(rf"(?:^|_){entity}-([A-Za-z0-9]+)", name)
    return match.group(1) if match else ""


def _water_for(scan: Path) -> Path | None:
    name = scan.name
    stem = _NII.sub("", name)
    if stem.endswith("_svs"):
        base = stem[: -len("_svs")]
        for suffix in (".nii.gz", ".nii"):
            candidate = scan.with_name(f"{base}_mrsref{suffix}")
            if candidate.is_file():
                return candidate
    refs = sorted(
        p for p in scan.parent.iterdir() if p.is_file() and re.search(r"_mrsref\.nii(\.gz)?$",
                                                                       p.name)
    )
    return refs[0] if len(refs) == 1 else None


def _sidecar_tissue(scan: Path) -> dict[str, float] | None:
    sidecar = scan.with_name(_NII.sub("", scan.name) + ".json")
    if not sidecar.is_file():
        return None
    try:
        meta = json.loads(sidecar.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InvalidInputError(f"the JSON sidecar cannot be read: {exc}", sidecar) from None
    raw = meta.get("TissueFractions") if isinstance(meta, dict) else None
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise InvalidInputError("TissueFractions must be an object with GM, WM and CSF", sidecar)
    values = {str(k).lower(): v for k, v in raw.items()}
    if set(values) != {"gm", "wm", "csf"}:
        raise InvalidInputError("TissueFractions must have exactly GM, WM and CSF", sidecar)
    try:
        numbers = {k: float(v) for k, v in values.items()}
    except (TypeError, ValueError):
        raise InvalidInputError("TissueFractions values must be numbers", sidecar) from None
    from specproc.quantify import validate_tissue_fractions

    try:
        checked = validate_tissue_fractions(numbers)
    except InvalidInputError as exc:
        raise exc.with_path(sidecar) from None
    return {k: float(checked[k]) for k in ("gm", "wm", "csf")}


def _bids_scans(root: Path) -> Iterator[Path]:
    for sub in sorted(root.glob("sub-*")):
        if not sub.is_dir():
            continue
        folders = [sub / "mrs", *sorted(s / "mrs" for s in sub.glob("ses-*") if s.is_dir())]
        for folder in folders:
            if folder.is_dir():
                yield from sorted(
                    p for p in folder.iterdir()
                    if p.is_file() and re.search(r"_svs\.nii(\.gz)?$", p.name)
                )


def discover_bids(root: str | os.PathLike[str]) -> list[ScanEntry]:
    """Find the single-voxel scans of a BIDS-style folder (rules in the module docstring).

    Returns
    -------
    list of ScanEntry
        Sorted by key.

    Raises
    ------
    InvalidInputError
        When the folder holds no ``sub-*/[ses-*/]mrs/*_svs.nii[.gz]`` file, or a sidecar is bad.
    """
    root = Path(root).resolve()
    entries = []
    for scan in _bids_scans(root):
        rel = scan.relative_to(root).as_posix()
        water = _water_for(scan)
        subject = _bids_label(scan.name, "sub") or _strip_prefix(scan.relative_to(root).parts[0],
                                                                 "sub-")
        session = _bids_label(scan.name, "ses")
        entries.append(ScanEntry(
            key=scan_key(subject=subject, session=session, scan_label=rel),
            scan_path=scan, water_path=water, scan_label=rel,
            water_label="" if water is None else water.relative_to(root).as_posix(),
            subject=subject, session=session, tissue=_sidecar_tissue(scan),
        ))
    if not entries:
        raise InvalidInputError(
            "no scans found: expected sub-*/[ses-*/]mrs/*_svs.nii[.gz] files", root
        )
    return _sorted_unique(entries, root)


def read_entries(source: str | os.PathLike[str]) -> list[ScanEntry]:
    """Entries of a manifest file or a BIDS-style folder."""
    path = Path(source)
    if path.is_dir():
        return discover_bids(path)
    return read_manifest(path)
