"""The BLAS thread pools during the numerics of one scan (private).

The per-scan work is small dense linear algebra (a 512-row Lanczos, fits with a few hundred
columns), where BLAS threads do not help and, on a busy machine or beside other workers, their
spin-waiting makes a scan many times slower. So every per-scan computation (the analysis of a
scan, a fit, a batch worker) runs inside :func:`blas_threads`, which by default holds the BLAS
libraries loaded into the process at one thread each; parallelism comes from worker processes.

Users who want more threads per scan (one scan at a time on an idle many-core machine) set the
environment variable ``SPECPROC_BLAS_THREADS`` (or ``specproc --blas-threads N``): a positive
number is the limit, ``0`` leaves the libraries' own setting alone. The variable is inherited by
batch worker processes.

threadpoolctl finds the libraries by inspecting the process, so a controller is made on each
entry (about a millisecond): one made before scipy was imported would miss scipy's own
OpenBLAS. For the same reason numpy and scipy.linalg are imported before the controller is made:
a per-scan function imports its modules inside its body, after the limit was set.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator

from specproc.errors import InvalidInputError

__all__ = ["BLAS_THREADS_ENV", "blas_thread_limit", "blas_threads"]

#: Environment variable of the per-scan BLAS thread limit (``0``: no limit).
BLAS_THREADS_ENV = "SPECPROC_BLAS_THREADS"

#: The limit when the variable is unset.
DEFAULT_BLAS_THREADS = 1


def blas_thread_limit() -> int | None:
    """The BLAS thread limit for per-scan work: a positive int, or ``None`` for no limit.

    Raises
    ------
    InvalidInputError
        When ``SPECPROC_BLAS_THREADS`` is not a non-negative integer.
    """
    text = os.environ.get(BLAS_THREADS_ENV, "").strip()
    if not text:
        return DEFAULT_BLAS_THREADS
    try:
        value = int(text)
    except ValueError:
        value = -1
    if value < 0:
        raise InvalidInputError(
            f"{BLAS_THREADS_ENV} must be a number of threads (0: the libraries' own setting), "
            f"got {text!r}"
        )
    return value or None


@contextlib.contextmanager
def blas_threads(limit: int | None = None) -> Iterator[None]:
    """Context in which the loaded BLAS pools use at most ``limit`` threads (restored after).

    Parameters
    ----------
    limit : int, optional
        Thread limit; ``None``: :func:`blas_thread_limit` (one thread unless the environment
        says otherwise); 0: leave the pools alone.
    """
    threads = blas_thread_limit() if limit is None else limit
    if not threads:
        yield
        return
    import numpy  # noqa: F401  (both BLAS libraries loaded, so that both are limited)
    import scipy.linalg  # noqa: F401
    from threadpoolctl import ThreadpoolController

    with ThreadpoolController().limit(limits=int(threads), user_api="blas"):
        yield
