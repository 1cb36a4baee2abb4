"""Shaped editing pulses and MEGA-PRESS against outside physics.

Outside sources:

* Bloch equations (Bloch, Phys Rev 1946;70:460), integrated here with scipy.integrate.solve_ivp
  for the continuous Gaussian envelope: the inversion profile of an uncoupled spin.
* Product-operator analysis of J-difference editing of a weakly coupled AX system (Mescher et
  al., NMR Biomed 1998;11:266-272; Sørensen et al., Prog NMR Spectrosc 1983;16:163): without
  editing the A doublet's in-phase signal is ``cos(π J TE)``; with ideal selective inversions of
  X at t_A and t_B it is ``cos(π J (TE − 2 (t_B − t_A)))``.
* qutip 5 operators and matrix exponentials (Johansson et al., Comput Phys Commun
  2012;183:1760), with the coherence pathway chosen by phase cycling, not by our filters: a
  three-spin system through a whole MEGA-PRESS sequence with its shaped pulses.
"""

from __future__ import annotations

import numpy as np
import pytest
import qutip
from scipy.integrate import solve_ivp

from specproc.constants import larmor_mhz
from specproc.errors import InvalidInputError
from specproc.spins.editing import EditPulse, gaussian_envelope, mega_press
from specproc.spins.hamiltonian import build_hamiltonian
from specproc.spins.operators import build_operators
from specproc.spins.sequences import ShapedPulse, build_sequence
from specproc.spins.simulate import (
    shaped_pulse_propagator,
    simulate_spin_system,
    synthesize_fid,
)
from specproc.spins.systems import Coupling, SpinGroup

CENTRE = 4.65


def _mz_after(offset_hz: float, pulse: ShapedPulse) -> float:
    ops = build_operators((1 / 2,))
    h = build_hamiltonian(ops, [offset_hz], np.zeros((1, 1)))
    u = shaped_pulse_propagator(pulse, h, ops)
    iz = np.diag(ops.iz[0]).astype(complex)
    return float(2 * np.real(np.trace(u @ iz @ u.conj().T @ iz)))


def _bloch_mz(delta_hz: float, duration_s: float, truncation: float) -> float:
    """Mz after a continuous Gaussian π pulse, Bloch equations in the carrier's frame."""
    x = np.linspace(-1, 1, 20001)
    area = np.trapezoid(np.exp(np.log(truncation) * x**2), x) * duration_s / 2
    scale = np.pi / area

    def rhs(t, m):
        w1 = scale * np.exp(np.log(truncation) * (2 * t / duration_s - 1) ** 2)
        omega = np.array([w1, 0.0, 2 * np.pi * delta_hz])
        return np.cross(omega, m)

    sol = solve_ivp(rhs, (0, duration_s), [0.0, 0.0, 1.0], rtol=1e-9, atol=1e-11,
                    max_step=duration_s / 400)
    return float(sol.y[2, -1])


def test_gaussian_editing_pulse_inversion_profile_matches_bloch_equations():
    duration = 0.014
    carrier = -350.0  # Hz from the receiver centre
    pulse = ShapedPulse(duration, 180.0, carrier, tuple(gaussian_envelope(200)))
    deltas = [0.0, 15.0, 30.0, 45.0, 60.0, 90.0, 150.0, 300.0]
    ours = np.array([_mz_after(carrier + d, pulse) for d in deltas])
    ours_minus = np.array([_mz_after(carrier - d, pulse) for d in deltas])
    ref = np.array([_bloch_mz(d, duration, 0.01) for d in deltas])
    assert np.max(np.abs(ours - ref)) < 0.01
    assert np.max(np.abs(ours_minus - ref)) < 0.01
    # a real selective inversion: inverted on resonance, untouched far away
    assert ours[0] < -0.99 and ours[-1] > 0.99


def _a_signal(seq, mhz, groups, j_hz):
    lines = simulate_spin_system(groups, (Coupling("A", "X", j_hz),), seq,
                                 spectrometer_mhz=mhz, centre_ppm=CENTRE)
    near_a = np.abs(lines.freq_hz - (groups[0].shift_ppm - CENTRE) * mhz) < 30
    return complex(lines.amp[near_a].sum())


@pytest.mark.parametrize("te_s", [0.068, 0.100, 0.140])
@pytest.mark.parametrize("gap_offset_s", [0.0, 0.004, -0.004])
def test_ax_difference_follows_product_operator_refocusing(te_s, gap_offset_s):
    # 7 T and X 2.5 ppm from A: weak coupling (J / Δν ≈ 0.01), and the 14 ms pulses at X leave A
    # alone; tolerance 0.025 of the full signal for the finite pulses (J evolution during them)
    mhz, j = larmor_mhz(7.0), 7.0
    groups = (SpinGroup("A", 3.0, 1), SpinGroup("X", 0.5, 1))
    t_a = 0.020
    gap = te_s / 2 + gap_offset_s
    centres = (t_a, t_a + gap)

    def seq(ppm):
        return mega_press(te_s=te_s, te1_s=0.015, spectrometer_mhz=mhz, centre_ppm=CENTRE,
                          edit=EditPulse(ppm, centres_s=centres))

    on = _a_signal(seq(0.5), mhz, groups, j)
    off = _a_signal(seq(7.5), mhz, groups, j)
    on_ref = np.cos(np.pi * j * (te_s - 2 * gap))
    off_ref = np.cos(np.pi * j * te_s)
    assert abs(on - on_ref) < 0.025
    assert abs(off - off_ref) < 0.025
    assert abs((on - off) - (on_ref - off_ref)) < 0.04


def test_edited_signal_vanishes_when_both_states_miss_the_partner():
    mhz = larmor_mhz(3.0)
    groups = (SpinGroup("A", 3.0, 1), SpinGroup("X", 1.9, 1))

    def seq(ppm):
        return mega_press(te_s=0.068, spectrometer_mhz=mhz, centre_ppm=CENTRE,
                          edit=EditPulse(ppm))

    edited = _a_signal(seq(1.9), mhz, groups, 7.3) - _a_signal(seq(7.5), mhz, groups, 7.3)
    missed = _a_signal(seq(8.5), mhz, groups, 7.3) - _a_signal(seq(7.5), mhz, groups, 7.3)
    assert abs(edited) > 0.5
    assert abs(missed) < 1e-3


def test_singlet_cancels_in_the_difference():
    # creatine's methyl, 1.1 ppm from the GABA editing frequency at 3 T: under 1 % left
    mhz = larmor_mhz(3.0)
    cr = (SpinGroup("CH3", 3.027, 3),)
    lines = {}
    for ppm in (1.9, 7.5):
        seq = mega_press(te_s=0.068, spectrometer_mhz=mhz, centre_ppm=CENTRE,
                         edit=EditPulse(ppm))
        lines[ppm] = simulate_spin_system(cr, (), seq, spectrometer_mhz=mhz, centre_ppm=CENTRE)
    on, off = lines[1.9].amp.sum(), lines[7.5].amp.sum()
    assert abs(off - 3) < 1e-3  # the OFF pulses far away: a plain PRESS singlet
    assert abs(on - off) / abs(off) < 0.01


def test_editing_pulses_that_do_not_fit_are_refused():
    with pytest.raises(InvalidInputError, match="do not fit"):
        mega_press(te_s=0.030, spectrometer_mhz=128.0, centre_ppm=CENTRE,
                   edit=EditPulse(1.9, duration_s=0.020))


# ---------------------------------------------------------------------------- qutip reference
def _qutip_mega(shifts_ppm, j_hz, mhz, seq, dwell, n_points):
    """Phase-cycled qutip simulation of a sequence with hard and shaped pulses."""
    n = len(shifts_ppm)
    ident = qutip.qeye(2)

    def op(axis, i):
        return qutip.tensor([qutip.jmat(0.5, axis) if k == i else ident for k in range(n)])

    fx = sum(op("x", i) for i in range(n))
    fy = sum(op("y", i) for i in range(n))
    fz = sum(op("z", i) for i in range(n))
    fp = sum(op("+", i) for i in range(n))
    h = 0
    for k, shift in enumerate(shifts_ppm):
        h += -2 * np.pi * (shift - CENTRE) * mhz * op("z", k)
    for a in range(n):
        for b in range(a + 1, n):
            if j_hz[a][b]:
                h += 2 * np.pi * j_hz[a][b] * (op("x", a) * op("x", b) + op("y", a) * op("y", b)
                                               + op("z", a) * op("z", b))

    def shaped(pulse, psi):
        shape = np.asarray(pulse.shape)
        dt = pulse.duration_s / shape.size
        w1 = shape * np.pi / (dt * shape.sum())
        u = qutip.qeye([2] * n)
        for k, amp in enumerate(w1):
            phi = -2 * np.pi * pulse.offset_hz * (k + 0.5) * dt + psi
            u = (-1j * dt * (h + amp * (np.cos(phi) * fx + np.sin(phi) * fy))).expm() * u
        return u

    def hard(flip, phase, psi):
        phi = np.deg2rad(phase) + psi
        return (-1j * np.deg2rad(flip) * (np.cos(phi) * fx + np.sin(phi) * fy)).expm()

    def run(with_shaped):
        # each pulse cycled over its phases with the receiver following the wanted change of
        # coherence order; averaging right after each pulse equals the nested cycle (linearity)
        rho = fz
        p_now = 0
        for event in seq.events:
            if hasattr(event, "shape") and with_shaped:
                wanted, ncyc = 0, 2 * n + 1
            elif hasattr(event, "flip_deg") and not hasattr(event, "shape"):
                wanted, ncyc = event.keep - p_now, 2 * n + 2
            else:  # a delay, or a shaped pulse left out: free precession for its length
                u = (-1j * h * event.duration_s).expm()
                rho = u * rho * u.dag()
                continue
            acc = 0
            for m in range(ncyc):
                psi = 2 * np.pi * m / ncyc
                u = (shaped(event, psi) if hasattr(event, "shape")
                     else hard(event.flip_deg, event.phase_deg, psi))
                acc = acc + np.exp(1j * wanted * psi) * (u * rho * u.dag())
            rho = acc / ncyc
            p_now = event.keep
        u_dwell = (-1j * h * dwell).expm()
        fid = np.zeros(n_points, dtype=complex)
        for m in range(n_points):
            fid[m] = (rho * fp).tr()
            rho = u_dwell * rho * u_dwell.dag()
        return 4 / 2**n * fid

    return run(True), run


def test_three_spin_mega_press_matches_phase_cycled_qutip():
    # a GABA-like fragment at 3 T: the observed H4 pair stands in as one proton at 3.01 ppm,
    # coupled to H3 (1.89 ppm, inverted by the ON pulses) and, more weakly, to an H2 (2.28 ppm)
    mhz = larmor_mhz(3.0)
    shifts = [3.01, 1.89, 2.28]
    j = [[0, 7.3, 0.0], [7.3, 0, 7.4], [0.0, 7.4, 0]]
    groups = (SpinGroup("A", 3.01, 1), SpinGroup("X", 1.89, 1), SpinGroup("M", 2.28, 1))
    couplings = (Coupling("A", "X", 7.3), Coupling("X", "M", 7.4))
    dwell, n_points = 1 / 2000, 64
    seq = mega_press(te_s=0.068, spectrometer_mhz=mhz, centre_ppm=CENTRE,
                     edit=EditPulse(1.9, n_steps=60))
    lines = simulate_spin_system(groups, couplings, seq, spectrometer_mhz=mhz, centre_ppm=CENTRE)
    ours = synthesize_fid(lines, dwell_s=dwell, n_points=n_points)
    ref, _ = _qutip_mega(shifts, j, mhz, seq, dwell, n_points)
    # receiver phase: the on-resonance singlet of the sequence without its editing pulses
    _, singlet_run = _qutip_mega([CENTRE], [[0.0]], mhz, seq, dwell, 1)
    receiver = singlet_run(False)[0]
    ref = ref * abs(receiver) / receiver
    assert np.linalg.norm(ours - ref) / np.linalg.norm(ref) < 1e-6
    # the editing really changed the signal (the check is not between two PRESS signals)
    press = synthesize_fid(
        simulate_spin_system(groups, couplings, build_sequence("press", te_s=0.068),
                             spectrometer_mhz=mhz, centre_ppm=CENTRE),
        dwell_s=dwell, n_points=n_points)
    assert np.linalg.norm(ours - press) / np.linalg.norm(press) > 0.1
