"""Relaxation times and water constants against the numbers of their cited sources; provenance.

Outside sources (tests/REFERENCES.md, section "Relaxation times and water constants"):
- Subarachnoid CSF at 3 T (Magn Reson Med 2023, PubMed Central PMC10696635, abstract, checked):
  T1 4308.7 ms, T2 1885.5 ms; frontal horns T1 4454.0 ms, T2 2372.9 ms.
- Metabolites in parietal white matter at 3 T (PMC9244865, table 3, checked): T1 NAA 1.41,
  Cr 1.35, Cho 1.26 s; T2 NAA 0.168, Cr 0.126, Cho 0.174 s.
- Zaaraoui W, et al. Magn Reson Med 2007;57:983-989 (abstract, checked): T2 at 3 T in grey /
  white matter NAA 226 / 264, Cr 137 / 155, Cho 207 / 202 ms.
- Choi C, et al. Proc ISMRM 2010;18:3330 (abstract, checked): T2 of Glu, Gln and mI 160-170 ms
  in occipital cortex at 3 T.
- Asslander J. arXiv:2409.05318 (abstract, checked): white-matter T1 at 3 T 0.6-1.1 s across
  the literature.
"""

from __future__ import annotations

import tomllib

import pytest
from click.testing import CliRunner

from specproc.cli import main
from specproc.errors import InvalidInputError
from specproc.provenance import physics_provenance, provenance_rows
from specproc.quantify import (
    RELAXATION_FILE,
    Acquisition,
    Tissue,
    WaterSignal,
    load_relaxation_times,
    quantify,
    water_settings,
)

# (entry, field, quantity) -> (value in the file, status, cited number(s), tolerance)
CITED = {
    ("water.csf", 3.0, "t1_s"): ("checked", 4.3087, 0.001),
    ("water.csf", 3.0, "t2_s"): ("checked", 1.8855, 0.001),
    ("metabolite.NAA", 3.0, "t1_s"): ("checked", 1.41, 0.0),
    ("metabolite.Cr", 3.0, "t1_s"): ("checked", 1.35, 0.0),
    ("metabolite.Cho", 3.0, "t1_s"): ("checked", 1.26, 0.0),
    # means of the grey- and white-matter values of Zaaraoui et al. 2007 (rounded to 1 ms)
    ("metabolite.NAA", 3.0, "t2_s"): ("derived", (0.226 + 0.264) / 2, 0.0),
    ("metabolite.Cr", 3.0, "t2_s"): ("derived", (0.137 + 0.155) / 2, 0.0),
    ("metabolite.Cho", 3.0, "t2_s"): ("derived", (0.207 + 0.202) / 2, 0.0006),
    # the middle of 160-170 ms (Choi et al. 2010)
    ("metabolite.Glu", 3.0, "t2_s"): ("derived", 0.165, 0.0),
    ("metabolite.Gln", 3.0, "t2_s"): ("derived", 0.165, 0.0),
    ("metabolite.mI", 3.0, "t2_s"): ("derived", 0.165, 0.0),
}
# published ranges the values in use must fall in (3 T)
RANGES = {
    ("water.csf", "t1_s"): (4.30, 4.46),  # SAS to frontal horns (PMC10696635)
    ("water.csf", "t2_s"): (1.88, 2.38),
    ("water.wm", "t1_s"): (0.6, 1.1),  # Asslander 2024
    ("metabolite.NAA", "t2_s"): (0.168, 0.264),  # PMC9244865 to Zaaraoui WM
    ("metabolite.Cr", "t2_s"): (0.126, 0.155),
    ("metabolite.Cho", "t2_s"): (0.174, 0.207),
}


def _entry(raw: dict, name: str, field_t: float, quantity: str) -> dict:
    section, key = name.split(".")
    (entry,) = [e for e in raw[section][key] if e["field_t"] == field_t and quantity in e]
    return entry


@pytest.fixture(scope="module")
def table() -> dict:
    with open(RELAXATION_FILE, "rb") as fh:
        return tomllib.load(fh)


def test_relaxation_values_pinned_to_their_sources(table: dict) -> None:
    for (name, field_t, quantity), (status, cited, tol) in CITED.items():
        entry = _entry(table, name, field_t, quantity)
        assert entry[quantity] == pytest.approx(cited, abs=tol + 1e-12), (name, quantity)
        prov = entry[quantity.replace("_s", "_provenance")]
        assert prov["status"] == status, (name, quantity)
    checked = [
        (section, key, e["field_t"], q)
        for section in ("water", "metabolite")
        for key, entries in table[section].items()
        for e in entries
        for q in ("t1_s", "t2_s")
        if q in e and e[q.replace("_s", "_provenance")]["status"] in ("checked", "derived")
    ]
    pinned = {(n.split(".")[0], n.split(".")[1], f, q) for n, f, q in CITED}
    assert set(checked) == pinned  # a value called checked or derived must be pinned here


def test_values_in_use_lie_in_the_published_ranges() -> None:
    at3 = load_relaxation_times(3.0)
    for (name, quantity), (lo, hi) in RANGES.items():
        section, key = name.split(".")
        rel = at3.water[key] if section == "water" else at3.metabolite(key)
        assert lo <= getattr(rel, quantity) <= hi, (name, quantity)
    # the discrepancy of the former table (CSF T1 3.82 s, T2 0.50 s at 3 T) is gone
    assert at3.water["csf"].t2_s > 1.8 and at3.water["csf"].t1_s > 4.3


def test_provenance_follows_the_field_choice() -> None:
    at3 = load_relaxation_times(3.0)
    assert at3.water["csf"].t1_provenance.status == "checked"
    assert "PMC10696635" in at3.water["csf"].t1_provenance.citation
    # 2 T: CSF T1 interpolated between 1.5 T (from memory) and 3 T (checked): stays from memory
    at2 = load_relaxation_times(2.0)
    assert at2.water["csf"].t1_provenance.status == "from memory"
    assert "interpolated" in at2.water["csf"].t1_provenance.at
    # CSF T2 only at 3 T: used unchanged at 7 T, record kept with a note
    at7 = load_relaxation_times(7.0)
    assert at7.water["csf"].t2_provenance.status == "checked"
    assert "used at 7 T" in at7.water["csf"].t2_provenance.note
    # aliases carry the record of their entry; overrides replace it
    assert at3.metabolite("PCr").t1_provenance == at3.metabolite("Cr").t1_provenance
    over = load_relaxation_times(3.0, overrides={"metabolite": {"NAA": {"t2_s": 0.2}}})
    assert over.metabolite("NAA").t2_provenance.status == "override"
    assert over.metabolite("NAA").t1_provenance.status == "checked"


def test_relaxation_table_rejects_bad_records(tmp_path) -> None:
    text = RELAXATION_FILE.read_text(encoding="utf-8")
    bad = tmp_path / "relax.toml"
    bad.write_text(text.replace('ref = "csf2023"', 'ref = "nowhere2023"', 1), encoding="utf-8")
    with pytest.raises(InvalidInputError, match=r"nowhere2023.*not in \[references\]"):
        load_relaxation_times(3.0, path=bad)
    bad.write_text(text.replace('status = "checked", ref = "csf2023"',
                                'status = "measured", ref = "csf2023"', 1), encoding="utf-8")
    with pytest.raises(InvalidInputError, match="status 'measured'"):
        load_relaxation_times(3.0, path=bad)


def test_water_settings_from_the_configuration() -> None:
    defaults = water_settings(None)
    assert defaults["water_content"] == {"gm": 0.837, "wm": 0.691, "csf": 1.0}
    ernst = water_settings({"content": {"gm": 0.78, "wm": 0.65, "csf": 0.97}})
    assert ernst["water_content"]["gm"] == 0.78
    with pytest.raises(InvalidInputError, match="water content of csf"):
        water_settings({"content": {"gm": 0.8, "wm": 0.7, "csf": 1.2}})
    with pytest.raises(InvalidInputError, match="unknown keys"):
        water_settings({"density": 1.0})
    with pytest.raises(InvalidInputError, match="positive"):
        water_settings({"molar_mm": 0.0})


def test_provenance_block_counts_and_names_overrides() -> None:
    fractions = {"gm": 0.6, "wm": 0.3, "csf": 0.1}
    common = dict(water=WaterSignal(3.0e4), acquisition=Acquisition(0.03, 2.0, 3.0))
    members = ["NAA", "Cr", "PCr", "Glu", "MM0.94"]
    amps = {m: 1.0 + k for k, m in enumerate(members)}
    plain = physics_provenance(members, quantify(amps, tissue=fractions, **common).constants)
    assert plain["overridden"] == [] and plain["unknown_members"] == []
    assert plain["by_kind"]["water"] == {"checked": 5}  # 3 contents + 2 concentrations
    # NAA 7 values + Cr 2 + PCr 2 + Glu 13 + MM0.94 6 (2 lines x position, width, weight; the
    # bundled file sets no width_field_t)
    assert sum(plain["by_kind"]["spin"].values()) == 7 + 2 + 2 + 13 + 6
    assert sum(plain["by_kind"]["relaxation"].values()) == 2 * 3 + 2 * len(members)
    assert plain["values"] == sum(plain["by_status"].values())
    changed = quantify(
        amps, **common, relaxation={"water": {"csf": {"t2_s": 2.4}}},
        tissue=Tissue(fractions, water_content={"gm": 0.78, "wm": 0.65, "csf": 0.97},
                      water_molar_mm=55344.6),
    )
    block = physics_provenance(members, changed.to_dict()["constants"])
    assert block["overridden"] == [
        "water.csf T2", "water content gm", "water content wm", "water content csf",
        "pure water (molar formula)",
    ]
    rows = provenance_rows(block)
    assert any(r["quantity"] == "overridden by the settings" and "water.csf T2" in r["value"]
               for r in rows)
    # without a water reference only the spin values are counted
    ratios_only = physics_provenance(members, quantify(amps).constants)
    assert set(ratios_only["by_kind"]) == {"spin"}


def test_config_show_documents_every_override_and_check_validates_them(tmp_path) -> None:
    shown = CliRunner().invoke(main, ["config", "show"]).output
    for text in ("[relaxation]", "[relaxation.water.gm]", "[relaxation.metabolite.NAA]",
                 "[relaxation.default]", "[water]", "content = { gm = 0.837",
                 "molal_mmol_per_kg", "molar_mm", "0.78, 0.65, 0.97"):
        assert text in shown, text
    good = tmp_path / "ok.toml"
    good.write_text('[water]\ncontent = { gm = 0.78, wm = 0.65, csf = 0.97 }\n'
                    '[relaxation.water.csf]\nt2_s = 2.0\n')
    assert CliRunner().invoke(main, ["config", "check", str(good)]).exit_code == 0
    bad = tmp_path / "bad.toml"
    bad.write_text("[water]\ncontent = { gm = 0.78, wm = 0.65, csf = 1.5 }\n")
    result = CliRunner().invoke(main, ["config", "check", str(bad)])
    assert result.exit_code == 2 and "water content of csf" in result.output
