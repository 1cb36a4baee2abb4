"""Model uncertainty of a fit: refits under alternative, equally defensible model choices.

The Cramér-Rao bound is a statistical bound: it says how much the noise moves the amplitudes
*if the model is right*. On measured data the errors are dominated by what the model gets
wrong (macromolecules, baseline, line shape), and the bound says nothing about that. This
module estimates that part by a sensitivity analysis: the scan is refitted under a small set
of alternative settings that an analyst could equally well have chosen, each warm-started from
the main fit (:func:`specproc.fit.fit_spectrum` with ``start``), and the spread of each
amplitude, sum and ratio over the refits is taken as a systematic SD.

Factors and their alternatives (:func:`model_variants`; sizes in :class:`SensitivitySettings`,
the ``[uncertainty]`` table of the configuration):

* ``baseline``: the penalty weight one decade stiffer and one decade more flexible than the
  chosen one (kept inside ``baseline_penalty_range``), and knots 1.5 times coarser and finer
  (the relative penalty weight held). Knot spacing and stiffness are two
  handles on one choice (how much broad signal the baseline may take), so they form one
  factor.
* ``macromolecules``: macromolecule amplitudes tied to one level (relative SD 0.2) when the
  main fit has them independent, independent when it has them tied.
* ``macromolecule shapes``: the parametrised macromolecule components (``[fit]
  mm_amplitude_members`` with a line list; not a measured spectrum, not the lipids) with
  lines ``mm_width_factor`` times narrower and broader, and all of them moved by
  ``+mm_shift_ppm`` and ``-mm_shift_ppm``. Published descriptions of one component differ by
  that much: table 1 of the consensus paper (Cudalbu et al., NMR Biomed 2021;34:e4393,
  checked) gives M2.05 with sub-peaks at 2.00 and 2.03 ppm, and a tentative M1.9, so its
  centre is known to a few hundredths of a ppm; widths in the literature range over about a
  factor of 1.5 (from memory). Under a metabolite singlet this shape is the largest model
  error at short TE: on the validation corpus (``benchmarks/validation``) the shape of the
  2.0 ppm component alone moved tNAA/tCr by 10-20 %. The alternative bases are rebuilt from
  the members' line lists (:func:`alternative_mm_basis`).
* ``tentative macromolecule peaks``: the peaks marked ``tentative`` in
  ``macromolecules.toml`` (held in the basis at half their size,
  :data:`specproc.spins.systems.TENTATIVE_WEIGHT`) left out and taken at full size. The
  consensus table lists M1.9 as "to be confirmed"; a shoulder of M2.05 near 1.9 ppm moved
  tNAA/tCr by about 17 % on the validation corpus, more than any other single choice.
* ``line widths``: the prior SD of the per-metabolite width deviations halved and doubled.
* ``fit range``: the range starting 0.3 ppm higher (0.5 instead of 0.2 ppm by default).

Combination (:func:`specproc.quantify.sums.systematic_sd`): for each factor f the RMS of the
differences of its refits from the main fit, ``δ_f² = mean_k (x_k - x_0)²``; the factors are
taken as independent and added in quadrature, ``systematic² = Σ_f δ_f²`` (the usual budget
of systematic uncertainties, each alternative taken as a one-SD change of its choice; Barlow,
arXiv:hep-ex/0207026, 2002; JCGM 100:2008 (GUM) 5.1). The total uncertainty of a quantity is
``sqrt(CRLB² + systematic²)``. Ratios and sums are formed in every refit and their spread taken
directly, so the correlation of numerator and denominator across model choices is kept.

What it is not: a bound on every model error. A bias that all the alternatives share (a
component missing from the basis that no baseline absorbs, a wrong relaxation table, a wrong
sequence timing) does not show in the spread. The alternatives are fixed in advance from what
is defensible on physical grounds, not tuned to any data set.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError, SpecprocError
from specproc.fit.model import matches
from specproc.fit.result import FitResult
from specproc.fit.settings import FIXABLE, FitSettings, settings_from_config

__all__ = [
    "ModelSensitivity",
    "ModelVariant",
    "SensitivitySettings",
    "alternative_mm_basis",
    "model_sensitivity",
    "model_variants",
    "sensitivity_settings",
]


@dataclass(frozen=True)
class SensitivitySettings:
    """Options of the model-uncertainty refits (the ``[uncertainty]`` configuration table).

    Attributes
    ----------
    model : bool
        Whether to run the refits (off: only the Cramér-Rao bounds are reported).
    baseline_penalty_factor : float
        The stiffer and the more flexible alternative multiply and divide the chosen baseline
        penalty weight by this (default 10: one decade; the weight acts on a log scale).
    baseline_knot_factor : float
        The coarser and the finer alternative multiply and divide the knot spacing by this.
    mm_amplitude_sd : float
        Relative SD of the macromolecule amplitude tie of the alternative, when the main fit
        has the amplitudes independent (``[fit] mm_amplitude_sd = 0``).
    mm_width_factor : float
        The narrower and broader macromolecule-shape alternatives divide and multiply the
        widths of the parametrised macromolecule lines by this (1: no width alternative).
    mm_shift_ppm : float
        The two position alternatives move every parametrised macromolecule component by
        this, up and down, ppm (0: no position alternative).
    tentative : bool
        Whether to refit with the tentative macromolecule peaks absent and at full size.
    width_sd_factor : float
        The alternatives divide and multiply ``[fit] damping_sd_hz`` by this.
    range_start_shift_ppm : float
        The alternative fit range starts this much higher (0: no fit-range alternative).
    refine : bool
        Refine the nonlinear parameters in each refit from the main fit's (default); off: hold
        them and solve only the amplitudes and the baseline (cheaper, misses the part of the
        model error that moves the line widths and shifts).
    refit_evaluations : int
        Largest number of model evaluations of each refit (its ``[fit] max_iterations``): from
        the main fit's parameters a few steps reach the alternative optimum closely enough for
        a spread (default 8; the refits' ``not_converged`` flag is not a failure here).
    """

    model: bool = True
    baseline_penalty_factor: float = 10.0
    baseline_knot_factor: float = 1.5
    mm_amplitude_sd: float = 0.2
    mm_width_factor: float = 1.5
    mm_shift_ppm: float = 0.03
    tentative: bool = True
    width_sd_factor: float = 2.0
    range_start_shift_ppm: float = 0.3
    refine: bool = True
    refit_evaluations: int = 8

    def __post_init__(self) -> None:
        if isinstance(self.refit_evaluations, bool) or int(self.refit_evaluations) < 1:
            raise InvalidInputError(
                f"uncertainty refit_evaluations must be >= 1, got {self.refit_evaluations}")
        object.__setattr__(self, "refit_evaluations", int(self.refit_evaluations))
        for name in ("baseline_penalty_factor", "baseline_knot_factor", "width_sd_factor",
                     "mm_width_factor"):
            value = float(getattr(self, name))
            if not value >= 1.0:
                raise InvalidInputError(f"uncertainty {name} must be >= 1, got {value}")
            object.__setattr__(self, name, value)
        for name in ("mm_amplitude_sd", "range_start_shift_ppm", "mm_shift_ppm"):
            value = float(getattr(self, name))
            if not value >= 0.0:
                raise InvalidInputError(f"uncertainty {name} must be >= 0, got {value}")
            object.__setattr__(self, name, value)


def sensitivity_settings(config: Any = None) -> SensitivitySettings:
    """:class:`SensitivitySettings` from a whole configuration (one with a ``[fit]`` or an
    ``[uncertainty]`` table: the latter is used), the ``[uncertainty]`` table itself, or None
    (defaults)."""
    if config is None:
        return SensitivitySettings()
    if isinstance(config, SensitivitySettings):
        return config
    if not isinstance(config, Mapping):
        raise InvalidInputError("the [uncertainty] configuration entry must be a table")
    table = config.get("uncertainty", {}) if "fit" in config or "uncertainty" in config \
        else config
    if not isinstance(table, Mapping):
        raise InvalidInputError("the [uncertainty] configuration entry must be a table")
    known = set(SensitivitySettings.__dataclass_fields__)
    unknown = sorted(set(table) - known)
    if unknown:
        raise InvalidInputError(
            f"unknown [uncertainty] keys {unknown}; valid keys: {', '.join(sorted(known))}")
    return SensitivitySettings(**dict(table))


@dataclass(frozen=True)
class ModelVariant:
    """One alternative model choice.

    Attributes
    ----------
    factor : str
        The choice it varies (``baseline``, ``macromolecules``, ``line widths``,
        ``fit range``); the variants of one factor are combined by their RMS.
    label : str
        What it changes, in words.
    changes : dict
        The ``[fit]`` settings it changes.
    basis_changes : dict
        The changes of the basis (:func:`alternative_mm_basis` keywords ``width_factor``,
        ``shift_ppm``, ``tentative_scale``); empty: the main fit's basis. Such a refit holds
        the nonlinear parameters at the main fit's (only the amplitudes and the baseline are
        solved again): the shape alternative is then not undone by a refitted macromolecule
        width, and the refit costs one linear solve instead of a refinement.
    """

    factor: str
    label: str
    changes: dict[str, Any] = field(default_factory=dict)
    basis_changes: dict[str, float] = field(default_factory=dict)


def _shape_members(basis: Any, settings: FitSettings) -> list[int]:
    """Members whose macromolecule shape the shape alternatives vary: tie-able
    (``mm_amplitude_members``), of kind macromolecule and with a line list."""
    lines = basis.lines
    if lines is None:
        return []
    return [i for i, (n, kd) in enumerate(zip(basis.names, basis.kinds, strict=True))
            if kd == "macromolecule" and matches(n, kd, settings.mm_amplitude_members)
            and lines[i] is not None and len(lines[i]) > 0]


def _tentative_lines(basis: Any, members: Any) -> dict[int, np.ndarray]:
    """Which lines of each member are tentative peaks of its definition (by name, in
    ``macromolecules.toml``; line k is peak k of a parametrised component)."""
    from specproc.spins.systems import load_macromolecules

    try:
        definitions = {c.name: c for c in load_macromolecules()}
    except SpecprocError:
        return {}
    out: dict[int, np.ndarray] = {}
    for i in members:
        comp = definitions.get(basis.names[i])
        if comp is None or len(comp.peaks) != len(basis.lines[i]):
            continue
        mask = np.array([p.tentative for p in comp.peaks], dtype=bool)
        if mask.any():
            out[i] = mask
    return out


def alternative_mm_basis(basis: Any, members: Any, *, width_factor: float = 1.0,
                         shift_ppm: float = 0.0, tentative_scale: float | None = None,
                         tentative: Mapping[int, np.ndarray] | None = None) -> Any:
    """The basis with some macromolecule members re-synthesised with another shape.

    Parameters
    ----------
    basis : BasisSet
        A basis with line lists (:attr:`specproc.basis.BasisSet.lines`).
    members : sequence of int
        Indices of the members to change (each must have a line list).
    width_factor : float
        Factor on the Gaussian FWHM of each of their lines.
    shift_ppm : float
        Move of their lines, ppm (positive: to higher ppm).
    tentative_scale : float, optional
        Size of the tentative peaks relative to their full size (0: absent, 1: full); they
        are held in the basis at :data:`specproc.spins.systems.TENTATIVE_WEIGHT`.
    tentative : mapping of int to bool ndarray, optional
        The tentative lines of each member (default: from the definitions, by name).

    Returns
    -------
    BasisSet
        Same members, order, protons and kinds; the changed members' FIDs and line lists
        replaced (exact re-synthesis, :func:`specproc.spins.synthesize_fid`).
    """
    import dataclasses

    from specproc.spins.simulate import LineList, synthesize_fid
    from specproc.spins.systems import TENTATIVE_WEIGHT

    fids = np.array(basis.fids, dtype=complex, copy=True)
    lines = list(basis.lines)
    if tentative_scale is not None and tentative is None:
        tentative = _tentative_lines(basis, members)
    for i in members:
        old = lines[i]
        amp = old.amp
        if tentative_scale is not None and tentative and i in tentative:
            amp = np.where(tentative[i], amp * (float(tentative_scale) / TENTATIVE_WEIGHT), amp)
        new = LineList(old.freq_hz + float(shift_ppm) * basis.spectrometer_mhz, amp,
                       old.gauss_fwhm_hz * float(width_factor))
        lines[i] = new
        fids[i] = synthesize_fid(new, dwell_s=basis.dwell_s, n_points=basis.n_points)
    return dataclasses.replace(basis, fids=fids, lines=tuple(lines))


def model_variants(fit: FitResult, settings: FitSettings,
                   options: SensitivitySettings, basis: Any = None,
                   tentative: Mapping[int, np.ndarray] | None = None) -> list[ModelVariant]:
    """The alternative model choices around the settings of a fit (see the module notes).

    A factor whose handle is off in the main fit (no baseline, no width prior, fewer than two
    tied-able macromolecules, no ``basis`` given or no parametrised macromolecule in it) has
    no variant; a penalty variant that would leave ``baseline_penalty_range`` is clipped to it
    and dropped when it equals the main weight. ``tentative`` gives the tentative lines of the
    basis members when the caller has them (default: read from the definitions).
    """
    out: list[ModelVariant] = []
    if settings.baseline:
        weight = fit.baseline_penalty if np.isfinite(fit.baseline_penalty) else (
            settings.baseline_penalty)
        lo, hi = settings.baseline_penalty_range
        f = options.baseline_penalty_factor
        for label, w in (("baseline stiffer", weight * f), ("baseline more flexible", weight / f)):
            w = float(np.clip(w, lo, hi))
            if f > 1 and not np.isclose(w, weight, rtol=1e-6):
                out.append(ModelVariant("baseline", f"{label} (penalty {w:.3g})",
                                        {"baseline_auto": False, "baseline_penalty": w}))
        k = options.baseline_knot_factor
        if k > 1:
            for label, knot in (("baseline knots coarser", settings.baseline_knot_ppm * k),
                                ("baseline knots finer", settings.baseline_knot_ppm / k)):
                out.append(ModelVariant("baseline", f"{label} ({knot:.3g} ppm)",
                                        {"baseline_knot_ppm": knot}))
    tieable = [i for i, (n, kd) in enumerate(zip(fit.names, fit.kinds, strict=True))
               if matches(n, kd, settings.mm_amplitude_members)]
    if len(tieable) >= 2:
        if settings.mm_amplitude_sd > 0:
            out.append(ModelVariant("macromolecules", "macromolecule amplitudes independent",
                                    {"mm_amplitude_sd": 0.0}))
        elif options.mm_amplitude_sd > 0:
            out.append(ModelVariant(
                "macromolecules",
                f"macromolecule amplitudes tied (relative SD {options.mm_amplitude_sd:g})",
                {"mm_amplitude_sd": options.mm_amplitude_sd}))
    members = _shape_members(basis, settings) if basis is not None else []
    if members:
        k = options.mm_width_factor
        if k > 1:
            out.append(ModelVariant("macromolecule shapes",
                                    f"macromolecule lines {k:g} times narrower", {},
                                    {"width_factor": 1.0 / k}))
            out.append(ModelVariant("macromolecule shapes",
                                    f"macromolecule lines {k:g} times broader", {},
                                    {"width_factor": k}))
        d = options.mm_shift_ppm
        if d > 0:
            for sign in (1.0, -1.0):
                out.append(ModelVariant("macromolecule shapes",
                                        f"macromolecule components moved {sign * d:+g} ppm", {},
                                        {"shift_ppm": sign * d}))
    if members and options.tentative and (
            tentative if tentative is not None else _tentative_lines(basis, members)):
        out.append(ModelVariant("tentative macromolecule peaks",
                                "tentative macromolecule peaks left out", {},
                                {"tentative_scale": 0.0}))
        out.append(ModelVariant("tentative macromolecule peaks",
                                "tentative macromolecule peaks at full size", {},
                                {"tentative_scale": 1.0}))
    w = options.width_sd_factor
    if settings.damping_sd_hz > 0 and w > 1:
        for label, sd in (("width prior narrower", settings.damping_sd_hz / w),
                          ("width prior wider", settings.damping_sd_hz * w)):
            out.append(ModelVariant("line widths", f"{label} (SD {sd:.3g} Hz)",
                                    {"damping_sd_hz": sd}))
    shift = options.range_start_shift_ppm
    lo_ppm, hi_ppm = settings.range_ppm
    if shift > 0 and lo_ppm + shift < hi_ppm - 1.0:
        out.append(ModelVariant("fit range", f"fit range from {lo_ppm + shift:.3g} ppm",
                                {"range_ppm": (lo_ppm + shift, hi_ppm)}))
    return out


@dataclass(frozen=True, eq=False)
class ModelSensitivity:
    """The refits of one scan under alternative model choices.

    Attributes
    ----------
    names : tuple of str
        Fitted members (those of the main fit).
    amplitudes : (M,) ndarray
        Amplitudes of the main fit.
    variants : tuple of ModelVariant
        The alternatives whose refit succeeded.
    variant_amplitudes : (V, M) ndarray
        Their amplitudes, one row per variant.
    skipped : tuple of str
        Alternatives left out, with the reason.
    elapsed_s : float
        Wall time of the refits, s.
    """

    names: tuple[str, ...]
    amplitudes: np.ndarray
    variants: tuple[ModelVariant, ...]
    variant_amplitudes: np.ndarray
    skipped: tuple[str, ...] = ()
    elapsed_s: float = 0.0

    @property
    def factors(self) -> tuple[str, ...]:
        """The factor of each variant (row of :attr:`variant_amplitudes`)."""
        return tuple(v.factor for v in self.variants)

    def amplitude_sd(self) -> np.ndarray:
        """Systematic SD of each member amplitude, (M,)."""
        from specproc.quantify.sums import systematic_sd

        return np.array([systematic_sd(self.amplitudes[i], self.variant_amplitudes[:, i],
                                       self.factors) for i in range(len(self.names))])

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON values: the variants, their amplitudes and the member SDs."""
        from specproc._json import to_jsonable

        sd = self.amplitude_sd()
        return to_jsonable({
            "method": "refits under alternative model choices, warm-started from the main "
                      "fit; per factor the RMS difference from the main fit, factors added "
                      "in quadrature (specproc.fit.sensitivity)",
            "variants": [{"factor": v.factor, "label": v.label, "changes": v.changes,
                          "basis_changes": v.basis_changes,
                          "amplitudes": dict(zip(self.names, row.tolist(), strict=True))}
                         for v, row in zip(self.variants, self.variant_amplitudes,
                                           strict=True)],
            "amplitude_model_sd": dict(zip(self.names, sd.tolist(), strict=True)),
            "skipped": list(self.skipped),
            "elapsed_s": self.elapsed_s,
        })


def model_sensitivity(scan: Any, basis: Any, fit: FitResult, *, config: Any = None,
                      options: SensitivitySettings | None = None) -> ModelSensitivity:
    """Refit a scan under the alternatives of :func:`model_variants`, warm-started.

    Parameters
    ----------
    scan : Scan
        The averaged FID the main fit was made on.
    basis : BasisSet
        Its basis.
    fit : FitResult
        The main fit (:func:`specproc.fit.fit_spectrum` of ``scan``, ``basis``, ``config``).
    config : None, FitSettings or mapping
        The configuration of the main fit: a whole configuration (its ``[fit]`` and
        ``[uncertainty]`` tables are used, and its ``[relaxation]`` overrides reach the
        refits), or the ``[fit]`` table or settings alone.
    options : SensitivitySettings, optional
        Default: from ``config``.

    Returns
    -------
    ModelSensitivity
        A refit that fails (a fit range outside the spectrum, a collapsed fit) is left out and
        named in ``skipped``.
    """
    from specproc.fit.fitter import fit_spectrum

    start = time.perf_counter()
    settings = settings_from_config(config)
    whole = dict(config) if isinstance(config, Mapping) and (
        "fit" in config or "uncertainty" in config) else None
    opts = options if options is not None else sensitivity_settings(
        None if whole is None else whole.get("uncertainty"))
    # one factor at a time: every other choice as in the main fit, the baseline penalty too
    base = settings.to_dict()
    base["max_iterations"] = opts.refit_evaluations
    if settings.baseline and np.isfinite(fit.baseline_penalty):
        base.update(baseline_auto=False, baseline_penalty=float(fit.baseline_penalty))
    if not opts.refine:
        base["fixed"] = list(FIXABLE)
    kept: list[ModelVariant] = []
    rows: list[np.ndarray] = []
    skipped: list[str] = []
    shape_members = _shape_members(basis, settings)
    # the definitions file is read once per scan, for the variant list and the bases alike
    tentative = _tentative_lines(basis, shape_members) if shape_members and opts.tentative \
        else {}
    for variant in model_variants(fit, settings, opts, basis, tentative):
        table = {**base, **variant.changes}
        if variant.basis_changes:
            table["fixed"] = list(FIXABLE)
        cfg = {**whole, "fit": table} if whole is not None else table
        alt = basis if not variant.basis_changes else alternative_mm_basis(
            basis, shape_members, tentative=tentative, **variant.basis_changes)
        try:
            refit = fit_spectrum(scan, alt, config=cfg, start=fit.nonlinear)
        except SpecprocError as exc:
            skipped.append(f"{variant.label}: {exc}")
            continue
        if any(f.startswith("collapsed:") for f in refit.flags) or tuple(refit.names) != tuple(
                fit.names):
            skipped.append(f"{variant.label}: the refit collapsed")
            continue
        kept.append(variant)
        rows.append(np.asarray(refit.amplitudes, dtype=float))  # same members, same order
    amps = np.array(rows).reshape(len(rows), len(fit.names))
    return ModelSensitivity(names=tuple(fit.names), amplitudes=np.asarray(fit.amplitudes).copy(),
                            variants=tuple(kept), variant_amplitudes=amps,
                            skipped=tuple(skipped), elapsed_s=time.perf_counter() - start)

