"""ON, OFF and DIFF basis sets of a MEGA-PRESS protocol.

ON and OFF are simulated with the scan's editing pulses (shaped, frequency-selective, with J
evolution during them; :mod:`specproc.spins.editing`); DIFF is their difference, member by
member, so the editing efficiency of each multiplet is inside its DIFF shape. DIFF also has one
member that no spin system gives: the macromolecule signal at 3.0 ppm that is co-edited with
GABA at 3 T because its coupling partner at 1.7 ppm lies inside the ON pulse's band
(co-edited "GABA+" signal; Mullins et al., NeuroImage 2014;86:43-52). It is a Gaussian line of
our own parametrisation (``MM3.00co``: 3.00 ppm, FWHM 0.10 ppm, from memory).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from threadpoolctl import threadpool_limits

from specproc.basis import BasisSet, simulate_basis
from specproc.spins.editing import EditPulse
from specproc.spins.simulate import LineList, synthesize_fid

__all__ = [
    "CO_EDITED_MM",
    "DIFF_MEMBERS",
    "EditedBasis",
    "simulate_edited_basis",
]

#: Members of the DIFF fit: the metabolites with edited multiplets between 2.6 and 4.2 ppm.
DIFF_MEMBERS: tuple[str, ...] = ("GABA", "Glu", "Gln", "GSH", "NAA", "NAAG")
#: The co-edited macromolecule member of DIFF: (name, shift ppm, FWHM ppm).
CO_EDITED_MM: tuple[str, float, float] = ("MM3.00co", 3.00, 0.10)


@dataclass(frozen=True)
class EditedBasis:
    """The three basis sets of one edited protocol.

    Attributes
    ----------
    on, off : BasisSet
        Sub-spectrum bases (the usual metabolites, and in ``off`` the macromolecule members:
        their signal is still present under creatine at TE 68 ms; ``off`` is fitted to the OFF
        spectrum).
    diff : BasisSet
        ``on − off`` of :data:`DIFF_MEMBERS` plus the co-edited macromolecule member.
    edit_on, edit_off : EditPulse
        The editing pulses simulated.
    """

    on: BasisSet
    off: BasisSet
    diff: BasisSet
    edit_on: EditPulse
    edit_off: EditPulse

    def describe(self) -> dict[str, Any]:
        """Plain values for fit.json."""
        return {"members_diff": list(self.diff.names), "edit_on": self.edit_on.describe(),
                "edit_off": self.edit_off.describe(), "timings_s": dict(self.diff.timings_s)}


def _co_edited_fid(basis: BasisSet) -> np.ndarray:
    _name, shift_ppm, fwhm_ppm = CO_EDITED_MM
    mhz = basis.spectrometer_mhz
    lines = LineList(np.array([(shift_ppm - basis.centre_ppm) * mhz]),
                     np.array([2.0 + 0j]), np.array([fwhm_ppm * mhz]))
    return synthesize_fid(lines, dwell_s=basis.dwell_s, n_points=basis.n_points)


def simulate_edited_basis(
    *,
    field_t: float,
    te_s: float,
    dwell_s: float,
    n_points: int,
    edit_on: EditPulse,
    edit_off: EditPulse,
    te1_s: float | None = None,
    centre_ppm: float = 4.65,
    metabolites: list[str] | None = None,
    cache: bool = True,
) -> EditedBasis:
    """Simulate (or fetch from the cache) the ON, OFF and DIFF bases of a MEGA-PRESS scan.

    Parameters
    ----------
    field_t : float
        Field strength, T.
    te_s, te1_s : float
        Echo time and PRESS first echo time (default TE/2), s.
    dwell_s : float
        Sampling interval, s.
    n_points : int
        Points of the FIDs.
    edit_on, edit_off : EditPulse
        Editing pulses of the two conditions.
    centre_ppm : float, optional
        Shift at the receiver centre, ppm.
    metabolites : list of str, optional
        Members of ON and OFF (default: every metabolite definition); the DIFF members must be
        among them.
    cache : bool, optional
        Use the basis cache.

    Returns
    -------
    EditedBasis
    """
    common: dict[str, Any] = {
        "sequence": "press", "field_t": field_t, "te_s": te_s, "te1_s": te1_s,
        "dwell_s": dwell_s, "n_points": n_points, "centre_ppm": centre_ppm,
        "metabolites": metabolites, "cache": cache,
    }
    # the simulation is dense linear algebra on small matrices: one BLAS thread is fastest
    with threadpool_limits(1):
        on = simulate_basis(edit=edit_on, **common)
        off = simulate_basis(edit=edit_off, macromolecules=True, **common)
    members = [m for m in DIFF_MEMBERS if m in on.names]
    fids = [on.fids[on.index(m)] - off.fids[off.index(m)] for m in members]
    fids.append(_co_edited_fid(on))
    diff = BasisSet(
        names=(*members, CO_EDITED_MM[0]),
        fids=np.array(fids),
        dwell_s=on.dwell_s,
        spectrometer_mhz=on.spectrometer_mhz,
        centre_ppm=on.centre_ppm,
        protons=(*[on.protons[on.index(m)] for m in members], 2.0),
        kinds=(*["metabolite"] * len(members), "macromolecule"),
        sequence="mega-press (DIFF)",
        timings_s=dict(on.timings_s),
        definitions_hash=on.definitions_hash,
        version=on.version,
        metadata={"field_t": field_t, "edit_on": edit_on.describe(),
                  "edit_off": edit_off.describe(), "co_edited_mm": list(CO_EDITED_MM)},
    )
    return EditedBasis(on=on, off=off, diff=diff, edit_on=edit_on, edit_off=edit_off)
