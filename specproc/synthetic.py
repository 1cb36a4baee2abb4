"""Synthetic single-voxel scans built from a basis set (for tests, benchmarks and demos).

The data are invented: each transient is ``Σ_m c_m · basis_m(t) · exp(-π lw t)`` (a Lorentzian
line of FWHM ``lw``) with complex Gaussian noise, and the optional water reference is one
Lorentzian singlet at the water shift. Nothing here is measured data.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from specproc.basis import BasisSet
from specproc.data import Scan

__all__ = ["synthetic_scan", "synthetic_water", "write_synthetic_cohort"]


def synthetic_scan(
    basis: BasisSet,
    concentrations: Mapping[str, float],
    *,
    lw_hz: float = 4.0,
    noise_sd: float = 0.05,
    n_transients: int = 4,
    te_s: float | None = None,
    tr_s: float = 2.0,
    residual_water: float = 0.0,
    water_ppm: float = 4.65,
    rng: np.random.Generator | None = None,
) -> Scan:
    """Invented metabolite scan: basis members weighted by ``concentrations`` plus noise.

    Parameters
    ----------
    basis : BasisSet
        Its dwell time, length, field, sequence and timings are those of the scan.
    concentrations : mapping of str to float
        Weight of each member (arbitrary units, per molecule).
    lw_hz : float
        Lorentzian FWHM of every line, Hz.
    noise_sd : float
        SD of the real and imaginary noise of each transient.
    n_transients : int
        Number of transients (``DIM_DYN`` axis when > 1).
    te_s, tr_s : float, optional
        Header TE (default the basis TE) and TR, s.
    residual_water : float
        Amplitude of a residual water singlet (0: none).
    water_ppm : float
        Its shift, ppm (the shift of water depends on temperature).
    rng : numpy.random.Generator, optional
        Random generator (default: a new unseeded one).
    """
    rng = np.random.default_rng() if rng is None else rng
    t = basis.time_s()
    fid = np.zeros(basis.n_points, dtype=complex)
    for name, c in concentrations.items():
        fid += float(c) * basis.fids[basis.index(name)]
    if residual_water:
        offset_hz = (water_ppm - basis.centre_ppm) * basis.spectrometer_mhz
        fid += float(residual_water) * np.exp(-2j * np.pi * offset_hz * t)
    fid *= np.exp(-np.pi * lw_hz * t)
    noise = rng.normal(0.0, noise_sd, (n_transients, 2, basis.n_points))
    data = fid[None, :] + noise[:, 0] + 1j * noise[:, 1]
    te = basis.timings_s.get("te_s") if te_s is None else te_s
    return Scan(
        data=data if n_transients > 1 else data[0],
        dwell_s=basis.dwell_s,
        spectrometer_mhz=basis.spectrometer_mhz,
        dims=("DIM_DYN",) if n_transients > 1 else (),
        centre_ppm=basis.centre_ppm,
        te_s=te,
        tr_s=tr_s,
        tm_s=basis.timings_s.get("tm_s"),
        sequence=basis.sequence,
        water_suppressed=True,
        protocol="synthetic (invented data)",
    )


def synthetic_water(
    basis: BasisSet,
    *,
    amplitude: float = 1000.0,
    shift_ppm: float = 4.65,
    lw_hz: float = 3.0,
    noise_sd: float = 0.05,
    te_s: float | None = None,
    tr_s: float = 2.0,
    rng: np.random.Generator | None = None,
) -> Scan:
    """Invented water reference: one Lorentzian singlet (NIfTI-MRS sign convention) plus noise."""
    rng = np.random.default_rng() if rng is None else rng
    t = basis.time_s()
    offset_hz = (shift_ppm - basis.centre_ppm) * basis.spectrometer_mhz
    fid = amplitude * np.exp(-2j * np.pi * offset_hz * t - np.pi * lw_hz * t)
    noise = rng.normal(0.0, noise_sd, (2, basis.n_points))
    te = basis.timings_s.get("te_s") if te_s is None else te_s
    return Scan(
        data=fid + noise[0] + 1j * noise[1],
        dwell_s=basis.dwell_s,
        spectrometer_mhz=basis.spectrometer_mhz,
        centre_ppm=basis.centre_ppm,
        te_s=te,
        tr_s=tr_s,
        tm_s=basis.timings_s.get("tm_s"),
        sequence=basis.sequence,
        water_suppressed=False,
        protocol="synthetic water reference (invented data)",
    )


def write_synthetic_cohort(
    root: str | os.PathLike[str],
    basis: BasisSet,
    *,
    n_subjects: int,
    concentrations: Mapping[str, float],
    spread: float = 0.1,
    water_every: int = 0,
    n_transients: int = 4,
    noise_sd: float = 0.05,
    rng: np.random.Generator | None = None,
) -> list[Path]:
    """Write a BIDS-style folder ``sub-NNN/mrs/sub-NNN_svs.nii.gz`` of invented scans.

    Parameters
    ----------
    root : path
        Folder to fill (created).
    basis : BasisSet
        Basis the scans are made of.
    n_subjects : int
        Number of scans (one per subject).
    concentrations : mapping
        Mean weight of each member; each scan scales them by ``1 + spread · N(0, 1)``.
    water_every : int
        Give every k-th subject a water reference (``*_mrsref.nii.gz``) and a JSON sidecar with
        tissue fractions (0: none).
    n_transients, noise_sd : int, float
        See :func:`synthetic_scan`.
    rng : numpy.random.Generator, optional
        Random generator.

    Returns
    -------
    list of Path
        The metabolite files written.
    """
    import json

    from specproc.io import save

    rng = np.random.default_rng() if rng is None else rng
    root = Path(root)
    paths = []
    for k in range(1, n_subjects + 1):
        folder = root / f"sub-{k:03d}" / "mrs"
        folder.mkdir(parents=True, exist_ok=True)
        conc = {n: c * max(0.2, 1.0 + spread * rng.standard_normal())
                for n, c in concentrations.items()}
        path = folder / f"sub-{k:03d}_svs.nii.gz"
        save(synthetic_scan(basis, conc, n_transients=n_transients, noise_sd=noise_sd,
                            rng=rng), path)
        if water_every and k % water_every == 0:
            save(synthetic_water(basis, rng=rng), folder / f"sub-{k:03d}_mrsref.nii.gz")
            sidecar = {"TissueFractions": {"GM": 0.6, "WM": 0.3, "CSF": 0.1}}
            (folder / f"sub-{k:03d}_svs.json").write_text(json.dumps(sidecar), "utf-8")
        paths.append(path)
    return paths
