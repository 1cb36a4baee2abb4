"""Preprocessing of single-voxel MRS data: from raw transients to one corrected FID.

Each stage is a pure function on numpy arrays with explicit physical parameters, plus a thin
``*_scan`` wrapper that reads them from a :class:`~specproc.data.Scan`, returns a new Scan and
records the step in its provenance. :func:`~specproc.preprocess.pipeline.run_pipeline` runs the
configured stages in order.

Modules: :mod:`.coils` (coil combination), :mod:`.align` (drift correction, outlier rejection,
averaging), :mod:`.eddy` (eddy currents), :mod:`.water` (HLSVD water removal), :mod:`.apodize`
(apodization, zero-filling), :mod:`.transform` (FFT, axes, units), :mod:`.phase` (phasing),
:mod:`.reference` (frequency referencing), :mod:`.pipeline`.
"""

from specproc.preprocess.pipeline import PreprocessResult, TransientReport, run_pipeline

__all__ = ["PreprocessResult", "TransientReport", "run_pipeline"]
