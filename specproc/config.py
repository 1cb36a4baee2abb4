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

Every number must be finite and lie within the bounds of :data:`BOUNDS` (a key not listed
there: within +-1e9), and a two-number range must be increasing; the error names the file, the
key, its unit and the bounds.
"""

from __future__ import annotations

import copy
import math
import os
import reprlib
import tomllib
from importlib import resources
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError

__all__ = ["BOUNDS", "default_config", "default_config_text", "load_config", "merge_config"]

#: Accepted interval (inclusive) and unit of each numeric setting, by dotted key (list items
#: share the bounds of their list). Chosen so that every setting of a sane analysis fits with
#: room to spare, and nothing runs unbounded (common practice for the values named).
BOUNDS: dict[str, tuple[float, float, str]] = {
    "preprocess.coil_combination.weight_points": (1, 4096, "points"),
    "preprocess.coil_combination.noise_tail_fraction": (0.01, 0.9, "of the FID"),
    "preprocess.drift_correction.window_ppm": (-50.0, 50.0, "ppm"),
    "preprocess.drift_correction.passes": (1, 10, "passes"),
    "preprocess.drift_correction.fit_duration_s": (1e-3, 10.0, "s"),
    "preprocess.drift_correction.max_shift_hz": (0.0, 1000.0, "Hz"),
    "preprocess.outlier_rejection.threshold": (0.5, 100.0, "robust SDs"),
    "preprocess.outlier_rejection.window_ppm": (-50.0, 50.0, "ppm"),
    "preprocess.outlier_rejection.fit_duration_s": (1e-3, 10.0, "s"),
    "preprocess.water_removal.band_ppm": (-50.0, 50.0, "ppm"),
    "preprocess.water_removal.model_order": (1, 200, "components"),
    "preprocess.water_removal.fit_points": (16, 65536, "points"),
    "preprocess.referencing.peaks_ppm": (-50.0, 50.0, "ppm"),
    "preprocess.referencing.search_ppm": (1e-3, 5.0, "ppm"),
    "preprocess.referencing.max_offset_ppm": (0.0, 10.0, "ppm"),
    "preprocess.referencing.temperature_c": (0.0, 100.0, "degrees C"),
    "preprocess.phasing.window_ppm": (-50.0, 50.0, "ppm"),
    "preprocess.phasing.n_peaks": (1, 20, "peaks"),
    "preprocess.phasing.p0_deg": (-360.0, 360.0, "degrees"),
    "preprocess.phasing.p1_deg_per_ppm": (-1e4, 1e4, "degrees per ppm"),
    "preprocess.phasing.pivot_ppm": (-50.0, 50.0, "ppm"),
    "preprocess.apodization.lw_hz": (0.0, 100.0, "Hz"),
    "preprocess.zero_filling.factor": (1, 16, "times"),
    "fit.range_ppm": (-50.0, 50.0, "ppm"),
    "fit.noise_ppm": (-100.0, 100.0, "ppm"),
    "fit.noise_sd": (0.0, 1e30, "data units"),
    "fit.baseline_knot_ppm": (0.05, 10.0, "ppm"),
    "fit.baseline_penalty": (0.0, 1e8, ""),
    "fit.shift_sd_hz": (0.0, 100.0, "Hz"),
    "fit.damping_sd_hz": (0.0, 100.0, "Hz"),
    "fit.shift_search_ppm": (0.0, 2.0, "ppm"),
    "fit.shift_limit_ppm": (1e-3, 2.0, "ppm"),
    "fit.start_lorentz_hz": (0.0, 200.0, "Hz"),
    "fit.start_gauss_hz": (0.0, 200.0, "Hz"),
    "fit.max_lorentz_hz": (0.1, 200.0, "Hz"),
    "fit.max_gauss_hz": (0.1, 200.0, "Hz"),
    "fit.max_iterations": (1, 100_000, "evaluations"),
    "uncertainty.baseline_penalty_factor": (1.0, 1e4, "times"),
    "uncertainty.baseline_knot_factor": (1.0, 10.0, "times"),
    "uncertainty.mm_amplitude_sd": (0.0, 10.0, "of the level"),
    "uncertainty.mm_width_factor": (1.0, 10.0, "times"),
    "uncertainty.mm_shift_ppm": (0.0, 0.5, "ppm"),
    "uncertainty.width_sd_factor": (1.0, 100.0, "times"),
    "uncertainty.range_start_shift_ppm": (0.0, 5.0, "ppm"),
    "uncertainty.refit_evaluations": (1, 10_000, "evaluations"),
    "protocol.te1_s": (0.0, 2.0, "s"),
    "protocol.tm_s": (0.0, 2.0, "s"),
    "protocol.delays_s": (0.0, 2.0, "s"),
    "qc.snr_min": (0.0, 1e6, ""),
    "qc.naa_fwhm_ppm_max": (0.0, 5.0, "ppm"),
    "qc.water_fwhm_ppm_max": (0.0, 5.0, "ppm"),
    "qc.crlb_percent_max": (0.0, 1e4, "%"),
    "qc.residual_ratio_max": (0.0, 1e3, ""),
    "qc.drift_range_hz_max": (0.0, 1e3, "Hz"),
    "qc.rejected_fraction_max": (0.0, 1.0, ""),
}
#: Bounds of a numeric setting :data:`BOUNDS` does not list.
_FALLBACK_BOUND = 1e9
_SHORT = reprlib.Repr()  # short renderings of bad values (Python 3.11 sets limits by attribute)
_SHORT.maxlevel, _SHORT.maxstring, _SHORT.maxother, _SHORT.maxlist = 3, 40, 40, 4


def _bounds_key(key: str) -> str:
    """``fit.noise_ppm[1][0]`` -> ``fit.noise_ppm`` (list items share their list's bounds)."""
    return key.split("[", 1)[0]


def _check_bounds(key: str, number: float, where: str | None) -> None:
    low, high, unit = BOUNDS.get(_bounds_key(key), (-_FALLBACK_BOUND, _FALLBACK_BOUND, ""))
    if not math.isfinite(number) or not low <= number <= high:
        unit = f" {unit}" if unit else ""
        raise InvalidInputError(
            f"configuration key {key!r} must be between {low:g} and {high:g}{unit}, got "
            f"{number:.6g}",
            where,
        )


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
            f"configuration key {key!r} must be {expected}, got {_SHORT.repr(value)}", where
        )

    if isinstance(default, bool):
        if not isinstance(value, bool):
            raise bad("true or false")
        return value
    if isinstance(default, int):
        if isinstance(value, bool) or not isinstance(value, int):
            raise bad("an integer")
        _check_bounds(key, value, where)
        return value
    if isinstance(default, float):
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise bad("a number")
        _check_bounds(key, float(value), where)
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
        items = [
            _check_value(f"{key}[{i}]", item, default[min(i, len(default) - 1)], where)
            for i, item in enumerate(value)
        ]
        if _is_range(default) and not items[0] < items[1]:
            raise bad("an increasing range [low, high]")
        return items
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
    try:
        return _merge(default_config(), user, "", source)
    except RecursionError:
        raise InvalidInputError("not a usable configuration: nested too deeply", source) from None


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
    except RecursionError:
        raise InvalidInputError("not a usable configuration: nested too deeply", file) from None
    return merge_config(user, source=os.fspath(file))
