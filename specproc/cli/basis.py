"""``specproc basis``: simulate, inspect, plot and export basis sets.

Times are given in milliseconds at the command line and converted to seconds at this edge.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import click

from specproc.errors import InvalidInputError

if TYPE_CHECKING:
    from specproc.basis import BasisSet

__all__ = ["COMMANDS", "basis", "export_nifti_mrs"]


def _split_names(text: str | None) -> list[str] | None:
    if text is None:
        return None
    names = [n.strip() for n in text.split(",") if n.strip()]
    if not names:
        raise InvalidInputError("--metabolites names no metabolite")
    return names


def _ms(value: float | None, option: str) -> float | None:
    if value is None:
        return None
    if not math.isfinite(value) or value < 0:
        raise InvalidInputError(f"{option} must be a non-negative time in ms, got {value:g}")
    return value * 1e-3


@click.group(name="basis")
def basis() -> None:
    """Simulate and inspect metabolite basis sets."""


@basis.command("simulate")
@click.option(
    "--sequence",
    required=True,
    type=click.Choice(["pulse-acquire", "spin-echo", "press", "steam", "semi-laser"]),
    help="Localisation sequence (ideal pulses).",
)
@click.option("--field", "field_t", required=True, type=float, help="Field strength, T.")
@click.option("--te", "te_ms", type=float, default=None, help="Echo time, ms.")
@click.option("--te1", "te1_ms", type=float, default=None, help="PRESS first echo time, ms.")
@click.option("--tm", "tm_ms", type=float, default=None, help="STEAM mixing time, ms.")
@click.option(
    "--delays",
    "delays_ms",
    default=None,
    help="semi-LASER inter-pulse delays d1,...,d5 in ms (default from TE).",
)
@click.option("--points", "n_points", required=True, type=int, help="Number of points.")
@click.option("--bandwidth", "bandwidth_hz", required=True, type=float, help="Spectral width, Hz.")
@click.option("--centre", "centre_ppm", type=float, default=4.65, show_default=True,
              help="Shift at the receiver centre, ppm.")
@click.option("--metabolites", default=None, help="Comma-separated names (default: all).")
@click.option("--macromolecules", is_flag=True, help="Add the macromolecule/lipid components.")
@click.option("--no-cache", is_flag=True, help="Simulate even if a cached result exists.")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Output basis file (.npz).")
def simulate_command(
    sequence: str,
    field_t: float,
    te_ms: float | None,
    te1_ms: float | None,
    tm_ms: float | None,
    delays_ms: str | None,
    n_points: int,
    bandwidth_hz: float,
    centre_ppm: float,
    metabolites: str | None,
    macromolecules: bool,
    no_cache: bool,
    output: Path,
) -> None:
    """Simulate a basis set and write it to one file."""
    from specproc.basis import simulate_basis

    if not math.isfinite(bandwidth_hz) or bandwidth_hz <= 0:
        raise InvalidInputError(f"--bandwidth must be positive, got {bandwidth_hz:g} Hz")
    delays = None
    if delays_ms is not None:
        try:
            delays = [float(d) * 1e-3 for d in delays_ms.split(",")]
        except ValueError:
            raise InvalidInputError(f"--delays must be numbers in ms, got {delays_ms!r}") from None
    result = simulate_basis(
        sequence=sequence,
        field_t=field_t,
        te_s=_ms(te_ms, "--te"),
        te1_s=_ms(te1_ms, "--te1"),
        tm_s=_ms(tm_ms, "--tm"),
        delays_s=delays,
        dwell_s=1.0 / bandwidth_hz,
        n_points=n_points,
        metabolites=_split_names(metabolites),
        macromolecules=macromolecules,
        centre_ppm=centre_ppm,
        cache=not no_cache,
        progress=True,
    )
    result.save(output)
    click.echo(f"wrote {output} ({len(result.names)} members, {result.n_points} points)")


def _main_peaks(result: BasisSet, index: int, count: int = 3) -> list[float]:
    """Positions (ppm) of the strongest peaks of a member's magnitude spectrum (2 Hz broadened)."""
    import numpy as np

    from specproc.peaks import peak_indices

    spec = np.abs(result.spectrum(lb_hz=2.0)[index])
    ppm = result.ppm()
    if spec.max() <= 0:
        return []
    peaks = peak_indices(spec, min_height=0.2 * spec.max())
    best = peaks[np.argsort(spec[peaks])[::-1][:count]]
    return sorted((float(ppm[i]) for i in best), reverse=True)


@basis.command("show")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
def show_command(file: Path) -> None:
    """Print the members of a basis file: name, kind, protons and main peak positions."""
    from rich.console import Console
    from rich.table import Table

    from specproc.basis import BasisSet

    result = BasisSet.load(file)
    timings = ", ".join(
        f"{k.removesuffix('_s').upper()} {v * 1e3:g} ms" for k, v in result.timings_s.items()
    )
    table = Table(
        title=(
            f"{file.name}: {result.sequence}, {result.field_t:.2f} T "
            f"({result.spectrometer_mhz:.3f} MHz), {timings}"
        ),
        caption=(
            f"{result.n_points} points, {1 / result.dwell_s:g} Hz, centre "
            f"{result.centre_ppm:g} ppm; definitions {result.definitions_hash[:12]}"
        ),
    )
    table.add_column("member")
    table.add_column("kind")
    table.add_column("protons", justify="right")
    table.add_column("main peaks (ppm)")
    for i, name in enumerate(result.names):
        peaks = ", ".join(f"{p:.3f}" for p in _main_peaks(result, i))
        table.add_row(name, result.kinds[i], f"{result.protons[i]:g}", peaks)
    Console().print(table)


@basis.command("plot")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Output image (.png).")
@click.option("--ppm-range", nargs=2, type=float, default=(0.5, 4.5), show_default=True,
              help="Shift range shown, ppm.")
@click.option("--lb", "lb_hz", type=float, default=2.0, show_default=True,
              help="Display line broadening, Hz.")
def plot_command(file: Path, output: Path, ppm_range: tuple[float, float], lb_hz: float) -> None:
    """Plot the members as stacked spectra (real part), shift decreasing to the right.

    Each trace is scaled to its own maximum within the shown range.
    """
    from specproc._atomic import atomic_path
    from specproc.basis import BasisSet
    from specproc.report.basis_figure import plot_basis

    try:
        fig = plot_basis(BasisSet.load(file), ppm_range=ppm_range, lb_hz=lb_hz)
    except InvalidInputError as exc:
        raise exc.with_path(file) from None
    suffix = output.suffix.lower().lstrip(".") or "png"
    with atomic_path(output) as tmp:
        fig.savefig(tmp, format=suffix, dpi=120)
    click.echo(f"wrote {output}")


@basis.command("export")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", required=True,
              type=click.Path(file_okay=False, path_type=Path),
              help="Output folder (one NIfTI-MRS file per member).")
def export_command(file: Path, output: Path) -> None:
    """Write each member as its own NIfTI-MRS file (<member>.nii.gz)."""
    from specproc.basis import BasisSet

    result = BasisSet.load(file)
    written = export_nifti_mrs(result, output)
    click.echo(f"wrote {len(written)} NIfTI-MRS files to {output}")


def _safe_file_name(name: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "._-+" else "_" for ch in name)


def export_nifti_mrs(result: BasisSet, folder: Path) -> list[Path]:
    """Write every member of a BasisSet to ``folder/<name>.nii.gz`` via :func:`specproc.io.save`.

    The member name, kind and proton count go into the NIfTI-MRS header extension as the
    user-defined keys ``specproc_basis_member``, ``specproc_basis_kind`` and
    ``specproc_basis_protons`` (each ``{"Value", "Description"}``, as the standard requires).
    """
    from specproc.data import Scan, user_key
    from specproc.io import save

    folder.mkdir(parents=True, exist_ok=True)
    written = []
    names = [_safe_file_name(n) for n in result.names]
    if len({n.lower() for n in names}) != len(names):
        raise InvalidInputError("member names collide as file names")
    for i, name in enumerate(result.names):
        timings = result.timings_s
        header = {
            "specproc_basis_member": user_key(name, "name of the basis member"),
            "specproc_basis_kind": user_key(
                result.kinds[i], "kind of the basis member (metabolite, macromolecule ...)"),
            "specproc_basis_protons": user_key(
                result.protons[i], "number of protons of the member (its amplitude normalisation)"),
            "specproc_basis_timings_s": user_key(
                dict(timings), "sequence timings the basis was simulated for, s"),
            "specproc_definitions_hash": user_key(
                result.definitions_hash, "hash of the metabolite definitions simulated"),
            "SequenceName": result.sequence,
        }
        scan = Scan(
            data=result.fids[i],
            dwell_s=result.dwell_s,
            spectrometer_mhz=result.spectrometer_mhz,
            centre_ppm=result.centre_ppm,
            te_s=timings.get("te_s"),
            tm_s=timings.get("tm_s"),
            sequence=result.sequence,
            header=header,
            format="nifti-mrs",  # so that the writer keeps the header keys above
        )
        path = folder / f"{names[i]}.nii.gz"
        save(scan, path)
        written.append(path)
    return written


COMMANDS = [basis]
