"""The editing conditions of a scan: which index of ``DIM_EDIT`` is ON, which OFF, and the pulses.

NIfTI-MRS (Clarke et al., Magn Reson Med 2022;88:2358-2370) tags the axis of sub-spectra
``DIM_EDIT``; its ``dim_N_header`` may name each index with ``EditCondition`` (e.g.
``["ON", "OFF"]``), and the header key ``EditPulse`` may describe the editing pulse of each
condition: ``{"ON": {"PulseOffset": 1.9, ...}, "OFF": {"PulseOffset": 7.5, ...}}`` with the
offset in ppm (the layout of these two keys is recalled from the standard's documents, from
memory; both are optional there). specproc reads:

* the condition of each index from ``EditCondition`` (case-insensitive ``ON``/``OFF`` or
  ``EDIT_ON``/``EDIT_OFF``); conditions with other names (``A``/``B`` ...) whose pulses are in
  ``EditPulse`` are told apart by the pulse offsets (ON is the one below water, where the
  coupling partners of GABA and glutathione lie); without ``EditCondition``, a two-index axis is
  taken in the order of ``EditPulse`` when its keys are ON and OFF; otherwise the scan is
  refused ("edit dimension of unknown meaning") unless the user says which index is ON;
* the editing offsets from ``EditPulse`` (``PulseOffset``, ppm) and the pulse length from
  ``PulseDuration`` (s) when given; otherwise the GABA defaults (ON 1.9 ppm, OFF 7.5 ppm,
  14 ms) with a note that they were assumed.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError
from specproc.spins.editing import EditPulse

__all__ = ["DEFAULT_OFF_PPM", "DEFAULT_ON_PPM", "EditConditions", "condition_of",
           "edit_conditions", "is_edited"]

#: GABA editing at 1.9 ppm and the OFF pulse mirrored about water (common practice).
DEFAULT_ON_PPM = 1.9
DEFAULT_OFF_PPM = 7.5
#: Default editing pulse length, s (14 ms Gaussian at 3 T, from memory).
DEFAULT_PULSE_S = 0.014

_ON_NAMES = {"on", "edit_on", "edit-on", "edit on"}
_OFF_NAMES = {"off", "edit_off", "edit-off", "edit off"}


@dataclass(frozen=True)
class EditConditions:
    """Where the ON and OFF sub-spectra of an edited scan are and how they were edited.

    Attributes
    ----------
    axis : int
        Axis of ``scan.data`` tagged ``DIM_EDIT``.
    on_index, off_index : int
        Index of the ON and the OFF sub-spectrum along that axis.
    on, off : EditPulse
        Editing pulses of each condition.
    notes : tuple of str
        What was assumed (offsets or pulse length not in the header).
    """

    axis: int
    on_index: int
    off_index: int
    on: EditPulse
    off: EditPulse
    notes: tuple[str, ...] = ()

    def describe(self) -> dict[str, Any]:
        """Plain values for fit.json and the report."""
        return {"on_index": self.on_index, "off_index": self.off_index,
                "on": self.on.describe(), "off": self.off.describe(), "notes": list(self.notes)}


def is_edited(scan: Any) -> bool:
    """True when the scan has a ``DIM_EDIT`` axis."""
    return "DIM_EDIT" in tuple(getattr(scan, "dims", ()))


def condition_of(value: Any) -> str | None:
    """``"on"`` or ``"off"`` for a condition label (``ON``, ``EDIT_OFF`` ..., any case), else
    ``None``."""
    text = str(value).strip().lower()
    if text in _ON_NAMES:
        return "on"
    if text in _OFF_NAMES:
        return "off"
    return None


def _pulse_entry(edit_pulse: Any, label: str) -> Mapping[str, Any] | None:
    if not isinstance(edit_pulse, Mapping):
        return None
    for key, value in edit_pulse.items():
        if str(key).strip().lower() == label.lower() and isinstance(value, Mapping):
            return value
    return None


def _number(entry: Mapping[str, Any] | None, key: str) -> float | None:
    if entry is None or key not in entry:
        return None
    value = entry[key]
    if isinstance(value, list | tuple) and len(value) == 1:
        value = value[0]
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if np.isfinite(number) else None


def edit_conditions(scan: Any, *, on_index: int | None = None,
                    on_ppm: float | None = None, off_ppm: float | None = None,
                    pulse_s: float | None = None) -> EditConditions:
    """Read the editing conditions of a scan with a ``DIM_EDIT`` axis.

    Parameters
    ----------
    scan : Scan
        The edited scan.
    on_index : int, optional
        Index of the ON sub-spectrum, when the header does not say (0 or 1).
    on_ppm, off_ppm : float, optional
        Editing pulse offsets, ppm (override the header).
    pulse_s : float, optional
        Editing pulse length, s (overrides the header).

    Raises
    ------
    InvalidInputError
        When the scan has no ``DIM_EDIT`` axis, the axis does not have two indices, or its
        meaning cannot be told (no ``EditCondition`` and no ``on_index``).
    """
    where = getattr(scan, "source", None)
    axis = scan.axis_of("DIM_EDIT")
    if axis is None:
        raise InvalidInputError("the data have no DIM_EDIT axis (not an edited scan)", where)
    size = int(scan.data.shape[axis])
    if size != 2:
        raise InvalidInputError(
            f"the DIM_EDIT axis has {size} sub-spectra; specproc reads two-condition "
            "(ON/OFF) J-difference editing only", where)
    extra = scan.dim_headers.get("DIM_EDIT", {}) or {}
    dim_header = extra.get("header", {}) if isinstance(extra, Mapping) else {}
    labels = dim_header.get("EditCondition") if isinstance(dim_header, Mapping) else None
    header = scan.header or {}
    edit_pulse = header.get("EditPulse")
    notes: list[str] = []
    names: list[str | None] = [None, None]
    if isinstance(labels, list | tuple) and len(labels) == 2:
        names = [condition_of(v) for v in labels]
    if on_index is not None:
        if on_index not in (0, 1):
            raise InvalidInputError(f"the ON index must be 0 or 1, got {on_index}", where)
        names = ["on", "off"] if on_index == 0 else ["off", "on"]
    elif sorted(n or "" for n in names) != ["off", "on"]:
        keys = list(edit_pulse) if isinstance(edit_pulse, Mapping) else []
        keyed = [condition_of(k) for k in keys]
        if isinstance(labels, list | tuple) and len(labels) == 2 and all(
                _pulse_entry(edit_pulse, str(v)) is not None for v in labels):
            # conditions named freely (e.g. "A"/"B" or "GABA"/"CTRL") with their pulses given:
            # ON is the one whose pulse lies below water (the coupling partner of the edited spin)
            offsets = [_number(_pulse_entry(edit_pulse, str(v)), "PulseOffset") for v in labels]
            if None not in offsets:
                first_on = float(offsets[0]) < float(offsets[1])  # type: ignore[arg-type]
                names = ["on", "off"] if first_on else ["off", "on"]
                notes.append("ON taken as the condition whose editing pulse is below water")
        elif len(keyed) == 2 and sorted(k or "" for k in keyed) == ["off", "on"]:
            names = list(keyed)
            notes.append("sub-spectra taken in the order of the header's EditPulse")
        if sorted(n or "" for n in names) != ["off", "on"]:
            raise InvalidInputError(
                "edit dimension of unknown meaning: the DIM_EDIT axis does not say which "
                "sub-spectrum is ON (add EditCondition [\"ON\", \"OFF\"] to its dim header, or "
                "give the ON index)", where)
    on_i, off_i = names.index("on"), names.index("off")
    label_on = str(labels[on_i]) if isinstance(labels, list | tuple) else "ON"
    label_off = str(labels[off_i]) if isinstance(labels, list | tuple) else "OFF"
    entry_on = _pulse_entry(edit_pulse, label_on) or _pulse_entry(edit_pulse, "ON")
    entry_off = _pulse_entry(edit_pulse, label_off) or _pulse_entry(edit_pulse, "OFF")

    def pick(given: float | None, entry: Mapping[str, Any] | None, key: str, default: float,
             what: str) -> float:
        if given is not None:
            return float(given)
        value = _number(entry, key)
        if value is None:
            notes.append(f"{what} not in the header: {default:g} assumed")
            return default
        return value

    on_shift = pick(on_ppm, entry_on, "PulseOffset", DEFAULT_ON_PPM, "ON editing offset (ppm)")
    off_shift = pick(off_ppm, entry_off, "PulseOffset", DEFAULT_OFF_PPM,
                     "OFF editing offset (ppm)")
    duration = pick(pulse_s, entry_on, "PulseDuration", DEFAULT_PULSE_S,
                    "editing pulse length (s)")
    if not 0.001 <= duration <= 0.1:
        raise InvalidInputError(
            f"an editing pulse of {duration * 1e3:g} ms is outside 1-100 ms", where)
    for shift, what in ((on_shift, "ON"), (off_shift, "OFF")):
        if not -5 <= shift <= 15:
            raise InvalidInputError(f"the {what} editing offset {shift:g} ppm is outside "
                                    "-5 to 15 ppm", where)
    return EditConditions(axis=axis, on_index=on_i, off_index=off_i,
                          on=EditPulse(on_shift, duration_s=duration),
                          off=EditPulse(off_shift, duration_s=duration), notes=tuple(notes))
