"""``specproc demo``: run the whole pipeline on the bundled demo study.

Reads ``demo_spectra/manifest.tsv`` (found with :func:`specproc._paths.demo_dir`), processes
every scan with :func:`specproc.workflow.process_scan` into ``DIR/<subject>_<session>/``, prints
a table of the main results and the path of each report, and writes the same table to
``DIR/summary.tsv``.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import Any

import click

from specproc._atomic import write_text
from specproc.errors import InvalidInputError

__all__ = ["COMMANDS", "SUMMARY_COLUMNS", "demo", "read_manifest", "summary_row"]

#: Columns of the printed table and of ``summary.tsv``.
SUMMARY_COLUMNS: tuple[tuple[str, str], ...] = (
    ("scan", "scan"),
    ("NAA/tCr", "NAA/tCr"),
    ("tCho/tCr", "tCho/tCr"),
    ("mI/tCr", "mI/tCr"),
    ("Glx/tCr", "Glx/tCr"),
    ("tNAA_mM", "tNAA mM"),
    ("snr", "SNR"),
    ("naa_fwhm_hz", "FWHM Hz"),
    ("flags", "flags"),
)

_MANIFEST_COLUMNS = ("scan", "water", "subject", "session", "gm", "wm", "csf")


def read_manifest(path: Path) -> list[dict[str, Any]]:
    """Rows of a demo manifest (TSV): paths resolved against its folder, tissue as floats.

    Raises
    ------
    InvalidInputError
        For a missing file, missing columns or a non-numeric tissue fraction.
    """
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise InvalidInputError(f"cannot read the manifest: {exc.strerror}", path) from None
    reader = csv.DictReader(text.splitlines(), delimiter="\t")
    missing = [c for c in _MANIFEST_COLUMNS if c not in (reader.fieldnames or [])]
    if missing:
        raise InvalidInputError(f"manifest columns missing: {missing}", path)
    rows = []
    for k, raw in enumerate(reader, start=2):
        tissue = None
        values = [raw[c].strip() for c in ("gm", "wm", "csf")]
        if any(values):
            try:
                tissue = dict(zip(("gm", "wm", "csf"), (float(v) for v in values), strict=True))
            except ValueError:
                raise InvalidInputError(
                    f"line {k}: tissue fractions must be numbers, got {values}", path
                ) from None
        water = raw["water"].strip()
        rows.append({
            "scan": path.parent / raw["scan"].strip(),
            "water": path.parent / water if water else None,
            "subject": raw["subject"].strip(),
            "session": raw["session"].strip(),
            "tissue": tissue,
        })
    if not rows:
        raise InvalidInputError("the manifest lists no scans", path)
    return rows


def _num(value: float | None, digits: int) -> str:
    if value is None or not math.isfinite(value):
        return "-"
    return f"{value:.{digits}f}"


def summary_row(outcome: Any) -> dict[str, str]:
    """Printed values of one :class:`~specproc.workflow.ScanOutcome`."""
    conc = outcome.conc_mm or {}
    flags = [f for f in outcome.qc_flags]
    if not outcome.fit_success:
        flags.append("fit not converged")
    return {
        "scan": outcome.title,
        "NAA/tCr": _num(outcome.ratios.get("NAA/tCr"), 3),
        "tCho/tCr": _num(outcome.ratios.get("tCho/tCr"), 3),
        "mI/tCr": _num(outcome.ratios.get("mI/tCr"), 3),
        "Glx/tCr": _num(outcome.ratios.get("Glx/tCr"), 3),
        "tNAA_mM": _num(conc.get("tNAA"), 2),
        "snr": _num(outcome.snr, 0),
        "naa_fwhm_hz": _num(outcome.naa_fwhm_hz, 1),
        "flags": "; ".join(flags) if flags else "none",
    }


def _format_table(rows: list[dict[str, str]]) -> str:
    keys = [k for k, _ in SUMMARY_COLUMNS]
    labels = dict(SUMMARY_COLUMNS)
    widths = {k: max(len(labels[k]), *(len(r[k]) for r in rows)) for k in keys[:-1]}
    head = "  ".join(labels[k].ljust(widths[k]) if k == "scan" else labels[k].rjust(widths[k])
                     for k in keys[:-1]) + "  " + labels["flags"]
    lines = [head, "-" * len(head)]
    for r in rows:
        lines.append("  ".join(r[k].ljust(widths[k]) if k == "scan" else r[k].rjust(widths[k])
                               for k in keys[:-1]) + "  " + r["flags"])
    return "\n".join(lines)


@click.command("demo")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              default=Path("specproc-demo-output"), show_default=True,
              help="Folder for the reports (one sub-folder per scan).")
@click.option("--config", "config_file", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Settings TOML merged over the defaults.")
def demo(out_dir: Path, config_file: Path | None) -> None:
    """Process the bundled demo study (invented data) and print its results."""
    from specproc._paths import demo_dir
    from specproc.workflow import process_scan

    folder = demo_dir()
    rows = read_manifest(folder / "manifest.tsv")
    click.echo(f"specproc demo: {len(rows)} scans of the invented study in {folder}", err=True)
    outcomes = []
    for row in rows:
        label = f"{row['subject']}_{row['session']}"
        click.echo(f"  processing {label} ...", err=True)
        outcome = process_scan(
            row["scan"], water_path=row["water"], out_dir=out_dir / label,
            config=config_file, tissue=row["tissue"], title=label,
        )
        outcomes.append(outcome)
    table = [summary_row(o) for o in outcomes]
    click.echo(_format_table(table))
    click.echo("")
    click.echo("tNAA mM: water-referenced (mmol per litre of GM+WM tissue); '-' where the manifest "
               "gives no tissue fractions. Ratios are not relaxation-corrected.")
    click.echo("Reports:")
    for o in outcomes:
        click.echo(f"  {o.title}: {Path(o.files['report']).resolve()}")
    keys = [k for k, _ in SUMMARY_COLUMNS]
    lines = ["\t".join(keys)] + ["\t".join(r[k] for k in keys) for r in table]
    write_text(out_dir / "summary.tsv", "\n".join(lines) + "\n")
    click.echo(f"Summary table: {(out_dir / 'summary.tsv').resolve()}")
    click.echo("Research use only; not a medical device.")


COMMANDS = [demo]
