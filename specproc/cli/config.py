"""``specproc config``: print and check configuration files.

``specproc config show`` prints the bundled defaults (TOML with comments), to be copied, edited
and passed back with ``--config FILE``; ``specproc config check FILE`` merges a user file over
the defaults and reports the first problem (unknown key, wrong type, a choice or a fit setting
out of range) as a one-line error.
"""

from __future__ import annotations

from pathlib import Path

import click

from specproc.config import default_config_text, load_config

__all__ = ["COMMANDS"]


@click.group("config")
def config_group() -> None:
    """Show the default configuration or check a configuration file."""


@config_group.command("show")
def show() -> None:
    """Print the default configuration (TOML with comments)."""
    click.echo(default_config_text(), nl=False)


@config_group.command("check")
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
def check(file: Path) -> None:
    """Check FILE against the defaults (unknown keys, wrong types and bad choices are errors)."""
    from specproc.errors import InvalidInputError
    from specproc.fit import settings_from_config
    from specproc.preprocess.pipeline import _check_choices
    from specproc.qc import QCThresholds
    from specproc.quantify import load_relaxation_times, water_settings

    config = load_config(file)
    try:  # the checks the commands make before any work, so that "valid" means it will run
        _check_choices(config["preprocess"])
        settings_from_config(config)
        QCThresholds.from_config(config["qc"])
        if config["relaxation"]:
            load_relaxation_times(3.0, overrides=config["relaxation"])
        water_settings(config["water"])
    except InvalidInputError as exc:
        raise exc.with_path(file) from None
    click.echo(f"{file}: configuration is valid")


COMMANDS = [config_group]
