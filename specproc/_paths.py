"""Where specproc finds its data folders.

The metabolite definitions (``specproc/data/basis/*.toml``) are package data, found with
:mod:`importlib.resources`, so an installed wheel can simulate a basis anywhere. The demo study
(``demo_spectra/``) stays at the top of the source tree, readable by people. ``SPECPROC_BASIS_DIR``
and ``SPECPROC_DEMO_DIR`` override the locations.
"""

from __future__ import annotations

import os
from importlib.resources import files
from pathlib import Path

from specproc.errors import InvalidInputError

__all__ = ["basis_dir", "demo_dir", "source_root"]


def source_root() -> Path:
    """The top folder of the source tree that holds the ``specproc`` package."""
    return Path(__file__).resolve().parent.parent


def _folder(env: str, name: str) -> Path:
    path = Path(os.environ.get(env) or source_root() / name)
    if not path.is_dir():
        raise InvalidInputError(
            f"data folder not found (install specproc from its source tree, or set {env})", path
        )
    return path


def basis_dir() -> Path:
    """Folder of the metabolite definition files (package data ``specproc/data/basis/``)."""
    override = os.environ.get("SPECPROC_BASIS_DIR")
    path = Path(override) if override else Path(str(files("specproc") / "data" / "basis"))
    if not path.is_dir():
        raise InvalidInputError(
            "folder of metabolite definitions not found (reinstall specproc, or set "
            "SPECPROC_BASIS_DIR)", path)
    return path


def demo_dir() -> Path:
    """Folder of the bundled demo study (``demo_spectra/``)."""
    return _folder("SPECPROC_DEMO_DIR", "demo_spectra")
