"""Helpers shared by the sub-command modules."""

from __future__ import annotations

from specproc._json import dumps, to_jsonable

__all__ = ["dumps", "to_jsonable"]
