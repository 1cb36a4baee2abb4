"""BasisSet: simulated metabolite signals for one protocol (field, sequence, timings).

The FIDs follow the NIfTI-MRS sign convention of :class:`specproc.data.Scan`: a singlet at shift
δ of N protons is ``N · exp(-2πi (δ - centre_ppm) · spectrometer_mhz · t)``, so amplitudes are
proportional to concentration × protons. No relaxation is included.

* :func:`simulate_basis` simulates a set with the density-matrix engine of
  :mod:`specproc.spins` (metabolites) and Gaussian lines (macromolecules), and caches it;
  :func:`basis_for_scan` takes the field, sequence, timings, dwell and length from a Scan.
* A simulated set keeps, besides the FIDs, the exact line list of every member
  (:class:`~specproc.spins.simulate.LineList`), so :meth:`BasisSet.resample` re-synthesises
  exactly; sets without line lists are resampled by trigonometric (band-limited) interpolation.

File format (:meth:`BasisSet.save` / :meth:`BasisSet.load`)
-----------------------------------------------------------
One NumPy ``.npz`` archive (a zip of ``.npy`` arrays; read with ``allow_pickle=False``, so no
code is ever executed on load), self-describing:

``metadata``
    0-d unicode array holding UTF-8 JSON: ``format = "specproc-basis"``, ``format_version``,
    ``names``, ``dwell_s``, ``spectrometer_mhz``, ``centre_ppm``, ``protons``, ``kinds``,
    ``sequence``, ``timings_s``, ``definitions_hash``, ``version``, ``metadata``.
``fids``
    (n_members, n_points) complex128.
``has_lines``
    (n_members,) bool: whether the member carries a line list.
``line_member``, ``line_freq_hz``, ``line_amp``, ``line_gauss_fwhm_hz``
    The concatenated line lists: member index (int64), frequency relative to the centre (Hz),
    complex amplitude (protons) and Gaussian FWHM (Hz, 0 for undamped lines).

Cache
-----
Simulated sets are stored in the folder ``$SPECPROC_CACHE_DIR`` when that variable is set,
else ``~/.cache/specproc/basis``, one archive per SHA-256 key of all inputs: the content hash of the
definition files, the member list, the sequence and its timings, the spectrometer frequency,
dwell, number of points, receiver centre, the specproc version and :data:`ENGINE_VERSION`.
Writes are atomic; an unreadable cache entry is simulated again.
"""

from __future__ import annotations

import io
import json
import os
import time
import zipfile
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from specproc._atomic import atomic_path
from specproc.constants import field_from_larmor, larmor_mhz
from specproc.errors import InvalidInputError
from specproc.spins.editing import EditPulse, mega_press
from specproc.spins.sequences import build_sequence, normalise_sequence_name
from specproc.spins.simulate import (
    LineList,
    simulate_macromolecule,
    simulate_metabolite,
    synthesize_fid,
)
from specproc.spins.systems import definitions_hash as _definitions_hash
from specproc.spins.systems import load_macromolecules, load_metabolites

__all__ = [
    "ENGINE_VERSION",
    "BasisSet",
    "basis_for_scan",
    "cache_dir",
    "simulate_basis",
]

#: Version of the simulation engine; part of the cache key (raise it when results change).
ENGINE_VERSION = "1"

_FORMAT = "specproc-basis"
_FORMAT_VERSION = 1


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
    lines : tuple of (LineList or None), optional
        Exact line list of each member (frequencies relative to ``centre_ppm``), or None when
        unknown; used by :meth:`resample` for exact re-synthesis.
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
    lines: tuple[LineList | None, ...] | None = None

    def __repr__(self) -> str:
        names = ", ".join(self.names[:8]) + (", ..." if len(self.names) > 8 else "")
        timings = ", ".join(f"{k}={v * 1e3:g} ms" for k, v in self.timings_s.items())
        return (f"BasisSet({len(self.names)} members [{names}]; {self.sequence} {timings}; "
                f"{self.spectrometer_mhz:.4g} MHz, {self.n_points} points at "
                f"{self.dwell_s * 1e6:.4g} us)")

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
        object.__setattr__(self, "metadata", dict(self.metadata))
        if self.lines is not None:
            lines = tuple(self.lines)
            if len(lines) != len(names) or not all(
                x is None or isinstance(x, LineList) for x in lines
            ):
                raise InvalidInputError("basis line lists do not match the member names")
            object.__setattr__(self, "lines", lines)

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


    def spectrum(self, *, lb_hz: float = 0.0) -> np.ndarray:
        """Spectra ``fftshift(fft(fid · exp(-π lb t)))`` of all members, (n_members, n_points)."""
        fids = self.fids * np.exp(-np.pi * float(lb_hz) * self.time_s())
        return np.fft.fftshift(np.fft.fft(fids, axis=-1), axes=-1)

    def ppm(self) -> np.ndarray:
        """Chemical shift of each spectral point (fftshift order), ppm, decreasing."""
        from specproc.axes import ppm_axis

        return ppm_axis(self.n_points, dwell_s=self.dwell_s,
                        spectrometer_mhz=self.spectrometer_mhz, centre_ppm=self.centre_ppm)

    # ------------------------------------------------------------------ derivation
    def subset(self, names: Iterable[str]) -> BasisSet:
        """A BasisSet with only the members ``names`` (case-insensitive), in that order.

        Raises
        ------
        InvalidInputError
            For a name that is not a member, or an empty or repeated selection.
        """
        if isinstance(names, str):
            names = [n for n in names.split(",") if n.strip()]
        idx = [self.index(str(n).strip()) for n in names]
        if not idx:
            raise InvalidInputError("an empty basis subset was asked for")
        if len(set(idx)) != len(idx):
            raise InvalidInputError("a basis member is named twice in the subset")
        return BasisSet(
            names=tuple(self.names[i] for i in idx),
            fids=self.fids[idx],
            dwell_s=self.dwell_s,
            spectrometer_mhz=self.spectrometer_mhz,
            centre_ppm=self.centre_ppm,
            protons=tuple(self.protons[i] for i in idx),
            kinds=tuple(self.kinds[i] for i in idx),
            sequence=self.sequence,
            timings_s=dict(self.timings_s),
            definitions_hash=self.definitions_hash,
            version=self.version,
            metadata=dict(self.metadata),
            lines=None if self.lines is None else tuple(self.lines[i] for i in idx),
        )

    def resample(
        self, *, dwell_s: float, n_points: int, centre_ppm: float | None = None
    ) -> BasisSet:
        """The same basis sampled with another dwell time, length and receiver centre.

        Members with a line list (every simulated set has them) are re-synthesised exactly.
        The others are evaluated by trigonometric interpolation of their samples (the
        band-limited continuation of the DFT series), with zeros after the end of the original
        acquisition, then moved to the new centre by ``exp(2πi Δcentre · MHz · t)``. That
        interpolation is exact for lines on the DFT grid and at the original sample times; for
        a general FID, whose periodic continuation jumps at t = 0, it rings between samples
        near the start and the end (a few per cent of the first point), so keep line lists
        where exactness matters.

        Parameters
        ----------
        dwell_s : float
            New sampling interval, s.
        n_points : int
            New number of points.
        centre_ppm : float, optional
            New shift at the receiver centre, ppm (default: unchanged).

        Returns
        -------
        BasisSet
            A new set; this one is left unchanged.
        """
        dwell_s = _positive(dwell_s, "dwell time")
        n_points = _count(n_points)
        centre = self.centre_ppm if centre_ppm is None else float(centre_ppm)
        if not np.isfinite(centre):
            raise InvalidInputError(f"the receiver centre must be finite, got {centre_ppm}")
        delta_hz = -(centre - self.centre_ppm) * self.spectrometer_mhz
        t = np.arange(n_points) * dwell_s
        lines = self.lines or (None,) * len(self.names)
        fids = np.zeros((len(self.names), n_points), dtype=np.complex128)
        new_lines: list[LineList | None] = []
        missing = [i for i, x in enumerate(lines) if x is None]
        for i, member in enumerate(lines):
            if member is not None:
                shifted = member.shifted(delta_hz)
                fids[i] = synthesize_fid(shifted, dwell_s=dwell_s, n_points=n_points)
                new_lines.append(shifted)
            else:
                new_lines.append(None)
        if missing:
            interp = _trig_interpolate(self.fids[missing], self.dwell_s, t)
            fids[missing] = interp * np.exp(-2j * np.pi * delta_hz * t)
        return BasisSet(
            names=self.names,
            fids=fids,
            dwell_s=dwell_s,
            spectrometer_mhz=self.spectrometer_mhz,
            centre_ppm=centre,
            protons=self.protons,
            kinds=self.kinds,
            sequence=self.sequence,
            timings_s=dict(self.timings_s),
            definitions_hash=self.definitions_hash,
            version=self.version,
            metadata=dict(self.metadata),
            lines=None if self.lines is None else tuple(new_lines),
        )

    # ------------------------------------------------------------------ files
    def save(self, path: str | os.PathLike[str]) -> None:
        """Write the set to one ``.npz`` archive (layout in the module docstring), atomically."""
        meta = {
            "format": _FORMAT,
            "format_version": _FORMAT_VERSION,
            "names": list(self.names),
            "dwell_s": self.dwell_s,
            "spectrometer_mhz": self.spectrometer_mhz,
            "centre_ppm": self.centre_ppm,
            "protons": list(self.protons),
            "kinds": list(self.kinds),
            "sequence": self.sequence,
            "timings_s": dict(self.timings_s),
            "definitions_hash": self.definitions_hash,
            "version": self.version,
            "metadata": dict(self.metadata),
        }
        try:
            text = json.dumps(meta, allow_nan=False)
        except (TypeError, ValueError) as exc:
            raise InvalidInputError(f"basis metadata is not JSON-serialisable: {exc}") from None
        lines = self.lines or (None,) * len(self.names)
        has = np.array([x is not None for x in lines], dtype=bool)
        present = [(i, x) for i, x in enumerate(lines) if x is not None]
        arrays: dict[str, Any] = {
            "metadata": np.array(text),
            "fids": np.ascontiguousarray(self.fids, dtype=np.complex128),
            "has_lines": has,
            "line_member": np.concatenate(
                [np.full(len(x), i, dtype=np.int64) for i, x in present] or [np.zeros(0, np.int64)]
            ),
            "line_freq_hz": np.concatenate([x.freq_hz for _, x in present] or [np.zeros(0)]),
            "line_amp": np.concatenate([x.amp for _, x in present] or [np.zeros(0, complex)]),
            "line_gauss_fwhm_hz": np.concatenate(
                [x.gauss_fwhm_hz for _, x in present] or [np.zeros(0)]
            ),
        }
        with atomic_path(path) as tmp, open(tmp, "wb") as handle:
            np.savez(handle, **arrays)

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> BasisSet:
        """Read a set written by :meth:`save`.

        Raises
        ------
        InvalidInputError
            If the file is missing, not such an archive, or inconsistent.
        """
        path = Path(path)
        try:
            raw = path.read_bytes()
        except OSError as exc:
            reason = exc.strerror or exc
            raise InvalidInputError(f"cannot read basis file: {reason}", path) from None
        if not raw.startswith(b"PK\x03\x04"):  # a .npz basis is a zip archive
            raise InvalidInputError(
                "not a specproc basis file (a .npz written by `specproc basis simulate`); "
                "give a basis file, or 'auto' to simulate one for the scan", path)
        try:
            with np.load(io.BytesIO(raw), allow_pickle=False) as archive:
                arrays = {k: archive[k] for k in archive.files}
        except (OSError, ValueError, zipfile.BadZipFile, EOFError):
            raise InvalidInputError(
                "not a specproc basis file (a damaged or foreign .npz archive)", path) from None
        need = {"metadata", "fids", "has_lines", "line_member", "line_freq_hz", "line_amp",
                "line_gauss_fwhm_hz"}
        if not need <= set(arrays):
            raise InvalidInputError(
                f"not a specproc basis file (missing {sorted(need - set(arrays))})", path
            )
        try:
            meta = json.loads(str(arrays["metadata"][()]))
        except (ValueError, TypeError) as exc:
            raise InvalidInputError(f"basis metadata is not valid JSON ({exc})", path) from None
        if not isinstance(meta, dict) or meta.get("format") != _FORMAT:
            raise InvalidInputError("not a specproc basis file (format tag missing)", path)
        if int(meta.get("format_version", 0)) > _FORMAT_VERSION:
            raise InvalidInputError(
                f"basis file format version {meta.get('format_version')} is newer than this "
                f"specproc reads ({_FORMAT_VERSION})",
                path,
            )
        try:
            names = tuple(meta["names"])
            has = np.asarray(arrays["has_lines"], dtype=bool)
            member = np.asarray(arrays["line_member"], dtype=np.int64)
            if has.shape != (len(names),):
                raise ValueError("line flags do not match the members")
            line_lists: list[LineList | None] = []
            for i in range(len(names)):
                if not has[i]:
                    line_lists.append(None)
                    continue
                sel = member == i
                line_lists.append(
                    LineList(
                        arrays["line_freq_hz"][sel],
                        arrays["line_amp"][sel],
                        arrays["line_gauss_fwhm_hz"][sel],
                    )
                )
            return cls(
                names=names,
                fids=arrays["fids"],
                dwell_s=float(meta["dwell_s"]),
                spectrometer_mhz=float(meta["spectrometer_mhz"]),
                centre_ppm=float(meta["centre_ppm"]),
                protons=tuple(meta["protons"]),
                kinds=tuple(meta["kinds"]),
                sequence=str(meta["sequence"]),
                timings_s=dict(meta["timings_s"]),
                definitions_hash=str(meta["definitions_hash"]),
                version=str(meta["version"]),
                metadata=dict(meta.get("metadata", {})),
                lines=tuple(line_lists) if has.any() else None,
            )
        except InvalidInputError as exc:
            raise exc.with_path(path) from None
        except (KeyError, TypeError, ValueError) as exc:
            raise InvalidInputError(f"inconsistent basis file ({exc})", path) from None


# ---------------------------------------------------------------------------- helpers
def _positive(value: Any, what: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"the {what} is not a number: {value!r}") from None
    if not np.isfinite(number) or number <= 0:
        raise InvalidInputError(f"the {what} must be positive, got {number:g}")
    return number


def _count(value: Any) -> int:
    try:
        number = int(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"the number of points is not an integer: {value!r}") from None
    if number != value or number < 1:
        raise InvalidInputError(f"the number of points must be a positive integer, got {value}")
    return number


def _trig_interpolate(fids: np.ndarray, dwell_s: float, t: np.ndarray) -> np.ndarray:
    """Evaluate the DFT series of ``fids`` (n_members, n) at times ``t`` (zero for t ≥ n·dwell)."""
    n = fids.shape[-1]
    coeff = np.fft.fft(fids, axis=-1) / n
    freq = np.fft.fftfreq(n, dwell_s)
    out = np.zeros((fids.shape[0], t.size), dtype=np.complex128)
    inside = t < n * dwell_s - 1e-12 * dwell_s
    ti = t[inside]
    chunk = max(1, 4_000_000 // max(n, 1))
    for start in range(0, ti.size, chunk):
        tt = ti[start:start + chunk]
        kernel = np.exp(2j * np.pi * np.outer(freq, tt))
        out[:, np.flatnonzero(inside)[start:start + chunk]] = coeff @ kernel
    return out


def cache_dir() -> Path:
    """Folder of the basis cache: ``$SPECPROC_CACHE_DIR`` or ``~/.cache/specproc/basis``.

    The folder is created on the first write.
    """
    root = os.environ.get("SPECPROC_CACHE_DIR")
    return Path(root) if root else Path.home() / ".cache" / "specproc" / "basis"


def _cache_key(inputs: Mapping[str, Any]) -> str:
    from specproc._hash import json_sha256

    return json_sha256(inputs)


ProgressCallback = Callable[[int, int, str], None]


def _rich_progress(total: int) -> tuple[ProgressCallback, Callable[[], None]]:
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

    bar = Progress(
        TextColumn("simulating {task.description:<10}"),
        BarColumn(),
        MofNCompleteColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    bar.start()
    task = bar.add_task("", total=total)

    def update(done: int, _total: int, name: str) -> None:
        bar.update(task, completed=done, description=name)

    return update, bar.stop


def simulate_basis(
    *,
    sequence: str,
    field_t: float,
    te_s: float | None = None,
    te1_s: float | None = None,
    tm_s: float | None = None,
    delays_s: Sequence[float] | None = None,
    dwell_s: float,
    n_points: int,
    metabolites: Iterable[str] | str | None = None,
    macromolecules: bool = False,
    centre_ppm: float = 4.65,
    cache: bool = True,
    progress: bool | ProgressCallback = False,
    edit: EditPulse | None = None,
) -> BasisSet:
    """Simulate a basis set for one protocol (density-matrix engine of :mod:`specproc.spins`).

    Parameters
    ----------
    sequence : str
        ``"pulse-acquire"``, ``"spin-echo"``, ``"press"``, ``"steam"`` or ``"semi-laser"``
        (timings: :mod:`specproc.spins.sequences`).
    field_t : float
        Field strength, T (the spectrometer frequency is ``larmor_mhz(field_t)``); the engine
        is checked from 1.5 to 9.4 T.
    te_s, te1_s, tm_s : float, optional
        Echo time, PRESS first echo time (default TE/2), STEAM mixing time, s.
    delays_s : sequence of 5 float, optional
        semi-LASER inter-pulse delays, s (default derived from TE).
    dwell_s : float
        Sampling interval, s.
    n_points : int
        Number of time-domain points.
    metabolites : iterable of str or comma-separated str, optional
        Names from ``specproc/data/basis/`` (case-insensitive); default all definitions of kind
        ``"metabolite"`` with ``in_default_basis`` (water and free choline are left out unless
        named).
    macromolecules : bool, optional
        Also add the components of ``specproc/data/basis/macromolecules.toml`` as Gaussian lines.
    centre_ppm : float, optional
        Shift at the receiver centre, ppm (default 4.65).
    cache : bool, optional
        Read and write the simulation cache (:func:`cache_dir`).
    progress : bool or callable, optional
        True shows a progress bar on stderr; a callable is called as ``f(done, total, name)``.
    edit : EditPulse, optional
        Editing pulses of one condition of a MEGA-PRESS scan (``sequence`` must be PRESS): the
        set is then simulated with them (:func:`specproc.spins.editing.mega_press`).

    Returns
    -------
    BasisSet
        FIDs without relaxation, amplitudes in protons, plus exact line lists.

    Raises
    ------
    InvalidInputError
        For an unknown sequence or metabolite, negative or missing times, TE1 ≥ TE, bad
        semi-LASER delays, or a non-positive field, dwell or number of points.
    """
    from specproc import __version__

    seq = build_sequence(
        normalise_sequence_name(sequence), te_s=te_s, te1_s=te1_s, tm_s=tm_s, delays_s=delays_s
    )
    field_t = _positive(field_t, "field strength")
    dwell_s = _positive(dwell_s, "dwell time")
    n_points = _count(n_points)
    centre_ppm = float(centre_ppm)
    if not np.isfinite(centre_ppm):
        raise InvalidInputError(f"the receiver centre must be finite, got {centre_ppm}")
    mhz = larmor_mhz(field_t)
    if edit is not None:
        if seq.name != "press":
            raise InvalidInputError(f"editing pulses are simulated in PRESS only, not {seq.name}")
        seq = mega_press(te_s=seq.timings_s["te_s"], te1_s=seq.timings_s["te1_s"], edit=edit,
                         spectrometer_mhz=mhz, centre_ppm=centre_ppm)

    if isinstance(metabolites, str):
        metabolites = [m for m in metabolites.split(",") if m.strip()]
    if metabolites is None:
        mets = [m for m in load_metabolites() if m.kind == "metabolite" and m.in_default_basis]
    else:
        names = [str(m).strip() for m in metabolites]
        if not names:
            raise InvalidInputError("no metabolites were named")
        mets = load_metabolites(names)
    mms = load_macromolecules() if macromolecules else []
    member_names = [m.name for m in mets] + [c.name for c in mms]
    if len({n.lower() for n in member_names}) != len(member_names):
        raise InvalidInputError(f"repeated basis member names in {member_names}")

    defs_hash = _definitions_hash()
    inputs = {
        "engine": ENGINE_VERSION,
        "version": __version__,
        "definitions_hash": defs_hash,
        "members": member_names,
        "sequence": seq.name,
        "timings_s": dict(seq.timings_s),
        "spectrometer_mhz": mhz,
        "dwell_s": dwell_s,
        "n_points": n_points,
        "centre_ppm": centre_ppm,
    }
    if edit is not None:
        inputs["edit"] = edit.describe()
    key = _cache_key(inputs)
    cache_path = cache_dir() / f"{key}.npz"
    if cache and cache_path.is_file():
        try:
            return BasisSet.load(cache_path)
        except InvalidInputError:
            pass  # a damaged entry: simulate again and overwrite it

    total = len(mets) + len(mms)
    stop: Callable[[], None] | None = None
    report: ProgressCallback | None = None
    if progress is True:
        report, stop = _rich_progress(total)
    elif callable(progress):
        report = progress
    timings: dict[str, float] = {}
    lines: list[LineList] = []
    try:
        for k, met in enumerate(mets):
            start = time.perf_counter()
            lines.append(
                simulate_metabolite(met, seq, spectrometer_mhz=mhz, centre_ppm=centre_ppm)
            )
            timings[met.name] = time.perf_counter() - start
            if report:
                report(k + 1, total, met.name)
        for k, comp in enumerate(mms, start=len(mets)):
            lines.append(
                simulate_macromolecule(comp, seq, spectrometer_mhz=mhz, centre_ppm=centre_ppm)
            )
            if report:
                report(k + 1, total, comp.name)
    finally:
        if stop:
            stop()
    fids = np.array([synthesize_fid(x, dwell_s=dwell_s, n_points=n_points) for x in lines])
    basis = BasisSet(
        names=tuple(member_names),
        fids=fids,
        dwell_s=dwell_s,
        spectrometer_mhz=mhz,
        centre_ppm=centre_ppm,
        protons=tuple([m.protons for m in mets] + [c.protons for c in mms]),
        kinds=tuple([m.kind for m in mets] + [c.kind for c in mms]),
        sequence=seq.name,
        timings_s=dict(seq.timings_s),
        definitions_hash=defs_hash,
        version=__version__,
        metadata={
            "field_t": field_t,
            "engine_version": ENGINE_VERSION,
            "cache_key": key,
            "simulation_time_s": timings,
            "sources": {m.name: m.source for m in mets} | {c.name: c.source for c in mms},
        },
        lines=tuple(lines),
    )
    if cache:
        try:
            basis.save(cache_path)
        except OSError:
            pass  # an unwritable cache folder only costs speed
    return basis


_PROTOCOL_ARGS = {"sequence", "field_t", "te_s", "metabolites", "macromolecules"}
_TIMING_ARGS = {"te1_s", "tm_s", "delays_s"}
_OVERRIDES = _PROTOCOL_ARGS | _TIMING_ARGS | {
    "dwell_s", "n_points", "centre_ppm", "cache", "progress",
}


def basis_for_scan(scan: Any, **overrides: Any) -> BasisSet:
    """Simulate (or fetch from the cache) the basis matching a :class:`~specproc.data.Scan`.

    The protocol (field, sequence, TE and sub-timings, dwell time, number of points, receiver
    centre, the macromolecule rule) is :func:`specproc.protocol.resolve_protocol` of the scan;
    ``te1_s``, ``tm_s`` and ``delays_s`` given here act as command-line options (they win over
    every other source), the other arguments of :func:`simulate_basis` in ``overrides`` replace
    the protocol's values.

    Raises
    ------
    InvalidInputError
        When the scan does not say its sequence or TE (and no override gives it), for an
        unknown sequence name, or an unknown override.
    """
    from specproc.protocol import resolve_protocol

    unknown = sorted(set(overrides) - _OVERRIDES)
    if unknown:
        raise InvalidInputError(
            f"unknown basis option(s) {unknown}; known: {', '.join(sorted(_OVERRIDES))}"
        )
    protocol = resolve_protocol(
        scan, **{k: overrides.pop(k) for k in _PROTOCOL_ARGS & set(overrides)},
        option={k: overrides.pop(k) for k in _TIMING_ARGS & set(overrides)},
    )
    args = protocol.simulation_args()
    args.update(overrides)
    return simulate_basis(**args)
