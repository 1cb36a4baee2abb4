"""BasisSet: simulated metabolite signals for one protocol (field, sequence, timings).

The FIDs follow the NIfTI-MRS sign convention of :class:`specproc.data.Scan`: a singlet at shift
δ of N protons is ``N · exp(-2πi (δ - centre_ppm) · spectrometer_mhz · t)``, so amplitudes are
proportional to concentration × protons. No relaxation is included.

(Simulation, save/load, resampling and the cache are built in issue 3; the fields below are the
interface the fitter relies on.)
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc.constants import field_from_larmor
from specproc.errors import InvalidInputError

__all__ = ["BasisSet"]


@dataclass(frozen=True, eq=False)
class BasisSet:
    """Basis signals of one protocol.

    Attributes
    ----------
    names : tuple of str
        Member names (``"NAA"``, ``"Cr"``, ``"MM0.94"`` ...), unique.
    fids : (n_members, n_points) complex ndarray
        Time-domain signals sampled at ``t_n = n · dwell_s``; read-only.
    dwell_s : float
        Sampling interval, s.
    spectrometer_mhz : float
        Spectrometer frequency, MHz.
    centre_ppm : float
        Chemical shift at the receiver centre, ppm.
    protons : tuple of float
        Number of protons of each member (the normalisation).
    kinds : tuple of str
        ``"metabolite"``, ``"macromolecule"`` or ``"water"`` for each member.
    sequence : str
        Sequence name (``"press"``, ``"steam"`` ...).
    timings_s : mapping of str to float
        Sequence timings in seconds (``te_s``, ``te1_s``, ``te2_s``, ``tm_s`` ...).
    definitions_hash : str
        Content hash of the metabolite definition files used.
    version : str
        specproc version that simulated the set.
    metadata : mapping
        Anything else worth keeping (JSON-serialisable).
    """

    names: tuple[str, ...]
    fids: np.ndarray
    dwell_s: float
    spectrometer_mhz: float
    centre_ppm: float = 4.65
    protons: tuple[float, ...] = ()
    kinds: tuple[str, ...] = ()
    sequence: str = "unknown"
    timings_s: Mapping[str, float] = field(default_factory=dict)
    definitions_hash: str = ""
    version: str = ""
    metadata: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        fids = np.array(self.fids, dtype=np.complex128, copy=True)
        names = tuple(str(n) for n in self.names)
        if fids.ndim != 2 or fids.shape[0] != len(names) or fids.shape[1] == 0:
            raise InvalidInputError(
                f"basis FIDs of shape {fids.shape} do not match {len(names)} names"
            )
        if len(set(names)) != len(names):
            raise InvalidInputError(f"repeated basis member names in {list(names)}")
        if not np.all(np.isfinite(fids)):
            raise InvalidInputError("basis FIDs contain NaN or infinite samples")
        protons = tuple(float(p) for p in self.protons) or (1.0,) * len(names)
        kinds = tuple(str(k) for k in self.kinds) or ("metabolite",) * len(names)
        if len(protons) != len(names) or len(kinds) != len(names):
            raise InvalidInputError("basis protons/kinds do not match the member names")
        fids.flags.writeable = False
        object.__setattr__(self, "fids", fids)
        object.__setattr__(self, "names", names)
        object.__setattr__(self, "protons", protons)
        object.__setattr__(self, "kinds", kinds)
        object.__setattr__(self, "dwell_s", float(self.dwell_s))
        object.__setattr__(self, "spectrometer_mhz", float(self.spectrometer_mhz))
        object.__setattr__(self, "centre_ppm", float(self.centre_ppm))
        object.__setattr__(self, "timings_s", {k: float(v) for k, v in self.timings_s.items()})

    @property
    def n_points(self) -> int:
        """Number of time-domain points."""
        return int(self.fids.shape[1])

    @property
    def field_t(self) -> float:
        """Field strength, T."""
        return field_from_larmor(self.spectrometer_mhz)

    def index(self, name: str) -> int:
        """Position of member ``name`` (case-insensitive)."""
        lowered = [n.lower() for n in self.names]
        try:
            return lowered.index(name.lower())
        except ValueError:
            raise InvalidInputError(
                f"no basis member {name!r}; members: {', '.join(self.names)}"
            ) from None

    def time_s(self) -> np.ndarray:
        """Sample times, s."""
        return np.arange(self.n_points) * self.dwell_s
