"""Make the bundled demo study: four invented volunteers and one phantom, 3 T PRESS, TE 30 ms.

Everything here is invented: no person, site or scanner was involved. The signals come from
specproc's own density-matrix simulator (:func:`specproc.basis.simulate_basis`, PRESS, TE 30 ms,
TE1 = TE2 = 15 ms, ideal pulses) and are written with :func:`specproc.io.save` as NIfTI-MRS in a
BIDS-like layout::

    demo_spectra/
      manifest.tsv            one row per scan: paths, subject, session, tissue fractions
      truth.json              the values the data were generated with
      dataset_description.json
      sub-01/ses-01/mrs/sub-01_ses-01_svs.nii.gz      water-suppressed transients
      sub-01/ses-01/mrs/sub-01_ses-01_mrsref.nii.gz   unsuppressed water reference
      (each .nii.gz with a BIDS .json sidecar)
      sub-01/ses-01/anat/sub-01_ses-01_T1w.nii.gz      synthetic anatomy (sub-01, sub-02)
      derivatives/segmentation/sub-01/ses-01/anat/sub-01_ses-01_label-GM_probseg.nii.gz
                                                      GM, WM, CSF maps of that anatomy
      ...

Scenario ("posterior cingulate voxel, 20 x 20 x 20 mm"): adult brain concentrations (mmol per
litre of GM+WM tissue) that vary by a few per cent between volunteers, GM/WM/CSF fractions per
volunteer, and a phantom of invented composition at room temperature.

Signal model of one transient of one coil (time t after the echo, NIfTI-MRS sign convention)::

    s(t) = g_c · exp(i(φ_k + φ_ec(t))) · exp(2πi Δf_k t) · L(t) ·
           [ K (1 - f_CSF) Σ_m C_m R_m b_m(t) + MM(t) + W_res(t) ] + noise

* ``b_m`` are the simulated basis FIDs (a singlet of N protons starts at N), ``C_m`` the
  tissue concentrations, ``R_m = exp(-TE/T2) (1 - exp(-TR/T1))`` their relaxation attenuation
  with the 3 T times of ``specproc/data/relaxation.toml`` (through
  :func:`specproc.quantify.load_relaxation_times`), ``K`` an arbitrary receiver scale;
* ``L(t) = exp(-π Γ_L t) · exp(-(π Γ_G t)² / (4 ln 2))``: Lorentzian (FWHM Γ_L) and Gaussian
  (FWHM Γ_G) broadening, different per subject; Γ_L is the width of NAA, and every other
  metabolite decays faster by ``exp(-(1/T2_m - 1/T2_NAA) t)`` (its own T2);
* ``MM`` the macromolecule components of ``specproc/data/basis/macromolecules.toml`` (short
  TE), ``W_res`` a
  residual water line left by imperfect water suppression;
* ``Δf_k`` a slow frequency drift with jitter, ``φ_k`` a random phase per transient (with a
  sudden phase jump in one scan), ``φ_ec(t) = a · exp(-t / τ)`` an eddy-current phase common to
  the water and metabolite data, ``g_c`` complex coil sensitivities (4 coils in two scans);
* one transient of sub-02 is corrupted (motion: frequency and phase jump, signal loss, lipid);
* complex Gaussian noise, then rounding to integers (ADC quantisation; it also lets gzip
  compress the files).

The water reference has the same coils, eddy-current phase and B0 offset and no suppression::

    S_W = K · N_W · [H2O] · Σ_t f_t d_t R_W,t        (N_W = 2, [H2O] = 55.14 mol/L at 37 °C)

with the tissue water contents d_t and water relaxation of :mod:`specproc.quantify`. This is
the signal model behind the molar formula of Gasparovic et al. (Magn Reson Med
2006;55:1219-1226), so that the water-referenced concentrations computed by
:func:`specproc.quantify.quantify` should return the ``C_m`` written in ``truth.json``.

Ratios written in ``truth.json`` are given twice: ``concentration_ratios`` (C_M / C_tCr) and
``signal_ratios`` (C_M R_M / Σ C_Cr R_Cr, the relaxation-weighted molecule ratios that a
linear-combination fit measures without relaxation correction; :func:`quantify` reports the
latter as its ``ratios``).

Run ``python demo_spectra/make_demo.py`` to rebuild the study beside this script; the random
generator is seeded, so the files are the same on every run with the same specproc version.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import math
import shutil
from pathlib import Path
from typing import Any

import numpy as np

from specproc._atomic import write_text
from specproc.basis import BasisSet, simulate_basis
from specproc.constants import WATER_MOLAR_37C_MM, WATER_MOLAR_MM
from specproc.data import Scan, user_key
from specproc.io import save
from specproc.quantify import TISSUE_WATER_CONTENT, TISSUES, load_relaxation_times

__all__ = ["SUBJECTS", "build_scan_pair", "demo_basis", "main", "make_demo"]

SEED = 20261202
FIELD_T = 3.0
TE_S = 0.030
TR_S = 2.0
N_POINTS = 1024
DWELL_S = 5.0e-4  # 2000 Hz spectral width
CENTRE_PPM = 4.65
#: Receiver scale K (ADC units per mM of tissue-referred signal and proton at t = 0).
SCALE_K = 1.2
NOISE_SD = 8.0  # per real/imaginary component, per transient, per coil (ADC units)
N_WATER_TRANSIENTS = 4
#: Voxel edge (mm) and centre in scanner coordinates (mm, invented), written in the NIfTI affine.
VOXEL_MM = 20.0
VOXEL_CENTRE_MM = (0.0, -48.0, 28.0)

#: Typical adult-brain tissue concentrations, mM (common practice values, rounded; e.g. the
#: ranges reviewed by Govindaraju et al., NMR Biomed 2000;13:129-153 — from memory).
BASE_CONC_MM: dict[str, float] = {
    "NAA": 10.0, "NAAG": 1.3, "Cr": 4.6, "PCr": 3.9, "GPC": 1.0, "PCh": 0.6, "mI": 6.2,
    "Glu": 9.5, "Gln": 3.2, "GABA": 1.2, "GSH": 1.6, "Tau": 1.3, "sI": 0.3, "Asp": 2.2,
    "Lac": 0.6, "Ala": 0.4, "Glc": 1.0, "PE": 1.4, "Gly": 0.5, "Asc": 1.0,
}
#: Macromolecule and lipid amplitudes (basis units, already relaxation-weighted; invented).
MM_AMPLITUDE: dict[str, float] = {
    "MM0.94": 3.0, "MM1.22": 2.0, "MM1.43": 2.2, "MM1.70": 2.5, "MM2.05": 3.5,
    "MM2.29": 2.0, "MM3.00": 2.5, "MM3.20": 2.0, "MM3.90": 3.0, "FatCH3": 0.3, "FatCH2": 0.5,
}
#: Invented phantom solution, mM (no relaxation differences between metabolites).
PHANTOM_CONC_MM: dict[str, float] = {
    "NAA": 12.5, "Cr": 10.0, "PCh": 3.0, "mI": 7.5, "Glu": 12.5, "Lac": 5.0,
}

#: The invented study: per scan, the artefacts and acquisition choices that differ.
SUBJECTS: tuple[dict[str, Any], ...] = (
    {"subject": "sub-01", "session": "ses-01", "kind": "volunteer", "n_transients": 32,
     "n_coils": 4, "tissue": {"gm": 0.62, "wm": 0.28, "csf": 0.10}, "lorentz_hz": 3.0,
     "gauss_hz": 3.5, "b0_offset_hz": 6.0, "drift_hz_per_transient": 0.10, "eddy_rad": 0.6,
     "residual_water": 0.010, "phase_jump": None, "corrupt": None},
    {"subject": "sub-02", "session": "ses-01", "kind": "volunteer", "n_transients": 32,
     "n_coils": 4, "tissue": {"gm": 0.55, "wm": 0.33, "csf": 0.12}, "lorentz_hz": 3.5,
     "gauss_hz": 4.0, "b0_offset_hz": -4.0, "drift_hz_per_transient": -0.08, "eddy_rad": 0.8,
     "residual_water": 0.015, "phase_jump": None, "corrupt": 20},
    {"subject": "sub-03", "session": "ses-01", "kind": "volunteer", "n_transients": 48,
     "n_coils": 1, "tissue": {"gm": 0.58, "wm": 0.34, "csf": 0.08}, "lorentz_hz": 2.5,
     "gauss_hz": 4.5, "b0_offset_hz": 3.0, "drift_hz_per_transient": 0.06, "eddy_rad": 0.5,
     "residual_water": 0.006, "phase_jump": (24, 0.5), "corrupt": None},
    {"subject": "sub-04", "session": "ses-01", "kind": "volunteer", "n_transients": 48,
     "n_coils": 1, "tissue": {"gm": 0.50, "wm": 0.35, "csf": 0.15}, "lorentz_hz": 4.0,
     "gauss_hz": 3.0, "b0_offset_hz": -7.0, "drift_hz_per_transient": 0.12, "eddy_rad": 0.7,
     "residual_water": 0.012, "phase_jump": None, "corrupt": None},
    {"subject": "sub-phantom", "session": "ses-01", "kind": "phantom", "n_transients": 16,
     "n_coils": 1, "tissue": None, "lorentz_hz": 1.5, "gauss_hz": 1.5, "b0_offset_hz": 2.0,
     "drift_hz_per_transient": 0.05, "eddy_rad": 0.4, "residual_water": 0.004,
     "phase_jump": None, "corrupt": None},
)

#: Phantom: room temperature (water at 4.65 + 0.01·(37 - 21) ppm) and one invented set of
#: relaxation times for every metabolite and the water.
PHANTOM_TEMPERATURE_C = 21.0
PHANTOM_T1_S = 1.2
PHANTOM_T2_S = 0.5
PHANTOM_WATER_T1_S = 2.5
PHANTOM_WATER_T2_S = 1.0
PHANTOM_WATER_SCALE = 0.02  # water reference signal relative to pure water with K (invented)

COMBINATIONS: dict[str, tuple[str, ...]] = {
    "tNAA": ("NAA", "NAAG"), "tCr": ("Cr", "PCr"), "tCho": ("GPC", "PCh"), "Glx": ("Glu", "Gln"),
}


def demo_basis(*, cache: bool = True) -> BasisSet:
    """The simulated basis the demo is made from (metabolites + macromolecules)."""
    return simulate_basis(
        sequence="press", field_t=FIELD_T, te_s=TE_S, dwell_s=DWELL_S, n_points=N_POINTS,
        metabolites=None, macromolecules=True, centre_ppm=CENTRE_PPM, cache=cache,
    )


def _relaxation_factor(te_s: float, tr_s: float, t1_s: float, t2_s: float) -> float:
    return math.exp(-te_s / t2_s) * (1.0 - math.exp(-tr_s / t1_s))


def _lineshape(t: np.ndarray, lorentz_hz: float, gauss_hz: float) -> np.ndarray:
    return np.exp(-np.pi * lorentz_hz * t - (np.pi * gauss_hz * t) ** 2 / (4.0 * math.log(2.0)))


def _line(t: np.ndarray, shift_ppm: float, mhz: float) -> np.ndarray:
    return np.exp(-2j * np.pi * (shift_ppm - CENTRE_PPM) * mhz * t)


def _coil_gains(n_coils: int, rng: np.random.Generator) -> np.ndarray:
    if n_coils == 1:
        return np.ones(1, dtype=complex)
    magnitudes = np.array([0.8, 0.6, 0.4, 0.25, 0.2, 0.15, 0.1, 0.1])[:n_coils]
    phases = rng.uniform(-np.pi, np.pi, n_coils)
    return magnitudes * np.exp(1j * phases)


def _concentrations(spec: dict[str, Any], rng: np.random.Generator) -> dict[str, float]:
    if spec["kind"] == "phantom":
        return dict(PHANTOM_CONC_MM)
    return {m: round(c * float(rng.normal(1.0, 0.06)), 3) for m, c in BASE_CONC_MM.items()}


def build_scan_pair(
    spec: dict[str, Any], basis: BasisSet, *, rng: np.random.Generator
) -> tuple[Scan, Scan, dict[str, Any]]:
    """Metabolite scan, water reference and ground truth of one scan of the study.

    Parameters
    ----------
    spec : dict
        One entry of :data:`SUBJECTS`.
    basis : BasisSet
        From :func:`demo_basis`.
    rng : numpy.random.Generator
        Source of every random number (seeded by :func:`make_demo`).
    """
    mhz = basis.spectrometer_mhz
    t = np.arange(N_POINTS) * DWELL_S
    conc = _concentrations(spec, rng)
    phantom = spec["kind"] == "phantom"
    relax = load_relaxation_times(FIELD_T)
    r_metab: dict[str, float] = {}
    for name in conc:
        if phantom:
            r_metab[name] = _relaxation_factor(TE_S, TR_S, PHANTOM_T1_S, PHANTOM_T2_S)
        else:
            r_metab[name] = relax.metabolite(name).factor(te_s=TE_S, tr_s=TR_S)
    csf = 0.0 if phantom else spec["tissue"]["csf"]

    # ---- metabolite signal (noise-free, before artefacts)
    amplitudes: dict[str, float] = {}
    signal = np.zeros(N_POINTS, dtype=complex)
    # each metabolite decays with its own T2 during the acquisition: relative to NAA (whose
    # decay is part of L(t)) its line is broader by 1/(π T2) - 1/(π T2_NAA) (phantom: one T2)
    for name, c in conc.items():
        amp = SCALE_K * (1.0 - csf) * c * r_metab[name]
        amplitudes[name] = amp
        extra = 0.0 if phantom else (1.0 / relax.metabolite(name).t2_s
                                     - 1.0 / relax.metabolite("NAA").t2_s)
        signal += amp * basis.fids[basis.index(name)] * np.exp(-extra * t)
    mm_amp: dict[str, float] = {}
    if not phantom:
        for name, a in MM_AMPLITUDE.items():
            amp = SCALE_K * a * float(rng.normal(1.0, 0.05))
            mm_amp[name] = amp
            signal += amp * basis.fids[basis.index(name)]
    shape = _lineshape(t, spec["lorentz_hz"], spec["gauss_hz"])
    signal = signal * shape

    # ---- water: tissue water signal of the molar formula (Gasparovic et al. 2006)
    if phantom:
        water_ppm = CENTRE_PPM + 0.01 * (37.0 - PHANTOM_TEMPERATURE_C)
        r_w = _relaxation_factor(TE_S, TR_S, PHANTOM_WATER_T1_S, PHANTOM_WATER_T2_S)
        s_water = SCALE_K * 2.0 * WATER_MOLAR_MM * PHANTOM_WATER_SCALE * r_w
        water_t2_extra_hz = 1.0 / (np.pi * PHANTOM_WATER_T2_S) - 1.0 / (np.pi * PHANTOM_T2_S)
        water_terms: dict[str, Any] = {"relaxation_factor": r_w}
    else:
        water_ppm = CENTRE_PPM
        f = spec["tissue"]
        r_wt = {t_: relax.water[t_].factor(te_s=TE_S, tr_s=TR_S) for t_ in TISSUES}
        total = sum(f[t_] * TISSUE_WATER_CONTENT[t_] * r_wt[t_] for t_ in TISSUES)
        s_water = SCALE_K * 2.0 * WATER_MOLAR_37C_MM * total
        # water lines are broader than NAA by the difference of their T2 decay rates
        water_t2_extra_hz = (1.0 / (np.pi * relax.water["gm"].t2_s)
                             - 1.0 / (np.pi * relax.metabolite("NAA").t2_s))
        water_terms = {"relaxation_factor": r_wt, "sum_f_d_R": total}
    water_shape = _lineshape(t, spec["lorentz_hz"] + water_t2_extra_hz, spec["gauss_hz"])
    water_fid = s_water * _line(t, water_ppm, mhz) * water_shape
    # the water reference also holds the (unsuppressed) metabolites
    water_fid = water_fid + signal

    # residual water after imperfect suppression: two lines near water
    res_water = spec["residual_water"] * s_water * (
        0.7 * _line(t, water_ppm + 0.02, mhz) * _lineshape(t, 6.0, 4.0)
        + 0.3 * np.exp(1j * 1.2) * _line(t, water_ppm - 0.05, mhz) * _lineshape(t, 12.0, 6.0)
    )
    metab_fid = signal + res_water

    # ---- artefacts common to the water and metabolite data
    eddy = spec["eddy_rad"] * np.exp(-t / 0.04)
    b0 = spec["b0_offset_hz"]
    gains = _coil_gains(spec["n_coils"], rng)
    n_tr = spec["n_transients"]
    drift = spec["drift_hz_per_transient"] * (np.arange(n_tr) - n_tr / 2) + rng.normal(
        0.0, 0.3, n_tr
    )
    phases = rng.normal(0.0, np.radians(6.0), n_tr)
    if spec["phase_jump"] is not None:
        k0, jump = spec["phase_jump"]
        phases[k0:] += jump
    common = np.exp(1j * eddy) * np.exp(2j * np.pi * b0 * t)

    def acquire(fid: np.ndarray, n: int, shifts: np.ndarray, phis: np.ndarray,
                corrupt: int | None) -> np.ndarray:
        out = np.empty((spec["n_coils"], n, N_POINTS), dtype=complex)
        for k in range(n):
            one = fid
            if corrupt is not None and k == corrupt:
                lip = 60.0 * SCALE_K * basis.fids[basis.index("FatCH2")] * _lineshape(t, 8, 8)
                one = 0.55 * fid * np.exp(1j * 1.6) * np.exp(2j * np.pi * 14.0 * t) + lip
            transient = one * common * np.exp(1j * phis[k] + 2j * np.pi * shifts[k] * t)
            for c in range(spec["n_coils"]):
                noise = rng.normal(0.0, NOISE_SD, (2, N_POINTS))
                out[c, k] = gains[c] * transient + noise[0] + 1j * noise[1]
        out = np.round(out.real) + 1j * np.round(out.imag)  # ADC quantisation
        return out if spec["n_coils"] > 1 else out[0]

    metab = acquire(metab_fid, n_tr, drift, phases, spec["corrupt"])
    w_shifts = rng.normal(0.0, 0.2, N_WATER_TRANSIENTS)
    w_phases = rng.normal(0.0, np.radians(2.0), N_WATER_TRANSIENTS)
    water = acquire(water_fid, N_WATER_TRANSIENTS, w_shifts, w_phases, None)
    # NIfTI-MRS order: time last; extra axes coil then transient
    dims = ("DIM_COIL", "DIM_DYN") if spec["n_coils"] > 1 else ("DIM_DYN",)
    protocol = (
        f"specproc demo {spec['kind']} PCC 20x20x20 mm PRESS TE30 TR2000 (invented data)"
    )
    # NIfTI-MRS keys: the standard's where it has one (the voxel size and position live in the
    # NIfTI affine, the number of transients is the DIM_DYN size, the field follows from
    # SpectrometerFrequency); user keys as objects with a Description
    header = {
        "specproc_demo": user_key("invented data generated by demo_spectra/make_demo.py",
                                  "origin of the data: no person, site or scanner"),
        "specproc_voxel_region": user_key(
            "posterior cingulate (invented)" if not phantom else "phantom centre",
            "anatomical region of the voxel, free text"),
        "ConversionMethod": "specproc demo_spectra/make_demo.py",
    }
    affine = np.diag([VOXEL_MM, VOXEL_MM, VOXEL_MM, 1.0])
    affine[:3, 3] = VOXEL_CENTRE_MM
    common_fields = dict(
        dwell_s=DWELL_S, spectrometer_mhz=mhz, nucleus="1H", dims=dims, te_s=TE_S, tr_s=TR_S,
        sequence="press", format="nifti-mrs", affine=affine,
        dim_headers={"DIM_DYN": {"info": "transients"}} | (
            {"DIM_COIL": {"info": "receive coil elements"}} if spec["n_coils"] > 1 else {}
        ),
    )
    metab_scan = Scan(data=metab.astype(np.complex64), protocol=protocol,
                      water_suppressed=True, header=header, **common_fields)
    water_scan = Scan(data=water.astype(np.complex64), protocol=protocol + " water reference",
                      water_suppressed=False,
                      header=header,
                      **common_fields)

    # ---- ground truth
    def total(values: dict[str, float], members: tuple[str, ...]) -> float:
        return float(sum(values.get(m, 0.0) for m in members))

    weighted = {m: conc[m] * r_metab[m] for m in conc}
    conc_all = dict(conc) | {k: total(conc, v) for k, v in COMBINATIONS.items()}
    weighted_all = dict(weighted) | {k: total(weighted, v) for k, v in COMBINATIONS.items()}
    tcr_c, tcr_w = conc_all["tCr"], weighted_all["tCr"]
    truth = {
        "subject": spec["subject"],
        "session": spec["session"],
        "kind": spec["kind"],
        "concentrations_mm": conc_all if not phantom else None,
        "phantom_concentrations_mm": conc_all if phantom else None,
        "relaxation_factors": r_metab,
        "concentration_ratios": {m: v / tcr_c for m, v in conc_all.items()},
        "signal_ratios": {m: v / tcr_w for m, v in weighted_all.items()},
        "amplitudes": amplitudes,
        "macromolecule_amplitudes": mm_amp,
        "water_signal": s_water,
        "water_model": water_terms,
        "tissue_fractions": spec["tissue"],
        "artefacts": {
            "n_transients": n_tr, "n_coils": spec["n_coils"],
            "coil_gains": [[float(g.real), float(g.imag)] for g in gains],
            "lorentz_fwhm_hz": spec["lorentz_hz"], "gauss_fwhm_hz": spec["gauss_hz"],
            "b0_offset_hz": b0, "drift_hz": [float(x) for x in drift],
            "phases_rad": [float(x) for x in phases],
            "eddy_phase": f"{spec['eddy_rad']} rad * exp(-t / 0.04 s)",
            "residual_water_fraction": spec["residual_water"],
            "corrupted_transient": spec["corrupt"], "phase_jump": spec["phase_jump"],
            "noise_sd": NOISE_SD, "water_ppm": water_ppm,
        },
    }
    return metab_scan, water_scan, truth


def _relative(path: Path, root: Path) -> str:
    return path.relative_to(root).as_posix()


def _sidecar(scan: Scan, reference: Path | None, root: Path) -> dict[str, Any]:
    """BIDS sidecar of one NIfTI-MRS file (required and some recommended fields)."""
    meta: dict[str, Any] = {
        "ResonantNucleus": scan.nucleus,
        "SpectrometerFrequency": scan.spectrometer_mhz,
        "SpectralWidth": scan.spectral_width_hz,
        "EchoTime": scan.te_s,
        "RepetitionTime": scan.tr_s,
        "NumberOfSpectralPoints": scan.n_points,
        "NumberOfTransients": int(scan.extra_shape.get("DIM_DYN", 1)),
        "PulseSequenceType": "PRESS",
        "WaterSuppression": "simulated (imperfect: residual water added)"
        if scan.water_suppressed else "none",
        "ProtocolName": scan.protocol,
    }
    if reference is not None:
        meta["ReferenceSignal"] = f"bids::{_relative(reference, root)}"
    return meta


def _dataset_description() -> dict[str, Any]:
    return {
        "Name": "specproc demo study (invented data)",
        "BIDSVersion": "1.10.0",
        "DatasetType": "raw",
        "GeneratedBy": [{"Name": "specproc demo_spectra/make_demo.py",
                         "Description": "simulated with specproc's density-matrix engine; "
                                        "no person, site or scanner was involved"}],
    }


# ----------------------------------------------------------------------------- demo anatomy
#: Invented anatomy of two volunteers: a synthetic head (2 mm, RAS+), GM/WM/CSF probability
#: maps and the position of the posterior-cingulate voxel (20 mm cube, tilted about the
#: left-right axis). Inside the voxel the head varies only along x: the interhemispheric
#: fissure (CSF, |x| < csf_half_mm) between two medial grey-matter bands (up to gm_edge_mm),
#: white matter beyond, so that the voxel's fractions are known in closed form
#: (CSF = 2 csf_half / 20, GM = 2 (gm_edge - csf_half) / 20) and equal the ``tissue`` of SUBJECTS.
ANATOMY: dict[str, dict[str, Any]] = {
    "sub-01": {"centre_mm": (0.0, -40.0, 22.0), "tilt_deg": 15.0, "head_scale": 1.00},
    "sub-02": {"centre_mm": (0.0, -42.0, 20.0), "tilt_deg": 8.0, "head_scale": 0.96},
}
ANATOMY_ZOOM_MM = 2.0
VOXEL_SIDE_MM = 20.0
#: Grid of the anatomical images (voxel centres at x = -74 ... 74 mm, so x = 0 is a centre).
_ANAT_SHAPE = (75, 92, 76)
_ANAT_ORIGIN_MM = (-74.0, -102.0, -70.0)
#: T1-weighted intensities (arbitrary units, invented): WM bright, GM grey, CSF dark.
_T1_INTENSITY = {"wm": 200.0, "gm": 125.0, "csf": 30.0, "scalp": 170.0, "skull": 15.0}


def demo_voxel_affine(subject: str) -> np.ndarray:
    """Voxel affine (RAS+ mm) of a demo volunteer's spectroscopy voxel."""
    spec = ANATOMY[subject]
    a = math.radians(spec["tilt_deg"])
    rotation = np.array([[1.0, 0.0, 0.0], [0.0, math.cos(a), -math.sin(a)],
                         [0.0, math.sin(a), math.cos(a)]])
    affine = np.eye(4)
    affine[:3, :3] = rotation * VOXEL_SIDE_MM
    affine[:3, 3] = spec["centre_mm"]
    return affine


def _anatomy_affine() -> np.ndarray:
    affine = np.diag([ANATOMY_ZOOM_MM] * 3 + [1.0])
    affine[:3, 3] = _ANAT_ORIGIN_MM
    return affine


def _interval_overlap(centres: np.ndarray, half: float, low: float, high: float) -> np.ndarray:
    """Share of each cell [c - half, c + half] inside [low, high] (exact partial volume)."""
    return np.clip(np.minimum(centres + half, high) - np.maximum(centres - half, low), 0.0,
                   2 * half) / (2 * half)


def demo_tissue_maps(subject: str, tissue: dict[str, float]) -> dict[str, np.ndarray]:
    """GM, WM, CSF partial-volume maps and a T1-weighted image of one demo volunteer.

    The head is made of ellipsoids (scalp, skull, CSF rim, cortex, white matter, two lateral
    ventricles) with partial volumes from 3 x 3 x 3 sub-samples per voxel, and the medial
    structure above the corpus callosum (fissure and medial cortex) with the exact partial
    volume along x.
    """
    scale = ANATOMY[subject]["head_scale"]
    csf_half = tissue["csf"] * VOXEL_SIDE_MM / 2
    gm_edge = csf_half + tissue["gm"] * VOXEL_SIDE_MM / 2
    zoom = ANATOMY_ZOOM_MM
    axes = [o + zoom * np.arange(n) for o, n in zip(_ANAT_ORIGIN_MM, _ANAT_SHAPE, strict=True)]
    sub = (np.arange(3) - 1) * zoom / 3
    acc = {k: np.zeros(_ANAT_SHAPE) for k in ("brain", "cortex_in", "head", "skull_in",
                                               "ventricle", "callosum")}

    def ellipsoid(x, y, z, semi):
        return (x / semi[0]) ** 2 + (y / semi[1]) ** 2 + (z / semi[2]) ** 2 <= 1.0

    for dx in sub:
        for dy in sub:
            for dz in sub:
                x = axes[0][:, None, None] + dx
                y = axes[1][None, :, None] + dy
                z = axes[2][None, None, :] + dz - 5.0
                acc["head"] += ellipsoid(x, y, z, np.array([72, 96, 74]) * scale)
                acc["skull_in"] += ellipsoid(x, y, z, np.array([67, 91, 69]) * scale)
                acc["brain"] += ellipsoid(x, y, z, np.array([63, 86, 64]) * scale)
                acc["cortex_in"] += ellipsoid(x, y, z, np.array([59, 82, 60]) * scale)
                acc["ventricle"] += ellipsoid(np.abs(x) - 8.0, y, z + 2.0, (5, 22, 7))
                acc["callosum"] += z + 5.0 >= 3.0  # the medial structure lies above z = 3 mm
    n_sub = len(sub) ** 3
    frac = {k: v / n_sub for k, v in acc.items()}
    # medial structure: exact along x, present above the callosum (z >= 3 mm)
    fissure = _interval_overlap(axes[0], zoom / 2, -csf_half, csf_half)[:, None, None]
    medial_gm = (_interval_overlap(axes[0], zoom / 2, -gm_edge, gm_edge)[:, None, None]
                 - fissure)
    above = frac["callosum"]
    inner = frac["cortex_in"]  # white-matter core (before the medial structure)
    csf = (frac["skull_in"] - frac["brain"]) + inner * (frac["ventricle"] + above * fissure
                                                        * (1 - frac["ventricle"]))
    gm = (frac["brain"] - inner) + inner * (1 - frac["ventricle"]) * above * medial_gm
    wm = inner * (1 - frac["ventricle"]) * (1 - above * (fissure + medial_gm))
    scalp = frac["head"] - frac["skull_in"]
    t1 = (_T1_INTENSITY["wm"] * wm + _T1_INTENSITY["gm"] * gm + _T1_INTENSITY["csf"] * csf
          + _T1_INTENSITY["scalp"] * scalp * 0.5 + _T1_INTENSITY["skull"] * scalp * 0.5)
    return {"gm": gm, "wm": wm, "csf": csf, "t1": t1}


def _write_nifti_uint8(path: Path, values: np.ndarray, affine: np.ndarray, *,
                       slope: float) -> None:
    """A 3-D NIfTI-1 image of uint8 samples with a scale factor, written atomically."""
    import nibabel as nib

    from specproc._atomic import atomic_path

    data = np.clip(np.round(values / slope), 0, 255).astype(np.uint8)
    img = nib.Nifti1Image(data, affine)
    img.header.set_xyzt_units("mm")
    img.header.set_slope_inter(slope, 0.0)
    img.header.set_qform(affine, code=1)
    img.header.set_sform(affine, code=1)
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp:
        nib.save(img, str(tmp))


def set_voxel_geometry(path: Path, affine: np.ndarray) -> None:
    """Give a NIfTI-MRS file the voxel affine (sform and qform, code 1: scanner) in place."""
    import nibabel as nib

    from specproc._atomic import atomic_path

    img = nib.load(str(path))
    header = img.header.copy()
    header.set_sform(affine, code=1)
    header.set_qform(affine, code=1)
    zooms = list(header.get_zooms())
    zooms[:3] = [float(v) for v in np.linalg.norm(affine[:3, :3], axis=0)]
    header.set_zooms(zooms)
    data = np.asanyarray(img.dataobj)
    with atomic_path(path) as tmp:
        nib.save(type(img)(data, None, header), str(tmp))


def anatomy_paths(out_dir: Path, subject: str, session: str) -> dict[str, Path]:
    """Where a demo volunteer's T1-weighted image and probability maps are written."""
    stem = f"{subject}_{session}"
    seg = out_dir / "derivatives" / "segmentation" / subject / session / "anat"
    return {
        "anatomy": out_dir / subject / session / "anat" / f"{stem}_T1w.nii.gz",
        **{t: seg / f"{stem}_label-{t.upper()}_probseg.nii.gz" for t in ("gm", "wm", "csf")},
    }


def write_demo_anatomy(out_dir: Path) -> dict[str, dict[str, str]]:
    """Write the anatomy of the volunteers of :data:`ANATOMY` and give their scans the voxel.

    Returns the paths (relative to ``out_dir``) per subject, and checks that specproc's
    tissue fractions of each voxel are the generated ones (within 0.002).
    """
    from specproc.tissue import TissueMapFiles, tissue_fractions_from_files

    written: dict[str, dict[str, str]] = {}
    affine = _anatomy_affine()
    for spec in SUBJECTS:
        subject = spec["subject"]
        if subject not in ANATOMY:
            continue
        session = spec["session"]
        images = demo_tissue_maps(subject, spec["tissue"])
        paths = anatomy_paths(out_dir, subject, session)
        _write_nifti_uint8(paths["anatomy"], images["t1"], affine, slope=1.0)
        for t in ("gm", "wm", "csf"):
            _write_nifti_uint8(paths[t], images[t], affine, slope=1.0 / 250.0)
        mrs = out_dir / subject / session / "mrs"
        for suffix in ("svs", "mrsref"):
            set_voxel_geometry(mrs / f"{subject}_{session}_{suffix}.nii.gz",
                               demo_voxel_affine(subject))
        measured = tissue_fractions_from_files(
            mrs / f"{subject}_{session}_svs.nii.gz",
            TissueMapFiles(gm=paths["gm"], wm=paths["wm"], csf=paths["csf"],
                           anatomy=paths["anatomy"]))
        for t in ("gm", "wm", "csf"):
            if abs(measured.fractions[t] - spec["tissue"][t]) > 0.002:
                raise RuntimeError(f"{subject}: {t} fraction {measured.fractions[t]:.4f} from "
                                   f"the anatomy, {spec['tissue'][t]} generated")
        written[subject] = {k: _relative(p, out_dir) for k, p in paths.items()}
    return written



#: Manifest columns that point to a volunteer's segmentation (read by specproc.batch).
ANATOMY_COLUMNS: tuple[str, ...] = ("gm_map", "wm_map", "csf_map", "anatomy")


def with_anatomy_columns(rows: list[dict[str, Any]],
                         anatomy: dict[str, dict[str, str]]) -> list[dict[str, Any]]:
    """Manifest rows with the map columns; a volunteer with maps gets no tissue numbers."""
    out = []
    for row in rows:
        paths = anatomy.get(row["subject"])
        row = {k: v for k, v in row.items() if k not in ANATOMY_COLUMNS}
        if paths is not None:
            row.update(gm="", wm="", csf="")
        for column in ANATOMY_COLUMNS:
            key = "anatomy" if column == "anatomy" else column.removesuffix("_map")
            row[column] = "" if paths is None else paths[key]
        out.append(row)
    return out


def _read_manifest(out_dir: Path) -> list[dict[str, str]]:
    with open(out_dir / "manifest.tsv", encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle, delimiter="\t"))


def _write_manifest(out_dir: Path, rows: list[dict[str, Any]]) -> None:
    """manifest.tsv with the columns of the first row (written atomically)."""
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(rows[0]), delimiter="\t",
                            lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    write_text(out_dir / "manifest.tsv", buffer.getvalue())


def add_anatomy(out_dir: Path) -> None:
    """Add the demo anatomy to an existing study (scans, manifest) without regenerating it."""
    rows = with_anatomy_columns(_read_manifest(out_dir), write_demo_anatomy(out_dir))
    _write_manifest(out_dir, rows)

#: The invented edited (MEGA-PRESS GABA) scan of the study: subject, seed, ON/OFF pairs, SNR.
EDITED = {"subject": "sub-05", "session": "ses-01", "seed": 505, "n_pairs": 64, "snr": 400.0}


def edited_scan(out_dir: Path) -> tuple[dict[str, Any], dict[str, Any]]:
    """Write the edited scan and its water reference; return its manifest row and truth.

    Made by the independent generator of the edited benchmark
    (``benchmarks/edited_scans.py``: 3 T MEGA-PRESS, TE 68 ms, TE1 15 ms, ON 1.9 / OFF 7.5 ppm
    14 ms editing pulses, own line shapes, T2, macromolecules, drift and one motion-corrupted
    pair), rounded to integers like the other demo data.
    """
    import sys

    sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "benchmarks"))
    from edited_scans import TISSUE, make_edited_scan

    made = make_edited_scan(EDITED["seed"], n_pairs=EDITED["n_pairs"], snr=EDITED["snr"])
    folder = out_dir / EDITED["subject"] / EDITED["session"] / "mrs"
    stem = f"{EDITED['subject']}_{EDITED['session']}"
    svs = folder / f"{stem}_svs.nii.gz"
    ref = folder / f"{stem}_mrsref.nii.gz"
    for scan_, path_ in ((made.scan, svs), (made.water, ref)):
        data = np.asarray(scan_.data)
        rounded = (np.round(data.real) + 1j * np.round(data.imag)).astype(np.complex64)
        save(scan_.replace(data=rounded, source=None), path_)
    for scan_, path_, ref_ in ((made.scan, svs, ref), (made.water, ref, None)):
        sidecar = _sidecar(scan_, ref_, out_dir)
        if ref_ is not None:  # the edited acquisition itself
            sidecar.update({"PulseSequenceType": "MEGA-PRESS",
                            "NumberOfTransients": 2 * EDITED["n_pairs"]})
        write_text(path_.with_name(path_.name.replace(".nii.gz", ".json")),
                   json.dumps(sidecar, indent=1) + "\n")
    row = {"scan": _relative(svs, out_dir), "water": _relative(ref, out_dir),
           "subject": EDITED["subject"], "session": EDITED["session"], "kind": "volunteer",
           **{k: TISSUE[k] for k in ("gm", "wm", "csf")}}
    truth = {"scan": row["scan"], "water": row["water"], "edited": True,
             "subject": EDITED["subject"], "session": EDITED["session"], "kind": "volunteer",
             "tissue_fractions": {k: TISSUE[k] for k in ("gm", "wm", "csf")},
             "motion_corrupted_pair": made.motion_pair,
             **{k: float(v) for k, v in made.truth.items()}}
    return row, truth


def add_edited(out_dir: Path) -> None:
    """Add (or rewrite) the edited scan of an existing study: files, manifest row, truth."""
    row, truth = edited_scan(out_dir)
    rows = [r for r in _read_manifest(out_dir) if r.get("subject") != EDITED["subject"]]
    rows.append({key: row.get(key, "") for key in rows[0]})
    _write_manifest(out_dir, rows)
    doc = json.loads((out_dir / "truth.json").read_text(encoding="utf-8"))
    doc["edited_scans"] = [truth]
    write_text(out_dir / "truth.json", json.dumps(doc, indent=1) + "\n")


def make_demo(out_dir: Path) -> dict[str, Any]:
    """Write the whole study into ``out_dir`` (files are replaced atomically)."""
    rng = np.random.default_rng(SEED)
    basis = demo_basis()
    relax = load_relaxation_times(FIELD_T)
    rows = []
    scans = []
    for spec in SUBJECTS:
        metab, water, truth = build_scan_pair(spec, basis, rng=rng)
        folder = out_dir / spec["subject"] / spec["session"] / "mrs"
        stem = f"{spec['subject']}_{spec['session']}"
        svs = folder / f"{stem}_svs.nii.gz"
        ref = folder / f"{stem}_mrsref.nii.gz"
        save(metab, svs)
        save(water, ref)
        for scan_, path_, ref_ in ((metab, svs, ref), (water, ref, None)):
            write_text(path_.with_name(path_.name.replace(".nii.gz", ".json")),
                       json.dumps(_sidecar(scan_, ref_, out_dir), indent=1) + "\n")
        tissue = spec["tissue"] or {}
        rows.append({
            "scan": _relative(svs, out_dir), "water": _relative(ref, out_dir),
            "subject": spec["subject"], "session": spec["session"], "kind": spec["kind"],
            "gm": tissue.get("gm", ""), "wm": tissue.get("wm", ""), "csf": tissue.get("csf", ""),
        })
        scans.append({"scan": _relative(svs, out_dir), "water": _relative(ref, out_dir),
                      **truth})
    rows = with_anatomy_columns(rows, write_demo_anatomy(out_dir))
    _write_manifest(out_dir, rows)
    write_text(out_dir / "dataset_description.json",
               json.dumps(_dataset_description(), indent=1) + "\n")
    truth_doc = {
        "description": "Ground truth of the invented specproc demo study (make_demo.py).",
        "seed": SEED,
        "acquisition": {"field_t": FIELD_T, "sequence": "press", "te_s": TE_S, "tr_s": TR_S,
                        "water_te_s": TE_S, "water_tr_s": TR_S, "n_points": N_POINTS,
                        "dwell_s": DWELL_S, "centre_ppm": CENTRE_PPM},
        "water_assumptions": {
            "water_mm": WATER_MOLAR_37C_MM,
            "water_protons": 2,
            "tissue_water_content": dict(TISSUE_WATER_CONTENT),
            "water_relaxation": {t_: relax.water[t_].to_dict() for t_ in TISSUES},
            "metabolite_relaxation": "specproc/data/relaxation.toml at 3 T "
                                     "(load_relaxation_times(3.0))",
            "formula": "S_W = K * 2 * [H2O] * sum_t f_t d_t R_W,t; "
                       "A_M = K * (1 - f_CSF) * C_M * R_M (per molecule)",
            "scale_k": SCALE_K,
        },
        "units": {"concentrations_mm": "mmol per litre of GM+WM tissue (molar, CSF-corrected)",
                  "signal_ratios": "relaxation-weighted molecule ratios to tCr (what a fit "
                                   "without relaxation correction measures)",
                  "concentration_ratios": "C_M / C_tCr"},
        "combinations": {k: list(v) for k, v in COMBINATIONS.items()},
        "scans": scans,
    }
    write_text(out_dir / "truth.json", json.dumps(truth_doc, indent=1) + "\n")
    add_edited(out_dir)
    return json.loads((out_dir / "truth.json").read_text(encoding="utf-8"))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder of the study (default: beside this script)")
    parser.add_argument("--clean", action="store_true",
                        help="remove the subject folders first")
    parser.add_argument("--anatomy-only", action="store_true",
                        help="only (re)write the volunteers' anatomy, voxel geometry and the "
                             "manifest's map columns of an existing study")
    parser.add_argument("--edited-only", action="store_true",
                        help="only (re)write the edited scan of an existing study")
    args = parser.parse_args()
    if args.edited_only:
        add_edited(args.out)
        print(f"wrote the edited demo scan into {args.out}")
        return
    if args.anatomy_only:
        add_anatomy(args.out)
        print(f"wrote the demo anatomy into {args.out}")
        return
    if args.clean:
        for subject in [spec["subject"] for spec in SUBJECTS] + [EDITED["subject"]]:
            shutil.rmtree(args.out / subject, ignore_errors=True)
    make_demo(args.out)
    total = sum(p.stat().st_size for p in args.out.rglob("*") if p.is_file())
    print(f"wrote the demo study to {args.out} ({total / 1e6:.2f} MB in total)")


if __name__ == "__main__":
    main()
