"""The ``specproc`` command line.

Each sub-command lives in its own module of this package and is registered below. Errors of the
:class:`~specproc.errors.SpecprocError` family become one line
``specproc: error: FILE: what is wrong`` on stderr and exit status 2 (a traceback only with
``--debug``).

Start-up is kept short: this package and the command modules import only click at module level,
and each command imports what it computes with when it runs, so ``specproc --help`` loads
neither numpy nor scipy (``tests/test_cli_imports.py``).
"""

from __future__ import annotations

import importlib
import os
import sys
import warnings
from typing import Any

import click

from specproc._threads import BLAS_THREADS_ENV
from specproc.errors import SpecprocError

__all__ = ["main"]

#: Modules of this package that each define ``COMMANDS``: a list of click commands to register.
_COMMAND_MODULES: tuple[str, ...] = (
    "info", "basis", "config", "preprocess", "fit", "demo", "batch", "render", "phantom",
    "tissue",
)


class _Group(click.Group):
    """A click group that turns specproc errors into one line and exit status 2.

    Operating-system errors (disk full, permission denied) become one line naming the file;
    numerical RuntimeWarnings are not shown (results carry their own flags), except with
    ``--debug``.
    """

    def invoke(self, ctx: click.Context) -> Any:
        try:
            with warnings.catch_warnings():
                if not ctx.params.get("debug"):
                    warnings.simplefilter("ignore", RuntimeWarning)
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
        except OSError as exc:  # the system refused a read or write
            if ctx.params.get("debug"):
                raise
            where = f"{os.fsdecode(exc.filename)}: " if exc.filename is not None else ""
            click.echo(f"specproc: error: {where}{exc.strerror or exc}", err=True)
            ctx.exit(2)


def _show_version(ctx: click.Context, _param: click.Parameter, value: bool) -> None:
    if not value or ctx.resilient_parsing:
        return
    from specproc import __version__  # importlib.metadata only when asked

    click.echo(f"specproc, version {__version__}")
    ctx.exit()


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--version", is_flag=True, expose_value=False, is_eager=True,
              callback=_show_version, help="Show the version and exit.")
@click.option("--debug", is_flag=True, help="Show full tracebacks instead of one-line errors.")
@click.option("--blas-threads", type=click.IntRange(min=0), default=None, metavar="N",
              help="BLAS threads per scan (default 1, or $SPECPROC_BLAS_THREADS; 0: the "
                   "libraries' own setting). Parallel work comes from worker processes.")
def main(debug: bool, blas_threads: int | None) -> None:
    """specproc: single-voxel proton MRS, from raw FIDs to concentrations with CRLBs.

    Research use only; not a medical device. Interpretation belongs to qualified professionals.
    """
    if blas_threads is not None:  # inherited by batch worker processes
        os.environ[BLAS_THREADS_ENV] = str(blas_threads)


def _register() -> None:
    for name in _COMMAND_MODULES:
        module = importlib.import_module(f"{__name__}.{name}")
        for command in module.COMMANDS:
            main.add_command(command)


_register()

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
