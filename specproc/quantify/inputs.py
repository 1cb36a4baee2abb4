"""The inputs of :func:`specproc.quantify.quantify`, as small frozen records.

* :class:`Amplitudes`: fitted amplitudes with their covariance and what they are per
  (:meth:`Amplitudes.from_fit` for a :class:`~specproc.fit.FitResult` and its basis, whose
  amplitudes are per molecule);
* :class:`WaterSignal`: the water reference signal at t = 0 and its timings
  (:meth:`WaterSignal.measure` from an averaged water FID);
* :class:`Acquisition`: TE, TR and field of the metabolite scan (:meth:`Acquisition.from_scan`);
* :class:`Tissue`: the voxel's GM/WM/CSF fractions and the water constants of the tissue
  water reference (Gasparovic et al. 2006).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc.constants import WATER_MOLAL_MMOL_PER_KG, WATER_MOLAR_37C_MM
from specproc.errors import InvalidInputError
from specproc.quantify.sums import _as_cov
from specproc.quantify.water import WATER_PROTONS, water_amplitude

__all__ = ["Acquisition", "Amplitudes", "Tissue", "WaterSignal"]


@dataclass(frozen=True, eq=False)
class Amplitudes:
    """Fitted amplitudes of the basis members.

    Attributes
    ----------
    names : tuple of str
        Member names, unique.
    values : (n,) ndarray
        Amplitudes (finite).
    covariance : (n, n) ndarray or None
        Their covariance (e.g. Cramér-Rao); from ``sd`` as a diagonal when only SDs are given.
    protons : mapping of str to float, or None
        Protons per molecule of each member; needed unless ``per_molecule``.
    per_molecule : bool
        Whether the amplitudes are per molecule (a basis normalised to its protons, as the fit
        of :mod:`specproc.fit` gives) rather than signal areas.
    alternatives : (V, n) ndarray or None
        The amplitudes under alternative model choices, one row per refit
        (:class:`specproc.fit.sensitivity.ModelSensitivity`); their spread gives the model
        uncertainty of every quantity (:func:`specproc.quantify.sums.systematic_sd`).
    alternative_factors : tuple of str
        The model choice (factor) each row varies.
    """

    names: tuple[str, ...]
    values: np.ndarray
    covariance: np.ndarray | None = None
    protons: Mapping[str, float] | None = None
    per_molecule: bool = False
    alternatives: np.ndarray | None = None
    alternative_factors: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        names = tuple(str(n) for n in self.names)
        values = np.asarray(self.values, dtype=float).reshape(-1)
        if values.size != len(names):
            raise InvalidInputError(f"{values.size} amplitudes but {len(names)} names")
        if len(set(names)) != len(names):
            raise InvalidInputError(f"repeated member names {list(names)}")
        if not np.all(np.isfinite(values)):
            raise InvalidInputError("amplitudes must be finite numbers")
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "covariance", _as_cov(self.covariance, None, values.size))
        if self.alternatives is not None:
            alt = np.asarray(self.alternatives, dtype=float).reshape(-1, values.size)
            factors = tuple(str(f) for f in self.alternative_factors)
            if len(factors) != alt.shape[0]:
                raise InvalidInputError(
                    f"{alt.shape[0]} alternative amplitude rows but {len(factors)} factors")
            object.__setattr__(self, "alternatives", alt)
            object.__setattr__(self, "alternative_factors", factors)

    @classmethod
    def from_mapping(cls, amplitudes: Mapping[str, float], *,
                     sd: Sequence[float] | np.ndarray | None = None, covariance: Any = None,
                     protons: Mapping[str, float] | None = None,
                     per_molecule: bool = False) -> Amplitudes:
        """From ``{name: amplitude}`` with an optional covariance or SDs (uncorrelated)."""
        names = tuple(str(k) for k in amplitudes)
        try:
            values = np.array([float(amplitudes[n]) for n in names], dtype=float)
        except (TypeError, ValueError):
            raise InvalidInputError("amplitudes must be numbers") from None
        cov = _as_cov(covariance, sd, len(names))
        return cls(names, values, cov, protons, per_molecule)

    @classmethod
    def from_fit(cls, fit: Any, basis: Any, sensitivity: Any = None) -> Amplitudes:
        """The amplitudes of a :class:`~specproc.fit.FitResult` (per molecule) with their
        Cramér-Rao covariance, and the proton counts of its basis; with a
        :class:`~specproc.fit.sensitivity.ModelSensitivity` of the fit, its refits as the
        alternatives."""
        protons = {str(n): float(p) for n, p in zip(basis.names, basis.protons, strict=True)}
        alternatives, factors = None, ()
        if sensitivity is not None:
            alternatives, factors = sensitivity.variant_amplitudes, sensitivity.factors
        return cls(tuple(fit.names), np.asarray(fit.amplitudes, dtype=float),
                   np.asarray(fit.covariance, dtype=float), protons, True, alternatives,
                   factors)


@dataclass(frozen=True)
class WaterSignal:
    """The water reference signal.

    Attributes
    ----------
    amplitude : float
        Water signal at t = 0, on the scale of the metabolite amplitudes.
    amplitude_sd : float
        Its SD (independent of the metabolite amplitudes).
    te_s, tr_s : float or None
        TE and TR of the water reference, s (``None``: those of the metabolite scan).
    per_proton : bool
        Whether ``amplitude`` is per proton (else the signal of all water protons).
    details : mapping
        How it was measured (for ``fit.json``).
    """

    amplitude: float
    amplitude_sd: float = 0.0
    te_s: float | None = None
    tr_s: float | None = None
    per_proton: bool = False
    details: Mapping[str, Any] = field(default_factory=dict)

    @classmethod
    def measure(cls, water: Any) -> WaterSignal:
        """Measure it on an averaged water FID (:func:`specproc.quantify.water_amplitude`)."""
        amplitude, sd, details = water_amplitude(water)
        return cls(amplitude, sd, water.te_s, water.tr_s, False, details)


@dataclass(frozen=True)
class Acquisition:
    """TE, TR (s) and field (T) of the metabolite scan."""

    te_s: float | None
    tr_s: float | None
    field_t: float | None = None

    @classmethod
    def from_scan(cls, scan: Any) -> Acquisition:
        """From a :class:`~specproc.data.Scan`."""
        return cls(scan.te_s, scan.tr_s, scan.field_t)


@dataclass(frozen=True)
class Tissue:
    """The voxel's tissue and the constants of the tissue water reference.

    Attributes
    ----------
    fractions : mapping
        GM, WM, CSF volume fractions (keys in any case; sum 1 within ``atol``).
    water_content : mapping or None
        MR-visible water content per compartment relative to pure water at body temperature
        (default :data:`specproc.constants.TISSUE_WATER_CONTENT`).
    water_molal_mm : float
        Molal concentration of pure water, mmol/kg, used by the molal formula (default
        :data:`specproc.constants.WATER_MOLAL_MMOL_PER_KG`, 55 508).
    water_molar_mm : float
        Molar concentration of pure water at the temperature of ``water_content``, mmol/L,
        used by the molar formula (default :data:`specproc.constants.WATER_MOLAR_37C_MM`,
        55 138 at 37 °C). :func:`specproc.quantify.water_settings` reads the three from the
        ``[water]`` configuration.
    water_protons : float
        Protons per water molecule.
    atol : float
        Allowed deviation of the fractions' sum from 1.
    """

    fractions: Mapping[str, float]
    water_content: Mapping[str, float] | None = None
    water_molal_mm: float = WATER_MOLAL_MMOL_PER_KG
    water_molar_mm: float = WATER_MOLAR_37C_MM
    water_protons: float = WATER_PROTONS
    atol: float = 0.01
