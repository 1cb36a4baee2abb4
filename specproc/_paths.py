"""Where specproc finds the data folders of its source tree (basis/, demo_spectra/).

specproc is installed from a source checkout (``pip install -e .``); the metabolite
definitions in ``basis/`` and the demo study in ``demo_spectra/`` stay readable by people at the
top of the tree. ``SPECPROC_BASIS_DIR`` and ``SPECPROC_DEMO_DIR`` override the locations.
"""

from __future__ import annotations

import os
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
    """Folder of the metabolite definition files (``basis/``)."""
    return _folder("SPECPROC_BASIS_DIR", "basis")


def demo_dir() -> Path:
    """Folder of the bundled demo study (``demo_spectra/``)."""
    return _folder("SPECPROC_DEMO_DIR", "demo_spectra")
