"""Localisation sequences as lists of ideal pulses, free-precession delays and pathway filters.

Every sequence is a :class:`Sequence`: a tuple of events, each a :class:`Pulse` (ideal,
instantaneous, non-selective rotation of any flip angle and phase) or a :class:`Delay` (free
precession under the full Hamiltonian). A pulse carries the coherence order ``keep`` that the
crusher gradients / phase cycle of the real sequence let through after it; every other order
is removed (Levitt, *Spin Dynamics*, 2nd ed. 2008, ch. 11; Keeler, *Understanding NMR
Spectroscopy*, 2nd ed. 2010, ch. 11, coherence-transfer pathways). The signal is the p = -1
coherence at the end of the last delay (the echo top), acquired from there on.

Coherence pathways and timings (all pulses ideal; times are between pulse centres)

* ``pulse-acquire``: 90° — acquire. Pathway 0 → -1.
* ``spin-echo``: 90° — TE/2 — 180° — TE/2 — echo. Pathway 0 → +1 → -1.
* ``press``: 90° — TE1/2 — 180° — TE1/2 + TE2/2 — 180° — TE2/2 — echo, TE = TE1 + TE2
  (Bottomley, US patent 4,480,228, 1984; Ann N Y Acad Sci 1987;508:333-348). Pathway
  0 → -1 → +1 → -1. Default TE1 = TE2 = TE/2.
* ``steam``: 90° — TE/2 — 90° — TM — 90° — TE/2 — echo (Frahm et al., J Magn Reson
  1987;72:502-508). Pathway 0 → +1 → 0 (populations and zero-quantum coherences during TM,
  which crushers do not remove) → -1: the stimulated echo, half the magnetisation of a spin
  echo.
* ``semi-laser``: 90° — d1 — 180° — d2 — 180° — d3 — 180° — d4 — 180° — d5 — echo, four
  refocusing pulses standing for the two pairs of adiabatic pulses (Scheenen et al., Magn Reson
  Med 2008;59:1-6), here ideal. Pathway 0 → -1 → +1 → -1 → +1 → -1. The default timing derived
  from TE spaces the refocusing pulses evenly (a CPMG-like train):
  ``d = (TE/8, TE/4, TE/4, TE/4, TE/8)``. Given delays must sum to TE (when TE is given) and
  refocus the chemical shift: ``d2 + d4 = d1 + d3 + d5``.

Pulse phases are 90°(y) for excitation and 180°(x) / 90°(x) for the later pulses; the
simulation then sets the receiver phase so that an on-resonance singlet gives a real, positive
echo (see :mod:`specproc.spins.simulate`).
"""

from __future__ import annotations

from collections.abc import Mapping
from collections.abc import Sequence as _Seq
from dataclasses import dataclass, field

import numpy as np

from specproc.errors import InvalidInputError

__all__ = [
    "SEQUENCES",
    "Delay",
    "Pulse",
    "Sequence",
    "ShapedPulse",
    "build_sequence",
    "normalise_sequence_name",
    "without_shaped_pulses",
]

#: Sequence names understood by :func:`build_sequence`.
SEQUENCES: tuple[str, ...] = ("pulse-acquire", "spin-echo", "press", "steam", "semi-laser")

_ALIASES = {
    "pulse-acquire": "pulse-acquire",
    "pulse_acquire": "pulse-acquire",
    "pulseacquire": "pulse-acquire",
    "fid": "pulse-acquire",
    "spin-echo": "spin-echo",
    "spin_echo": "spin-echo",
    "spinecho": "spin-echo",
    "se": "spin-echo",
    "press": "press",
    "steam": "steam",
    "semi-laser": "semi-laser",
    "semi_laser": "semi-laser",
    "semilaser": "semi-laser",
    "slaser": "semi-laser",
    "s-laser": "semi-laser",
}

#: Relative tolerance of the timing checks (echo condition, sums), s.
_TIME_TOL_S = 1e-9


@dataclass(frozen=True)
class Pulse:
    """An ideal instantaneous pulse.

    Attributes
    ----------
    flip_deg : float
        Flip angle, degrees.
    phase_deg : float
        Phase, degrees (0 = x, 90 = y).
    keep : int or None
        Coherence order kept after the pulse (None keeps all).
    """

    flip_deg: float
    phase_deg: float = 0.0
    keep: int | None = None


@dataclass(frozen=True)
class Delay:
    """Free precession for ``duration_s`` seconds."""

    duration_s: float


@dataclass(frozen=True)
class ShapedPulse:
    """A frequency-selective pulse of finite length, simulated by time slicing.

    During the pulse the spins evolve under the full Hamiltonian (shifts and J couplings) plus
    the RF term ``ω1(t) (cos(ω_rf t + φ) Fx + sin(ω_rf t + φ) Fy)`` in the receiver frame, with
    ``ω1`` piecewise constant over ``len(shape)`` slices (:mod:`specproc.spins.simulate`).

    Attributes
    ----------
    duration_s : float
        Length of the pulse, s (it occupies that much of the sequence's time).
    flip_deg : float
        Flip angle on resonance, degrees (sets the scale of ``ω1``).
    offset_hz : float
        Carrier frequency relative to the receiver centre, Hz, in the NIfTI-MRS sense (a spin
        at shift δ is on resonance when ``offset_hz = (δ - centre_ppm) · MHz``).
    shape : tuple of float
        Relative RF amplitude of each slice (any scale; real).
    phase_deg : float
        RF phase at the start of the pulse, degrees.
    keep : int or None
        Coherence order kept after the pulse (None keeps all), as for :class:`Pulse`.
    """

    duration_s: float
    flip_deg: float
    offset_hz: float
    shape: tuple[float, ...]
    phase_deg: float = 0.0
    keep: int | None = None


@dataclass(frozen=True)
class Sequence:
    """A sequence: events in time order plus its name and timings.

    Attributes
    ----------
    name : str
        One of :data:`SEQUENCES`.
    events : tuple of Pulse, Delay or ShapedPulse
        Events from excitation to the echo top (acquisition starts after the last one).
    timings_s : mapping of str to float
        The timings that define it (``te_s``, ``te1_s``, ``te2_s``, ``tm_s``, ``delays_s``
        entries ``d1_s`` ...), s.
    """

    name: str
    events: tuple[Pulse | Delay | ShapedPulse, ...]
    timings_s: Mapping[str, float] = field(default_factory=dict)

    def total_delay_s(self) -> float:
        """Time from the first pulse to the echo top (shaped pulses included), s."""
        return float(sum(e.duration_s for e in self.events
                         if isinstance(e, Delay | ShapedPulse)))


def normalise_sequence_name(name: str) -> str:
    """Map a sequence name or alias (case-insensitive) to one of :data:`SEQUENCES`.

    Raises
    ------
    InvalidInputError
        For an unknown name (the message lists the known ones).
    """
    key = str(name).strip().lower().replace(" ", "-")
    if key not in _ALIASES:
        raise InvalidInputError(
            f"unknown sequence {name!r}; known: {', '.join(SEQUENCES)}"
        )
    return _ALIASES[key]


def _time(value: float | None, what: str, *, positive: bool = False) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{what} is not a number: {value!r}") from None
    if not np.isfinite(number) or number < 0 or (positive and number == 0):
        need = "positive" if positive else "non-negative"
        raise InvalidInputError(f"{what} must be {need}, got {number * 1e3:g} ms")
    return number


def build_sequence(
    name: str,
    *,
    te_s: float | None = None,
    te1_s: float | None = None,
    tm_s: float | None = None,
    delays_s: _Seq[float] | None = None,
) -> Sequence:
    """Build a :class:`Sequence` from its name and timings (see the module docstring).

    Parameters
    ----------
    name : str
        Sequence name or alias (``"press"``, ``"steam"``, ``"semi-laser"`` ...).
    te_s : float, optional
        Echo time, s. Required except for ``pulse-acquire`` (where it must be 0 or None) and for
        ``semi-laser`` given ``delays_s``.
    te1_s : float, optional
        PRESS first echo time, s (0 < TE1 < TE); default TE/2.
    tm_s : float, optional
        STEAM mixing time, s (required for STEAM, ≥ 0).
    delays_s : sequence of 5 float, optional
        semi-LASER inter-pulse delays d1..d5, s.

    Raises
    ------
    InvalidInputError
        For an unknown sequence, negative or missing times, TE1 ≥ TE, or semi-LASER delays that
        do not form an echo at TE.
    """
    seq = normalise_sequence_name(name)
    te = _time(te_s, "TE")
    te1 = _time(te1_s, "TE1", positive=True)
    tm = _time(tm_s, "TM")
    if seq != "press" and te1 is not None:
        raise InvalidInputError(f"TE1 applies to PRESS only, not to {seq}")
    if seq != "steam" and tm is not None:
        raise InvalidInputError(f"TM applies to STEAM only, not to {seq}")
    if seq != "semi-laser" and delays_s is not None:
        raise InvalidInputError(f"inter-pulse delays apply to semi-LASER only, not to {seq}")

    if seq == "pulse-acquire":
        if te:
            raise InvalidInputError(
                f"pulse-acquire has no echo: TE must be 0 or omitted, got {te * 1e3:g} ms"
            )
        return Sequence(seq, (Pulse(90.0, 90.0, keep=-1),), {"te_s": 0.0})

    if seq == "semi-laser" and delays_s is not None:
        return _semi_laser_from_delays(delays_s, te)

    if te is None:
        raise InvalidInputError(f"{seq} needs an echo time TE")
    if te == 0:
        raise InvalidInputError(f"{seq} needs a positive echo time TE, got 0 ms")

    events: tuple[Pulse | Delay, ...]
    if seq == "spin-echo":
        events = (
            Pulse(90.0, 90.0, keep=+1),
            Delay(te / 2),
            Pulse(180.0, 0.0, keep=-1),
            Delay(te / 2),
        )
        return Sequence(seq, events, {"te_s": te})

    if seq == "press":
        if te1 is None:
            te1 = te / 2
        if te1 >= te:
            raise InvalidInputError(
                f"PRESS TE1 ({te1 * 1e3:g} ms) must be shorter than TE ({te * 1e3:g} ms)"
            )
        te2 = te - te1
        events = (
            Pulse(90.0, 90.0, keep=-1),
            Delay(te1 / 2),
            Pulse(180.0, 0.0, keep=+1),
            Delay(te1 / 2 + te2 / 2),
            Pulse(180.0, 0.0, keep=-1),
            Delay(te2 / 2),
        )
        return Sequence(seq, events, {"te_s": te, "te1_s": te1, "te2_s": te2})

    if seq == "steam":
        if tm is None:
            raise InvalidInputError("STEAM needs a mixing time TM")
        events = (
            Pulse(90.0, 90.0, keep=+1),
            Delay(te / 2),
            Pulse(90.0, 0.0, keep=0),
            Delay(tm),
            Pulse(90.0, 0.0, keep=-1),
            Delay(te / 2),
        )
        return Sequence(seq, events, {"te_s": te, "tm_s": tm})

    # semi-LASER, default timing
    return _semi_laser_from_delays((te / 8, te / 4, te / 4, te / 4, te / 8), te)


def _semi_laser_from_delays(delays_s: _Seq[float], te: float | None) -> Sequence:
    try:
        delays = [float(d) for d in delays_s]
    except (TypeError, ValueError):
        raise InvalidInputError(f"semi-LASER delays are not numbers: {delays_s!r}") from None
    if len(delays) != 5:
        raise InvalidInputError(
            f"semi-LASER needs 5 inter-pulse delays (excitation to echo), got {len(delays)}"
        )
    for k, d in enumerate(delays, start=1):
        _time(d, f"semi-LASER delay d{k}")
    total = sum(delays)
    if total <= 0:
        raise InvalidInputError("semi-LASER delays must add up to a positive TE")
    if te is not None and abs(total - te) > _TIME_TOL_S + 1e-9 * te:
        raise InvalidInputError(
            f"semi-LASER delays add up to {total * 1e3:g} ms, not TE = {te * 1e3:g} ms"
        )
    d1, d2, d3, d4, d5 = delays
    if abs((d2 + d4) - (d1 + d3 + d5)) > _TIME_TOL_S + 1e-9 * total:
        raise InvalidInputError(
            "semi-LASER delays do not refocus the chemical shift at the echo "
            "(need d2 + d4 = d1 + d3 + d5)"
        )
    events: list[Pulse | Delay] = [Pulse(90.0, 90.0, keep=-1), Delay(d1)]
    keep = +1
    for d in (d2, d3, d4, d5):
        events.append(Pulse(180.0, 0.0, keep=keep))
        events.append(Delay(d))
        keep = -keep
    timings = {"te_s": total}
    timings.update({f"d{k}_s": d for k, d in enumerate(delays, start=1)})
    return Sequence("semi-laser", tuple(events), timings)


def without_shaped_pulses(sequence: Sequence) -> Sequence:
    """The same sequence with each shaped pulse replaced by free precession of its length.

    The receiver phase of an edited acquisition is that of the sequence without its editing
    pulses, so that ON and OFF sub-spectra share one phase (as on the scanner).
    """
    events = tuple(Delay(e.duration_s) if isinstance(e, ShapedPulse) else e
                   for e in sequence.events)
    return Sequence(sequence.name, events, dict(sequence.timings_s))
