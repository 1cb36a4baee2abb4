"""Small pieces shared by the quantification modules."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError

__all__ = ["TISSUES"]

#: Tissue compartments, in this order everywhere.
TISSUES: tuple[str, ...] = ("gm", "wm", "csf")


def _positive(
    value: Any, what: str, path: Path | str | None, *, allow_inf: bool = False
) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{what} is not a number: {value!r}", path) from None
    if math.isnan(number) or number <= 0 or (math.isinf(number) and not allow_inf):
        raise InvalidInputError(f"{what} must be positive, got {value!r}", path)
    return number


def _json_number(x: float) -> float | None:
    from specproc._json import to_jsonable

    return to_jsonable(float(x))
