"""Hold the BLAS thread pools at one thread during a fit (private).

The fit works on small matrices, where BLAS threads never help and, on a busy machine, their
spin-waiting can make a fit many times slower. threadpoolctl limits the pools of the BLAS
libraries loaded into the process for the duration of the context and restores them after.
"""

from __future__ import annotations

import contextlib
import functools
from collections.abc import Iterator

from threadpoolctl import ThreadpoolController


@functools.cache
def _controller() -> ThreadpoolController:
    return ThreadpoolController()


@contextlib.contextmanager
def single_blas_thread() -> Iterator[None]:
    """Context in which the loaded BLAS pools use one thread (restored afterwards)."""
    with _controller().limit(limits=1, user_api="blas"):
        yield
