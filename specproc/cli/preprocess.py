"""``specproc preprocess SCAN [--water REF] [--config FILE] -o OUT.nii.gz``.

Runs the configured preprocessing (:func:`specproc.preprocess.pipeline.run_pipeline`) on a
scan and writes:

* ``OUT.nii.gz`` (or ``.nii``): the averaged, corrected FID as NIfTI-MRS; the provenance of every
  step is in the header extension's ``ProcessingApplied`` list;
* ``OUT_water.nii.gz``: the processed water reference, when ``--water`` is given;
* ``OUT_preprocess.png``: the transients before and after alignment, the frequency and phase
  drift over the transient index, and the final spectrum.

Every file is written to a temporary name and renamed when complete. Steps skipped (for example
the alignment of a single transient) are listed on stderr.
"""

from __future__ import annotations

from pathlib import Path

import click

from specproc.config import load_config
from specproc.errors import InvalidInputError

__all__ = ["COMMANDS", "output_paths"]


def output_paths(out: Path) -> dict[str, Path]:
    """Companion file names of an output NIfTI-MRS path (same folder and stem)."""
    name = out.name
    for suffix in (".nii.gz", ".nii"):
        if name.lower().endswith(suffix):
            stem, ext = name[: -len(suffix)], name[-len(suffix):]
            break
    else:
        raise InvalidInputError("the output must end in .nii.gz or .nii (NIfTI-MRS)", out)
    return {
        "scan": out,
        "water": out.with_name(f"{stem}_water{ext}"),
        "figure": out.with_name(f"{stem}_preprocess.png"),
    }


@click.command("preprocess")
@click.argument("scan_file", metavar="SCAN", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--water", "water_file", metavar="REF",
              type=click.Path(dir_okay=False, path_type=Path),
              help="Water reference scan (coil weights, eddy currents).")
@click.option("--config", "config_file", metavar="FILE",
              type=click.Path(dir_okay=False, path_type=Path),
              help="TOML configuration (see `specproc config show`).")
@click.option("-o", "--output", "out", required=True, metavar="OUT.nii.gz",
              type=click.Path(dir_okay=False, path_type=Path),
              help="Output NIfTI-MRS file of the averaged, corrected FID.")
def preprocess(scan_file: Path, water_file: Path | None, config_file: Path | None,
               out: Path) -> None:
    """Coil-combine, align, average and correct SCAN into one FID (NIfTI-MRS) plus a figure."""
    import contextlib

    from specproc._atomic import atomic_path
    from specproc.errors import naming
    from specproc.io import load, reader_notes, save
    from specproc.preprocess.pipeline import run_pipeline
    from specproc.report.preprocess_figure import render_preprocess_figure

    paths = output_paths(out)
    config = load_config(config_file)
    scan = load(scan_file)
    water = load(water_file) if water_file is not None else None
    with naming(scan_file):
        result = run_pipeline(scan, water=water, config=config)
        png = render_preprocess_figure(result, title=scan_file.name)  # before any write
    # every file to a temporary name first, renamed together at the end: nothing partial
    with contextlib.ExitStack() as stack:
        save(result.scan, stack.enter_context(atomic_path(paths["scan"])))
        if result.water is not None:
            save(result.water, stack.enter_context(atomic_path(paths["water"])))
        stack.enter_context(atomic_path(paths["figure"])).write_bytes(png)
    for note in [*reader_notes(scan), *result.notes]:
        click.echo(f"specproc: note: {note}", err=True)
    report = result.transient_report
    kept = ("" if report is None
            else f", {int(report.kept.sum())}/{report.n_transients} transients kept")
    click.echo(f"wrote {paths['scan']}{kept}")
    if result.water is not None:
        click.echo(f"wrote {paths['water']}")
    click.echo(f"wrote {paths['figure']}")


COMMANDS = [preprocess]
