"""The TOML configuration: bundled defaults, a user's file merged over them.

The defaults live in ``specproc/data/defaults.toml`` (printed by ``specproc config show``). A
user file holds only the keys it changes; :func:`load_config` merges it over the defaults and
rejects unknown keys and values of the wrong type, naming the file and the key. The file is read
with :mod:`tomllib`; nothing in it is ever executed.

Type rules (each checked against the default value of the same key): booleans must be booleans;
an integer default needs an integer; a float default accepts an integer or a float (stored as
float); a string needs a string; a table needs a table. A default list of two numbers is a range
and needs two numbers; any other non-empty default list accepts a list of any length whose items
follow the rules of the default's items (the last default item for the extra ones); an empty
default list accepts any list of plain values. An empty default table (``[relaxation]``) accepts
any table; its keys are checked where it is used.
"""

from __future__ import annotations

import copy
import os
import tomllib
from importlib import resources
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError

__all__ = ["default_config", "default_config_text", "load_config", "merge_config"]


def default_config_text() -> str:
    """The text of the bundled ``defaults.toml`` (with its comments)."""
    return resources.files("specproc").joinpath("data", "defaults.toml").read_text("utf-8")


def default_config() -> dict[str, Any]:
    """The bundled defaults as a nested dict (a fresh copy each call)."""
    return tomllib.loads(default_config_text())


def _is_range(default: list[Any]) -> bool:
    return len(default) == 2 and all(
        isinstance(v, int | float) and not isinstance(v, bool) for v in default
    )


def _check_value(key: str, value: Any, default: Any, where: str | None) -> Any:
    def bad(expected: str) -> InvalidInputError:
        return InvalidInputError(
            f"configuration key {key!r} must be {expected}, got {value!r}", where
        )

    if isinstance(default, bool):
        if not isinstance(value, bool):
            raise bad("true or false")
        return value
    if isinstance(default, int):
        if isinstance(value, bool) or not isinstance(value, int):
            raise bad("an integer")
        return value
    if isinstance(default, float):
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise bad("a number")
        return float(value)
    if isinstance(default, str):
        if not isinstance(value, str):
            raise bad("a string")
        return value
    if isinstance(default, list):
        if not isinstance(value, list):
            raise bad("a list")
        if not default:
            for item in value:
                if isinstance(item, dict | list):
                    raise bad("a list of plain values")
            return list(value)
        if _is_range(default):
            if len(value) != 2:
                raise bad("a list of 2 numbers (a range)")
        return [
            _check_value(f"{key}[{i}]", item, default[min(i, len(default) - 1)], where)
            for i, item in enumerate(value)
        ]
    if isinstance(default, dict):
        if not isinstance(value, dict):
            raise bad("a table")
        if not default:  # a free-form table, checked by its consumer
            return copy.deepcopy(value)
        return _merge(default, value, key, where)
    return value


def _merge(defaults: dict[str, Any], user: dict[str, Any], prefix: str,
           where: str | None) -> dict[str, Any]:
    merged = copy.deepcopy(defaults)
    for name, value in user.items():
        key = f"{prefix}.{name}" if prefix else str(name)
        if name not in defaults:
            known = ", ".join(sorted(defaults)) or "none"
            raise InvalidInputError(
                f"unknown configuration key {key!r} (known here: {known})", where
            )
        merged[name] = _check_value(key, value, defaults[name], where)
    return merged


def merge_config(user: dict[str, Any] | None, *, source: str | None = None) -> dict[str, Any]:
    """Merge a (partial) configuration dict over the defaults, with the checks of this module.

    Parameters
    ----------
    user : dict or None
        Nested dict shaped like the defaults (``None``: the defaults).
    source : str, optional
        Name of where ``user`` came from, for the error messages.

    Raises
    ------
    InvalidInputError
        On an unknown key or a value of the wrong type.
    """
    if user is None:
        return default_config()
    if not isinstance(user, dict):
        raise InvalidInputError("a configuration must be a table (dict)", source)
    return _merge(default_config(), user, "", source)


def load_config(path: str | os.PathLike[str] | None = None) -> dict[str, Any]:
    """The configuration: the bundled defaults deep-merged with a user's TOML file.

    Parameters
    ----------
    path : str or path-like, optional
        User TOML file; ``None`` returns the defaults.

    Returns
    -------
    dict
        The full configuration (every key present).

    Raises
    ------
    InvalidInputError
        If the file is missing, not valid TOML, or has unknown keys or wrongly typed values
        (the message names the file and the key).
    """
    if path is None:
        return default_config()
    file = Path(path)
    try:
        text = file.read_text("utf-8")
    except FileNotFoundError:
        raise InvalidInputError("configuration file not found", file) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InvalidInputError(f"cannot read the configuration file: {exc}", file) from None
    try:
        user = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InvalidInputError(f"not valid TOML: {exc}", file) from None
    return merge_config(user, source=os.fspath(file))
