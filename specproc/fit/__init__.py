"""Linear-combination fitting of MR spectra with Cramér-Rao lower bounds.

Public entry: :func:`fit_spectrum` (scan + basis -> :class:`FitResult`). The model is in
:mod:`specproc.fit.model`, variable projection in :mod:`specproc.fit.varpro`, the spline
baseline in :mod:`specproc.fit.baseline`, the bounds in :mod:`specproc.fit.crlb` and the
renderings in :mod:`specproc.fit.result`.
"""

from specproc.fit.fitter import fit_spectrum
from specproc.fit.result import (
    FitResult,
    plot_fit,
    result_to_dict,
    result_to_text,
    results_table,
    save_figure,
    write_results_tsv,
)
from specproc.fit.settings import FitSettings, MemberGroup, settings_from_config

__all__ = [
    "FitResult",
    "FitSettings",
    "MemberGroup",
    "fit_spectrum",
    "plot_fit",
    "result_to_dict",
    "result_to_text",
    "results_table",
    "save_figure",
    "settings_from_config",
    "write_results_tsv",
]
