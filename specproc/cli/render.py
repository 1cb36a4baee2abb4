"""``specproc render FOLDER...``: figures and report.html of scans analysed with tables only.

``specproc batch --tables-only`` (or ``write_scan_outputs(result, folder, outputs="tables")``)
leaves each scan folder with its tables and the saved result (``result.pickle``). This command
draws fit.png, fit.pdf, preprocess.png and report.html from it, with exactly the numbers of the
tables, without analysing the scan again. A FOLDER is a scan folder, or a batch output folder
whose ``scans/*`` are all rendered.
"""

from __future__ import annotations

from pathlib import Path

import click

__all__ = ["COMMANDS"]


def _scan_folders(folder: Path) -> list[Path]:
    from specproc.analysis import STATE_FILE as state

    if (folder / state).exists() or not (folder / "scans").is_dir():
        return [folder]
    return sorted(p.parent for p in (folder / "scans").glob(f"*/{state}"))


@click.command("render")
@click.argument("folders", nargs=-1, required=True, metavar="FOLDER...",
                type=click.Path(exists=True, file_okay=False, path_type=Path))
def render_command(folders: tuple[Path, ...]) -> None:
    """Draw the figures and report of scans analysed with --tables-only."""
    from specproc.analysis import render_saved_result

    done = 0
    for folder in folders:
        for scan_folder in _scan_folders(folder):
            files = render_saved_result(scan_folder)
            click.echo(f"{files['report']}")
            done += 1
    click.echo(f"rendered {done} scan{'s' if done != 1 else ''}")


COMMANDS = [render_command]
