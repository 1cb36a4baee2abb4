"""Hostile inputs for the command line and the judge of each run (shared by
``tests/test_fuzz_cli.py`` and ``benchmarks/bench_fuzz.py``).

A case is a NIfTI-MRS file (built with nibabel, the reference library) whose header values,
data, scaling, compression and tail are drawn by hypothesis strategies, or a TOML settings
file drawn over the keys of the bundled defaults. :func:`judge` runs one command through the
CLI entry point (click's test runner, in process) and classifies the outcome against the
contract of issue 17:

* ``ok``: exit 0, every promised output present, the numbers sane;
* ``clean_error``: exit 2, one line ``specproc: error: FILE: ...`` naming an input or output
  file, no output folder or file left;
* ``traceback``: any other exit (an exception escaped);
* ``partial``: an output left behind by a failed run, or missing after a successful one;
* ``bad_message``: exit 2 but not one line naming a file (or a Python warning printed);
* ``insane``: exit 0 with impossible numbers.
"""

from __future__ import annotations

import gzip
import json
import math
import os
import shutil
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import nibabel as nib
import numpy as np
from click.testing import CliRunner
from hypothesis import strategies as st

MHZ, CENTRE = 123.2, 4.65
OUTCOMES = ("ok", "clean_error", "traceback", "partial", "bad_message", "insane")

# ---------------------------------------------------------------------------------- values
_HOSTILE_NUMBERS = st.sampled_from([0, -1, 1e-300, 1e-9, 1e300, -1e300, 30, 2000, 3e38,
                                    float("nan"), float("inf"), 2**63, -(2**63)])
_ANY_JSON = st.recursive(
    st.none() | st.booleans() | st.integers(-(2**70), 2**70) | st.text(max_size=12)
    | st.floats(allow_nan=True, allow_infinity=True),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner,
                                                                 max_size=3),
    max_leaves=6,
)


_PLAUSIBLE_HEADER: dict[str, Any] = {
    "SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"], "EchoTime": 0.03,
    "RepetitionTime": 2.0, "SequenceName": "PRESS", "ProtocolName": "fuzz",
    "WaterSuppressed": True,
}
_HEADER_KEYS = (*_PLAUSIBLE_HEADER, "MixingTime", "SpectralWidth", "ProcessingApplied",
                "specproc_centre_ppm", "dim_5_info", "private_note", "dim_6", "InversionTime")
_GOOD_VALUES = st.sampled_from([
    ("EchoTime", 0.144), ("SequenceName", "sLASER"), ("SequenceName", "MEGA-PRESS"),
    ("SequenceName", "$\\alpha$"), ("SpectralWidth", 4000.0), ("MixingTime", 0.01),
    ("ProcessingApplied", [{"Method": "coil combination", "Details": "as text"}]),
    ("specproc_centre_ppm", {"Value": 4.7, "Description": "centre"}),
    ("specproc_centre_ppm", 4.7), ("private_note", {"Value": 1, "Description": "d"}),
    ("ProtocolName", "ümlaut $x$ \t tab"), ("WaterSuppressed", False),
])
#: One change of a plausible case; a case gets none, one or two (see :data:`NIFTI_CASES`).
MUTATIONS = st.one_of(
    _GOOD_VALUES.map(lambda kv: ("header", kv)),
    st.tuples(st.sampled_from(_HEADER_KEYS), st.one_of(_HOSTILE_NUMBERS, _ANY_JSON))
    .map(lambda kv: ("header", kv)),
    st.sampled_from(_HEADER_KEYS).map(lambda k: ("drop", k)),
    st.sampled_from(["zeros", "constant", "spike", "huge", "tiny", "noise", "short",
                     "one_point"]).map(lambda v: ("kind", v)),
    st.sampled_from([1, 2]).map(lambda v: ("n_dyn", v)),
    st.sampled_from([1e-30, 0.0, -1.0, 1e30, float("nan"), 5e-4, 1e-7, 0.09])
    .map(lambda v: ("dwell_s", v)),
    st.sampled_from(["complex128", "float32"]).map(lambda v: ("dtype", v)),
    st.sampled_from([(2.0, 0.0), (1e300, 0.0), (1.0, 5.0), (0.0, 0.0)])
    .map(lambda v: ("scaling", v)),
    st.sampled_from(["truncate", "trailing"]).map(lambda v: ("tail", v)),
    st.sampled_from(["$x$ scan", "a$b", "ümlaut scan", "-dash", "sp ace"])
    .map(lambda v: ("name", v)),
)


@dataclass
class NiftiCase:
    """Everything that decides one NIfTI-MRS input file: a plausible scan and its changes."""

    header: dict[str, Any] = field(default_factory=lambda: dict(_PLAUSIBLE_HEADER))
    kind: str = "signal"
    n_dyn: int = 8
    dwell_s: float = 2.5e-4
    dtype: str = "complex64"
    scaling: tuple[float, float] | None = None
    gzip: bool = True
    tail: str = "none"  # none | truncate | trailing
    name: str = "scan"
    changes: tuple[Any, ...] = ()


def _apply(changes: list[tuple[str, Any]], compress: bool) -> NiftiCase:
    case = NiftiCase(gzip=compress, changes=tuple(changes))
    for what, value in changes:
        if what == "header":
            case.header[value[0]] = value[1]
        elif what == "drop":
            case.header.pop(value, None)
        else:
            setattr(case, what, value)
    return case


NIFTI_CASES = st.builds(_apply, st.lists(MUTATIONS, max_size=2), st.booleans())
DATA_KINDS = ("signal", "zeros", "constant", "spike", "huge", "tiny", "noise", "short",
              "one_point")


def _data(case: NiftiCase, n_points: int = 512) -> np.ndarray:
    rng = np.random.default_rng(100 * DATA_KINDS.index(case.kind) + case.n_dyn)
    if case.kind == "short":
        n_points = 16
    if case.kind == "one_point":
        n_points = 1
    t = np.arange(n_points) * 2.5e-4
    lines = sum(a * np.exp(-2j * np.pi * (ppm - CENTRE) * MHZ * t - np.pi * 5 * t)
                for ppm, a in ((2.008, 30), (3.027, 20), (3.21, 15)))
    fids = lines * np.exp(0.1j * np.arange(case.n_dyn))[:, None] + 0.5 * (
        rng.standard_normal((case.n_dyn, n_points))
        + 1j * rng.standard_normal((case.n_dyn, n_points)))
    if case.kind == "zeros":
        fids = np.zeros_like(fids)
    elif case.kind == "constant":
        fids = np.full_like(fids, 1 + 1j)
    elif case.kind == "spike":
        fids[0, 3] = 3e38
    elif case.kind == "huge":
        fids = fids * 1e300
    elif case.kind == "tiny":
        fids = fids * 1e-300
    elif case.kind == "noise":
        fids = fids - lines
    return fids


def nifti_bytes(case: NiftiCase) -> bytes:
    """The file of a case (header JSON written with non-finite numbers allowed)."""
    fids = _data(case)
    arr = np.moveaxis(fids, 0, -1).reshape((1, 1, 1, fids.shape[1], case.n_dyn))
    with np.errstate(all="ignore"):
        arr = arr.astype(case.dtype if case.dtype != "float32" else "complex64")
        if case.dtype == "float32":
            arr = arr.real.astype(np.float32)
    if case.n_dyn == 1:
        arr = arr[..., 0]
    img = nib.Nifti2Image(arr, affine=np.eye(4))
    hdr = img.header
    hdr.set_xyzt_units("mm", "sec")
    pixdim = hdr["pixdim"]
    pixdim[4] = case.dwell_s
    hdr["pixdim"] = pixdim
    hdr.set_intent("none", name="mrs_v0_9")
    meta = dict(case.header)
    if case.n_dyn > 1:
        meta["dim_5"] = "DIM_DYN"
    else:
        meta.pop("dim_5_info", None)
    hdr.extensions.append(nib.nifti1.Nifti1Extension(44, json.dumps(meta).encode("utf-8")))
    if case.scaling is not None:
        hdr["scl_slope"], hdr["scl_inter"] = case.scaling
    raw = img.to_bytes()
    if case.tail == "truncate":
        raw = raw[: max(600, len(raw) - 100)]
    elif case.tail == "trailing":
        raw = raw + bytes(4096)
    return gzip.compress(raw, compresslevel=1) if case.gzip else raw


# --------------------------------------------------------------------------------- configs
def _near(default: Any) -> st.SearchStrategy[Any]:
    """Values of the default's own type, near it or at its edges."""
    if isinstance(default, bool):
        return st.booleans()
    if isinstance(default, int):
        return st.sampled_from([default, default + 1, max(default - 1, 0), 2 * default, 0,
                                10 * default + 1, -1, 10**6])
    if isinstance(default, float):
        return st.sampled_from([default, 2 * default, 0.5 * default, 0.0, -default, 1e3,
                                default + 0.1])
    if isinstance(default, list) and default and all(
            isinstance(v, int | float) and not isinstance(v, bool) for v in default):
        return st.lists(st.floats(-10.0, 10.0), min_size=len(default), max_size=len(default))
    if isinstance(default, str):
        return st.sampled_from([default, "", "no-such-choice"])
    return st.just(default)


def _keys(defaults: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    found: dict[str, Any] = {}
    for name, value in defaults.items():
        key = f"{prefix}.{name}" if prefix else name
        found.update(_keys(value, key) if isinstance(value, dict) and value else {key: value})
    return found


def config_strategy() -> st.SearchStrategy[dict[str, Any]]:
    """A partial configuration: 1-3 known keys with values near their defaults, or hostile
    ones (wrong types, non-finite or huge numbers, any JSON), sometimes an unknown key."""
    from specproc.config import default_config

    defaults = _keys(default_config())
    defaults["fit.no_such_key"] = 1.0
    hostile = st.one_of(_HOSTILE_NUMBERS, st.text(max_size=8), _ANY_JSON)
    entry = st.sampled_from(sorted(defaults)).flatmap(
        lambda k: st.tuples(st.just(k), st.one_of(_near(defaults[k]), _near(defaults[k]),
                                                  hostile)))
    return st.lists(entry, min_size=1, max_size=3).map(dict)


def toml_text(settings: dict[str, Any]) -> str:
    """TOML of dotted keys (values TOML cannot hold are written as strings)."""
    lines = []
    for key, value in settings.items():
        lines.append(f"{key} = {_toml_value(value)}")
    return "\n".join(lines) + "\n"


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value) if abs(value) < 2**63 else json.dumps(str(value))
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value if v is not None) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(str(k))} = {_toml_value(v)}"
                               for k, v in value.items() if v is not None) + "}"
    return json.dumps("" if value is None else str(value))


# ----------------------------------------------------------------------------------- judge
def _temporaries(folder: Path) -> list[Path]:
    return [p for p in folder.rglob("*") if ".tmp" in p.name or p.name.endswith(".partial")]


def judge(args: list[str], *, inputs: list[Path], outputs: list[Path], work: Path,
          check_ok: Any = None) -> str:
    """Run ``specproc ARGS`` in process and classify the outcome (see the module notes)."""
    from specproc.cli import main

    for out in outputs:
        if out.is_dir():
            shutil.rmtree(out)
        elif out.exists():
            out.unlink()
    result = CliRunner().invoke(main, [str(a) for a in args])
    if result.exit_code not in (0, 2) or (
        result.exception is not None and not isinstance(result.exception, SystemExit)
    ):
        return "traceback"
    if "Traceback" in result.output or "Warning:" in result.stderr:
        return "bad_message"
    if _temporaries(work):
        return "partial"
    if result.exit_code == 2:
        lines = result.stderr.splitlines()
        named = [str(p) for p in (*inputs, *outputs)] + [str(work)]
        if len(lines) != 1 or not any(lines[0].startswith(f"specproc: error: {name}")
                                      for name in named):
            return "bad_message"
        if any(out.exists() for out in outputs):
            return "partial"
        return "clean_error"
    if any(not out.exists() for out in outputs):
        return "partial"
    if check_ok is not None and not check_ok(result):
        return "insane"
    return "ok"


# ------------------------------------------------------------- sanity of successful runs
def sane_info(result: Any) -> bool:
    """``info --json`` values within the physical ranges the readers enforce."""
    from specproc.io._util import PHYSICAL_RANGES

    info = json.loads(result.stdout.splitlines()[0])
    low, high, _ = PHYSICAL_RANGES["field_t"]
    if not low <= info["field_t"] <= high:
        return False
    for key in ("te_ms", "tr_ms", "tm_ms"):
        if info.get(key) is not None and not 0 <= info[key] <= 120_000:
            return False
    return info["n_points"] >= 1


def sane_preprocess(path: Path) -> bool:
    """The written FID loads back and holds finite samples."""
    from specproc.io import load

    scan = load(path)
    return bool(np.all(np.isfinite(scan.data))) and scan.dims == ()


def sane_fit(folder: Path) -> bool:
    """``fit.json``: a successful fit has finite, non-negative amplitudes; a failed one says so."""
    document = json.loads((folder / "fit.json").read_text("utf-8"))
    fit = document["fit"]
    amplitudes = [row.get("amplitude") for row in fit.get("table") or []]
    numbers = [a for a in amplitudes if isinstance(a, int | float)]
    if fit.get("success"):
        return bool(numbers) and all(math.isfinite(a) and a >= 0 for a in numbers)
    return True


def write_case(case: NiftiCase, folder: Path) -> Path:
    """Write a case into ``folder`` under its (odd) name."""
    path = folder / (case.name + (".nii.gz" if case.gzip else ".nii"))
    path.write_bytes(nifti_bytes(case))
    return path


def run_info(case: NiftiCase, work: Path) -> str:
    path = write_case(case, work)
    try:
        return judge(["info", "--json", path], inputs=[path], outputs=[], work=work,
                     check_ok=sane_info)
    finally:
        path.unlink()


def run_preprocess(case: NiftiCase, work: Path, config: Path | None = None) -> str:
    path = write_case(case, work)
    out = work / "out.nii.gz"
    extra = [] if config is None else ["--config", config]
    try:
        outcome = judge(["preprocess", path, *extra, "-o", out], inputs=[path, *extra[1:]],
                        outputs=[out, work / "out_preprocess.png"], work=work)
        if outcome == "ok" and not sane_preprocess(out):
            outcome = "insane"
        return outcome
    finally:
        path.unlink()


def run_fit(case: NiftiCase, work: Path, basis: Path) -> str:
    path = write_case(case, work)
    out = work / "fit_out"
    try:
        outcome = judge(["fit", path, "--basis", basis, "-o", out], inputs=[path, basis],
                        outputs=[out], work=work)
        if outcome == "ok" and not sane_fit(out):
            outcome = "insane"
        return outcome
    finally:
        path.unlink()


def run_fit_mm(case: NiftiCase, work: Path) -> str:
    """A plausible scan fitted with a hostile file as its measured macromolecule spectrum
    (``specproc fit SCAN --mm-spectrum CASE``; a small simulated basis, cached in ``work``)."""
    scan = work / "mm_scan.nii.gz"
    if not scan.exists():
        scan.write_bytes(nifti_bytes(NiftiCase()))
    config = work / "mm_members.toml"
    config.write_text('[fit]\nmembers = ["NAA", "Cr", "PCr", "GPC", "MMmeasured"]\n')
    path = write_case(case, work)
    out = work / "fit_mm_out"
    before = os.environ.get("SPECPROC_CACHE_DIR")
    os.environ["SPECPROC_CACHE_DIR"] = str(work.parent / "fuzz_cache")
    try:
        outcome = judge(["fit", scan, "--config", config, "--mm-spectrum", path, "-o", out],
                        inputs=[scan, config, path], outputs=[out], work=work)
        if outcome == "ok" and not sane_fit(out):
            outcome = "insane"
        return outcome
    finally:
        path.unlink()
        if before is None:
            os.environ.pop("SPECPROC_CACHE_DIR", None)
        else:
            os.environ["SPECPROC_CACHE_DIR"] = before


def run_config(settings: dict[str, Any], work: Path) -> str:
    path = work / "settings.toml"
    path.write_text(toml_text(settings), "utf-8")
    try:
        tomllib.loads(path.read_text("utf-8"))
    except tomllib.TOMLDecodeError:
        pass  # still a case: the command must say so in one line
    try:
        return judge(["config", "check", path], inputs=[path], outputs=[], work=work)
    finally:
        os.unlink(path)


def run_preprocess_with_config(settings: dict[str, Any], work: Path) -> str:
    """A plausible scan preprocessed with hostile settings (what `config check` lets through
    must not break the processing)."""
    config = work / "settings.toml"
    config.write_text(toml_text(settings), "utf-8")
    try:
        return run_preprocess(NiftiCase(), work, config=config)
    finally:
        config.unlink()


def small_basis(path: Path) -> Path:
    """A 4-singlet basis matching the cases' 512 points (NAA, Cr, PCr, GPC)."""
    from specproc.basis import BasisSet

    t = np.arange(512) * 2.5e-4
    lines = {"NAA": [(2.008, 3)], "Cr": [(3.027, 3), (3.913, 2)],
             "PCr": [(3.029, 3), (3.93, 2)], "GPC": [(3.212, 9)]}
    fids = np.stack([sum(p * np.exp(-2j * np.pi * (s - CENTRE) * MHZ * t) for s, p in ls)
                     for ls in lines.values()])
    BasisSet(names=tuple(lines), fids=fids, dwell_s=2.5e-4, spectrometer_mhz=MHZ,
             centre_ppm=CENTRE, kinds=("metabolite",) * 4, sequence="press",
             timings_s={"te_s": 0.03}).save(path)
    return path
