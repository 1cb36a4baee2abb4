"""``specproc demo``: a cohort run over the bundled demo study (invented data).

Runs :func:`specproc.batch.run_batch` on ``demo_spectra/manifest.tsv`` (found with
:func:`specproc._paths.demo_dir`), so every scan is analysed exactly as ``specproc batch``
analyses it, into ``DIR/scans/<scan_id>/`` with the cohort tables beside them. Then prints a
table of the main results and the path of each report, and writes the same table to
``DIR/summary.tsv``.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import click

__all__ = ["COMMANDS", "SUMMARY_COLUMNS", "demo", "summary_row"]

#: Columns of ``summary.tsv`` and their labels in the printed table.
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


def _num(value: Any, digits: int) -> str:
    if not isinstance(value, int | float) or value != value or value in (float("inf"),
                                                                         float("-inf")):
        return "-"
    return f"{value:.{digits}f}"


def summary_row(key: str, summary: Mapping[str, Any],
                thresholds: Mapping[str, Any] | None = None) -> dict[str, str]:
    """Printed values of one scan from its ``summary.json`` (:mod:`specproc.batch.task`); its
    flags as sentences (``thresholds``: :meth:`specproc.qc.QCThresholds.to_dict`)."""
    from specproc.report.messages import sentences

    by_name = {str(r.get("metabolite")): r for r in summary.get("metabolites") or []}

    def ratio(name: str) -> str:
        return _num((by_name.get(name) or {}).get("ratio_tcr"), 3)

    qc = summary.get("qc") or {}
    flags = sentences(list(summary.get("flags") or []), qc=qc, thresholds=thresholds)
    if summary.get("status") == "failed":
        flags = [f"failed: {summary.get('reason', '')}"]
    return {
        "scan": key,
        "NAA/tCr": ratio("NAA"),
        "tCho/tCr": ratio("tCho"),
        "mI/tCr": ratio("mI"),
        "Glx/tCr": ratio("Glx"),
        "tNAA_mM": _num((by_name.get("tNAA") or {}).get("conc_molar_mm"), 2),
        "snr": _num(qc.get("snr"), 0),
        "naa_fwhm_hz": _num(qc.get("naa_fwhm_hz"), 1),
        "flags": "; ".join(flags) if flags else "none",
    }


def _tissue_text(folder: Path) -> str:
    """How a scan's tissue fractions were obtained, from its fit.json."""
    from specproc.batch.task import read_json

    tissue = (read_json(folder / "fit.json") or {}).get("tissue")
    if not tissue:
        return "none (ratios only)"
    values = "/".join(f"{float(tissue['fractions'][t]):.3f}" for t in ("gm", "wm", "csf"))
    if tissue.get("method") == "given":
        return f"{values} given in the manifest"
    picture = " (voxel.png beside the report)" if (folder / "voxel.png").is_file() else ""
    from specproc.tissue.fractions import share_text

    return (f"{values} from the anatomy, unsegmented {share_text(tissue['unsegmented'])}"
            f"{picture}")


def _format_table(rows: list[dict[str, str]]) -> str:
    keys = [k for k, _ in SUMMARY_COLUMNS]
    labels = dict(SUMMARY_COLUMNS)
    widths = {k: max(len(labels[k]), *(len(r[k]) for r in rows)) for k in keys[:-1]}

    def line(values: Mapping[str, str]) -> str:
        return "  ".join(values[k].ljust(widths[k]) if k == "scan" else
                         values[k].rjust(widths[k]) for k in keys[:-1]) + "  " + values["flags"]

    head = line(labels)
    return "\n".join([head, "-" * len(head), *(line(r) for r in rows)])


@click.command("demo")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              default=Path("specproc-demo-output"), show_default=True,
              help="Folder for the reports (one sub-folder per scan under scans/).")
@click.option("--config", "config_file", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Settings TOML merged over the defaults.")
@click.option("--workers", type=click.IntRange(min=1), default=None, metavar="N",
              help="Local worker processes (default: one per CPU, at most one per scan; 1 runs "
                   "in this process).")
def demo(out_dir: Path, config_file: Path | None, workers: int | None) -> None:
    """Process the bundled demo study (invented data) and print its results."""
    from specproc._atomic import write_text
    from specproc._paths import demo_dir
    from specproc._tsv import tsv_text
    from specproc.batch import read_manifest, run_batch
    from specproc.batch.runner import default_workers, scan_folder
    from specproc.batch.task import SUMMARY_NAME, read_json
    from specproc.config import load_config

    folder = demo_dir()
    entries = read_manifest(folder / "manifest.tsv")
    if workers is None:
        workers = default_workers(len(entries))
    click.echo(f"specproc demo: {len(entries)} scans of the invented study in {folder} "
               f"({workers} worker{'s' if workers > 1 else ''})", err=True)
    from specproc.qc import QCThresholds

    config = load_config(config_file)
    thresholds = QCThresholds.from_config(config["qc"]).to_dict()
    summary = run_batch(entries, out_dir, config=config, workers=workers,
                        progress=False, title="specproc demo study (invented data)")
    click.echo(summary.counts_line())
    table = []
    for entry in entries:
        scan_summary = read_json(scan_folder(summary.out_dir, entry.key) / SUMMARY_NAME) or {
            "status": "failed", "reason": "not processed"}
        table.append(summary_row(entry.key, scan_summary, thresholds))
    click.echo(_format_table(table))
    click.echo("")
    click.echo("tNAA mM: water-referenced (mmol per litre of GM+WM tissue); '-' where the manifest "
               "gives no tissue fractions. Ratios are not relaxation-corrected.")
    click.echo("Tissue fractions GM/WM/CSF of the voxel:")
    for entry in entries:
        click.echo(f"  {entry.key}: {_tissue_text(scan_folder(summary.out_dir, entry.key))}")
    click.echo("Reports:")
    for entry in entries:
        report = scan_folder(summary.out_dir, entry.key) / "report.html"
        click.echo(f"  {entry.key}: {report}")
    keys = [k for k, _ in SUMMARY_COLUMNS]
    write_text(out_dir / "summary.tsv", tsv_text(keys, table))
    click.echo(f"Summary table: {(out_dir / 'summary.tsv').resolve()}")
    click.echo(f"Cohort tables: {summary.tables['cohort.tsv']}, {summary.tables['cohort.html']}")
    click.echo("Research use only; not a medical device.")


COMMANDS = [demo]
