"""Scans of the independent validation corpus at 7 T, run through ``specproc batch``.

Outside check: the scans come from ``benchmarks/validation/generate.py`` (its ``7T-TE30``
category: PRESS TE 30 with uneven TE1 in the header, NAA 8-15 Hz, SNR 20-150, 4 kHz), a
generator that shares no line-shape, macromolecule, baseline or water code with the fit; its
macromolecules are Lorentzian multiplets with a short T2 (25 ms at 7 T, its own choice). The
truth is the relaxation-weighted ratio to tCr that the generator put in.

What is checked: with broad basis macromolecule lines fixed in ppm (0.10-0.16 ppm, 30-48 Hz
at 7 T) the basis lines were broader than the signal, the fit could not narrow them, and
glutamate under them was lost (Glu/tCr median |error| 55 % and Glx 26 % on these eight scans,
tCho 14 %). The narrower lines of today (0.06-0.1 ppm) with their 3 T widths in Hz kept above
3 T were too narrow at 7 T, and NAA took part of the macromolecule signal near 2.0 ppm
(tNAA/tCr median |error| 13.4 %, signed +13.4 %; tCho 6.2 %, Glu 5.8 %, Glx 5.6 %). With
those widths fixed in ppm at every field (methods §3, since 2026-12-03) they are 4.8 %
(signed +4.2 %), 3.3 %, 7.7 % and 6.4 %.

Also checked: the generator's line width counts a line split into resolved sub-voxel
components whole (against the analytic width of two Lorentzians).
"""

from __future__ import annotations

import numpy as np
import pytest
from _validation import ratio_errors, run_scans, validation_module

SCANS = tuple(f"7t-te30-{i:03d}" for i in range(1, 9))


@pytest.fixture(scope="module")
def run_7t(tmp_path_factory: pytest.TempPathFactory) -> tuple[list[dict], dict]:
    truths, run = run_scans(tmp_path_factory, "validation-7t", SCANS)
    assert all(t["spec"]["field_t"] == 7.0 for t in truths)
    return truths, run


def _median_abs_error(run_7t, measure: str) -> float:
    return float(np.median(np.abs(ratio_errors(run_7t, measure)["rel_pct"])))


def test_generator_width_of_a_split_line() -> None:
    # Outside reference: the absorption of two Lorentzians of FWHM w at ±d/2 is
    # Σ (w/2)² / ((w/2)² + (ν ∓ d/2)²), evaluated on a fine frequency grid (analytic, no FFT);
    # its full width at half maximum spans both lines. The generator's width (which its line
    # shapes are scaled to) must be that width, not the width of one of the lines (7t-te30-012
    # of the corpus was drawn as 11 Hz but its NAA line was 42 Hz wide at half height).
    gen = validation_module("generate")
    w_hz, d_hz, dwell_s = 6.0, 30.0, 2.5e-4
    t = np.arange(32768) * dwell_s / 8
    fid = np.exp(-np.pi * w_hz * t) * np.cos(np.pi * d_hz * t)  # the two lines, weights 1/2
    nu = np.linspace(-60.0, 60.0, 240001)
    absorption = sum((w_hz / 2) ** 2 / ((w_hz / 2) ** 2 + (nu - c) ** 2)
                     for c in (-d_hz / 2, d_hz / 2))
    above = nu[absorption > absorption.max() / 2]
    assert gen._fwhm_hz(fid, dwell_s / 8) == pytest.approx(above[-1] - above[0], abs=0.1)
    # and a single Lorentzian line: its FWHM 1/(π T2) plus the Lorentzian scale (widths add),
    # within the generator's frequency grid (65,536 points at dwell/8: 0.49 Hz here; the
    # crossings are taken at grid points outside the line, so up to one step too wide)
    shape = {"weights": [1.0], "offsets": [0.0], "lorentz_fraction": 1.0, "spread": 0.0}
    scale = gen._solve_scale(shape, 10.0, 0.13, dwell_s)
    step_hz = 8 / (65536 * dwell_s)
    assert 10.0 - step_hz <= scale + 1 / (np.pi * 0.13) <= 10.0


@pytest.mark.slow
def test_7t_glutamate_survives_the_macromolecules(run_7t) -> None:
    # limits: about twice the errors of today's basis, a third or less of those of the broad
    # ppm widths before 2026-12-02
    assert _median_abs_error(run_7t, "Glu") < 20.0
    assert _median_abs_error(run_7t, "Glx") < 12.0


@pytest.mark.slow
def test_7t_naa_and_choline_meet_the_target(run_7t) -> None:
    # issue 10 target for 1.5 T, 7 T and TE 144: tNAA/tCr and tCho/tCr median |error| <= 6 %;
    # with the 3 T widths in Hz kept at 7 T they were 13.4 % and 6.2 % on these scans
    assert _median_abs_error(run_7t, "tNAA") < 6.0
    assert _median_abs_error(run_7t, "tCho") < 6.0
