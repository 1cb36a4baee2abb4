"""Checks of the metabolite definition files in ``specproc/data/basis/`` and of their reader.

Outside sources (see tests/REFERENCES.md, section "Metabolite definitions"):
- Govindaraju V, Young K, Maudsley AA. NMR Biomed 2000;13:129-153, table 2, and its 2015
  revision (doi:10.1002/nbm.3336): the numbers in ``TABLE_VALUES`` were read from reproductions
  of the table (**checked**); every value a file marks "checked" must be pinned there.
- BMRB/GISSMO spin-system fits (Dashti H, et al. Anal Chem 2017;89:12201; 25 C, pH 7.4):
  ``GISSMO_VALUES``, compared with tolerances for the different conditions (0.02 ppm, 0.5 Hz).
- Molecular formulas and structures (textbook organic chemistry / IUPAC structures) for the
  proton counts: non-exchangeable (carbon-bound) protons only.
- Textbook NMR: geminal sp3 couplings are negative (about -10 to -18 Hz), vicinal couplings
  positive and at most about 12-13 Hz (Karplus); trans-diaxial vicinal couplings (beta-glucose
  H1-H2) are larger than axial-equatorial ones (alpha-glucose H1-H2).
- Cudalbu C, et al. NMR Biomed 2021;34:e4393: position-based macromolecule names (**checked**).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from specproc._paths import basis_dir
from specproc.constants import larmor_mhz
from specproc.errors import InvalidInputError
from specproc.provenance import STATUSES
from specproc.spins.systems import (
    Metabolite,
    definitions_hash,
    list_metabolites,
    load_macromolecules,
    load_metabolite,
    load_metabolites,
    provenance_items,
)

REQUIRED = (
    "Ala", "Asc", "Asp", "Cho", "Cr", "PCr", "GABA", "Glc", "Gln", "Glu", "Gly",
    "GPC", "PCh", "GSH", "Lac", "mI", "NAA", "NAAG", "PE", "sI", "Tau",
)  # fmt: skip

# Non-exchangeable (C-H) protons from the molecular structure; NH, OH, SH and COOH protons
# exchange with water and are left out (common practice). Source: the molecular formula and
# structure of each compound (neutral form given; the carbon-bound hydrogens are counted).
EXPECTED_PROTONS = {
    "Ala": ("C3H7NO2, CH3-CH(NH2)-COOH", 4),  # CH3 + CH
    "Asc": ("C6H8O6, ascorbic acid", 4),  # H4, H5, H6 x2; four OH exchange
    "Asp": ("C4H7NO4, HOOC-CH(NH2)-CH2-COOH", 3),  # CH + CH2
    "Cho": ("C5H14NO+, choline cation", 13),  # N(CH3)3 9 + 2 CH2 4; OH exchanges
    "Cr": ("C4H9N3O2, creatine", 5),  # N-CH3 + CH2; four NH exchange
    "PCr": ("C4H10N3O5P, phosphocreatine", 5),  # N-CH3 + CH2
    "GABA": ("C4H9NO2, H2N-(CH2)3-COOH", 6),  # three CH2
    "Glc": ("C6H12O6, glucopyranose", 7),  # H1..H5 + H6 x2; five OH exchange
    "Gln": ("C5H10N2O3, glutamine", 5),  # CH + 2 CH2
    "Glu": ("C5H9NO4, glutamic acid", 5),  # CH + 2 CH2
    "Gly": ("C2H5NO2, H2N-CH2-COOH", 2),  # CH2
    "GPC": ("C8H20NO6P, glycerophosphocholine", 18),  # N(CH3)3 9 + 2 CH2 4 + glycerol 5
    "PCh": ("C5H14NO4P, phosphocholine", 13),  # N(CH3)3 9 + 2 CH2 4
    "GSH": ("C10H17N3O6S, glutathione", 10),  # Glu 5 + Cys 3 + Gly 2
    "Lac": ("C3H6O3, CH3-CH(OH)-COOH", 4),  # CH3 + CH
    "mI": ("C6H12O6, myo-inositol", 6),  # six ring CH; six OH exchange
    "NAA": ("C6H9NO5, N-acetylaspartic acid", 6),  # acetyl CH3 + CH + CH2
    "NAAG": ("C11H16N2O8, N-acetylaspartylglutamic acid", 11),  # 3 + (1 + 2) + (1 + 2 + 2)
    "PE": ("C2H8NO4P, phosphoethanolamine", 4),  # two CH2
    "sI": ("C6H12O6, scyllo-inositol", 6),  # six ring CH
    "Tau": ("C2H7NO3S, H2N-CH2-CH2-SO3H", 4),  # two CH2
}

# Independent spin systems (proton count of each, sorted), from the coupling networks of the
# molecular structures: protons more than three bonds apart or across a heteroatom/carbonyl
# have no resolved coupling (textbook NMR).
EXPECTED_SYSTEMS = {
    "Ala": [4], "Asc": [4], "Asp": [3], "Cho": [4, 9], "Cr": [2, 3], "PCr": [2, 3], "GABA": [6],
    "Glc": [7, 7], "Gln": [5], "Glu": [5], "Gly": [2], "GPC": [4, 5, 9], "PCh": [4, 9],
    "GSH": [2, 3, 5], "Lac": [4], "mI": [6], "NAA": [3, 3], "NAAG": [3, 3, 5], "PE": [4],
    "sI": [6], "Tau": [4], "H2O": [2],
}  # fmt: skip

MAX_SYSTEM_PROTONS = 8  # the engine must simulate the largest system in seconds (issue 3)


@pytest.fixture(scope="module")
def metabolites() -> dict[str, Metabolite]:
    return {m.name: m for m in load_metabolites()}


def _effective_sources(met: Metabolite) -> list[str]:
    return [g.source for g in met.groups] + [c.source for c in met.couplings]


# ------------------------------------------------------------------- files and names
def test_every_file_parses() -> None:
    files = sorted(basis_dir().glob("*.toml"))
    assert len(files) >= 22  # 20 metabolites + water + macromolecules
    for path in files:
        if path.name == "macromolecules.toml":
            assert load_macromolecules(path.parent)
        else:
            met = load_metabolite(path)
            assert met.path == str(path)
            # file name = short lower-case name (the layout of data/basis/); water.toml holds H2O
            assert path.stem == ("water" if met.kind == "water" else met.name.lower())


def test_required_names_present(metabolites: dict[str, Metabolite]) -> None:
    missing = [name for name in REQUIRED if name not in metabolites]
    assert not missing
    assert list_metabolites() == [m.name for m in load_metabolites()]
    assert sorted(list_metabolites(), key=str.lower) == list_metabolites()


def test_lookup_is_case_insensitive_and_unknown_names_fail() -> None:
    assert [m.name for m in load_metabolites(["naa", "LAC", " mi "])] == ["NAA", "Lac", "mI"]
    with pytest.raises(InvalidInputError, match=r"unknown metabolite 'Xyz'.*NAA"):
        load_metabolites(["Xyz"])


def test_names_unique_and_identifier_safe(metabolites: dict[str, Metabolite]) -> None:
    names = list(metabolites) + [c.name for c in load_macromolecules()]
    assert len({n.lower() for n in names}) == len(names)
    for name in names:
        assert name.replace(".", "_").isidentifier(), name


def test_kinds(metabolites: dict[str, Metabolite]) -> None:
    kinds = {m.name: m.kind for m in metabolites.values()}
    assert kinds.pop("H2O") == "water"
    assert set(kinds.values()) == {"metabolite"}


# ------------------------------------------------------------------- chemistry
@pytest.mark.parametrize("name", REQUIRED)
def test_proton_count_matches_structure(metabolites: dict[str, Metabolite], name: str) -> None:
    formula, expected = EXPECTED_PROTONS[name]
    assert metabolites[name].protons == pytest.approx(expected), formula


def test_glucose_anomers(metabolites: dict[str, Metabolite]) -> None:
    # 36:64 alpha:beta equilibrium mixture (common practice); 7 C-H protons per anomer.
    glc = metabolites["Glc"]
    alpha = [g for g in glc.groups if g.label.startswith("a")]
    beta = [g for g in glc.groups if g.label.startswith("b")]
    assert len(alpha) == len(beta) == 7
    assert {g.fraction for g in alpha} == {0.36}
    assert {g.fraction for g in beta} == {0.64}
    # Anomeric H1: alpha (equatorial H1) resonates above beta (axial H1) (textbook).
    assert glc.group("a1CH").shift_ppm > 5.0 > glc.group("b1CH").shift_ppm > 4.5
    # Karplus: trans-diaxial H1-H2 (beta) couples more strongly than axial-equatorial (alpha).
    j12 = {frozenset((c.a, c.b)): c.j_hz for c in glc.couplings}
    assert j12[frozenset(("b1CH", "b2CH"))] > 7.0 > 4.0 > j12[frozenset(("a1CH", "a2CH"))]


def test_myo_inositol_symmetry(metabolites: dict[str, Metabolite]) -> None:
    # The mirror plane through C2 and C5 of myo-inositol makes H1/H3 and H4/H6 isochronous.
    mi = metabolites["mI"]
    assert mi.group("1CH").shift_ppm == mi.group("3CH").shift_ppm
    assert mi.group("4CH").shift_ppm == mi.group("6CH").shift_ppm
    assert mi.group("2CH").shift_ppm > 4.0  # the equatorial H2 triplet near 4.05 ppm


def test_coupling_signs_and_sizes(metabolites: dict[str, Metabolite]) -> None:
    # Textbook: geminal sp3 2J about -10 to -18 Hz; vicinal 3J positive, up to about 12-13 Hz.
    for met in metabolites.values():
        for c in met.couplings:
            geminal = c.a[:-1] == c.b[:-1] and {c.a[-1], c.b[-1]} == {"a", "b"}
            if geminal:
                assert -18.0 <= c.j_hz <= -10.0, (met.name, c)
            else:
                assert 0.0 < c.j_hz <= 12.5, (met.name, c)


# ------------------------------------------------------------------- published values
# Numbers read from reproductions of the published table (Govindaraju et al. 2000 and its 2015
# revision; tests/REFERENCES.md). Key: (metabolite, group label) for a shift in ppm,
# (metabolite, label, label) for a coupling in Hz. The files must hold exactly these numbers.
TABLE_VALUES: dict[tuple[str, ...], float] = {
    # NAA, 2000 table
    ("NAA", "acetyl_2CH3"): 2.0080, ("NAA", "2CH"): 4.3817, ("NAA", "3CH2a"): 2.6727,
    ("NAA", "3CH2b"): 2.4863, ("NAA", "2CH", "3CH2a"): 3.861, ("NAA", "2CH", "3CH2b"): 9.821,
    ("NAA", "3CH2a", "3CH2b"): -15.592,
    # NAAG, 2000 table (the glutamate moiety has shifts only)
    ("NAAG", "acetyl_2CH3"): 2.042, ("NAAG", "asp2CH"): 4.607, ("NAAG", "asp3CH2a"): 2.721,
    ("NAAG", "asp3CH2b"): 2.519, ("NAAG", "glu2CH"): 4.128, ("NAAG", "glu3CH2a"): 1.881,
    ("NAAG", "glu3CH2b"): 2.049, ("NAAG", "glu4CH2a"): 2.190, ("NAAG", "glu4CH2b"): 2.180,
    ("NAAG", "asp2CH", "asp3CH2a"): 4.412, ("NAAG", "asp2CH", "asp3CH2b"): 9.515,
    ("NAAG", "asp3CH2a", "asp3CH2b"): -15.910,
    # glutamate, revised table: 3-4 6.413, 3-4' 8.406, 3'-4 8.478, 3'-4' 6.875 Hz
    ("Glu", "2CH"): 3.7444, ("Glu", "3CH2a"): 2.0424, ("Glu", "4CH2a"): 2.3354,
    ("Glu", "4CH2b"): 2.3507, ("Glu", "3CH2a", "4CH2a"): 6.413, ("Glu", "3CH2a", "4CH2b"): 8.406,
    ("Glu", "3CH2b", "4CH2a"): 8.478, ("Glu", "3CH2b", "4CH2b"): 6.875,
    # glutamine, revised table: 2CH, and J 3'-4' (3CH2a-4CH2b here)
    ("Gln", "2CH"): 3.7625, ("Gln", "3CH2a", "4CH2b"): 6.437,
    # glucose, revised table: alpha 5-6, beta 3-4, 4-5, 5-6
    ("Glc", "a5CH", "a6CH2a"): 1.5, ("Glc", "b3CH", "b4CH"): 9.4, ("Glc", "b4CH", "b5CH"): 8.9,
    ("Glc", "b5CH", "b6CH2a"): 1.6,
    # free choline, revised table
    ("Cho", "NCH33"): 3.189, ("Cho", "2CH2a"): 3.506, ("Cho", "2CH2b"): 3.506,
    ("Cho", "1CH2a"): 4.05, ("Cho", "1CH2b"): 4.05, ("Cho", "1CH2a", "2CH2a"): 3.14,
    ("Cho", "1CH2a", "2CH2b"): 6.979, ("Cho", "1CH2b", "2CH2a"): 7.011,
    ("Cho", "1CH2b", "2CH2b"): 3.168,
}  # fmt: skip

# BMRB/GISSMO (Dashti et al. 2017; 25 C, pH 7.4): shifts may differ by up to ~0.02 ppm from the
# 37 C table. GABA: shifts, and the means of the four 2-3 and the four 3-4 couplings.
GISSMO_GABA_SHIFTS = {"2CH2": 2.998, "3CH2": 1.893, "4CH2": 2.286}
GISSMO_GABA_MEAN_J = {("2CH2", "3CH2"): 7.63, ("3CH2", "4CH2"): 7.37}
GISSMO_SHIFT_TOL_PPM = 0.02
GISSMO_J_TOL_HZ = 0.5


def _value(met: Metabolite, key: tuple[str, ...]) -> float:
    if len(key) == 1:
        return met.group(key[0]).shift_ppm
    (c,) = [c for c in met.couplings if {c.a, c.b} == set(key)]
    return c.j_hz


def _records(met: Metabolite) -> list[tuple[tuple[str, ...], object]]:
    return [((g.label,), g.provenance) for g in met.groups] + [
        ((c.a, c.b), c.provenance) for c in met.couplings
    ]


def test_table_values_pinned(metabolites: dict[str, Metabolite]) -> None:
    for (name, *key), expected in TABLE_VALUES.items():
        met = metabolites[name]
        assert _value(met, tuple(key)) == expected, (name, key)
        (prov,) = [p for k, p in _records(met) if set(k) == set(key)]
        assert prov.status == "checked", (name, key, prov)


def test_every_checked_value_is_pinned(metabolites: dict[str, Metabolite]) -> None:
    # a value may only be called "checked" when the number read from the source is pinned here
    pinned = {(name, frozenset(key)) for name, *key in TABLE_VALUES}
    for met in metabolites.values():
        for key, prov in _records(met):
            if prov.status == "checked":
                assert (met.name, frozenset(key)) in pinned, (met.name, key)


def test_issue_discrepancies_resolved(metabolites: dict[str, Metabolite]) -> None:
    # Glu: the lower-shift H3 couples with 8.4 Hz to the higher-shift H4 (revised table)
    glu = metabolites["Glu"]
    assert glu.group("3CH2a").shift_ppm < glu.group("3CH2b").shift_ppm
    assert glu.group("4CH2a").shift_ppm < glu.group("4CH2b").shift_ppm
    assert _value(glu, ("3CH2a", "4CH2b")) > 8.0 > 7.0 > _value(glu, ("3CH2a", "4CH2a"))
    # NAAG: the table gives no couplings for the glutamate moiety; they are derived from free
    # glutamate and say so
    naag, couplings = metabolites["NAAG"], {}
    for c in naag.couplings:
        if c.a.startswith("glu"):
            assert c.provenance.status == "derived" and "glutamate" in c.provenance.at, c
            couplings[frozenset((c.a, c.b))] = c.j_hz
    assert sorted(couplings.values()) == sorted(c.j_hz for c in glu.couplings)
    # full spin systems: every proton of GABA, PCh, GPC (choline part), PE, Tau, Cho on its own
    for name in ("GABA", "PCh", "PE", "Tau", "Cho", "GPC"):
        ch2 = [g for g in metabolites[name].groups if "CH2" in g.label]
        assert ch2 and all(g.protons == 1 for g in ch2), name


def test_gaba_against_gissmo(metabolites: dict[str, Metabolite]) -> None:
    gaba = metabolites["GABA"]
    assert len(gaba.groups) == 6 and gaba.protons == 6
    for label, shift in GISSMO_GABA_SHIFTS.items():
        for suffix in "ab":
            assert gaba.group(label + suffix).shift_ppm == pytest.approx(
                shift, abs=GISSMO_SHIFT_TOL_PPM
            )
    for (p, q), mean in GISSMO_GABA_MEAN_J.items():
        js = [c.j_hz for c in gaba.couplings if {c.a[:-1], c.b[:-1]} == {p, q}]
        assert len(js) == 4
        assert sum(js) / 4 == pytest.approx(mean, abs=GISSMO_J_TOL_HZ)
        assert 4.2 - GISSMO_J_TOL_HZ <= min(js) and max(js) <= 10.0 + 1.0  # 4.2-10.0 Hz there


def test_landmark_shifts(metabolites: dict[str, Metabolite]) -> None:
    # Issue 3 / Govindaraju 2000: NAA methyl 2.008 ppm; creatine 3.027 and 3.913 ppm.
    assert metabolites["NAA"].group("acetyl_2CH3").shift_ppm == pytest.approx(2.008, abs=1e-4)
    cr = metabolites["Cr"]
    assert cr.group("NCH3").shift_ppm == pytest.approx(3.027, abs=1e-4)
    assert cr.group("2CH2").shift_ppm == pytest.approx(3.913, abs=1e-4)
    # Choline trimethyl singlet "near 3.2 ppm" (issue 3); Govindaraju 2000 (from memory):
    # PCh 3.208, GPC 3.212; free choline 3.189 (revised table, checked).
    for name in ("GPC", "PCh", "Cho"):
        group = metabolites[name].group("NCH33")
        assert group.protons == 9
        assert 3.185 <= group.shift_ppm <= 3.215, name
    # Lactate methyl doublet at 1.31 ppm, J = 6.93 Hz (Govindaraju 2000, from memory).
    lac = metabolites["Lac"]
    assert lac.group("3CH3").shift_ppm == pytest.approx(1.31, abs=0.01)
    assert lac.group("3CH3").protons == 3
    (coupling,) = lac.couplings
    assert coupling.j_hz == pytest.approx(6.93, abs=0.01)
    # Water at 37 C: 4.65 ppm (common practice), one singlet of 2 protons.
    water = metabolites["H2O"]
    assert [(g.shift_ppm, g.protons) for g in water.groups] == [(4.65, 2)]


# ------------------------------------------------------------------- consistency of the data
def test_every_value_has_provenance(metabolites: dict[str, Metabolite]) -> None:
    # Every shift and coupling carries its own record: status, and source and place in it.
    for met in metabolites.values():
        assert met.source.strip(), met.name
        for key, prov in _records(met):
            assert prov is not None and prov.status in STATUSES, (met.name, key)
            if prov.status in ("checked", "corroborated", "from memory"):
                assert prov.citation and prov.at, (met.name, key)
        for source in _effective_sources(met):
            assert source.endswith(")"), source  # "<citation>, <where> (<status>)"
    for comp in load_macromolecules():
        assert comp.provenance is not None and comp.shape_provenance is not None, comp.name
        assert all(p.provenance is not None for p in comp.peaks), comp.name
    items = provenance_items(metabolites.values(), load_macromolecules())
    assert all(i.provenance.status != "override" for i in items)
    assert not [i for i in items if "no record" in i.provenance.at]


def test_couplings_reference_groups_once(metabolites: dict[str, Metabolite]) -> None:
    for met in metabolites.values():
        labels = {g.label for g in met.groups}
        pairs = [frozenset((c.a, c.b)) for c in met.couplings]
        assert all(len(p) == 2 and p <= labels for p in pairs), met.name
        assert len(set(pairs)) == len(pairs), met.name


def test_shifts_in_range(metabolites: dict[str, Metabolite]) -> None:
    for met in metabolites.values():
        for g in met.groups:
            assert 0.0 < g.shift_ppm < 10.0, (met.name, g.label)
    for comp in load_macromolecules():
        for p in comp.peaks:
            assert 0.0 < p.shift_ppm < 10.0, comp.name


@pytest.mark.parametrize("name", sorted(EXPECTED_SYSTEMS))
def test_spin_system_split(metabolites: dict[str, Metabolite], name: str) -> None:
    systems = metabolites[name].spin_systems()
    sizes = sorted(sum(g.protons for g in groups) for groups, _ in systems)
    assert sizes == EXPECTED_SYSTEMS[name]
    for groups, couplings in systems:
        labels = {g.label for g in groups}
        assert all(c.a in labels and c.b in labels for c in couplings)
        if len(groups) > 1:  # a coupled system is connected by its couplings
            assert couplings
    coupled = [sum(g.protons for g in groups) for groups, couplings in systems if couplings]
    assert max(coupled, default=0) <= MAX_SYSTEM_PROTONS


def test_creatine_and_lactate_systems(metabolites: dict[str, Metabolite]) -> None:
    systems = metabolites["Cr"].spin_systems()
    assert len(systems) == 2
    assert all(len(groups) == 1 and not couplings for groups, couplings in systems)
    (lac,) = metabolites["Lac"].spin_systems()
    assert {g.label for g in lac[0]} == {"2CH", "3CH3"} and len(lac[1]) == 1


def test_macromolecule_components() -> None:
    comps = {c.name: c for c in load_macromolecules()}
    # Cudalbu 2021 consensus names (checked) plus the commonly used further peaks.
    for name in ("MM0.94", "MM1.22", "MM1.43", "MM1.70", "MM2.05", "MM2.29", "MM3.00",
                 "MM3.20", "MM3.90", "FatCH3", "FatCH2"):  # fmt: skip
        assert name in comps
    for name, comp in comps.items():
        assert comp.kind == "macromolecule"
        # lipids are named by chemical group: methyl near 0.9 ppm, methylene near 1.3 ppm
        # (common practice)
        named = {"FatCH3": 0.9, "FatCH2": 1.3}.get(name) or float(name.removeprefix("MM"))
        strongest = max(comp.peaks, key=lambda p: p.protons).shift_ppm
        centre = sum(p.shift_ppm * p.protons for p in comp.peaks) / comp.protons
        assert min(abs(strongest - named), abs(centre - named)) <= 0.05, name
        for p in comp.peaks:
            # broad lines: tens of Hz at 3 T (common practice)
            assert 0.05 <= p.fwhm_ppm <= 0.5 and p.protons > 0, name
    assert [p.shift_ppm for p in comps["MM0.94"].peaks] == [0.94, 0.88]


# ------------------------------------------------------------------- hash and bad files
def _copy_basis(tmp_path: Path) -> Path:
    folder = tmp_path / "basis"
    shutil.copytree(basis_dir(), folder)
    return folder


def test_definitions_hash_tracks_content(tmp_path: Path) -> None:
    folder = _copy_basis(tmp_path)
    original = definitions_hash()
    assert definitions_hash(folder) == original  # same content, other folder
    lac = folder / "lac.toml"
    lac.write_text(lac.read_text().replace("6.933", "6.930"))
    changed = definitions_hash(folder)
    assert changed != original
    assert load_metabolites(["Lac"], folder=folder)[0].couplings[0].j_hz == 6.930
    (folder / "macromolecules.toml").write_text(
        (folder / "macromolecules.toml").read_text() + "\n# comment\n"
    )
    assert definitions_hash(folder) != changed
    assert len(definitions_hash(folder)) == 64


GOOD = """name = "Xx"
source = "test"
[references]
book = "A textbook"
[[group]]
label = "A"
shift_ppm = 1.0
protons = 1
provenance = { status = "from memory", ref = "book", at = "p. 1" }
[[group]]
label = "B"
shift_ppm = 2.0
protons = 2
provenance = { status = "checked", ref = "book", at = "p. 2" }
[[coupling]]
groups = ["A", "B"]
j_hz = 7.0
provenance = { status = "derived", at = "mean of two" }
"""


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (GOOD.replace('name = "Xx"\n', ""), "missing key 'name'"),
        (GOOD.replace("shift_ppm = 2.0\n", ""), r"group 2 \(B\): missing key 'shift_ppm'"),
        (GOOD.replace('groups = ["A", "B"]', 'groups = ["A", "C"]'), "coupling 1"),
        (GOOD.replace('groups = ["A", "B"]', 'groups = ["A", "A"]'), "two different groups"),
        (GOOD + '[[coupling]]\ngroups = ["B", "A"]\nj_hz = 1.0\n', "coupled twice"),
        (GOOD.replace("protons = 2", "protons = 0"), "at least 1"),
        (GOOD.replace("protons = 2", "protons = 2.5"), "wrong type"),
        (GOOD.replace("protons = 2", "protons = 2\nfraction = 1.5"), "fraction"),
        (GOOD.replace("shift_ppm = 1.0", "shift_ppm = nan"), "finite"),
        (GOOD.replace("protons = 2", 'protons = 2\nfraction = 0.5\nfraction_provenance = '
                      '{ status = "common practice", at = "x" }'), "same fraction"),
        (GOOD.replace('name = "Xx"', 'name = "Xx"\nkind = "lipid"'), "kind"),
        (GOOD.replace("[[group]]", "[group]", 1), "not valid TOML"),
        ("name = [unclosed\n", "not valid TOML"),
        ('name = "Xx"\n', "no \\[\\[group\\]\\] entries"),
        (GOOD.replace('provenance = { status = "derived", at = "mean of two" }\n', ""),
         "coupling 1 .*missing 'provenance'"),
        (GOOD.replace('"from memory"', '"guessed"'), "status 'guessed' is not one of"),
        (GOOD.replace('ref = "book", at = "p. 1"', 'ref = "paper", at = "p. 1"'),
         "group 1 \\(A\\): reference 'paper' is not in \\[references\\]"),
        (GOOD.replace(', at = "p. 2"', ""), "needs 'ref'"),
        (GOOD.replace('at = "mean of two"', 'at = "x", page = "3"'), "unknown provenance keys"),
        (GOOD.replace("protons = 1\n", "protons = 1\nfraction = 1.0\n", 1),
         "A\\) fraction: missing"),
        (GOOD.replace('"checked", ref = "book", at = "p. 2"',
                      '"corroborated", ref = "book", at = "p. 2"'), "checked_against"),
        (GOOD.replace('source = "test"', 'source = "test"\nin_default_basis = 1'), "true or false"),
    ],
)
def test_malformed_metabolite_file(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "xx.toml"
    path.write_text(text)
    with pytest.raises(InvalidInputError, match=message) as info:
        load_metabolite(path)
    assert info.value.path == str(path)
    assert str(path) in str(info.value)
    # the same error through the folder reader
    with pytest.raises(InvalidInputError, match=message):
        load_metabolites(folder=tmp_path)


def test_good_file_and_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "xx.toml"
    path.write_text(GOOD)
    met = load_metabolite(path)
    assert met.protons == 3 and met.spin_systems()[0][1][0].j_hz == 7.0
    path.write_bytes(b'name = "\xff"\n')
    with pytest.raises(InvalidInputError, match="cannot read") as info:
        load_metabolite(path)
    assert info.value.path == str(path)


def test_duplicate_names_across_files(tmp_path: Path) -> None:
    (tmp_path / "one.toml").write_text(GOOD)
    (tmp_path / "two.toml").write_text(GOOD.replace('"Xx"', '"XX"'))
    with pytest.raises(InvalidInputError, match=r"also defined in .*one\.toml") as info:
        load_metabolites(folder=tmp_path)
    assert info.value.path == str(tmp_path / "two.toml")


MM_ONE = '[[component]]\nname = "M"\nshift_ppm = 1.0\n'
MM_PROV = (
    'provenance = { status = "common practice", at = "x" }\n'
    'shape_provenance = { status = "common practice", at = "y" }\n'
)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("[[component]]\nshift_ppm = 1.0\nfwhm_ppm = 0.1\nprotons = 1\n", "missing key 'name'"),
        (MM_ONE + "protons = 1\n" + MM_PROV, "missing key 'fwhm_ppm'"),
        (MM_ONE + "fwhm_ppm = 0\nprotons = 1\n" + MM_PROV, "> 0"),
        ((MM_ONE + "fwhm_ppm = 0.1\nprotons = 1\n" + MM_PROV) * 2, "repeated"),
        (MM_ONE + "fwhm_ppm = 0.1\nprotons = 1\n", "missing 'provenance'"),
        ("[[component]\n", "not valid TOML"),
        ("component = 3\n", "array of tables"),
    ],
)
def test_malformed_macromolecule_file(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "macromolecules.toml"
    path.write_text(text)
    with pytest.raises(InvalidInputError, match=message) as info:
        load_macromolecules(tmp_path)
    assert info.value.path == str(path)


def test_missing_macromolecule_file(tmp_path: Path) -> None:
    with pytest.raises(InvalidInputError, match="cannot read") as info:
        load_macromolecules(tmp_path)
    assert info.value.path == str(tmp_path / "macromolecules.toml")


def test_macromolecule_width_field_keeps_hz_above_it(tmp_path: Path) -> None:
    # A user file may set width_field_t: above that field each line keeps the width in Hz it
    # has there, at and below it the width in ppm (f0 from CODATA γ through larmor_mhz).
    path = tmp_path / "macromolecules.toml"
    path.write_text(
        'width_field_t = 3.0\nwidth_field_provenance = { status = "common practice", at = "z" }\n'
        + MM_ONE + "fwhm_ppm = 0.1\nprotons = 1\n" + MM_PROV
    )
    (comp,) = load_macromolecules(tmp_path)
    assert comp.fwhm_hz(larmor_mhz(7.0)) == pytest.approx((0.1 * larmor_mhz(3.0),))
    assert comp.fwhm_hz(larmor_mhz(1.5)) == pytest.approx((0.1 * larmor_mhz(1.5),))
    (bundled,) = [c for c in load_macromolecules() if c.name == "MM1.22"]
    assert bundled.width_field_t is None
    assert bundled.fwhm_hz(larmor_mhz(7.0)) == pytest.approx((0.072 * larmor_mhz(7.0),))
