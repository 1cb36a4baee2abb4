"""Apodization, zero-filling, FFT convention, phasing and frequency referencing.

Sources: the Fourier pair exp(-t/T2*) <-> Lorentzian of FWHM 1/(π T2*) and the convolution
theorem (Lorentzian widths add; a Gaussian window exp(-(π G t)²/(4 ln 2)) has FWHM G) — textbook
Fourier analysis (e.g. Bracewell, The Fourier Transform and its Applications); the NIfTI-MRS
convention (Clarke et al. 2022): ppm = centre - f/MHz with S = fftshift(fft(fid)); trade shifts
NAA 2.008, Cr 3.027 ppm (Govindaraju et al. 2000); ACME (Chen et al. 2002).
"""

import numpy as np
import pytest

from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.apodize import (
    apodize_exponential,
    apodize_gaussian,
    apodize_scan,
    zero_fill,
    zero_fill_scan,
)
from specproc.preprocess.phase import apply_phase, estimate_zero_order_phase, phase_scan
from specproc.preprocess.reference import (
    estimate_reference_offset,
    locate_peak_ppm,
    reference_scan,
    water_shift_ppm,
)
from specproc.preprocess.transform import (
    freq_axis_hz,
    hz_to_ppm,
    ppm_axis,
    ppm_to_hz,
    shift_frequency,
    to_fid,
    to_spectrum,
)

MHZ, DWELL_S, N, CENTRE = 123.2, 2.5e-4, 2048, 4.65
T = np.arange(N) * DWELL_S
ZF = 16 * N


def singlets(peaks, t=T):
    return sum(a * np.exp(-2j * np.pi * (d - CENTRE) * MHZ * t - np.pi * lw * t)
               for d, a, lw in peaks)


METAB = [(2.008, 1.0, 4.0), (3.027, 0.8, 4.0), (3.2, 0.6, 4.0)]


def measure_fwhm_hz(spectrum, freq_hz):
    """FWHM of the tallest peak with specproc.qc.linewidth (the one FWHM definition), Hz."""
    from specproc.qc import linewidth

    ppm = CENTRE - np.asarray(freq_hz) / MHZ
    peak = float(ppm[np.argmax(np.real(spectrum))])
    return linewidth(ppm, spectrum, spectrometer_mhz=MHZ, centre_ppm=peak, half_width_ppm=0.01,
                     max_search_ppm=1.0)[0]


def fwhm(fid):
    first_point_halved = np.asarray(fid).copy()
    first_point_halved[0] /= 2  # the DFT of a sampled exponential needs x0/2 to be a pure
    # Lorentzian (trapezoidal rule; common practice), otherwise a constant offset is added
    return measure_fwhm_hz(to_spectrum(first_point_halved, n_points=ZF), freq_axis_hz(ZF, DWELL_S))


@pytest.mark.parametrize("t2_s", [0.02, 0.05, 0.1])
def test_lorentzian_fwhm_is_one_over_pi_t2(t2_s):
    # FT pair: exp(-t/T2*) <-> Lorentzian with FWHM 1/(π T2*) (analytic); 1 s of data.
    t = np.arange(8192) * DWELL_S
    fid = np.exp(-t / t2_s)
    spectrum = np.fft.fftshift(np.fft.fft(np.r_[fid[0] / 2, fid[1:]], 65536))
    width = measure_fwhm_hz(spectrum, freq_axis_hz(65536, DWELL_S))
    assert width == pytest.approx(1 / (np.pi * t2_s), rel=2e-3)


@pytest.mark.parametrize("lb_hz", [1.0, 3.0, 8.0])
def test_exponential_broadening_adds_its_width(lb_hz):
    # convolution theorem: Lorentzian widths add (W + L)
    fid = singlets([(3.0, 1.0, 4.0)])
    broadened = apodize_exponential(fid, lb_hz=lb_hz, dwell_s=DWELL_S)
    assert fwhm(fid) == pytest.approx(4.0, abs=0.02)
    assert fwhm(broadened) - fwhm(fid) == pytest.approx(lb_hz, abs=0.02)
    # and it is exactly exp(-π L t) (nmrglue em takes lb in points: L·dwell)
    np.testing.assert_allclose(broadened, fid * np.exp(-np.pi * lb_hz * T), atol=1e-14)


def test_gaussian_window_has_the_stated_fwhm():
    # FT of exp(-(π G t)²/(4 ln 2)) is a Gaussian of FWHM G (analytic); on a non-decaying
    # cosine-free sinusoid the line shape is that Gaussian.
    t = np.arange(16384) * DWELL_S
    fid = np.exp(2j * np.pi * 50.0 * t)
    windowed = apodize_gaussian(fid, gb_hz=6.0, dwell_s=DWELL_S)
    windowed = np.r_[windowed[0] / 2, windowed[1:]]
    width = measure_fwhm_hz(np.fft.fftshift(np.fft.fft(windowed, 65536)),
                            freq_axis_hz(65536, DWELL_S))
    assert width == pytest.approx(6.0, rel=5e-3)


def test_zero_filling_and_scan_wrappers():
    fid = singlets(METAB)
    filled = zero_fill(fid, n_points=2 * N)
    assert filled.shape == (2 * N,) and np.all(filled[N:] == 0)
    np.testing.assert_array_equal(filled[:N], fid)
    scan = Scan(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    assert zero_fill_scan(scan, factor=2).n_points == 2 * N
    assert apodize_scan(scan, kind="gaussian", lw_hz=2.0).provenance[-1]["Method"] == "apodization"
    with pytest.raises(InvalidInputError, match="valid"):
        apodize_scan(scan, kind="sine")
    with pytest.raises(InvalidInputError, match="fewer"):
        zero_fill(fid, n_points=10)


def test_fft_convention_puts_a_peak_at_its_ppm():
    # NIfTI-MRS (Clarke et al. 2022): S = fftshift(fft(fid)); ppm = centre - f / MHz.
    fid = singlets([(2.008, 1.0, 2.0)])
    spec = to_spectrum(fid)
    np.testing.assert_allclose(spec, np.fft.fftshift(np.fft.fft(fid)), atol=1e-9)
    ppm = ppm_axis(N, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    assert ppm[0] > ppm[-1]  # high ppm on the left
    assert abs(ppm[np.argmax(np.abs(spec))] - 2.008) < 0.5 / (N * DWELL_S) / MHZ + 1e-12
    np.testing.assert_allclose(to_fid(spec), fid, atol=1e-12)
    assert hz_to_ppm(ppm_to_hz(2.008, spectrometer_mhz=MHZ, centre_ppm=CENTRE),
                     spectrometer_mhz=MHZ, centre_ppm=CENTRE) == pytest.approx(2.008)
    # a positive frequency shift moves peaks to lower ppm by shift / MHz
    moved = to_spectrum(shift_frequency(fid, shift_hz=12.32, dwell_s=DWELL_S), n_points=ZF)
    fine = ppm_axis(ZF, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    assert fine[np.argmax(np.abs(moved))] == pytest.approx(2.008 - 0.1, abs=1e-3)


@pytest.mark.parametrize(("method", "tolerance_deg"), [("peak", 2.0), ("acme", 4.0)])
@pytest.mark.parametrize("p0_true", [-150.0, -40.0, 25.0, 120.0])
def test_automatic_zero_order_phase_recovers_a_known_phase(method, tolerance_deg, p0_true):
    # Absorptive singlets given a known zero-order phase; the estimate must undo it.
    # Measured biases: "peak" -1.2 deg (the dispersive tails of the overlapping Cr and Cho
    # lines), ACME 0.8 deg without noise and about 2.5 deg with this noise (its negativity
    # penalty sees the noise; ACME is an entropy heuristic, Chen et al. 2002).
    rng = np.random.default_rng(41)
    fid = singlets(METAB) * np.exp(1j * np.radians(p0_true))
    fid = fid + 0.01 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    halved = np.r_[fid[0] / 2, fid[1:]]  # first-point scaling, as phase_scan does
    ppm = ppm_axis(8 * N, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    p0 = estimate_zero_order_phase(to_spectrum(halved, n_points=8 * N), ppm, method=method)
    error = (p0 + p0_true + 180) % 360 - 180
    assert abs(error) < tolerance_deg
    scan = Scan(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    recorded = phase_scan(scan, method=method).provenance[-1]["Details"]["p0_deg"]
    assert abs((recorded + p0_true + 180) % 360 - 180) < tolerance_deg


def test_phase_scan_manual_and_first_order():
    fid = singlets([(2.008, 1.0, 4.0)])
    scan = Scan(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    manual = phase_scan(scan, method="manual", p0_deg=90.0)
    np.testing.assert_allclose(manual.data, 1j * scan.data, atol=1e-6)
    # a first-order phase about a pivot leaves the pivot point's phase unchanged
    ppm = scan.ppm()
    spec = apply_phase(scan.spectrum(), ppm, p1_deg_per_ppm=30.0, pivot_ppm=2.008)
    k = np.argmin(np.abs(ppm - 3.008))
    assert np.angle(spec[k] / scan.spectrum()[k], deg=True) == pytest.approx(
        30.0 * (ppm[k] - 2.008))
    auto = phase_scan(Scan(fid * np.exp(0.7j), dwell_s=DWELL_S, spectrometer_mhz=MHZ))
    assert auto.provenance[-1]["Details"]["p0_deg"] == pytest.approx(-np.degrees(0.7), abs=0.5)


@pytest.mark.parametrize("offset_ppm", [-0.31, -0.05, 0.0, 0.0123, 0.2])
@pytest.mark.parametrize("apply_to", ["fid", "axis"])
def test_referencing_puts_naa_at_2_008(offset_ppm, apply_to):
    # Govindaraju et al. 2000: NAA 2.008, Cr 3.027 ppm. The singlets are displaced by a known
    # offset; after referencing NAA must sit at 2.008 ppm within 0.005 ppm (issue 4).
    rng = np.random.default_rng(42)
    fid = singlets([(d + offset_ppm, a, lw) for d, a, lw in METAB])
    fid = fid + 0.02 * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    scan = Scan(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ, centre_ppm=CENTRE)
    out = reference_scan(scan, apply_to=apply_to)
    n = 16 * N
    mag = np.abs(out.spectrum(n))
    naa, _ = locate_peak_ppm(mag, out.ppm(n), around_ppm=2.008, search_ppm=0.1)
    assert naa == pytest.approx(2.008, abs=0.005)
    cr, _ = locate_peak_ppm(mag, out.ppm(n), around_ppm=3.027, search_ppm=0.1)
    assert cr == pytest.approx(3.027, abs=0.005)
    assert out.provenance[-1]["Details"]["offset_ppm"] == pytest.approx(offset_ppm, abs=0.005)
    if apply_to == "axis":
        np.testing.assert_array_equal(out.data, scan.data)
    else:
        assert out.reference_ppm == CENTRE


def test_water_referencing_with_temperature():
    # water 4.65 ppm at 37 °C, -0.01 ppm/°C (common practice)
    assert water_shift_ppm(37.0) == pytest.approx(4.65)
    assert water_shift_ppm(25.0) == pytest.approx(4.77)
    fid = singlets([(4.70, 10.0, 5.0)])
    offset, _ = estimate_reference_offset(fid, dwell_s=DWELL_S, spectrometer_mhz=MHZ,
                                          centre_ppm=CENTRE, peaks_ppm=(water_shift_ppm(32.0),))
    assert offset == pytest.approx(0.0, abs=0.002)


def test_referencing_without_peaks_is_a_clear_error():
    with pytest.raises(InvalidInputError, match="zero"):
        estimate_reference_offset(np.zeros(N, complex), dwell_s=DWELL_S, spectrometer_mhz=MHZ,
                                  centre_ppm=CENTRE)
