"""Physical constants, the water constants of quantification, and the nucleus table.

The proton gyromagnetic ratio is the CODATA 2022 value as scipy.constants gives it, written out
so that reading a file does not import scipy (about 0.2 s of start-up);
``tests/test_constants.py`` checks it against ``scipy.constants.physical_constants``. The other
ratios are the usual tabulated values (from memory) and are only used to report the field
strength of files of nuclei that specproc does not process yet.

Water (see docs/quantification.md, "Which water constant"): the molal concentration of pure
water, 1000 / M(H2O) = 55.508 mol/kg, holds at any temperature and is what the molal
(per kg of tissue water) formula needs; the molar concentration, 55.138 mol/L at 37 °C
(IAPWS-95 density 993.33 kg/m3 at 0.101325 MPa), is what the molar (per litre of tissue)
formula needs when the tissue water contents are given relative to pure water at body
temperature. The two differ by 0.67 %.
"""

from __future__ import annotations

from dataclasses import dataclass

from specproc.errors import InvalidInputError
from specproc.provenance import Provenance

__all__ = [
    "NUCLEI",
    "PROTON_GAMMA_MHZ_PER_T",
    "SUPPORTED_NUCLEI",
    "TISSUE_WATER_CONTENT",
    "TISSUE_WATER_CONTENT_PROVENANCE",
    "WATER_CONSTANT_PROVENANCE",
    "WATER_DENSITY_37C_KG_PER_L",
    "WATER_MOLAL_MMOL_PER_KG",
    "WATER_MOLAR_37C_MM",
    "WATER_MOLAR_MASS_G_PER_MOL",
    "WATER_MOLAR_MM",
    "Nucleus",
    "field_from_larmor",
    "get_nucleus",
    "larmor_mhz",
]

#: Proton gyromagnetic ratio over 2π in MHz/T: CODATA 2022, scipy.constants.physical_constants
#: ["proton gyromag. ratio in MHz/T"] (checked against it in tests/test_constants.py).
PROTON_GAMMA_MHZ_PER_T: float = 42.577478461

#: Molar mass of H2O, g/mol (the value of the IAPWS-95 formulation, Wagner & Pruss 2002).
WATER_MOLAR_MASS_G_PER_MOL: float = 18.015268

#: Molal concentration of pure water, mmol per kg of water: 1e6 / M(H2O) = 55 508.4
#: (55.51 mol/kg, independent of temperature). The constant of the molal formula.
WATER_MOLAL_MMOL_PER_KG: float = 1.0e6 / WATER_MOLAR_MASS_G_PER_MOL

#: Density of pure liquid water at 37 °C and 0.101325 MPa, kg/L (IAPWS-95: 993.33 kg/m3;
#: tests/test_constants.py recomputes it with the ``iapws`` package).
WATER_DENSITY_37C_KG_PER_L: float = 0.993330

#: Molar concentration of pure water at 37 °C, mM (mmol/L): density / M(H2O) = 55 138 (55.14
#: mol/L). The constant of the molar formula (tissue water contents relative to pure water at
#: body temperature).
WATER_MOLAR_37C_MM: float = WATER_DENSITY_37C_KG_PER_L * WATER_MOLAL_MMOL_PER_KG

#: Former name of :data:`WATER_MOLAL_MMOL_PER_KG` (it was always the molal value, 55.51 mol/kg,
#: and not a molar concentration at 37 °C); kept so that existing callers keep working.
WATER_MOLAR_MM: float = WATER_MOLAL_MMOL_PER_KG

_IAPWS = (
    "Wagner W, Pruss A. The IAPWS formulation 1995 for the thermodynamic properties of ordinary "
    "water substance for general and scientific use. J Phys Chem Ref Data 2002;31:387-535"
)

#: Provenance of the two water concentrations.
WATER_CONSTANT_PROVENANCE: dict[str, Provenance] = {
    "molal": Provenance(
        status="checked", ref="iapws95", citation=_IAPWS,
        at="molar mass 18.015268 g/mol; 1000 / M = 55.5084 mol/kg",
    ),
    "molar_37c": Provenance(
        status="checked", ref="iapws95", citation=_IAPWS,
        at="density at 310.15 K, 0.101325 MPa: 993.33 kg/m3; / M = 55.138 mol/L",
        note="recomputed by tests/test_constants.py with the iapws package",
    ),
}

#: MR-visible water content of each compartment relative to pure water at body temperature
#: (CSF: the calibration of the method, about 100 % water). GM 0.837, WM 0.691 at 3 T in 21
#: healthy adults (Frontiers in Neurology 2019;10:1333, abstract). The values of Ernst et al.
#: 1993 used by Gasparovic et al. 2006, GM 0.78, WM 0.65, CSF 0.97 (from memory), give
#: concentrations about 7 % lower; set ``[quantify] water_content`` to use them.
TISSUE_WATER_CONTENT: dict[str, float] = {"gm": 0.837, "wm": 0.691, "csf": 1.0}

_WATER_CONTENT_STUDY = (
    "A single-scan, rapid whole-brain protocol for quantitative water content mapping with "
    "neurobiological implications. Front Neurol 2019;10:1333, doi:10.3389/fneur.2019.01333"
)
_WATER_CONTENT_NOTE = (
    "3 T, 21 healthy adults, long-TR multi-echo gradient echo calibrated to CSF; published "
    "range across methods: GM 0.78-0.84, WM 0.65-0.69, CSF 0.97-1.0 (Ernst T, Kreis R, Ross BD. "
    "J Magn Reson B 1993;102:1-8: 0.78 / 0.65 / 0.97, from memory)"
)

#: Provenance of :data:`TISSUE_WATER_CONTENT`.
TISSUE_WATER_CONTENT_PROVENANCE: dict[str, Provenance] = {
    "gm": Provenance("checked", "fneur2019", _WATER_CONTENT_STUDY,
                     "abstract: grey matter 83.7 % (SD 1.2 %)", _WATER_CONTENT_NOTE),
    "wm": Provenance("checked", "fneur2019", _WATER_CONTENT_STUDY,
                     "abstract: white matter 69.1 % (SD 1.7 %)", _WATER_CONTENT_NOTE),
    "csf": Provenance("checked", "fneur2019", _WATER_CONTENT_STUDY,
                      "abstract: calibration with CSF of about 100 % water content",
                      _WATER_CONTENT_NOTE),
}


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
