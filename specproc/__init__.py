"""specproc: single-voxel proton MR spectroscopy from raw FIDs to metabolite concentrations.

Research use only; not a medical device. Interpretation of results belongs to qualified
professionals and is subject to local regulations.

The Python API is the set of names below (``__all__``); the README's "Python API" section shows
them at work. The main path is::

    scan = specproc.load("sub-01_svs.nii.gz")
    water = specproc.load("sub-01_mrsref.nii.gz")
    result = specproc.analyse_scan(scan, water, tissue={"gm": 0.6, "wm": 0.3, "csf": 0.1})
    specproc.write_scan_outputs(result, "sub-01")

=============================  ================================================================
reading and writing data       :func:`load`, :func:`save`, :class:`Scan`
one scan, end to end           :func:`analyse_scan`, :class:`ScanResult`,
                               :func:`write_scan_outputs`, :func:`render_saved_result`
the steps one by one           :func:`run_pipeline` (:class:`PreprocessResult`),
                               :func:`resolve_protocol` (:class:`Protocol`),
                               :func:`simulate_basis`, :func:`basis_for_scan`
                               (:class:`BasisSet`), :func:`fit_spectrum` (:class:`FitResult`,
                               :class:`FitSettings`), :func:`quantify` (:class:`Amplitudes`,
                               :class:`WaterSignal`, :class:`Tissue`, :class:`Acquisition`,
                               :class:`Quantification`), :func:`qc_from_scan`
                               (:class:`QCReport`)
settings                       :func:`default_config`, :func:`load_config`
tissue fractions               :func:`tissue_fractions_from_files` (:class:`TissueFractions`)
cohorts and phantoms           :func:`read_entries`, :func:`run_batch`, :func:`analyse_phantom`
invented data                  :func:`synthetic_scan`, :func:`synthetic_water`
errors                         :class:`SpecprocError`, :class:`InvalidInputError`
=============================  ================================================================

Each name is imported from its module on first use (PEP 562 ``__getattr__``), so that
``import specproc`` (and the command line's ``--help``) loads neither numpy nor scipy nor any
reader before they are needed.

``specproc.quantify`` is the function :func:`specproc.quantify.quantify`, also after its
sub-package has been imported (the package keeps the function when the import system binds the
sub-package's name); take the sub-package's other names with ``from specproc.quantify import
...``.
"""

from __future__ import annotations

import sys as _sys
import types as _types
from typing import TYPE_CHECKING as _TYPE_CHECKING

from specproc.errors import InvalidInputError, SpecprocError

if _TYPE_CHECKING:  # the same names as _LAZY, for type checkers and editors
    from specproc.analysis import (
        ScanResult,
        analyse_scan,
        render_saved_result,
        write_scan_outputs,
    )
    from specproc.basis import BasisSet, basis_for_scan, simulate_basis
    from specproc.batch import read_entries, run_batch
    from specproc.config import default_config, load_config
    from specproc.data import Scan
    from specproc.fit import FitResult, FitSettings, fit_spectrum
    from specproc.io import load, save
    from specproc.phantom import analyse_phantom
    from specproc.preprocess import PreprocessResult, run_pipeline
    from specproc.protocol import Protocol, resolve_protocol
    from specproc.qc import QCReport, qc_from_scan
    from specproc.quantify import (
        Acquisition,
        Amplitudes,
        Quantification,
        Tissue,
        WaterSignal,
        quantify,
    )
    from specproc.synthetic import synthetic_scan, synthetic_water
    from specproc.tissue import TissueFractions, tissue_fractions_from_files

    __version__: str

#: Public names imported on first use, by the module that defines them.
_LAZY: dict[str, str] = {
    **dict.fromkeys(("ScanResult", "analyse_scan", "render_saved_result",
                     "write_scan_outputs"), "specproc.analysis"),
    **dict.fromkeys(("BasisSet", "basis_for_scan", "simulate_basis"), "specproc.basis"),
    **dict.fromkeys(("read_entries", "run_batch"), "specproc.batch"),
    **dict.fromkeys(("default_config", "load_config"), "specproc.config"),
    "Scan": "specproc.data",
    **dict.fromkeys(("FitResult", "FitSettings", "fit_spectrum"), "specproc.fit"),
    **dict.fromkeys(("load", "save"), "specproc.io"),
    "analyse_phantom": "specproc.phantom",
    **dict.fromkeys(("PreprocessResult", "run_pipeline"), "specproc.preprocess"),
    **dict.fromkeys(("Protocol", "resolve_protocol"), "specproc.protocol"),
    **dict.fromkeys(("QCReport", "qc_from_scan"), "specproc.qc"),
    **dict.fromkeys(("Acquisition", "Amplitudes", "Quantification", "Tissue", "WaterSignal",
                     "quantify"), "specproc.quantify"),
    **dict.fromkeys(("synthetic_scan", "synthetic_water"), "specproc.synthetic"),
    **dict.fromkeys(("TissueFractions", "tissue_fractions_from_files"), "specproc.tissue"),
}

#: The public names (the eager ones, :data:`_LAZY` and ``__version__``), sorted.
__all__ = [
    "Acquisition", "Amplitudes", "BasisSet", "FitResult", "FitSettings", "InvalidInputError",
    "PreprocessResult", "Protocol", "QCReport", "Quantification", "Scan", "ScanResult",
    "SpecprocError", "Tissue", "TissueFractions", "WaterSignal", "__version__", "analyse_phantom",
    "analyse_scan", "basis_for_scan", "default_config", "fit_spectrum", "load", "load_config",
    "qc_from_scan", "quantify", "read_entries", "render_saved_result", "resolve_protocol",
    "run_batch", "run_pipeline", "save", "simulate_basis", "synthetic_scan", "synthetic_water",
    "tissue_fractions_from_files", "write_scan_outputs",
]


def _package_version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("specproc")
    except PackageNotFoundError:  # running from a source tree that is not installed
        return "0.0.0+source"


def __getattr__(name: str) -> object:
    import importlib

    if name == "__version__":
        value: object = _package_version()
    elif name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
    else:
        raise AttributeError(f"module 'specproc' has no attribute {name!r}")
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    """The attributes bound so far and the public names not yet imported."""
    return sorted(set(globals()) | set(__all__))


class _Package(_types.ModuleType):
    """The class of this package's module object.

    Importing a sub-module binds its name on the package; for ``specproc.quantify`` that would
    replace the exported function by the sub-package, depending on what was imported first.
    The binding is skipped for the names of :data:`_LAZY`, which stay the exported objects
    (the sub-package remains ``sys.modules["specproc.quantify"]``).
    """

    def __setattr__(self, name: str, value: object) -> None:
        if name in _LAZY and isinstance(value, _types.ModuleType):
            return
        super().__setattr__(name, value)


_sys.modules[__name__].__class__ = _Package
