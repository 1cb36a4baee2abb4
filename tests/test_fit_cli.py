"""``specproc fit`` end to end: outputs, the automatic basis, and one-line errors (exit 2).

Sources: the expected outputs and error behaviour are those of issue 5 and DESIGN.md (one line
``specproc: error: ...``, exit status 2, no partial files); the synthetic data follow the
NIfTI-MRS sign convention (Clarke et al., Magn Reson Med 2022;88:2358-2370).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from specproc.basis import BasisSet
from specproc.cli import main
from specproc.data import Scan
from specproc.io import save

MHZ = 123.2
CENTRE = 4.65
N = 512
DWELL = 1.0 / 1200.0


def _line(t, ppm, mhz=MHZ):
    return np.exp(-2j * np.pi * (ppm - CENTRE) * mhz * t)


def _basis(mhz=MHZ, names=("NAA", "Cr", "PCr", "GPC")):
    t = np.arange(N) * DWELL
    lines = {"NAA": [(2.008, 3)], "Cr": [(3.027, 3), (3.913, 2)], "PCr": [(3.029, 3), (3.93, 2)],
             "GPC": [(3.212, 9)], "H2O": [(4.65, 2)]}
    fids = np.stack([sum(p * _line(t, s, mhz) for s, p in lines[n]) for n in names])
    kinds = tuple("water" if n == "H2O" else "metabolite" for n in names)
    return BasisSet(names=names, fids=fids, dwell_s=DWELL, spectrometer_mhz=mhz,
                    centre_ppm=CENTRE, kinds=kinds, sequence="press", timings_s={"te_s": 0.03})


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    root = tmp_path_factory.mktemp("fitcli")
    basis = _basis()
    basis.save(root / "basis.npz")
    _basis(mhz=297.2).save(root / "basis7t.npz")
    _basis(names=("H2O",)).save(root / "water_only.npz")
    t = np.arange(N) * DWELL
    rng = np.random.default_rng(0)
    clean = (np.array([10.0, 4.0, 3.0, 1.0]) @ basis.fids) * np.exp(-np.pi * 4 * t - 80 * t * t)
    transients = np.stack([clean * np.exp(0.05j * k) + 0.5 * (rng.standard_normal(N)
                           + 1j * rng.standard_normal(N)) for k in range(8)])
    raw = Scan(transients, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE,
               dims=("DIM_DYN",), te_s=0.03, sequence="press")
    save(raw, root / "raw.nii.gz")
    one = Scan(clean, dwell_s=DWELL, spectrometer_mhz=MHZ, centre_ppm=CENTRE, te_s=0.03,
               sequence="press")
    save(one, root / "one.nii.gz")
    (root / "range.toml").write_text("[fit]\nrange_ppm = [0.2, 40.0]\n")
    return root


def test_fit_raw_scan_writes_the_scan_folder(files, tmp_path):
    from specproc.analysis import OUTPUT_FILES
    from specproc.report.tables import RESULT_COLUMNS

    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["fit", str(files / "raw.nii.gz"), "--basis",
                                    str(files / "basis.npz"), "-o", str(out)])
    assert res.exit_code == 0, res.output
    # voxel.png only with the subject's anatomy (tests/test_tissue_fit.py), edited.png only
    # for an edited scan
    expected = [name for role, name in OUTPUT_FILES.items()
                if role not in ("voxel_png", "edited_png")]
    assert sorted(p.name for p in out.iterdir()) == sorted(expected)
    lines = (out / "results.tsv").read_text().splitlines()
    assert lines[0] == "\t".join(RESULT_COLUMNS)
    assert [ln.split("\t")[1] for ln in lines[1:]] == ["NAA", "Cr", "PCr", "GPC", "tNAA", "tCr",
                                                       "tCho"]
    doc = json.loads((out / "fit.json").read_text())
    assert doc["preprocessing"]["steps"]  # the preprocessing steps are recorded
    assert {"numpy", "scipy", "specproc"} <= set(doc["versions"])
    assert doc["settings"]["config"]["fit"]["range_ppm"] == [0.2, 4.2]
    naa = doc["fit"]["amplitudes"][0]
    assert naa == pytest.approx(10.0 * 8 / 8, rel=0.05)  # averaged transients keep the scale
    assert (out / "fit.png").read_bytes()[:4] == b"\x89PNG"
    assert "not a medical device" in (out / "report.html").read_text(encoding="utf-8")


def test_auto_basis_is_simulated_for_the_resolved_protocol(files, tmp_path, monkeypatch):
    import specproc.protocol

    seen = []

    def fake_simulate(self, **_kw):
        seen.append(self)
        return _basis()

    monkeypatch.setattr(specproc.protocol.Protocol, "simulate", fake_simulate)
    out = tmp_path / "auto"
    res = CliRunner().invoke(main, ["fit", str(files / "one.nii.gz"), "--te", "35",
                                    "--te1-ms", "12", "--sequence", "press", "-o", str(out)])
    assert res.exit_code == 0, res.output
    (protocol,) = seen
    assert protocol.te_s == pytest.approx(0.035) and protocol.sequence == "press"
    assert protocol.te1_s == pytest.approx(0.012)
    assert protocol.timing_sources == {"te1_s": "option"}
    assert protocol.macromolecules is True  # short TE (common practice rule)
    assert protocol.n_points == N
    doc = json.loads((out / "fit.json").read_text())
    assert doc["protocol"]["te1_s"] == pytest.approx(0.012)
    assert doc["protocol"]["timing_sources"] == {"te1_s": "option"}
    assert "TE1 12 ms, TE2 23 ms (option)" in res.output
    assert "TE1 12 ms, TE2 23 ms (option)" in (out / "report.html").read_text(encoding="utf-8")


@pytest.mark.parametrize("case, args, message", [
    ("field", ["--basis", "basis7t.npz"], "the basis was made for 297"),
    ("range", ["--basis", "basis.npz", "--config", "range.toml"], "outside the spectrum"),
    ("empty", ["--basis", "water_only.npz"], "list of basis members to fit is empty"),
])
def test_bad_inputs_give_one_line_and_exit_2(files, tmp_path, case, args, message):
    out = tmp_path / case
    args = [a if not a.endswith((".npz", ".toml")) else str(files / a) for a in args]
    res = CliRunner().invoke(main, ["fit", str(files / "one.nii.gz"), *args, "-o", str(out)])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("specproc: error:")
    assert message in lines[0]
    assert not out.exists() or not any(out.iterdir())


def test_incomplete_tissue_fractions_give_one_line_and_exit_2(files, tmp_path):
    out = tmp_path / "tissue"
    res = CliRunner().invoke(main, ["fit", str(files / "one.nii.gz"), "--basis",
                                    str(files / "basis.npz"), "--gm", "0.6", "-o", str(out)])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and "--gm, --wm and --csf" in lines[0]
    assert not out.exists()
