"""Messages in words: flag keys to sentences, and the warnings about the inputs of an analysis.

Sources: the NIfTI-MRS sign convention of the project (a line at shift δ evolves as
exp(-2πi (δ - centre) · MHz · t)); an unsuppressed water reference has a water peak hundreds
to thousands of times the metabolite peaks (common practice, from memory).
"""

from __future__ import annotations

import re
from typing import ClassVar

import numpy as np
import pytest

from specproc.analysis import input_notes
from specproc.basis import BasisSet
from specproc.batch.task import apply_overrides
from specproc.data import Scan
from specproc.report.messages import (
    CRLB_UNDEFINED,
    crlb_text,
    fit_flag_sentence,
    qc_flag_sentence,
    sentences,
)
from specproc.report.tables import sig

MHZ, DWELL, N, CENTRE = 123.2, 2.5e-4, 1024, 4.65


def _line(ppm: float, amplitude: float = 1.0) -> np.ndarray:
    t = np.arange(N) * DWELL
    return amplitude * np.exp(-2j * np.pi * (ppm - CENTRE) * MHZ * t - t / 0.05)


def _scan(fid: np.ndarray, source: str, **meta) -> Scan:
    return Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE, source=source,
                **meta)


def _basis(te_s: float = 0.030, sequence: str = "press", mhz: float = MHZ) -> BasisSet:
    return BasisSet(names=("NAA",), fids=_line(2.008)[None, :], dwell_s=DWELL,
                    spectrometer_mhz=mhz, centre_ppm=CENTRE, protons=(3,), sequence=sequence,
                    timings_s={"te_s": te_s})


METAB = _line(2.008, 10.0) + _line(3.027, 8.0) + _line(4.65, 20.0)  # suppressed: small water
WATER = _line(4.65, 5e4) + _line(2.008, 10.0)


def test_matching_inputs_give_no_note() -> None:
    scan = _scan(METAB, "svs.nii", te_s=0.030, sequence="press")
    water = _scan(WATER, "ref.nii", te_s=0.030, sequence="press")
    assert input_notes(scan, water, _basis()) == []


@pytest.mark.parametrize("basis, words", [
    (_basis(te_s=0.144), "TE 144 ms but the scan header says TE 30 ms"),
    (_basis(sequence="steam"), "steam sequence but the scan header says press"),
    (_basis(mhz=297.2), "297.2 MHz but the scan was acquired at 123.2 MHz"),
])
def test_basis_that_differs_from_the_header_is_named(basis: BasisSet, words: str) -> None:
    scan = _scan(METAB, "svs.nii", te_s=0.030, sequence="press")
    notes = input_notes(scan, None, basis)
    assert len(notes) == 1 and words in notes[0]


def test_te_option_over_the_header_is_stated() -> None:
    scan = apply_overrides(_scan(METAB, "svs.nii", te_s=0.030, sequence="press"),
                           {"te_s": 0.144})
    assert scan.te_s == 0.144
    notes = input_notes(scan, None, _basis(te_s=0.144))
    assert notes == ["The TE given (144 ms) replaces the file header's (30 ms); the basis and "
                     "the relaxation corrections use the given value."]


def test_metabolite_scan_as_its_own_water_reference() -> None:
    scan = _scan(METAB, "svs.nii", te_s=0.030, sequence="press")
    same = _scan(METAB.copy(), "copy_of_svs.nii", te_s=0.030, sequence="press")
    for water in (scan, same):
        notes = input_notes(scan, water, _basis())
        assert len(notes) == 1 and "water reference is the metabolite scan itself" in notes[0]


def test_water_reference_not_dominated_by_water() -> None:
    scan = _scan(METAB, "svs.nii", te_s=0.030, sequence="press")
    weak = _scan(_line(4.65, 30.0) + _line(2.008, 10.0), "ref.nii")
    notes = input_notes(scan, weak, _basis())
    assert len(notes) == 1 and "not dominated by water" in notes[0]
    # 30 / 10: the heights of the same line shape, up to the sampling of NAA (it falls
    # between two spectral points, which lowers its absorption height by about 12 %)
    ratio = float(re.search(r"only ([0-9.]+) times", notes[0]).group(1))
    assert ratio == pytest.approx(3.0, rel=0.2)


def test_broad_water_reference_at_low_field_is_a_water_reference() -> None:
    """A 1.5 T water line of 8 Hz FWHM (Lorentzian), 1,000 times the NAA line's area.

    Analytic Lorentzian shapes: the magnitude falls as HWHM / offset, the absorption as
    (HWHM / offset)². 4 ppm lies 41 Hz from water at 63.9 MHz, where the magnitude is still
    about 1/10 of the peak: a magnitude comparison down to 4 ppm took this reference for a
    suppressed scan; in absorption over 1.8-3.4 ppm the water peak is hundreds of times the
    tallest other point.
    """
    mhz, dwell, n = 63.87, 5e-4, 2048
    t = np.arange(n) * dwell
    water = 1000.0 * np.exp(-np.pi * 8.0 * t) * np.exp(1j * 0.7)
    naa = np.exp(-2j * np.pi * (2.008 - CENTRE) * mhz * t - np.pi * 4.0 * t) * np.exp(1j * 0.7)
    metab = Scan(naa, dwell_s=dwell, spectrometer_mhz=mhz, centre_ppm=CENTRE, source="svs.nii",
                 te_s=0.030, sequence="press")
    ref = Scan(water + naa, dwell_s=dwell, spectrometer_mhz=mhz, centre_ppm=CENTRE,
               source="ref.nii")
    basis = BasisSet(names=("NAA",), fids=naa[None, :], dwell_s=dwell, spectrometer_mhz=mhz,
                     centre_ppm=CENTRE, protons=(3,), sequence="press",
                     timings_s={"te_s": 0.030})
    assert input_notes(metab, ref, basis) == []
    # the magnitude 41 Hz from the water peak: about HWHM / offset = 4 / 41 of its height
    spec = np.abs(np.fft.fftshift(np.fft.fft(water)))
    freq = np.fft.fftshift(np.fft.fftfreq(n, dwell))
    at_4ppm = spec[np.argmin(np.abs(freq - (CENTRE - 4.0) * mhz))] / spec.max()
    assert at_4ppm == pytest.approx(4.0 / 41.5, rel=0.15)


def test_flag_keys_become_sentences() -> None:
    assert fit_flag_sentence("at_zero_bound:Asp").startswith("Aspartate (Asp) was fitted at zero")
    assert (qc_flag_sentence("drift_range_hz", 5.88, 5.0)
            == "The frequency drifted by 5.88 Hz during the scan, more than the limit of 5 Hz.")
    assert qc_flag_sentence("crlb:GABA", 87.9, 20.0) == (
        "The error bound (CRLB) of gamma-aminobutyric acid (GABA) is 88 %, above the limit "
        "of 20 %.")
    # values looked up from a cohort summary's QC numbers and the thresholds
    words = sentences(["snr", "fit:not_converged"], qc={"snr": 7.04},
                      thresholds={"snr_min": 10.0})
    assert words[0] == ("The signal-to-noise ratio (NAA height / noise SD) is 7.04, below the "
                        "minimum of 10.")
    assert "did not converge" in words[1] or "before it converged" in words[1]
    for text in words:
        assert "_" not in text  # no internal key left


class _Fit:
    spectrometer_mhz = MHZ
    nonlinear: ClassVar[dict[str, float]] = {"dshift_Asc_hz": 4.0, "shift_all_hz": -30.8,
                                             "gauss_s2": 0.0}
    gauss_fwhm_hz = 0.0


def test_parameters_at_their_limits_are_described() -> None:
    assert fit_flag_sentence("at_bound:dshift_Asc_hz", _Fit()) == (
        "The ascorbate (Asc) shift hit its limit of ±4.0 Hz (±0.032 ppm) from the shared shift.")
    assert "±0.25 ppm" in fit_flag_sentence("at_bound:shift_all_hz", _Fit())
    assert fit_flag_sentence("at_bound:gauss_s2", _Fit()) == (
        "The shared Gaussian line broadening went to zero.")


def test_numbers_have_consistent_significant_figures() -> None:
    assert [sig(v) for v in (87.9, 25.47, 3.091, 1.0)] == ["87.9", "25.5", "3.09", "1.00"]
    assert [sig(v) for v in (9.996, 99.97, 0.012345, 123456.0, 2.5e-7)] == [
        "10.0", "100", "0.0123", "123000", "2.50e-07"]
    assert [crlb_text(v) for v in (87.9, 25.47, 3.091)] == ["88", "25", "3.1"]
    assert crlb_text(float("nan")) == crlb_text(None) == CRLB_UNDEFINED


def test_basis_show_on_a_spectroscopy_file_says_what_it_needs() -> None:
    from click.testing import CliRunner

    from specproc._paths import demo_dir
    from specproc.cli import main

    scan = demo_dir() / "example" / "example_svs.nii.gz"
    result = CliRunner().invoke(main, ["basis", "show", str(scan)])
    assert result.exit_code == 2
    line = result.output.strip()
    assert "not a specproc basis file" in line and "basis simulate" in line
    assert "pickle" not in line and len(line.splitlines()) == 1
