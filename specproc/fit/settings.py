"""Settings of the linear-combination fit and their reading from the ``[fit]`` configuration table.

The defaults below are the ones written to the ``[fit]`` table of
``specproc/data/defaults.toml``; a user TOML overrides them key by key.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from specproc.errors import InvalidInputError

__all__ = ["FIXABLE", "WIDTH_PRIORS", "FitSettings", "MemberGroup", "settings_from_config"]

#: Centres of the per-metabolite Lorentzian widths (see :class:`FitSettings`).
WIDTH_PRIORS: tuple[str, ...] = ("relaxation", "none")

#: Families of nonlinear parameters that can be held at their starting values.
FIXABLE: tuple[str, ...] = (
    "phase0",
    "phase1",
    "gauss",
    "damping",
    "shift",
    "shift_dev",
    "damping_dev",
)


@dataclass(frozen=True)
class MemberGroup:
    """A named group of basis members sharing one damping or one shift.

    Attributes
    ----------
    name : str
        Group name (an identifier used in parameter names).
    members : tuple of str
        Patterns: a member name or shell-style pattern of names (case-insensitive; ``"*"``
        is every member, ``"MM*"`` the names starting with MM) or ``"kind:<kind>"`` (e.g.
        ``"kind:macromolecule"``). A member joins the first group, in order, with a matching
        pattern.
    """

    name: str
    members: tuple[str, ...]


@dataclass(frozen=True)
class FitSettings:
    """Options of :func:`specproc.fit.fit_spectrum`.

    Attributes
    ----------
    range_ppm : (float, float)
        Fit range, ppm (either order).
    noise_ppm : tuple of (float, float)
        Signal-free spectral regions used to estimate the noise SD, ppm; parts outside the
        spectrum are ignored; when fewer than 32 points remain, the outer 6 % of the spectrum on
        each side are used.
    noise_sd : float
        Known noise SD of the real (and of the imaginary) part of one spectral point; 0 means
        estimate it from ``noise_ppm``.
    baseline : bool
        Whether to fit the spline baseline.
    baseline_knot_ppm : float
        Knot spacing of the cubic B-spline baseline, ppm.
    baseline_penalty : float
        Roughness (second-difference) penalty weight, relative to the number of spectral points
        per baseline coefficient (see :func:`specproc.fit.baseline.penalty_scale`); used as
        given when ``baseline_auto`` is false.
    baseline_auto : bool
        Choose the penalty weight from the data: after the first refinement stage the weight in
        ``baseline_penalty_range`` (log grid) that minimises the unbiased risk estimate
        ``χ² + 2 · edf`` (Mallows' Cp with the measured noise; edf the effective number of
        linear parameters) is kept (see :func:`specproc.fit.baseline.choose_penalty`).
    baseline_penalty_range : (float, float)
        Smallest and largest weight considered by ``baseline_auto``.
    damping_groups, shift_groups : tuple of MemberGroup
        Members sharing one Lorentzian damping / one frequency shift (default: the
        macromolecules share one damping, the metabolites another; one shift for all).
    separate_damping : tuple of str
        Members (patterns as in :class:`MemberGroup`) that get a Lorentzian damping of their
        own, bounded by 0 and ``max_lorentz_hz``, instead of their damping group's (e.g.
        ``["kind:macromolecule"]``; default none: on the model's own data the extra freedom
        costs statistical efficiency, and on the validation corpus it gained nothing).
    separate_damping_sd_hz : float
        Prior SD of those dampings as a Lorentzian FWHM added to the member's own shape, Hz
        (a half-normal prior, the damping being >= 0); 0: none.
    shift_sd_hz : float
        Prior SD of the per-member deviation of a metabolite from its group's shift, Hz (0: no
        deviations).
    damping_sd_hz : float
        Prior SD of the per-member deviation of a metabolite from its group's Lorentzian width
        plus its expected width (see ``width_prior``), as a FWHM in Hz (the damping-rate
        parameter ``ddamping_<k>_per_s`` has SD ``π · damping_sd_hz`` s⁻¹); 0: none.
    width_prior : str
        Centre of the per-metabolite Lorentzian widths: ``"relaxation"`` adds to each
        metabolite its intrinsic width ``1 / (π T2)`` at the scan's field from the relaxation
        table (:func:`specproc.quantify.load_relaxation_times`), so the fitted group width is
        the broadening beyond T2 shared by all metabolites; ``"none"``: no expected
        differences (the deviations are centred on zero).
    mm_shift_sd_ppm : float
        Prior SD of the shift of each macromolecule member from its group's shift, ppm (0: no
        deviations).
    mm_amplitude_members : tuple of str
        Members (patterns as in :class:`MemberGroup`) whose amplitudes may be tied to one
        common level: the basis holds their expected relative sizes (the proton weights of
        ``macromolecules.toml``), and each deviation from the level has a prior SD of
        ``mm_amplitude_sd`` times the level (default: the ``MM*`` components, not the lipids).
    mm_amplitude_sd : float
        That relative SD (default 0.3: the relative sizes of the macromolecule peaks vary
        between subjects and studies by some tens of per cent, common practice); 0: the
        amplitudes are independent.
    shift_search_ppm : float
        Half-width of the coarse frequency search, ppm.
    shift_limit_ppm : float
        Bound on the group shifts, ppm (± around 0).
    start_lorentz_hz : float
        Starting (or, when fixed, the held) Lorentzian FWHM added to the basis, Hz.
    start_gauss_hz : float
        Starting (or held) Gaussian FWHM, Hz.
    max_lorentz_hz, max_gauss_hz : float
        Upper bounds of the Lorentzian and Gaussian FWHM, Hz.
    fixed : tuple of str
        Parameter families held at their starting values (see :data:`FIXABLE`).
    members : tuple of str
        Basis members to fit (empty: all members not of kind ``"water"``).
    max_iterations : int
        Maximum number of function evaluations of each refinement stage.
    """

    range_ppm: tuple[float, float] = (0.2, 4.2)
    noise_ppm: tuple[tuple[float, float], ...] = ((-3.0, -0.5), (9.5, 12.0))
    noise_sd: float = 0.0
    baseline: bool = True
    baseline_knot_ppm: float = 0.4
    baseline_penalty: float = 1.0
    baseline_auto: bool = True
    baseline_penalty_range: tuple[float, float] = (1e-2, 1e4)
    damping_groups: tuple[MemberGroup, ...] = (
        MemberGroup("macromolecules", ("kind:macromolecule",)),
        MemberGroup("metabolites", ("*",)),
    )
    shift_groups: tuple[MemberGroup, ...] = (MemberGroup("all", ("*",)),)
    separate_damping: tuple[str, ...] = ()
    separate_damping_sd_hz: float = 5.0
    shift_sd_hz: float = 1.0
    damping_sd_hz: float = 0.2
    width_prior: str = "relaxation"
    mm_shift_sd_ppm: float = 0.01
    mm_amplitude_members: tuple[str, ...] = ("MM*",)
    mm_amplitude_sd: float = 0.3
    shift_search_ppm: float = 0.15
    shift_limit_ppm: float = 0.25
    start_lorentz_hz: float = 3.0
    start_gauss_hz: float = 3.0
    max_lorentz_hz: float = 40.0
    max_gauss_hz: float = 40.0
    fixed: tuple[str, ...] = ()
    members: tuple[str, ...] = ()
    max_iterations: int = 200

    def __post_init__(self) -> None:
        lo, hi = sorted(float(v) for v in self.range_ppm)
        if not hi > lo:
            raise InvalidInputError(f"fit range_ppm {list(self.range_ppm)} is empty")
        object.__setattr__(self, "range_ppm", (lo, hi))
        regions = []
        for region in self.noise_ppm:
            if len(region) != 2:
                raise InvalidInputError(f"fit noise_ppm region {region!r} is not [low, high]")
            regions.append(tuple(sorted(float(v) for v in region)))
        object.__setattr__(self, "noise_ppm", tuple(regions))
        for name in ("noise_sd", "baseline_penalty", "shift_sd_hz", "damping_sd_hz",
                     "mm_shift_sd_ppm", "mm_amplitude_sd", "separate_damping_sd_hz",
                     "shift_search_ppm",
                     "shift_limit_ppm", "start_lorentz_hz",
                     "start_gauss_hz"):
            value = float(getattr(self, name))
            if not value >= 0:
                raise InvalidInputError(f"fit {name} must be >= 0, got {value}")
            object.__setattr__(self, name, value)
        for name in ("baseline_knot_ppm", "max_lorentz_hz", "max_gauss_hz"):
            value = float(getattr(self, name))
            if not value > 0:
                raise InvalidInputError(f"fit {name} must be > 0, got {value}")
            object.__setattr__(self, name, value)
        lo_p, hi_p = sorted(float(v) for v in self.baseline_penalty_range)
        if not (lo_p > 0 and hi_p >= lo_p):
            raise InvalidInputError(
                f"fit baseline_penalty_range {list(self.baseline_penalty_range)} must be two "
                "positive numbers"
            )
        object.__setattr__(self, "baseline_penalty_range", (lo_p, hi_p))
        if self.width_prior not in WIDTH_PRIORS:
            raise InvalidInputError(
                f"fit width_prior {self.width_prior!r} is not one of {', '.join(WIDTH_PRIORS)}"
            )
        if int(self.max_iterations) < 1:
            raise InvalidInputError("fit max_iterations must be >= 1")
        object.__setattr__(self, "max_iterations", int(self.max_iterations))
        bad = [f for f in self.fixed if f not in FIXABLE]
        if bad:
            raise InvalidInputError(
                f"fit fixed: unknown parameter families {bad}; valid: {', '.join(FIXABLE)}"
            )
        object.__setattr__(self, "fixed", tuple(self.fixed))
        object.__setattr__(self, "members", tuple(str(m) for m in self.members))
        for attr in ("separate_damping", "mm_amplitude_members"):
            object.__setattr__(self, attr, tuple(str(m) for m in getattr(self, attr)))
        for attr in ("damping_groups", "shift_groups"):
            groups = tuple(_as_group(g, attr) for g in getattr(self, attr))
            if not groups:
                raise InvalidInputError(f"fit {attr} is empty")
            names = [g.name for g in groups]
            if len(set(names)) != len(names):
                raise InvalidInputError(f"fit {attr}: repeated group names {names}")
            object.__setattr__(self, attr, groups)

    def to_dict(self) -> dict[str, Any]:
        """Plain (TOML/JSON-able) form, the layout of the ``[fit]`` table."""
        out = dataclasses.asdict(self)
        out["range_ppm"] = list(self.range_ppm)
        out["baseline_penalty_range"] = list(self.baseline_penalty_range)
        out["noise_ppm"] = [list(r) for r in self.noise_ppm]
        for attr in ("damping_groups", "shift_groups"):
            out[attr] = [{"name": g.name, "members": list(g.members)} for g in getattr(self, attr)]
        out["fixed"] = list(self.fixed)
        out["members"] = list(self.members)
        return out


def _as_group(value: Any, attr: str) -> MemberGroup:
    if isinstance(value, MemberGroup):
        return value
    if isinstance(value, Mapping) and set(value) == {"name", "members"}:
        name = str(value["name"])
        if not name.isidentifier():
            raise InvalidInputError(f"fit {attr}: group name {name!r} is not an identifier")
        members = value["members"]
        if isinstance(members, str) or not isinstance(members, Sequence):
            raise InvalidInputError(f"fit {attr}: members of {name!r} must be a list")
        return MemberGroup(name, tuple(str(m) for m in members))
    raise InvalidInputError(
        f"fit {attr}: each group must be a table with 'name' and 'members', got {value!r}"
    )


def settings_from_config(config: Any = None) -> FitSettings:
    """Build :class:`FitSettings` from ``None``, a FitSettings, or a configuration mapping.

    Parameters
    ----------
    config : None, FitSettings or mapping
        A whole configuration (its ``"fit"`` table is used) or the ``[fit]`` table itself.

    Raises
    ------
    InvalidInputError
        For unknown keys or bad values.
    """
    if config is None:
        return FitSettings()
    if isinstance(config, FitSettings):
        return config
    if not isinstance(config, Mapping):
        raise InvalidInputError(f"fit configuration must be a table, got {type(config).__name__}")
    table = config.get("fit", config) if "fit" in config else config
    if not isinstance(table, Mapping):
        raise InvalidInputError("the [fit] configuration entry must be a table")
    known = {f.name for f in dataclasses.fields(FitSettings)}
    unknown = sorted(set(table) - known)
    if unknown:
        raise InvalidInputError(
            f"unknown [fit] keys {unknown}; valid keys: {', '.join(sorted(known))}"
        )
    kwargs: dict[str, Any] = {}
    for key, value in table.items():
        if key in ("range_ppm", "fixed", "members", "baseline_penalty_range",
                   "separate_damping", "mm_amplitude_members"):
            value = tuple(value)
        elif key == "noise_ppm":
            value = tuple(tuple(r) for r in value)
        elif key in ("damping_groups", "shift_groups"):
            value = tuple(value)
        kwargs[key] = value
    try:
        return FitSettings(**kwargs)
    except (TypeError, ValueError) as exc:
        if isinstance(exc, InvalidInputError):
            raise
        raise InvalidInputError(f"bad [fit] configuration: {exc}") from None
