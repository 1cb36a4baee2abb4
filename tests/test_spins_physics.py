"""Textbook physics of the simulation engine (each check names its source)."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from specproc.constants import larmor_mhz
from specproc.errors import InvalidInputError
from specproc.spins.operators import composite_spins, multiplicity
from specproc.spins.sequences import build_sequence
from specproc.spins.simulate import (
    sequence_singlet_amplitude,
    simulate_metabolite,
    simulate_spin_system,
    synthesize_fid,
)
from specproc.spins.systems import Coupling, SpinGroup, load_metabolites

MHZ_3T = larmor_mhz(3.0)

ALL_SEQUENCES = [
    ("pulse-acquire", {}),
    ("spin-echo", {"te_s": 0.030}),
    ("press", {"te_s": 0.030}),
    ("press", {"te_s": 0.144, "te1_s": 0.020}),
    ("steam", {"te_s": 0.020, "tm_s": 0.010}),
    ("semi-laser", {"te_s": 0.030}),
]


def _lines(groups, couplings, seq, mhz=MHZ_3T, centre=4.65):
    return simulate_spin_system(groups, couplings, seq, spectrometer_mhz=mhz, centre_ppm=centre)


def test_composite_spin_multiplicities():
    # Clebsch-Gordan counting (Levitt, Spin Dynamics 2008, ch. 14): 3 spins-1/2 give one
    # quartet (S = 3/2) and two doublets (S = 1/2); dimensions add up to 2**N
    assert composite_spins(3) == [(Fraction(3, 2), 1), (Fraction(1, 2), 2)]
    for n in range(1, 10):
        assert sum((2 * s + 1) * m for s, m in composite_spins(n)) == 2**n
    assert multiplicity(4, 0) == 2


def test_singlet_sign_convention_peak_lands_at_its_shift():
    # NIfTI-MRS convention (Clarke et al. 2022; STANDARDS.md): after fftshift(fft()) the shift
    # is ppm = centre - f / MHz
    dwell, n = 1 / 4000, 8192
    for shift in (2.008, 3.027, 1.3, 4.2):
        lines = _lines((SpinGroup("s", shift, 3),), (), build_sequence("pulse-acquire"))
        fid = synthesize_fid(lines, dwell_s=dwell, n_points=n)
        # textbook form of the NIfTI-MRS time dependence
        t = np.arange(n) * dwell
        expected = 3 * np.exp(-2j * np.pi * (shift - 4.65) * MHZ_3T * t)
        np.testing.assert_allclose(fid, expected, atol=1e-9)
        spec = np.fft.fftshift(np.fft.fft(fid))
        ppm = 4.65 - np.fft.fftshift(np.fft.fftfreq(n, dwell)) / MHZ_3T
        assert abs(ppm[np.argmax(np.abs(spec))] - shift) < 1 / (n * dwell) / MHZ_3T


@pytest.mark.parametrize(("name", "kw"), ALL_SEQUENCES)
def test_singlet_amplitude_is_proton_count_at_every_te(name, kw):
    # no relaxation in the basis: a singlet of N protons refocuses to N at the echo top
    # (spin echo, Hahn 1950), to N/2 for the stimulated echo (Hahn 1950; Frahm et al. 1987)
    seq = build_sequence(name, **kw)
    expected = 0.5 if name == "steam" else 1.0
    assert sequence_singlet_amplitude(seq) == pytest.approx(expected, abs=1e-12)
    for protons in (1, 3, 9):
        lines = _lines((SpinGroup("s", 3.2, protons, fraction=0.5),), (), seq)
        assert len(lines) == 1
        assert lines.amp[0] == pytest.approx(protons * 0.5 * expected, abs=1e-12)


@pytest.mark.parametrize("te_s", [0.010, 0.030, 0.070, 0.144])
def test_steam_singlet_is_half_of_spin_echo(te_s):
    # textbook: the stimulated echo carries half the magnetisation of a spin echo (Hahn 1950)
    group = (SpinGroup("s", 2.0, 3),)
    se = _lines(group, (), build_sequence("spin-echo", te_s=te_s))
    st = _lines(group, (), build_sequence("steam", te_s=te_s, tm_s=0.020))
    assert st.amp.sum() == pytest.approx(0.5 * se.amp.sum(), abs=1e-12)


def test_weakly_coupled_ax_spin_echo_modulation():
    # textbook (Keeler, Understanding NMR Spectroscopy 2010, ch. 7; Levitt 2008): in a spin echo
    # the weakly coupled AX doublet is modulated as cos(π J TE) in phase, its two lines rotating
    # by ±π J TE
    j = 7.0
    mhz = larmor_mhz(9.4)
    groups = (SpinGroup("A", 1.0, 1), SpinGroup("X", 8.0, 1))  # Δν ≈ 2800 Hz ≫ J
    couplings = (Coupling("A", "X", j),)
    nu_a = (1.0 - 4.65) * mhz
    for te in (0.020, 0.050, 1 / (2 * j), 0.100, 1 / j):
        lines = _lines(groups, couplings, build_sequence("spin-echo", te_s=te), mhz=mhz)
        near_a = np.abs(lines.freq_hz - nu_a) < 2 * j
        doublet_sum = lines.amp[near_a].sum()
        assert doublet_sum.real == pytest.approx(np.cos(np.pi * j * te), abs=3e-3)
        assert abs(doublet_sum.imag) < 3e-3
        low, high = lines.amp[near_a][np.argsort(lines.freq_hz[near_a])]
        assert abs(low) == pytest.approx(0.5, abs=3e-3)
        # the two lines carry opposite phases ±π J TE (the sign follows the convention);
        # weak-coupling formulas hold to O(J/Δν) ≈ 3e-3 here
        relative = low * np.conj(high) / abs(low * high)
        assert abs(relative - np.exp(2j * np.pi * j * te)) < 1e-2


def _lactate_doublet(te_s):
    (lac,) = load_metabolites(["Lac"])
    lines = simulate_metabolite(lac, build_sequence("press", te_s=te_s), spectrometer_mhz=MHZ_3T)
    near = np.abs(lines.freq_hz - (1.3142 - 4.65) * MHZ_3T) < 15
    return lines.amp[near].sum()


def test_lactate_inverted_at_144_upright_at_288():
    # common practice: the lactate methyl doublet (J = 6.93 Hz, Govindaraju 2000) is inverted
    # at TE = 144 ms (≈ 1/J) and upright at 288 ms in PRESS at 3 T
    at144 = _lactate_doublet(0.144)
    at288 = _lactate_doublet(0.288)
    assert at144.real < -0.8 * 3
    assert at288.real > 0.8 * 3


def test_pulse_acquire_total_intensity_is_proton_count_for_coupled_systems():
    # sum rule: after a 90° pulse the FID at t = 0 is the total transverse magnetisation,
    # N protons (Levitt 2008, ch. 11), whatever the couplings
    seq = build_sequence("pulse-acquire")
    groups = (SpinGroup("A", 3.75, 1), SpinGroup("B", 2.11, 2), SpinGroup("C", 2.35, 2))
    couplings = (Coupling("A", "B", 6.3), Coupling("B", "C", 7.5), Coupling("A", "C", 0.5))
    lines = _lines(groups, couplings, seq)
    fid0 = synthesize_fid(lines, dwell_s=1e-4, n_points=1)[0]
    assert fid0 == pytest.approx(5.0, abs=1e-10)


def test_composite_spins_equal_explicit_equivalent_protons():
    # magnetic equivalence is exact (Levitt 2008, ch. 14): a 3-proton group equals three
    # protons of the same shift each coupled alike, for any sequence
    seq = build_sequence("press", te_s=0.050, te1_s=0.015)
    grouped = _lines(
        (SpinGroup("X", 4.10, 1), SpinGroup("A", 1.31, 3)), (Coupling("X", "A", 6.9),), seq
    )
    single = (SpinGroup("X", 4.1, 1), *tuple(SpinGroup(f"A{k}", 1.31, 1) for k in range(3)))
    explicit = _lines(single, tuple(Coupling("X", f"A{k}", 6.9) for k in range(3)), seq)
    t_fid = dict(dwell_s=1 / 2000, n_points=256)
    np.testing.assert_allclose(
        synthesize_fid(grouped, **t_fid), synthesize_fid(explicit, **t_fid), atol=1e-10
    )


@pytest.mark.parametrize(
    ("name", "group_shifts"),
    [("NAA", [2.008]), ("Cr", [3.027, 3.913]), ("PCh", [3.2]), ("GPC", [3.2])],
)
def test_metabolite_main_peaks_at_published_shifts(name, group_shifts):
    # Govindaraju 2000: NAA methyl 2.008 ppm, creatine 3.027 and 3.913 ppm, choline trimethyl
    # near 3.2 ppm (3.208/3.212)
    (met,) = load_metabolites([name])
    dwell, n = 1 / 2000, 16384
    lines = simulate_metabolite(
        met, build_sequence("press", te_s=0.030), spectrometer_mhz=MHZ_3T, centre_ppm=4.65
    )
    fid = synthesize_fid(lines, dwell_s=dwell, n_points=n, lb_hz=1.0)
    spec = np.abs(np.fft.fftshift(np.fft.fft(fid)))
    ppm = 4.65 - np.fft.fftshift(np.fft.fftfreq(n, dwell)) / MHZ_3T
    for shift in group_shifts:
        window = np.abs(ppm - shift) < 0.03
        peak = ppm[window][np.argmax(spec[window])]
        tol = 0.013 if shift == 3.2 else 0.002  # "near 3.2" vs the tabulated singlets
        assert abs(peak - shift) < tol
        # the singlet dominates its neighbourhood
        assert spec[window].max() > 0.5 * spec.max()


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"name": "press", "te_s": -0.03}, "non-negative"),
        ({"name": "press"}, "needs an echo time"),
        ({"name": "press", "te_s": 0.03, "te1_s": 0.04}, "shorter than TE"),
        ({"name": "steam", "te_s": 0.02}, "mixing time"),
        ({"name": "pulse-acquire", "te_s": 0.02}, "no echo"),
        ({"name": "mega-press", "te_s": 0.068}, "unknown sequence"),
        ({"name": "semi-laser", "delays_s": [0.01, 0.01, 0.01, 0.01, 0.01]}, "refocus"),
        ({"name": "semi-laser", "te_s": 0.05, "delays_s": [0.005, 0.01, 0.01, 0.01, 0.005]},
         "not TE"),
        ({"name": "spin-echo", "te_s": 0.03, "tm_s": 0.01}, "STEAM only"),
    ],
)
def test_bad_sequence_arguments(kwargs, message):
    with pytest.raises(InvalidInputError, match=message):
        build_sequence(**kwargs)


def test_semi_laser_default_timing_and_given_delays_agree():
    te = 0.040
    default = build_sequence("semi-laser", te_s=te)
    given = build_sequence("semi-laser", delays_s=[te / 8, te / 4, te / 4, te / 4, te / 8])
    assert default.timings_s == given.timings_s
    assert default.total_delay_s() == pytest.approx(te)


@pytest.mark.parametrize("n_points", [1, 7, 256, 1031])
def test_synthesis_equals_the_sum_of_lines(n_points):
    # the definition s(t_n) = Σ a_k exp(-2πi ν_k t_n) g_k(t_n), evaluated term by term here
    from specproc.spins.simulate import LineList

    rng = np.random.default_rng(7)
    k = 40
    freq = rng.uniform(-1500, 1500, k)
    amp = rng.normal(size=k) + 1j * rng.normal(size=k)
    fwhm = np.where(np.arange(k) % 5 == 0, rng.uniform(5, 30, k), 0.0)
    dwell = 1 / 4000
    t = np.arange(n_points) * dwell
    expected = np.zeros(n_points, complex)
    for f, a, w in zip(freq, amp, fwhm, strict=True):
        gauss = np.exp(-((np.pi * w * t) ** 2) / (4 * np.log(2)))
        expected += a * np.exp(-2j * np.pi * f * t) * gauss
    fid = synthesize_fid(LineList(freq, amp, fwhm), dwell_s=dwell, n_points=n_points, lb_hz=3.0)
    np.testing.assert_allclose(fid, expected * np.exp(-np.pi * 3.0 * t), atol=1e-10)


def test_oversized_spin_system_is_refused():
    groups = tuple(SpinGroup(f"H{k}", 1 + 0.1 * k, 1) for k in range(12))
    couplings = tuple(Coupling(f"H{k}", f"H{k + 1}", 7.0) for k in range(11))
    with pytest.raises(InvalidInputError, match="dimensional space"):
        _lines(groups, couplings, build_sequence("pulse-acquire"))
