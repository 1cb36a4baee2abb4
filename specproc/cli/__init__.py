"""The ``specproc`` command line.

Each sub-command lives in its own module of this package and is registered below. Errors of the
:class:`~specproc.errors.SpecprocError` family become one line
``specproc: error: FILE: what is wrong`` on stderr and exit status 2 (a traceback only with
``--debug``).
"""

from __future__ import annotations

import importlib
import sys
from typing import Any

import click

from specproc import __version__
from specproc.errors import SpecprocError

__all__ = ["main"]

#: Modules of this package that each define ``COMMANDS``: a list of click commands to register.
_COMMAND_MODULES: tuple[str, ...] = (
    "info", "basis", "config", "preprocess", "fit", "demo", "batch", "phantom", "tissue",
)


class _Group(click.Group):
    """A click group that turns specproc errors into one line and exit status 2."""

    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except click.UsageError as exc:  # bad option or argument: one line, exit 2
            if ctx.params.get("debug"):
                raise
            where = exc.ctx.command_path if exc.ctx is not None else "specproc"
            click.echo(f"specproc: error: {exc.format_message()} (see '{where} --help')", err=True)
            ctx.exit(2)
        except SpecprocError as exc:
            if ctx.params.get("debug"):
                raise
            click.echo(f"specproc: error: {exc}", err=True)
            ctx.exit(2)
        except MemoryError:
            if ctx.params.get("debug"):
                raise
            click.echo("specproc: error: out of memory", err=True)
            ctx.exit(2)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="specproc")
@click.option("--debug", is_flag=True, help="Show full tracebacks instead of one-line errors.")
def main(debug: bool) -> None:
    """specproc: single-voxel proton MRS, from raw FIDs to concentrations with CRLBs.

    Research use only; not a medical device. Interpretation belongs to qualified professionals.
    """


def _register() -> None:
    for name in _COMMAND_MODULES:
        module = importlib.import_module(f"{__name__}.{name}")
        for command in module.COMMANDS:
            main.add_command(command)


_register()

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
