"""Single-threaded BLAS for the engine's tall-and-skinny linear algebra.

On a 2-core machine OpenBLAS's worker threads cost more than they save on T x k products with
small k (they spin between calls and compete with the main thread): measured, a fit plus a
101-bandwidth sweep at T = 100,000, k = 5 took 57 ms with the default threads and 36 ms with one.
"""

from __future__ import annotations

import contextlib
import functools
import os
import threading

_CPUS = os.cpu_count() or 1

try:
    from threadpoolctl import ThreadpoolController
    _CONTROLLER = ThreadpoolController()
except Exception:  # pragma: no cover - threadpoolctl missing or unable to inspect libraries
    _CONTROLLER = None


_LOCAL = threading.local()


def single_blas_thread(func):
    """Run `func` with BLAS limited to one thread (a no-op without threadpoolctl). Nested calls
    inside a limited region do not set the limit again (setting it costs about a millisecond,
    more than many of the calls it wraps)."""
    if _CONTROLLER is None:  # pragma: no cover
        return func

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        if getattr(_LOCAL, "depth", 0):
            return func(*args, **kwargs)
        with one_blas_thread():
            return func(*args, **kwargs)
    return wrapper


@contextlib.contextmanager
def one_blas_thread():
    """BLAS limited to one thread for a whole block of work (e.g. many small fits)."""
    if _CONTROLLER is None or getattr(_LOCAL, "depth", 0):  # pragma: no cover
        _LOCAL.depth = getattr(_LOCAL, "depth", 0) + 1
        try:
            yield
        finally:
            _LOCAL.depth -= 1
        return
    _LOCAL.depth = 1
    try:
        with _CONTROLLER.limit(limits=1, user_api="blas"):
            yield
    finally:
        _LOCAL.depth = 0


def blas_threads(n: int | None = None):
    """Context manager allowing `n` BLAS threads (all when None) for one large product."""
    if _CONTROLLER is None:  # pragma: no cover
        return contextlib.nullcontext()
    return _CONTROLLER.limit(limits=n or _CPUS, user_api="blas")
