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
