"""Numba kernels: a stable argsort and a binary search, for other kernels to call.

numba compiles its own ``np.sort``, ``np.argsort`` and ``np.searchsorted`` anew inside
every kernel that uses them, for each argument type: a quicksort costs about 1.5-2 s of
compiling on a new machine each time. These plain versions compile in a fraction of that,
once (other kernels call them, numba's on-disk cache keeps them).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def argsort_stable(a):
    """Positions that sort ``a`` (1-D, no NaN) in increasing order, equal values in
    their order in ``a``, as ``np.argsort(a, kind="stable")``: a bottom-up merge sort
    over runs of 16 sorted by insertion."""
    n = a.shape[0]
    idx = np.arange(n)
    run = 16
    for s in range(0, n, run):
        e = min(s + run, n)
        for i in range(s + 1, e):
            v = idx[i]
            j = i - 1
            while j >= s and a[idx[j]] > a[v]:
                idx[j + 1] = idx[j]
                j -= 1
            idx[j + 1] = v
    tmp = np.empty(n, dtype=np.int64)
    width = run
    while width < n:
        for lo in range(0, n, 2 * width):
            mid = min(lo + width, n)
            hi = min(lo + 2 * width, n)
            i, j, k = lo, mid, lo
            while i < mid and j < hi:
                if a[idx[j]] < a[idx[i]]:
                    tmp[k] = idx[j]
                    j += 1
                else:
                    tmp[k] = idx[i]
                    i += 1
                k += 1
            while i < mid:
                tmp[k] = idx[i]
                i += 1
                k += 1
            while j < hi:
                tmp[k] = idx[j]
                j += 1
                k += 1
        idx, tmp = tmp, idx
        width *= 2
    return idx


@njit(cache=True, nogil=True)
def search_left(a, x):
    """The first position ``i`` with ``a[i] >= x`` in the sorted ``a`` (``a.shape[0]``
    if none), as ``np.searchsorted(a, x)``."""
    lo = 0
    hi = a.shape[0]
    while lo < hi:
        mid = (lo + hi) >> 1
        if a[mid] < x:
            lo = mid + 1
        else:
            hi = mid
    return lo
