"""J-difference editing: MEGA-PRESS sequences with shaped, frequency-selective editing pulses.

MEGA-PRESS (Mescher et al., NMR Biomed 1998;11:266-272) is PRESS with two frequency-selective
180° pulses, one in each half of the second echo period. In the ON transients they invert a
coupling partner of the spin to be edited (1.9 ppm for the GABA H4 multiplet at 3.0 ppm, 4.56 ppm
for the cysteine β-CH2 of glutathione at 2.95 ppm); in the OFF transients they sit at a frequency
that touches nothing of interest (symmetric about water, 7.5 ppm, is common practice). The
difference ON − OFF keeps the coupled multiplet and cancels the singlets both states share.

Timing (pulse centres, from the excitation at 0): refocusing pulses at TE1/2 and TE1 + TE2/2,
echo at TE = TE1 + TE2; editing pulse A in (TE1/2, TE1 + TE2/2), B in (TE1 + TE2/2, TE). With
ideal selective inversions of a weakly coupled partner X of spin A, the J evolution of A is
refocused at the echo when the two editing pulses are TE/2 apart (the effective J-evolution
time is ``TE − 2 (t_B − t_A)``), which is the default placement here; without editing it
evolves for the whole TE (``cos(π J TE)`` for a doublet). Each editing pulse keeps the coherence
order it finds, as the crusher pairs around the editing pulses together with the refocusing
pulse between them select in the real sequence.

The editing pulses are Gaussian envelopes truncated at 1 % of their peak (common practice),
simulated by time slicing under the full Hamiltonian (:func:`~specproc.spins.simulate.
shaped_pulse_propagator`), so J evolution and off-resonance effects during the pulse are in.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from specproc.errors import InvalidInputError
from specproc.spins.sequences import Delay, Pulse, Sequence, ShapedPulse, build_sequence

__all__ = [
    "EditPulse",
    "gaussian_envelope",
    "mega_press",
]

#: Truncation of the Gaussian editing envelope at its ends, relative to its peak.
GAUSS_TRUNCATION = 0.01


@dataclass(frozen=True)
class EditPulse:
    """How the editing pulses of one sub-spectrum are played.

    Attributes
    ----------
    shift_ppm : float
        Carrier of the editing pulses, ppm (e.g. 1.9 ON, 7.5 OFF for GABA).
    duration_s : float
        Length of each editing pulse, s (14-20 ms at 3 T is typical).
    n_steps : int
        Time slices per pulse.
    centres_s : tuple of float or None
        Centres of the two editing pulses from the excitation, s; None places them TE/2 apart
        in the middle of the room the sequence leaves (see the module docstring).
    """

    shift_ppm: float
    duration_s: float = 0.014
    n_steps: int = 140
    centres_s: tuple[float, float] | None = None

    def describe(self) -> dict[str, float | list[float] | int | None]:
        """Plain values for metadata and cache keys."""
        return {
            "edit_ppm": float(self.shift_ppm),
            "edit_pulse_s": float(self.duration_s),
            "edit_steps": int(self.n_steps),
            "edit_centres_s": None if self.centres_s is None else [float(c)
                                                                  for c in self.centres_s],
        }


def gaussian_envelope(n_steps: int, truncation: float = GAUSS_TRUNCATION) -> np.ndarray:
    """Gaussian RF envelope sampled at slice centres, 1 at its peak, ``truncation`` at the ends.

    Parameters
    ----------
    n_steps : int
        Number of slices (≥ 8).
    truncation : float, optional
        Envelope value at the pulse edges relative to the peak (0 < truncation < 1).

    Returns
    -------
    (n_steps,) ndarray
    """
    n_steps = int(n_steps)
    if n_steps < 8:
        raise InvalidInputError(f"a shaped pulse needs at least 8 time slices, got {n_steps}")
    if not 0 < truncation < 1:
        raise InvalidInputError(f"the Gaussian truncation must lie in (0, 1), got {truncation}")
    x = (np.arange(n_steps) + 0.5) / n_steps * 2 - 1  # -1 .. 1 over the pulse
    return np.exp(np.log(truncation) * x**2)


def _default_centres(te: float, te1: float, d: float) -> tuple[float, float]:
    te2 = te - te1
    lo = max(te1 / 2 + d / 2, te1 + te2 / 2 + d / 2 - te / 2)
    hi = min(te1 + te2 / 2 - d / 2, te - d / 2 - te / 2)
    if lo > hi:
        raise InvalidInputError(
            f"two {d * 1e3:g} ms editing pulses TE/2 apart do not fit in a MEGA-PRESS sequence "
            f"with TE {te * 1e3:g} ms and TE1 {te1 * 1e3:g} ms (give shorter pulses, a longer "
            "TE or the pulse centres)"
        )
    t_a = (lo + hi) / 2
    return t_a, t_a + te / 2


def mega_press(
    *,
    te_s: float,
    edit: EditPulse,
    spectrometer_mhz: float,
    centre_ppm: float,
    te1_s: float | None = None,
) -> Sequence:
    """A MEGA-PRESS sequence for one editing condition.

    Parameters
    ----------
    te_s : float
        Echo time, s.
    edit : EditPulse
        Carrier, length and placement of the two editing pulses.
    spectrometer_mhz : float
        Proton Larmor frequency, MHz (turns the carrier into a frequency offset).
    centre_ppm : float
        Shift at the receiver centre, ppm.
    te1_s : float, optional
        PRESS first echo time, s; default TE/2.

    Returns
    -------
    Sequence
        Named ``"mega-press"``; its timings hold TE, TE1, TE2 and the editing parameters.

    Raises
    ------
    InvalidInputError
        When the pulses do not fit between the refocusing pulses and the echo.
    """
    press = build_sequence("press", te_s=te_s, te1_s=te1_s)
    te = float(press.timings_s["te_s"])
    te1 = float(press.timings_s["te1_s"])
    te2 = te - te1
    d = float(edit.duration_s)
    if not (np.isfinite(d) and d > 0):
        raise InvalidInputError(f"the editing pulse length must be positive, got {d * 1e3:g} ms")
    t_a, t_b = edit.centres_s if edit.centres_s is not None else _default_centres(te, te1, d)
    r1, r2 = te1 / 2, te1 + te2 / 2
    tol = 1e-12
    if not (r1 + d / 2 - tol <= t_a <= r2 - d / 2 + tol and r2 + d / 2 - tol <= t_b
            <= te - d / 2 + tol):
        raise InvalidInputError(
            f"editing pulses centred at {t_a * 1e3:g} and {t_b * 1e3:g} ms do not fit between "
            f"the refocusing pulses ({r1 * 1e3:g}, {r2 * 1e3:g} ms) and the echo ({te * 1e3:g} ms)"
        )
    offset_hz = (float(edit.shift_ppm) - float(centre_ppm)) * float(spectrometer_mhz)
    envelope = tuple(float(x) for x in gaussian_envelope(edit.n_steps))

    def pulse(keep: int) -> ShapedPulse:
        return ShapedPulse(duration_s=d, flip_deg=180.0, offset_hz=offset_hz,
                           shape=envelope, keep=keep)

    events = (
        Pulse(90.0, 90.0, keep=-1),
        Delay(r1),
        Pulse(180.0, 0.0, keep=+1),
        Delay(t_a - d / 2 - r1),
        pulse(+1),
        Delay(r2 - t_a - d / 2),
        Pulse(180.0, 0.0, keep=-1),
        Delay(t_b - d / 2 - r2),
        pulse(-1),
        Delay(te - t_b - d / 2),
    )
    timings = {"te_s": te, "te1_s": te1, "te2_s": te2, "edit_a_s": t_a, "edit_b_s": t_b,
               "edit_pulse_s": d, "edit_ppm": float(edit.shift_ppm)}
    return Sequence("mega-press", events, timings)
