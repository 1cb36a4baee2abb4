"""Phantom validation: measured vs nominal concentrations, linearity, temperature, QA trends.

For each phantom scan: preprocess, fit with a basis of the phantom's compounds, turn the
amplitudes into concentrations (against the water signal or an internal reference compound),
compare them with the nominal contents (recovery), estimate the sample temperature from the
water-to-singlet shift difference, and record SNR and linewidth. Across scans: linearity of
measured against nominal concentrations (phantoms of different concentration) and trends of
linewidth, SNR and temperature over sessions.

Thermometry
-----------
The water proton shift falls with temperature while the shifts of methyl singlets such as
NAA (2.008 ppm) hardly move (temperature-independent to first order), so their difference
measures the temperature. With the water shift linear in temperature,
``δ_H2O(T) = δ_H2O(T_ref) + k · (T - T_ref)``, and the singlet at its fixed shift δ_S:

    Δ(T) = δ_H2O(T) - δ_S = Δ_ref + k · (T - T_ref)   =>   T = T_ref + (Δ - Δ_ref) / k

with, by default, ``k = -0.01 ppm/°C`` (the temperature coefficient of the water shift of
liquid water, about -0.0103 ppm/K in Hindman 1966 [1]; the rounded -0.01 ppm/°C is the value
commonly used in MRS thermometry; values from memory), ``T_ref = 37 °C``,
``δ_H2O(37 °C) = 4.65 ppm`` (common practice, the receiver-centre convention of specproc) and
``δ_NAA = 2.008 ppm`` (Govindaraju et al. 2000 [2]), so ``Δ_ref = 2.642 ppm`` and

    T = 37 °C - 100 °C/ppm · (δ_H2O - δ_NAA - 2.642 ppm).

All five numbers can be changed in the ``[thermometry]`` table of the nominal file (for
example to an in vivo calibration such as Cady et al. 1995 [3]). Peak positions are found on
the magnitude spectrum (zero-filled 8 times) by three-point parabolic interpolation; the
difference of the two positions does not depend on the frequency referencing.

Nominal file (TOML)
-------------------
::

    # contents of the phantom(s), concentrations in mM
    reference = "water"       # "water" (needs a water reference) or a compound name
    water_mm = 55510.0        # water concentration of the solution, mM (default pure water)

    [[phantom]]
    name = "low"
    files = ["*low*"]         # fnmatch patterns on the scan file name (default: every file)
    temperature_c = 21.0      # thermometer reading, optional
    concentrations_mm = { NAA = 5.0, Cr = 4.0 }

    [[phantom]]
    name = "high"
    files = ["*high*"]
    concentrations_mm = { NAA = 15.0, Cr = 12.0 }

    [relaxation]              # optional T1/T2 (s) of the phantom for the water reference
    water = { t1_s = 3.0, t2_s = 2.0 }
    NAA = { t1_s = 1.5, t2_s = 0.6 }

    [thermometry]             # optional: the defaults above
    singlet = "NAA"
    singlet_ppm = 2.008
    water_ppm_at_reference = 4.65
    reference_temperature_c = 37.0
    coefficient_ppm_per_c = -0.01

With one phantom the ``[[phantom]]`` table may be left out and ``concentrations_mm`` (and
``temperature_c``) written at the top level. A scan takes the first phantom whose patterns
match its file name.

Concentrations: with ``reference = "water"``,
``[M] = (A_M / R_M) / ((S_W / 2) / R_W) · water_mm``
(:func:`specproc.quantify.solution_concentration_mm`) where ``A_M`` is the fitted amplitude per
molecule, ``S_W`` the water signal at t = 0 (:func:`specproc.quantify.water_amplitude`; 2
protons), ``R = exp(-TE/T2)·(1 - exp(-TR/T1))`` when relaxation times are given (else 1); with
a reference compound X of nominal concentration ``[X]``: ``[M] = [X] · A_M / A_X``.

References
----------
.. [1] Hindman JC. Proton resonance shift of water in the gas and liquid states. J Chem Phys
   1966;44:4582-4592.
.. [2] Govindaraju V, Young K, Maudsley AA. Proton NMR chemical shifts and coupling constants
   for brain metabolites. NMR Biomed 2000;13:129-153.
.. [3] Cady EB, D'Souza PC, Penrice J, Lorek A. The estimation of local brain temperature by in
   vivo 1H magnetic resonance spectroscopy. Magn Reson Med 1995;33:862-867.
"""

from __future__ import annotations

import copy
import fnmatch
import math
import os
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from specproc.constants import WATER_MOLAR_MM
from specproc.data import Scan
from specproc.errors import InvalidInputError

__all__ = [
    "NAA_SHIFT_PPM",
    "PLAUSIBLE_RECOVERY_PERCENT",
    "WATER_SHIFT_COEFFICIENT_PPM_PER_C",
    "WATER_SHIFT_REFERENCE_PPM",
    "NominalSpec",
    "PhantomContents",
    "PhantomMeasurement",
    "Thermometry",
    "analyse_phantom",
    "linearity",
    "load_nominal",
    "measure_peak_ppm",
    "temperature_from_shifts",
    "water_shift_at",
]

#: Temperature coefficient of the water shift, ppm/°C (Hindman 1966, about -0.0103 ppm/K;
#: rounded value commonly used in MRS thermometry; from memory).
WATER_SHIFT_COEFFICIENT_PPM_PER_C: float = -0.01
#: Water shift at 37 °C, ppm (common practice).
WATER_SHIFT_REFERENCE_PPM: float = 4.65
#: NAA methyl singlet, ppm (Govindaraju et al. 2000).
NAA_SHIFT_PPM: float = 2.008

_THERMO_KEYS = {"singlet", "singlet_ppm", "water_ppm_at_reference", "reference_temperature_c",
                "coefficient_ppm_per_c"}


@dataclass(frozen=True)
class Thermometry:
    """Calibration of the water-to-singlet thermometer (defaults: module docstring).

    Attributes
    ----------
    singlet : str
        Name of the temperature-independent singlet (``"NAA"``).
    singlet_ppm : float
        Its shift, ppm.
    water_ppm_at_reference : float
        Water shift at ``reference_temperature_c``, ppm.
    reference_temperature_c : float
        Reference temperature, °C.
    coefficient_ppm_per_c : float
        dδ_H2O/dT, ppm/°C (negative).
    """

    singlet: str = "NAA"
    singlet_ppm: float = NAA_SHIFT_PPM
    water_ppm_at_reference: float = WATER_SHIFT_REFERENCE_PPM
    reference_temperature_c: float = 37.0
    coefficient_ppm_per_c: float = WATER_SHIFT_COEFFICIENT_PPM_PER_C

    @property
    def difference_at_reference_ppm(self) -> float:
        """Δ_ref = δ_H2O(T_ref) - δ_S, ppm."""
        return self.water_ppm_at_reference - self.singlet_ppm

    def formula(self) -> str:
        """The formula with its numbers, as text."""
        return (f"T = {self.reference_temperature_c:g} C + (d_H2O - d_{self.singlet} - "
                f"{self.difference_at_reference_ppm:.4g} ppm) / ({self.coefficient_ppm_per_c:g}"
                " ppm/C)")


def water_shift_at(temperature_c: float, *, thermometry: Thermometry | None = None) -> float:
    """Water shift at a temperature, ppm: ``δ_ref + k (T - T_ref)``."""
    th = thermometry or Thermometry()
    return th.water_ppm_at_reference + th.coefficient_ppm_per_c * (
        float(temperature_c) - th.reference_temperature_c)


def temperature_from_shifts(water_ppm: float, singlet_ppm: float, *,
                            thermometry: Thermometry | None = None) -> float:
    """Sample temperature from the measured water and singlet shifts, °C.

    ``T = T_ref + ((δ_H2O - δ_S) - Δ_ref) / k`` (derivation in the module docstring).

    Examples
    --------
    >>> round(temperature_from_shifts(4.75, 2.008), 6)  # water 0.1 ppm up: 10 °C colder
    27.0
    """
    th = thermometry or Thermometry()
    if th.coefficient_ppm_per_c == 0:
        raise InvalidInputError("the water shift coefficient must not be zero")
    diff = float(water_ppm) - float(singlet_ppm)
    return th.reference_temperature_c + (diff - th.difference_at_reference_ppm) / (
        th.coefficient_ppm_per_c)


def measure_peak_ppm(scan: Scan, *, around_ppm: float, search_ppm: float,
                     zero_fill: int = 8) -> float:
    """Shift of the largest magnitude peak within ``around ± search`` ppm of an averaged FID.

    Three-point parabolic interpolation on the magnitude spectrum zero-filled ``zero_fill``
    times (:func:`specproc.preprocess.reference.locate_peak_ppm`).

    Raises
    ------
    InvalidInputError
        When no peak maximum lies inside the window.
    """
    from specproc.preprocess.reference import locate_peak_ppm

    if scan.dims != ():
        raise InvalidInputError("peak positions need one averaged FID", scan.source)
    n = scan.n_points * int(zero_fill)
    position, _ = locate_peak_ppm(np.abs(scan.spectrum(n)), scan.ppm(n), around_ppm=around_ppm,
                                  search_ppm=search_ppm)
    if not math.isfinite(position):
        raise InvalidInputError(
            f"no peak found within {around_ppm:g} ± {search_ppm:g} ppm", scan.source)
    return position


# ============================================================================ nominal file
@dataclass(frozen=True)
class PhantomContents:
    """One phantom of the nominal file.

    Attributes
    ----------
    name : str
        Label.
    files : tuple of str
        fnmatch patterns on scan file names (empty: every file).
    concentrations_mm : mapping of str to float
        Nominal concentration of each compound, mM.
    temperature_c : float or None
        Thermometer reading, °C.
    """

    name: str
    files: tuple[str, ...]
    concentrations_mm: Mapping[str, float]
    temperature_c: float | None = None

    def matches(self, path: str | os.PathLike[str]) -> bool:
        """Whether a scan file belongs to this phantom."""
        name = Path(path).name
        return not self.files or any(fnmatch.fnmatch(name, p) for p in self.files)


@dataclass(frozen=True)
class NominalSpec:
    """Content of a nominal file (format in the module docstring)."""

    phantoms: tuple[PhantomContents, ...]
    reference: str = "water"
    water_mm: float = WATER_MOLAR_MM
    relaxation: Mapping[str, Mapping[str, float]] = field(default_factory=dict)
    thermometry: Thermometry = field(default_factory=Thermometry)
    source: str = ""

    def phantom_for(self, path: str | os.PathLike[str]) -> PhantomContents:
        """The first phantom matching a scan file name."""
        for p in self.phantoms:
            if p.matches(path):
                return p
        raise InvalidInputError(
            f"no phantom of {self.source} matches this file name", path)

    @property
    def compounds(self) -> list[str]:
        """Every compound named, in first-seen order."""
        seen: dict[str, None] = {}
        for p in self.phantoms:
            for name in p.concentrations_mm:
                seen.setdefault(name, None)
        return list(seen)


def _positive_number(value: Any, what: str, where: Path, *, allow_zero: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InvalidInputError(f"{what} must be a number, got {value!r}", where)
    number = float(value)
    if not math.isfinite(number) or number < 0 or (number == 0 and not allow_zero):
        raise InvalidInputError(f"{what} must be a positive number, got {value!r}", where)
    return number


def _finite(value: Any, what: str, where: Path) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise InvalidInputError(f"{what} must be a finite number, got {value!r}", where)
    return float(value)


def _contents(raw: Mapping[str, Any], default_name: str, where: Path) -> PhantomContents:
    unknown = sorted(set(raw) - {"name", "files", "concentrations_mm", "temperature_c"})
    if unknown:
        raise InvalidInputError(f"unknown phantom key(s) {unknown}", where)
    conc = raw.get("concentrations_mm")
    if not isinstance(conc, Mapping) or not conc:
        raise InvalidInputError(
            f"phantom {raw.get('name', default_name)!r} needs a concentrations_mm table", where)
    values = {str(k): _positive_number(v, f"the concentration of {k}", where, allow_zero=True)
              for k, v in conc.items()}
    files = raw.get("files", [])
    if isinstance(files, str):
        files = [files]
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        raise InvalidInputError("files must be a list of file-name patterns", where)
    temp = raw.get("temperature_c")
    return PhantomContents(
        name=str(raw.get("name", default_name)), files=tuple(files), concentrations_mm=values,
        temperature_c=None if temp is None else _finite(temp, "temperature_c", where),
    )


def load_nominal(path: str | os.PathLike[str]) -> NominalSpec:
    """Read a nominal file (TOML, format in the module docstring).

    Raises
    ------
    InvalidInputError
        For a missing or malformed file, unknown keys, non-positive concentrations, or a
        reference compound that is not listed.
    """
    where = Path(path)
    try:
        raw = tomllib.loads(where.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InvalidInputError("the nominal file does not exist", where) from None
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InvalidInputError(f"not a valid TOML file: {exc}", where) from None
    known = {"reference", "water_mm", "phantom", "relaxation", "thermometry",
             "concentrations_mm", "temperature_c", "name", "files"}
    unknown = sorted(set(raw) - known)
    if unknown:
        raise InvalidInputError(f"unknown key(s) {unknown}; known: {sorted(known)}", where)
    if "phantom" in raw:
        if not isinstance(raw["phantom"], list) or not raw["phantom"]:
            raise InvalidInputError("[[phantom]] must be a list of tables", where)
        if "concentrations_mm" in raw:
            raise InvalidInputError(
                "give concentrations_mm either at the top level or in [[phantom]]", where)
        phantoms = tuple(_contents(p, f"phantom {i + 1}", where)
                         for i, p in enumerate(raw["phantom"]))
    else:
        top: dict[str, Any] = {k: raw[k] for k in ("name", "files", "concentrations_mm",
                                                   "temperature_c") if k in raw}
        phantoms = (_contents(top, "phantom", where),)
    reference = str(raw.get("reference", "water"))
    spec_compounds = {n.lower() for p in phantoms for n in p.concentrations_mm}
    if reference.lower() != "water":
        for p in phantoms:
            if reference.lower() not in {n.lower() for n in p.concentrations_mm}:
                raise InvalidInputError(
                    f"the reference compound {reference} is not listed in phantom {p.name}",
                    where)
            if not [v for n, v in p.concentrations_mm.items()
                    if n.lower() == reference.lower() and v > 0]:
                raise InvalidInputError(
                    f"the reference compound {reference} has zero concentration", where)
    relaxation: dict[str, dict[str, float]] = {}
    for name, entry in dict(raw.get("relaxation") or {}).items():
        if not isinstance(entry, Mapping) or set(entry) - {"t1_s", "t2_s"}:
            raise InvalidInputError(
                f"relaxation of {name} must be a table with t1_s and/or t2_s", where)
        if name.lower() != "water" and name.lower() not in spec_compounds:
            raise InvalidInputError(f"relaxation given for unlisted compound {name}", where)
        relaxation[name] = {k: _positive_number(v, f"{name} {k}", where)
                            for k, v in entry.items()}
    thermo_raw = dict(raw.get("thermometry") or {})
    bad = sorted(set(thermo_raw) - _THERMO_KEYS)
    if bad:
        raise InvalidInputError(f"unknown thermometry key(s) {bad}", where)
    thermo_args: dict[str, Any] = {}
    for k, v in thermo_raw.items():
        thermo_args[k] = str(v) if k == "singlet" else _finite(v, k, where)
    thermometry = Thermometry(**thermo_args)
    if thermometry.coefficient_ppm_per_c == 0:
        raise InvalidInputError("coefficient_ppm_per_c must not be zero", where)
    return NominalSpec(
        phantoms=phantoms, reference=reference,
        water_mm=_positive_number(raw.get("water_mm", WATER_MOLAR_MM), "water_mm", where),
        relaxation=relaxation, thermometry=thermometry, source=str(where),
    )


# ============================================================================ one scan
@dataclass(frozen=True)
class PhantomMeasurement:
    """Result of one phantom scan.

    Attributes
    ----------
    scan : str
        File name of the scan.
    phantom : str
        Name of the phantom it was matched to.
    session : str
        Session label (BIDS ``ses-`` entity of the file name, else the header acquisition
        time, else "").
    nominal_mm, measured_mm, recovery_percent, crlb_percent : dict of str to float
        Per compound.
    temperature_c : float
        Estimated sample temperature (NaN when a peak was not found).
    temperature_sd_c : float
        Its approximate SD, °C: the Cramér-Rao SD of the fitted frequency shift taken for each
        of the two peak positions, ``σ_T = √2 · σ_δ / |k|`` (NaN when not available).
    temperature_nominal_c : float or None
        Thermometer reading from the nominal file.
    water_ppm, singlet_ppm : float
        Measured shifts used for the temperature.
    snr, naa_fwhm_hz, water_fwhm_hz : float
        QC metrics (:mod:`specproc.qc`).
    notes : tuple of str
        What could not be computed, and why.
    """

    scan: str
    phantom: str
    session: str
    nominal_mm: dict[str, float]
    measured_mm: dict[str, float]
    recovery_percent: dict[str, float]
    crlb_percent: dict[str, float]
    temperature_c: float
    temperature_nominal_c: float | None
    water_ppm: float
    singlet_ppm: float
    snr: float
    naa_fwhm_hz: float
    water_fwhm_hz: float
    notes: tuple[str, ...] = ()
    temperature_sd_c: float = math.nan


#: Recoveries outside this range (%) get a warning: a wrong water content of the solution, a
#: water reference of another scan, or a compound the basis does not model (common practice).
PLAUSIBLE_RECOVERY_PERCENT: tuple[float, float] = (50.0, 200.0)


def _shift_sd_ppm(fit: Any) -> float:
    """Largest Cramér-Rao SD of the fitted group frequency shifts, ppm (NaN if none)."""
    sds = [float(v) for k, v in fit.nonlinear_sd.items()
           if k.startswith("shift_") and k.endswith("_hz") and math.isfinite(v)]
    return max(sds) / fit.spectrometer_mhz if sds else math.nan


def _session_label(scan: Scan, path: Path) -> str:
    match = re.search(r"(?:^|_)ses-([A-Za-z0-9]+)", path.name)
    if match:
        return match.group(1)
    start = scan.header.get("AcquisitionStartTime") if isinstance(scan.header, Mapping) else None
    return str(start) if start else ""


def _relax(entry: Mapping[str, float] | None, te_s: float | None, tr_s: float | None) -> float:
    if not entry:
        return 1.0
    from specproc.quantify import relaxation_factor

    if te_s is None or tr_s is None:
        raise InvalidInputError("relaxation corrections need the scan's TE and TR")
    return relaxation_factor(te_s=te_s, tr_s=tr_s, t1_s=entry.get("t1_s", math.inf),
                             t2_s=entry.get("t2_s", math.inf))


def analyse_phantom(
    scan_path: str | os.PathLike[str],
    nominal: NominalSpec,
    *,
    water_path: str | os.PathLike[str] | None = None,
    config: Mapping[str, Any] | None = None,
    basis: Any = None,
) -> PhantomMeasurement:
    """Measure one phantom scan against its nominal contents.

    Parameters
    ----------
    scan_path : path
        The phantom scan.
    nominal : NominalSpec
        Nominal contents (from :func:`load_nominal`).
    water_path : path, optional
        Water reference (needed for ``reference = "water"``; also used for thermometry).
    config : mapping, optional
        Configuration (``specproc.config.load_config``).
    basis : BasisSet, optional
        Basis; default simulated for the scan with the phantom's compounds.

    Returns
    -------
    PhantomMeasurement
    """
    from specproc.analysis import analyse_scan
    from specproc.config import merge_config
    from specproc.io import load
    from specproc.preprocess.pipeline import run_pipeline
    from specproc.protocol import resolve_protocol

    path = Path(scan_path)
    cfg = merge_config(dict(config or {}), source="configuration")
    phantom = nominal.phantom_for(path)
    scan = load(path)
    water = load(water_path) if water_path is not None else None
    if nominal.reference.lower() == "water" and water is None:
        raise InvalidInputError(
            "reference = 'water' needs a water reference scan (--water, or a *_mrsref file)",
            path)
    protocol = None
    if basis is None:
        protocol = resolve_protocol(scan, config=cfg, metabolites=list(phantom.concentrations_mm),
                                    phantom=True)
    result = analyse_scan(scan, water, basis=basis, protocol=protocol, config=cfg,
                          phantom=True)
    pre, fit = result.preprocessing, result.fit
    notes: list[str] = []
    amp = {n.lower(): float(a) for n, a in zip(fit.names, fit.amplitudes, strict=True)}
    crlb = {n.lower(): float(c) for n, c in zip(fit.names, fit.crlb_percent, strict=True)}
    measured: dict[str, float] = {}
    te, tr = pre.scan.te_s, pre.scan.tr_s
    relax = {k.lower(): v for k, v in nominal.relaxation.items()}
    if nominal.reference.lower() == "water":
        from specproc.quantify import solution_concentration_mm, water_amplitude

        s_w, _, _ = water_amplitude(pre.water)
        r_w = _relax(relax.get("water"), pre.water.te_s or te, pre.water.tr_s or tr)
        for name in phantom.concentrations_mm:
            if name.lower() not in amp:
                raise InvalidInputError(f"compound {name} is not a basis member", path)
            r_m = _relax(relax.get(name.lower()), te, tr)
            measured[name] = solution_concentration_mm(
                amp[name.lower()], s_w, metabolite_relaxation=r_m, water_relaxation=r_w,
                water_mm=nominal.water_mm)
        if not relax:
            notes.append("no relaxation times given: concentrations not relaxation-corrected")
    else:
        ref = next(n for n in phantom.concentrations_mm if n.lower() == nominal.reference.lower())
        a_ref = amp.get(ref.lower(), 0.0)
        if a_ref <= 0:
            raise InvalidInputError(f"the reference compound {ref} was not detected", path)
        for name in phantom.concentrations_mm:
            measured[name] = phantom.concentrations_mm[ref] * amp[name.lower()] / a_ref
    recovery = {n: (100.0 * measured[n] / v if v > 0 else math.nan)
                for n, v in phantom.concentrations_mm.items()}
    # the analysis' notes on its inputs; a phantom has no tissue fractions by design
    notes = [*(n for n in result.notes if "tissue fractions" not in n), *notes]
    low, high = PLAUSIBLE_RECOVERY_PERCENT
    odd = [f"{n} {r:.0f} %" for n, r in recovery.items() if math.isfinite(r)
           and not low <= r <= high]
    if odd:
        hint = (f"the water content of the solution (water_mm = {nominal.water_mm:g} mM) or the "
                "water reference" if nominal.reference.lower() == "water"
                else f"the nominal concentration of {nominal.reference}")
        notes.append(f"Implausible recovery ({', '.join(odd)}; expected {low:g}-{high:g} %): "
                     f"check {hint}.")

    # ---- thermometry (the difference of two shifts does not depend on referencing)
    th = nominal.thermometry
    water_scan = pre.water
    if water_scan is None:
        no_removal = copy.deepcopy(cfg)
        no_removal["preprocess"]["water_removal"]["enabled"] = False
        water_scan = run_pipeline(scan, config=no_removal).scan
    try:
        water_ppm = measure_peak_ppm(water_scan, around_ppm=th.water_ppm_at_reference,
                                     search_ppm=0.5)
        singlet_ppm = measure_peak_ppm(pre.scan, around_ppm=th.singlet_ppm, search_ppm=0.15)
        temperature = temperature_from_shifts(water_ppm, singlet_ppm, thermometry=th)
        temperature_sd = math.sqrt(2.0) * _shift_sd_ppm(fit) / abs(th.coefficient_ppm_per_c)
    except InvalidInputError as exc:
        water_ppm = singlet_ppm = temperature = temperature_sd = math.nan
        notes.append(f"temperature not estimated: {exc.message}")
    qc = result.qc
    return PhantomMeasurement(
        scan=path.name, phantom=phantom.name, session=_session_label(scan, path),
        nominal_mm=dict(phantom.concentrations_mm), measured_mm=measured,
        recovery_percent=recovery,
        crlb_percent={n: crlb.get(n.lower(), math.nan) for n in phantom.concentrations_mm},
        temperature_c=float(temperature), temperature_nominal_c=phantom.temperature_c,
        water_ppm=float(water_ppm), singlet_ppm=float(singlet_ppm), snr=float(qc.snr),
        naa_fwhm_hz=float(qc.naa_fwhm_hz), water_fwhm_hz=float(qc.water_fwhm_hz),
        notes=tuple(notes), temperature_sd_c=float(temperature_sd),
    )


# ============================================================================ across scans
def linearity(measurements: Sequence[PhantomMeasurement]) -> dict[str, dict[str, float]]:
    """Measured against nominal concentration per compound (``scipy.stats.linregress``).

    Returns
    -------
    dict
        Compound -> ``slope``, ``intercept_mm``, ``r_squared``, ``n`` (NaN values when fewer
        than 3 scans or fewer than 2 distinct nominal concentrations).
    """
    from scipy.stats import linregress

    out: dict[str, dict[str, float]] = {}
    names: dict[str, None] = {}
    for m in measurements:
        for n in m.nominal_mm:
            names.setdefault(n, None)
    for name in names:
        pairs = [(m.nominal_mm[name], m.measured_mm[name]) for m in measurements
                 if name in m.nominal_mm and math.isfinite(m.measured_mm.get(name, math.nan))]
        x = np.array([p[0] for p in pairs], dtype=float)
        y = np.array([p[1] for p in pairs], dtype=float)
        if len(pairs) >= 3 and np.unique(x).size >= 2:
            res = linregress(x, y)
            out[name] = {"slope": float(res.slope), "intercept_mm": float(res.intercept),
                         "r_squared": float(res.rvalue**2), "n": len(pairs)}
        else:
            out[name] = {"slope": math.nan, "intercept_mm": math.nan, "r_squared": math.nan,
                         "n": len(pairs)}
    return out
