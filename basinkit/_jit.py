"""Compilation helpers for the kernels.

Numba takes several seconds to compile a ``parallel=True`` kernel, which a small DEM never
earns back. :func:`parallel_for_large_grids` compiles a kernel twice, lazily: a serial
version (``prange`` runs as ``range``) for grids below a size, and a parallel one for larger
grids. Both give identical results; only large jobs pay the parallel compile, once (both
versions are cached on disk).
"""

import contextlib
import functools
import threading
import types

import numpy as np
from numba import njit

#: grids with at least this many cells use the parallel version of a kernel
PARALLEL_MIN_CELLS = 1_000_000

_THREAD = threading.local()


def wants_parallel(size) -> bool:
    """Whether a grid of ``size`` cells runs the parallel versions of the kernels: from
    PARALLEL_MIN_CELLS on, or always inside :func:`parallel_versions` (this thread)."""
    return size >= PARALLEL_MIN_CELLS or getattr(_THREAD, "parallel", False)


@contextlib.contextmanager
def parallel_versions():
    """Within this block, in this thread only, small grids take the parallel versions too
    (to load the kernels a large grid will use on a small one; the results are the
    same)."""
    old = getattr(_THREAD, "parallel", False)
    _THREAD.parallel = True
    try:
        yield
    finally:
        _THREAD.parallel = old


def _copy_function(fn, suffix):
    new = types.FunctionType(fn.__code__, fn.__globals__, fn.__name__ + suffix,
                             fn.__defaults__, fn.__closure__)
    new.__qualname__ = fn.__qualname__ + suffix
    new.__doc__ = fn.__doc__
    new.__module__ = fn.__module__
    return new


def parallel_for_large_grids(fn=None, **options):
    """Decorator: ``njit(**options)`` serial below PARALLEL_MIN_CELLS cells (counted on the
    first array argument), ``njit(parallel=True, **options)`` above. The decorated name is
    a plain Python function, so call it from Python, not from other kernels."""
    if fn is None:
        return functools.partial(parallel_for_large_grids, **options)
    serial = njit(**options)(_copy_function(fn, "_serial"))
    parallel = njit(parallel=True, **options)(_copy_function(fn, "_parallel"))

    @functools.wraps(fn)
    def call(*args):
        size = next((a.size for a in args if isinstance(a, np.ndarray)), 0)
        return (parallel if wants_parallel(size) else serial)(*args)

    call.serial = serial
    call.parallel = parallel
    return call
