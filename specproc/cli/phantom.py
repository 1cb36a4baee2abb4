"""``specproc phantom SCAN... --nominal FILE.toml [-o OUTDIR]``: phantom validation and QA.

Each SCAN is measured against the nominal contents of its phantom
(:func:`specproc.phantom.analyse_phantom`; the nominal file format is described in
:mod:`specproc.phantom`). The water reference of ``X_svs.nii[.gz]`` is ``X_mrsref.nii[.gz]``
beside it when it exists (or give ``--water`` once per SCAN, in the same order). Outputs in
OUTDIR (default ``phantom-qa``):

``phantom_recovery.tsv``
    One row per scan × compound: nominal and measured concentration (mM), recovery (%), CRLB.
``phantom_linearity.tsv``
    One row per compound: slope, intercept (mM) and R² of measured against nominal
    concentration across the scans (``scipy.stats.linregress``).
``phantom_qa.tsv``
    One row per scan, in session order: estimated and nominal temperature, water and singlet
    shifts, SNR, NAA and water linewidths.
``phantom_report.html``
    The page of the run (:func:`specproc.report.phantom.render_phantom_report`): nominal
    against measured concentrations, recovery, linearity with its fit and R², temperature with
    its SD, and SNR, linewidth and temperature over sessions when there are several.

Research use only; not a medical device.
"""

from __future__ import annotations

import re
from pathlib import Path

import click

from specproc._tsv import format_cell, tsv_text

__all__ = ["COMMANDS"]

_QA_COLUMNS = ("scan", "phantom", "session", "temperature_c", "temperature_nominal_c",
               "water_ppm", "singlet_ppm", "snr", "naa_fwhm_hz", "water_fwhm_hz", "notes")


def _water_beside(scan: Path) -> Path | None:
    match = re.match(r"^(.*)_svs(\.nii(?:\.gz)?)$", scan.name)
    if not match:
        return None
    for suffix in (".nii.gz", ".nii"):
        candidate = scan.with_name(f"{match.group(1)}_mrsref{suffix}")
        if candidate.is_file():
            return candidate
    return None


@click.command("phantom")
@click.argument("scans", metavar="SCAN...", nargs=-1, required=True,
                type=click.Path(dir_okay=False, path_type=Path))
@click.option("--nominal", "nominal_file", required=True, metavar="FILE.toml",
              type=click.Path(dir_okay=False, path_type=Path),
              help="Nominal phantom contents (TOML; see specproc.phantom).")
@click.option("--water", "water_files", multiple=True, metavar="REF",
              type=click.Path(dir_okay=False, path_type=Path),
              help="Water reference of each SCAN, in order (default: *_mrsref beside it).")
@click.option("--config", "config_file", metavar="FILE",
              type=click.Path(dir_okay=False, path_type=Path),
              help="TOML configuration (see `specproc config show`).")
@click.option("-o", "--output", "out_dir", default=Path("phantom-qa"), show_default=True,
              metavar="OUTDIR", type=click.Path(file_okay=False, path_type=Path),
              help="Output folder.")
def phantom(scans: tuple[Path, ...], nominal_file: Path, water_files: tuple[Path, ...],
            config_file: Path | None, out_dir: Path) -> None:
    """Validate phantom scans: recovery, linearity, temperature, SNR and linewidth trends."""
    from specproc._atomic import write_text
    from specproc.config import load_config
    from specproc.errors import InvalidInputError
    from specproc.phantom import analyse_phantom, linearity, load_nominal

    nominal = load_nominal(nominal_file)
    config = load_config(config_file)
    if water_files and len(water_files) != len(scans):
        raise InvalidInputError(
            f"give --water once per SCAN ({len(scans)} scans, {len(water_files)} references)")
    measurements = []
    for i, scan in enumerate(scans):
        water = water_files[i] if water_files else _water_beside(scan)
        measurements.append(analyse_phantom(scan, nominal, water_path=water, config=config))
    order = sorted(range(len(measurements)),
                   key=lambda i: (measurements[i].session, measurements[i].scan))
    measurements = [measurements[i] for i in order]

    recovery_rows = []
    for m in measurements:
        for name, value in m.nominal_mm.items():
            recovery_rows.append((m.scan, m.phantom, m.session, name, value, m.measured_mm[name],
                                  m.recovery_percent[name], m.crlb_percent[name]))
    lin = linearity(measurements)
    qa_rows = [(m.scan, m.phantom, m.session, m.temperature_c, m.temperature_nominal_c,
                m.water_ppm, m.singlet_ppm, m.snr, m.naa_fwhm_hz, m.water_fwhm_hz,
                "; ".join(m.notes)) for m in measurements]
    write_text(out_dir / "phantom_recovery.tsv", tsv_text(
        ("scan", "phantom", "session", "compound", "nominal_mm", "measured_mm",
         "recovery_percent", "crlb_percent"), recovery_rows))
    write_text(out_dir / "phantom_linearity.tsv", tsv_text(
        ("compound", "slope", "intercept_mm", "r_squared", "n"),
        [(k, v["slope"], v["intercept_mm"], v["r_squared"], v["n"]) for k, v in lin.items()]))
    write_text(out_dir / "phantom_qa.tsv", tsv_text(_QA_COLUMNS, qa_rows))
    from specproc import __version__
    from specproc.report.phantom import render_phantom_report

    write_text(out_dir / "phantom_report.html",
               render_phantom_report(measurements, lin, nominal, version=__version__))

    click.echo(f"thermometry: {nominal.thermometry.formula()}")
    for m in measurements:
        rec = ", ".join(f"{n} {format_cell(v)} %" for n, v in m.recovery_percent.items())
        click.echo(f"{m.scan}: T = {format_cell(round(m.temperature_c, 2))} C; "
                   f"recovery {rec}")
    for name, v in lin.items():
        click.echo(f"linearity {name}: slope {format_cell(v['slope'])}, intercept "
                   f"{format_cell(v['intercept_mm'])} mM, R2 {format_cell(v['r_squared'])} "
                   f"(n={v['n']})")
    for m in measurements:
        for note in m.notes:
            click.echo(f"specproc: note: {m.scan}: {note}", err=True)
    click.echo(f"tables and report in {out_dir} (phantom_report.html)")


COMMANDS = [phantom]
