"""Cost and accuracy of tissue fractions from anatomy on head-sized images (prints tables).

Run: python benchmarks/bench_tissue.py

1. Cost by stage (CPU seconds, ``time.process_time``; BLAS at one thread) for one scan with
   1 mm maps of a whole head (176 x 240 x 256, gzip NIfTI, float32, as segmentation tools
   write them): reading the voxel, reading the maps around it, the supersampled integral, and
   the voxel picture (which reads the anatomy and the whole maps).
2. Accuracy against a brute-force count (0.1 mm grid) for a 20 mm voxel rotated 30 degrees about
   two axes over a spherical-shell phantom, at map resolutions 2, 1 and 0.5 mm, and its
   dependence on the supersampling factor.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from _tissue_phantoms import (
    rotation_deg,
    shell_fraction_brute_force,
    shell_maps,
    voxel_affine,
    write_map,
    write_mrs_with_affine,
)

from specproc.report.voxel import voxel_picture_png
from specproc.tissue import (
    TissueMapFiles,
    TissueMaps,
    VoxelGeometry,
    load_tissue_maps,
    read_voxel_geometry,
    tissue_fractions_from_files,
    voxel_tissue_fractions,
)

VOXEL = voxel_affine([20.0, 20.0, 20.0], [26.0, 4.0, -3.0], rotation_deg(x_deg=30, z_deg=30))
R_IN, R_OUT = 22.0, 34.0


def _timed(function, *args, **kwargs):
    start = time.process_time()
    value = function(*args, **kwargs)
    return value, time.process_time() - start


def cost_by_stage() -> None:
    shape = (176, 240, 256)
    affine = np.diag([1.0, 1.0, 1.0, 1.0])
    affine[:3, 3] = [-88.0, -120.0, -128.0]
    grid = np.stack(np.meshgrid(*[np.arange(n) for n in shape], indexing="ij"), -1)
    r = np.linalg.norm(grid @ affine[:3, :3].T + affine[:3, 3], axis=-1)
    smooth = lambda edge: np.clip(r - edge + 0.5, 0.0, 1.0)  # noqa: E731 (1 mm ramps)
    csf = (1 - smooth(R_IN)).astype(np.float32)
    gm = (smooth(R_IN) - smooth(R_OUT)).astype(np.float32)
    wm = smooth(R_OUT).astype(np.float32)
    with tempfile.TemporaryDirectory() as folder:
        d = Path(folder)
        files = TissueMapFiles(
            gm=write_map(d / "gm.nii.gz", gm, affine), wm=write_map(d / "wm.nii.gz", wm, affine),
            csf=write_map(d / "csf.nii.gz", csf, affine),
            anatomy=write_map(d / "t1.nii.gz", (300 * gm + 800 * wm + 100 * csf).astype(
                np.int16), affine))
        scan = write_mrs_with_affine(d / "svs.nii.gz", VOXEL)
        voxel, t_voxel = _timed(read_voxel_geometry, scan)
        maps, t_maps = _timed(load_tissue_maps, files, voxel=voxel)
        result, t_integral = _timed(voxel_tissue_fractions, voxel, maps)
        _, t_total = _timed(tissue_fractions_from_files, scan, files)
        png, t_picture = _timed(voxel_picture_png, result, files)
    print("Cost by stage, one scan, 1 mm maps 176 x 240 x 256 (CPU s, process_time)")
    print(f"{'stage':<44}{'CPU s':>8}")
    for name, value in (("voxel geometry from the NIfTI-MRS file", t_voxel),
                        ("maps read around the voxel (3 files, gzip)", t_maps),
                        (f"supersampled integral ({'x'.join(map(str, result.n_samples))})",
                         t_integral),
                        ("fractions from files (the three above)", t_total),
                        (f"voxel picture ({len(png) // 1024} kB PNG, reads whole images)",
                         t_picture)):
        print(f"{name:<44}{value:>8.2f}")
    print()


def accuracy() -> None:
    truth = shell_fraction_brute_force(VOXEL, R_IN, R_OUT, spacing_mm=0.1)
    print("Oblique 20 mm voxel over a spherical shell: error against a 0.1 mm count")
    print(f"(count: GM {truth['gm']:.4f}, WM {truth['wm']:.4f}, CSF {truth['csf']:.4f})")
    print(f"{'maps mm':>8}{'oversample':>12}{'samples':>14}{'GM err %':>10}{'WM err %':>10}"
          f"{'CSF err %':>11}{'CPU s':>8}")
    for zoom in (2.0, 1.0, 0.5):
        maps, affine = shell_maps(zoom, 20.0, R_IN, R_OUT, grid_centre_mm=VOXEL[:3, 3])
        tissue_maps = TissueMaps(maps, affine, maps["gm"].shape)
        for oversample in (2.0, 4.0, 8.0):
            result, cpu = _timed(voxel_tissue_fractions, VoxelGeometry(VOXEL), tissue_maps,
                                 oversample=oversample)
            errors = [100 * (result.fractions[t] / truth[t] - 1) for t in ("gm", "wm", "csf")]
            n = "x".join(map(str, result.n_samples))
            print(f"{zoom:>8g}{oversample:>12g}{n:>14}{errors[0]:>10.3f}{errors[1]:>10.3f}"
                  f"{errors[2]:>11.3f}{cpu:>8.2f}")


if __name__ == "__main__":
    from threadpoolctl import threadpool_limits

    with threadpool_limits(1):
        cost_by_stage()
        accuracy()
