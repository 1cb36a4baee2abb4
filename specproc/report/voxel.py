"""The picture of the spectroscopy voxel on the subject's anatomy.

Three orthogonal planes of world space (sagittal x = const, coronal y = const, axial z = const)
through the voxel centre, resampled from the anatomical image (trilinear,
``scipy.ndimage.map_coordinates``) so that the picture does not depend on how the image is
stored; the outline is the exact cut of each plane through the (possibly oblique) voxel box,
and the GM, WM and CSF maps can be laid over the anatomy as translucent colours. Each panel is
labelled with the anatomical directions (R/L, A/P, S/I; right on the right of coronal and
axial panels, anterior on the right of the sagittal panel).

Pure functions: :func:`sample_plane`, :func:`plane_outline_mm` and :func:`voxel_planes`
compute what is shown (:class:`VoxelPlanes`, small arrays kept with the tissue fractions),
:func:`plot_voxel_planes` draws it as a matplotlib figure (Agg, no display) and
:func:`voxel_picture_png` renders it to PNG bytes. :func:`tissue_methods_rows` gives the rows
of the report's methods table on the voxel and its tissue fractions, and
:func:`with_tissue_methods` places them in a table.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from specproc.report.figures import plain_text

__all__ = [
    "PLANES",
    "TISSUE_COLOURS",
    "VOXEL_CAPTION",
    "VoxelPlanes",
    "plane_outline_mm",
    "plot_voxel",
    "plot_voxel_planes",
    "sample_plane",
    "tissue_methods_rows",
    "voxel_picture_png",
    "voxel_planes",
    "with_tissue_methods",
]

#: The three panels: name, the world axis held fixed, and the (horizontal, vertical) world axes.
PLANES: tuple[tuple[str, int, tuple[int, int]], ...] = (
    ("sagittal", 0, (1, 2)),
    ("coronal", 1, (0, 2)),
    ("axial", 2, (0, 1)),
)
#: Overlay colours of the tissue maps (RGB, 0-1).
TISSUE_COLOURS: Mapping[str, tuple[float, float, float]] = {
    "gm": (0.85, 0.37, 0.01), "wm": (0.11, 0.62, 0.47), "csf": (0.30, 0.45, 0.95),
}
_AXIS_LETTERS = (("L", "R"), ("P", "A"), ("I", "S"))
_OUTLINE_COLOUR = "#ffe14d"
_OVERLAY_ALPHA = 0.3
#: Caption of the picture in the report.
VOXEL_CAPTION = ("Voxel on the anatomy: sagittal, coronal and axial planes through its centre, "
                 "outline of the voxel cut by each plane, GM/WM/CSF maps laid over the image")
_MAX_PIXELS = 360


def _extent_mm(affine: np.ndarray, shape: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """World bounding box (low, high corners, mm) of an image's voxels (edges included)."""
    corners = np.array([[(n >> b) & 1 for b in range(3)] for n in range(8)], float)
    index = corners * (np.asarray(shape[:3], float)) - 0.5
    world = index @ affine[:3, :3].T + affine[:3, 3]
    return world.min(axis=0), world.max(axis=0)


def sample_plane(volume: np.ndarray, affine: np.ndarray, centre_mm: Sequence[float],
                 plane: int, *, pixel_mm: float, low_mm: np.ndarray, high_mm: np.ndarray,
                 order: int = 1) -> tuple[np.ndarray, tuple[float, float, float, float]]:
    """Values of a volume on a world plane through ``centre_mm`` (0 outside the image).

    Parameters
    ----------
    volume : (nx, ny, nz) ndarray
        The image.
    affine : (4, 4) ndarray
        Its voxel index -> world mm affine.
    centre_mm : sequence of 3 float
        A point of the plane, mm.
    plane : {0, 1, 2}
        Index into :data:`PLANES` (sagittal, coronal, axial).
    pixel_mm : float
        Pixel side of the picture, mm.
    low_mm, high_mm : (3,) ndarray
        World box to show.

    Returns
    -------
    image : (n_vertical, n_horizontal) ndarray
        Row 0 at the bottom (``origin="lower"``).
    extent : tuple of 4 float
        ``(h_min, h_max, v_min, v_max)`` in mm, for matplotlib's ``imshow``.
    """
    from scipy.ndimage import map_coordinates

    _, fixed, (h, v) = PLANES[plane]
    h_axis = np.arange(low_mm[h] + pixel_mm / 2, high_mm[h], pixel_mm)
    v_axis = np.arange(low_mm[v] + pixel_mm / 2, high_mm[v], pixel_mm)
    hh, vv = np.meshgrid(h_axis, v_axis)
    world = np.zeros((*hh.shape, 3))
    world[..., fixed] = centre_mm[fixed]
    world[..., h] = hh
    world[..., v] = vv
    inverse = np.linalg.inv(affine)
    index = world.reshape(-1, 3) @ inverse[:3, :3].T + inverse[:3, 3]
    values = map_coordinates(np.asarray(volume, np.float32), index.T, order=order,
                             mode="constant", cval=0.0, prefilter=False)
    extent = (float(h_axis[0] - pixel_mm / 2), float(h_axis[-1] + pixel_mm / 2),
              float(v_axis[0] - pixel_mm / 2), float(v_axis[-1] + pixel_mm / 2))
    return values.reshape(hh.shape), extent


def plane_outline_mm(voxel: Any, plane: int) -> np.ndarray:
    """The cut of the world plane of :data:`PLANES` ``plane`` through the voxel centre.

    Returns
    -------
    (n, 2) ndarray
        Vertices (horizontal, vertical world mm) of the convex polygon, in order around it
        (3 to 6 vertices); the first is not repeated.
    """
    _, fixed, (h, v) = PLANES[plane]
    corners = voxel.corners_mm()
    level = float(voxel.centre_mm[fixed])
    points = []
    for a in range(8):
        for bit in range(3):
            b = a | (1 << bit)
            if b == a:
                continue
            da, db = corners[a, fixed] - level, corners[b, fixed] - level
            if da == 0.0:
                points.append(corners[a])
            if da * db < 0:
                t = da / (da - db)
                points.append(corners[a] + t * (corners[b] - corners[a]))
    cut = np.array(points)[:, [h, v]]
    cut = np.unique(np.round(cut, 9), axis=0)
    middle = cut.mean(axis=0)
    angle = np.arctan2(cut[:, 1] - middle[1], cut[:, 0] - middle[0])
    return cut[np.argsort(angle)]


@dataclass(frozen=True, eq=False)
class VoxelPlanes:
    """What the voxel picture shows: three planes sampled from the anatomy (and maps).

    Attributes
    ----------
    voxel : VoxelGeometry
        The voxel.
    images : tuple of 3 (n_v, n_h) ndarray
        Anatomy on the sagittal, coronal and axial planes (:data:`PLANES`).
    extents : tuple of 3 tuples of 4 float
        ``(h_min, h_max, v_min, v_max)`` of each plane, mm.
    overlays : tuple of 3 mappings, or None
        Tissue maps (``gm``, ``wm``, ``csf``) on the same planes.
    outlines : tuple of 3 (n, 2) ndarray
        The voxel's cut through each plane (:func:`plane_outline_mm`).
    display_max : float
        Grey level shown white (99.5th percentile of the anatomy).
    """

    voxel: Any
    images: tuple[np.ndarray, ...]
    extents: tuple[tuple[float, float, float, float], ...]
    overlays: tuple[Mapping[str, np.ndarray], ...] | None
    outlines: tuple[np.ndarray, ...]
    display_max: float


def voxel_planes(anatomy: np.ndarray, affine: np.ndarray, voxel: Any, *,
                 maps: Mapping[str, np.ndarray] | None = None) -> VoxelPlanes:
    """Sample the three planes through the voxel centre from the anatomy (and the maps).

    Parameters
    ----------
    anatomy : (nx, ny, nz) ndarray
        Anatomical image (e.g. T1-weighted).
    affine : (4, 4) ndarray
        Its voxel index -> world mm affine (the maps share it).
    voxel : VoxelGeometry
        The spectroscopy voxel.
    maps : mapping of str to ndarray, optional
        GM, WM, CSF maps (0-1) to lay over the anatomy.
    """
    low, high = _extent_mm(affine, anatomy.shape)
    pixel = max(float(np.min(np.linalg.norm(affine[:3, :3], axis=0))),
                float(np.max(high - low)) / _MAX_PIXELS)
    centre = voxel.centre_mm
    finite = anatomy[np.isfinite(anatomy)]
    top = float(np.percentile(finite, 99.5)) if finite.size else 1.0
    images, extents, overlays, outlines = [], [], [], []
    for k in range(len(PLANES)):
        image, extent = sample_plane(anatomy, affine, centre, k, pixel_mm=pixel,
                                     low_mm=low, high_mm=high)
        images.append(image.astype(np.float32))
        extents.append(extent)
        outlines.append(plane_outline_mm(voxel, k))
        if maps:
            overlays.append({t: np.clip(sample_plane(maps[t], affine, centre, k,
                                                     pixel_mm=pixel, low_mm=low,
                                                     high_mm=high)[0], 0.0, 1.0
                                        ).astype(np.float32)
                             for t in TISSUE_COLOURS if t in maps})
    return VoxelPlanes(voxel=voxel, images=tuple(images), extents=tuple(extents),
                       overlays=tuple(overlays) if maps else None, outlines=tuple(outlines),
                       display_max=top if top > 0 else 1.0)


def plot_voxel_planes(planes: VoxelPlanes, *, fractions: Mapping[str, float] | None = None,
                      title: str | None = None) -> Any:
    """Figure: the voxel outline on the three planes of :func:`voxel_planes`.

    Parameters
    ----------
    planes : VoxelPlanes
    fractions : mapping of str to float, optional
        Shown in the legend.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch, Polygon

    centre = planes.voxel.centre_mm
    fig = Figure(figsize=(10.5, 4.0))
    FigureCanvasAgg(fig)
    fig.subplots_adjust(left=0.02, right=0.98, top=0.84, bottom=0.12, wspace=0.06)
    for k, (name, fixed, (h, v)) in enumerate(PLANES):
        ax = fig.add_subplot(1, 3, k + 1)
        extent = planes.extents[k]
        ax.imshow(planes.images[k], origin="lower", extent=extent, cmap="gray", vmin=0.0,
                  vmax=planes.display_max, interpolation="nearest")
        if planes.overlays is not None:
            layers = planes.overlays[k]
            rgba = np.zeros((*planes.images[k].shape, 4))
            for t, layer in layers.items():
                rgba[..., :3] += layer[..., None] * np.asarray(TISSUE_COLOURS[t])
                rgba[..., 3] += _OVERLAY_ALPHA * layer
            rgba[..., 3] = np.clip(rgba[..., 3], 0.0, _OVERLAY_ALPHA)
            ax.imshow(np.clip(rgba, 0.0, 1.0), origin="lower", extent=extent,
                      interpolation="nearest")
        ax.add_patch(Polygon(planes.outlines[k], closed=True, fill=False,
                             edgecolor=_OUTLINE_COLOUR, linewidth=1.6))
        ax.plot([centre[h]], [centre[v]], "+", color=_OUTLINE_COLOUR, ms=7, mew=1.2)
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
        ax.set_aspect("equal")
        ax.set_xticks([])
        ax.set_yticks([])
        ax.set_title(f"{name}, {'xyz'[fixed]} = {centre[fixed]:.1f} mm", fontsize=9)
        for (text, x, y, ha, va) in (
            (_AXIS_LETTERS[h][0], 0.02, 0.5, "left", "center"),
            (_AXIS_LETTERS[h][1], 0.98, 0.5, "right", "center"),
            (_AXIS_LETTERS[v][0], 0.5, 0.02, "center", "bottom"),
            (_AXIS_LETTERS[v][1], 0.5, 0.98, "center", "top"),
        ):
            ax.text(x, y, text, transform=ax.transAxes, ha=ha, va=va, color="white",
                    fontsize=9, fontweight="bold")
    handles = []
    if planes.overlays is not None:
        for t, colour in TISSUE_COLOURS.items():
            label = t.upper()
            if fractions is not None and t in fractions:
                label += f" {fractions[t]:.2f}"
            handles.append(Patch(facecolor=colour, alpha=0.6, label=label))
    handles.append(Patch(facecolor="none", edgecolor=_OUTLINE_COLOUR, label="voxel"))
    fig.legend(handles=handles, loc="lower center", ncol=len(handles), fontsize=8,
               frameon=False)
    sides = " x ".join(f"{s:.1f}" for s in planes.voxel.size_mm)
    heading = f"voxel {sides} mm at ({', '.join(f'{c:.1f}' for c in centre)}) mm"
    fig.suptitle(plain_text(f"{title}: {heading}" if title else heading), fontsize=10)
    return fig


def plot_voxel(anatomy: np.ndarray, affine: np.ndarray, voxel: Any, *,
               maps: Mapping[str, np.ndarray] | None = None,
               fractions: Mapping[str, float] | None = None, title: str | None = None) -> Any:
    """:func:`plot_voxel_planes` of :func:`voxel_planes` (arguments as there)."""
    return plot_voxel_planes(voxel_planes(anatomy, affine, voxel, maps=maps),
                             fractions=fractions, title=title)


def voxel_picture_png(planes: VoxelPlanes, *, fractions: Mapping[str, float] | None = None,
                      title: str | None = None) -> bytes:
    """PNG bytes of :func:`plot_voxel_planes` (``$`` in the title is shown as it is)."""
    from specproc.report.figures import figure_png_bytes

    safe = None if title is None else title.replace("$", r"\$")  # no mathtext
    return figure_png_bytes(plot_voxel_planes(planes, fractions=fractions, title=safe), dpi=100)


def tissue_methods_rows(tissue_info: Mapping[str, Any] | None) -> list[dict[str, str]]:
    """Rows of the report's methods table on where the voxel was and how its tissue fractions
    were obtained (``section``, ``item``, ``value``; plain text).

    Parameters
    ----------
    tissue_info : mapping or None
        :meth:`specproc.tissue.TissueFractions.to_dict`, or ``{"method": "given", "fractions":
        {...}}`` for numbers typed by the user; ``None`` gives no rows.
    """
    if not tissue_info:
        return []
    rows: list[dict[str, str]] = []
    voxel = tissue_info.get("voxel")
    if voxel:
        centre = ", ".join(f"{v:.1f}" for v in voxel["centre_mm"])
        sides = " x ".join(f"{v:.1f}" for v in voxel["size_mm"])
        tilt = ", ".join(f"{v:.1f}" for v in voxel["edge_tilt_deg"])
        rows.append({"section": "2 Acquisition", "item": "voxel position and orientation",
                     "value": f"centre ({centre}) mm, {sides} mm, edges tilted ({tilt})° from "
                              f"the scanner axes ({voxel['method']})"})
    fractions = tissue_info.get("fractions") or {}
    if fractions:
        text = ", ".join(f"{t.upper()} {float(fractions[t]):.3f}" for t in ("gm", "wm", "csf")
                         if t in fractions)
        rows.append({"section": "3 Analysis", "item": "tissue fractions: values",
                     "value": text})
    method = tissue_info.get("method")
    if method == "given":
        method = "volume fractions given by the user (not computed by specproc)"
    if method:
        rows.append({"section": "3 Analysis", "item": "tissue fractions: method",
                     "value": str(method)})
    sources = tissue_info.get("sources") or {}
    if sources:
        names = sorted({Path(str(p)).name for p in sources.values()})
        rows.append({"section": "3 Analysis", "item": "segmentation",
                     "value": ", ".join(names)})
    if "unsegmented" in tissue_info:
        from specproc.tissue.fractions import share_text

        rows.append({"section": "3 Analysis", "item": "unsegmented share of the voxel",
                     "value": f"{share_text(tissue_info['unsegmented'])} (not in the GM, WM or "
                              "CSF map; the fractions are normalised to their sum)"})
    return rows


def with_tissue_methods(rows: Sequence[Mapping[str, str]],
                        tissue_info: Mapping[str, Any] | None) -> list[dict[str, str]]:
    """The methods table ``rows`` with :func:`tissue_methods_rows` placed at the end of their
    sections (a section that is not there yet is added at the end)."""
    out = [dict(r) for r in rows]
    for extra in tissue_methods_rows(tissue_info):
        last = max((k for k, r in enumerate(out) if r.get("section") == extra["section"]),
                   default=len(out) - 1)
        out.insert(last + 1, extra)
    return out
