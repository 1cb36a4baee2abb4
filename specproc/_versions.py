"""Versions of Python, specproc and the libraries it computes with (one collector).

:func:`library_versions` serves the provenance record of each processing step,
:func:`software_versions` the ``versions`` of every output document.
"""

from __future__ import annotations

import platform
from importlib.metadata import PackageNotFoundError, version

__all__ = ["COMPUTING_PACKAGES", "library_versions", "software_versions"]

#: Distributions whose versions shape a result.
COMPUTING_PACKAGES: tuple[str, ...] = (
    "numpy", "scipy", "nibabel", "matplotlib", "nmrglue", "click",
)


def library_versions(*names: str) -> dict[str, str]:
    """``{name: version}`` of installed distributions (``"not installed"`` when not found)."""
    out = {}
    for name in names:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out


def software_versions() -> dict[str, str]:
    """Versions of Python, specproc and :data:`COMPUTING_PACKAGES`."""
    from specproc import __version__

    return {"python": platform.python_version(), "specproc": __version__,
            **library_versions(*COMPUTING_PACKAGES)}
