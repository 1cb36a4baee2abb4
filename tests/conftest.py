"""Test-session settings shared by every test module."""

import os

# On a small shared machine, BLAS thread pools fighting over the cores make SVDs many times
# slower; the tests are single-threaded by design. Must be set before numpy is imported.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")
