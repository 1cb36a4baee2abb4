"""The Scan: complex time-domain MRS data with its acquisition metadata and provenance.

Conventions (see DESIGN.md and the NIfTI-MRS standard, Clarke et al. 2022):

* ``data`` is a complex array with **time on the last axis**. The other axes are named by
  NIfTI-MRS dimension tags in ``dims`` (``"DIM_COIL"``, ``"DIM_DYN"``, ``"DIM_EDIT"`` ...), in
  order; a single averaged FID has ``data.ndim == 1`` and ``dims == ()``.
* The FID follows the NIfTI-MRS sign convention: with ``S = fftshift(fft(fid))`` and
  ``f = fftshift(fftfreq(n, dwell_s))`` the chemical shift is
  ``ppm = centre_ppm - f / spectrometer_mhz``, so a resonance at shift δ has the time dependence
  ``exp(-2πi (δ - centre_ppm) · spectrometer_mhz · t)`` and high ppm lies on the left.
* Times are in seconds, frequencies in Hz or MHz as their names say.

A Scan is immutable in practice: it is a frozen dataclass whose array is made read-only. Use
:meth:`Scan.replace` to derive a new Scan and :meth:`Scan.with_step` to record a processing
step in the provenance.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc.constants import field_from_larmor, get_nucleus
from specproc.errors import InvalidInputError

__all__ = ["DIM_TAGS", "Scan", "is_valid_dim_tag", "make_step_record", "user_key", "user_value"]

#: Dimension tags of the NIfTI-MRS standard (the numbered ones are matched by prefix).
DIM_TAGS: tuple[str, ...] = (
    "DIM_COIL",
    "DIM_DYN",
    "DIM_INDIRECT_0",
    "DIM_INDIRECT_1",
    "DIM_INDIRECT_2",
    "DIM_PHASE_CYCLE",
    "DIM_EDIT",
    "DIM_MEAS",
    "DIM_USER_0",
    "DIM_USER_1",
    "DIM_USER_2",
    "DIM_ISIS",
    "DIM_METCYCLE",
)


def is_valid_dim_tag(tag: str) -> bool:
    """True if ``tag`` is a NIfTI-MRS dimension tag (``DIM_INDIRECT_n``, ``DIM_USER_n`` any n)."""
    if tag in DIM_TAGS:
        return True
    for prefix in ("DIM_INDIRECT_", "DIM_USER_"):
        if tag.startswith(prefix) and tag[len(prefix):].isdigit():
            return True
    return False


def make_step_record(method: str, details: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """A provenance record in the shape of a NIfTI-MRS ``ProcessingApplied`` entry.

    Parameters
    ----------
    method : str
        Name of the processing step, e.g. ``"coil combination"``.
    details : mapping, optional
        Parameters and measured values of the step (JSON-serialisable).
    """
    from specproc import __version__

    return {
        "Time": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "Program": "specproc",
        "Version": __version__,
        "Method": str(method),
        "Details": dict(details or {}),
    }


def user_key(value: Any, description: str) -> dict[str, Any]:
    """A user-defined header entry in the standard's form ``{"Value", "Description"}``."""
    return {"Value": value, "Description": str(description)}


def user_value(meta: Mapping[str, Any], key: str) -> Any:
    """The value of a user-defined key: ``{"Value": v, "Description": ...}`` or a bare ``v``.

    The standard asks for the object form; files written before it was followed hold the bare
    value, which is accepted too. ``None`` when the key is absent.
    """
    value = meta.get(key)
    if isinstance(value, Mapping) and "Value" in value:
        return value["Value"]
    return value


@dataclass(frozen=True, eq=False)
class Scan:
    """Complex time-domain MRS data of one voxel with acquisition metadata.

    Attributes
    ----------
    data : (..., n_points) complex ndarray
        Time-domain samples, time on the last axis; read-only.
    dwell_s : float
        Sampling interval, s.
    spectrometer_mhz : float
        Spectrometer (receiver centre) frequency, MHz.
    nucleus : str
        Resonant nucleus label, e.g. ``"1H"``.
    dims : tuple of str
        NIfTI-MRS tags of the extra axes, one per axis before the time axis.
    centre_ppm : float or None
        Chemical shift at the receiver centre frequency, ppm; ``None`` takes the nucleus default
        (4.65 ppm for 1H).
    te_s, tr_s, tm_s : float or None
        Echo, repetition and mixing time, s (``None`` when unknown).
    sequence : str or None
        Sequence name where known (``"press"``, ``"steam"``, ``"semi-laser"`` ...).
    timings : mapping
        Sequence sub-timings given by the file (``te1_s``, ``tm_s`` s; ``delays_s`` tuple of s),
        used by :mod:`specproc.protocol`; empty when the file gives none.
    protocol : str or None
        Protocol name from the header (free text; escape before showing it in HTML).
    water_suppressed : bool or None
        Whether water suppression was applied.
    dim_headers : mapping
        Per-axis NIfTI-MRS ``dim_N_info`` / ``dim_N_header`` values keyed by tag.
    header : mapping
        The original header as read from the file, kept verbatim (JSON-serialisable values).
    provenance : tuple of dict
        Processing records (NIfTI-MRS ``ProcessingApplied`` entries), oldest first.
    affine : (4, 4) ndarray or None
        Voxel index to scanner coordinates, mm (the NIfTI affine): the column norms of its
        3 x 3 part are the voxel size, its last column the voxel position; ``None``: unknown.
    source : str or None
        Path of the file the data came from.
    format : str or None
        Name of the format it was read from (``"nifti-mrs"``, ``"dicom"`` ...).
    """

    data: np.ndarray
    dwell_s: float
    spectrometer_mhz: float
    nucleus: str = "1H"
    dims: tuple[str, ...] = ()
    centre_ppm: float | None = None
    te_s: float | None = None
    tr_s: float | None = None
    tm_s: float | None = None
    sequence: str | None = None
    timings: Mapping[str, Any] = field(default_factory=dict)
    protocol: str | None = None
    water_suppressed: bool | None = None
    dim_headers: Mapping[str, Any] = field(default_factory=dict)
    header: Mapping[str, Any] = field(default_factory=dict)
    provenance: tuple[dict[str, Any], ...] = ()
    affine: np.ndarray | None = None
    source: str | None = None
    format: str | None = None

    def __post_init__(self) -> None:
        where = self.source
        data = np.asarray(self.data)
        if not np.iscomplexobj(data):
            data = data.astype(np.complex128)
        elif data.dtype not in (np.complex64, np.complex128):
            data = data.astype(np.complex128)
        if data.ndim == 0 or data.shape[-1] == 0 or data.size == 0:
            raise InvalidInputError("the data hold no time-domain samples", where)
        if not np.all(np.isfinite(data)):
            raise InvalidInputError("the data contain NaN or infinite samples", where)
        dims = tuple(str(d) for d in self.dims)
        if len(dims) != data.ndim - 1:
            raise InvalidInputError(
                f"{data.ndim - 1} extra data axes but {len(dims)} dimension tags {list(dims)}",
                where,
            )
        for tag in dims:
            if not is_valid_dim_tag(tag):
                raise InvalidInputError(f"unknown dimension tag {tag!r}", where)
        if len(set(dims)) != len(dims):
            raise InvalidInputError(f"repeated dimension tags {list(dims)}", where)
        dwell = _positive_float(self.dwell_s, "dwell time", where)
        mhz = _positive_float(self.spectrometer_mhz, "spectrometer frequency", where)
        nucleus = get_nucleus(self.nucleus).label
        for name in ("te_s", "tr_s", "tm_s"):
            value = getattr(self, name)
            if value is not None:
                value = float(value)
                if not np.isfinite(value) or value < 0:
                    raise InvalidInputError(
                        f"{name} must be a non-negative time, got {value}", where
                    )
                object.__setattr__(self, name, value)
        if self.centre_ppm is not None:
            object.__setattr__(self, "centre_ppm", float(self.centre_ppm))
        if self.timings:
            from specproc.protocol import parse_timings

            object.__setattr__(self, "timings", parse_timings(
                self.timings, where=where, what="sequence timings"))
        if self.affine is not None:
            affine = np.array(self.affine, dtype=float)
            if affine.shape != (4, 4) or not np.all(np.isfinite(affine)):
                raise InvalidInputError("the voxel affine must be a finite 4 x 4 matrix", where)
            affine.flags.writeable = False
            object.__setattr__(self, "affine", affine)
        if data.flags.writeable:  # copy so that the caller's array cannot change the Scan
            frozen = data.copy()
            frozen.flags.writeable = False
        else:
            frozen = data
        object.__setattr__(self, "data", frozen)
        object.__setattr__(self, "dims", dims)
        object.__setattr__(self, "dwell_s", dwell)
        object.__setattr__(self, "spectrometer_mhz", mhz)
        object.__setattr__(self, "nucleus", nucleus)
        object.__setattr__(self, "provenance", tuple(dict(p) for p in self.provenance))

    # ------------------------------------------------------------------ derived values
    @property
    def n_points(self) -> int:
        """Number of time-domain points."""
        return int(self.data.shape[-1])

    @property
    def spectral_width_hz(self) -> float:
        """Spectral width 1/dwell, Hz."""
        return 1.0 / self.dwell_s

    @property
    def field_t(self) -> float:
        """Field strength B0 = f / (γ/2π), T."""
        return field_from_larmor(self.spectrometer_mhz, self.nucleus)

    @property
    def voxel_mm(self) -> tuple[float, float, float] | None:
        """Voxel edge lengths from the affine, mm (``None`` when the affine is unknown)."""
        if self.affine is None:
            return None
        x, y, z = (float(v) for v in np.linalg.norm(self.affine[:3, :3], axis=0))
        return x, y, z

    @property
    def voxel_position_mm(self) -> tuple[float, float, float] | None:
        """Scanner coordinates of the voxel centre from the affine, mm (``None``: unknown)."""
        if self.affine is None:
            return None
        x, y, z = (float(v) for v in self.affine[:3, 3])
        return x, y, z

    @property
    def reference_ppm(self) -> float:
        """Chemical shift at the receiver centre, ppm (``centre_ppm`` or the nucleus default)."""
        if self.centre_ppm is not None:
            return self.centre_ppm
        return get_nucleus(self.nucleus).centre_ppm

    @property
    def extra_shape(self) -> dict[str, int]:
        """Sizes of the extra axes keyed by their tag."""
        return dict(zip(self.dims, self.data.shape[:-1], strict=True))

    def axis_of(self, tag: str) -> int | None:
        """Index of the axis tagged ``tag`` in ``data``, or ``None``."""
        return self.dims.index(tag) if tag in self.dims else None

    def time_s(self) -> np.ndarray:
        """Sample times t_n = n · dwell, s; shape (n_points,)."""
        return np.arange(self.n_points) * self.dwell_s

    def freq_hz(self, n_points: int | None = None) -> np.ndarray:
        """Frequency of each spectral point (fftshift order) relative to the centre, Hz."""
        from specproc.axes import freq_axis_hz

        return freq_axis_hz(self.n_points if n_points is None else int(n_points), self.dwell_s)

    def ppm(self, n_points: int | None = None) -> np.ndarray:
        """Chemical shift of each spectral point (fftshift order), ppm, decreasing."""
        from specproc.axes import ppm_axis

        return ppm_axis(self.n_points if n_points is None else int(n_points),
                        dwell_s=self.dwell_s, spectrometer_mhz=self.spectrometer_mhz,
                        centre_ppm=self.reference_ppm)

    def spectrum(self, n_points: int | None = None) -> np.ndarray:
        """Spectrum ``fftshift(fft(data))`` along time (zero-filled to ``n_points``)."""
        n = self.n_points if n_points is None else int(n_points)
        return np.fft.fftshift(np.fft.fft(self.data, n=n, axis=-1), axes=-1)

    # ------------------------------------------------------------------ derivation
    def replace(self, **changes: Any) -> Scan:
        """A new Scan with some fields changed (the original is left untouched)."""
        return dataclasses.replace(self, **changes)

    def with_step(
        self, method: str, details: Mapping[str, Any] | None = None, **changes: Any
    ) -> Scan:
        """A new Scan with ``changes`` applied and a provenance record appended."""
        record = make_step_record(method, details)
        return dataclasses.replace(self, provenance=(*self.provenance, record), **changes)

    def drop_axis(self, tag: str, data: np.ndarray) -> Scan:
        """Helper for steps that reduce an axis: new data without the axis ``tag``."""
        dims = tuple(d for d in self.dims if d != tag)
        headers = {k: v for k, v in self.dim_headers.items() if k != tag}
        return dataclasses.replace(self, data=data, dims=dims, dim_headers=headers)

    def summary(self) -> dict[str, Any]:
        """Plain-dict description (used by ``specproc info`` and reports)."""
        return {
            "source": self.source,
            "format": self.format,
            "nucleus": self.nucleus,
            "spectrometer_mhz": self.spectrometer_mhz,
            "field_t": self.field_t,
            "spectral_width_hz": self.spectral_width_hz,
            "dwell_s": self.dwell_s,
            "n_points": self.n_points,
            "dims": [{"tag": t, "size": s} for t, s in self.extra_shape.items()],
            "te_s": self.te_s,
            "tr_s": self.tr_s,
            "tm_s": self.tm_s,
            "sequence": self.sequence,
            "timings": {k: list(v) if isinstance(v, tuple) else v
                        for k, v in self.timings.items()},
            "protocol": self.protocol,
            "centre_ppm": self.reference_ppm,
            "dtype": str(self.data.dtype),
        }


def _positive_float(value: Any, what: str, where: str | None) -> float:
    if value is None:
        raise InvalidInputError(f"the {what} is missing", where)
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(f"the {what} is not a number: {value!r}", where) from None
    if not np.isfinite(number) or number <= 0:
        raise InvalidInputError(f"the {what} must be positive, got {number}", where)
    return number

