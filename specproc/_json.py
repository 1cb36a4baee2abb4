"""Plain JSON values from numpy-bearing structures (one converter for every JSON output)."""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["dumps", "to_jsonable"]


def to_jsonable(value: Any) -> Any:
    """Convert mappings, sequences, numpy scalars and arrays into plain JSON values.

    Non-finite floats become ``None``; complex numbers and complex arrays become
    ``{"re": ..., "im": ...}``; tuples become lists; mapping keys become strings.
    """
    if isinstance(value, Mapping):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [to_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        if np.iscomplexobj(value):
            return {"re": to_jsonable(value.real), "im": to_jsonable(value.imag)}
        if value.dtype.kind in "biu" or (value.dtype.kind == "f" and np.isfinite(value).all()):
            return value.tolist()  # plain ints, bools and finite floats already: no walk
        return to_jsonable(value.tolist())
    if isinstance(value, np.generic):
        return to_jsonable(value.item())
    if isinstance(value, float):
        return value if np.isfinite(value) else None
    if isinstance(value, complex):
        return {"re": to_jsonable(value.real), "im": to_jsonable(value.imag)}
    return value


def dumps(value: Any, **kwargs: Any) -> str:
    """``json.dumps`` of :func:`to_jsonable` (value)."""
    return json.dumps(to_jsonable(value), **kwargs)
