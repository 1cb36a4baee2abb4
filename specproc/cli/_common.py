"""Helpers shared by the sub-command modules."""

from __future__ import annotations

import json
from typing import Any

import numpy as np

__all__ = ["to_jsonable"]


def to_jsonable(value: Any) -> Any:
    """Convert numpy scalars/arrays and tuples into plain JSON values (NaN becomes None)."""
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [to_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return to_jsonable(value.tolist())
    if isinstance(value, np.generic):
        return to_jsonable(value.item())
    if isinstance(value, float) and not np.isfinite(value):
        return None
    if isinstance(value, complex):
        return {"re": value.real, "im": value.imag}
    return value


def dumps(value: Any, **kwargs: Any) -> str:
    """``json.dumps`` of :func:`to_jsonable` (value)."""
    return json.dumps(to_jsonable(value), **kwargs)
