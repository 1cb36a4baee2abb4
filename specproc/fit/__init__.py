"""Linear-combination fitting of MR spectra with Cramér-Rao lower bounds.

Public entry: :func:`fit_spectrum` (scan + basis -> :class:`FitResult`). The model is in
:mod:`specproc.fit.model`, variable projection in :mod:`specproc.fit.varpro`, the spline
baseline in :mod:`specproc.fit.baseline`, the bounds in :mod:`specproc.fit.crlb` and the result
in :mod:`specproc.fit.result`; its text, table and figure renderings are in
:mod:`specproc.report`. The model uncertainty (refits of a scan under alternative model
choices, warm-started from its fit) is in :mod:`specproc.fit.sensitivity`.
"""

from specproc.fit.fitter import fit_spectrum
from specproc.fit.result import FitResult, result_to_dict, results_table
from specproc.fit.settings import FitSettings, MemberGroup, settings_from_config

__all__ = [
    "FitResult",
    "FitSettings",
    "MemberGroup",
    "fit_spectrum",
    "result_to_dict",
    "results_table",
    "settings_from_config",
]
