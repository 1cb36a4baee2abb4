"""specproc.protocol: one definition of a scan's basis protocol and of where its timings come from.

The precedence (option > manifest > config > header > assumption) and the header key are the
contract of issue 12; the NIfTI-MRS file carrying the key is written with nibabel alone (not
with specproc's writer). The PRESS timing check uses the textbook fact that a strongly coupled
spin system's echo depends on how TE is split into TE1 and TE2 (lactate / citrate-like AB or
A3X systems; e.g. Thompson & Allen, Magn Reson Med 1999;41:1162-1169, from memory), while an
uncoupled singlet's echo does not.
"""

from __future__ import annotations

import numpy as np
import pytest
from _io_builders import write_nifti_nibabel
from click.testing import CliRunner

from specproc.basis import simulate_basis
from specproc.cli import main
from specproc.config import load_config, merge_config
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.io import load, save
from specproc.protocol import (
    MACROMOLECULE_RULE,
    PHANTOM_RULE,
    PHANTOM_WIDTH_RULE,
    phantom_fit_config,
    resolve_protocol,
)

MHZ = 123.2


def _scan(**kw):
    args = {"data": np.zeros(256, complex), "dwell_s": 1 / 2000, "spectrometer_mhz": MHZ,
            "te_s": 0.030, "sequence": "press", **kw}
    return Scan(**args)


def test_press_te1_precedence_option_manifest_config_header_assumed():
    scan = _scan(timings={"te1_s": 0.010})
    cfg = merge_config({"protocol": {"te1_s": 0.011}})
    p = resolve_protocol(scan, option={"te1_s": 0.013}, manifest={"te1_s": 0.012}, config=cfg)
    assert (p.te1_s, p.timing_sources["te1_s"]) == (0.013, "option")
    p = resolve_protocol(scan, manifest={"te1_s": 0.012}, config=cfg)
    assert (p.te1_s, p.timing_sources["te1_s"]) == (0.012, "manifest")
    p = resolve_protocol(scan, config=cfg)
    assert (p.te1_s, p.timing_sources["te1_s"]) == (0.011, "config")
    p = resolve_protocol(scan, config=load_config(None))  # defaults: not set
    assert (p.te1_s, p.timing_sources["te1_s"]) == (0.010, "header")
    p = resolve_protocol(_scan())
    assert p.te1_s == pytest.approx(0.015)
    assert p.timing_sources["te1_s"] == "assumed: TE1 = TE/2"
    assert "TE1 15 ms, TE2 15 ms (assumed: TE1 = TE/2)" == p.timing_text()


def test_only_the_timing_of_the_sequence_is_used():
    steam = _scan(sequence="steam", tm_s=0.010, timings={"te1_s": 0.01})
    p = resolve_protocol(steam, manifest={"te1_s": 0.012})
    assert p.te1_s is None and p.tm_s == 0.010 and p.timing_sources == {"tm_s": "header"}
    with pytest.raises(InvalidInputError, match=r"TE1 \(PRESS\) given, but the scan's sequence"):
        resolve_protocol(steam, option={"te1_s": 0.012})
    p = resolve_protocol(steam, manifest={"tm_s": 0.02})
    assert (p.tm_s, p.timing_sources["tm_s"]) == (0.02, "manifest")
    with pytest.raises(InvalidInputError, match="mixing time"):
        resolve_protocol(_scan(sequence="steam"))
    slaser = resolve_protocol(_scan(sequence="semi-laser", te_s=0.032))
    assert slaser.delays_s == pytest.approx((0.004, 0.008, 0.008, 0.008, 0.004))
    assert slaser.timing_sources["delays_s"].startswith("assumed")
    given = (0.004, 0.01, 0.008, 0.01, 0.008)  # d2 + d4 = d1 + d3 + d5 (refocused echo)
    p = resolve_protocol(_scan(sequence="semi-laser", te_s=0.04), option={"delays_s": given})
    assert p.delays_s == given and p.timing_sources == {"delays_s": "option"}
    with pytest.raises(InvalidInputError, match="shorter than TE"):
        resolve_protocol(_scan(), option={"te1_s": 0.05})


def test_macromolecule_rule_and_members_from_the_config():
    # tissue: the components at short and long TE alike (the rule of 2026-12-03)
    for te_s in (0.030, 0.144, 0.288):
        p = resolve_protocol(_scan(te_s=te_s))
        assert p.macromolecules is True and p.macromolecule_source == MACROMOLECULE_RULE
    phantom = resolve_protocol(_scan(), phantom=True)
    assert phantom.macromolecules is False and phantom.macromolecule_source == PHANTOM_RULE
    assert resolve_protocol(_scan(), phantom=True, macromolecules=True).macromolecules is True
    chosen = resolve_protocol(_scan(), macromolecules=False)
    assert chosen.macromolecules is False and chosen.macromolecule_source == "chosen"
    cfg = merge_config({"fit": {"members": ["NAA", "Cr"]}})
    assert resolve_protocol(_scan(), config=cfg).metabolites == ("NAA", "Cr")
    # equal protocols share one basis; a different TE1 is a different basis
    assert resolve_protocol(_scan()).key() == resolve_protocol(_scan()).key()
    assert resolve_protocol(_scan()).key() != resolve_protocol(
        _scan(), option={"te1_s": 0.01}).key()


def test_a_phantom_is_said_by_its_protocol_and_shares_the_basis_without_macromolecules():
    phantom = resolve_protocol(_scan(), phantom=True)
    assert phantom.phantom is True and phantom.to_dict()["phantom"] is True
    assert resolve_protocol(_scan()).phantom is False
    # not a simulation input: the same basis as a tissue scan fitted without macromolecules
    assert phantom.key() == resolve_protocol(_scan(), macromolecules=False).key()


def test_phantom_fit_config_sets_equal_expected_widths_and_keeps_the_rest():
    cfg = merge_config({"fit": {"damping_sd_hz": 0.5}})
    assert cfg["fit"]["width_prior"] == "relaxation"  # the default (tissue)
    out, note = phantom_fit_config(cfg)
    assert out["fit"]["width_prior"] == "none" and note == PHANTOM_WIDTH_RULE
    assert out["fit"]["damping_sd_hz"] == 0.5 and out["qc"] == cfg["qc"]
    assert cfg["fit"]["width_prior"] == "relaxation"  # the input is not changed
    again, note = phantom_fit_config(out)
    assert again["fit"]["width_prior"] == "none" and note == ""


def test_header_key_written_by_nibabel_is_read_and_written_back(tmp_path):
    meta = {"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"], "EchoTime": 0.03,
            "SequenceName": "PRESS",
            "specproc_timings": {"Value": {"te1_s": 0.012}, "Description": "PRESS TE1"}}
    path = write_nifti_nibabel(tmp_path / "t.nii.gz", np.ones((1, 1, 1, 64), np.complex64),
                               dwell=1 / 2000, meta=meta)
    scan = load(path)
    assert scan.timings == {"te1_s": 0.012}
    p = resolve_protocol(scan)
    assert (p.te1_s, p.timing_sources["te1_s"]) == (0.012, "header")
    save(scan.replace(timings={"delays_s": (0.004, 0.008, 0.008, 0.008, 0.004)}),
         tmp_path / "back.nii.gz")
    again = load(tmp_path / "back.nii.gz")
    assert again.header["specproc_timings"]["Value"] == {
        "delays_s": [0.004, 0.008, 0.008, 0.008, 0.004]}
    bad = dict(meta, specproc_timings={"Value": {"te1_ms": 12}})
    path = write_nifti_nibabel(tmp_path / "bad.nii.gz", np.ones((1, 1, 1, 64), np.complex64),
                               dwell=1 / 2000, meta=bad)
    with pytest.raises(InvalidInputError, match="unknown specproc_timings"):
        load(path)


def test_te1_changes_a_coupled_basis_but_not_a_singlet():
    common = dict(sequence="press", field_t=3.0, te_s=0.144, dwell_s=1 / 2000, n_points=512,
                  metabolites=["Cr", "Lac"], cache=False)
    sym = simulate_basis(**common)
    asym = simulate_basis(**common, te1_s=0.020)
    assert asym.timings_s["te2_s"] == pytest.approx(0.124)
    cr, lac = sym.index("Cr"), sym.index("Lac")
    # Cr: singlets only (plus a negligible-coupling methylene): same echo
    np.testing.assert_allclose(asym.fids[cr], sym.fids[cr], atol=1e-6 * np.abs(sym.fids[cr]).max())
    # Lac (A3X, J ≈ 7 Hz): the echo differs with the split of TE
    assert np.abs(asym.fids[lac] - sym.fids[lac]).max() > 0.01 * np.abs(sym.fids[lac]).max()


def test_fit_rejects_a_bad_timing_option_in_one_line(tmp_path):
    save(_scan(data=np.ones(256, complex)), tmp_path / "s.nii.gz")
    res = CliRunner().invoke(main, ["fit", str(tmp_path / "s.nii.gz"), "--te1-ms", "40",
                                    "-o", str(tmp_path / "o")])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and "TE1" in lines[0]
    assert not (tmp_path / "o").exists()


def test_manifest_timing_columns_reach_the_protocol(tmp_path):
    from specproc.batch import read_manifest

    save(_scan(data=np.ones(256, complex)), tmp_path / "a.nii.gz")
    save(_scan(data=np.ones(256, complex), sequence="semi-laser", te_s=0.04),
         tmp_path / "b.nii.gz")
    (tmp_path / "m.tsv").write_text(
        "scan\tte1_ms\tdelays_ms\n"
        "a.nii.gz\t12\t\n"
        "b.nii.gz\t\t4;10;8;10;8\n", "utf-8")
    a, b = read_manifest(tmp_path / "m.tsv")
    assert a.timings == {"te1_s": pytest.approx(0.012)}
    assert b.timings["delays_s"] == pytest.approx((0.004, 0.010, 0.008, 0.010, 0.008))
    p = resolve_protocol(load(a.scan_path), manifest=a.timings)
    assert (p.te1_s, p.timing_sources) == (pytest.approx(0.012), {"te1_s": "manifest"})
    p = resolve_protocol(load(b.scan_path), manifest=b.timings)
    assert p.timing_sources == {"delays_s": "manifest"}
