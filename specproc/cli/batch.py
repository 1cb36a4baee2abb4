"""``specproc batch INPUT -o OUTDIR [--workers N] [--scheduler ADDRESS] [--config FILE]``.

INPUT is a manifest (TSV or CSV; columns in :mod:`specproc.batch.manifest`) or a BIDS-style
folder (``sub-*/[ses-*/]mrs/*_svs.nii[.gz]`` with ``*_mrsref`` water references). Every scan
gets its own folder ``OUTDIR/scans/<scan_id>/``; the cohort summary is ``OUTDIR/cohort.tsv``,
``OUTDIR/cohort_qc.tsv`` and ``OUTDIR/cohort.html``. Rerunning with the same OUTDIR skips the
scans whose inputs and configuration are unchanged.

Exit status: 0 when the batch ran (failed scans are counted and listed in the outputs), 1 with
``--strict`` when any scan failed, 2 for a bad manifest, folder, configuration or option.
"""

from __future__ import annotations

from pathlib import Path

import click

__all__ = ["COMMANDS"]


@click.command("batch")
@click.argument("source", metavar="INPUT", type=click.Path(path_type=Path))
@click.option("-o", "--output", "out_dir", required=True, metavar="OUTDIR",
              type=click.Path(file_okay=False, path_type=Path), help="Output folder.")
@click.option("--workers", type=int, default=None, metavar="N",
              help="Local worker processes (default: number of CPUs; 1 runs in this process).")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Send the scans to a Dask distributed scheduler (e.g. tcp://host:8786).")
@click.option("--config", "config_file", metavar="FILE",
              type=click.Path(dir_okay=False, path_type=Path),
              help="TOML configuration (see `specproc config show`).")
@click.option("--metabolites", metavar="LIST", default=None,
              help="Comma-separated basis members to simulate (default: [fit] members of the "
                   "configuration, else all metabolite definitions).")
@click.option("--macromolecules/--no-macromolecules", default=None,
              help="Add (or leave out) the macromolecule components of the basis (default: "
                   "added for tissue at every TE, not for a phantom, as for a single scan).")
@click.option("--retry-failed", is_flag=True,
              help="Process again the scans that failed in an earlier run with the same inputs.")
@click.option("--strict", is_flag=True, help="Exit with status 1 when any scan failed.")
@click.option("--no-progress", is_flag=True, help="Do not show the progress bar.")
@click.option("--tables-only", is_flag=True,
              help="Per scan only results.tsv, fit.json and config.toml (no figures, no "
                   "report.html; about half the time); `specproc render` draws them later.")
def batch(source: Path, out_dir: Path, workers: int | None, scheduler: str | None,
          config_file: Path | None, metabolites: str | None, macromolecules: bool | None,
          retry_failed: bool, strict: bool, no_progress: bool, tables_only: bool) -> None:
    """Process every scan of a manifest or BIDS-style folder and summarise the cohort."""
    from specproc.batch import ignored_columns, read_entries, run_batch
    from specproc.batch.runner import default_workers
    from specproc.config import load_config
    from specproc.errors import InvalidInputError

    if not source.exists():
        raise InvalidInputError("the manifest or folder does not exist", source)
    if workers is not None and workers < 1:
        raise InvalidInputError(f"--workers must be at least 1, got {workers}")
    config = load_config(config_file)
    entries = read_entries(source)
    if workers is None:
        workers = default_workers(len(entries))
    if source.is_file():
        extra = ignored_columns(source)
        if extra:
            click.echo(f"note: manifest columns not used: {', '.join(extra)}", err=True)
    names = None
    if metabolites:
        names = [m.strip() for m in metabolites.split(",") if m.strip()]
    summary = run_batch(
        entries, out_dir, config=config, workers=workers, scheduler=scheduler,
        metabolites=names, macromolecules=macromolecules, retry_failed=retry_failed,
        progress=not no_progress, title=f"specproc cohort: {source.name}",
        outputs="tables" if tables_only else "all",
    )
    click.echo(summary.counts_line())
    for key, reason in summary.failures:
        click.echo(f"  failed: {key}: {reason}", err=True)
    click.echo(f"cohort tables: {summary.tables['cohort.tsv']}, "
               f"{summary.tables['cohort_qc.tsv']}, {summary.tables['cohort.html']}")
    if strict and summary.n_failed:
        click.get_current_context().exit(1)


COMMANDS = [batch]
