"""Tissue fractions of the spectroscopy voxel from the subject's segmented anatomy.

* :mod:`specproc.tissue.geometry`: the voxel's box in world coordinates, from NIfTI-MRS
  (qform/sform, pixdim) or DICOM MRS (volume localization, plane position and orientation).
* :mod:`specproc.tissue.fractions`: GM, WM and CSF fractions by supersampling the voxel in its
  own frame over probability maps or a label image, with the unsegmented remainder.

The picture of the voxel on the anatomy is drawn by :mod:`specproc.report.voxel`.
"""

from specproc.tissue.fractions import (
    DEFAULT_LABEL_TABLE,
    TissueFractions,
    TissueMapFiles,
    TissueMaps,
    load_anatomy,
    load_label_map,
    load_probability_maps,
    load_tissue_maps,
    parse_label_table,
    tissue_fractions_from_files,
    voxel_tissue_fractions,
)
from specproc.tissue.geometry import VoxelGeometry, read_voxel_geometry, voxel_of

__all__ = [
    "DEFAULT_LABEL_TABLE",
    "TissueFractions",
    "TissueMapFiles",
    "TissueMaps",
    "VoxelGeometry",
    "load_anatomy",
    "load_label_map",
    "load_probability_maps",
    "load_tissue_maps",
    "parse_label_table",
    "read_voxel_geometry",
    "tissue_fractions_from_files",
    "voxel_of",
    "voxel_tissue_fractions",
]
