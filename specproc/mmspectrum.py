"""A measured macromolecule spectrum as one basis member.

In vivo the macromolecule (MM) signals under the metabolites of a short-TE spectrum are
usually measured with metabolite nulling (an inversion recovery, often a double inversion,
that nulls the long-T1 metabolites and keeps the short-T1 macromolecules), averaged over a
cohort, and fitted as **one** basis member in place of parametrised MM components: the
recommendation of the experts' consensus (Cudalbu C, et al. Contribution of macromolecules to
brain 1H MR spectra: experts' consensus recommendations. NMR Biomed 2021;34:e4393).

This module reads such a spectrum, checks that it belongs to the scan, resamples it to the
scan's grid and puts it into a :class:`~specproc.basis.BasisSet`:

* :func:`load_mm_spectrum` reads one FID (any format :func:`specproc.io.load` reads, e.g.
  NIfTI-MRS), coil-combined and averaged: a file with more than one FID is refused.
* :func:`check_mm_spectrum` refuses a spectrum of another nucleus, of a field strength more
  than :data:`specproc.protocol.FIELD_TOLERANCE` away, or of an echo time more than
  :data:`TE_TOLERANCE_S` away from the scan's (one error line naming the file).
* :func:`resample_mm_fid` puts the FID on the scan's dwell time, number of points, receiver
  centre and spectrometer frequency (details there).
* :func:`with_measured_mm` replaces the parametrised MM components of a basis by the measured
  member :data:`MM_MEMBER` (kind ``"macromolecule"``, so that the fit gives it the small free
  shift and the broadening of the other macromolecule members), keeping the lipid components
  (:data:`LIPID_PATTERNS`) only when asked.

Normalisation: the member is scaled so that its first point is 1 with zero phase. The first
point of an FID is the integral of its spectrum, so the fitted amplitude is the area of the
whole MM spectrum in units of a one-proton singlet (the basis unit), and its zero-order phase
is taken to be the one that makes that area real and positive (a spectrum phased as usual).
"""

from __future__ import annotations

import fnmatch
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError
from specproc.protocol import FIELD_TOLERANCE, MM_MEMBER

__all__ = [
    "LIPID_PATTERNS",
    "MM_MEMBER",
    "MODEL_ORDER",
    "TE_TOLERANCE_S",
    "MeasuredMM",
    "check_mm_spectrum",
    "load_mm_spectrum",
    "resample_mm_fid",
    "with_measured_mm",
]

#: Basis members that are lipids, not macromolecules (kept beside a measured spectrum only when
#: asked: ``[protocol] mm_keep_lipids``).
LIPID_PATTERNS: tuple[str, ...] = ("Fat*",)

#: Largest difference of echo time between the MM spectrum and the scan, s. With MM T2 of
#: 20-40 ms (from memory; Cudalbu et al. 2021) a 5 ms difference changes the sizes of the MM
#: peaks relative to each other by about 5 % (exp(-5 ms (1/25 - 1/35 ms⁻¹))), within what a
#: cohort average varies (this project's choice).
TE_TOLERANCE_S = 0.005

#: HLSVD model order of the resampling to another dwell time (see :func:`resample_mm_fid`).
MODEL_ORDER = 40

#: Samples used by that HLSVD (the MM signals have decayed long before).
_FIT_POINTS = 1024


@dataclass(frozen=True)
class MeasuredMM:
    """A measured macromolecule spectrum (one FID) and where it came from.

    Attributes
    ----------
    fid : (n,) complex ndarray
        The FID as read.
    dwell_s, spectrometer_mhz, centre_ppm : float
        Its sampling interval (s), spectrometer frequency (MHz) and receiver centre (ppm).
    te_s : float or None
        Its echo time, s.
    nucleus : str
        Its nucleus.
    path : str
        The file.
    sha256 : str
        Content hash of the file.
    """

    fid: np.ndarray
    dwell_s: float
    spectrometer_mhz: float
    centre_ppm: float
    te_s: float | None
    nucleus: str
    path: str
    sha256: str

    @property
    def name(self) -> str:
        """The file name (no folder)."""
        return Path(self.path).name

    def record(self) -> dict[str, Any]:
        """Plain dict for results: file name, SHA-256, TE, field (no absolute path)."""
        return {"file": self.name, "sha256": self.sha256,
                "te_s": self.te_s, "spectrometer_mhz": self.spectrometer_mhz}


def load_mm_spectrum(path: str | os.PathLike[str], *, sha256: str | None = None) -> MeasuredMM:
    """Read a measured MM spectrum: one coil-combined, averaged FID.

    Parameters
    ----------
    path : path
        Any format :func:`specproc.io.load` reads (NIfTI-MRS for example).
    sha256 : str, optional
        The content hash the file must have (a file changed since it was first read is
        refused).

    Raises
    ------
    InvalidInputError
        For a missing or unreadable file, more than one FID, data without signal
        (:func:`specproc.sanity.check_signal`), a first point of zero, or a changed file; the
        message names the file and says that it is the MM spectrum.
    """
    from specproc._hash import file_sha256
    from specproc.io import load
    from specproc.sanity import check_signal

    p = Path(path)
    if not p.is_file():
        raise InvalidInputError("the macromolecule spectrum file does not exist", p)
    try:
        scan = load(p)
        check_signal(scan)
    except InvalidInputError as exc:
        raise InvalidInputError(f"macromolecule spectrum: {exc.message}", p) from None
    data = np.asarray(scan.data)
    if data.ndim > 1 and int(np.prod(data.shape[:-1])) > 1:
        dims = ", ".join(f"{tag} {size}" for tag, size in scan.extra_shape.items())
        raise InvalidInputError(
            f"the macromolecule spectrum holds {int(np.prod(data.shape[:-1]))} FIDs ({dims}); "
            "give one coil-combined, averaged FID", p)
    fid = data.reshape(-1).astype(np.complex128)
    if not abs(fid[0]) > 1e-6 * float(np.max(np.abs(fid))):
        raise InvalidInputError(
            "the macromolecule spectrum's first point is zero: it is not an FID starting at "
            "the echo (remove leading points or a dead time)", p)
    digest = file_sha256(p) or ""
    if sha256 is not None and digest != sha256:
        raise InvalidInputError(
            "the macromolecule spectrum file changed since its protocol was resolved", p)
    return MeasuredMM(fid=fid, dwell_s=float(scan.dwell_s),
                      spectrometer_mhz=float(scan.spectrometer_mhz),
                      centre_ppm=float(scan.reference_ppm), te_s=scan.te_s,
                      nucleus=str(scan.nucleus), path=str(p), sha256=digest)


def check_mm_spectrum(mm: MeasuredMM, *, spectrometer_mhz: float, te_s: float | None,
                      nucleus: str) -> None:
    """Refuse an MM spectrum that does not belong to a scan of this nucleus, field and TE.

    Raises
    ------
    InvalidInputError
        One line naming the MM file: another nucleus; a spectrometer frequency more than
        :data:`specproc.protocol.FIELD_TOLERANCE` away; no echo time in the file; or an echo
        time more than :data:`TE_TOLERANCE_S` away from ``te_s``.
    """
    if mm.nucleus.strip().lower() != str(nucleus).strip().lower():
        raise InvalidInputError(
            f"the macromolecule spectrum is of {mm.nucleus}, the scan of {nucleus}", mm.path)
    if abs(mm.spectrometer_mhz / float(spectrometer_mhz) - 1.0) > FIELD_TOLERANCE:
        raise InvalidInputError(
            f"the macromolecule spectrum was acquired at {mm.spectrometer_mhz:.2f} MHz, the scan "
            f"at {spectrometer_mhz:.2f} MHz (more than {FIELD_TOLERANCE:.0%} apart)", mm.path)
    if te_s is None:
        return
    if mm.te_s is None:
        raise InvalidInputError(
            "the macromolecule spectrum does not give its echo time (NIfTI-MRS EchoTime); it "
            "must be acquired at the scan's TE", mm.path)
    if abs(mm.te_s - float(te_s)) > TE_TOLERANCE_S:
        raise InvalidInputError(
            f"the macromolecule spectrum was acquired at TE {mm.te_s * 1e3:g} ms, the scan at "
            f"TE {float(te_s) * 1e3:g} ms (more than {TE_TOLERANCE_S * 1e3:g} ms apart)",
            mm.path)


def resample_mm_fid(
    fid: np.ndarray, *, dwell_s: float, spectrometer_mhz: float, centre_ppm: float,
    to_dwell_s: float, to_n_points: int, to_spectrometer_mhz: float, to_centre_ppm: float,
    model_order: int = MODEL_ORDER,
) -> np.ndarray:
    """An FID moved to another sampling grid, spectrometer frequency and receiver centre.

    * A line at shift δ keeps its shift in ppm: with another spectrometer frequency the time
      axis is scaled by ``spectrometer_mhz / to_spectrometer_mhz`` (a line at δ evolves as
      ``exp(-2πi (δ - centre) MHz t)``), so the input counts as sampled every
      ``dwell_s · spectrometer_mhz / to_spectrometer_mhz`` (widths in Hz scale alike).
    * Equal (effective) dwell times: the samples are taken as they are, cut or followed by
      zeros to ``to_n_points`` (exact).
    * Other dwell times: the FID is split into a sum of ``model_order`` damped sinusoids found
      by HLSVD (Pijnappel et al., J Magn Reson 1992;97:122; :func:`specproc.preprocess.water.
      hlsvd`), evaluated exactly at the new times, plus the remainder (noise and what the model
      misses), which is evaluated by trigonometric interpolation of its samples (zero after the
      end of the input). A sum of Lorentzian lines is thus moved exactly; for other shapes the
      remainder is small, and so is the ringing of its interpolation near t = 0.
    * A new receiver centre multiplies by ``exp(-2πi (centre - to_centre) MHz t)``.

    Returns
    -------
    (to_n_points,) complex ndarray
    """
    from specproc.basis import _trig_interpolate

    fid = np.asarray(fid, dtype=np.complex128).reshape(-1)
    n_in = fid.size
    n_out = int(to_n_points)
    effective_dwell = float(dwell_s) * float(spectrometer_mhz) / float(to_spectrometer_mhz)
    t = np.arange(n_out) * float(to_dwell_s)
    if abs(effective_dwell - to_dwell_s) <= 1e-9 * to_dwell_s:
        out = np.zeros(n_out, dtype=np.complex128)
        m = min(n_in, n_out)
        out[:m] = fid[:m]
    else:
        from specproc.preprocess.water import DampedSinusoids, damped_sinusoids_fid, hlsvd

        fit_points = min(n_in, _FIT_POINTS)
        order = max(1, min(int(model_order), fit_points // 2 - 2))
        comps = hlsvd(fid, dwell_s=effective_dwell, model_order=order,
                      fit_points=fit_points)
        keep = np.asarray(comps.lw_hz) > 0  # decaying components only
        decaying = DampedSinusoids(freq_hz=np.asarray(comps.freq_hz)[keep],
                                   lw_hz=np.asarray(comps.lw_hz)[keep],
                                   amplitude=np.asarray(comps.amplitude, dtype=complex)[keep])
        remainder = fid - damped_sinusoids_fid(decaying, n_points=n_in, dwell_s=effective_dwell)
        out = (damped_sinusoids_fid(decaying, n_points=n_out, dwell_s=float(to_dwell_s))
               + _trig_interpolate(remainder[None, :], effective_dwell, t)[0])
    delta_hz = (float(centre_ppm) - float(to_centre_ppm)) * float(to_spectrometer_mhz)
    return out * np.exp(-2j * np.pi * delta_hz * t)


def _is_lipid(name: str) -> bool:
    return any(fnmatch.fnmatchcase(name.lower(), p.lower()) for p in LIPID_PATTERNS)


def with_measured_mm(basis: Any, mm: MeasuredMM, *, keep_lipids: bool = False) -> Any:
    """The basis with its macromolecule members replaced by the measured spectrum.

    Parameters
    ----------
    basis : BasisSet
        A basis of the scan's protocol (its grid, spectrometer frequency and centre are the
        measured member's).
    mm : MeasuredMM
        The measured spectrum (checked with :func:`check_mm_spectrum` beforehand).
    keep_lipids : bool
        Keep the lipid components (:data:`LIPID_PATTERNS`) of the basis; default: every member
        of kind ``"macromolecule"`` is dropped (a measured spectrum of healthy brain holds the
        0.9 and 1.3 ppm signals itself; lipids are for voxels with lipid contamination).

    Returns
    -------
    BasisSet
        The kept members, then :data:`MM_MEMBER` (kind ``"macromolecule"``, 1 proton, first
        point 1, no line list); its metadata record the MM model (``mm_model``) and a cache
        key that includes the file's hash.
    """
    from specproc._hash import json_sha256
    from specproc.basis import BasisSet

    keep = [i for i, (name, kind) in enumerate(zip(basis.names, basis.kinds, strict=True))
            if kind != "macromolecule" or (keep_lipids and _is_lipid(name))]
    if MM_MEMBER.lower() in (basis.names[i].lower() for i in keep):
        raise InvalidInputError(f"the basis already has a member {MM_MEMBER!r}")
    fid = resample_mm_fid(
        mm.fid, dwell_s=mm.dwell_s, spectrometer_mhz=mm.spectrometer_mhz,
        centre_ppm=mm.centre_ppm, to_dwell_s=basis.dwell_s, to_n_points=basis.n_points,
        to_spectrometer_mhz=basis.spectrometer_mhz, to_centre_ppm=basis.centre_ppm)
    fid = fid / fid[0]  # first point 1: unit area, zero-order phase of a positive area
    lines = None if basis.lines is None else (*(basis.lines[i] for i in keep), None)
    record = {"model": "measured", **mm.record(), "lipids_kept": bool(keep_lipids)}
    meta = dict(basis.metadata)
    meta["mm_model"] = record
    meta["cache_key"] = json_sha256({"simulated": meta.get("cache_key"), "mm": record})
    return BasisSet(
        names=(*(basis.names[i] for i in keep), MM_MEMBER),
        fids=np.vstack([np.asarray(basis.fids)[keep], fid[None, :]]),
        dwell_s=basis.dwell_s, spectrometer_mhz=basis.spectrometer_mhz,
        centre_ppm=basis.centre_ppm,
        protons=(*(basis.protons[i] for i in keep), 1.0),
        kinds=(*(basis.kinds[i] for i in keep), "macromolecule"),
        sequence=basis.sequence, timings_s=dict(basis.timings_s),
        definitions_hash=basis.definitions_hash, version=basis.version, metadata=meta,
        lines=lines,
    )
