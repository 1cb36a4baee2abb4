"""Invented MEGA-PRESS GABA scans for the edited-spectroscopy benchmark, tests and demo.

Everything here is invented. The generator differs from the fit model in the ways real data
do: per-metabolite T2 with per-subject scatter (so each metabolite has its own Lorentzian
width), an inhomogeneous field (three shifted sub-voxel components with Gaussian broadening,
an asymmetric line shape), macromolecules of its own parametrisation (other positions and
widths than the fit's, with an ON-only co-edited 3.0 ppm component 0.13 ppm wide and a partly
inverted 1.7 ppm line), residual water with its own drift, PRESS with TE1 = 15 ms (given in the
header, as a user who knows the protocol would), frequency drift and phase jitter, one
motion-corrupted ON/OFF pair, and noise. Metabolite multiplets come from the density-matrix
engine (:mod:`specproc.spins`, checked against qutip and product-operator theory) with the
shaped editing pulses of the header. That engine, the metabolite definitions and the editing
pulse model (Gaussian, 1 % truncation, default placement) are the fit basis's too, so the
editing efficiency is the same in both by construction: the benchmark tests everything around
it, not the editing physics (which tests/test_spins_editing.py checks against product-operator
theory, Bloch integration and qutip). A drift of the spins against the fixed editing pulse
changes GABA's editing by less than 0.5 % over ±4 Hz (simulated), so the drift is applied to
the finished signals.

Truth (``truth`` of each scan): GABA+/tCr in the units the analysis reports, i.e. GABA-
equivalent: ``(c_GABA w_GABA + A_MM / g_GABA) / (c_Cr w_Cr + c_PCr w_PCr)`` where ``w`` are the
relaxation attenuations exp(-TE/T2)(1 - exp(-TR/T1)), ``A_MM`` is the integral of the co-edited
macromolecule over 2.8-3.2 ppm in the DIFF spectrum and ``g_GABA`` that of GABA per unit
concentration (both measured here on noiseless DIFF spectra of the generator itself).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any

import numpy as np
from threadpoolctl import threadpool_limits

from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.spins.editing import EditPulse, mega_press
from specproc.spins.simulate import simulate_metabolite
from specproc.spins.systems import load_metabolites

FIELD_T = 3.0
TE_S = 0.068
TE1_S = 0.015
TR_S = 2.0
DWELL_S = 1 / 2000
N_POINTS = 2048
CENTRE_PPM = 4.68
ON_PPM, OFF_PPM, PULSE_S = 1.9, 7.5, 0.014

#: Tissue concentrations (mM) and 3 T T2 (s; from memory: NAA ~0.25, Cr ~0.15, Cho ~0.2, GABA
#: ~0.09, GSH ~0.1, others ~0.16-0.18) of the invented brains.
METABOLITES: dict[str, tuple[float, float]] = {
    "NAA": (10.0, 0.25), "NAAG": (1.2, 0.25), "Cr": (5.0, 0.15), "PCr": (3.5, 0.15),
    "GPC": (1.0, 0.20), "PCh": (0.5, 0.20), "mI": (6.0, 0.18), "Glu": (9.0, 0.18),
    "Gln": (3.0, 0.18), "GSH": (1.5, 0.10), "GABA": (1.3, 0.088), "Asp": (2.0, 0.16),
    "Tau": (1.5, 0.16), "sI": (0.3, 0.16),
}
T1_S = 1.3  # one T1 for all metabolites (from memory, ~1.2-1.4 s at 3 T)
#: Voxel composition, tissue water contents (volume fractions) and water T1/T2 at 3 T (s) of
#: the invented voxel (GM 0.84 / WM 0.69 water: Frontiers in Neurology 2019 values of the shared
#: references; CSF 1.0; relaxation from memory, CSF T2 from a 2023 3 T measurement ~2 s).
TISSUE = {"gm": 0.6, "wm": 0.3, "csf": 0.1}
WATER = {"gm": (0.84, 1.82, 0.10), "wm": (0.69, 1.08, 0.07), "csf": (1.0, 4.3, 2.0)}
WATER_MM = 55_510.0  # mM of pure water (1000 / 18.015 mol/kg at about 1 kg/L)
WATER_TR_S = 10.0


@functools.lru_cache(maxsize=4)
def _line_lists(ppm: float) -> dict[str, Any]:
    mhz = larmor_mhz(FIELD_T)
    seq = mega_press(te_s=TE_S, te1_s=TE1_S, spectrometer_mhz=mhz, centre_ppm=CENTRE_PPM,
                     edit=EditPulse(ppm, duration_s=PULSE_S))
    mets = {m.name: m for m in load_metabolites(list(METABOLITES))}
    with threadpool_limits(1):  # small dense matrices: one BLAS thread is fastest
        return {name: simulate_metabolite(met, seq, spectrometer_mhz=mhz, centre_ppm=CENTRE_PPM)
                for name, met in mets.items()}


def _lines_fid(lines: Any, t: np.ndarray, lorentz_hz: float) -> np.ndarray:
    phase = np.exp(-2j * np.pi * np.outer(t, lines.freq_hz))
    return (phase @ lines.amp) * np.exp(-np.pi * lorentz_hz * t)


def _field_shape(t: np.ndarray, rng: np.random.Generator, width_hz: float) -> np.ndarray:
    """Sub-voxel field components: shifted Gaussians of unequal weight (asymmetric lines)."""
    offsets = rng.normal(0, 0.35 * width_hz, 3)
    weights = rng.dirichlet([4, 2, 1])
    sigma = width_hz * 0.6
    gauss = np.exp(-((np.pi * sigma * t) ** 2) / (4 * np.log(2)))
    return gauss * (np.exp(-2j * np.pi * np.outer(t, offsets)) @ weights)


def _mm_fid(t: np.ndarray, mhz: float, lines: list[tuple[float, float, float]]) -> np.ndarray:
    out = np.zeros(t.size, complex)
    for ppm, fwhm_ppm, amp in lines:
        f = (ppm - CENTRE_PPM) * mhz
        out += amp * np.exp(-2j * np.pi * f * t) * np.exp(-np.pi * fwhm_ppm * mhz * t / 2) \
            * np.exp(-((np.pi * fwhm_ppm * mhz * t / 2) ** 2) / (4 * np.log(2)))
    return out


@dataclass(frozen=True)
class EditedScan:
    """One invented edited scan with its water reference and truth."""

    scan: Scan
    water: Scan
    truth: dict[str, float]
    motion_pair: int


def _integral(fid: np.ndarray, ppm_lo: float, ppm_hi: float, mhz: float) -> float:
    spec = np.fft.fftshift(np.fft.fft(fid))
    f = np.fft.fftshift(np.fft.fftfreq(fid.size, DWELL_S))
    ppm = CENTRE_PPM - f / mhz
    sel = (ppm > ppm_lo) & (ppm < ppm_hi)
    return float(np.real(spec[sel]).sum() / fid.size)


def make_edited_scan(seed: int, *, n_pairs: int = 160, snr: float = 160.0,
                     source: str = "invented-edited", drift: bool = True,
                     residual_water: bool = True, motion: bool = True,
                     inhomogeneous: bool = True, macromolecules: bool = True) -> EditedScan:
    """An invented MEGA-PRESS scan: ``(DIM_EDIT = 2, DIM_DYN = n_pairs)`` raw transients.

    Parameters
    ----------
    seed : int
        Seed of everything random.
    n_pairs : int
        ON/OFF pairs (320 transients for 160 pairs).
    snr : float
        NAA peak height over the noise SD of the averaged OFF spectrum (real part).
    drift, residual_water, motion : bool
        Frequency drift and phase jitter, residual water, the motion-corrupted pair.
    inhomogeneous : bool
        Sub-voxel field components (asymmetric lines); False: a Lorentzian broadening of half
        the drawn width instead (line shapes the fit model can represent exactly).
    macromolecules : bool
        The macromolecule lines (common, co-edited and partly inverted); False: none, and
        GABA+ is GABA.
    """
    rng = np.random.default_rng(seed)
    mhz = larmor_mhz(FIELD_T)
    t = np.arange(N_POINTS) * DWELL_S
    conc = {m: c * rng.uniform(0.85, 1.15) for m, (c, _t2) in METABOLITES.items()}
    t2 = {m: t2 * rng.uniform(0.9, 1.1) for m, (_c, t2) in METABOLITES.items()}
    weight = {m: np.exp(-TE_S / t2[m]) * (1 - np.exp(-TR_S / T1_S)) for m in METABOLITES}
    width_hz = rng.uniform(5.0, 8.0)
    shape = _field_shape(t, rng, width_hz)
    if not inhomogeneous:
        shape = np.exp(-np.pi * 0.5 * width_hz * t)
    sub = {}
    for name, ppm in (("on", ON_PPM), ("off", OFF_PPM)):
        lines = _line_lists(ppm)
        sig = np.zeros(N_POINTS, complex)
        for m in METABOLITES:
            # attenuation w (TE and TR) and the metabolite's own Lorentzian width 1/(π T2)
            sig += (1 - TISSUE["csf"]) * conc[m] * weight[m] * _lines_fid(
                lines[m], t, 1 / (np.pi * t2[m]))
        sub[name] = sig
    # macromolecules at TE 68 (own positions/widths/amplitudes), in both conditions
    mm_scale = rng.uniform(0.8, 1.2)
    mm_common = [(0.91, 0.09, 1.2), (1.21, 0.12, 0.9), (1.39, 0.10, 0.7), (1.68, 0.10, 0.9),
                 (2.02, 0.12, 0.8), (2.99, 0.13, 0.7), (3.91, 0.14, 0.8)]
    mm = mm_scale * _mm_fid(t, mhz, mm_common)
    # the ON pulse at 1.9 ppm inverts part of the 1.7 ppm MM and co-edits its 3.0 ppm partner
    co_edit = mm_scale * rng.uniform(0.5, 0.8) * _mm_fid(t, mhz, [(3.00, 0.13, 1.0)])
    partly_inverted = -0.6 * mm_scale * _mm_fid(t, mhz, [(1.68, 0.10, 0.9)])
    if not macromolecules:
        mm, co_edit, partly_inverted = (np.zeros(N_POINTS, complex) for _ in range(3))
    sub["on"] = (sub["on"] + mm + co_edit + partly_inverted) * shape
    sub["off"] = (sub["off"] + mm) * shape

    # truth in GABA-equivalent units (integrals of the generator's own noiseless DIFF)
    lines_on, lines_off = _line_lists(ON_PPM), _line_lists(OFF_PPM)
    g_gaba = _integral((_lines_fid(lines_on["GABA"], t, 4.0)
                        - _lines_fid(lines_off["GABA"], t, 4.0)), 2.8, 3.2, mhz)
    a_mm = _integral(co_edit * np.exp(-np.pi * 4.0 * t), 2.8, 3.2, mhz)
    tcr = conc["Cr"] * weight["Cr"] + conc["PCr"] * weight["PCr"]
    # the co-edited MM was added per voxel, the metabolites per tissue volume (1 - f_CSF)
    a_mm /= 1 - TISSUE["csf"]
    gaba_plus = conc["GABA"] * weight["GABA"] + a_mm / g_gaba
    truth = {"GABA+/tCr": gaba_plus / tcr, "GABA/tCr": conc["GABA"] * weight["GABA"] / tcr,
             "GABA_mM": conc["GABA"], "GABA+_mM": gaba_plus / weight["GABA"],
             "NAA/tCr": conc["NAA"] * weight["NAA"] / tcr,
             "co_edited_fraction": (a_mm / g_gaba) / gaba_plus}

    # transients: drift, jitter, residual water, one motion-corrupted pair, noise
    n = n_pairs
    drift_hz = np.linspace(0, rng.uniform(-4, 4), 2 * n) + rng.normal(0, 0.3, 2 * n)
    phases = rng.normal(0, np.deg2rad(3), 2 * n)
    if not drift:
        drift_hz[:] = 0.0
        phases[:] = 0.0
    water_amp = rng.uniform(5, 50) * conc["NAA"] * weight["NAA"] * 3
    w_f = (4.68 - CENTRE_PPM) * mhz + rng.uniform(-3, 3)
    residual = water_amp * np.exp(-2j * np.pi * w_f * t) * np.exp(-np.pi * 25 * t)
    if not residual_water:
        residual = np.zeros_like(residual)
    # noise SD 1 per component of each transient; the averaged OFF spectrum then has noise SD
    # sqrt(N_POINTS / n) in its real part, and its tallest peak is scaled to snr times that
    sd_tr = 1.0
    scale = snr * np.sqrt(N_POINTS / n) / np.max(np.real(np.fft.fft(sub["off"])))
    # fit amplitudes (per molecule) are this times concentration × attenuation
    truth["amplitude_per_mM"] = float(scale * (1 - TISSUE["csf"]))
    truth["tCr_weighted"] = float(tcr)
    truth["GABA+_weighted"] = float(gaba_plus)
    motion_pair = int(rng.integers(n // 4, 3 * n // 4)) if motion else -1
    data = np.zeros((2, n, N_POINTS), complex)
    for k in range(n):
        for c, name in enumerate(("on", "off")):
            idx = 2 * k + c
            sig = scale * sub[name]
            res = scale * residual * (1 + 0.05 * rng.normal())
            f = drift_hz[idx]
            ph = phases[idx]
            if k == motion_pair and name == "on":
                f += 9.0
                ph += np.deg2rad(40)
                sig = 0.6 * sig
            x = (sig + res) * np.exp(1j * ph) * np.exp(-2j * np.pi * f * t)
            data[c, k] = x + sd_tr * (rng.normal(size=N_POINTS) + 1j * rng.normal(size=N_POINTS))
    header = {
        "SequenceName": "MEGA-PRESS (invented)",
        "EditPulse": {"ON": {"PulseOffset": ON_PPM, "PulseDuration": PULSE_S},
                      "OFF": {"PulseOffset": OFF_PPM, "PulseDuration": PULSE_S}},
    }
    scan = Scan(data=data.astype(np.complex64), dwell_s=DWELL_S,
                spectrometer_mhz=mhz, nucleus="1H", dims=("DIM_EDIT", "DIM_DYN"),
                te_s=TE_S, tr_s=TR_S, sequence=None, centre_ppm=CENTRE_PPM,
                timings={"te1_s": TE1_S},
                dim_headers={"DIM_EDIT": {"header": {"EditCondition": ["ON", "OFF"]}}},
                header=header, source=source, format="nifti-mrs")
    # water reference: same field shape, no suppression, 8 transients
    water_sig = np.zeros(N_POINTS, complex)
    for tissue, frac in TISSUE.items():
        content, t1w, t2w = WATER[tissue]
        att = np.exp(-TE_S / t2w) * (1 - np.exp(-WATER_TR_S / t1w))
        water_sig += frac * content * WATER_MM * 2 * att * np.exp(-t / t2w)
    water_sig = scale * water_sig * np.exp(-2j * np.pi * w_f * t) * shape
    wdata = np.array([water_sig * np.exp(-2j * np.pi * rng.normal(0, 0.3) * t)
                      + sd_tr * (rng.normal(size=N_POINTS) + 1j * rng.normal(size=N_POINTS))
                      for _ in range(8)])
    water = Scan(data=wdata.astype(np.complex64), dwell_s=DWELL_S, spectrometer_mhz=mhz,
                 nucleus="1H", dims=("DIM_DYN",), te_s=TE_S, tr_s=WATER_TR_S, sequence="press",
                 centre_ppm=CENTRE_PPM, timings={"te1_s": TE1_S}, source=source + "-water")
    return EditedScan(scan=scan, water=water, truth=truth, motion_pair=motion_pair)
