"""``specproc fit SCAN [--water REF] [--gm F --wm F --csf F | --gm-map GM ...] -o OUTDIR``.

Analyses one scan exactly as a cohort run analyses each of its scans: load, then
:func:`specproc.analysis.analyse_scan` (preprocessing, basis, fit, quantification, QC), then
:func:`specproc.analysis.write_scan_outputs` into OUTDIR (``results.tsv``, ``fit.json``,
``config.toml``, ``fit.png``, ``fit.pdf``, ``preprocess.png``, ``report.html``). With a water
reference and the voxel's tissue fractions the results are water-referenced concentrations;
otherwise ratios to tCr. The fractions are numbers (``--gm/--wm/--csf``) or are computed from
the subject's segmentation (``--gm-map/--wm-map/--csf-map`` or ``--labels``, with
``--anatomy`` for the voxel picture ``voxel.png``), exactly as ``specproc tissue`` does.

Without ``--basis`` (or with ``--basis auto``) the basis is simulated, and cached, for the
scan's protocol (:mod:`specproc.protocol`). ``--te-ms``, ``--tr-ms``, ``--sequence`` and
``--tm-ms`` replace the header's values (as the manifest columns of ``specproc batch`` do);
``--te1-ms``, ``--tm-ms`` and ``--delays-ms`` are the basis sub-timings with the highest
precedence; ``--field`` sets the field of the simulated basis only. ``--mm-spectrum FILE``
fits a measured macromolecule spectrum in place of the parametrised components
(:mod:`specproc.mmspectrum`; precedence over the manifest and the configuration as for the
timings, :mod:`specproc.protocol`).
"""

from __future__ import annotations

import functools
from pathlib import Path
from typing import Any

import click

from specproc.cli.tissue import map_file_options, map_files_from_options
from specproc.errors import InvalidInputError

__all__ = ["COMMANDS", "fit_command", "tissue_option"]


def _ms(value: float | None, option: str) -> float | None:
    if value is None:
        return None
    if not value >= 0:
        raise InvalidInputError(f"{option} must be a non-negative time in ms, got {value:g}")
    return value * 1e-3


def _delays(text: str | None) -> tuple[float, ...] | None:
    if text is None:
        return None
    cells = [c for c in text.replace(";", ",").replace(" ", ",").split(",") if c]
    try:
        values = [float(c) for c in cells]
    except ValueError:
        raise InvalidInputError(
            f"--delays-ms must be numbers separated by commas, got {text!r}") from None
    return tuple(_ms(v, "--delays-ms") for v in values)  # type: ignore[misc]


def tissue_option(gm: float | None, wm: float | None, csf: float | None
                  ) -> dict[str, float] | None:
    """Tissue fractions from ``--gm/--wm/--csf`` (all three or none)."""
    given = {k: v for k, v in (("gm", gm), ("wm", wm), ("csf", csf)) if v is not None}
    if not given:
        return None
    if len(given) != 3:
        raise InvalidInputError(
            f"give all of --gm, --wm and --csf or none (found {', '.join('--' + k for k in given)})"
        )
    return given


@click.command("fit")
@click.argument("scan_file", metavar="SCAN", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--water", "water_file", metavar="REF",
              type=click.Path(dir_okay=False, path_type=Path),
              help="Unsuppressed water reference: preprocessing and water-referenced "
                   "concentrations (with --gm/--wm/--csf).")
@click.option("--gm", type=float, default=None, help="Grey-matter volume fraction of the voxel.")
@click.option("--wm", type=float, default=None, help="White-matter volume fraction.")
@click.option("--csf", type=float, default=None, help="CSF volume fraction (the three sum to 1).")
@functools.partial(map_file_options, short=False)
@click.option("--basis", "basis_choice", metavar="FILE|auto", default=None,
              help="Basis set file (.npz from `specproc basis simulate`), or 'auto' (default): "
                   "simulate it for the scan's protocol.")
@click.option("--config", "config_file", metavar="FILE",
              type=click.Path(dir_okay=False, path_type=Path),
              help="TOML configuration (see `specproc config show`).")
@click.option("--field", "field_t", type=float, default=None,
              help="Field strength of the simulated basis, T (default: from the scan).")
@click.option("--te-ms", "--te", "te_ms", type=float, default=None,
              help="Echo time, ms (replaces the header's).")
@click.option("--tr-ms", "tr_ms", type=float, default=None,
              help="Repetition time, ms (replaces the header's).")
@click.option("--sequence", default=None, help="Sequence name (replaces the header's).")
@click.option("--te1-ms", "te1_ms", type=float, default=None,
              help="PRESS first echo time, ms (TE2 = TE - TE1; default: manifest, "
                   "[protocol] te1_s, header, else TE/2).")
@click.option("--tm-ms", "tm_ms", type=float, default=None,
              help="STEAM mixing time, ms (replaces the header's).")
@click.option("--delays-ms", "delays_ms", default=None, metavar="D1,D2,D3,D4,D5",
              help="semi-LASER inter-pulse delays, ms (default: [protocol] delays_s, header, "
                   "else TE/8, TE/4, TE/4, TE/4, TE/8).")
@click.option("--macromolecules/--no-macromolecules", default=None,
              help="Add macromolecule/lipid members to a simulated basis "
                   "(default: for tissue at every TE, not for a phantom).")
@click.option("--phantom", is_flag=True, default=False,
              help="The scan is of a phantom: no macromolecules, and one expected line width "
                   "for every metabolite (the relaxation table is of tissue).")
@click.option("--mm-spectrum", "mm_spectrum", metavar="FILE|none", default=None,
              help="Measured macromolecule spectrum (one averaged FID acquired with "
                   "metabolite nulling at the scan's field and TE, e.g. NIfTI-MRS), fitted as "
                   "one member in place of the parametrised macromolecule components; 'none': "
                   "the parametrised ones (default: manifest, [protocol] mm_spectrum).")
@click.option("--keep-lipids/--no-keep-lipids", "keep_lipids", default=None,
              help="With --mm-spectrum, keep the lipid components too (default: "
                   "[protocol] mm_keep_lipids, false).")
@click.option("--title", default=None, help="Label of the scan (default: the file name).")
@click.option("-o", "--output", "out_dir", required=True, metavar="OUTDIR",
              type=click.Path(file_okay=False, path_type=Path),
              help="Output folder (created if needed).")
def fit_command(scan_file: Path, water_file: Path | None, gm: float | None, wm: float | None,
                csf: float | None, gm_map: Path | None, wm_map: Path | None,
                csf_map: Path | None, label_map: Path | None, label_table: str | None,
                anatomy: Path | None, basis_choice: str | None, config_file: Path | None,
                field_t: float | None, te_ms: float | None, tr_ms: float | None,
                sequence: str | None, te1_ms: float | None, tm_ms: float | None,
                delays_ms: str | None, macromolecules: bool | None, phantom: bool,
                mm_spectrum: str | None, keep_lipids: bool | None, title: str | None,
                out_dir: Path) -> None:
    """Analyse SCAN: preprocess, fit, quantify, QC; write results, fit.json and report.html."""
    from specproc.analysis import analyse_scan, resolve_config, write_scan_outputs
    from specproc.batch.task import apply_overrides
    from specproc.errors import naming
    from specproc.io import load
    from specproc.protocol import resolve_protocol
    from specproc.report.messages import fit_status_sentence, qc_flag_sentence

    if out_dir.exists() and not out_dir.is_dir():
        raise InvalidInputError("the output must be a folder", out_dir)
    if field_t is not None and not field_t > 0:
        raise InvalidInputError(f"--field must be positive, got {field_t:g}")
    tissue: Any = tissue_option(gm, wm, csf)
    map_files = map_files_from_options(gm_map, wm_map, csf_map, label_map, label_table, anatomy)
    if map_files is not None and tissue is not None:
        raise click.UsageError("give tissue fractions (--gm/--wm/--csf) or maps, not both")
    overrides: dict[str, Any] = {}
    for key, value, option in (("te_s", te_ms, "--te-ms"), ("tr_s", tr_ms, "--tr-ms"),
                               ("tm_s", tm_ms, "--tm-ms")):
        if value is not None:
            overrides[key] = _ms(value, option)
    if sequence:
        overrides["sequence"] = sequence
    timings = {"te1_s": _ms(te1_ms, "--te1-ms"), "tm_s": overrides.get("tm_s"),
               "delays_s": _delays(delays_ms), "mm_spectrum": mm_spectrum,
               "mm_keep_lipids": keep_lipids}
    config, _ = resolve_config(config_file)
    scan = apply_overrides(load(scan_file), overrides)
    water = load(water_file) if water_file is not None else None
    if map_files is not None:
        from specproc.tissue import tissue_fractions_from_files

        tissue = tissue_fractions_from_files(scan_file, map_files)
    basis = protocol = None
    if basis_choice and basis_choice != "auto":
        if mm_spectrum is not None or keep_lipids is not None:
            raise click.UsageError("--mm-spectrum and --keep-lipids change a simulated basis; "
                                   "they cannot be used with --basis FILE")
        basis = Path(basis_choice)
        if not basis.is_file():
            raise InvalidInputError("basis file not found", basis)
    else:
        protocol = resolve_protocol(scan, field_t=field_t, option=timings, config=config,
                                    macromolecules=macromolecules, phantom=phantom)
    with naming(scan_file):
        result = analyse_scan(scan, water, tissue=tissue, basis=basis, protocol=protocol,
                              config=config_file, title=title, phantom=phantom)
    files = write_scan_outputs(result, out_dir)
    for note in result.notes:
        click.echo(f"specproc: note: {note}", err=True)
    if not result.fit.success:
        click.echo(f"specproc: warning: {fit_status_sentence(result.fit)}", err=True)
    for flag in result.qc.flags:
        click.echo(f"specproc: QC flag: {qc_flag_sentence(flag.name, flag.value, flag.threshold)}",
                   err=True)
    click.echo(result.fit.to_text().rstrip())
    if result.protocol is not None and result.protocol.timing_text():
        click.echo(f"basis timing: {result.protocol.timing_text()}")
    if result.protocol is not None and result.protocol.macromolecules:
        click.echo(f"macromolecules: {result.protocol.mm_text()}")
    conc = result.conc_mm
    if conc:
        click.echo("water-referenced concentrations (mM of GM+WM tissue): " + ", ".join(
            f"{k} {v:.2f}" for k, v in conc.items()))
    click.echo(result.quantification.statement)
    if result.edited is not None:
        click.echo(result.edited.summary_text())
    for path in files.values():
        click.echo(f"wrote {path}")
    click.echo("Research use only; not a medical device.")


COMMANDS = [fit_command]
