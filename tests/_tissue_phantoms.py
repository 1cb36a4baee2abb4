"""Test helpers of the tissue tests: phantoms with known geometry, written with nibabel only.

Nothing here goes through specproc: the maps are computed from closed-form shapes (half
spaces, spherical shells) and written with plain nibabel; the spectroscopy files are NIfTI-2
images with the NIfTI-MRS JSON extension set by hand.
"""

from __future__ import annotations

import json
from pathlib import Path

import nibabel as nib
import numpy as np

__all__ = [
    "rotation_deg",
    "shell_fraction_brute_force",
    "shell_maps",
    "voxel_affine",
    "write_map",
    "write_mrs_with_affine",
]


def rotation_deg(x_deg: float = 0.0, y_deg: float = 0.0, z_deg: float = 0.0) -> np.ndarray:
    """Rotation matrix R = Rz @ Ry @ Rx (right-handed, angles in degrees); shape (3, 3)."""
    ax, ay, az = np.radians([x_deg, y_deg, z_deg])
    rx = np.array([[1, 0, 0], [0, np.cos(ax), -np.sin(ax)], [0, np.sin(ax), np.cos(ax)]])
    ry = np.array([[np.cos(ay), 0, np.sin(ay)], [0, 1, 0], [-np.sin(ay), 0, np.cos(ay)]])
    rz = np.array([[np.cos(az), -np.sin(az), 0], [np.sin(az), np.cos(az), 0], [0, 0, 1]])
    return rz @ ry @ rx


def voxel_affine(size_mm, centre_mm, rotation=None) -> np.ndarray:
    """Affine of a box with sides ``size_mm`` along the columns of ``rotation``."""
    a = np.eye(4)
    r = np.eye(3) if rotation is None else np.asarray(rotation, float)
    a[:3, :3] = r * np.asarray(size_mm, float)
    a[:3, 3] = centre_mm
    return a


def write_mrs_with_affine(path: Path, affine: np.ndarray, *, form: str = "sform",
                          version: int = 2) -> Path:
    """A one-voxel NIfTI-MRS file written by plain nibabel with the given voxel affine.

    ``form`` is ``"sform"`` (sform code 1, qform code 0), ``"qform"`` (qform code 1, sform
    code 0), ``"both"`` or ``"none"`` (both codes 0).
    """
    t = np.arange(256) * 4e-4
    fid = (np.exp(-t / 0.05) * np.exp(2j * np.pi * 30 * t)).astype(np.complex64)
    data = fid.reshape(1, 1, 1, -1)
    cls = nib.Nifti2Image if version == 2 else nib.Nifti1Image
    img = cls(data, affine=None)
    hdr = img.header
    hdr.set_data_dtype(np.complex64)
    hdr.set_xyzt_units("mm", "sec")
    zooms = np.linalg.norm(affine[:3, :3], axis=0)
    hdr.set_zooms((*zooms, 4e-4))
    if form in ("sform", "both"):
        hdr.set_sform(affine, code=1)
    if form in ("qform", "both"):
        hdr.set_qform(affine, code=1)
    if form == "none":
        hdr.set_sform(affine, code=0)
        hdr.set_qform(affine, code=0)
    hdr["intent_name"] = b"mrs_v0_9"
    meta = {"SpectrometerFrequency": [123.25], "ResonantNucleus": ["1H"], "EchoTime": 0.03}
    hdr.extensions.append(nib.nifti1.Nifti1Extension(44, json.dumps(meta).encode()))
    img = cls(data, affine=None, header=hdr)
    img.header.set_zooms((*zooms, 4e-4))
    nib.save(img, str(path))
    return path


def write_map(path: Path, data: np.ndarray, affine: np.ndarray) -> Path:
    """A 3-D NIfTI-1 image (float32, or the dtype of ``data``) written by plain nibabel."""
    img = nib.Nifti1Image(np.asarray(data), affine)
    img.header.set_xyzt_units("mm")
    nib.save(img, str(path))
    return path


def shell_maps(zoom_mm: float, half_width_mm: float, r_inner_mm: float, r_outer_mm: float, *,
               grid_centre_mm=(0.0, 0.0, 0.0), sub_mm: float = 0.25
               ) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Partial-volume maps of a sphere: CSF inside ``r_inner``, GM shell, WM outside.

    A voxel wholly on one side of both spheres gets 0 or 1; a voxel the spheres cut gets the
    share of its ``(zoom / sub)³`` sub-points (spacing ``sub_mm``) in each class, so maps at
    different zooms estimate the same partial volumes.

    Returns
    -------
    maps : dict of (n, n, n) float32 arrays (``gm``, ``wm``, ``csf``)
    affine : (4, 4) ndarray; the sphere is centred on the world origin, the grid on
        ``grid_centre_mm`` (rounded to whole voxels)
    """
    n = round(2 * half_width_mm / zoom_mm)
    s = round(zoom_mm / sub_mm)
    shift = np.round(np.asarray(grid_centre_mm, float) / zoom_mm) * zoom_mm
    centres = (np.arange(n) - (n - 1) / 2) * zoom_mm
    xx, yy, zz = np.meshgrid(centres + shift[0], centres + shift[1], centres + shift[2],
                             indexing="ij")
    r = np.sqrt(xx ** 2 + yy ** 2 + zz ** 2)
    csf = (r < r_inner_mm).astype(float)
    gm = ((r >= r_inner_mm) & (r < r_outer_mm)).astype(float)
    reach = np.sqrt(3.0) / 2 * zoom_mm  # farthest point of a voxel from its centre
    cut = (np.abs(r - r_inner_mm) <= reach) | (np.abs(r - r_outer_mm) <= reach)
    offsets = ((np.arange(s) + 0.5) / s - 0.5) * zoom_mm
    sub = np.stack(np.meshgrid(offsets, offsets, offsets, indexing="ij"), -1).reshape(-1, 3)
    points = np.stack([xx[cut], yy[cut], zz[cut]], -1)[:, None, :] + sub[None, :, :]
    r_sub = np.linalg.norm(points, axis=-1)
    csf[cut] = np.mean(r_sub < r_inner_mm, axis=1)
    gm[cut] = np.mean((r_sub >= r_inner_mm) & (r_sub < r_outer_mm), axis=1)
    affine = np.diag([zoom_mm, zoom_mm, zoom_mm, 1.0])
    affine[:3, 3] = -(n - 1) / 2 * zoom_mm + shift
    maps = {"gm": gm.astype(np.float32), "csf": csf.astype(np.float32),
            "wm": (1.0 - gm - csf).astype(np.float32)}
    return maps, affine


def shell_fraction_brute_force(affine: np.ndarray, r_inner_mm: float, r_outer_mm: float, *,
                               spacing_mm: float = 0.1) -> dict[str, float]:
    """Share of a voxel box in each class of the sphere, by counting points on a fine grid."""
    sides = np.linalg.norm(affine[:3, :3], axis=0)
    counts = [max(2, round(s / spacing_mm)) for s in sides]
    axes = [(np.arange(c) + 0.5) / c - 0.5 for c in counts]
    inside = {"gm": 0, "csf": 0, "wm": 0}
    total = 0
    for a in axes[0]:
        grid = np.stack(np.meshgrid([a], axes[1], axes[2], indexing="ij"), -1).reshape(-1, 3)
        world = grid @ affine[:3, :3].T + affine[:3, 3]
        r = np.linalg.norm(world, axis=1)
        inside["csf"] += int(np.sum(r < r_inner_mm))
        inside["gm"] += int(np.sum((r >= r_inner_mm) & (r < r_outer_mm)))
        inside["wm"] += int(np.sum(r >= r_outer_mm))
        total += r.size
    return {k: v / total for k, v in inside.items()}
