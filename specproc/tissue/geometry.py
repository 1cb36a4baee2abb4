"""Where the spectroscopy voxel is: its box in scanner (world) coordinates.

Conventions
-----------
World coordinates are millimetres in the NIfTI "RAS+" sense (x to the subject's right, y
anterior, z superior), the space of a NIfTI affine and of nibabel's ``apply_affine``. A voxel is
described by a 4 x 4 affine ``A`` that maps its own index coordinates ``(i, j, k)`` to world
coordinates, exactly as the affine of a one-voxel NIfTI image: the voxel centre is
``A @ (0, 0, 0, 1)`` and the voxel is the box ``-1/2 <= i, j, k <= 1/2``. The columns of the
3 x 3 part are the voxel's edges (their lengths are its sides in mm), so an oblique voxel is a
rotated box.

Sources
-------
* NIfTI-MRS (Clarke et al. 2022): the spatial dimensions 1-3 of the one-voxel image; the
  sform when ``sform_code > 0``, otherwise the qform when ``qform_code > 0`` (the NIfTI-1
  rule, which nibabel's ``get_best_affine`` also follows). The lengths of its columns must
  agree with pixdim[1-3] (the voxel sides) within 1 %.
* DICOM MR Spectroscopy (PS3.3 C.8.14): the Volume Localization Sequence (0018,9126) of
  three slabs (Slab Thickness, Slab Orientation, Mid Slab Position), whose mid planes meet at
  the voxel centre; otherwise the voxel of the spectroscopy grid from Plane Position
  (Patient) (0020,0032), Plane Orientation (Patient) (0020,0037), Pixel Spacing (0028,0030)
  and Slice Thickness (0018,0050), in the Shared Functional Groups or at the top level. DICOM
  patient coordinates are LPS; they are turned to RAS by negating x and y.

A voxel whose geometry is missing, degenerate (zero, non-finite), non-orthogonal (sheared),
or a placeholder (identity affine with 1 mm sides: a file written without its position) is
refused with an :class:`~specproc.errors.InvalidInputError`, never guessed.

References
----------
.. [1] Clarke WT, Bell TK, Emir UE, et al. NIfTI-MRS: a standard data format for magnetic
   resonance spectroscopy. Magn Reson Med 2022;88:2358-2370.
.. [2] NIfTI-1 data format, ``nifti1.h`` (qform/sform, methods 2 and 3), and nibabel's
   "Coordinate systems and affines" documentation.
.. [3] NEMA PS3.3, C.7.6.2 (Image Plane: Image Position and Orientation (Patient), LPS) and
   C.8.13.5 / C.8.14 (MR Volume Localization; MR Spectroscopy).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from specproc.errors import InvalidInputError

__all__ = [
    "LPS_TO_RAS",
    "VoxelGeometry",
    "check_voxel_affine",
    "read_voxel_geometry",
    "voxel_from_dicom",
    "voxel_from_nifti_header",
    "voxel_of",
]

#: Turns DICOM patient coordinates (LPS) into NIfTI world coordinates (RAS): x, y negated.
LPS_TO_RAS: np.ndarray = np.diag([-1.0, -1.0, 1.0, 1.0])

#: Largest |cos| between two voxel edges accepted as orthogonal (about 0.06 degrees).
ORTHOGONALITY_TOL: float = 1e-3
#: Largest relative difference between an affine column length and pixdim.
PIXDIM_TOL: float = 1e-2


@dataclass(frozen=True, eq=False)
class VoxelGeometry:
    """The box of one spectroscopy voxel in world (RAS+, mm) coordinates.

    Attributes
    ----------
    affine : (4, 4) ndarray
        Voxel index -> world mm; the voxel is ``-1/2 <= i, j, k <= 1/2``.
    method : str
        Where the geometry came from (``"NIfTI sform"``, ``"NIfTI qform"``,
        ``"DICOM volume localization"``, ``"DICOM plane position"``, ``"given"``).
    source : str or None
        The file it was read from.
    """

    affine: np.ndarray
    method: str = "given"
    source: str | None = None

    def __post_init__(self) -> None:
        affine = check_voxel_affine(self.affine, self.source)
        affine.flags.writeable = False
        object.__setattr__(self, "affine", affine)

    @property
    def centre_mm(self) -> np.ndarray:
        """Voxel centre in world coordinates, mm; shape (3,)."""
        return self.affine[:3, 3].copy()

    @property
    def size_mm(self) -> np.ndarray:
        """Sides along the voxel's own axes i, j, k, mm; shape (3,)."""
        return np.linalg.norm(self.affine[:3, :3], axis=0)

    @property
    def axes(self) -> np.ndarray:
        """Unit edge directions in world coordinates, one per column; shape (3, 3)."""
        return self.affine[:3, :3] / self.size_mm

    @property
    def volume_ml(self) -> float:
        """Voxel volume, mL (cm³)."""
        return float(abs(np.linalg.det(self.affine[:3, :3])) / 1e3)

    def corners_mm(self) -> np.ndarray:
        """The eight corners in world coordinates, mm; shape (8, 3).

        Corner ``n`` has index coordinates ``(±1/2, ±1/2, ±1/2)`` with the bits of ``n``
        choosing the signs (bit 0 for i, bit 1 for j, bit 2 for k).
        """
        signs = np.array([[(n >> b) & 1 for b in range(3)] for n in range(8)], float) - 0.5
        return self.to_world(signs)

    def to_world(self, index: np.ndarray) -> np.ndarray:
        """World coordinates (mm) of voxel index coordinates; shape (..., 3) -> (..., 3)."""
        index = np.asarray(index, dtype=float)
        return index @ self.affine[:3, :3].T + self.affine[:3, 3]

    def angles_deg(self) -> np.ndarray:
        """Angle of each voxel edge to the nearest world axis, degrees; shape (3,)."""
        cosines = np.abs(self.axes).max(axis=0)
        return np.degrees(np.arccos(np.clip(cosines, -1.0, 1.0)))

    def to_dict(self) -> dict[str, Any]:
        """Plain dict for JSON outputs (mm, mL, degrees)."""
        return {
            "method": self.method,
            "source": self.source,
            "centre_mm": [float(v) for v in self.centre_mm],
            "size_mm": [float(v) for v in self.size_mm],
            "volume_ml": self.volume_ml,
            "edge_tilt_deg": [float(v) for v in self.angles_deg()],
            "affine": [[float(v) for v in row] for row in self.affine],
        }


def check_voxel_affine(affine: Any, where: str | os.PathLike[str] | None = None) -> np.ndarray:
    """Check that an affine describes a real box and return it as a float (4, 4) array.

    Raises
    ------
    InvalidInputError
        Not 4 x 4 (or 3 x 4), non-finite, a last row other than (0, 0, 0, 1), a zero edge,
        or edges that are not orthogonal within :data:`ORTHOGONALITY_TOL` (|cos|).
    """
    try:
        a = np.array(affine, dtype=float)
    except (TypeError, ValueError):
        raise InvalidInputError("the voxel affine is not a numeric matrix", where) from None
    if a.shape == (3, 4):
        a = np.vstack([a, [0.0, 0.0, 0.0, 1.0]])
    if a.shape != (4, 4):
        raise InvalidInputError(f"the voxel affine must be 4 x 4, got shape {a.shape}", where)
    if not np.all(np.isfinite(a)):
        raise InvalidInputError("the voxel affine holds NaN or infinite values", where)
    if not np.allclose(a[3], [0.0, 0.0, 0.0, 1.0]):
        raise InvalidInputError(f"the voxel affine's last row is {a[3].tolist()}, "
                                "not (0, 0, 0, 1)", where)
    sides = np.linalg.norm(a[:3, :3], axis=0)
    if np.any(sides <= 1e-6):
        raise InvalidInputError(
            f"degenerate voxel affine: an edge has zero length (sides {_mm(sides)} mm)", where)
    unit = a[:3, :3] / sides
    gram = unit.T @ unit
    shear = float(np.max(np.abs(gram - np.eye(3))))
    if shear > ORTHOGONALITY_TOL:
        angle = float(np.degrees(np.arccos(np.clip(1.0 - shear, -1.0, 1.0))))
        raise InvalidInputError(
            f"non-orthogonal voxel affine: its edges are sheared by {angle:.2f} degrees "
            "(a spectroscopy voxel is a rectangular box)", where)
    return a


def _mm(values: Any) -> str:
    return " x ".join(f"{float(v):.4g}" for v in values)


def voxel_from_nifti_header(header: Any, where: str | os.PathLike[str] | None = None
                            ) -> VoxelGeometry:
    """The voxel of a one-voxel NIfTI(-MRS) header (nibabel ``Nifti1Header``/``Nifti2Header``).

    The sform is used when ``sform_code > 0``, else the qform when ``qform_code > 0``.

    Raises
    ------
    InvalidInputError
        Both codes 0 (no geometry), a placeholder identity affine with 1 mm sides, column
        lengths that disagree with pixdim[1-3] by more than 1 %, or a bad affine
        (:func:`check_voxel_affine`).
    """
    sform, s_code = header.get_sform(coded=True)
    qform, q_code = header.get_qform(coded=True)
    if s_code is not None and int(s_code) > 0:
        affine, method = np.asarray(sform, float), "NIfTI sform"
    elif q_code is not None and int(q_code) > 0:
        affine, method = np.asarray(qform, float), "NIfTI qform"
    else:
        raise InvalidInputError(
            "no usable voxel geometry: sform_code and qform_code are both 0 (the file does not "
            "say where the voxel was)", where)
    affine = _scale_to_mm(affine, header, where)
    pixdim = np.asarray(header["pixdim"][1:4], float)
    if np.allclose(affine, np.eye(4)) and np.allclose(pixdim, 1.0):
        raise InvalidInputError(
            "no usable voxel geometry: identity affine with 1 mm sides (the file was written "
            "without the voxel's position and size)", where)
    checked = check_voxel_affine(affine, where)
    sides = np.linalg.norm(checked[:3, :3], axis=0)
    if np.all(np.isfinite(pixdim)) and np.all(pixdim > 0):
        pixdim_mm = pixdim * _spatial_scale(header)
        if np.any(np.abs(sides - pixdim_mm) > PIXDIM_TOL * pixdim_mm):
            raise InvalidInputError(
                f"the {method}'s voxel sides ({_mm(sides)} mm) disagree with pixdim[1-3] "
                f"({_mm(pixdim_mm)} mm)", where)
    return VoxelGeometry(checked, method=method, source=None if where is None else str(where))


def _spatial_scale(header: Any) -> float:
    unit = header.get_xyzt_units()[0]
    return {"meter": 1e3, "micron": 1e-3}.get(unit, 1.0)  # mm, or unknown (taken as mm)


def _scale_to_mm(affine: np.ndarray, header: Any, where: Any) -> np.ndarray:
    scale = _spatial_scale(header)
    if scale == 1.0:
        return affine
    out = affine.copy()
    out[:3, :] *= scale
    return out


def _dicom_vector(value: Any, n: int, what: str, where: Any) -> np.ndarray:
    try:
        v = np.array([float(x) for x in value], dtype=float)
    except (TypeError, ValueError):
        raise InvalidInputError(f"{what} is not a list of numbers: {value!r}", where) from None
    if v.shape != (n,) or not np.all(np.isfinite(v)):
        raise InvalidInputError(f"{what} must hold {n} finite numbers, got {value!r}", where)
    return v


def _first_item(ds: Any, sequence: str, keyword: str) -> Any:
    """``keyword`` of the first item of ``sequence`` in the shared functional groups (or the
    first frame's), else at the top level of ``ds``; ``None`` if absent."""
    for group_name in ("SharedFunctionalGroupsSequence", "PerFrameFunctionalGroupsSequence"):
        for group in (ds.get(group_name) or [])[:1]:
            for item in (group.get(sequence) or [])[:1]:
                value = item.get(keyword)
                if value is not None and value != "":
                    return value
    value = ds.get(keyword)
    return None if value == "" else value


def voxel_from_dicom(ds: Any, where: str | os.PathLike[str] | None = None) -> VoxelGeometry:
    """The voxel of a DICOM MR Spectroscopy data set (pydicom ``Dataset``).

    Raises
    ------
    InvalidInputError
        Neither a three-slab Volume Localization Sequence nor plane position, orientation,
        pixel spacing and slice thickness; non-orthogonal slabs or planes; bad numbers.
    """
    source = None if where is None else str(where)
    slabs = list(ds.get("VolumeLocalizationSequence") or [])
    if len(slabs) == 3 and all(
        s.get("SlabThickness") is not None and s.get("SlabOrientation") is not None
        and s.get("MidSlabPosition") is not None for s in slabs
    ):
        normals, positions, thickness = [], [], []
        for n, slab in enumerate(slabs, start=1):
            normal = _dicom_vector(slab.SlabOrientation, 3, f"Slab Orientation of slab {n}", where)
            length = float(np.linalg.norm(normal))
            if length <= 1e-6:
                raise InvalidInputError(f"Slab Orientation of slab {n} is a zero vector", where)
            normals.append(normal / length)
            positions.append(_dicom_vector(slab.MidSlabPosition, 3,
                                           f"Mid Slab Position of slab {n}", where))
            thickness.append(float(slab.SlabThickness))
        normal_matrix = np.array(normals)
        if abs(np.linalg.det(normal_matrix)) < 1e-6:
            raise InvalidInputError("degenerate voxel: the three localization slabs are "
                                    "parallel to a common line", where)
        rhs = np.einsum("ij,ij->i", normal_matrix, np.array(positions))
        centre_lps = np.linalg.solve(normal_matrix, rhs)
        lps = np.eye(4)
        lps[:3, :3] = normal_matrix.T * np.array(thickness)
        lps[:3, 3] = centre_lps
        return VoxelGeometry(LPS_TO_RAS @ lps, method="DICOM volume localization",
                             source=source)
    position = _first_item(ds, "PlanePositionSequence", "ImagePositionPatient")
    orientation = _first_item(ds, "PlaneOrientationSequence", "ImageOrientationPatient")
    spacing = _first_item(ds, "PixelMeasuresSequence", "PixelSpacing")
    thickness_value = _first_item(ds, "PixelMeasuresSequence", "SliceThickness")
    missing = [name for name, value in (
        ("Image Position (Patient)", position), ("Image Orientation (Patient)", orientation),
        ("Pixel Spacing", spacing), ("Slice Thickness", thickness_value)) if value is None]
    if missing:
        raise InvalidInputError(
            "no usable voxel geometry: no Volume Localization Sequence and no "
            + ", ".join(missing), where)
    centre = _dicom_vector(position, 3, "Image Position (Patient)", where)
    cosines = _dicom_vector(orientation, 6, "Image Orientation (Patient)", where)
    pixel = _dicom_vector(spacing, 2, "Pixel Spacing", where)
    row_dir, col_dir = cosines[:3], cosines[3:]
    # PS3.3 C.7.6.2.1.1: the first three cosines are the direction of a row (the column index
    # grows along it), the last three that of a column; Pixel Spacing is (between rows,
    # between columns).
    lps = np.eye(4)
    lps[:3, 0] = row_dir * pixel[1]
    lps[:3, 1] = col_dir * pixel[0]
    normal = np.cross(row_dir, col_dir)
    lps[:3, 2] = normal / max(float(np.linalg.norm(normal)), 1e-12) * float(thickness_value)
    lps[:3, 3] = centre
    if abs(float(np.dot(row_dir, col_dir))) > ORTHOGONALITY_TOL * np.linalg.norm(
            row_dir) * np.linalg.norm(col_dir) or np.linalg.norm(normal) <= 1e-6:
        raise InvalidInputError("non-orthogonal or degenerate Image Orientation (Patient): "
                                f"{cosines.tolist()}", where)
    return VoxelGeometry(LPS_TO_RAS @ lps, method="DICOM plane position", source=source)


def read_voxel_geometry(path: str | os.PathLike[str]) -> VoxelGeometry:
    """The voxel geometry of a spectroscopy file (NIfTI-MRS or DICOM MRS).

    Parameters
    ----------
    path : str or path-like
        A NIfTI-MRS (``.nii``/``.nii.gz``) or DICOM MR Spectroscopy file; its content decides
        the format (:func:`specproc.io.detect_format`).

    Raises
    ------
    InvalidInputError
        A file of another format (they carry no geometry), an unreadable file, or a geometry
        refused by :func:`voxel_from_nifti_header` / :func:`voxel_from_dicom`.
    """
    from specproc.io import detect_format
    from specproc.io._util import reader_boundary, require_file

    p = require_file(path)
    fmt = detect_format(p)
    if fmt == "nifti-mrs":
        import nibabel as nib

        with reader_boundary(p, "NIfTI"):
            img: Any = nib.load(str(p))
            if any(int(s) != 1 for s in img.shape[:3]):
                raise InvalidInputError(
                    f"more than one voxel (spatial size {img.shape[:3]}); a single voxel is "
                    "needed", p)
            return voxel_from_nifti_header(img.header, p)
    if fmt == "dicom":
        import pydicom

        with reader_boundary(p, "DICOM"):
            ds = pydicom.dcmread(p)
            return voxel_from_dicom(ds, p)
    raise InvalidInputError(f"{fmt} files carry no voxel geometry; tissue fractions from "
                            "anatomy need a NIfTI-MRS or DICOM MRS file", Path(p))


def voxel_of(scan: Any) -> VoxelGeometry:
    """The voxel of a spectroscopy file (path) or of a loaded :class:`~specproc.data.Scan`.

    A Scan's geometry is read again from the file it came from (``scan.source``, with every
    check of :func:`read_voxel_geometry`); a Scan made in memory uses its ``affine``.

    Raises
    ------
    InvalidInputError
        No geometry: a Scan without a readable source file and without an affine (or with
        the placeholder identity affine), or a refused geometry.
    """
    if isinstance(scan, str | os.PathLike):
        return read_voxel_geometry(scan)
    source = getattr(scan, "source", None)
    if source is not None and Path(source).is_file():
        return read_voxel_geometry(source)
    affine = getattr(scan, "affine", None)
    if affine is None or np.allclose(affine, np.eye(4)):
        raise InvalidInputError("no usable voxel geometry: the scan has no source file and no "
                                "voxel affine", source)
    return VoxelGeometry(np.asarray(affine, float), method="Scan affine", source=source)
