"""specproc: single-voxel proton MR spectroscopy from raw FIDs to metabolite concentrations.

Research use only; not a medical device. Interpretation of results belongs to qualified
professionals and is subject to local regulations.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("specproc")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+source"

from specproc.data import Scan
from specproc.errors import InvalidInputError, SpecprocError

__all__ = ["InvalidInputError", "Scan", "SpecprocError", "__version__"]
