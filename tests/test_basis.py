"""BasisSet: simulation, save/load, resampling, subsets, the cache and basis_for_scan."""

from __future__ import annotations

import zipfile

import numpy as np
import pytest

import specproc.basis as basis_mod
from specproc.basis import BasisSet, basis_for_scan, cache_dir, simulate_basis
from specproc.constants import larmor_mhz
from specproc.data import Scan
from specproc.errors import InvalidInputError

SMALL = {"metabolites": ["NAA", "Cr", "Lac"], "dwell_s": 1 / 2000, "n_points": 512}


@pytest.fixture(autouse=True)
def _private_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("SPECPROC_CACHE_DIR", str(tmp_path / "cache"))


def _press(**kw):
    args = {"sequence": "press", "field_t": 3.0, "te_s": 0.030, **SMALL, **kw}
    return simulate_basis(**args)


def test_simulated_set_fields_and_normalisation():
    b = _press(macromolecules=True)
    assert b.names[:3] == ("NAA", "Cr", "Lac")
    assert "MM0.94" in b.names
    assert b.kinds[b.index("MM0.94")] == "macromolecule"
    assert b.protons[b.index("Cr")] == 5.0
    assert b.spectrometer_mhz == pytest.approx(larmor_mhz(3.0))  # CODATA γ via scipy.constants
    assert b.timings_s == {"te_s": 0.030, "te1_s": 0.015, "te2_s": 0.015}
    assert b.sequence == "press"
    assert len(b.definitions_hash) == 64
    # creatine: two singlets, so its FID at t = 0 is its proton count (issue 3 normalisation)
    assert b.fids[b.index("Cr"), 0] == pytest.approx(5.0, abs=1e-10)
    assert not b.fids.flags.writeable


def test_save_load_round_trip_is_exact(tmp_path):
    b = _press(macromolecules=True)
    path = tmp_path / "set.npz"
    b.save(path)
    c = BasisSet.load(path)
    assert np.array_equal(c.fids, b.fids)
    for field in ("names", "dwell_s", "spectrometer_mhz", "centre_ppm", "protons", "kinds",
                  "sequence", "timings_s", "definitions_hash", "version", "metadata"):
        assert getattr(c, field) == getattr(b, field), field
    for x, y in zip(c.lines, b.lines, strict=True):
        assert np.array_equal(x.freq_hz, y.freq_hz) and np.array_equal(x.amp, y.amp)
        assert np.array_equal(x.gauss_fwhm_hz, y.gauss_fwhm_hz)
    # self-describing: plain arrays readable without pickle
    with np.load(path, allow_pickle=False) as archive:
        assert "metadata" in archive.files
    # a set without line lists (e.g. built from someone's FIDs) round-trips too
    plain = BasisSet(names=("x", "y"), fids=b.fids[:2], dwell_s=b.dwell_s,
                     spectrometer_mhz=b.spectrometer_mhz, metadata={"note": "plain"})
    plain.save(tmp_path / "plain.npz")
    back = BasisSet.load(tmp_path / "plain.npz")
    assert back.lines is None and np.array_equal(back.fids, plain.fids)
    assert back.metadata == {"note": "plain"}


def test_load_rejects_bad_files(tmp_path):
    missing = tmp_path / "none.npz"
    with pytest.raises(InvalidInputError, match="cannot read"):
        BasisSet.load(missing)
    junk = tmp_path / "junk.npz"
    junk.write_bytes(b"not a zip at all")
    with pytest.raises(InvalidInputError, match="not a specproc basis file"):
        BasisSet.load(junk)
    other = tmp_path / "other.npz"
    np.savez(other, fids=np.zeros((1, 4), complex))
    with pytest.raises(InvalidInputError, match="missing"):
        BasisSet.load(other)
    # truncated archive
    good = tmp_path / "good.npz"
    _press().save(good)
    cut = tmp_path / "cut.npz"
    cut.write_bytes(good.read_bytes()[:200])
    with pytest.raises(InvalidInputError, match=str(cut.name)):
        BasisSet.load(cut)
    assert zipfile.is_zipfile(good)


def test_resample_with_line_lists_is_exact_resynthesis():
    b = _press(macromolecules=True)
    r = b.resample(dwell_s=1 / 3000, n_points=700, centre_ppm=4.70)
    direct = _press(macromolecules=True, dwell_s=1 / 3000, n_points=700, centre_ppm=4.70)
    np.testing.assert_allclose(r.fids, direct.fids, atol=1e-9)
    assert r.centre_ppm == 4.70 and r.n_points == 700
    # analytic singlet (NIfTI-MRS form): the NAA methyl + Cr singlets
    t = r.time_s()
    cr = 3 * np.exp(-2j * np.pi * (3.027 - 4.70) * r.spectrometer_mhz * t) + 2 * np.exp(
        -2j * np.pi * (3.913 - 4.70) * r.spectrometer_mhz * t
    )
    np.testing.assert_allclose(r.fids[r.index("Cr")], cr, atol=1e-9)


def _lineless(fids, dwell_s, centre=4.65):
    return BasisSet(names=("a",), fids=fids[None, :], dwell_s=dwell_s, spectrometer_mhz=123.2,
                    centre_ppm=centre)


def test_resample_without_lines_trigonometric_interpolation():
    # Shannon/Whittaker: trigonometric interpolation is exact for a signal whose lines lie on
    # the DFT grid (periodic within the acquisition), at any new sampling time
    dwell, n = 1 / 2000, 256
    t = np.arange(n) * dwell
    grid = np.fft.fftfreq(n, dwell)
    freqs = grid[[3, 40, -17]]
    sig = lambda tt: sum(  # noqa: E731
        a * np.exp(-2j * np.pi * f * tt) for a, f in zip((1, 0.5j, 2), freqs, strict=True)
    )
    b = _lineless(sig(t), dwell)
    r = b.resample(dwell_s=dwell * 0.6, n_points=400, centre_ppm=4.65)
    t2 = r.time_s()
    np.testing.assert_allclose(r.fids[0], sig(t2), atol=1e-10)
    # decimation by 2 reproduces the samples exactly for any signal
    noise = np.random.default_rng(1).normal(size=n) + 1j
    d = _lineless(noise, dwell).resample(dwell_s=2 * dwell, n_points=n // 2)
    np.testing.assert_allclose(d.fids[0], noise[::2], atol=1e-10)
    # moving the centre multiplies by exp(2πi Δcentre · MHz · t) (NIfTI-MRS convention)
    m = b.resample(dwell_s=dwell, n_points=n, centre_ppm=4.75)
    np.testing.assert_allclose(
        m.fids[0], sig(t) * np.exp(2j * np.pi * 0.10 * 123.2 * t), atol=1e-10
    )
    # beyond the original acquisition the signal is unknown: zeros
    long = b.resample(dwell_s=dwell, n_points=2 * n)
    assert np.all(long.fids[0, n:] == 0)


def test_subset_keeps_order_and_lines():
    b = _press()
    s = b.subset(["lac", "NAA"])
    assert s.names == ("Lac", "NAA")
    np.testing.assert_array_equal(s.fids[0], b.fids[b.index("Lac")])
    assert s.lines[0] is b.lines[b.index("Lac")]
    with pytest.raises(InvalidInputError, match="no basis member"):
        b.subset(["GABA"])
    with pytest.raises(InvalidInputError, match="twice"):
        b.subset(["NAA", "naa"])


def test_cache_hit_returns_identical_data_without_simulating(monkeypatch):
    first = _press()
    assert any(cache_dir().glob("*.npz"))

    def fail(*args, **kwargs):
        raise AssertionError("simulated again despite a cache entry")

    monkeypatch.setattr(basis_mod, "simulate_metabolite", fail)
    second = _press()
    assert np.array_equal(second.fids, first.fids)
    assert second.names == first.names
    # any change of input is a different key, so it must simulate (and hits our stub)
    with pytest.raises(AssertionError, match="simulated again"):
        _press(te_s=0.035)
    with pytest.raises(AssertionError, match="simulated again"):
        _press(cache=False)


def test_damaged_cache_entry_is_simulated_again():
    first = _press()
    (entry,) = cache_dir().glob("*.npz")
    entry.write_bytes(b"garbage")
    second = _press()
    assert np.array_equal(second.fids, first.fids)
    assert BasisSet.load(entry).names == first.names


@pytest.mark.parametrize(
    ("kw", "message"),
    [
        ({"te_s": -0.01}, "non-negative"),
        ({"metabolites": ["NAA", "nonsense"]}, "unknown metabolite"),
        ({"te1_s": 0.040}, "shorter than TE"),
        ({"sequence": "laser-press"}, "unknown sequence"),
        ({"field_t": 0}, "field strength must be positive"),
        ({"dwell_s": -1.0}, "dwell time must be positive"),
        ({"n_points": 0}, "positive integer"),
        ({"metabolites": []}, "no metabolites"),
    ],
)
def test_bad_arguments(kw, message):
    with pytest.raises(InvalidInputError, match=message):
        _press(**kw)


def _scan(**kw):
    args = {"data": np.zeros(300, complex), "dwell_s": 1 / 2500, "spectrometer_mhz": 123.25,
            "te_s": 0.030, "sequence": "press", **kw}
    return Scan(**args)


def test_basis_for_scan_takes_the_protocol_from_the_scan():
    scan = _scan()
    b = basis_for_scan(scan, metabolites=["NAA"], macromolecules=False)
    # the protocol rounds the field to 0.1 mT so that scans of one scanner share a basis
    assert b.spectrometer_mhz == pytest.approx(123.25, rel=1e-4)
    assert b.dwell_s == scan.dwell_s and b.n_points == 300
    assert b.timings_s["te_s"] == 0.030 and b.centre_ppm == 4.65
    assert b.timings_s["te1_s"] == 0.015  # assumed TE/2 without other source
    direct = simulate_basis(sequence="press", field_t=round(scan.field_t, 4), te_s=0.030,
                            dwell_s=scan.dwell_s, n_points=300, metabolites=["NAA"])
    np.testing.assert_array_equal(b.fids, direct.fids)
    steam = basis_for_scan(_scan(sequence="steam", tm_s=0.010), metabolites=["Cr"])
    assert steam.timings_s["tm_s"] == 0.010
    # STEAM echo of a singlet: half of the spin echo (textbook, Hahn 1950)
    assert steam.fids[0, 0] == pytest.approx(2.5, abs=1e-10)


@pytest.mark.parametrize(
    ("scan_kw", "over", "message"),
    [
        ({"sequence": None}, {}, "which sequence"),
        ({"te_s": None}, {}, "echo time"),
        ({"sequence": "steam"}, {}, "mixing time"),
        ({"sequence": "mega-press"}, {}, "override"),
        ({}, {"bogus": 1}, "unknown basis option"),
    ],
)
def test_basis_for_scan_errors(scan_kw, over, message):
    with pytest.raises(InvalidInputError, match=message):
        basis_for_scan(_scan(**scan_kw), metabolites=["NAA"], **over)


def test_basis_for_scan_override_wins():
    b = basis_for_scan(_scan(sequence=None, te_s=None), sequence="spin-echo", te_s=0.02,
                       metabolites=["Cr"])
    assert b.sequence == "spin-echo" and b.timings_s["te_s"] == 0.02


@pytest.mark.parametrize(
    ("sequence", "kw"),
    [("pulse-acquire", {}), ("spin-echo", {"te_s": 0.03}), ("steam", {"te_s": 0.02,
                                                                        "tm_s": 0.01}),
     ("semi-laser", {"te_s": 0.03}), ("semi-laser", {"delays_s": [0.004, 0.01, 0.008, 0.01,
                                                                   0.008]})],
)
def test_every_sequence_simulates_every_metabolite(sequence, kw):
    b = simulate_basis(sequence=sequence, field_t=7.0, dwell_s=1 / 4000, n_points=64,
                       cache=False, **kw)
    assert len(b.names) >= 20
    assert np.all(np.isfinite(b.fids))
    # total signal bounded by the proton count (no gain from the sequence)
    assert np.all(np.abs(b.fids[:, 0]) <= np.array(b.protons) + 1e-9)


def test_progress_callback_and_comma_separated_names():
    seen = []
    b = simulate_basis(sequence="spin-echo", field_t=1.5, te_s=0.135, dwell_s=1 / 1000,
                       n_points=128, metabolites="Cr, NAA", macromolecules=True, cache=False,
                       progress=lambda done, total, name: seen.append((done, total, name)))
    assert b.names[:2] == ("Cr", "NAA")
    assert [s[2] for s in seen] == list(b.names)
    assert seen[-1][:2] == (len(b.names), len(b.names))


def _fwhm_hz_of(fid: np.ndarray, dwell_s: float, zero_fill: int = 16) -> float:
    """FWHM of the absorption of one line's FID, Hz (half the first point, zero filled)."""
    x = np.zeros(fid.size * zero_fill, dtype=complex)
    x[: fid.size] = fid
    x[0] *= 0.5
    spec = np.fft.fft(x).real
    above = np.flatnonzero(spec >= spec.max() / 2)
    # a line near 0 Hz wraps around the FFT axis: count the points above half height
    return above.size / (x.size * dwell_s)


@pytest.mark.parametrize("field_t", [1.5, 3.0, 7.0])
def test_macromolecule_widths_fixed_in_ppm_at_every_field(field_t):
    # Outside reference: the FWHM of a Gaussian line exp(-(π F t)² / (4 ln 2)) is F (analytic;
    # the spectrum from numpy's FFT) and f0 = γ/2π · B0 (CODATA through larmor_mhz). The basis
    # line of MM1.22 (0.072 ppm in macromolecules.toml) is that wide in ppm at 1.5, 3 and 7 T
    # (no width_field_t in the bundled file; methods §3).
    b = simulate_basis(sequence="press", field_t=field_t, te_s=0.030, metabolites=["Cr"],
                       macromolecules=True, dwell_s=1 / 4000, n_points=4096, centre_ppm=1.22,
                       cache=False)
    fwhm = _fwhm_hz_of(np.asarray(b.fids[b.index("MM1.22")]), b.dwell_s)
    expected = 0.072 * larmor_mhz(field_t)
    assert fwhm == pytest.approx(expected, abs=0.1)
