"""``specproc preprocess SCAN [--water REF] [--config FILE] -o OUT.nii.gz``.

Runs the configured preprocessing (:func:`specproc.preprocess.pipeline.run_pipeline`) on a
scan and writes:

* ``OUT.nii.gz`` (or ``.nii``): the averaged, corrected FID as NIfTI-MRS; the provenance of every
  step is in the header extension's ``ProcessingApplied`` list;
* ``OUT_water.nii.gz``: the processed water reference, when ``--water`` is given;
* ``OUT_preprocess.png``: the transients before and after alignment, the frequency and phase
  drift over the transient index, and the final spectrum.

A J-difference edited scan (a ``DIM_EDIT`` axis; :func:`specproc.edited.preprocess.
preprocess_edited`) gives instead:

* ``OUT.nii.gz``: the preprocessed ON and OFF sub-spectra on ``DIM_EDIT``, with the input's
  ``EditCondition`` and ``EditPulse`` and the steps of each condition in ``ProcessingApplied``;
* ``OUT_diff.nii.gz``: the DIFF spectrum ON − OFF (marked by the user key
  ``specproc_edited_spectrum``);
* ``OUT_water.nii.gz`` as above, and ``OUT_preprocess.png``: ON and OFF, DIFF, and the frequency
  of each condition's transients over the pair index with the pairs left out.

Every file is written to a temporary name and renamed when complete. Steps skipped (for example
the alignment of a single transient) are listed on stderr.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

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
        "diff": out.with_name(f"{stem}_diff{ext}"),
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
    from specproc.edited.conditions import is_edited

    if is_edited(scan):
        _preprocess_edited(scan, water, config, scan_file, paths)
        return
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


def _preprocess_edited(scan: Any, water: Any, config: Any, scan_file: Path,
                       paths: dict[str, Path]) -> None:
    """The edited branch of ``specproc preprocess`` (see the module docstring)."""
    import contextlib

    import numpy as np

    from specproc._atomic import atomic_path
    from specproc.edited.preprocess import difference_scan, preprocess_edited, stacked_subspectra
    from specproc.errors import naming
    from specproc.io import reader_notes, save
    from specproc.report.edited import plot_edited_preprocessing
    from specproc.report.figures import figure_png_bytes

    with naming(scan_file):
        spectra = preprocess_edited(scan, water=water, config=config)
        stacked, diff = stacked_subspectra(spectra, scan), difference_scan(spectra)
        png = figure_png_bytes(plot_edited_preprocessing(spectra, title=scan_file.name))
    with contextlib.ExitStack() as stack:
        save(stacked, stack.enter_context(atomic_path(paths["scan"])))
        save(diff, stack.enter_context(atomic_path(paths["diff"])))
        if spectra.water is not None:
            save(spectra.water, stack.enter_context(atomic_path(paths["water"])))
        stack.enter_context(atomic_path(paths["figure"])).write_bytes(png)
    for note in [*reader_notes(scan), *spectra.notes]:
        click.echo(f"specproc: note: {note}", err=True)
    kept = int(np.count_nonzero(spectra.pairs_kept))
    click.echo(f"wrote {paths['scan']} (ON and OFF, {kept}/{spectra.pairs_kept.size} "
               "ON/OFF pairs kept)")
    click.echo(f"wrote {paths['diff']}")
    if spectra.water is not None:
        click.echo(f"wrote {paths['water']}")
    click.echo(f"wrote {paths['figure']}")


COMMANDS = [preprocess]
