"""The basis protocol of a scan: the one definition used by fit, batch, demo and phantom.

A :class:`Protocol` holds everything a simulated basis depends on: sequence, field strength,
echo time, the sequence's sub-timings, dwell time, number of points, receiver centre, the
members and whether the macromolecule components are added. :func:`resolve_protocol` builds
it from a :class:`~specproc.data.Scan` and the user's choices.

Sub-timings
-----------
Only the timing the sequence needs is resolved:

* PRESS: the first echo time ``te1_s`` (the second is ``te - te1``);
* STEAM: the mixing time ``tm_s``;
* semi-LASER: the five inter-pulse delays ``delays_s`` (excitation to echo).

Each is taken from the first of these that gives it, and the protocol records where it came
from (:attr:`Protocol.timing_sources`):

1. ``"option"``: the command line (``specproc fit --te1-ms/--tm-ms/--delays-ms``);
2. ``"manifest"``: the cohort manifest (columns ``te1_ms``, ``tm_ms``, ``delays_ms``);
3. ``"config"``: the ``[protocol]`` table of the configuration;
4. ``"header"``: the scan's header (NIfTI-MRS ``MixingTime``, or the user key
   ``specproc_timings`` read into :attr:`specproc.data.Scan.timings`);
5. an assumption: ``"assumed: TE1 = TE/2"`` (PRESS, symmetric), ``"assumed: d = (TE/8, TE/4,
   TE/4, TE/4, TE/8)"`` (semi-LASER). STEAM has no default: without TM it is an error.

The NIfTI-MRS user key is ``"specproc_timings": {"Value": {"te1_s": ..., "tm_s": ...,
"delays_s": [...]}, "Description": "..."}`` (only the relevant members present).

Macromolecules
--------------
Unless chosen explicitly, the macromolecule and lipid components are added to every tissue
scan, at every TE, and never for a phantom (:data:`PHANTOM_RULE`). At short TE they are large
(common practice). At long TE they are small but not gone: a macromolecule T2 of 20-40 ms
(from memory) leaves a few per cent of the TE-30 signal at TE 144, and lipids relax more
slowly; left out of the basis, that residual goes into the metabolites beside it (on the
validation corpus at TE 144: mI/tCr −6.5 % and the lactate bounds too small, see
benchmarks/validation/README.md). With non-negative amplitudes the components cost little where
nothing is left (model choice, 2026-12-03; before it they were added only below TE 60 ms).

Phantoms
--------
A scan is of a phantom when its caller says so (manifest column ``kind = phantom``,
``specproc fit --phantom``, ``specproc phantom``); :attr:`Protocol.phantom` carries it to the
analysis. Besides the basis without macromolecules, a phantom is fitted with one expected
Lorentzian width for every metabolite (:data:`PHANTOM_WIDTH_RULE`): the relaxation table holds
tissue T2, whose differences (e.g. NAA about 0.25 s against creatine about 0.15 s at 3 T) do
not exist in a solution, where every metabolite relaxes slowly (T2 of several hundred ms) and
the line widths are set by the field inhomogeneity shared by all of them.
The macromolecule model is the parametrised components of ``macromolecules.toml`` unless a
measured macromolecule spectrum is given (:mod:`specproc.mmspectrum`; Cudalbu et al., NMR
Biomed 2021;34:e4393). Its file ``mm_spectrum`` and the choice ``mm_keep_lipids`` (keep the
lipid components beside it) are taken, each, from the first of ``"option"`` (``specproc fit
--mm-spectrum/--keep-lipids``), ``"manifest"`` (column ``mm_spectrum``) and ``"config"``
(``[protocol] mm_spectrum``, ``mm_keep_lipids``) that gives it: the precedence of the
sub-timings (:func:`_first_given`), without a header source. The value ``"none"`` (or an empty
configuration string) means the parametrised components. The measured spectrum replaces them
wherever the protocol includes macromolecules (the rule above, or the user's choice); it is
checked against the scan's nucleus, field and TE when the protocol is resolved
(:func:`specproc.mmspectrum.check_mm_spectrum`), and its content hash is part of
:meth:`Protocol.key`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from specproc.errors import InvalidInputError

__all__ = [
    "FIELD_TOLERANCE",
    "MACROMOLECULE_RULE",
    "MM_KEYS",
    "MM_MEMBER",
    "PHANTOM_RULE",
    "PHANTOM_WIDTH_RULE",
    "TIMINGS_HEADER_KEY",
    "TIMING_KEYS",
    "Protocol",
    "parse_timings",
    "phantom_fit_config",
    "resolve_protocol",
    "simulated_members",
]

#: The macromolecule rule in words (for reports and help texts).
MACROMOLECULE_RULE = "included in tissue at every TE (model choice; see specproc.protocol)"

#: The rule for a phantom (a solution holds no macromolecules).
PHANTOM_RULE = "none in a phantom (a solution holds no macromolecules)"

#: The line-width rule for a phantom (the fit's ``width_prior`` becomes ``"none"``).
PHANTOM_WIDTH_RULE = (
    "phantom: one expected Lorentzian width for every metabolite (width_prior \"none\"; the "
    "relaxation table's T2 differences are those of tissue, not of a solution)"
)
#: Relative difference of spectrometer frequency above which a basis or a measured
#: macromolecule spectrum does not belong to a scan (a 3 T basis on a 2.89 T scan is fine;
#: common practice: within a few per cent).
FIELD_TOLERANCE = 0.03

#: Keys of the macromolecule model in the option, manifest and ``[protocol]`` layers.
MM_KEYS: tuple[str, ...] = ("mm_spectrum", "mm_keep_lipids")

#: Name of the measured macromolecule member of a basis (:mod:`specproc.mmspectrum`; the
#: ``MM`` prefix puts it among the macromolecule patterns of the fit settings).
MM_MEMBER = "MMmeasured"

#: NIfTI-MRS header user key holding the sub-timings.
TIMINGS_HEADER_KEY = "specproc_timings"

#: The sub-timing each sequence needs.
TIMING_KEYS: Mapping[str, str] = {"press": "te1_s", "steam": "tm_s", "semi-laser": "delays_s"}

_ASSUMED = {
    "te1_s": "assumed: TE1 = TE/2",
    "delays_s": "assumed: d = (TE/8, TE/4, TE/4, TE/4, TE/8)",
}
_SOURCES = ("option", "manifest", "config", "header")


def _first_given(layers: Mapping[str, Mapping[str, Any]], key: str
                 ) -> tuple[Any, str] | None:
    """The value of ``key`` from the first layer of :data:`_SOURCES` order that gives it, and
    that layer's name (the one precedence of every protocol choice); ``None`` when none does."""
    for source in _SOURCES:
        layer = layers.get(source) or {}
        if key in layer:
            return layer[key], source
    return None


def _time(value: Any, what: str, where: Any) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{what} is not a number: {value!r}", where) from None
    if not math.isfinite(number) or number < 0:
        raise InvalidInputError(f"{what} must be a non-negative time, got {value!r}", where)
    return number


def parse_timings(raw: Mapping[str, Any] | None, *, where: Any = None,
                  what: str = "timings") -> dict[str, Any]:
    """Checked sub-timings (``te1_s``, ``tm_s`` s; ``delays_s`` tuple of s) from a mapping.

    ``None`` values, a zero ``te1_s``/``tm_s`` and an empty ``delays_s`` mean "not given" (the
    convention of the configuration file, where TOML has no null) and are left out.

    Raises
    ------
    InvalidInputError
        For an unknown key, a value that is not a non-negative time, or delays that are not a
        list of numbers.
    """
    out: dict[str, Any] = {}
    if not raw:
        return out
    if not isinstance(raw, Mapping):
        raise InvalidInputError(f"{what} must be a table, got {raw!r}", where)
    unknown = sorted(set(raw) - {"te1_s", "tm_s", "delays_s"})
    if unknown:
        raise InvalidInputError(
            f"unknown {what} {unknown} (known: te1_s, tm_s, delays_s)", where)
    for key in ("te1_s", "tm_s"):
        value = raw.get(key)
        if value is not None:
            number = _time(value, f"{what} {key}", where)
            if number > 0:
                out[key] = number
    delays = raw.get("delays_s")
    if delays is not None:
        if isinstance(delays, str | bytes) or not isinstance(delays, Sequence):
            raise InvalidInputError(f"{what} delays_s must be a list of times, got {delays!r}",
                                    where)
        if len(delays):
            out["delays_s"] = tuple(_time(d, f"{what} delays_s", where) for d in delays)
    return out


@dataclass(frozen=True)
class Protocol:
    """The simulation inputs of a scan's basis (what :func:`specproc.basis.simulate_basis` takes).

    Attributes
    ----------
    sequence : str
        Normalised sequence name.
    field_t : float
        Field strength, T (rounded to 0.1 mT so that scans of one scanner share a basis).
    te_s : float or None
        Echo time, s (``None`` for pulse-acquire).
    dwell_s : float
        Sampling interval, s.
    n_points : int
        Number of time-domain points.
    centre_ppm : float
        Shift at the receiver centre, ppm.
    metabolites : tuple of str or None
        Basis members (``None``: every metabolite definition).
    macromolecules : bool
        Whether the macromolecule components are added.
    te1_s : float or None
        PRESS first echo time, s (TE2 = TE - TE1).
    tm_s : float or None
        STEAM mixing time, s.
    delays_s : tuple of float or None
        semi-LASER inter-pulse delays d1..d5, s.
    timing_sources : mapping of str to str
        Where each resolved sub-timing came from: ``"option"``, ``"manifest"``, ``"config"``,
        ``"header"`` or ``"assumed: ..."`` (keys ``te1_s``, ``tm_s``, ``delays_s``).
    macromolecule_source : str
        ``"chosen"`` or the rule (:data:`MACROMOLECULE_RULE`).
    phantom : bool
        The scan is of a phantom (see the module docstring). Not a simulation input: it does
        not change the basis key, only how the analysis fits (:data:`PHANTOM_WIDTH_RULE`).
    mm_spectrum : str or None
        The measured macromolecule spectrum replacing the parametrised components (a path),
        or ``None``: the parametrised components (when ``macromolecules``).
    mm_spectrum_sha256 : str or None
        Its content hash (part of :meth:`key`).
    mm_keep_lipids : bool
        With a measured spectrum, keep the lipid components of the basis too.
    mm_sources : mapping of str to str
        Where ``mm_spectrum`` and ``mm_keep_lipids`` came from (``"option"``, ``"manifest"``,
        ``"config"``); empty for the defaults.
    mm_unused : str or None
        The file name of a measured spectrum that was given but not used, because the
        protocol has no macromolecules (phantom, or ``macromolecules=False``).
    """

    sequence: str
    field_t: float
    te_s: float | None
    dwell_s: float
    n_points: int
    centre_ppm: float
    metabolites: tuple[str, ...] | None = None
    macromolecules: bool = False
    te1_s: float | None = None
    tm_s: float | None = None
    delays_s: tuple[float, ...] | None = None
    timing_sources: Mapping[str, str] = field(default_factory=dict)
    macromolecule_source: str = MACROMOLECULE_RULE
    phantom: bool = False
    mm_spectrum: str | None = None
    mm_spectrum_sha256: str | None = None
    mm_keep_lipids: bool = False
    mm_sources: Mapping[str, str] = field(default_factory=dict)
    mm_unused: str | None = None

    def _inputs(self) -> dict[str, Any]:
        return {**self._simulated(), **({} if self.mm_spectrum is None else {
            "mm_spectrum_sha256": self.mm_spectrum_sha256,
            "mm_keep_lipids": self.mm_keep_lipids})}

    def _simulated(self) -> dict[str, Any]:
        return {
            "sequence": self.sequence, "field_t": self.field_t, "te_s": self.te_s,
            "te1_s": self.te1_s, "tm_s": self.tm_s,
            "delays_s": None if self.delays_s is None else list(self.delays_s),
            "dwell_s": self.dwell_s, "n_points": self.n_points, "centre_ppm": self.centre_ppm,
            "metabolites": None if self.metabolites is None else list(self.metabolites),
            "macromolecules": self.macromolecules,
        }

    def simulation_args(self) -> dict[str, Any]:
        """Keyword arguments of :func:`specproc.basis.simulate_basis` (``None`` left out).

        With a measured macromolecule spectrum only the lipid components are simulated among
        the macromolecules (when kept): see :meth:`simulate`."""
        args = {k: v for k, v in self._simulated().items() if v is not None}
        if self.mm_spectrum is not None:
            args["macromolecules"] = self.mm_keep_lipids
        return args

    def mm_model(self) -> dict[str, Any]:
        """The macromolecule model, for results: ``model`` (``"none"``, ``"parametrised"`` or
        ``"measured"``) and, for a measured spectrum, its file name (no folder), SHA-256,
        whether the lipids were kept and where each choice came from."""
        if not self.macromolecules:
            return {"model": "none", **({"unused_file": self.mm_unused}
                                        if self.mm_unused else {})}
        if self.mm_spectrum is None:
            return {"model": "parametrised"}
        return {"model": "measured", "file": Path(self.mm_spectrum).name,
                "sha256": self.mm_spectrum_sha256, "lipids_kept": self.mm_keep_lipids,
                "sources": dict(self.mm_sources)}

    def mm_text(self) -> str:
        """The macromolecule model in words (reports, the command line)."""
        model = self.mm_model()
        if model["model"] == "none":
            return "none" + (f" (the given spectrum {self.mm_unused} was not used)"
                             if self.mm_unused else "")
        if model["model"] == "parametrised":
            return "parametrised components (macromolecules.toml)"
        lipids = "; lipid components kept" if self.mm_keep_lipids else ""
        source = self.mm_sources.get("mm_spectrum", "")
        return (f"measured spectrum {model['file']} (sha256 {str(model['sha256'])[:12]}, "
                f"from the {source}{lipids})")

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-able dict (for fit.json): the inputs and where the timings came from."""
        inputs = self._inputs()
        inputs.pop("mm_spectrum_sha256", None)
        inputs.pop("mm_keep_lipids", None)
        return {**inputs, "timing_sources": dict(self.timing_sources),
                "macromolecule_source": self.macromolecule_source,
                "phantom": self.phantom, "mm_model": self.mm_model()}

    def key(self) -> str:
        """Short content hash of the protocol, the specproc and engine versions and the
        definition files: equal keys simulate equal bases."""
        from specproc import __version__
        from specproc._hash import json_sha256
        from specproc.basis import ENGINE_VERSION
        from specproc.spins.systems import definitions_hash

        return json_sha256({"protocol": self._inputs(), "version": __version__,
                            "engine": ENGINE_VERSION, "definitions": definitions_hash()})[:20]

    def simulate(self, *, cache: bool = True, progress: Any = False) -> Any:
        """The basis of this protocol (:func:`specproc.basis.simulate_basis`, cached); with a
        measured macromolecule spectrum, the simulated members (and lipids when kept) plus the
        measured member (:func:`specproc.mmspectrum.with_measured_mm`)."""
        from specproc.basis import simulate_basis

        basis = simulate_basis(**self.simulation_args(), cache=cache, progress=progress)
        if self.mm_spectrum is None:
            return basis
        from specproc.mmspectrum import load_mm_spectrum, with_measured_mm

        mm = load_mm_spectrum(self.mm_spectrum, sha256=self.mm_spectrum_sha256)
        return with_measured_mm(basis, mm, keep_lipids=self.mm_keep_lipids)

    def timing_text(self) -> str:
        """The sub-timing used and its source, in words (empty when the sequence has none)."""
        key = TIMING_KEYS.get(self.sequence)
        if key is None:
            return ""
        value = getattr(self, key)
        source = self.timing_sources.get(key, "")
        if key == "delays_s":
            shown = "(" + ", ".join(f"{d * 1e3:g}" for d in value) + ") ms"
            return f"semi-LASER delays {shown} ({source})"
        if key == "te1_s":
            te2 = (self.te_s or 0.0) - value
            return f"TE1 {value * 1e3:g} ms, TE2 {te2 * 1e3:g} ms ({source})"
        return f"TM {value * 1e3:g} ms ({source})"


def phantom_fit_config(config: Mapping[str, Any]) -> tuple[dict[str, Any], str]:
    """The configuration a phantom is fitted with, and the note that says what changed.

    A phantom's metabolites share one expected Lorentzian width: the ``[fit] width_prior`` of
    ``"relaxation"`` (widths 1/(π T2) from the tissue relaxation table) becomes ``"none"``
    (:data:`PHANTOM_WIDTH_RULE`); every other setting is kept.

    Parameters
    ----------
    config : mapping
        A full (merged) configuration.

    Returns
    -------
    config : dict
        A copy with the phantom's fit setting (the input is not changed).
    note : str
        :data:`PHANTOM_WIDTH_RULE` when the width prior was changed, else ``""``.
    """
    out = dict(config)
    fit = dict(out.get("fit") or {})
    if fit.get("width_prior", "relaxation") == "none":
        return out, ""
    fit["width_prior"] = "none"
    out["fit"] = fit
    return out, PHANTOM_WIDTH_RULE


def _header_timings(scan: Any) -> dict[str, Any]:
    out = dict(getattr(scan, "timings", None) or {})
    if getattr(scan, "tm_s", None) is not None:
        out.setdefault("tm_s", scan.tm_s)
    return parse_timings(out, where=getattr(scan, "source", None), what="header timings")


def simulated_members(config: Mapping[str, Any] | None) -> list[str] | None:
    """The members to simulate that ``[fit] members`` of a configuration names (``None``: not
    set, every default metabolite). The measured macromolecule member :data:`MM_MEMBER` may be
    named there to be fitted; it is added to the basis, not simulated, and so left out."""
    members = [str(m) for m in ((config or {}).get("fit") or {}).get("members") or []
               if str(m).lower() != MM_MEMBER.lower()]
    return members or None


def _split_mm(table: Mapping[str, Any] | None
              ) -> tuple[dict[str, Any] | None, dict[str, Any]]:
    """A layer split into its sub-timings and its macromolecule keys (``None`` values and an
    empty path dropped: "not given")."""
    if not table or not isinstance(table, Mapping):
        return table, {}  # type: ignore[return-value]
    timings = {k: v for k, v in table.items() if k not in MM_KEYS}
    mm = {k: table[k] for k in MM_KEYS
          if k in table and table[k] is not None and table[k] != ""}
    return timings, mm


def _resolve_mm(layers: Mapping[str, Mapping[str, Any]], scan: Any, te_s: float | None,
                macromolecules: bool) -> dict[str, Any]:
    """The macromolecule-model fields of a :class:`Protocol` (read and checked file)."""
    spectrum = _first_given(layers, "mm_spectrum")
    lipids = _first_given(layers, "mm_keep_lipids")
    sources: dict[str, str] = {}
    keep = False
    if lipids is not None:
        value, sources["mm_keep_lipids"] = lipids
        if not isinstance(value, bool):
            raise InvalidInputError(f"mm_keep_lipids must be true or false, got {value!r}")
        keep = value
    if spectrum is None:
        return {}
    value, source = spectrum
    if not isinstance(value, str | os.PathLike):
        raise InvalidInputError(f"mm_spectrum must be a file name, got {value!r}")
    if str(value).strip().lower() == "none":
        return {}
    if not macromolecules:  # said in the results: a spectrum given for nothing
        return {"mm_unused": Path(value).name}
    from specproc.mmspectrum import check_mm_spectrum, load_mm_spectrum

    mm = load_mm_spectrum(value)
    check_mm_spectrum(mm, spectrometer_mhz=scan.spectrometer_mhz, te_s=te_s,
                      nucleus=scan.nucleus)
    sources["mm_spectrum"] = source
    return {"mm_spectrum": str(Path(value).resolve()), "mm_spectrum_sha256": mm.sha256,
            "mm_keep_lipids": keep, "mm_sources": sources}


def resolve_protocol(
    scan: Any,
    *,
    sequence: str | None = None,
    field_t: float | None = None,
    te_s: float | None = None,
    option: Mapping[str, Any] | None = None,
    manifest: Mapping[str, Any] | None = None,
    config: Mapping[str, Any] | None = None,
    metabolites: Sequence[str] | None = None,
    macromolecules: bool | None = None,
    phantom: bool = False,
) -> Protocol:
    """The basis protocol of a scan.

    Parameters
    ----------
    scan : Scan
        Gives the field, sequence, TE, dwell time, number of points, receiver centre and, in
        its header, the sub-timings.
    sequence, field_t, te_s : optional
        Overrides of the scan's sequence, field (T) and echo time (s).
    option, manifest : mapping, optional
        Sub-timings (``te1_s``, ``tm_s``, ``delays_s``) from the command line and from the
        manifest. An option the sequence has no use for is an error; a manifest or
        configuration value that does not apply is ignored (one table serves every sequence).
        They may also hold the macromolecule model (:data:`MM_KEYS`: ``mm_spectrum``, a path
        or ``"none"``; ``mm_keep_lipids``, a bool; ``None`` values mean "not given").
    config : mapping, optional
        The full configuration (its ``[protocol]`` table is read) or ``None``. A relative
        ``mm_spectrum`` there is relative to the working directory.
    metabolites : sequence of str, optional
        Members (default: ``[fit] members`` of ``config`` when not empty, else all).
    macromolecules : bool, optional
        Add the macromolecule components (default: the rule, :data:`MACROMOLECULE_RULE`).
    phantom : bool
        The scan is of a phantom: no macromolecules unless ``macromolecules`` says so, and
        :attr:`Protocol.phantom` set (one expected width for every metabolite in the fit).

    Raises
    ------
    InvalidInputError
        When the sequence, TE (TM for STEAM) is unknown, for a bad timing, or for a measured
        macromolecule spectrum that cannot be read or does not belong to the scan.
    """
    from specproc.constants import field_from_larmor
    from specproc.spins.sequences import normalise_sequence_name

    where = getattr(scan, "source", None)
    name = sequence or scan.sequence
    if not name and "DIM_EDIT" in tuple(getattr(scan, "dims", ())):
        # J-difference edited data: a header name such as "MEGA-PRESS" is no plain
        # localisation name; the localisation is PRESS (specproc.edited) unless it says LASER
        header_name = str((getattr(scan, "header", None) or {}).get("SequenceName") or "")
        name = None if "laser" in header_name.lower() else "press"
    if not name:
        raise InvalidInputError(
            "the scan does not say which sequence acquired it; name it with --sequence or a "
            "manifest column (pulse-acquire, spin-echo, press, steam, semi-laser)", where)
    try:
        seq = normalise_sequence_name(name)
    except InvalidInputError as exc:
        raise InvalidInputError(
            f"{exc.message}; name the sequence with --sequence to override", where) from None
    if field_t is None:
        field_t = field_from_larmor(scan.spectrometer_mhz, scan.nucleus)
    elif not field_t > 0:
        raise InvalidInputError(f"the field strength must be positive, got {field_t:g} T")
    te = scan.te_s if te_s is None else float(te_s)
    cfg_table = (config or {}).get("protocol") if config is not None else None
    option, mm_option = _split_mm(option)
    manifest, mm_manifest = _split_mm(manifest)
    cfg_timings, mm_config = _split_mm(cfg_table)
    layers = {
        "option": parse_timings(option, what="option"),
        "manifest": parse_timings(manifest, where=where, what="manifest timings"),
        "config": parse_timings(cfg_timings, what="configuration [protocol]"),
        "header": _header_timings(scan),
    }
    key = TIMING_KEYS.get(seq)
    unused = sorted(k for k in layers["option"] if k != key)
    if unused:  # an explicit option that the sequence cannot use is a mistake, not a default
        names = {"te1_s": "TE1 (PRESS)", "tm_s": "TM (STEAM)", "delays_s": "delays (semi-LASER)"}
        raise InvalidInputError(
            f"{', '.join(names[k] for k in unused)} given, but the scan's sequence is {seq}",
            where)
    timings: dict[str, Any] = {}
    sources: dict[str, str] = {}
    given = None if key is None else _first_given(layers, key)
    if key is not None and given is not None:
        timings[key], sources[key] = given
    if seq == "semi-laser" and "delays_s" not in timings and te is not None:
        timings["delays_s"] = (te / 8, te / 4, te / 4, te / 4, te / 8)
        sources["delays_s"] = _ASSUMED["delays_s"]
    if seq == "semi-laser" and te is None and "delays_s" in timings:
        te = float(sum(timings["delays_s"]))
    if seq != "pulse-acquire" and te is None:
        raise InvalidInputError(
            "the scan does not give its echo time (give --te, or a te_ms manifest column)", where)
    if seq == "pulse-acquire":
        te = None
    if seq == "press" and "te1_s" not in timings:
        timings["te1_s"] = te / 2
        sources["te1_s"] = _ASSUMED["te1_s"]
    if seq == "steam" and "tm_s" not in timings:
        raise InvalidInputError(
            "the scan does not give its STEAM mixing time (give --tm-ms, a tm_ms manifest "
            "column or [protocol] tm_s)", where)
    if metabolites is None and config is not None:
        metabolites = simulated_members(config)
    if macromolecules is None and phantom:
        macromolecules, mm_source = False, PHANTOM_RULE
    elif macromolecules is None:
        macromolecules, mm_source = True, MACROMOLECULE_RULE
    else:
        mm_source = "chosen"
    mm = _resolve_mm({"option": mm_option, "manifest": mm_manifest, "config": mm_config},
                     scan, te, bool(macromolecules))
    protocol = Protocol(
        sequence=seq, field_t=round(float(field_t), 4), te_s=te, dwell_s=float(scan.dwell_s),
        n_points=int(scan.n_points), centre_ppm=float(scan.reference_ppm),
        metabolites=None if metabolites is None else tuple(str(m) for m in metabolites),
        macromolecules=bool(macromolecules), te1_s=timings.get("te1_s"),
        tm_s=timings.get("tm_s"), delays_s=timings.get("delays_s"), timing_sources=sources,
        macromolecule_source=mm_source, phantom=bool(phantom), **mm,
    )
    from specproc.spins.sequences import build_sequence

    try:  # the timings must form the sequence (TE1 < TE, delays summing to TE ...)
        build_sequence(seq, te_s=protocol.te_s, te1_s=protocol.te1_s, tm_s=protocol.tm_s,
                       delays_s=protocol.delays_s)
    except InvalidInputError as exc:
        raise InvalidInputError(exc.message, where) from None
    return protocol
