"""GM, WM and CSF fractions of the spectroscopy voxel from segmentation maps of the anatomy.

Method
------
The fraction of tissue ``t`` is the mean of its map over the voxel box,

    r_t = (1 / V) ∫_voxel p_t(x) dx,

computed by supersampling the voxel *in its own frame* (so an oblique voxel is sampled as the
rotated box it is): a regular grid of ``n_i x n_j x n_k`` points at the centres of equal
sub-boxes (the midpoint rule), spaced at most ``1 / oversample`` of the anatomy's smallest
voxel side; each point is taken to the anatomy's voxel indices through the inverse of its
affine and the maps are interpolated there trilinearly (``scipy.ndimage.map_coordinates``,
``order=1``). Trilinear interpolation of a map that holds each anatomical voxel's partial
volume keeps the integral of the map, so the result does not depend on the resolution of the
maps. A label image is first split into one 0/1 map per tissue (its partial-volume content
then comes from the interpolation at the label boundaries).

The three raw fractions are normalised to sum 1, ``f_t = r_t / Σ r``, and the remainder
``1 - Σ r`` (voxel volume the maps do not assign to GM, WM or CSF: skull, vessels, background,
or a tool's other classes) is reported as ``unsegmented``; a negative remainder means maps
that overlap.

Checks (each an :class:`~specproc.errors.InvalidInputError` naming the file): maps that do not
share one grid (shape and affine), maps not on the anatomy's grid, probability values outside
[0, 1], a label table whose values do not occur in the label image, a voxel partly or wholly
outside the maps' field of view, raw fractions whose sum is not within ``max_unsegmented`` of
1, and a voxel with no tissue at all.

References
----------
.. [1] Gasparovic C, Song T, Devier D, et al. Use of tissue water as a concentration reference
   for proton spectroscopic imaging. Magn Reson Med 2006;55:1219-1226 (voxel GM/WM/CSF
   fractions from a segmented anatomical image).
.. [2] scipy.ndimage.map_coordinates; nibabel (affines, array proxies).
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np

from specproc.errors import InvalidInputError
from specproc.quantify import TISSUES
from specproc.tissue.geometry import VoxelGeometry

__all__ = [
    "DEFAULT_LABEL_TABLE",
    "GRID_ATOL_MM",
    "TissueFractions",
    "TissueMapFiles",
    "TissueMaps",
    "check_same_grid",
    "load_anatomy",
    "load_label_map",
    "load_probability_maps",
    "load_tissue_maps",
    "parse_label_table",
    "share_text",
    "tissue_fractions_from_files",
    "voxel_sample_points",
    "voxel_tissue_fractions",
]

#: Label values of a three-class segmentation when no table is given: 1 CSF, 2 GM, 3 WM
#: (the class order of many three-class tissue segmentations; common practice).
DEFAULT_LABEL_TABLE: Mapping[str, tuple[int, ...]] = {"csf": (1,), "gm": (2,), "wm": (3,)}
#: Largest difference between two affines (mm) still taken as the same grid.
GRID_ATOL_MM: float = 1e-3
#: Allowed distance of probability values outside [0, 1] (rounding of stored maps).
_PROBABILITY_SLACK = 1e-3
#: Samples per voxel axis: at least and at most.
_MIN_SAMPLES, _MAX_SAMPLES = 8, 256
#: Points interpolated at once (bounds the memory of a fine supersampling).
_CHUNK_POINTS = 400_000


@dataclass(frozen=True, eq=False)
class TissueMaps:
    """GM, WM and CSF maps on one anatomical grid, possibly cropped around a voxel.

    Attributes
    ----------
    maps : mapping of str to (nx, ny, nz) float32 ndarray
        One map per tissue (``gm``, ``wm``, ``csf``), values in [0, 1]: the cropped block.
    grid_affine : (4, 4) ndarray
        Voxel index -> world mm of the whole image.
    grid_shape : tuple of 3 int
        Shape of the whole image.
    offset : tuple of 3 int
        Index of the block's first voxel in the whole image.
    kind : {"probability", "labels"}
        Probability maps, or 0/1 maps split from a label image.
    sources : mapping of str to str
        File of each tissue's map (the same label image for all three).
    label_table : mapping of str to tuple of int, or None
        Label values of each tissue (label images only).
    """

    maps: Mapping[str, np.ndarray]
    grid_affine: np.ndarray
    grid_shape: tuple[int, int, int]
    offset: tuple[int, int, int] = (0, 0, 0)
    kind: Literal["probability", "labels"] = "probability"
    sources: Mapping[str, str] = field(default_factory=dict)
    label_table: Mapping[str, tuple[int, ...]] | None = None

    @property
    def zooms_mm(self) -> np.ndarray:
        """Voxel sides of the anatomical grid, mm; shape (3,)."""
        return np.linalg.norm(self.grid_affine[:3, :3], axis=0)


@dataclass(frozen=True, eq=False)
class TissueFractions:
    """Tissue fractions of one voxel and how they were obtained.

    Attributes
    ----------
    fractions : mapping of str to float
        GM, WM, CSF volume fractions normalised to sum 1 (what quantification uses).
    raw : mapping of str to float
        Mean of each map over the voxel, before normalisation.
    unsegmented : float
        ``1 - Σ raw``: share of the voxel in no map (negative for overlapping maps).
    n_samples : tuple of 3 int
        Supersampling points along the voxel's axes i, j, k.
    voxel : VoxelGeometry
        The voxel.
    maps_kind : {"probability", "labels"}
        What the maps were.
    sources : mapping of str to str
        The map files.
    label_table : mapping of str to tuple of int, or None
        Label values (label images only).
    anatomy_zooms_mm : tuple of 3 float
        Voxel sides of the maps' grid, mm.
    planes : VoxelPlanes or None
        The anatomy and maps on three planes through the voxel, for the picture
        (:mod:`specproc.report.voxel`); ``None`` without an anatomical image.
    """

    fractions: Mapping[str, float]
    raw: Mapping[str, float]
    unsegmented: float
    n_samples: tuple[int, int, int]
    voxel: VoxelGeometry
    maps_kind: str = "probability"
    sources: Mapping[str, str] = field(default_factory=dict)
    label_table: Mapping[str, tuple[int, ...]] | None = None
    anatomy_zooms_mm: tuple[float, float, float] = (1.0, 1.0, 1.0)
    planes: Any = None

    def as_mapping(self) -> dict[str, float]:
        """``{"gm": .., "wm": .., "csf": ..}``, normalised (for :func:`specproc.quantify`)."""
        return {t: float(self.fractions[t]) for t in TISSUES}

    def method(self) -> str:
        """One sentence on how the fractions were obtained (for methods tables)."""
        what = ("GM/WM/CSF probability maps" if self.maps_kind == "probability"
                else "a GM/WM/CSF label image (" + _table_text(self.label_table) + ")")
        n = self.n_samples
        zooms = " x ".join(f"{z:.3g}" for z in self.anatomy_zooms_mm)
        return (f"mean of {what} ({zooms} mm grid) over the voxel ({self.voxel.method}), "
                f"supersampled at {n[0]} x {n[1]} x {n[2]} points in the voxel's frame with "
                "trilinear interpolation; normalised to GM + WM + CSF = 1 "
                f"(unsegmented remainder {share_text(self.unsegmented)})")

    def to_dict(self) -> dict[str, Any]:
        """Plain dict for JSON outputs."""
        return {
            "fractions": self.as_mapping(),
            "raw": {t: float(self.raw[t]) for t in TISSUES},
            "unsegmented": float(self.unsegmented),
            "method": self.method(),
            "maps_kind": self.maps_kind,
            "sources": dict(self.sources),
            "label_table": None if self.label_table is None
            else {t: list(v) for t, v in self.label_table.items()},
            "n_samples": list(self.n_samples),
            "anatomy_zooms_mm": list(self.anatomy_zooms_mm),
            "voxel": self.voxel.to_dict(),
        }


def share_text(value: float) -> str:
    """A share of the voxel with three decimals, without a sign for what rounds to zero."""
    return f"{round(float(value), 3) + 0.0:.3f}"


def _table_text(table: Mapping[str, tuple[int, ...]] | None) -> str:
    if not table:
        return ""
    return ", ".join(f"{t.upper()} = {'+'.join(str(v) for v in table[t])}"
                     for t in TISSUES if t in table)


# ----------------------------------------------------------------------------- label tables
def parse_label_table(spec: str | os.PathLike[str] | None) -> dict[str, tuple[int, ...]]:
    """The label values of GM, WM and CSF from inline text or a table file.

    Parameters
    ----------
    spec : str, path-like or None
        Inline ``"gm=2,wm=3,csf=1"`` (several values joined by ``+``: ``"gm=2+42"``), or the
        path of a text table with one ``VALUE NAME`` pair per line (tab, space or comma
        separated; ``#`` comments and a header line allowed; names other than gm, wm, csf are
        ignored). ``None`` gives :data:`DEFAULT_LABEL_TABLE`.

    Raises
    ------
    InvalidInputError
        Unknown tissue names inline, values that are not integers, a tissue missing, or one
        value given to two tissues.
    """
    if spec is None:
        return {t: tuple(DEFAULT_LABEL_TABLE[t]) for t in TISSUES}
    text = os.fspath(spec)
    where: Path | None = None
    table: dict[str, list[int]] = {t: [] for t in TISSUES}
    if Path(text).is_file():
        where = Path(text)
        for n, line in enumerate(where.read_text(encoding="utf-8").splitlines(), start=1):
            line = line.split("#", 1)[0].strip()
            if not line:
                continue
            fields = [f for f in re.split(r"[\t ,;]+", line) if f]
            if len(fields) < 2:
                raise InvalidInputError(f"line {n}: expected 'VALUE NAME', got {line!r}", where)
            try:
                value = int(fields[0])
            except ValueError:
                if n == 1 or not any(table.values()):
                    continue  # a header line
                raise InvalidInputError(f"line {n}: label value {fields[0]!r} is not an "
                                        "integer", where) from None
            name = fields[1].strip().lower()
            if name in table:
                table[name].append(value)
    else:
        for part in text.split(","):
            if not part.strip():
                continue
            name, sep, values = part.partition("=")
            name = name.strip().lower()
            if not sep or name not in table:
                raise InvalidInputError(
                    f"label table {text!r}: expected gm=N,wm=N,csf=N (or a table file), got "
                    f"{part.strip()!r}")
            try:
                table[name].extend(int(v) for v in values.split("+"))
            except ValueError:
                raise InvalidInputError(f"label table {text!r}: label values must be "
                                        "integers") from None
    missing = [t for t in TISSUES if not table[t]]
    if missing:
        raise InvalidInputError(f"the label table gives no value for {', '.join(missing)}",
                                where)
    seen: dict[int, str] = {}
    for t in TISSUES:
        for v in table[t]:
            if v in seen and seen[v] != t:
                raise InvalidInputError(f"label {v} is given to both {seen[v]} and {t}", where)
            seen[v] = t
    return {t: tuple(sorted(set(table[t]))) for t in TISSUES}


# ----------------------------------------------------------------------------- loading maps
def _open_image(path: str | os.PathLike[str], what: str) -> Any:
    import nibabel as nib

    from specproc.io._util import reader_boundary, require_file

    p = require_file(path)
    with reader_boundary(p, "NIfTI"):
        img: Any = nib.load(str(p))
        shape = tuple(int(s) for s in img.shape)
        if len(shape) == 4 and shape[3] == 1:
            shape = shape[:3]
        if len(shape) != 3 or min(shape) < 1:
            raise InvalidInputError(f"the {what} must be a 3-D image, got shape "
                                    f"{tuple(img.shape)}", p)
        affine = np.asarray(img.affine, dtype=np.float64)
        if not np.all(np.isfinite(affine)) or abs(np.linalg.det(affine[:3, :3])) < 1e-9:
            raise InvalidInputError(f"the {what}'s affine is degenerate", p)
    return img


def check_same_grid(reference: Any, other: Any, reference_path: Any, other_path: Any) -> None:
    """Raise if two nibabel images do not share shape and affine (within 1 µm).

    Raises
    ------
    InvalidInputError
        Naming ``other_path`` and saying how the grids differ.
    """
    shape_a, shape_b = tuple(reference.shape[:3]), tuple(other.shape[:3])
    if shape_a != shape_b:
        raise InvalidInputError(
            f"not on the grid of {reference_path}: shape {shape_b} vs {shape_a} (resample the "
            "maps to the anatomy first)", other_path)
    diff = float(np.max(np.abs(np.asarray(reference.affine) - np.asarray(other.affine))))
    if diff > GRID_ATOL_MM:
        raise InvalidInputError(
            f"not on the grid of {reference_path}: the affines differ by up to {diff:.3g} mm",
            other_path)


def _crop_box(voxel: VoxelGeometry | None, affine: np.ndarray,
              shape: tuple[int, ...]) -> tuple[tuple[int, int, int], tuple[int, int, int]]:
    if voxel is None:
        return (0, 0, 0), (int(shape[0]), int(shape[1]), int(shape[2]))
    index = _world_to_index(voxel.corners_mm(), affine)
    lo = np.clip(np.floor(index.min(axis=0)).astype(int) - 2, 0, np.asarray(shape[:3]))
    hi = np.clip(np.ceil(index.max(axis=0)).astype(int) + 3, 0, np.asarray(shape[:3]))
    return (int(lo[0]), int(lo[1]), int(lo[2])), (int(hi[0]), int(hi[1]), int(hi[2]))


def _read_block(img: Any, lo: tuple[int, int, int], hi: tuple[int, int, int],
                path: Any) -> np.ndarray:
    from specproc.io._util import reader_boundary

    with reader_boundary(path, "NIfTI"):
        if len(img.shape) == 4:
            block = img.dataobj[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2], 0]
        else:
            block = img.dataobj[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]]
        block = np.asarray(block)
    if np.iscomplexobj(block):
        raise InvalidInputError("a segmentation map must be real-valued", path)
    block = block.astype(np.float32)
    if block.size and not np.all(np.isfinite(block)):
        raise InvalidInputError("the map holds NaN or infinite values near the voxel", path)
    return block


def load_probability_maps(gm: str | os.PathLike[str], wm: str | os.PathLike[str],
                          csf: str | os.PathLike[str], *, voxel: VoxelGeometry | None = None,
                          anatomy: str | os.PathLike[str] | None = None) -> TissueMaps:
    """Read GM, WM and CSF probability maps (NIfTI, values 0-1) on one grid.

    Parameters
    ----------
    gm, wm, csf : str or path-like
        The three maps, e.g. as written by a segmentation tool.
    voxel : VoxelGeometry, optional
        Read only the block around this voxel (much less memory for large images).
    anatomy : str or path-like, optional
        Anatomical image the maps must share their grid with.

    Raises
    ------
    InvalidInputError
        Unreadable files, images that are not 3-D, maps on different grids (or not on the
        anatomy's grid), values outside [0, 1] near the voxel.
    """
    paths = {"gm": Path(gm), "wm": Path(wm), "csf": Path(csf)}
    images = {t: _open_image(p, f"{t.upper()} map") for t, p in paths.items()}
    reference = images["gm"]
    for t in ("wm", "csf"):
        check_same_grid(reference, images[t], paths["gm"], paths[t])
    if anatomy is not None:
        anat = _open_image(anatomy, "anatomical image")
        for t in TISSUES:
            check_same_grid(anat, images[t], Path(anatomy), paths[t])
    affine = np.asarray(reference.affine, float)
    shape = tuple(int(s) for s in reference.shape[:3])
    lo, hi = _crop_box(voxel, affine, shape)
    maps = {}
    for t in TISSUES:
        block = _read_block(images[t], lo, hi, paths[t])
        if block.size:
            low, high = float(block.min()), float(block.max())
            if low < -_PROBABILITY_SLACK or high > 1.0 + _PROBABILITY_SLACK:
                raise InvalidInputError(
                    f"not a probability map: values from {low:.4g} to {high:.4g} near the voxel "
                    "(expected 0-1; for a label image use --labels)", paths[t])
        maps[t] = np.clip(block, 0.0, 1.0)
    return TissueMaps(maps=maps, grid_affine=affine, grid_shape=shape,  # type: ignore[arg-type]
                      offset=lo, kind="probability",
                      sources={t: str(p) for t, p in paths.items()})


def load_label_map(path: str | os.PathLike[str],
                   label_table: Mapping[str, tuple[int, ...]] | None = None, *,
                   voxel: VoxelGeometry | None = None,
                   anatomy: str | os.PathLike[str] | None = None) -> TissueMaps:
    """Read one label image and split it into 0/1 GM, WM and CSF maps.

    Parameters
    ----------
    path : str or path-like
        Integer label image (NIfTI).
    label_table : mapping, optional
        Label values of each tissue (see :func:`parse_label_table`); default
        :data:`DEFAULT_LABEL_TABLE`. Other labels count as unsegmented.
    voxel, anatomy
        As in :func:`load_probability_maps`.

    Raises
    ------
    InvalidInputError
        Non-integer values, a tissue whose labels do not occur in the image, grids that
        differ from the anatomy's, unreadable files.
    """
    p = Path(path)
    table = parse_label_table(None) if label_table is None else dict(label_table)
    img = _open_image(p, "label image")
    if anatomy is not None:
        check_same_grid(_open_image(anatomy, "anatomical image"), img, Path(anatomy), p)
    affine = np.asarray(img.affine, float)
    shape = tuple(int(s) for s in img.shape[:3])
    lo, hi = _crop_box(voxel, affine, shape)
    block = _read_block(img, lo, hi, p)
    if block.size and not np.allclose(block, np.round(block)):
        raise InvalidInputError("not a label image: it holds non-integer values near the voxel "
                                "(for probability maps use --gm/--wm/--csf)", p)
    labels = np.round(block).astype(np.int64)
    from specproc.io._util import reader_boundary

    with reader_boundary(p, "NIfTI"):
        present = set(np.unique(np.round(np.asarray(img.dataobj))).astype(np.int64).tolist())
    absent = [f"{t} ({'+'.join(map(str, table[t]))})" for t in TISSUES
              if not set(table[t]) & present]
    if absent:
        raise InvalidInputError(
            f"the label table's values for {', '.join(absent)} do not occur in the image "
            f"(labels present: {sorted(present)[:12]})", p)
    maps = {t: np.isin(labels, table[t]).astype(np.float32) for t in TISSUES}
    return TissueMaps(maps=maps, grid_affine=affine, grid_shape=shape,  # type: ignore[arg-type]
                      offset=lo, kind="labels", sources={t: str(p) for t in TISSUES},
                      label_table={t: tuple(table[t]) for t in TISSUES})


# ----------------------------------------------------------------------------- integration
def _world_to_index(points_mm: np.ndarray, affine: np.ndarray) -> np.ndarray:
    inverse = np.linalg.inv(affine)
    return points_mm @ inverse[:3, :3].T + inverse[:3, 3]


def voxel_sample_points(voxel: VoxelGeometry, n_samples: tuple[int, int, int]) -> np.ndarray:
    """Midpoints of ``n_i x n_j x n_k`` equal sub-boxes of the voxel, in world mm.

    Returns
    -------
    (n_i * n_j * n_k, 3) ndarray
        World coordinates, i varying slowest.
    """
    axes = [(np.arange(n) + 0.5) / n - 0.5 for n in n_samples]
    grid = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    return voxel.to_world(grid)


def _n_samples(voxel: VoxelGeometry, zooms_mm: np.ndarray, oversample: float
               ) -> tuple[int, int, int]:
    spacing = float(np.min(zooms_mm)) / float(oversample)
    n = [int(np.clip(math.ceil(s / spacing - 1e-9), _MIN_SAMPLES, _MAX_SAMPLES))
         for s in voxel.size_mm]
    return (n[0], n[1], n[2])


def _outside_fraction(voxel: VoxelGeometry, affine: np.ndarray,
                      shape: tuple[int, int, int]) -> float:
    """Share of the voxel outside the image's extent (index -1/2 .. n - 1/2 on each axis)."""
    def outside(index: np.ndarray) -> np.ndarray:
        upper = np.asarray(shape, float) - 0.5
        return np.any((index < -0.5 - 1e-6) | (index > upper + 1e-6), axis=-1)

    if not np.any(outside(_world_to_index(voxel.corners_mm(), affine))):
        return 0.0  # a box is inside a box when its corners are
    points = voxel_sample_points(voxel, (24, 24, 24))
    return max(float(np.mean(outside(_world_to_index(points, affine)))), 1e-6)


def voxel_tissue_fractions(voxel: VoxelGeometry, maps: TissueMaps, *, oversample: float = 4.0,
                           max_unsegmented: float = 0.1) -> TissueFractions:
    """GM, WM, CSF fractions of a voxel: the mean of each map over the voxel box.

    Parameters
    ----------
    voxel : VoxelGeometry
        The spectroscopy voxel (world mm).
    maps : TissueMaps
        The maps (:func:`load_probability_maps` or :func:`load_label_map`).
    oversample : float, default 4
        Supersampling points per smallest anatomical voxel side (at least 8 and at most 256
        points per voxel axis).
    max_unsegmented : float, default 0.1
        Largest accepted ``|1 - Σ raw|``.

    Returns
    -------
    TissueFractions

    Raises
    ------
    InvalidInputError
        The voxel lies partly or wholly outside the maps, the maps hold no tissue in the
        voxel, or the raw fractions do not sum to 1 within ``max_unsegmented``.

    Notes
    -----
    Midpoint rule over ``N = n_i n_j n_k`` points ``x_m`` of the voxel:
    ``r_t = (1/N) Σ_m p_t(x_m)`` with ``p_t`` trilinearly interpolated.
    """
    from scipy.ndimage import map_coordinates

    if not oversample > 0:
        raise InvalidInputError(f"oversample must be positive, got {oversample}")
    source = next(iter(maps.sources.values()), None)
    outside = _outside_fraction(voxel, maps.grid_affine, maps.grid_shape)
    if outside > 0:
        where = "wholly" if outside >= 1.0 else f"partly ({100 * outside:.1f} % of its volume)"
        centre = ", ".join(f"{v:.1f}" for v in voxel.centre_mm)
        raise InvalidInputError(
            f"the voxel (centre {centre} mm) lies {where} outside the anatomical image", source)
    n = _n_samples(voxel, maps.zooms_mm, oversample)
    inverse = np.linalg.inv(maps.grid_affine)
    offset = np.asarray(maps.offset, float)
    sums = dict.fromkeys(TISSUES, 0.0)
    axes = [(np.arange(k) + 0.5) / k - 0.5 for k in n]
    step = max(1, _CHUNK_POINTS // (n[1] * n[2]))
    # world = A_v @ idx_v; anatomy index = inv(A_a) @ world; shifted into the cropped block
    to_block = inverse @ voxel.affine
    for start in range(0, n[0], step):
        grid = np.stack(np.meshgrid(axes[0][start:start + step], axes[1], axes[2],
                                    indexing="ij"), axis=0).reshape(3, -1)
        coords = to_block[:3, :3] @ grid + (to_block[:3, 3] - offset)[:, None]
        for t in TISSUES:
            values = map_coordinates(maps.maps[t], coords, order=1, mode="nearest",
                                     prefilter=False)
            sums[t] += float(values.sum(dtype=np.float64))
    total_n = n[0] * n[1] * n[2]
    raw = {t: sums[t] / total_n for t in TISSUES}
    covered = sum(raw.values())
    if covered <= 1e-9:
        raise InvalidInputError("the maps hold no GM, WM or CSF inside the voxel", source)
    if abs(1.0 - covered) > max_unsegmented:
        kind = ("overlap: GM + WM + CSF" if covered > 1 else "cover only")
        raise InvalidInputError(
            f"the tissue maps {kind} {covered:.3f} of the voxel, not about 1 (allowed "
            f"|1 - sum| <= {max_unsegmented:g}; GM {raw['gm']:.3f}, WM {raw['wm']:.3f}, "
            f"CSF {raw['csf']:.3f})", source)
    fractions = {t: raw[t] / covered for t in TISSUES}
    if fractions["csf"] >= 1.0 - 1e-9:
        raise InvalidInputError("the voxel is CSF only: no tissue to refer concentrations to",
                                source)
    zooms = maps.zooms_mm
    return TissueFractions(
        fractions=fractions, raw=raw, unsegmented=1.0 - covered, n_samples=n, voxel=voxel,
        maps_kind=maps.kind, sources=dict(maps.sources), label_table=maps.label_table,
        anatomy_zooms_mm=(float(zooms[0]), float(zooms[1]), float(zooms[2])),
    )


# ----------------------------------------------------------------------------- from files
@dataclass(frozen=True)
class TissueMapFiles:
    """Where a scan's segmentation is: three probability maps or one label image.

    Attributes
    ----------
    gm, wm, csf : Path or None
        Probability maps (all three, or none).
    labels : Path or None
        Label image (instead of the three maps).
    label_table : str or None
        Inline table or table file for ``labels`` (see :func:`parse_label_table`).
    anatomy : Path or None
        Anatomical image the maps must share their grid with (and that the voxel picture
        shows).
    """

    gm: Path | None = None
    wm: Path | None = None
    csf: Path | None = None
    labels: Path | None = None
    label_table: str | None = None
    anatomy: Path | None = None

    def __post_init__(self) -> None:
        maps = [p for p in (self.gm, self.wm, self.csf) if p is not None]
        if maps and len(maps) != 3:
            raise InvalidInputError("give all three of the GM, WM and CSF maps, or a label "
                                    "image")
        if maps and self.labels is not None:
            raise InvalidInputError("give either GM/WM/CSF maps or a label image, not both")
        if not maps and self.labels is None:
            raise InvalidInputError("no segmentation: give GM, WM and CSF maps or a label image")
        if self.label_table is not None and self.labels is None:
            raise InvalidInputError("a label table needs a label image")

    def describe(self) -> dict[str, Any]:
        """Plain dict of the paths (for hashes and JSON outputs)."""
        return {k: None if v is None else str(v) for k, v in (
            ("gm", self.gm), ("wm", self.wm), ("csf", self.csf), ("labels", self.labels),
            ("label_table", self.label_table), ("anatomy", self.anatomy))}


def tissue_fractions_from_files(scan: Any, files: TissueMapFiles, *,
                                oversample: float = 4.0, max_unsegmented: float = 0.1,
                                picture: bool | None = None) -> TissueFractions:
    """Voxel geometry of ``scan`` + the segmentation of ``files`` -> tissue fractions.

    Reads the voxel from the spectroscopy file (:func:`read_voxel_geometry`), the maps around
    it, checks everything and integrates (:func:`voxel_tissue_fractions`).

    Parameters
    ----------
    scan : str, path-like or Scan
        NIfTI-MRS or DICOM MRS file, or a loaded Scan (:func:`voxel_of`).
    files : TissueMapFiles
        The segmentation (and anatomy).
    oversample, max_unsegmented
        As in :func:`voxel_tissue_fractions`.
    picture : bool, optional
        Also sample the planes of the voxel picture (``planes``); default: when ``files``
        has an anatomical image. ``True`` without one is an error.
    """
    import dataclasses

    from specproc.tissue.geometry import voxel_of

    voxel = voxel_of(scan)
    maps = load_tissue_maps(files, voxel=voxel)
    result = voxel_tissue_fractions(voxel, maps, oversample=oversample,
                                    max_unsegmented=max_unsegmented)
    if picture is None:
        picture = files.anatomy is not None
    if not picture:
        return result
    if files.anatomy is None:
        raise InvalidInputError("the voxel picture needs the anatomical image")
    from specproc.report.voxel import voxel_planes

    anatomy, affine = load_anatomy(files.anatomy)
    planes = voxel_planes(anatomy, affine, voxel, maps=load_tissue_maps(files).maps)
    return dataclasses.replace(result, planes=planes)


def load_tissue_maps(files: TissueMapFiles, *, voxel: VoxelGeometry | None = None
                     ) -> TissueMaps:
    """The maps of ``files`` (probability maps or split label image), checked against the
    anatomy when given; only the block around ``voxel`` when given, else the whole images."""
    if files.labels is not None:
        table = parse_label_table(files.label_table)
        return load_label_map(files.labels, table, voxel=voxel, anatomy=files.anatomy)
    assert files.gm is not None and files.wm is not None and files.csf is not None
    return load_probability_maps(files.gm, files.wm, files.csf, voxel=voxel,
                                 anatomy=files.anatomy)


def load_anatomy(path: str | os.PathLike[str]) -> tuple[np.ndarray, np.ndarray]:
    """An anatomical image as a float32 (nx, ny, nz) array and its (4, 4) affine (mm)."""
    from specproc.io._util import reader_boundary

    img = _open_image(path, "anatomical image")
    with reader_boundary(path, "NIfTI"):
        data = np.asarray(img.dataobj, dtype=np.float32)
    data = data.reshape(data.shape[:3])
    if not np.all(np.isfinite(data)):
        data = np.where(np.isfinite(data), data, 0.0).astype(np.float32)
    return data, np.asarray(img.affine, float)
