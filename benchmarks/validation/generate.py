"""Generate the independent validation corpus: raw single-voxel NIfTI-MRS scans with their truth.

Usage::

    python benchmarks/validation/generate.py OUTDIR [--preset full|ci] [--subset N] [--seed S]

writes into OUTDIR (created; never commit it):

* ``scans/<scan_id>_svs.nii.gz`` and ``scans/<scan_id>_ref.nii.gz``: raw transients (and coils)
  of the water-suppressed scan and of its unsuppressed water reference;
* ``manifest.tsv``: the table for ``specproc batch`` (``scan``, ``water``, ``subject``,
  ``scan_id``, tissue fractions, ``te1_ms`` for the scans whose timing is given there, and
  ``kind = phantom`` for the phantoms, as a user marks them);
* ``truth.json``: every drawn parameter of every scan and the true values;
* ``truth.tsv``: one row per scan and measure with the relaxation-weighted ratio to tCr and,
  for tissue scans, the water-referenced concentration (mM of GM+WM tissue);
* ``mm/mm_<field>T_TE<te>.nii.gz`` and ``mm/mm_spectra.json``: a "measured" macromolecule
  spectrum per field and TE of the tissue scans, as a user would have one (a cohort average:
  the MM model at its nominal parameters with its own noise; :data:`MEASURED_MM_SNR`), for
  ``specproc fit --mm-spectrum`` / the manifest column ``mm_spectrum`` (``score.py
  --mm-spectra``); ``--mm-only`` writes just these.

What the generator models, and why it is independent of the fit
----------------------------------------------------------------
The generator shares no line-shape, macromolecule, baseline or water code with specproc's fit
model (``specproc/fit``, the basis macromolecules, ``specproc/synthetic.py``,
``demo_spectra/make_demo.py``) and writes its files with plain nibabel (its own minimal
NIfTI-MRS writer, following the NIfTI-MRS standard, Clarke et al., Magn Reson Med
2022;88:2358-2370). It uses one part of specproc: the density-matrix engine
(:mod:`specproc.spins`, checked against qutip in the test suite) for the line lists of each
metabolite at the scan's TRUE sequence timings (PRESS with uneven TE1/TE2), and its line
synthesis :func:`specproc.spins.simulate.synthesize_fid` (a plain sum of exponentials).

* Per-metabolite T2 and T1 from the literature (tables below; values from memory unless
  marked checked), with per-subject scatter; the signal of each metabolite is weighted by
  ``exp(-TE/T2) (1 - exp(-TR/T1))`` and decays in the FID with its own ``exp(-t/T2)``.
* Line shape: a field-inhomogeneity function shared by all signals of a voxel, a weighted sum
  of 1-5 sub-voxel components with shifted frequencies (skewed, so asymmetric), each a Voigt
  decay with a Lorentzian/Gaussian mix drawn per scan; its scale is solved so that the NAA
  singlet has the drawn full width at half maximum.
* Macromolecules: ten Lorentzian multiplets (three sub-lines each) at about 0.91, 1.21, 1.39,
  1.67, 2.01, 2.26, 2.99, 3.21, 3.79 and 3.96 ppm, widths from a short T2 plus a ppm spread,
  amplitudes with per-subject scatter and T2 decay between TE 30 and TE 144 (not the fit's
  Gaussian components).
* Residual water: 5-50 times the NAA singlet area, several narrow components of random phase
  near the water shift plus one broad component with a dispersive phase (broad tails).
* Raw transients (32, 2,048 points) with frequency and phase drift, a few corrupted
  transients, white noise set so that the coil-combined average has the drawn SNR; a third
  of the tissue scans have 4 coils with complex sensitivities.
* Eddy currents in 40 % of the scans: a phase ``a exp(-t/τ)`` (|a| 0.3-1 rad, τ 20-80 ms)
  shared by the scan and its water reference.
* Water reference: the same voxel without suppression, three tissue compartments with their
  own water content, T1 and T2 (multi-exponential decay), 4 transients, the same coils.
* Phantoms: 1.5-2 Hz lines, one T2 and T1 for all metabolites, no macromolecules, water at
  its shift for the phantom temperature (-0.01 ppm/°C from 4.65 ppm at 37 °C, common
  practice) with the receiver centred on it.

Sequence timings: PRESS TE1 is uneven (10-17 ms at TE 30, 20-30 ms at TE 144). Most scans
carry it in the user header key ``specproc_timings`` (``{"Value": {"te1_s": ...},
"Description": ...}``); for some it is given instead in the manifest column ``te1_ms``; the
``timing-none`` category carries it nowhere (what a user who does not know it gets).

SNR definition: height of the NAA singlet (2.008 ppm; 3 protons of NAA alone, with the scan's
line shape) in the real part of the spectrum of the coil-combined average of all transients,
divided by the SD of the real part of its noise (``fftshift(fft(fid))``, no apodization).

Seeds: every scan's draws come from ``numpy.random.default_rng(SeedSequence([seed, category,
index]))`` with ``seed = 20261202`` by default, so a subset reproduces the same scans as the
full corpus.

Research use only; not a medical device.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import sys
from collections.abc import Iterable, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import nibabel as nib
import numpy as np
from scipy.constants import physical_constants

from specproc.spins.sequences import build_sequence
from specproc.spins.simulate import LineList, simulate_metabolite, synthesize_fid
from specproc.spins.systems import load_metabolites

__all__ = [
    "CATEGORIES",
    "DEFAULT_SEED",
    "MEASURES",
    "ScanSpec",
    "generate",
    "plan_corpus",
    "select_subset",
    "write_measured_mm",
    "write_nifti_mrs",
]

DEFAULT_SEED = 20261202

#: Proton gyromagnetic ratio / 2π, MHz/T (CODATA via scipy.constants).
GAMMA_MHZ_PER_T = physical_constants["proton gyromag. ratio"][0] / (2 * math.pi) / 1e6

#: Pure water, mmol/L with the density taken as 1 kg/L (55.51 mol/kg; the convention of
#: Gasparovic et al., Magn Reson Med 2006;55:1219-1226).
WATER_MM = 1000.0 / 18.01528 * 1000.0

#: The receiver centre and water shift at 37 °C, ppm (common practice).
WATER_PPM_37C = 4.65
#: Temperature coefficient of the water shift, ppm/°C (about -0.01, common practice).
WATER_PPM_PER_C = -0.01

#: The intent name of NIfTI-MRS 0.9 and its header-extension code (NIfTI-MRS standard).
NIFTI_MRS_INTENT = "mrs_v0_9"
NIFTI_MRS_ECODE = 44

#: Measures scored: combined sums use these members (molecule sums).
MEASURES: dict[str, tuple[str, ...]] = {
    "tNAA": ("NAA", "NAAG"),
    "tCho": ("GPC", "PCh"),
    "mI": ("mI",),
    "Glu": ("Glu",),
    "Glx": ("Glu", "Gln"),
    "Lac": ("Lac",),
}
TCR = ("Cr", "PCr")

#: Categories of the corpus: name -> (number of scans in the full preset).
CATEGORIES: dict[str, int] = {
    "3T-TE30": 120,
    "1.5T-TE30": 20,
    "7T-TE30": 20,
    "3T-TE144": 20,
    "lactate": 16,
    "phantom": 10,
    "timing-none": 14,
}

# ------------------------------------------------------------------ literature tables
#: Adult brain concentration ranges for the per-subject draws, mM (uniform within the range).
#: de Graaf RA, In Vivo NMR Spectroscopy, 3rd ed., Wiley 2019, ch. 2 and Govindaraju et al.,
#: NMR Biomed 2000;13:129-153, table 1 (ranges from memory, rounded).
CONC_RANGE_MM: dict[str, tuple[float, float]] = {
    "NAA": (8.0, 11.5), "NAAG": (0.6, 2.0), "Cr": (3.5, 5.0), "PCr": (3.0, 4.5),
    "GPC": (0.8, 1.6), "PCh": (0.3, 0.8), "mI": (4.0, 8.0), "sI": (0.2, 0.5),
    "Glu": (7.0, 11.5), "Gln": (2.0, 4.5), "GABA": (1.0, 2.0), "GSH": (1.0, 2.5),
    "Tau": (0.8, 1.8), "Asp": (1.0, 2.0), "Lac": (0.3, 1.0), "Ala": (0.1, 0.5),
    "PE": (1.0, 2.0), "Glc": (1.0, 2.0), "Asc": (1.0, 2.0), "Gly": (0.4, 1.0),
}
#: Lactate of the lactate cases, mM (at least 3 mM as in the issue's target).
LACTATE_CASE_MM = (3.0, 10.0)

#: Tissue T2 by field (T -> s): values from memory of Kreis, Prog NMR Spectrosc 1997;31:155 (1.5
#: T), Mlynárik et al., NMR Biomed 2001;14:325 and Ganji et al., NMR Biomed 2012;25:523 (3 T),
#: Marjańska et al., NMR Biomed 2012;25:332 (7 T), and, read this round (checked), parietal
#: white matter at 3 T NAA 0.168, Cr 0.126, Cho 0.174 s (PMC9244865) and Glu/Gln/mI about
#: 0.16-0.17 s (Choi et al., ISMRM 2010 #3330): the 3 T centres lie inside those spreads.
T2_S: dict[float, dict[str, float]] = {
    1.5: {"NAA": 0.35, "NAAG": 0.35, "Cr": 0.22, "PCr": 0.22, "GPC": 0.30, "PCh": 0.30,
          "mI": 0.25, "Glu": 0.22, "Gln": 0.22, "GABA": 0.12, "GSH": 0.14, "Lac": 0.35},
    3.0: {"NAA": 0.21, "NAAG": 0.21, "Cr": 0.14, "PCr": 0.14, "GPC": 0.19, "PCh": 0.19,
          "mI": 0.17, "Glu": 0.165, "Gln": 0.165, "GABA": 0.09, "GSH": 0.10, "Lac": 0.24},
    7.0: {"NAA": 0.13, "NAAG": 0.13, "Cr": 0.095, "PCr": 0.095, "GPC": 0.12, "PCh": 0.12,
          "mI": 0.10, "Glu": 0.10, "Gln": 0.10, "GABA": 0.07, "GSH": 0.08, "Lac": 0.15},
}
#: T2 of metabolites without an entry (assumption near creatine), s.
T2_DEFAULT_S = {1.5: 0.22, 3.0: 0.14, 7.0: 0.09}
#: Tissue T1 by field, s: 3 T NAA 1.41, Cr 1.35, Cho 1.26 (checked, PMC9244865); the rest and
#: the other fields from memory (Kreis 1997; Xin et al., Magn Reson Med 2013;69:931).
T1_S: dict[float, dict[str, float]] = {
    1.5: {"NAA": 1.40, "NAAG": 1.40, "Cr": 1.45, "PCr": 1.45, "GPC": 1.15, "PCh": 1.15,
          "mI": 1.05, "Glu": 1.15, "Gln": 1.15, "Lac": 1.50},
    3.0: {"NAA": 1.41, "NAAG": 1.41, "Cr": 1.35, "PCr": 1.35, "GPC": 1.26, "PCh": 1.26,
          "mI": 1.15, "Glu": 1.25, "Gln": 1.25, "Lac": 1.60},
    7.0: {"NAA": 1.60, "NAAG": 1.60, "Cr": 1.60, "PCr": 1.60, "GPC": 1.30, "PCh": 1.30,
          "mI": 1.35, "Glu": 1.45, "Gln": 1.45, "Lac": 1.70},
}
T1_DEFAULT_S = {1.5: 1.35, 3.0: 1.35, 7.0: 1.55}
#: Per-subject scatter of T2 and T1 (log-normal SD).
T2_SCATTER = 0.10
T1_SCATTER = 0.08

#: Tissue water: MR-visible water content relative to pure water (GM 0.78, WM 0.65, CSF 0.97;
#: Ernst et al., J Magn Reson B 1993;102:1-8, from memory; the convention of Gasparovic 2006),
#: and water T1, T2 by field, s. 1.5 and 3 T tissue: Stanisz et al., Magn Reson Med
#: 2005;54:507 (from memory); 7 T: Rooney et al., Magn Reson Med 2007;57:308 (T1, from memory),
#: T2 about 50 ms (from memory, uncertain); CSF at 3 T T1 4.31-4.45 s and T2 1.89-2.37 s
#: (checked, PMC10696635), taken for all fields (T2 shorter at 7 T, from memory).
WATER_CONTENT = {"gm": 0.78, "wm": 0.65, "csf": 0.97}
WATER_T1_S = {1.5: {"gm": 1.12, "wm": 0.88, "csf": 4.35},
              3.0: {"gm": 1.82, "wm": 1.08, "csf": 4.38},
              7.0: {"gm": 2.10, "wm": 1.22, "csf": 4.40}}
WATER_T2_S = {1.5: {"gm": 0.095, "wm": 0.072, "csf": 2.1},
              3.0: {"gm": 0.099, "wm": 0.069, "csf": 2.1},
              7.0: {"gm": 0.050, "wm": 0.045, "csf": 1.0}}

#: Macromolecule multiplets of this generator (not the fit's components): centre shift ppm,
#: sub-line spread ppm (lines at -s, 0, +s with weights 1:2:1), amplitude in proton·mM at
#: TE 30 ms, relative Lorentzian width factor. Positions after the consensus naming
#: (Cudalbu et al., NMR Biomed 2021;34:e4393, checked) and the commonly used peaks near 2.3,
#: 3.0, 3.2, 3.8-4.0 ppm (from memory); widths and amplitudes are this generator's own choice.
MM_LINES: tuple[tuple[float, float, float, float], ...] = (
    (0.91, 0.030, 22.0, 1.0),
    (1.21, 0.035, 16.0, 1.1),
    (1.39, 0.030, 10.0, 0.9),
    (1.67, 0.035, 9.0, 1.0),
    (2.01, 0.045, 18.0, 1.3),
    (2.26, 0.035, 10.0, 1.1),
    (2.99, 0.030, 10.0, 0.9),
    (3.21, 0.035, 6.0, 1.1),
    (3.79, 0.045, 12.0, 1.4),
    (3.96, 0.040, 10.0, 1.3),
)
#: Macromolecule T2 by field, s (short; from memory, e.g. about 20-40 ms at 3 T).
MM_T2_S = {1.5: 0.045, 3.0: 0.035, 7.0: 0.025}

#: Measured macromolecule spectra written beside the corpus (``mm/``), one per field and TE of
#: the tissue scans, as a user would have them: the generator's MM model at its nominal
#: parameters (no per-subject scatter of amplitudes, positions, widths or T2), decayed to the
#: scan's TE, with the line shape of a well-shimmed acquisition (a symmetric Voigt, half
#: Lorentzian, scaled so that an NAA singlet would have the FWHM below: the narrow end of the
#: corpus's widths, as after frequency alignment of a cohort; this generator's choice) and its
#: own white noise (height of the tallest MM line over the noise SD of the real spectrum:
#: :data:`MEASURED_MM_SNR`, about what a cohort average of metabolite-nulled scans gives, from
#: memory). Such a spectrum is not the exact MM signal of any one scan (which has its subject's
#: scatter and line shape). Metabolite residues of an imperfect nulling are not modelled.
MEASURED_MM_NAA_FWHM_HZ = {1.5: 3.0, 3.0: 4.0, 7.0: 9.0}
MEASURED_MM_SNR = 50.0
#: Seed key of the measured MM spectra (apart from every scan's keys).
MEASURED_MM_SEED_KEY = 77

#: Phantom composition, mM (a common brain-like phantom recipe, from memory; choline as GPC).
PHANTOM_MM = {"NAA": 12.5, "Cr": 10.0, "GPC": 3.0, "mI": 7.5, "Glu": 12.5, "Lac": 5.0}

#: Spectral width by field, Hz; points and transients.
SPECTRAL_WIDTH_HZ = {1.5: 1000.0, 3.0: 2000.0, 7.0: 4000.0}
N_POINTS = 2048
N_TRANSIENTS = 32
N_WATER_TRANSIENTS = 4

#: PRESS first echo times (s) of the simulated protocols (uneven splits of TE).
TE1_CHOICES_S = {0.030: (0.010, 0.012, 0.013, 0.015, 0.017), 0.144: (0.020, 0.024, 0.027, 0.030)}

TIMING_DESCRIPTION = (
    "Sequence sub-timings of the acquisition, s: PRESS te1_s is the first echo time "
    "(TE2 = EchoTime - te1_s)."
)


@dataclass(frozen=True)
class ScanSpec:
    """The protocol-level plan of one scan (subject draws are made when it is synthesised).

    Attributes
    ----------
    scan_id, category : str
        Identifier and category (a key of :data:`CATEGORIES`).
    index : int
        Index within the category (part of the seed).
    field_t, te_s, te1_s, tr_s : float
        Field (T), echo time, PRESS first echo time, repetition time (s).
    snr : float
        Target SNR of the combined average (definition in the module docstring).
    naa_fwhm_hz : float
        Target full width at half maximum of the NAA singlet, Hz.
    n_coils : int
        Receive coils (1: no coil dimension).
    timing : str
        Where TE1 is given: ``header`` (user key), ``manifest`` (column ``te1_ms``) or ``none``.
    phantom : bool
        A phantom (no tissue, no macromolecules, equal relaxation).
    lactate_mm : float or None
        Lactate of a lactate case, mM (None: the tissue draw).
    narrow : bool
        A scan of the CI preset (narrow lines).
    seed_keys : (int, int)
        Category key and index of the scan's random streams (see the module docstring).
    extra : dict
        Further settings (``temperature_c`` of a phantom).
    """

    scan_id: str
    category: str
    index: int
    field_t: float
    te_s: float
    te1_s: float
    tr_s: float
    snr: float
    naa_fwhm_hz: float
    n_coils: int
    timing: str
    phantom: bool = False
    lactate_mm: float | None = None
    narrow: bool = False
    seed_keys: tuple[int, int] = (0, 0)
    extra: dict[str, float] = field(default_factory=dict)


# ------------------------------------------------------------------ the plan
def _rng(seed: int, *keys: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([int(seed), *map(int, keys)]))


def _log_uniform(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


def plan_corpus(seed: int = DEFAULT_SEED, preset: str = "full") -> list[ScanSpec]:
    """The deterministic list of scans of a preset.

    Parameters
    ----------
    seed : int
        Master seed.
    preset : {"full", "ci"}
        ``full``: the corpus of :data:`CATEGORIES` (220 scans). ``ci``: 20 scans at 3 T TE 30
        with narrow lines (NAA 3-5 Hz), SNR 60-150, distinct T2, timing in the header.

    Returns
    -------
    list of ScanSpec
    """
    if preset == "ci":
        return [_plan_ci(seed, i) for i in range(20)]
    if preset != "full":
        raise ValueError(f"unknown preset {preset!r}")
    specs: list[ScanSpec] = []
    for c_index, (category, count) in enumerate(CATEGORIES.items()):
        for i in range(count):
            specs.append(_plan_one(seed, c_index, category, i))
    return specs


def _plan_ci(seed: int, i: int) -> ScanSpec:
    rng = _rng(seed, 99, i, 0)
    return ScanSpec(
        scan_id=f"ci-{i + 1:03d}", category="3T-TE30", index=i, seed_keys=(99, i), field_t=3.0,
        te_s=0.030, te1_s=float(rng.choice(TE1_CHOICES_S[0.030])),
        tr_s=float(rng.uniform(2.0, 3.0)), snr=_log_uniform(rng, 60.0, 150.0),
        naa_fwhm_hz=float(rng.uniform(3.0, 5.0)), n_coils=4 if i % 4 == 0 else 1,
        timing="header", narrow=True,
    )


def _plan_one(seed: int, c_index: int, category: str, i: int) -> ScanSpec:
    rng = _rng(seed, c_index, i, 0)
    sid = f"{category.lower().replace('.', 'p')}-{i + 1:03d}"
    timing = "manifest" if rng.uniform() < 0.25 else "header"
    coils = 4 if rng.uniform() < 1 / 3 else 1
    tr = float(rng.uniform(2.0, 3.0))
    base = {"scan_id": sid, "category": category, "index": i, "tr_s": tr, "n_coils": coils,
            "timing": timing, "seed_keys": (c_index, i)}
    if category == "3T-TE30":
        snr = _log_uniform(rng, 20.0, 150.0)
        return ScanSpec(field_t=3.0, te_s=0.030, te1_s=float(rng.choice(TE1_CHOICES_S[0.030])),
                        snr=snr, naa_fwhm_hz=float(rng.uniform(3.0, 12.0)), **base)
    if category == "1.5T-TE30":
        return ScanSpec(field_t=1.5, te_s=0.030, te1_s=float(rng.choice(TE1_CHOICES_S[0.030])),
                        snr=_log_uniform(rng, 20.0, 150.0),
                        naa_fwhm_hz=float(rng.uniform(3.0, 6.0)), **base)
    if category == "7T-TE30":
        return ScanSpec(field_t=7.0, te_s=0.030, te1_s=float(rng.choice(TE1_CHOICES_S[0.030])),
                        snr=_log_uniform(rng, 20.0, 150.0),
                        naa_fwhm_hz=float(rng.uniform(8.0, 15.0)), **base)
    if category == "3T-TE144":
        return ScanSpec(field_t=3.0, te_s=0.144, te1_s=float(rng.choice(TE1_CHOICES_S[0.144])),
                        snr=_log_uniform(rng, 20.0, 150.0),
                        naa_fwhm_hz=float(rng.uniform(3.0, 10.0)), **base)
    if category == "lactate":
        te = 0.144 if i < 12 else 0.030
        return ScanSpec(field_t=3.0, te_s=te, te1_s=float(rng.choice(TE1_CHOICES_S[te])),
                        snr=_log_uniform(rng, 25.0, 150.0),
                        naa_fwhm_hz=float(rng.uniform(3.0, 10.0)),
                        lactate_mm=float(rng.uniform(*LACTATE_CASE_MM)), **base)
    if category == "phantom":
        layout = [(3.0, 0.030)] * 4 + [(3.0, 0.144)] * 2 + [(1.5, 0.030)] * 2 + [(7.0, 0.030)] * 2
        field_t, te = layout[i % len(layout)]
        base.update(timing="header", n_coils=1 if i % 3 else 4, tr_s=float(rng.uniform(3.0, 5.0)))
        temperature = float(rng.uniform(18.0, 26.0))
        return ScanSpec(field_t=field_t, te_s=te, te1_s=float(rng.choice(TE1_CHOICES_S[te])),
                        snr=_log_uniform(rng, 80.0, 150.0),
                        naa_fwhm_hz=float(rng.uniform(1.5, 2.0)), phantom=True,
                        extra={"temperature_c": temperature}, **base)
    if category == "timing-none":
        te = 0.144 if i >= 10 else 0.030
        base["timing"] = "none"
        return ScanSpec(field_t=3.0, te_s=te, te1_s=float(rng.choice(TE1_CHOICES_S[te])),
                        snr=_log_uniform(rng, 25.0, 150.0),
                        naa_fwhm_hz=float(rng.uniform(3.0, 10.0)), **base)
    raise ValueError(f"unknown category {category!r}")


def select_subset(specs: Sequence[ScanSpec], n: int) -> list[ScanSpec]:
    """About ``n`` scans spread over the categories (round robin, in plan order)."""
    by_cat: dict[str, list[ScanSpec]] = {}
    for s in specs:
        by_cat.setdefault(s.category, []).append(s)
    out: list[ScanSpec] = []
    k = 0
    while len(out) < min(n, len(specs)):
        for items in by_cat.values():
            if k < len(items) and len(out) < n:
                out.append(items[k])
        k += 1
    return out


# ------------------------------------------------------------------ physics
class _LineCache:
    """Metabolite line lists per (field, TE, TE1, centre), simulated once."""

    def __init__(self) -> None:
        self._mets = {m.name: m for m in load_metabolites() if m.name in CONC_RANGE_MM}
        self._lines: dict[tuple[float, float, float, float], dict[str, LineList]] = {}
        self._fids: dict[tuple[Any, ...], np.ndarray] = {}

    def fid(self, name: str, *, field_t: float, te_s: float, te1_s: float, centre_ppm: float,
            dwell_s: float, n_points: int) -> np.ndarray:
        key = (round(field_t, 6), round(te_s, 6), round(te1_s, 6), round(centre_ppm, 6))
        fkey = (*key, name, dwell_s, n_points)
        if fkey not in self._fids:
            if key not in self._lines:
                seq = build_sequence("press", te_s=te_s, te1_s=te1_s)
                mhz = GAMMA_MHZ_PER_T * field_t
                self._lines[key] = {
                    n: simulate_metabolite(m, seq, spectrometer_mhz=mhz, centre_ppm=centre_ppm)
                    for n, m in self._mets.items()
                }
            self._fids[fkey] = synthesize_fid(self._lines[key][name], dwell_s=dwell_s,
                                              n_points=n_points)
        return self._fids[fkey]


def _nominal_field(field_t: float) -> float:
    return min(T2_S, key=lambda f: abs(f - field_t))


def _inhomogeneity(rng: np.random.Generator) -> dict[str, Any]:
    """Shape parameters of the sub-voxel field distribution (before scaling)."""
    n_comp = int(rng.integers(1, 6))
    weights = rng.dirichlet(np.full(n_comp, 2.0))
    # skewed offsets (a gamma draw, mirrored at random): asymmetric line shapes
    offsets = rng.gamma(2.0, 1.0, n_comp) * (1 if rng.uniform() < 0.5 else -1)
    offsets = offsets - np.sum(weights * offsets)
    return {
        "weights": weights.tolist(),
        "offsets": offsets.tolist(),
        "lorentz_fraction": float(rng.uniform(0.15, 0.85)),
        "spread": float(rng.uniform(0.1, 0.6)) if n_comp > 1 else 0.0,
    }


def _shape_fid(shape: dict[str, Any], scale_hz: float, t: np.ndarray) -> np.ndarray:
    """The field-inhomogeneity decay g(t) (g(0) = 1) at a width scale of ``scale_hz``."""
    lf = shape["lorentz_fraction"]
    lorentz = lf * scale_hz
    gauss = (1.0 - lf) * scale_hz
    env = np.exp(-np.pi * lorentz * t - (np.pi * gauss * t) ** 2 / (4 * np.log(2)))
    comp = np.zeros(t.size, dtype=np.complex128)
    for w, off in zip(shape["weights"], shape["offsets"], strict=True):
        comp += w * np.exp(-2j * np.pi * off * shape["spread"] * scale_hz * t)
    return env * comp


def _fwhm_hz(fid: np.ndarray, dwell_s: float) -> float:
    """Full width at half maximum of the absorption of a single line's FID, Hz.

    Measured between the outermost points above half the maximum, so that a line split into
    resolved sub-voxel components counts its whole width (walking out from the maximum only
    measured its tallest part: 11 Hz for a 42 Hz line of two components).
    """
    n = 1 << 16
    padded = np.zeros(n, dtype=np.complex128)
    m = min(fid.size, n)
    padded[:m] = fid[:m]
    padded[0] *= 0.5
    spec = np.fft.fftshift(np.fft.fft(padded)).real
    above = np.flatnonzero(spec > spec.max() / 2)
    # from the last point at or below half height on the left to the first on the right
    left = max(int(above[0]) - 1, 0)
    right = min(int(above[-1]) + 1, n - 1)
    return (right - left) / (n * dwell_s)


def _solve_scale(shape: dict[str, Any], target_hz: float, t2_s: float, dwell_s: float) -> float:
    """Width scale of the shape for which a line of T2 ``t2_s`` has the target FWHM (bisection)."""
    t = np.arange(32768) * dwell_s / 8
    intrinsic = np.exp(-t / t2_s)
    lo, hi = 0.0, 4 * target_hz
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        if _fwhm_hz(intrinsic * _shape_fid(shape, mid, t), dwell_s / 8) < target_hz:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def _draw_relaxation(rng: np.random.Generator, field_t: float, names: Iterable[str],
                     phantom: bool) -> tuple[dict[str, float], dict[str, float]]:
    nf = _nominal_field(field_t)
    t2: dict[str, float] = {}
    t1: dict[str, float] = {}
    if phantom:  # one T2 and T1 for every metabolite
        common_t2 = float(rng.uniform(0.4, 0.6))
        common_t1 = float(rng.uniform(1.2, 1.8))
        return dict.fromkeys(names, common_t2), dict.fromkeys(names, common_t1)
    for name in names:
        t2[name] = T2_S[nf].get(name, T2_DEFAULT_S[nf]) * float(np.exp(rng.normal(0, T2_SCATTER)))
        t1[name] = T1_S[nf].get(name, T1_DEFAULT_S[nf]) * float(np.exp(rng.normal(0, T1_SCATTER)))
    return t2, t1


def _tissue_fractions(rng: np.random.Generator) -> dict[str, float]:
    gm = rng.uniform(0.35, 0.70)
    csf = rng.uniform(0.03, 0.20)
    wm = 1.0 - gm - csf
    if wm < 0.1:
        gm -= 0.1 - wm
        wm = 0.1
    return {"gm": float(gm), "wm": float(wm), "csf": float(csf)}


@dataclass
class _Synth:
    """What synthesising one scan produced (arrays and the truth record)."""

    scan: np.ndarray  # (coils, transients, points) or (transients, points)
    water: np.ndarray
    header: dict[str, Any]
    water_header: dict[str, Any]
    dwell_s: float
    truth: dict[str, Any]


def synthesise(spec: ScanSpec, cache: _LineCache, seed: int = DEFAULT_SEED) -> _Synth:
    """Draw one subject and protocol realisation and make its raw scan and water reference."""
    rng = _rng(seed, *spec.seed_keys, 1)
    field_t = spec.field_t
    mhz = GAMMA_MHZ_PER_T * field_t
    nf = _nominal_field(field_t)
    dwell = 1.0 / SPECTRAL_WIDTH_HZ[nf]
    n = N_POINTS
    t = np.arange(n) * dwell

    # --- subject: concentrations, relaxation, tissue
    if spec.phantom:
        conc = dict(PHANTOM_MM)
        temperature = spec.extra["temperature_c"]
        water_ppm = WATER_PPM_37C + WATER_PPM_PER_C * (temperature - 37.0)
        tissue = None
        tissue_scale = 1.0
    else:
        conc = {m: float(rng.uniform(*r)) for m, r in CONC_RANGE_MM.items()}
        if spec.lactate_mm is not None:
            conc["Lac"] = spec.lactate_mm
        temperature = 37.0
        water_ppm = WATER_PPM_37C
        tissue = _tissue_fractions(rng)
        tissue_scale = 1.0 - tissue["csf"]
    t2, t1 = _draw_relaxation(rng, field_t, conc, spec.phantom)
    weight = {m: math.exp(-spec.te_s / t2[m]) * (1 - math.exp(-spec.tr_s / t1[m])) for m in conc}

    # --- line shape (scaled so that the NAA singlet has the target width)
    shape = _inhomogeneity(rng)
    scale_hz = _solve_scale(shape, spec.naa_fwhm_hz, t2["NAA"], dwell)
    g = _shape_fid(shape, scale_hz, t)

    # receiver centre: at the water (in vivo 4.65 ppm plus a B0 offset; phantom: its water)
    centre = water_ppm
    offset_hz = float(rng.normal(0.0, 0.04)) * mhz if not spec.phantom else 0.0
    gain = float(_log_uniform(rng, 1e-4, 1e-2))
    phase0 = float(rng.uniform(-np.pi, np.pi))
    # eddy currents in 40 % of the scans: a decaying phase shared by scan and reference
    eddy = None
    if rng.uniform() < 0.4:
        eddy = {"phase_rad": float(rng.uniform(0.3, 1.0)) * (1 if rng.uniform() < 0.5 else -1),
                "tau_s": float(rng.uniform(0.02, 0.08))}

    metab = np.zeros(n, dtype=np.complex128)
    for name, c in conc.items():
        unit = cache.fid(name, field_t=field_t, te_s=spec.te_s, te1_s=spec.te1_s,
                         centre_ppm=centre, dwell_s=dwell, n_points=n)
        metab += c * tissue_scale * weight[name] * unit * np.exp(-t / t2[name])

    # --- macromolecules (tissue only)
    mm_record = []
    if not spec.phantom:
        t2_mm = MM_T2_S[nf] * float(np.exp(rng.normal(0, 0.15)))
        for shift, spread, amp30, wfac in MM_LINES:
            a = amp30 * float(np.exp(rng.normal(0, 0.2)))
            a *= math.exp(-(spec.te_s - 0.030) / t2_mm) * tissue_scale
            s = shift + float(rng.normal(0, 0.01))
            lw = wfac * float(np.exp(rng.normal(0, 0.15))) / (math.pi * t2_mm)
            for dpp, w in ((-spread, 0.25), (0.0, 0.5), (spread, 0.25)):
                nu = (s + dpp - centre) * mhz
                metab += a * w * np.exp(-2j * np.pi * nu * t - np.pi * lw * t)
            mm_record.append({"shift_ppm": s, "spread_ppm": spread, "amplitude": a,
                              "lorentz_hz": lw})

    # --- water (reference and residual)
    naa_singlet = 3.0 * conc["NAA"] * tissue_scale * weight["NAA"]
    water_clean = _water_signal(rng, spec, tissue, t, field_t, (water_ppm - centre) * mhz)
    residual_ratio = _log_uniform(rng, 5.0, 50.0)
    residual = _residual_water(rng, t, mhz, (water_ppm - centre) * mhz, naa_singlet *
                               residual_ratio)

    scan_clean = (metab + residual) * g
    ref_clean = (water_clean["fid"] + metab) * g
    common = gain * np.exp(1j * phase0) * np.exp(-2j * np.pi * offset_hz * t)
    if eddy is not None:
        common = common * np.exp(1j * eddy["phase_rad"] * np.exp(-t / eddy["tau_s"]))
    scan_clean = scan_clean * common
    ref_clean = ref_clean * common

    # --- noise level from the SNR definition
    naa_fid = gain * naa_singlet * np.exp(-t / t2["NAA"]) * g
    height = float(np.max(np.fft.fft(np.concatenate([[naa_fid[0] * 0.5], naa_fid[1:]])).real))
    sigma_avg = height / (spec.snr * math.sqrt(n))
    coils = None
    if spec.n_coils > 1:
        mags = rng.uniform(0.3, 1.0, spec.n_coils)
        coils = mags * np.exp(1j * rng.uniform(-np.pi, np.pi, spec.n_coils))
        sigma = sigma_avg * math.sqrt(float(np.sum(np.abs(coils) ** 2)) * N_TRANSIENTS)
    else:
        sigma = sigma_avg * math.sqrt(N_TRANSIENTS)

    drift_total = float(rng.uniform(0.0, 0.03)) * mhz * (1 if rng.uniform() < 0.5 else -1)
    bad = rng.choice(N_TRANSIENTS, size=int(rng.integers(0, 3)), replace=False).tolist()
    scan = _transients(rng, scan_clean, t, N_TRANSIENTS, drift_total, bad, coils, sigma, mhz)
    water = _transients(rng, ref_clean, t, N_WATER_TRANSIENTS, drift_total / 8, [], coils,
                        sigma, mhz)

    # --- truth
    ratios = {}
    signal = {m: conc[m] * weight[m] for m in conc}
    tcr = sum(signal.get(m, 0.0) for m in TCR)
    for measure, members in MEASURES.items():
        ratios[measure] = sum(signal.get(m, 0.0) for m in members) / tcr
    conc_true = {measure: sum(conc.get(m, 0.0) for m in members)
                 for measure, members in MEASURES.items()}
    conc_true["tCr"] = sum(conc.get(m, 0.0) for m in TCR)
    header = _header(spec, mhz, suppressed=True)
    water_header = _header(spec, mhz, suppressed=False)
    truth = {
        "scan_id": spec.scan_id, "category": spec.category, "spec": asdict(spec),
        "spectrometer_mhz": mhz, "dwell_s": dwell, "n_points": n,
        "temperature_c": temperature, "water_ppm": water_ppm,
        "tissue_fractions": tissue, "conc_mm": conc, "t2_s": t2, "t1_s": t1,
        "relaxation_weight": weight, "ratio_tcr": ratios,
        "conc_molar_mm": conc_true if not spec.phantom else None,
        "line_shape": {**shape, "scale_hz": scale_hz}, "b0_offset_hz": offset_hz,
        "macromolecules": mm_record, "residual_water_over_naa": residual_ratio,
        "water_model": water_clean["record"], "corrupted_transients": bad,
        "drift_total_hz": drift_total, "eddy_current": eddy, "noise_sd_per_transient": sigma,
    }
    return _Synth(scan, water, header, water_header, dwell, truth)


def _water_signal(rng: np.random.Generator, spec: ScanSpec, tissue: dict[str, float] | None,
                  t: np.ndarray, field_t: float, nu_hz: float) -> dict[str, Any]:
    """Unsuppressed water of the voxel: one exponential per compartment."""
    nf = _nominal_field(field_t)
    fid = np.zeros(t.size, dtype=np.complex128)
    record: dict[str, Any] = {}
    if tissue is None:  # phantom: pure water, one T2
        t2 = float(rng.uniform(0.3, 0.8))
        t1 = float(rng.uniform(1.5, 2.5))
        amp = 2 * WATER_MM * math.exp(-spec.te_s / t2) * (1 - math.exp(-spec.tr_s / t1))
        fid += amp * np.exp(-t / t2)
        record = {"t2_s": t2, "t1_s": t1, "amplitude": amp}
    else:
        for comp, frac in tissue.items():
            t2 = WATER_T2_S[nf][comp] * float(np.exp(rng.normal(0, 0.06)))
            t1 = WATER_T1_S[nf][comp] * float(np.exp(rng.normal(0, 0.06)))
            amp = 2 * WATER_MM * frac * WATER_CONTENT[comp] * math.exp(-spec.te_s / t2) * (
                1 - math.exp(-spec.tr_s / t1))
            fid += amp * np.exp(-t / t2)
            record[comp] = {"t2_s": t2, "t1_s": t1, "amplitude": amp}
    fid *= np.exp(-2j * np.pi * nu_hz * t)
    return {"fid": fid, "record": record}


def _residual_water(rng: np.random.Generator, t: np.ndarray, mhz: float, nu_hz: float,
                    area: float) -> np.ndarray:
    """Residual water after suppression: narrow components of random phase, one broad tail."""
    n_narrow = int(rng.integers(2, 5))
    broad_fraction = float(rng.uniform(0.1, 0.3))
    weights = rng.dirichlet(np.ones(n_narrow)) * (1 - broad_fraction)
    fid = np.zeros(t.size, dtype=np.complex128)
    for w in weights:
        nu = nu_hz + float(rng.normal(0, 0.02)) * mhz
        lw = float(rng.uniform(3.0, 12.0))
        ph = float(rng.uniform(-np.pi, np.pi))
        fid += area * w * np.exp(1j * ph) * np.exp(-2j * np.pi * nu * t - np.pi * lw * t)
    broad_lw = float(rng.uniform(0.25, 0.8)) * mhz  # 0.25-0.8 ppm wide
    ph = (np.pi / 2) * (1 if rng.uniform() < 0.5 else -1) + float(rng.normal(0, 0.3))
    fid += area * broad_fraction * np.exp(1j * ph) * np.exp(
        -2j * np.pi * nu_hz * t - np.pi * broad_lw * t)
    return fid


def _transients(rng: np.random.Generator, clean: np.ndarray, t: np.ndarray, n_tr: int,
                drift_total_hz: float, bad: Sequence[int], coils: np.ndarray | None,
                sigma: float, mhz: float) -> np.ndarray:
    """Transients with frequency/phase drift and noise: (n_tr, n) or (coils, n_tr, n)."""
    walk = np.cumsum(rng.normal(0, 0.005 * mhz / math.sqrt(n_tr), n_tr))
    freq = np.linspace(0, drift_total_hz, n_tr) + walk
    phase = rng.normal(0, np.deg2rad(5.0), n_tr)
    amp = np.ones(n_tr)
    for b in bad:
        phase[b] += float(rng.uniform(1.0, 2.0)) * (1 if rng.uniform() < 0.5 else -1)
        amp[b] *= float(rng.uniform(0.5, 0.8))
        freq[b] += float(rng.normal(0, 0.05)) * mhz
    fids = (amp * np.exp(1j * phase))[:, None] * np.exp(-2j * np.pi * np.outer(freq, t))
    fids = fids * clean[None, :]
    if coils is None:
        noise = rng.normal(0, sigma, fids.shape) + 1j * rng.normal(0, sigma, fids.shape)
        return fids + noise
    out = coils[:, None, None] * fids[None]
    noise = rng.normal(0, sigma, out.shape) + 1j * rng.normal(0, sigma, out.shape)
    return out + noise


def _header(spec: ScanSpec, mhz: float, *, suppressed: bool) -> dict[str, Any]:
    meta: dict[str, Any] = {
        "SpectrometerFrequency": [round(mhz, 6)],
        "ResonantNucleus": ["1H"],
        "EchoTime": spec.te_s,
        "RepetitionTime": spec.tr_s,
        "SequenceName": "PRESS",
        "ProtocolName": "validation corpus" + (" water reference" if not suppressed else ""),
        "WaterSuppressed": suppressed,
    }
    if spec.timing == "header":
        meta["specproc_timings"] = {"Value": {"te1_s": spec.te1_s},
                                    "Description": TIMING_DESCRIPTION}
    return meta


# ------------------------------------------------------------------ writing
def write_nifti_mrs(path: Path, data: np.ndarray, *, dwell_s: float, meta: dict[str, Any],
                    dim_tags: Sequence[str]) -> None:
    """Write single-voxel NIfTI-MRS with nibabel (NIfTI-2, complex64, extension code 44).

    Parameters
    ----------
    path : Path
        Output ``.nii.gz`` file.
    data : ndarray, complex
        Time on the last axis, e.g. ``(coils, transients, points)``.
    dwell_s : float
        Dwell time, s (``pixdim[4]`` with time unit seconds).
    meta : dict
        JSON header (``SpectrometerFrequency`` and ``ResonantNucleus`` as arrays).
    dim_tags : sequence of str
        Tags of the leading axes of ``data`` (become ``dim_5``, ``dim_6`` ...).
    """
    extra = data.shape[:-1]
    if len(extra) != len(dim_tags):
        raise ValueError("one tag per non-time axis")
    arr = np.moveaxis(data, -1, 0).reshape((1, 1, 1, data.shape[-1], *extra))
    img = nib.Nifti2Image(arr.astype(np.complex64), np.eye(4))
    hdr = img.header
    hdr.set_xyzt_units("mm", "sec")
    pixdim = hdr["pixdim"].copy()
    pixdim[1:4] = 10.0
    pixdim[4] = dwell_s
    hdr["pixdim"] = pixdim
    hdr["intent_name"] = NIFTI_MRS_INTENT.encode()
    meta = dict(meta)
    for k, tag in enumerate(dim_tags):
        meta[f"dim_{5 + k}"] = tag
    hdr.extensions.append(nib.nifti1.Nifti1Extension(NIFTI_MRS_ECODE,
                                                     json.dumps(meta).encode("utf-8")))
    nib.save(img, str(path))


def measured_mm_name(field_t: float, te_s: float) -> str:
    """File name of the measured MM spectrum of a field and TE (``mm_3T_TE30.nii.gz``)."""
    return f"mm_{field_t:g}T_TE{te_s * 1e3:g}.nii.gz"


def measured_mm_fid(field_t: float, te_s: float, *, rng: np.random.Generator
                    ) -> tuple[np.ndarray, dict[str, Any]]:
    """The measured MM spectrum of a field and TE (see :data:`MEASURED_MM_SNR`) and its record."""
    nf = _nominal_field(field_t)
    mhz = GAMMA_MHZ_PER_T * field_t
    dwell = 1.0 / SPECTRAL_WIDTH_HZ[nf]
    t = np.arange(N_POINTS) * dwell
    t2_mm = MM_T2_S[nf]
    fid = np.zeros(N_POINTS, dtype=np.complex128)
    for shift, spread, amp30, wfac in MM_LINES:
        a = amp30 * math.exp(-(te_s - 0.030) / t2_mm)
        lw = wfac / (math.pi * t2_mm)
        for dpp, w in ((-spread, 0.25), (0.0, 0.5), (spread, 0.25)):
            nu = (shift + dpp - WATER_PPM_37C) * mhz
            fid += a * w * np.exp(-2j * np.pi * nu * t - np.pi * lw * t)
    shape = {"weights": [1.0], "offsets": [0.0], "lorentz_fraction": 0.5, "spread": 0.0}
    scale_hz = _solve_scale(shape, MEASURED_MM_NAA_FWHM_HZ[nf], T2_S[nf]["NAA"], dwell)
    fid *= _shape_fid(shape, scale_hz, t)
    half = np.concatenate([[fid[0] * 0.5], fid[1:]])
    height = float(np.max(np.fft.fft(half).real))
    sigma = height / (MEASURED_MM_SNR * math.sqrt(N_POINTS))
    fid = fid + rng.normal(0, sigma, N_POINTS) + 1j * rng.normal(0, sigma, N_POINTS)
    record = {"field_t": field_t, "te_s": te_s, "spectrometer_mhz": mhz, "dwell_s": dwell,
              "n_points": N_POINTS, "mm_t2_s": t2_mm, "line_shape": {**shape,
                                                                    "scale_hz": scale_hz},
              "naa_fwhm_hz": MEASURED_MM_NAA_FWHM_HZ[nf], "snr": MEASURED_MM_SNR,
              "noise_sd": sigma}
    return fid, record


def write_measured_mm(out_dir: str | Path, specs: Iterable[ScanSpec], *,
                      seed: int = DEFAULT_SEED) -> list[dict[str, Any]]:
    """Write ``out_dir/mm/<name>`` (:func:`measured_mm_name`) for every field and TE of the
    tissue scans of ``specs``, and ``out_dir/mm/mm_spectra.json`` with their records."""
    folder = Path(out_dir) / "mm"
    folder.mkdir(parents=True, exist_ok=True)
    protocols = sorted({(s.field_t, s.te_s) for s in specs if not s.phantom})
    records = []
    for field_t, te_s in protocols:
        rng = _rng(seed, MEASURED_MM_SEED_KEY, round(field_t * 10), round(te_s * 1e3))
        fid, record = measured_mm_fid(field_t, te_s, rng=rng)
        meta = {
            "SpectrometerFrequency": [round(record["spectrometer_mhz"], 6)],
            "ResonantNucleus": ["1H"], "EchoTime": te_s, "RepetitionTime": 2.5,
            "SequenceName": "PRESS",
            "ProtocolName": "validation corpus: measured macromolecule spectrum (metabolite "
                            "nulled, cohort average)",
            "WaterSuppressed": True,
        }
        name = measured_mm_name(field_t, te_s)
        write_nifti_mrs(folder / name, fid, dwell_s=record["dwell_s"], meta=meta, dim_tags=[])
        records.append({"file": name, **record})
    (folder / "mm_spectra.json").write_text(json.dumps(
        {"generator": "benchmarks/validation/generate.py", "seed": seed,
         "caution": "Research use only; not a medical device.", "spectra": records},
        indent=1) + "\n")
    return records


def generate(out_dir: str | Path, *, seed: int = DEFAULT_SEED, preset: str = "full",
             subset: int | None = None, scan_ids: Iterable[str] | None = None,
             progress: bool = False) -> list[dict[str, Any]]:
    """Write the corpus (or a subset) into ``out_dir``; return the truth records.

    Parameters
    ----------
    out_dir : path
        Output folder (created).
    seed : int
        Master seed.
    preset : {"full", "ci"}
        See :func:`plan_corpus`.
    subset : int, optional
        Only about this many scans, spread over the categories (:func:`select_subset`).
    scan_ids : iterable of str, optional
        Only these scans.
    progress : bool
        Print one line per scan on stderr.
    """
    out = Path(out_dir)
    (out / "scans").mkdir(parents=True, exist_ok=True)
    specs = plan_corpus(seed, preset)
    if subset is not None:
        specs = select_subset(specs, subset)
    if scan_ids is not None:
        wanted = set(scan_ids)
        specs = [s for s in specs if s.scan_id in wanted]
    cache = _LineCache()
    truths: list[dict[str, Any]] = []
    rows: list[dict[str, Any]] = []
    for k, spec in enumerate(specs):
        syn = synthesise(spec, cache, seed)
        tags = ["DIM_COIL", "DIM_DYN"] if spec.n_coils > 1 else ["DIM_DYN"]
        scan_path = out / "scans" / f"{spec.scan_id}_svs.nii.gz"
        ref_path = out / "scans" / f"{spec.scan_id}_ref.nii.gz"
        write_nifti_mrs(scan_path, syn.scan, dwell_s=syn.dwell_s, meta=syn.header, dim_tags=tags)
        write_nifti_mrs(ref_path, syn.water, dwell_s=syn.dwell_s, meta=syn.water_header,
                        dim_tags=tags)
        truths.append(syn.truth)
        tissue = syn.truth["tissue_fractions"] or {}
        rows.append({
            "scan": f"scans/{scan_path.name}", "water": f"scans/{ref_path.name}",
            "subject": spec.scan_id.replace("-", ""), "scan_id": spec.scan_id,
            "gm": _cell(tissue.get("gm")), "wm": _cell(tissue.get("wm")),
            "csf": _cell(tissue.get("csf")),
            "te1_ms": _cell(spec.te1_s * 1e3 if spec.timing == "manifest" else None),
            "kind": "phantom" if spec.phantom else "",
        })
        if progress:
            print(f"[{k + 1}/{len(specs)}] {spec.scan_id}", file=sys.stderr)
    _write_tables(out, rows, truths, seed, preset)
    write_measured_mm(out, specs, seed=seed)
    return truths


def _cell(value: float | None) -> str:
    return "" if value is None else f"{value:.6g}"


def _write_tables(out: Path, rows: list[dict[str, Any]], truths: list[dict[str, Any]],
                  seed: int, preset: str) -> None:
    with open(out / "manifest.tsv", "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]) if rows else ["scan"],
                                delimiter="\t", lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    document = {"generator": "benchmarks/validation/generate.py", "seed": seed,
                "preset": preset, "caution": "Research use only; not a medical device.",
                "scans": truths}
    (out / "truth.json").write_text(json.dumps(document, indent=1) + "\n")
    with open(out / "truth.tsv", "w", newline="") as fh:
        fh.write("scan_id\tcategory\tfield_t\tte_ms\tte1_ms\ttiming\tsnr\tnaa_fwhm_hz\t"
                 "measure\tratio_tcr\tconc_molar_mm\n")
        for tr in truths:
            spec = tr["spec"]
            for measure, ratio in tr["ratio_tcr"].items():
                conc = (tr["conc_molar_mm"] or {}).get(measure)
                fh.write(f"{tr['scan_id']}\t{tr['category']}\t{spec['field_t']:g}\t"
                         f"{spec['te_s'] * 1e3:g}\t{spec['te1_s'] * 1e3:g}\t{spec['timing']}\t"
                         f"{spec['snr']:.4g}\t{spec['naa_fwhm_hz']:.4g}\t{measure}\t"
                         f"{ratio:.6g}\t{'' if conc is None else f'{conc:.6g}'}\n")


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out_dir", type=Path, help="output folder (created)")
    parser.add_argument("--preset", choices=("full", "ci"), default="full")
    parser.add_argument("--subset", type=int, default=None, metavar="N",
                        help="about N scans spread over the categories")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--mm-only", action="store_true",
                        help="write only the measured macromolecule spectra (mm/) of the preset")
    args = parser.parse_args(argv)
    if args.mm_only:
        records = write_measured_mm(args.out_dir, plan_corpus(args.seed, args.preset),
                                    seed=args.seed)
        print(f"wrote {len(records)} measured macromolecule spectra into {args.out_dir}/mm")
        return 0
    truths = generate(args.out_dir, seed=args.seed, preset=args.preset, subset=args.subset,
                      progress=True)
    print(f"wrote {len(truths)} scans and water references, manifest.tsv, truth.json, "
          f"truth.tsv into {args.out_dir}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
