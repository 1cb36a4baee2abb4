"""A measured macromolecule spectrum as a basis member (specproc.mmspectrum, specproc.protocol).

Sources of the checks:

* Resampling is compared with the analytic FIDs of Lorentzian lines (``exp((-2πi ν - π w) t)``,
  the textbook FID of a Lorentzian of FWHM w; de Graaf, In Vivo NMR Spectroscopy, 3rd ed.
  2019, ch. 1, from memory) and of a Gaussian line (``exp(-2πi ν t - (π w t)² / (4 ln 2))``),
  evaluated by numpy on the target grid, in the NIfTI-MRS sign convention (Clarke et al., Magn
  Reson Med 2022;88:2358-2370).
* The recovery test builds a scan as basis + known MM spectrum with the fit's own data model
  (:func:`specproc.synthetic.synthetic_scan`), so it checks the plumbing (option -> protocol ->
  basis -> fit -> outputs), not the fit's accuracy on foreign data; that is measured on the
  validation corpus (benchmarks/validation/score.py --mm-spectra).
* Bad files: the error contract of DESIGN.md (one line ``specproc: error: ...`` naming the file,
  exit status 2, no partial output).
* The idea of one measured MM member in place of parametrised components: Cudalbu et al., NMR
  Biomed 2021;34:e4393 (experts' consensus).
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import BasisSet
from specproc.cli import main
from specproc.config import merge_config
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io import save
from specproc.mmspectrum import (
    TE_TOLERANCE_S,
    load_mm_spectrum,
    resample_mm_fid,
    with_measured_mm,
)
from specproc.protocol import MM_MEMBER, resolve_protocol

MHZ = 123.2
CENTRE = 4.65
N = 1024
DWELL = 1 / 2000
#: Lorentzian MM-like lines: shift ppm, weight, FWHM Hz (invented for the tests).
LINES = ((0.91, 3.0, 30.0), (1.21, 2.0, 30.0), (1.39, 1.5, 28.0), (1.67, 1.2, 30.0),
         (2.01, 2.5, 35.0), (2.26, 1.3, 30.0), (2.99, 1.2, 28.0), (3.21, 0.8, 30.0),
         (3.79, 1.5, 38.0))
MEMBERS = ["NAA", "Cr", "PCr", "GPC", "mI", "Glu"]


def lorentz_fid(t, *, mhz=MHZ, centre=CENTRE, width_scale=1.0, lines=LINES):
    out = np.zeros(t.size, complex)
    for shift, weight, fwhm in lines:
        out += weight * np.exp(-2j * np.pi * (shift - centre) * mhz * t
                               - np.pi * fwhm * width_scale * t)
    return out


def mm_scan(*, te_s=0.030, mhz=MHZ, nucleus="1H", n=N, dims=(), noise=1e-3, seed=1):
    t = np.arange(n) * DWELL
    rng = np.random.default_rng(seed)
    fid = lorentz_fid(t, mhz=mhz)
    data = fid + noise * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    if dims:
        data = np.stack([data] * 4)
    return Scan(data, dwell_s=DWELL, spectrometer_mhz=mhz, centre_ppm=CENTRE, te_s=te_s,
                sequence="press", nucleus=nucleus, dims=dims)


def plain_scan(**kw):
    args = {"data": np.ones(N, complex), "dwell_s": DWELL, "spectrometer_mhz": MHZ,
            "centre_ppm": CENTRE, "te_s": 0.030, "sequence": "press", **kw}
    return Scan(**args)


# ------------------------------------------------------------------ resampling, analytic
def test_resample_same_dwell_is_exact_with_new_centre_and_length():
    """Same dwell: samples kept, zeros after the input's end, the centre moved exactly."""
    t_in = np.arange(512) * DWELL
    out = resample_mm_fid(lorentz_fid(t_in), dwell_s=DWELL, spectrometer_mhz=MHZ,
                          centre_ppm=CENTRE, to_dwell_s=DWELL, to_n_points=1024,
                          to_spectrometer_mhz=MHZ, to_centre_ppm=4.70)
    t_out = np.arange(1024) * DWELL
    expected = lorentz_fid(t_out, centre=4.70)
    np.testing.assert_allclose(out[:512], expected[:512], atol=1e-12)
    assert np.all(out[512:] == 0)


def test_resample_to_another_dwell_field_and_centre_matches_the_analytic_lorentzians():
    """Dwell 1/2000 -> 1/2500 s, 123.2 -> 123.25 MHz, centre 4.65 -> 4.70 ppm: each line stays
    at its ppm with its width in ppm (FWHM in Hz scaled by the frequency ratio)."""
    t_in = np.arange(2048) * DWELL
    to_mhz = 123.25
    out = resample_mm_fid(lorentz_fid(t_in), dwell_s=DWELL, spectrometer_mhz=MHZ,
                          centre_ppm=CENTRE, to_dwell_s=1 / 2500, to_n_points=1500,
                          to_spectrometer_mhz=to_mhz, to_centre_ppm=4.70)
    t_out = np.arange(1500) / 2500
    expected = lorentz_fid(t_out, mhz=to_mhz, centre=4.70, width_scale=to_mhz / MHZ)
    assert np.max(np.abs(out - expected)) < 1e-6 * np.max(np.abs(expected))


def test_resample_of_a_gaussian_line_is_close_and_beats_plain_interpolation():
    """A Gaussian line is no sum of exponentials: the HLSVD part and the interpolated
    remainder together stay within 1e-4 of its first point, where trigonometric interpolation
    alone rings by per cents near t = 0 (the periodic continuation jumps there)."""
    def gauss(t):
        return np.exp(-2j * np.pi * (1.5 - CENTRE) * MHZ * t
                      - (np.pi * 20.0 * t) ** 2 / (4 * np.log(2)))

    t_in = np.arange(2048) * DWELL
    t_out = np.arange(1500) / 2500
    out = resample_mm_fid(gauss(t_in), dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE,
                          to_dwell_s=1 / 2500, to_n_points=1500, to_spectrometer_mhz=MHZ,
                          to_centre_ppm=CENTRE)
    assert np.max(np.abs(out - gauss(t_out))) < 1e-4
    plain = BasisSet(names=("g",), fids=gauss(t_in)[None], dwell_s=DWELL,
                     spectrometer_mhz=MHZ).resample(dwell_s=1 / 2500, n_points=1500)
    assert np.max(np.abs(plain.fids[0] - gauss(t_out))) > 1e-2


# ------------------------------------------------------------------ the basis member
def _mm_basis():
    t = np.arange(N) * DWELL
    names = ("NAA", "MM0.94", "MM2.05", "FatCH2")
    fids = np.stack([np.exp(-2j * np.pi * (s - CENTRE) * MHZ * t) for s in (2.01, 0.94, 2.05,
                                                                             1.3)])
    return BasisSet(names=names, fids=fids, dwell_s=DWELL, spectrometer_mhz=MHZ,
                    centre_ppm=CENTRE, kinds=("metabolite",) + ("macromolecule",) * 3,
                    sequence="press", timings_s={"te_s": 0.03}, metadata={"cache_key": "x"})


def test_measured_member_replaces_the_components_and_keeps_lipids_when_asked(tmp_path):
    save(mm_scan(), tmp_path / "mm.nii.gz")
    mm = load_mm_spectrum(tmp_path / "mm.nii.gz")
    basis = with_measured_mm(_mm_basis(), mm)
    assert basis.names == ("NAA", MM_MEMBER)
    assert basis.kinds == ("metabolite", "macromolecule")
    assert basis.fids[1, 0] == pytest.approx(1.0)  # unit area, zero phase
    assert basis.metadata["mm_model"]["sha256"] == mm.sha256
    assert basis.metadata["cache_key"] != "x"
    kept = with_measured_mm(_mm_basis(), mm, keep_lipids=True)
    assert kept.names == ("NAA", "FatCH2", MM_MEMBER)


# ------------------------------------------------------------------ precedence and keys
def test_mm_spectrum_precedence_option_manifest_config(tmp_path):
    for name, seed in (("a", 1), ("b", 2), ("c", 3)):
        save(mm_scan(seed=seed), tmp_path / f"{name}.nii.gz")
    a, b, c = (str(tmp_path / f"{n}.nii.gz") for n in "abc")
    cfg = merge_config({"protocol": {"mm_spectrum": c, "mm_keep_lipids": True}})
    scan = plain_scan()
    p = resolve_protocol(scan, option={"mm_spectrum": a}, manifest={"mm_spectrum": b},
                         config=cfg)
    assert p.mm_model()["file"] == "a.nii.gz"
    assert p.mm_sources == {"mm_spectrum": "option", "mm_keep_lipids": "config"}
    assert p.mm_keep_lipids is True
    p = resolve_protocol(scan, manifest={"mm_spectrum": b}, config=cfg)
    assert (p.mm_model()["file"], p.mm_sources["mm_spectrum"]) == ("b.nii.gz", "manifest")
    p = resolve_protocol(scan, config=cfg)
    assert (p.mm_model()["file"], p.mm_sources["mm_spectrum"]) == ("c.nii.gz", "config")
    p = resolve_protocol(scan, option={"mm_spectrum": "none", "mm_keep_lipids": False},
                         config=cfg)
    assert p.mm_model() == {"model": "parametrised"}
    # a protocol without macromolecules (chosen, or a phantom) uses no MM spectrum at all
    none = resolve_protocol(scan, config=cfg, macromolecules=False)
    assert none.mm_model() == {"model": "none", "unused_file": "c.nii.gz"}
    assert none.key() == resolve_protocol(scan, macromolecules=False).key()
    phantom = resolve_protocol(scan, config=cfg, phantom=True)
    assert phantom.mm_model() == {"model": "none", "unused_file": "c.nii.gz"}
    # tissue at TE 144 has macromolecules too (the rule): a TE 30 spectrum is refused
    with pytest.raises(InvalidInputError, match="TE 30 ms, the scan at TE 144 ms"):
        resolve_protocol(plain_scan(te_s=0.144), config=cfg)


def test_protocol_key_follows_the_file_content_not_its_name(tmp_path):
    save(mm_scan(seed=1), tmp_path / "a.nii.gz")
    save(mm_scan(seed=1), tmp_path / "same.nii.gz")
    save(mm_scan(seed=2), tmp_path / "other.nii.gz")
    scan = plain_scan()

    def key(name):
        return resolve_protocol(scan, option={"mm_spectrum": str(tmp_path / name)}).key()

    parametrised = resolve_protocol(scan).key()
    assert key("a.nii.gz") == key("same.nii.gz")
    assert len({parametrised, key("a.nii.gz"), key("other.nii.gz")}) == 3
    lipids = resolve_protocol(scan, option={"mm_spectrum": str(tmp_path / "a.nii.gz"),
                                            "mm_keep_lipids": True}).key()
    assert lipids != key("a.nii.gz")


def test_checks_name_the_file(tmp_path):
    save(mm_scan(te_s=0.030 + TE_TOLERANCE_S * 0.9), tmp_path / "near.nii.gz")
    resolve_protocol(plain_scan(), option={"mm_spectrum": str(tmp_path / "near.nii.gz")})
    save(mm_scan(te_s=0.040), tmp_path / "far.nii.gz")
    with pytest.raises(InvalidInputError, match=r"far\.nii\.gz.*TE 40 ms, the scan at TE 30"):
        resolve_protocol(plain_scan(), option={"mm_spectrum": str(tmp_path / "far.nii.gz")})


# ------------------------------------------------------------------ command line
@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """An MM spectrum, bad MM files, and a scan made of a small basis + the MM spectrum."""
    root = tmp_path_factory.mktemp("mmspec")
    save(mm_scan(), root / "mm.nii.gz")
    save(mm_scan(te_s=0.144), root / "mm_te144.nii.gz")
    save(mm_scan(mhz=297.2), root / "mm_7t.nii.gz")
    save(mm_scan(te_s=None), root / "mm_note.nii.gz")
    save(mm_scan(dims=("DIM_DYN",)), root / "mm_dyn.nii.gz")
    (root / "mm_text.nii.gz").write_text("not a spectrum\n")
    cfg = merge_config({"fit": {"members": [*MEMBERS, MM_MEMBER]}})
    (root / "cfg.toml").write_text(
        "[fit]\nmembers = [" + ", ".join(f'"{m}"' for m in [*MEMBERS, MM_MEMBER]) + "]\n")
    return root, cfg


@pytest.fixture(scope="module")
def scan_file(files, tmp_path_factory):
    from specproc.synthetic import synthetic_scan

    root, cfg = files
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SPECPROC_CACHE_DIR", str(root / "cache"))
        protocol = resolve_protocol(plain_scan(), config=cfg,
                                    option={"mm_spectrum": str(root / "mm.nii.gz")})
        basis = protocol.simulate()
    truth = {"NAA": 10.0, "Cr": 4.0, "PCr": 4.0, "GPC": 1.0, "mI": 6.0, "Glu": 10.0,
             MM_MEMBER: 30.0}
    scan = synthetic_scan(basis, truth, lw_hz=4.0, noise_sd=0.05, n_transients=8,
                          rng=np.random.default_rng(5))
    save(scan, root / "scan.nii.gz")
    return root / "scan.nii.gz", truth


def test_fit_with_a_measured_spectrum_recovers_amplitudes_and_records_the_model(
        files, scan_file, tmp_path, monkeypatch):
    root, _ = files
    monkeypatch.setenv("SPECPROC_CACHE_DIR", str(root / "cache"))
    scan, truth = scan_file
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["fit", str(scan), "--config", str(root / "cfg.toml"),
                                       "--mm-spectrum", str(root / "mm.nii.gz"), "-o", str(out)])
    assert result.exit_code == 0, result.output
    assert "macromolecules: measured spectrum mm.nii.gz" in result.output
    with open(out / "results.tsv") as fh:
        rows = {r["metabolite"]: r for r in csv.DictReader(fh, delimiter="\t")}
    for name, value in truth.items():  # the data model is the fit's: amplitudes within 5 %
        assert float(rows[name]["amplitude"]) == pytest.approx(value, rel=0.05), name
    doc = json.loads((out / "fit.json").read_text())
    digest = load_mm_spectrum(root / "mm.nii.gz").sha256
    assert doc["basis"]["mm_model"]["model"] == "measured"
    assert doc["basis"]["mm_model"]["sha256"] == digest
    assert doc["protocol"]["mm_model"]["sources"]["mm_spectrum"] == "option"
    assert str(root) not in json.dumps(doc["protocol"])  # no absolute path in fit.json
    report = (out / "report.html").read_text()
    assert "macromolecule model" in report and f"sha256 {digest[:12]}" in report


@pytest.mark.parametrize(("name", "message"), [
    ("missing.nii.gz", "does not exist"),
    ("mm_te144.nii.gz", "TE 144 ms, the scan at TE 30 ms"),
    ("mm_7t.nii.gz", "297.20 MHz, the scan at 123.20 MHz"),
    ("mm_note.nii.gz", "does not give its echo time"),
    ("mm_dyn.nii.gz", "holds 4 FIDs"),
    ("mm_text.nii.gz", "macromolecule spectrum: "),
])
def test_bad_mm_files_give_one_line_and_exit_2(files, scan_file, tmp_path, name, message):
    root, _ = files
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["fit", str(scan_file[0]), "--mm-spectrum",
                                       str(root / name), "-o", str(out)])
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("specproc: error: "), result.output
    assert name in lines[0] and message in lines[0], lines[0]
    assert not out.exists()


def test_a_spectrum_given_for_a_protocol_without_macromolecules_is_said_unused(
        files, scan_file, tmp_path, monkeypatch):
    root, _ = files
    monkeypatch.setenv("SPECPROC_CACHE_DIR", str(root / "cache"))
    out = tmp_path / "out"
    config = tmp_path / "metabolites.toml"
    config.write_text("[fit]\nmembers = [" + ", ".join(f'"{m}"' for m in MEMBERS) + "]\n")
    result = CliRunner().invoke(main, ["fit", str(scan_file[0]), "--config",
                                       str(config), "--no-macromolecules",
                                       "--mm-spectrum", str(root / "mm.nii.gz"), "-o", str(out)])
    assert result.exit_code == 0, result.output
    assert "macromolecule spectrum mm.nii.gz was given but not used" in result.output
    doc = json.loads((out / "fit.json").read_text())
    assert doc["basis"]["mm_model"] == {"model": "none", "unused_file": "mm.nii.gz"}


def test_batch_manifest_column_and_cohort_record(files, scan_file, tmp_path, monkeypatch):
    root, _ = files
    monkeypatch.setenv("SPECPROC_CACHE_DIR", str(root / "cache"))
    manifest = tmp_path / "manifest.tsv"
    manifest.write_text(f"scan\tmm_spectrum\n{scan_file[0]}\t{root / 'mm.nii.gz'}\n")
    out = tmp_path / "run"
    result = CliRunner().invoke(main, ["batch", str(manifest), "-o", str(out), "--workers", "1",
                                       "--config", str(root / "cfg.toml"), "--tables-only",
                                       "--no-progress"])
    assert result.exit_code == 0, result.output
    with open(out / "cohort_qc.tsv") as fh:
        (row,) = list(csv.DictReader(fh, delimiter="\t"))
    digest = load_mm_spectrum(root / "mm.nii.gz").sha256
    assert row["status"] != "failed", row["reason"]
    assert row["mm_model"] == f"measured:mm.nii.gz:{digest[:12]}"
    manifest.write_text(f"scan\tmm_spectrum\n{scan_file[0]}\tnowhere.nii.gz\n")
    result = CliRunner().invoke(main, ["batch", str(manifest), "-o", str(tmp_path / "r2")])
    assert result.exit_code == 2
    assert "mm_spectrum file 'nowhere.nii.gz' does not exist" in result.output


def test_generator_mm_spectrum_passes_the_validator_and_fits_its_scans(tmp_path):
    """The validation generator's "measured" MM spectrum (its own NIfTI-MRS writer) passes the
    standard's validator and is accepted for a scan of its field and TE."""
    from _validation import validation_module
    from test_nifti_mrs_validator import validate

    gen = validation_module("generate")
    specs = [s for s in gen.plan_corpus(preset="ci")][:2]
    (record,) = gen.write_measured_mm(tmp_path, specs)
    path = tmp_path / "mm" / record["file"]
    assert record["file"] == "mm_3T_TE30.nii.gz"
    validate(path)
    p = resolve_protocol(plain_scan(spectrometer_mhz=record["spectrometer_mhz"]),
                         option={"mm_spectrum": str(path)})
    assert p.mm_model()["model"] == "measured"


def test_batch_refuses_an_unreadable_configured_mm_spectrum_before_any_work(files, scan_file,
                                                                            tmp_path):
    root, _ = files
    manifest = tmp_path / "manifest.tsv"
    manifest.write_text(f"scan\n{scan_file[0]}\n")
    config = tmp_path / "mm.toml"
    config.write_text(f'[protocol]\nmm_spectrum = "{root / "mm_text.nii.gz"}"\n')
    out = tmp_path / "run"
    result = CliRunner().invoke(main, ["batch", str(manifest), "-o", str(out), "--config",
                                       str(config), "--no-progress"])
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and "mm_text.nii.gz" in lines[0], result.output
    assert not (out / "scans").exists()
