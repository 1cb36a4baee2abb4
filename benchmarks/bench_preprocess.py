"""Accuracy and speed of the preprocessing stages on synthetic data (prints tables).

Run: python benchmarks/bench_preprocess.py (``--hlsvd``: only table 3b, on 30 signals)

1. Spectral registration: RMS and worst errors of per-transient frequency and phase against the
   Cramér-Rao bound (Kay 1993) at several spectral SNRs (NAA height / SD of the real spectral
   noise), 64 transients, known template reference.
2. Coil combination: SNR gain of the whitened combination against the matched-filter bound
   sqrt(sᴴΨ⁻¹s) (Roemer et al. 1990) and against plain summation.
3. HLSVD: frequency and amplitude errors of five known damped sinusoids with noise; then the
   truncated (Lanczos) solver against the dense SVD on brain-like signals (model order 25,
   1024 points): CPU time of the singular vectors and of whole hlsvd() and remove_water()
   calls, and the largest differences of the components.
4. The whole pipeline: time per scan (4 coils x 32 transients x 2048 points).
"""

from __future__ import annotations

import sys
import time

import numpy as np
from threadpoolctl import threadpool_limits

from specproc.data import Scan
from specproc.preprocess.align import register_transients
from specproc.preprocess.coils import (
    coil_combination_snr_gain,
    combine_coils,
    compute_coil_weights,
    estimate_noise_covariance,
)
from specproc.preprocess.pipeline import run_pipeline
from specproc.preprocess.water import (
    DampedSinusoids,
    _leading_left_vectors,
    damped_sinusoids_fid,
    hlsvd,
    remove_water,
)

MHZ, DWELL_S, N, CENTRE = 123.2, 2.5e-4, 2048, 4.65
T = np.arange(N) * DWELL_S


def singlets(peaks):
    return sum(a * np.exp(-2j * np.pi * (d - CENTRE) * MHZ * T - np.pi * lw * T)
               for d, a, lw in peaks)


TEMPLATE = singlets([(2.008, 1.0, 4.0), (3.027, 0.8, 4.0), (3.2, 0.6, 4.0)])


def registration_table(rng):
    print("1. spectral registration (64 transients, fit over the first 0.2 s)")
    print(f"{'SNR':>6} {'rms f Hz':>9} {'max f Hz':>9} {'CRLB f':>8} "
          f"{'rms p deg':>10} {'max p deg':>10} {'CRLB p':>8}")
    n_fit = int(0.2 / DWELL_S)
    height = np.max(np.fft.fft(TEMPLATE).real)
    for snr in (10, 20, 50, 100, 200):
        sd = height / (snr * np.sqrt(N))
        f = rng.uniform(-4, 4, 64)
        p = rng.uniform(-90, 90, 64)
        x = TEMPLATE * np.exp(1j * (2 * np.pi * f[:, None] * T + np.radians(p)[:, None]))
        x = x + sd * (rng.standard_normal(x.shape) + 1j * rng.standard_normal(x.shape))
        r = register_transients(x, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE,
                                reference=TEMPLATE)
        s2 = np.abs(TEMPLATE[:n_fit]) ** 2
        w = 2 * np.pi * T[:n_fit]
        cov = np.linalg.inv(np.array([[np.sum(s2 * w * w), np.sum(s2 * w)],
                                      [np.sum(s2 * w), np.sum(s2)]]) / sd**2)
        ef, ep = r.shifts_hz - f, r.phases_deg - p
        print(f"{snr:>6} {np.sqrt(np.mean(ef**2)):>9.4f} {np.max(np.abs(ef)):>9.4f} "
              f"{np.sqrt(cov[0, 0]):>8.4f} {np.sqrt(np.mean(ep**2)):>10.3f} "
              f"{np.max(np.abs(ep)):>10.3f} {np.degrees(np.sqrt(cov[1, 1])):>8.3f}")


def coil_table(rng):
    print("\n2. coil combination (SNR relative to the best single coil)")
    cases = {
        "4 equal coils": (np.exp(1j * rng.uniform(-3, 3, 4)), np.full(4, 0.05)),
        "4 unequal coils": (np.array([1.0, 0.6, 0.3, 0.1]) * np.exp(1j * rng.uniform(-3, 3, 4)),
                            np.array([0.05, 0.1, 0.05, 0.2])),
        "8 equal coils": (np.exp(1j * rng.uniform(-3, 3, 8)), np.full(8, 0.05)),
    }
    print(f"{'case':>16} {'whitened':>9} {'svd':>6} {'plain sum':>10} {'bound':>6}")
    signal = TEMPLATE / np.abs(TEMPLATE[0])
    for name, (gains, sd) in cases.items():
        noise = (rng.standard_normal((gains.size, 16, N))
                 + 1j * rng.standard_normal((gains.size, 16, N))) * sd[:, None, None] / np.sqrt(2)
        clean = gains[:, None, None] * signal * np.ones((1, 16, 1))
        cov = estimate_noise_covariance(clean + noise)
        best_single = np.max(np.abs(gains) / sd)

        def snr(weights, clean=clean, noise=noise):
            return abs(combine_coils(clean, weights)[..., 0].mean()) / np.std(
                combine_coils(noise, weights))

        whitened = snr(compute_coil_weights(clean + noise, noise_cov=cov))
        svd = snr(compute_coil_weights(clean + noise, noise_cov=cov, method="svd"))
        plain = snr(np.ones(gains.size, complex))
        bound = coil_combination_snr_gain(gains, np.diag(sd**2))
        print(f"{name:>16} {whitened / best_single:>9.3f} {svd / best_single:>6.3f} "
              f"{plain / best_single:>10.3f} {bound / best_single:>6.3f}")


def hlsvd_table(rng):
    print("\n3. HLSVD, five damped sinusoids, model order 12, noise SD 1e-3 per component")
    known = DampedSinusoids(np.array([-180.0, -35.0, 0.0, 12.5, 330.0]),
                            np.array([6.0, 10.0, 4.0, 15.0, 5.0]),
                            np.array([1.0, 0.5j, 20.0, 3.0, 0.8]))
    fid = damped_sinusoids_fid(known, n_points=N, dwell_s=DWELL_S)
    fid = fid + 1e-3 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    t0 = time.perf_counter()
    found = hlsvd(fid, dwell_s=DWELL_S, model_order=12)
    elapsed = time.perf_counter() - t0
    idx = [int(np.argmin(np.abs(found.freq_hz - f))) for f in known.freq_hz]
    print(f"{'f Hz':>8} {'err Hz':>9} {'amp rel err':>12}")
    for k, i in enumerate(idx):
        print(f"{known.freq_hz[k]:>8.1f} {found.freq_hz[i] - known.freq_hz[k]:>9.5f} "
              f"{abs(found.amplitude[i]) / abs(known.amplitude[k]) - 1:>12.2e}")
    print(f"time {elapsed * 1e3:.0f} ms (1024 points)")


def brain_like_fid(rng, n_lines=12):
    """Random metabolite-like lines (0.9-4.0 ppm), a three-part residual water, noise."""
    shift_ppm = rng.uniform(0.9, 4.0, n_lines)
    lw_hz = rng.uniform(4.0, 30.0, n_lines)
    amp = rng.uniform(1.0, 10.0, n_lines) * np.exp(1j * rng.uniform(0, 2 * np.pi, n_lines))
    lines = DampedSinusoids((CENTRE - shift_ppm) * MHZ, lw_hz, amp)
    water = DampedSinusoids(np.array([-2.0, 6.0, 20.0]), np.array([6.0, 12.0, 25.0]),
                            np.array([300.0, 80.0 * np.exp(1j), 40.0j]))
    fid = damped_sinusoids_fid(lines, n_points=N, dwell_s=DWELL_S)
    fid += damped_sinusoids_fid(water, n_points=N, dwell_s=DWELL_S)
    return fid + 0.3 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))


def hlsvd_solver_table(rng, repeats=10):
    print("\n3b. HLSVD solvers, model order 25, 1024 points (512 x 513 Hankel), brain-like "
          "signals;\n    CPU ms per call (time.process_time, one BLAS thread), median of "
          f"{repeats} signals (the two solvers alternate on each)")
    steps = ("singular vectors", "whole hlsvd() call", "whole remove_water() call")
    cpu = {step: {"full": [], "lanczos": []} for step in steps}
    worst = np.zeros(3)
    for _ in range(repeats):
        fid = brain_like_fid(rng)
        x = fid[:1024] / np.max(np.abs(fid[:1024]))
        found = {}
        for solver in ("full", "lanczos"):
            t0 = time.process_time()
            _leading_left_vectors(x, 512, 25, solver)
            cpu["singular vectors"][solver].append(time.process_time() - t0)
            t0 = time.process_time()
            found[solver] = hlsvd(fid, dwell_s=DWELL_S, model_order=25, solver=solver)
            cpu["whole hlsvd() call"][solver].append(time.process_time() - t0)
            t0 = time.process_time()
            remove_water(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE,
                         model_order=25, solver=solver)
            cpu["whole remove_water() call"][solver].append(time.process_time() - t0)
        a, b = found["full"], found["lanczos"]
        worst = np.maximum(worst, [np.max(np.abs(a.freq_hz - b.freq_hz)),
                                   np.max(np.abs(a.lw_hz - b.lw_hz)),
                                   np.max(np.abs(a.amplitude - b.amplitude)
                                          / np.abs(a.amplitude))])
    print(f"{'step':>26} {'full SVD ms':>12} {'Lanczos ms':>11} {'speed-up':>9}")
    for name in steps:
        full, fast = np.median(cpu[name]["full"]), np.median(cpu[name]["lanczos"])
        print(f"{name:>26} {full * 1e3:>12.1f} {fast * 1e3:>11.1f} {full / fast:>9.1f}")
    print(f"largest differences of the 25 components: frequency {worst[0]:.1e} Hz, width "
          f"{worst[1]:.1e} Hz, relative amplitude {worst[2]:.1e}")


def pipeline_timing(rng):
    print("\n4. pipeline time, 4 coils x 32 transients x 2048 points, with water reference")
    sens = np.exp(1j * rng.uniform(-3, 3, 4))
    data = sens[:, None, None] * singlets([(2.008, 1, 4), (3.027, 0.8, 4), (3.2, 0.6, 4),
                                           (4.65, 5, 5)]) * np.ones((1, 32, 1))
    data = data + 0.05 * (rng.standard_normal(data.shape) + 1j * rng.standard_normal(data.shape))
    water = sens[:, None, None] * singlets([(4.65, 100, 5)]) * np.ones((1, 2, 1))
    dims = ("DIM_COIL", "DIM_DYN")
    scan = Scan(data, dwell_s=DWELL_S, spectrometer_mhz=MHZ, dims=dims)
    ref = Scan(water + 0 * 1j, dwell_s=DWELL_S, spectrometer_mhz=MHZ, dims=dims)
    t0 = time.perf_counter()
    run_pipeline(scan, water=ref)
    print(f"{time.perf_counter() - t0:.2f} s")


if __name__ == "__main__":
    generator = np.random.default_rng(2024)
    if "--hlsvd" in sys.argv[1:]:  # only the solver table (3b), on 30 signals
        with threadpool_limits(limits=1, user_api="blas"):
            hlsvd_solver_table(generator, repeats=30)
        sys.exit(0)
    with threadpool_limits(limits=1, user_api="blas"):
        registration_table(generator)
        coil_table(generator)
        hlsvd_table(generator)
        hlsvd_solver_table(generator)
        pipeline_timing(generator)
