"""Quantification: ratios to total creatine and water-referenced concentrations.

Turns fitted metabolite amplitudes into numbers a study can use:

* ratios to total creatine (and, when a water reference exists, to water), with standard
  deviations propagated from the amplitude covariance;
* tissue-water-referenced concentrations following Gasparovic et al. (2006) and the consensus
  of Near et al. (2021): partial-volume (GM, WM, CSF) correction with tissue water contents,
  relaxation attenuation of water per tissue compartment and of each metabolite, in molar units
  (mM, mmol per litre of GM+WM tissue, corrected for the CSF fraction) and molal units (mmol per
  kg of GM+WM tissue water);
* combined sums (tNAA, tCr, tCho, Glx; :data:`specproc.sums.SUMS`) with their SD from the
  covariance.

Everything works on plain dicts and arrays; it does not depend on the fitter's result class.
The result is a :class:`Quantification` whose :meth:`Quantification.to_dict` records the
formula and every constant used (for ``fit.json``).

Relaxation times come from ``specproc/data/relaxation.toml`` through
:func:`load_relaxation_times` (values by field strength, each with its citation; user
overrides merged on top).

References
----------
.. [1] Gasparovic C, Song T, Devier D, et al. Use of tissue water as a concentration reference
   for proton spectroscopic imaging. Magn Reson Med 2006;55:1219-1226.
.. [2] Near J, Harris AD, Juchem C, et al. Preprocessing, analysis and quantification in
   single-voxel magnetic resonance spectroscopy: experts' consensus recommendations.
   NMR Biomed 2021;34:e4257.
.. [3] Tissue water contents and pure-water constants: :mod:`specproc.quantify.water` and
   :mod:`specproc.constants` (each with its provenance).
"""

from specproc.quantify.inputs import Acquisition, Amplitudes, Tissue, WaterSignal
from specproc.quantify.relaxation import (
    RELAXATION_FILE,
    Relaxation,
    RelaxationTimes,
    load_relaxation_times,
    relaxation_factor,
)
from specproc.quantify.result import NO_WATER_STATEMENT, Quantification, quantify
from specproc.quantify.sums import combine_linear, ratio_linear
from specproc.quantify.water import (
    TISSUE_WATER_CONTENT,
    TISSUE_WATER_CONTENT_SOURCE,
    TISSUES,
    WATER_PROTONS,
    concentration_factors,
    solution_concentration_mm,
    validate_tissue_fractions,
    water_amplitude,
    water_mole_fractions,
    water_settings,
)

__all__ = [
    "NO_WATER_STATEMENT",
    "RELAXATION_FILE",
    "TISSUES",
    "TISSUE_WATER_CONTENT",
    "TISSUE_WATER_CONTENT_SOURCE",
    "WATER_PROTONS",
    "Acquisition",
    "Amplitudes",
    "Quantification",
    "Relaxation",
    "RelaxationTimes",
    "Tissue",
    "WaterSignal",
    "combine_linear",
    "concentration_factors",
    "load_relaxation_times",
    "quantify",
    "ratio_linear",
    "relaxation_factor",
    "solution_concentration_mm",
    "validate_tissue_fractions",
    "water_amplitude",
    "water_mole_fractions",
    "water_settings",
]
