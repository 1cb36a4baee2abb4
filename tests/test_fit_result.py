"""FitResult renderings (text, dict/JSON, TSV, figure), flags and bad inputs of fit_spectrum.

Sources: the zero-bound flag follows from the constraint c ≥ 0 (a signal with a negative
amplitude in the data must end at c = 0: the projection onto the non-negative orthant);
var(tCr) = var(Cr) + var(PCr) + 2 cov (Cavassila et al., NMR Biomed 2001;14:278-283);
PNG signature (PNG specification, ISO/IEC 15948).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from specproc.basis import BasisSet
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.fit import fit_spectrum, result_to_dict, results_table, settings_from_config
from specproc.report import palette
from specproc.report.figures import figure_png_bytes
from specproc.report.fit_figure import plot_fit, shown_members

MHZ = 123.2
CENTRE = 4.65
N = 512
DWELL = 1.0 / 1200.0


def _line(t, ppm, mhz=MHZ):
    return np.exp(-2j * np.pi * (ppm - CENTRE) * mhz * t)


def _basis(mhz=MHZ):
    t = np.arange(N) * DWELL
    fids = np.stack([
        3 * _line(t, 2.008, mhz),
        3 * _line(t, 3.027, mhz) + 2 * _line(t, 3.913, mhz),
        3 * _line(t, 3.029, mhz) + 2 * _line(t, 3.930, mhz),
        3 * _line(t, 1.31, mhz),
    ])
    return BasisSet(names=("NAA", "Cr", "PCr", "Lac"), fids=fids, dwell_s=DWELL,
                    spectrometer_mhz=mhz, centre_ppm=CENTRE, protons=(3, 5, 5, 3))


def _scan(basis, conc, noise=0.3, seed=0):
    t = basis.time_s()
    fid = (np.asarray(conc) @ basis.fids) * np.exp(-(np.pi * 4.0) * t - 80 * t * t)
    rng = np.random.default_rng(seed)
    fid = fid + noise * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    return Scan(fid, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE, source="scan.nii")


@pytest.fixture(scope="module")
def result():
    basis = _basis()
    return fit_spectrum(_scan(basis, [10.0, 4.0, 3.0, 1.0]), basis,
                        config={"range_ppm": [0.5, 4.2]})


def test_table_has_members_and_combined_sums(result, tmp_path):
    rows = results_table(result)
    names = [r["metabolite"] for r in rows]
    assert names == ["NAA", "Cr", "PCr", "Lac", "tNAA", "tCr"]
    tcr = rows[names.index("tCr")]
    cov = result.covariance
    assert tcr["amplitude"] == pytest.approx(result.amplitudes[1] + result.amplitudes[2])
    assert tcr["crlb_sd"] == pytest.approx(np.sqrt(cov[1, 1] + cov[2, 2] + 2 * cov[1, 2]))
    assert tcr["ratio_tcr"] == pytest.approx(1.0)
    assert tcr["flag"] == ""


def test_dict_is_json_and_holds_every_field(result):
    d = result_to_dict(result)
    text = json.dumps(d, allow_nan=False)
    back = json.loads(text)
    for name in ("amplitudes", "crlb_sd", "crlb_percent", "covariance", "correlation",
                 "nonlinear", "residual", "chi_square", "dof", "noise_sd", "fit_range_ppm",
                 "success", "message", "flags", "names", "combined", "data", "fit", "baseline",
                 "contributions", "parameter_covariance", "settings"):
        assert name in back, name
    assert len(back["parameter_names"]) == len(back["parameter_values"])
    np.testing.assert_allclose(np.diag(np.asarray(back["correlation"], dtype=float)), 1.0)
    assert "NAA" in result.to_text()


def test_figure_layout_colours_and_png(result):
    fig = plot_fit(result, title="synthetic $x$")
    _spectrum, residual, members = fig.get_axes()
    left, right = members.get_xlim()
    assert left > right  # ppm decreases to the right
    # the residual has its own panel, nothing else is drawn there but the zero line
    assert len(residual.get_lines()) == 2
    shown, hidden = shown_members(result)
    assert sorted(shown + hidden) == list(range(len(result.names)))
    # one line per drawn member in its fixed colour, plus the scale bar
    colours = [line.get_color() for line in members.get_lines()]
    assert colours[:len(shown)] == [palette.member_colour(result.names[i]) for i in shown]
    assert len(colours) == len(shown) + 1
    assert figure_png_bytes(fig)[:8] == b"\x89PNG\r\n\x1a\n"


def test_member_colour_is_fixed_per_name():
    assert palette.member_colour("NAA") == palette.member_colour("naa")
    assert palette.member_colour("Xyz") == palette.member_colour("Xyz")
    assert palette.member_colour("NAA") != palette.member_colour("Cr")


def test_negative_signal_component_is_flagged_at_zero_bound():
    basis = _basis()
    res = fit_spectrum(_scan(basis, [10.0, 4.0, 3.0, -2.0]), basis,
                       config={"range_ppm": [0.5, 4.2]})
    i = res.names.index("Lac")
    assert res.amplitudes[i] == 0.0
    assert res.at_zero_bound[i]
    assert "at_zero_bound:Lac" in res.flags
    assert np.isnan(res.crlb_percent[i])
    assert np.isfinite(res.crlb_sd[i])


def test_basis_of_another_field_is_rejected():
    basis7 = _basis(mhz=297.2)
    with pytest.raises(InvalidInputError, match=r"scan\.nii: the basis was made for 297"):
        fit_spectrum(_scan(_basis(), [10, 4, 3, 1]), basis7)


def test_fit_range_outside_spectrum_is_rejected():
    basis = _basis()
    with pytest.raises(InvalidInputError, match="outside the spectrum"):
        fit_spectrum(_scan(basis, [10, 4, 3, 1]), basis, config={"range_ppm": [0.2, 30.0]})


def test_empty_member_list_is_rejected():
    basis = _basis()
    water_only = BasisSet(names=("H2O",), fids=basis.fids[:1], dwell_s=DWELL,
                          spectrometer_mhz=MHZ, kinds=("water",))
    with pytest.raises(InvalidInputError, match="empty"):
        fit_spectrum(_scan(basis, [10, 4, 3, 1]), water_only)
    with pytest.raises(InvalidInputError, match="no basis member 'GABA'"):
        fit_spectrum(_scan(basis, [10, 4, 3, 1]), basis, config={"members": ["GABA"]})


def test_multi_transient_scan_is_rejected():
    basis = _basis()
    scan = _scan(basis, [10, 4, 3, 1])
    raw = Scan(np.stack([scan.data, scan.data]), dwell_s=DWELL, spectrometer_mhz=MHZ,
               dims=("DIM_DYN",))
    with pytest.raises(InvalidInputError, match="one averaged FID"):
        fit_spectrum(raw, basis)


@pytest.mark.parametrize("bad", [
    {"unknown_key": 1},
    {"fixed": ["phase7"]},
    {"baseline_knot_ppm": 0.0},
    {"damping_groups": [{"name": "x y", "members": ["*"]}]},
])
def test_bad_settings_are_rejected(bad):
    with pytest.raises(InvalidInputError):
        settings_from_config(bad)


def test_defaults_table_matches_the_settings_defaults():
    from specproc.config import load_config
    from specproc.fit import FitSettings

    assert settings_from_config(load_config()) == FitSettings()
