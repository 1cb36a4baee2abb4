"""``specproc tissue SCAN (--gm GM --wm WM --csf CSF | --labels SEG) [--anatomy T1]``.

Prints the GM, WM and CSF fractions of the spectroscopy voxel of SCAN (NIfTI-MRS or DICOM MRS)
from segmentation maps of the subject's anatomy (:mod:`specproc.tissue`): the fractions
normalised to sum 1, the raw means of the maps, the unsegmented remainder, the voxel (centre,
sides, tilt) and the method. ``--json`` prints one JSON object instead. With ``--anatomy`` the
maps must lie on the anatomical image's grid, and ``--png FILE`` writes the picture of the
voxel on three orthogonal slices through its centre (:mod:`specproc.report.voxel`).

Every check runs before anything is written: a problem prints one line and exits 2.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from specproc.errors import InvalidInputError

__all__ = ["COMMANDS", "format_fractions", "map_file_options", "map_files_from_options",
           "tissue_command"]

_FILE = click.Path(dir_okay=False, path_type=Path)


def map_file_options(function: Any, *, short: bool = True) -> Any:
    """The segmentation options shared by ``specproc tissue`` and ``specproc fit``.

    ``--gm-map``, ``--wm-map``, ``--csf-map`` (the names of the manifest columns), also spelt
    ``--gm``, ``--wm``, ``--csf`` when ``short`` (``specproc fit`` keeps those for numbers).
    """
    def names(tissue: str) -> tuple[str, ...]:
        return (f"--{tissue}", f"--{tissue}-map") if short else (f"--{tissue}-map",)

    options = [
        click.option(*names("gm"), "gm_map", metavar="GM", type=_FILE,
                     help="Grey-matter probability map (NIfTI, 0-1) on the anatomy's grid."),
        click.option(*names("wm"), "wm_map", metavar="WM", type=_FILE,
                     help="White-matter probability map."),
        click.option(*names("csf"), "csf_map", metavar="CSF", type=_FILE,
                     help="CSF probability map."),
        click.option("--labels", "label_map", metavar="SEG", type=_FILE,
                     help="One label image instead of the three maps."),
        click.option("--label-table", "label_table", metavar="TABLE", default=None,
                     help="Label values of the tissues: 'gm=2,wm=3,csf=1' (several: 'gm=2+42') "
                          "or a file of 'VALUE NAME' lines (default: 1 CSF, 2 GM, 3 WM)."),
        click.option("--anatomy", "anatomy", metavar="T1", type=_FILE,
                     help="Anatomical image the maps were segmented from (checked to share "
                          "their grid; shown in the voxel picture)."),
    ]
    for option in reversed(options):
        function = option(function)
    return function


def map_files_from_options(gm_map: Path | None, wm_map: Path | None, csf_map: Path | None,
                           label_map: Path | None, label_table: str | None,
                           anatomy: Path | None) -> Any:
    """A :class:`~specproc.tissue.TissueMapFiles`, or ``None`` when no map option was given."""
    from specproc.tissue import TissueMapFiles

    if all(v is None for v in (gm_map, wm_map, csf_map, label_map, label_table)):
        if anatomy is not None:
            raise InvalidInputError("--anatomy needs the segmentation (--gm/--wm/--csf or "
                                    "--labels)")
        return None
    return TissueMapFiles(gm=gm_map, wm=wm_map, csf=csf_map, labels=label_map,
                          label_table=label_table, anatomy=anatomy)


def format_fractions(result: Any) -> str:
    """Text shown by ``specproc tissue`` for a :class:`~specproc.tissue.TissueFractions`."""
    from specproc.tissue.fractions import share_text

    voxel = result.voxel
    centre = ", ".join(f"{v:.1f}" for v in voxel.centre_mm)
    sides = " x ".join(f"{v:.1f}" for v in voxel.size_mm)
    tilt = ", ".join(f"{v:.1f}" for v in voxel.angles_deg())
    lines = [
        f"voxel: {sides} mm ({voxel.volume_ml:.2f} mL), centre ({centre}) mm, edge tilt "
        f"({tilt}) degrees, from the {voxel.method}",
        f"{'tissue':<12}{'fraction':>10}{'raw':>10}",
    ]
    for t in ("gm", "wm", "csf"):
        lines.append(f"{t.upper():<12}{result.fractions[t]:>10.3f}{result.raw[t]:>10.3f}")
    lines.append(f"{'unsegmented':<12}{'':>10}{share_text(result.unsegmented):>10}")
    lines.append(f"method: {result.method()}")
    return "\n".join(lines)


@click.command("tissue")
@click.argument("scan_file", metavar="SCAN", type=_FILE)
@map_file_options
@click.option("--png", "png_file", metavar="FILE", type=_FILE,
              help="Write the voxel picture (needs --anatomy).")
@click.option("--oversample", type=float, default=4.0, show_default=True,
              help="Supersampling points per smallest anatomical voxel side.")
@click.option("--max-unsegmented", type=float, default=0.1, show_default=True,
              help="Largest accepted share of the voxel outside the GM, WM and CSF maps.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
def tissue_command(scan_file: Path, gm_map: Path | None, wm_map: Path | None,
                   csf_map: Path | None, label_map: Path | None, label_table: str | None,
                   anatomy: Path | None, png_file: Path | None, oversample: float,
                   max_unsegmented: float, as_json: bool) -> None:
    """GM, WM and CSF fractions of the voxel of SCAN from segmentation maps."""
    from specproc._json import dumps
    from specproc.tissue import tissue_fractions_from_files

    files = map_files_from_options(gm_map, wm_map, csf_map, label_map, label_table, anatomy)
    if files is None:
        raise click.UsageError("give --gm, --wm and --csf (maps), or --labels")
    if png_file is not None and anatomy is None:
        raise click.UsageError("--png needs --anatomy")
    if not 0 <= max_unsegmented < 1:
        raise click.UsageError("--max-unsegmented must be in [0, 1)")
    result = tissue_fractions_from_files(scan_file, files, oversample=oversample,
                                         max_unsegmented=max_unsegmented,
                                         picture=png_file is not None)
    if png_file is not None:
        from specproc._atomic import write_bytes
        from specproc.report.voxel import voxel_picture_png

        write_bytes(png_file, voxel_picture_png(result.planes, fractions=result.as_mapping(),
                                                title=scan_file.name))
    if as_json:
        document = {"scan": str(scan_file), **result.to_dict(), "files": files.describe(),
                    "picture": None if png_file is None else str(png_file)}
        click.echo(dumps(document, allow_nan=False))
    else:
        click.echo(format_fractions(result))
        if png_file is not None:
            click.echo(f"wrote {png_file}")


COMMANDS = [tissue_command]
