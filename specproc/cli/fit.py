"""``specproc fit SCAN [--water REF] [--basis FILE | auto] [--config FILE] -o OUTDIR``.

Fits one spectrum with :func:`specproc.fit.fit_spectrum` and writes into OUTDIR:

* ``results.tsv``: one row per basis member and per combined sum (tNAA, tCr, tCho, Glx) with
  ``metabolite``, ``kind``, ``amplitude``, ``crlb_sd``, ``crlb_percent``, ``ratio_tcr``, ``flag``;
* ``fit.json``: every parameter, the covariance, the settings, the inputs and their provenance,
  the library versions;
* ``fit.png``: data, fit, baseline, residual and the contribution of each member.

A scan with several transients or coils is first run through the configured preprocessing
(:func:`specproc.preprocess.pipeline.run_pipeline`, with the water reference if given). Without
``--basis`` (or with ``--basis auto``) the basis is simulated, and cached, from the scan's
header (field, sequence, TE; ``--field``, ``--te``, ``--sequence`` override). All three files
are rendered before the first one is written, and each is written atomically.
"""

from __future__ import annotations

import datetime as _dt
import platform
from pathlib import Path
from typing import Any

import click

from specproc.errors import InvalidInputError

__all__ = ["COMMANDS", "fit_command", "provenance_versions"]

#: Echo times below this value get the macromolecule/lipid members by default, s (common
#: practice: macromolecules are visible at short TE). The same rule as
#: :data:`specproc.workflow.SHORT_TE_S` (``specproc demo`` and ``specproc batch``); kept here as
#: a literal so that the command-line help does not import the workflow.
SHORT_TE_S = 0.06


def provenance_versions() -> dict[str, str]:
    """Versions of Python and of the libraries that shape the result."""
    import matplotlib
    import numpy
    import scipy

    from specproc import __version__

    return {
        "specproc": __version__,
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "scipy": scipy.__version__,
        "matplotlib": matplotlib.__version__,
    }


def _basis_summary(basis: Any, source: str) -> dict[str, Any]:
    return {
        "source": source,
        "names": list(basis.names),
        "kinds": list(basis.kinds),
        "protons": list(basis.protons),
        "sequence": basis.sequence,
        "timings_s": dict(basis.timings_s),
        "spectrometer_mhz": basis.spectrometer_mhz,
        "field_t": basis.field_t,
        "dwell_s": basis.dwell_s,
        "n_points": basis.n_points,
        "centre_ppm": basis.centre_ppm,
        "definitions_hash": basis.definitions_hash,
        "version": basis.version,
    }


def _get_basis(choice: str | None, scan: Any, *, field_t: float | None, te_ms: float | None,
               sequence: str | None, macromolecules: bool | None) -> tuple[Any, str]:
    from specproc.basis import BasisSet, basis_for_scan

    if choice and choice != "auto":
        path = Path(choice)
        if not path.is_file():
            raise InvalidInputError("basis file not found", path)
        return BasisSet.load(path), str(path)
    overrides: dict[str, Any] = {}
    if field_t is not None:
        if not field_t > 0:
            raise InvalidInputError(f"--field must be positive, got {field_t:g}")
        overrides["field_t"] = field_t
    if te_ms is not None:
        if not te_ms >= 0:
            raise InvalidInputError(f"--te must be a non-negative time in ms, got {te_ms:g}")
        overrides["te_s"] = te_ms * 1e-3
    if sequence:
        overrides["sequence"] = sequence
    te = overrides.get("te_s", scan.te_s)
    if macromolecules is None:
        macromolecules = te is not None and te < SHORT_TE_S
    overrides["macromolecules"] = macromolecules
    return basis_for_scan(scan, **overrides), "simulated (specproc.basis.basis_for_scan)"


@click.command("fit")
@click.argument("scan_file", metavar="SCAN", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--water", "water_file", metavar="REF",
              type=click.Path(dir_okay=False, path_type=Path),
              help="Water reference (used by the preprocessing of a raw scan).")
@click.option("--basis", "basis_choice", metavar="FILE|auto", default=None,
              help="Basis set file (.npz from `specproc basis simulate`), or 'auto' (default): "
                   "simulate it from the scan's header.")
@click.option("--config", "config_file", metavar="FILE",
              type=click.Path(dir_okay=False, path_type=Path),
              help="TOML configuration (see `specproc config show`; the [fit] table).")
@click.option("--field", "field_t", type=float, default=None,
              help="Field strength of the simulated basis, T (default: from the scan).")
@click.option("--te", "te_ms", type=float, default=None,
              help="Echo time of the simulated basis, ms (default: from the scan).")
@click.option("--sequence", default=None,
              help="Sequence of the simulated basis (default: from the scan).")
@click.option("--macromolecules/--no-macromolecules", default=None,
              help="Add macromolecule/lipid members to a simulated basis "
                   f"(default: when TE < {SHORT_TE_S * 1e3:g} ms).")
@click.option("-o", "--output", "out_dir", required=True, metavar="OUTDIR",
              type=click.Path(file_okay=False, path_type=Path),
              help="Output folder (created if needed).")
def fit_command(scan_file: Path, water_file: Path | None, basis_choice: str | None,
                config_file: Path | None, field_t: float | None, te_ms: float | None,
                sequence: str | None, macromolecules: bool | None, out_dir: Path) -> None:
    """Fit SCAN as a linear combination of basis signals; write results.tsv, fit.json, fit.png."""
    from specproc._atomic import write_bytes, write_text
    from specproc._json import dumps
    from specproc.config import load_config
    from specproc.fit import fit_spectrum, result_to_dict
    from specproc.io import load
    from specproc.report.figures import figure_png_bytes
    from specproc.report.fit_figure import plot_fit
    from specproc.report.fit_text import results_tsv_text

    if out_dir.exists() and not out_dir.is_dir():
        raise InvalidInputError("the output must be a folder", out_dir)
    config = load_config(config_file)
    scan = load(scan_file)
    water = load(water_file) if water_file is not None else None
    notes: list[str] = []
    preprocessed = False
    if scan.dims:
        from specproc.preprocess.pipeline import run_pipeline

        pre = run_pipeline(scan, water=water, config=config)
        scan = pre.scan.replace(source=scan.source)
        notes.extend(pre.notes)
        preprocessed = True
    elif water is not None:
        notes.append("the scan holds one FID and is fitted as it is; the water reference "
                     "is not used by the fit")
    basis, basis_source = _get_basis(basis_choice, scan, field_t=field_t, te_ms=te_ms,
                                     sequence=sequence, macromolecules=macromolecules)
    result = fit_spectrum(scan, basis, config=config)

    document = {
        "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "program": "specproc fit",
        "versions": provenance_versions(),
        "inputs": {
            "scan": str(scan_file),
            "water": None if water_file is None else str(water_file),
            "config": None if config_file is None else str(config_file),
            "preprocessed": preprocessed,
        },
        "scan": scan.summary(),
        "provenance": list(scan.provenance),
        "basis": _basis_summary(basis, basis_source),
        "settings": config.get("fit", {}),
        "notes": notes,
        "result": result_to_dict(result),
    }
    # render all three before writing any
    json_text = dumps(document, indent=1, allow_nan=False)
    png = figure_png_bytes(plot_fit(result, title=f"{scan_file.name}: linear-combination fit"))
    tsv_text = results_tsv_text(result)
    out_dir.mkdir(parents=True, exist_ok=True)
    write_text(out_dir / "results.tsv", tsv_text)
    write_text(out_dir / "fit.json", json_text + "\n")
    write_bytes(out_dir / "fit.png", png)
    for note in notes:
        click.echo(f"specproc: note: {note}", err=True)
    from specproc.report.messages import fit_flag_sentence

    for flag in result.flags:
        click.echo(f"specproc: warning: {fit_flag_sentence(flag, result)}", err=True)
    click.echo(result.to_text().rstrip())
    for name in ("results.tsv", "fit.json", "fit.png"):
        click.echo(f"wrote {out_dir / name}")


COMMANDS = [fit_command]
