"""J-difference edited spectroscopy (MEGA-PRESS): conditions, basis, preprocessing and analysis.

* :mod:`~specproc.edited.conditions`: which index of a ``DIM_EDIT`` axis is ON and which OFF,
  and where the editing pulses were (NIfTI-MRS ``EditCondition`` / ``EditPulse``);
* :mod:`~specproc.edited.basis`: ON, OFF and DIFF basis sets simulated with the shaped editing
  pulses (:mod:`specproc.spins.editing`);
* :mod:`~specproc.edited.preprocess`: both sub-spectra through the same corrections, outlier
  rejection by ON/OFF pairs, ON aligned to OFF, subtraction;
* :mod:`~specproc.edited.analysis`: the DIFF fit, GABA+ and the edited QC.
"""

from specproc.edited.conditions import EditConditions, edit_conditions, is_edited

__all__ = ["EditConditions", "edit_conditions", "is_edited"]
