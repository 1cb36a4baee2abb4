"""Physical constants and the nucleus table.

The proton gyromagnetic ratio is the CODATA 2022 value as scipy.constants gives it, written out
so that reading a file does not import scipy (about 0.2 s of start-up);
``tests/test_constants.py`` checks it against ``scipy.constants.physical_constants``. The other
ratios are the usual tabulated values (from memory) and are only used to report the field
strength of files of nuclei that specproc does not process yet.
"""

from __future__ import annotations

from dataclasses import dataclass

from specproc.errors import InvalidInputError

__all__ = [
    "NUCLEI",
    "PROTON_GAMMA_MHZ_PER_T",
    "SUPPORTED_NUCLEI",
    "WATER_MOLAR_MM",
    "Nucleus",
    "field_from_larmor",
    "get_nucleus",
    "larmor_mhz",
]

#: Proton gyromagnetic ratio over 2π in MHz/T: CODATA 2022, scipy.constants.physical_constants
#: ["proton gyromag. ratio in MHz/T"] (checked against it in tests/test_constants.py).
PROTON_GAMMA_MHZ_PER_T: float = 42.577478461

#: Molar concentration of pure water in mM (55.51 mol/L at 37 °C; common practice).
WATER_MOLAR_MM: float = 55_510.0


@dataclass(frozen=True)
class Nucleus:
    """A nucleus: its label, gyromagnetic ratio over 2π and default receiver-centre shift.

    Attributes
    ----------
    label : str
        NIfTI-MRS ``ResonantNucleus`` label, e.g. ``"1H"``.
    gamma_mhz_per_t : float
        Gyromagnetic ratio over 2π, MHz/T.
    centre_ppm : float
        Chemical shift assumed at the receiver (centre) frequency when a file does not say;
        4.65 ppm (water at body temperature) for 1H, common practice.
    """

    label: str
    gamma_mhz_per_t: float
    centre_ppm: float


NUCLEI: dict[str, Nucleus] = {
    "1H": Nucleus("1H", PROTON_GAMMA_MHZ_PER_T, 4.65),
    # from memory (tabulated values), used only to report the field of such files:
    "2H": Nucleus("2H", 6.536, 4.65),
    "13C": Nucleus("13C", 10.7084, 0.0),
    "19F": Nucleus("19F", 40.078, 0.0),
    "31P": Nucleus("31P", 17.235, 0.0),
}

#: Nuclei whose data specproc processes.
SUPPORTED_NUCLEI: frozenset[str] = frozenset({"1H"})


def get_nucleus(label: str) -> Nucleus:
    """Return the :class:`Nucleus` for a label such as ``"1H"`` (also accepts ``"H1"``).

    Raises
    ------
    InvalidInputError
        If the nucleus is unknown.
    """
    text = str(label).strip()
    if text in NUCLEI:
        return NUCLEI[text]
    # accept "H1", "h1", "1h"
    digits = "".join(ch for ch in text if ch.isdigit())
    letters = "".join(ch for ch in text if ch.isalpha())
    key = f"{digits}{letters[:1].upper()}{letters[1:].lower()}"
    if key in NUCLEI:
        return NUCLEI[key]
    raise InvalidInputError(f"unknown nucleus {label!r}; known: {', '.join(sorted(NUCLEI))}")


def larmor_mhz(field_t: float, nucleus: str = "1H") -> float:
    """Larmor frequency f = (γ/2π)·B0 in MHz for a field in tesla."""
    return get_nucleus(nucleus).gamma_mhz_per_t * float(field_t)


def field_from_larmor(spectrometer_mhz: float, nucleus: str = "1H") -> float:
    """Field strength in tesla from a spectrometer frequency in MHz: B0 = f / (γ/2π)."""
    return float(spectrometer_mhz) / get_nucleus(nucleus).gamma_mhz_per_t
