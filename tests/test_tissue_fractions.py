"""Voxel geometry and tissue fractions, checked against analytic overlaps, brute-force counts,
nibabel's affine conventions and pydicom-built DICOM files (see tests/REFERENCES.md)."""

from __future__ import annotations

from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from _tissue_phantoms import (
    rotation_deg,
    shell_fraction_brute_force,
    shell_maps,
    voxel_affine,
    write_map,
    write_mrs_with_affine,
)
from nibabel.affines import apply_affine

from specproc.errors import InvalidInputError
from specproc.tissue import (
    TissueMapFiles,
    TissueMaps,
    VoxelGeometry,
    parse_label_table,
    read_voxel_geometry,
    tissue_fractions_from_files,
    voxel_tissue_fractions,
)


def _half_space_maps(boundary_mm: float, n: int = 64) -> TissueMaps:
    """GM where world x < boundary, WM elsewhere; exact partial volume of each 1 mm voxel."""
    affine = np.eye(4)
    affine[:3, 3] = -n / 2
    x = np.arange(n) - n / 2  # world x of the voxel centres
    gm_1d = np.clip(boundary_mm - (x - 0.5), 0.0, 1.0)
    gm = np.broadcast_to(gm_1d[:, None, None], (n, n, n)).astype(np.float32)
    return TissueMaps({"gm": gm, "wm": 1.0 - gm, "csf": np.zeros_like(gm)}, affine, (n, n, n))


# ------------------------------------------------------------------ analytic half-space overlap
@pytest.mark.parametrize("offset_mm", [-7.0, -2.3, 0.0, 0.37, 4.1, 8.5])
def test_half_space_overlap_equals_the_analytic_value(offset_mm):
    # analytic: an axis-aligned box of side L in x whose centre is at boundary + d holds
    # GM over (L/2 - d) / L of its volume
    boundary = 0.3
    maps = _half_space_maps(boundary)
    size = np.array([20.0, 15.0, 10.0])
    voxel = VoxelGeometry(voxel_affine(size, [boundary + offset_mm, 1.2, -3.0]))
    result = voxel_tissue_fractions(voxel, maps)
    expected_gm = (size[0] / 2 - offset_mm) / size[0]
    assert result.fractions["gm"] == pytest.approx(expected_gm, abs=1e-3)
    assert result.fractions["wm"] == pytest.approx(1 - expected_gm, abs=1e-3)
    assert result.fractions["csf"] == pytest.approx(0.0, abs=1e-9)
    assert result.unsegmented == pytest.approx(0.0, abs=1e-6)


def test_half_space_through_a_rotated_voxel_equals_the_analytic_value():
    # a box rotated about the boundary's normal (x) keeps its x-extent: the overlap is still
    # (L/2 - d) / L (analytic)
    maps = _half_space_maps(0.0)
    voxel = VoxelGeometry(voxel_affine([18.0, 14.0, 12.0], [-3.0, 2.0, 1.0],
                                       rotation_deg(x_deg=25.0)))
    result = voxel_tissue_fractions(voxel, maps)
    assert result.fractions["gm"] == pytest.approx((9.0 + 3.0) / 18.0, abs=1e-3)


# ------------------------------------------------------------------ oblique voxel, spherical shell
#: A brain-sized shell phantom (CSF r < 22 mm, GM 22-34 mm, WM outside) and a 20 mm voxel
#: rotated 30 degrees about x and about z that straddles both spheres.
R_IN_MM, R_OUT_MM = 22.0, 34.0
SHELL_VOXEL = voxel_affine([20.0, 20.0, 20.0], [26.0, 4.0, -3.0],
                           rotation_deg(x_deg=30.0, z_deg=30.0))


def test_oblique_voxel_over_a_spherical_shell_matches_a_brute_force_count():
    maps, affine = shell_maps(1.0, 20.0, R_IN_MM, R_OUT_MM, grid_centre_mm=SHELL_VOXEL[:3, 3])
    result = voxel_tissue_fractions(VoxelGeometry(SHELL_VOXEL),
                                    TissueMaps(maps, affine, maps["gm"].shape))
    # independent: count the points of a 0.1 mm grid of the box in each class (no maps)
    truth = shell_fraction_brute_force(SHELL_VOXEL, R_IN_MM, R_OUT_MM, spacing_mm=0.1)
    assert min(truth.values()) > 0.1  # the voxel holds all three classes
    for t in ("gm", "wm", "csf"):
        assert result.fractions[t] == pytest.approx(truth[t], rel=0.01), t


def test_fractions_do_not_depend_on_the_resolution_of_the_maps():
    results = {}
    for zoom in (1.0, 0.5):
        maps, affine = shell_maps(zoom, 19.0, R_IN_MM, R_OUT_MM,
                                  grid_centre_mm=SHELL_VOXEL[:3, 3])
        results[zoom] = voxel_tissue_fractions(VoxelGeometry(SHELL_VOXEL),
                                               TissueMaps(maps, affine, maps["gm"].shape))
    for t in ("gm", "wm", "csf"):
        a, b = results[1.0].fractions[t], results[0.5].fractions[t]
        assert a == pytest.approx(b, rel=0.005), t
    assert results[0.5].n_samples[0] > results[1.0].n_samples[0]


def test_label_image_gives_the_fractions_of_its_own_partial_volume(tmp_path):
    # a hard segmentation split into 0/1 maps must give the same as those maps given directly
    rng = np.random.default_rng(3)
    labels = rng.choice([0, 1, 2, 3], p=[0.02, 0.18, 0.5, 0.3], size=(30, 30, 30))
    labels = labels.astype(np.int16)
    affine = np.diag([1.2, 1.2, 1.5, 1.0])
    affine[:3, 3] = [-18.0, -18.0, -22.5]
    scan = write_mrs_with_affine(tmp_path / "svs.nii.gz",
                                 voxel_affine([10, 10, 10], [0.5, -1.0, 2.0],
                                              rotation_deg(z_deg=20)))
    seg = write_map(tmp_path / "seg.nii.gz", labels, affine)
    maps = {}
    for name, value in (("csf", 1), ("gm", 2), ("wm", 3)):
        maps[name] = write_map(tmp_path / f"{name}.nii.gz",
                               (labels == value).astype(np.float32), affine)
    from_labels = tissue_fractions_from_files(scan, TissueMapFiles(labels=seg))
    from_maps = tissue_fractions_from_files(scan, TissueMapFiles(**maps))
    for t in ("gm", "wm", "csf"):
        assert from_labels.fractions[t] == pytest.approx(from_maps.fractions[t], abs=1e-6)
    assert from_labels.unsegmented == pytest.approx(from_maps.unsegmented, abs=1e-6)
    assert 0.0 < from_labels.unsegmented < 0.1  # label 0 is reported as unsegmented
    swapped = tissue_fractions_from_files(
        scan, TissueMapFiles(labels=seg, label_table="gm=3,wm=2,csf=1"))
    assert swapped.fractions["gm"] == pytest.approx(from_maps.fractions["wm"], abs=1e-6)


def test_label_tables_inline_and_from_a_file(tmp_path):
    assert parse_label_table(None) == {"gm": (2,), "wm": (3,), "csf": (1,)}
    assert parse_label_table("gm=3+42, wm=2, csf=1") == {"gm": (3, 42), "wm": (2,),
                                                         "csf": (1,)}
    table = tmp_path / "labels.tsv"
    table.write_text("value\tname\n0\tbackground\n1\tcsf\n2\tgm\n3\twm\n4\tgm # deep GM\n")
    assert parse_label_table(table) == {"gm": (2, 4), "wm": (3,), "csf": (1,)}
    for bad, match in (("gm=2,wm=3", "no value for csf"), ("gm=2,wm=2,csf=1", "both"),
                       ("grey=2", "expected"), ("gm=a,wm=1,csf=3", "integers")):
        with pytest.raises(InvalidInputError, match=match):
            parse_label_table(bad)


# ------------------------------------------------------------------ nibabel's conventions
def test_voxel_centre_and_corners_follow_nibabel_apply_affine():
    rotation = rotation_deg(x_deg=12.0, y_deg=-20.0, z_deg=33.0)
    affine = voxel_affine([20.0, 18.0, 16.0], [4.0, -12.5, 30.0], rotation)
    voxel = VoxelGeometry(affine)
    # nibabel: the centre of voxel (0, 0, 0) is at apply_affine(A, (0, 0, 0))
    assert np.allclose(voxel.centre_mm, apply_affine(affine, [0, 0, 0]))
    signs = np.array([[(n >> b) & 1 for b in range(3)] for n in range(8)]) - 0.5
    assert np.allclose(voxel.corners_mm(), apply_affine(affine, signs))
    assert np.allclose(voxel.size_mm, [20.0, 18.0, 16.0])
    assert voxel.volume_ml == pytest.approx(20 * 18 * 16 / 1000)
    # the world -> anatomy index used for sampling is nibabel's inverse mapping
    anat = np.array([[-0.9, 0.0, 0.1, 90.0], [0.0, 1.1, 0.0, -126.0],
                     [0.05, 0.0, 1.2, -72.0], [0, 0, 0, 1.0]])
    from specproc.tissue.fractions import _world_to_index

    points = voxel.corners_mm()
    assert np.allclose(_world_to_index(points, anat), apply_affine(np.linalg.inv(anat), points))


@pytest.mark.parametrize("form", ["sform", "qform", "both"])
@pytest.mark.parametrize("handed", [1.0, -1.0])
def test_nifti_mrs_written_by_plain_nibabel_round_trips(tmp_path, form, handed):
    rotation = rotation_deg(x_deg=30.0, z_deg=-30.0) @ np.diag([handed, 1.0, 1.0])
    affine = voxel_affine([20.0, 15.0, 25.0], [-8.0, 40.0, 12.5], rotation)
    path = write_mrs_with_affine(tmp_path / "svs.nii.gz", affine, form=form)
    voxel = read_voxel_geometry(path)
    assert np.allclose(voxel.affine, affine, atol=1e-5)
    # and nibabel reads the same affine back from the same file
    assert np.allclose(voxel.affine, nib.load(str(path)).affine, atol=1e-5)
    assert voxel.method == ("NIfTI qform" if form == "qform" else "NIfTI sform")
    from specproc.io import load

    assert load(path).n_points == 256  # still an ordinary NIfTI-MRS scan


def test_nifti_voxels_without_usable_geometry_are_refused(tmp_path):
    cases = {
        "none": (voxel_affine([20, 20, 20], [0, 0, 0]), "none", "both 0"),
        "identity": (np.eye(4), "sform", "identity affine"),
    }
    for name, (affine, form, match) in cases.items():
        path = write_mrs_with_affine(tmp_path / f"{name}.nii.gz", affine, form=form)
        with pytest.raises(InvalidInputError, match=match):
            read_voxel_geometry(path)
    sheared = voxel_affine([20, 20, 20], [0, 0, 0])
    sheared[0, 1] = 5.0
    path = write_mrs_with_affine(tmp_path / "shear.nii.gz", sheared, form="sform")
    with pytest.raises(InvalidInputError, match="non-orthogonal"):
        read_voxel_geometry(path)
    with pytest.raises(InvalidInputError, match="zero length"):
        VoxelGeometry(np.diag([20.0, 0.0, 20.0, 1.0]))
    with pytest.raises(InvalidInputError, match="NaN"):
        VoxelGeometry(np.diag([20.0, np.nan, 20.0, 1.0]))


def test_sform_that_disagrees_with_pixdim_is_refused(tmp_path):
    path = write_mrs_with_affine(tmp_path / "svs.nii.gz", voxel_affine([20, 20, 20], [1, 2, 3]))
    img = nib.load(str(path))
    hdr = img.header.copy()
    hdr.set_zooms((10.0, 20.0, 20.0, 4e-4))
    nib.save(nib.Nifti2Image(np.asanyarray(img.dataobj), None, hdr), str(path))
    with pytest.raises(InvalidInputError, match="disagree with pixdim"):
        read_voxel_geometry(path)


def test_other_formats_carry_no_geometry(tmp_path):
    path = tmp_path / "fid.txt"
    path.write_text("1 0\n0.5 0.1\n0.25 0.1\n")
    with pytest.raises(InvalidInputError, match="carry no voxel geometry"):
        read_voxel_geometry(path)


# ------------------------------------------------------------------ DICOM MRS (pydicom-built)
def _dicom_with(tmp_path: Path, **geometry) -> Path:
    import pydicom
    from _io_builders import write_dicom_mrs
    from pydicom.dataset import Dataset

    path = write_dicom_mrs(tmp_path / "svs.dcm", np.ones((1, 64), np.complex64))
    ds = pydicom.dcmread(path)
    if "slabs" in geometry:
        items = []
        for thickness, normal, mid in geometry["slabs"]:
            item = Dataset()
            item.SlabThickness = thickness
            item.SlabOrientation = list(normal)
            item.MidSlabPosition = list(mid)
            items.append(item)
        ds.VolumeLocalizationSequence = items
    if "plane" in geometry:
        position, orientation, spacing, thickness = geometry["plane"]
        shared = ds.SharedFunctionalGroupsSequence[0]
        pos, ori, meas = Dataset(), Dataset(), Dataset()
        pos.ImagePositionPatient = list(position)
        ori.ImageOrientationPatient = list(orientation)
        meas.PixelSpacing = list(spacing)
        meas.SliceThickness = thickness
        shared.PlanePositionSequence = [pos]
        shared.PlaneOrientationSequence = [ori]
        shared.PixelMeasuresSequence = [meas]
    ds.save_as(path)
    return path


def test_dicom_volume_localization_gives_the_voxel_in_ras(tmp_path):
    # three slabs of an oblique PRESS voxel in LPS (DICOM PS3.3 C.8.13.5.11): mid planes meet
    # at the centre; NIfTI world is RAS, so x and y change sign
    rotation = rotation_deg(x_deg=15.0, z_deg=-10.0)
    centre_lps = np.array([-12.0, 30.0, 8.0])
    thickness = [20.0, 18.0, 15.0]
    slabs = []
    for k in range(3):
        normal = rotation[:, k]
        mid = centre_lps + normal * 3.0 + np.cross(normal, [0.0, 0.0, 1.0]) * 5.0  # on plane
        slabs.append((thickness[k], normal, mid))
    voxel = read_voxel_geometry(_dicom_with(tmp_path, slabs=slabs))
    assert voxel.method == "DICOM volume localization"
    # the mid-slab points lie 3 mm off the centre along each normal: solve the shift back
    assert np.allclose(voxel.size_mm, thickness)
    expected = centre_lps + rotation @ np.array([3.0, 3.0, 3.0])
    assert np.allclose(voxel.centre_mm, expected * [-1, -1, 1], atol=1e-6)


@pytest.mark.filterwarnings("ignore:The DICOM readers are highly experimental")
def test_dicom_plane_position_matches_nibabels_dicom_affine(tmp_path):
    # nibabel's DICOM wrapper (nibabel.nicom) maps a one-voxel image to LPS patient space;
    # our box must have the same centre and the same edges (up to their order), in RAS
    from nibabel.nicom.dicomwrappers import Wrapper
    from pydicom.dataset import Dataset

    row = rotation_deg(z_deg=20.0, x_deg=10.0)[:, 0]
    col = rotation_deg(z_deg=20.0, x_deg=10.0)[:, 1]
    position, spacing, thickness = [10.0, -20.0, 35.0], [16.0, 22.0], 18.0
    path = _dicom_with(tmp_path, plane=(position, [*row, *col], spacing, thickness))
    voxel = read_voxel_geometry(path)
    assert voxel.method == "DICOM plane position"
    plain = Dataset()
    plain.ImagePositionPatient = position
    plain.ImageOrientationPatient = [*row, *col]
    plain.PixelSpacing = spacing
    plain.SliceThickness = thickness
    plain.Rows, plain.Columns = 1, 1
    reference = Wrapper(plain).affine  # LPS
    assert np.allclose(voxel.centre_mm, reference[:3, 3] * [-1, -1, 1])
    ours = sorted(map(tuple, np.round(np.abs(voxel.affine[:3, :3].T), 6)))
    theirs = np.diag([-1, -1, 1]) @ reference[:3, :3]
    assert ours == sorted(map(tuple, np.round(np.abs(theirs.T), 6)))


def test_dicom_without_geometry_is_refused(tmp_path):
    path = _dicom_with(tmp_path)
    with pytest.raises(InvalidInputError, match="no usable voxel geometry"):
        read_voxel_geometry(path)


# ------------------------------------------------------------------ sanity checks
def test_voxel_outside_the_image_is_refused():
    maps = _half_space_maps(0.0, n=32)
    for centre, match in (([100.0, 0, 0], "wholly"), ([12.0, 0, 0], "partly")):
        with pytest.raises(InvalidInputError, match=match):
            voxel_tissue_fractions(VoxelGeometry(voxel_affine([10, 10, 10], centre)), maps)


def test_maps_that_do_not_sum_to_one_are_refused():
    maps = _half_space_maps(0.0)
    holes = TissueMaps({"gm": maps.maps["gm"], "wm": np.zeros_like(maps.maps["gm"]),
                        "csf": maps.maps["csf"]}, maps.grid_affine, maps.grid_shape)
    voxel = VoxelGeometry(voxel_affine([20, 20, 20], [0, 0, 0]))
    with pytest.raises(InvalidInputError, match=r"cover only 0\.500"):
        voxel_tissue_fractions(voxel, holes)
    double = TissueMaps({"gm": maps.maps["gm"], "wm": maps.maps["wm"],
                         "csf": np.ones_like(maps.maps["gm"])}, maps.grid_affine,
                        maps.grid_shape)
    with pytest.raises(InvalidInputError, match="overlap"):
        voxel_tissue_fractions(voxel, double)
    # accepted with a looser limit, and the remainder is reported
    loose = voxel_tissue_fractions(voxel, holes, max_unsegmented=0.6)
    assert loose.unsegmented == pytest.approx(0.5, abs=1e-3)
    assert loose.fractions["gm"] == pytest.approx(1.0, abs=1e-6)


def test_maps_on_different_grids_are_refused(tmp_path):
    scan = write_mrs_with_affine(tmp_path / "svs.nii.gz", voxel_affine([10, 10, 10], [0, 0, 0]))
    affine = np.diag([1.0, 1.0, 1.0, 1.0])
    affine[:3, 3] = -16
    ones = np.full((32, 32, 32), 1 / 3, np.float32)
    paths = {t: write_map(tmp_path / f"{t}.nii.gz", ones, affine) for t in ("gm", "wm")}
    shifted = affine.copy()
    shifted[0, 3] += 0.5
    paths["csf"] = write_map(tmp_path / "csf.nii.gz", ones, shifted)
    with pytest.raises(InvalidInputError, match="not on the grid"):
        tissue_fractions_from_files(scan, TissueMapFiles(**paths))
    paths["csf"] = write_map(tmp_path / "csf.nii.gz", ones, affine)
    t1 = write_map(tmp_path / "t1.nii.gz", np.ones((32, 32, 31), np.float32), affine)
    with pytest.raises(InvalidInputError, match=r"not on the grid of .*t1.nii.gz: shape"):
        tissue_fractions_from_files(scan, TissueMapFiles(**paths, anatomy=t1))
    scaled = write_map(tmp_path / "gm255.nii.gz", ones * 255, affine)
    with pytest.raises(InvalidInputError, match="not a probability map"):
        tissue_fractions_from_files(scan, TissueMapFiles(gm=scaled, wm=paths["wm"],
                                                         csf=paths["csf"]))


def test_a_loaded_scan_gives_the_voxel_of_its_file_or_its_affine(tmp_path):
    from specproc.data import Scan
    from specproc.io import load
    from specproc.tissue import voxel_of

    affine = voxel_affine([20.0, 16.0, 12.0], [5.0, -30.0, 18.0], rotation_deg(z_deg=25.0))
    path = write_mrs_with_affine(tmp_path / "svs.nii.gz", affine)
    assert np.allclose(voxel_of(load(path)).affine, affine, atol=1e-5)
    in_memory = Scan(np.ones(64, np.complex64), dwell_s=4e-4, spectrometer_mhz=123.2,
                     affine=affine)
    voxel = voxel_of(in_memory)
    assert voxel.method == "Scan affine" and np.allclose(voxel.affine, affine)
    with pytest.raises(InvalidInputError, match="no usable voxel geometry"):
        voxel_of(Scan(np.ones(64, np.complex64), dwell_s=4e-4, spectrometer_mhz=123.2))
