"""Make the bundled example ``example_svs.nii.gz``: an invented 3 T PRESS-like scan.

The data are invented (no person was scanned): 16 transients of 1024 points, complex64, dwell
0.25 ms (4 kHz spectral width), TE 30 ms, TR 2 s, with three Lorentzian singlets at the shifts
of the NAA methyl (2.008 ppm), total creatine methyl (3.027 ppm) and choline trimethyl
(3.2 ppm) groups (Govindaraju et al., NMR Biomed 2000;13:129-153), a small residual water
peak, a slow frequency drift and a random phase per transient, and complex Gaussian noise.
The spectrometer frequency is the Larmor frequency of 1H at 3 T (CODATA via scipy.constants).

Run ``python demo_spectra/example/make_example.py`` to rebuild the file beside this script;
the random generator is seeded, so the samples are the same on every run.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.io import save

FIELD_T = 3.0
N_TRANSIENTS = 16
N_POINTS = 1024
DWELL_S = 2.5e-4
CENTRE_PPM = 4.65
SEED = 20261201
#: (name, shift ppm, amplitude, linewidth Hz): invented amplitudes, published shifts.
PEAKS = (
    ("NAA", 2.008, 1.5, 4.0),
    ("Cr", 3.027, 1.0, 4.0),
    ("Cho", 3.2, 0.8, 4.0),
    ("water (residual)", 4.65, 0.6, 6.0),
)
NOISE_SD = 0.02
DRIFT_HZ_PER_TRANSIENT = 0.1
PHASE_SD_RAD = 0.05


def build_example(*, rng: np.random.Generator | None = None) -> Scan:
    """The invented example scan (transients on a ``DIM_DYN`` axis, complex64)."""
    rng = np.random.default_rng(SEED) if rng is None else rng
    mhz = larmor_mhz(FIELD_T)
    t = np.arange(N_POINTS) * DWELL_S
    fids = np.empty((N_TRANSIENTS, N_POINTS), dtype=np.complex128)
    for k in range(N_TRANSIENTS):
        shift_hz = DRIFT_HZ_PER_TRANSIENT * k
        phase = rng.normal(0.0, PHASE_SD_RAD)
        fid = np.zeros(N_POINTS, dtype=np.complex128)
        for _, ppm, amplitude, lw_hz in PEAKS:
            # NIfTI-MRS sense: a shift above the centre turns as exp(-2πi Δf t)
            freq_hz = -(ppm - CENTRE_PPM) * mhz + shift_hz
            fid += amplitude * np.exp(2j * np.pi * freq_hz * t - np.pi * lw_hz * t)
        noise = rng.normal(0.0, NOISE_SD, (2, N_POINTS))
        fids[k] = fid * np.exp(1j * phase) + noise[0] + 1j * noise[1]
    return Scan(
        data=fids.astype(np.complex64),
        dwell_s=DWELL_S,
        spectrometer_mhz=mhz,
        nucleus="1H",
        dims=("DIM_DYN",),
        te_s=0.030,
        tr_s=2.0,
        sequence="press",
        protocol="specproc example (invented data)",
        water_suppressed=True,
        dim_headers={"DIM_DYN": {"info": "transients (invented)"}},
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).with_name("example_svs.nii.gz"))
    args = parser.parse_args()
    save(build_example(), args.out)
    print(f"wrote {args.out} ({args.out.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
