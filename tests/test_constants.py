"""Physical constants and the nucleus table, checked against CODATA via scipy.constants."""

from __future__ import annotations

import math

import pytest
from scipy import constants

from specproc import InvalidInputError
from specproc.constants import (
    NUCLEI,
    PROTON_GAMMA_MHZ_PER_T,
    SUPPORTED_NUCLEI,
    field_from_larmor,
    get_nucleus,
    larmor_mhz,
)


def test_proton_gyromagnetic_ratio_is_codata():
    # CODATA proton gyromagnetic ratio γp (rad s^-1 T^-1) via scipy.constants, over 2π in MHz/T
    gamma_rad = constants.physical_constants["proton gyromag. ratio"][0]
    assert PROTON_GAMMA_MHZ_PER_T == pytest.approx(gamma_rad / (2 * math.pi) / 1e6, rel=1e-9)
    assert PROTON_GAMMA_MHZ_PER_T == pytest.approx(42.577, abs=5e-4)  # CODATA 2018: 42.577 478
    # the written-out value is scipy's own, to its last digit
    codata_mhz = constants.physical_constants["proton gyromag. ratio in MHz/T"]
    assert PROTON_GAMMA_MHZ_PER_T == pytest.approx(codata_mhz[0], abs=codata_mhz[2])


def test_larmor_frequencies():
    # issue 2 / CODATA: 3 T gives 127.7 MHz, 1.5 T about 63.9 MHz
    assert round(larmor_mhz(3.0), 1) == 127.7
    assert larmor_mhz(1.5) == pytest.approx(63.9, abs=0.05)
    assert larmor_mhz(7.0) == pytest.approx(298.0, abs=0.1)  # 7 x 42.577 = 298.04
    # common practice: roughly 42 MHz per tesla
    for field_t in (1.5, 3.0, 7.0):
        assert larmor_mhz(field_t) / field_t == pytest.approx(42.0, rel=0.02)


def test_field_from_larmor_inverts():
    for field_t in (0.5, 1.5, 2.894, 3.0, 9.4):
        assert field_from_larmor(larmor_mhz(field_t)) == pytest.approx(field_t, rel=1e-12)
    # 123.2 MHz is the nominal "3 T" of one vendor's 2.89 T magnets (from memory)
    assert field_from_larmor(123.2) == pytest.approx(2.894, abs=1e-3)


def test_nucleus_table():
    assert get_nucleus("1H").label == "1H"
    assert get_nucleus("H1").label == "1H" and get_nucleus("1h").label == "1H"
    assert get_nucleus("1H").centre_ppm == 4.65  # common practice for 1H
    # 31P γ/2π 17.235 MHz/T (tabulated value, from memory): 3 T gives about 51.7 MHz
    assert larmor_mhz(3.0, "31P") == pytest.approx(51.7, abs=0.05)
    assert set(NUCLEI) >= {"1H", "31P", "13C"}
    assert frozenset({"1H"}) == SUPPORTED_NUCLEI
    with pytest.raises(InvalidInputError, match="unknown nucleus"):
        get_nucleus("99Xx")


# ------------------------------------------------------------------ water (quantification)
def test_water_molal_concentration_from_the_molar_mass():
    # 1000 g / M(H2O): IAPWS-95 molar mass 18.015268 g/mol (Wagner & Pruss 2002); the same to
    # 5 digits from IUPAC standard atomic weights 2 x 1.00794 + 15.9994 = 18.01528 (from memory)
    from specproc.constants import WATER_MOLAL_MMOL_PER_KG, WATER_MOLAR_MM

    assert WATER_MOLAL_MMOL_PER_KG == pytest.approx(1.0e6 / 18.015268, rel=1e-12)
    assert WATER_MOLAL_MMOL_PER_KG == pytest.approx(1.0e6 / (2 * 1.00794 + 15.9994), rel=1e-5)
    assert round(WATER_MOLAL_MMOL_PER_KG / 1000, 2) == 55.51
    assert WATER_MOLAR_MM == WATER_MOLAL_MMOL_PER_KG  # the former name is the molal value


def test_water_molar_concentration_at_37c_is_iapws95():
    # IAPWS-95 density of liquid water at 310.15 K and 0.101325 MPa through the iapws package
    # (an independent implementation of the formulation), divided by the molar mass
    from iapws import IAPWS95

    from specproc.constants import (
        WATER_DENSITY_37C_KG_PER_L,
        WATER_MOLAR_37C_MM,
        WATER_MOLAR_MASS_G_PER_MOL,
    )

    rho_kg_m3 = IAPWS95(T=310.15, P=0.101325).rho
    assert WATER_DENSITY_37C_KG_PER_L * 1000 == pytest.approx(rho_kg_m3, abs=0.01)
    assert WATER_MOLAR_37C_MM == pytest.approx(rho_kg_m3 / WATER_MOLAR_MASS_G_PER_MOL * 1000,
                                               rel=2e-5)
    assert round(WATER_MOLAR_37C_MM / 1000, 2) == 55.14
    # and 25 C gives about 55.35 mol/L (tests/REFERENCES.md): water is denser when colder
    assert IAPWS95(T=298.15, P=0.101325).rho / WATER_MOLAR_MASS_G_PER_MOL == pytest.approx(
        55.35, abs=0.01)


def test_tissue_water_contents_pinned_with_their_provenance():
    # Front Neurol 2019;10:1333 (abstract, checked): GM 83.7 %, WM 69.1 %, calibrated to CSF
    # of about 100 % water
    from specproc.constants import TISSUE_WATER_CONTENT, TISSUE_WATER_CONTENT_PROVENANCE

    assert TISSUE_WATER_CONTENT == {"gm": 0.837, "wm": 0.691, "csf": 1.0}
    for tissue, prov in TISSUE_WATER_CONTENT_PROVENANCE.items():
        assert tissue in TISSUE_WATER_CONTENT
        assert prov.status == "checked" and "1333" in prov.citation and prov.at
        assert "0.78" in prov.note  # the range and the other commonly used values are stated
