"""specproc: single-voxel proton MR spectroscopy from raw FIDs to metabolite concentrations.

Research use only; not a medical device. Interpretation of results belongs to qualified
professionals and is subject to local regulations.

The names below are imported on first use (PEP 562), so that ``import specproc`` (and the
command line's ``--help``) does not load numpy, scipy or any reader before they are needed.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from specproc.errors import InvalidInputError, SpecprocError

if TYPE_CHECKING:
    from specproc.data import Scan

#: Public names, by the module that defines them (imported when first asked for).
_LAZY: dict[str, str] = {
    "Scan": "specproc.data",
}

__all__ = ["InvalidInputError", "Scan", "SpecprocError", "__version__"]


def _package_version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("specproc")
    except PackageNotFoundError:  # running from a source tree that is not installed
        return "0.0.0+source"


def __getattr__(name: str) -> Any:
    if name == "__version__":
        value: Any = _package_version()
    elif name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
    else:
        raise AttributeError(f"module 'specproc' has no attribute {name!r}")
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
