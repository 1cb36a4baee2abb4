"""Versions of the libraries a step relies on, for its provenance record."""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

__all__ = ["library_versions"]


def library_versions(*names: str) -> dict[str, str]:
    """``{name: version}`` of installed distributions (``"unknown"`` when not found)."""
    out = {}
    for name in names:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "unknown"
    return out
