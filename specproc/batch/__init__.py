"""Cohort runs: manifests and BIDS-style discovery, parallel or Dask execution, resume, summary.

* :func:`read_entries` (:mod:`specproc.batch.manifest`): the scans of a manifest table or a
  BIDS-style folder, with subject, session, tissue fractions and header overrides;
* :func:`run_batch` (:mod:`specproc.batch.runner`): one basis per protocol, the scans on local
  worker processes or a Dask cluster, skipping those already done with the same inputs;
* :func:`write_cohort` (:mod:`specproc.batch.cohort`): ``cohort.tsv``, ``cohort_qc.tsv`` and
  ``cohort.html`` rebuilt from the per-scan folders.

Research use only; not a medical device.
"""

from specproc.batch.cohort import COHORT_COLUMNS, QC_COLUMNS, write_cohort
from specproc.batch.manifest import (
    MANIFEST_COLUMNS,
    ScanEntry,
    discover_bids,
    ignored_columns,
    read_entries,
    read_manifest,
    scan_key,
)
from specproc.batch.runner import BatchSummary, run_batch
from specproc.batch.task import run_task

__all__ = [
    "COHORT_COLUMNS",
    "MANIFEST_COLUMNS",
    "QC_COLUMNS",
    "BatchSummary",
    "ScanEntry",
    "discover_bids",
    "ignored_columns",
    "read_entries",
    "read_manifest",
    "run_batch",
    "run_task",
    "scan_key",
    "write_cohort",
]
