"""Compiled kernels: the stack (Braun & Willett 2013) with the D8 cell count and upstream
area in one sweep (in row bands on large grids), and plain accumulation passes over a stack.

Receivers are flat indices ``r * ncols + c``; ``-1`` means the water leaves the grid here and
``-2`` marks invalid cells.
"""

import math

import numba
import numpy as np
from numba import njit, prange

from .._jit import parallel_for_large_grids, wants_parallel


def stack_and_count(rec):
    """The stack (Braun & Willett 2013) and the D8 cell-count accumulation in one sweep.

    Cells are emitted upstream-first: a scan finds every cell without donors and walks
    downstream from it, adding its count to the receiver, for as long as the receiver has
    no donor left to wait for. Written back to front, that order is the stack: valid cells
    ordered so that every cell comes after its receiver. Cells on a receiver cycle (only
    possible in a damaged direction raster) are left out.

    Returns (stack int32, count int32 per cell, 0 on nodata).
    """
    stack, count, _ = _sweep(rec, max(rec.shape[0], 1), None)
    return stack, count


def build_stack(rec):
    """The stack alone (see :func:`stack_and_count`)."""
    return stack_and_count(rec)[0]


@njit(cache=True, nogil=True)
def accumulate(rec, stack, weight):
    """Sum ``weight`` (float64 per cell) down the flow: one backward pass over the stack."""
    acc = weight.copy()
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        r = rec[i]
        if r >= 0:
            acc[r] += acc[i]
    return acc


@njit(cache=True, nogil=True)
def accumulate_count(rec, stack, n):
    """Number of cells draining through each cell (itself included), int32."""
    acc = np.zeros(n, dtype=np.int32)
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        acc[i] += 1
        r = rec[i]
        if r >= 0:
            acc[r] += acc[i]
    return acc


@njit(cache=True, nogil=True)
def _row_of(i, ncols, inv):
    """``i // ncols`` by a floating-point estimate and one correction step (exact for
    flat indices below 2**52); cheaper than an integer division in random-order passes."""
    q = np.int64(i * inv)
    if q * ncols > i:
        q -= 1
    elif (q + 1) * ncols <= i:
        q += 1
    return q


@njit(cache=True, nogil=True)
def accumulate_area(rec, stack, ncols, row_area):
    """Upstream area (m²) from the per-row cell area, float64."""
    n = rec.shape[0]
    acc = np.zeros(n, dtype=np.float64)
    inv = 1.0 / ncols
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        acc[i] += row_area[_row_of(i, ncols, inv)]
        r = rec[i]
        if r >= 0:
            acc[r] += acc[i]
    return acc


def stack_count_area(rec, ncols, row_area):
    """The stack, the cell count and the upstream area (m²) in one sweep.

    The same sweep as :func:`stack_and_count` (Braun & Willett 2013 order). On a grid swept
    as one band the cells are visited in exactly the order of a backward pass over the
    stack, so the area sums equal those of :func:`accumulate_area` bit for bit; swept in
    bands (large grids), the sums at cells fed from two bands may differ from it in the
    last bits (another order of the same additions), except with equal cell areas whose
    sums are exact (e.g. 100 m²: count × area, see :func:`_sums_exact`).

    Returns (stack int32, count int32 per cell, area float64 per cell; 0 on nodata).
    """
    return _sweep(rec, ncols, np.asarray(row_area, dtype=np.float64))


#: horizontal bands of rows swept at the same time on large grids. A fixed number, not
#: the number of threads, so that the stack and the sums do not depend on the machine.
SWEEP_BANDS = 8
#: pending-donor count of a cell that a walk reached, finished and emitted (a D8 cell has
#: at most 8 donors)
_DONE = np.uint8(255)


def sweep_bands_for(nrows, ncols):
    """Number of bands the sweep uses for a grid: one below PARALLEL_MIN_CELLS (the
    serial sweep, as on small grids always), else SWEEP_BANDS (bands of 4 rows at least).
    """
    if not wants_parallel(nrows * ncols) or nrows < 4 * SWEEP_BANDS:
        return 1
    return SWEEP_BANDS


def _sweep(rec, ncols, row_area):
    n = rec.shape[0]
    nrows = n // ncols if ncols > 0 else 0
    return sweep_in_bands(rec, ncols, row_area, sweep_bands_for(nrows, ncols))


def sweep_in_bands(rec, ncols, row_area, nbands, parallel=None):
    """The sweep of :func:`stack_count_area` (``row_area`` None: no area, as for
    :func:`stack_and_count`) over ``nbands`` horizontal bands of rows.

    Every band is swept like the whole grid (pending donors, a scan, walks downstream),
    the bands at the same time, except that a walk stops where the receiver lies in another
    band. Donor counts come from a first pass in which each band counts only donors in the
    band, so that bands never write each other's cells; donors in another band are listed
    (D8 receivers are neighbours, so they lie in the first and last row of a band) and
    counted afterwards. Once all bands are done, the listed cells that are finished hand
    their count and area over to their receivers and the walks go on from there, across
    bands, in one sequential pass. Stack: the cells of that pass first (written back to
    front as they are emitted), then the cells of band 0, 1, ... as each band emitted
    them; a cell of a band never drains to a cell emitted in the last pass, nor to a cell
    of another band emitted by that band, so every cell still comes after its receiver.

    ``parallel`` None takes the parallel kernels from PARALLEL_MIN_CELLS cells on; True or
    False forces one version (same results).
    """
    n = rec.shape[0]
    with_area = row_area is not None
    if parallel is None:
        parallel = wants_parallel(n)
    count_donors = _count_donors.parallel if parallel else _count_donors.serial
    sweep = _sweep_bands.parallel if parallel else _sweep_bands.serial
    nrows = n // ncols if ncols > 0 else 0
    nbands = max(1, min(int(nbands), nrows))
    bands = (np.arange(nbands + 1, dtype=np.int64) * nrows) // nbands
    # a band's donors in another band lie in its first and last row
    cap = 0 if nbands == 1 else 2 * ncols
    # arrays allocated by NumPy, which asks for huge pages for large blocks: a fresh array
    # faults in several times faster than one allocated inside a kernel
    pending = np.zeros(n, dtype=np.uint8)
    nvalid = np.zeros(nbands, dtype=np.int64)
    ncross = np.zeros(nbands, dtype=np.int64)
    cross = np.empty(nbands * cap, dtype=np.int32)
    count_donors(rec, bands, ncols, pending, nvalid, cross, ncross)
    if nbands > 1 and ncross.max() > cap:  # receivers that are not neighbours: one band
        return sweep_in_bands(rec, ncols, row_area, 1, parallel)
    soff = np.zeros(nbands + 1, dtype=np.int64)
    np.cumsum(nvalid, out=soff[1:])
    count = np.zeros(n, dtype=np.int32)
    uniform = not with_area or bool(row_area.size and (row_area == row_area[0]).all())
    # equal cell areas whose sums are all exact: the area is the count times the cell
    # area, bit for bit, and the sweep need not carry it
    by_count = with_area and uniform and _sums_exact(row_area[0] if row_area.size else 0.0,
                                                     n)
    if with_area and not by_count:
        area = np.zeros(n, dtype=np.float64)
    else:
        area = np.zeros(1, dtype=np.float64)
    if not with_area or row_area.size == 0:
        row_area = np.zeros(1, dtype=np.float64)
    stack = np.empty(soff[-1], dtype=np.int32)
    summed = with_area and not by_count
    emitted = np.zeros(nbands, dtype=np.int64)
    old = numba.set_parallel_chunksize(1)  # bands handed out one at a time to free threads
    try:
        sweep(rec, ncols, row_area, summed, uniform, bands, pending, count, area, stack, soff,
              cross, ncross, emitted)
    finally:
        numba.set_parallel_chunksize(old)
    # the bands' cells together at the end of the stack, in band order (memmove)
    end = stack.shape[0]
    for b in range(nbands - 1, -1, -1):
        m = int(emitted[b])
        src = int(soff[b + 1])
        if src != end and m:
            stack[end - m:end] = stack[src - m:src]
        end -= m
    pos = end
    if nbands > 1:
        pos = _sweep_across(rec, ncols, row_area, summed, uniform, bands, pending, count,
                            area, stack, end, cross, ncross)
    del pending
    if pos != 0:  # cells on receiver cycles are left out
        stack = stack[pos:].copy()
    if by_count:
        area = np.empty(n, dtype=np.float64)
        (_times.parallel if parallel else _times.serial)(count, row_area[0], area)
    return stack, count, (area if with_area else None)


def _sums_exact(a, n):
    """True when every sum of up to ``n`` terms equal to ``a`` is exact in float64: ``a``
    is m·2^e with an odd integer m such that n·m < 2^53, so every partial sum k·a is a
    float64 and each addition is exact, whatever the order (and equals the product)."""
    a = float(a)
    if not math.isfinite(a) or a < 0:
        return False
    if a == 0.0:
        return True
    m = int(math.frexp(a)[0] * 2.0 ** 53)
    while m % 2 == 0:
        m //= 2
    return m * max(n, 1) < 2 ** 53


@parallel_for_large_grids(cache=True, nogil=True)
def _times(count, a, out):
    for i in prange(count.shape[0]):
        out[i] = count[i] * a


@parallel_for_large_grids(cache=True, nogil=True)
def _count_donors(rec, bands, ncols, pending, nvalid, cross, ncross):
    """Donors of every cell from the same band (each band writes only its own cells), the
    valid cells of each band, and the cells draining to another band: all counted, at most
    ``cross.size // nbands`` per band listed."""
    nb = bands.shape[0] - 1
    cap = cross.shape[0] // nb
    for b in prange(nb):
        ia = bands[b] * ncols
        ib = bands[b + 1] * ncols
        nv = 0
        nx = 0
        for j in range(ia, ib):
            r = rec[j]
            if r >= 0:
                if r >= ia and r < ib:
                    pending[r] += 1
                else:
                    if nx < cap:
                        cross[b * cap + nx] = j
                    nx += 1
            if r != -2:
                nv += 1
        nvalid[b] = nv
        ncross[b] = nx


@parallel_for_large_grids(cache=True, nogil=True)
def _sweep_bands(rec, ncols, row_area, with_area, uniform, bands, pending, count, area,
                 stack, soff, cross, ncross, emitted):
    """The bands at the same time (see :func:`sweep_in_bands`); ``emitted[b]``: the number
    of cells band b emitted, back to front from ``soff[b + 1]``."""
    nb = bands.shape[0] - 1
    cap = cross.shape[0] // nb
    for b in range(nb):  # donors in another band, now that no band writes any more
        for t in range(min(ncross[b], cap)):
            pending[rec[cross[b * cap + t]]] += 1
    for b in prange(nb):
        end = soff[b + 1]
        emitted[b] = end - _sweep_band(rec, ncols, row_area, with_area, uniform, bands[b],
                                       bands[b + 1], pending, count, area, stack, end)


@njit(cache=True, nogil=True)
def _sweep_across(rec, ncols, row_area, with_area, uniform, bands, pending, count, area,
                  stack, end, cross, ncross):
    """The pass across bands, emitting back to front from ``end`` (see
    :func:`sweep_in_bands`). Returns the stack position of the first cell emitted."""
    nb = bands.shape[0] - 1
    cap = cross.shape[0] // nb
    # finished cells that drain to another band: the listed ones not waiting for donors
    nd = 0
    for b in range(nb):
        for t in range(min(ncross[b], cap)):
            j = cross[b * cap + t]
            p = pending[j]
            if p == 0 or p == _DONE:
                cross[nd] = j
                nd += 1
    inv = 1.0 / ncols
    a0 = row_area[0]
    pos = end
    for t in range(nd):
        j = cross[t]
        cj = count[j]
        aj = area[j] if with_area else 0.0
        r = rec[j]
        while True:
            cr = count[r] + cj
            count[r] = cr
            if with_area:
                ar = area[r] + aj
                area[r] = ar
            p = pending[r] - 1
            if p != 0:
                pending[r] = p
                break
            pending[r] = _DONE
            cj = cr + 1
            count[r] = cj
            if with_area:
                aj = ar + (a0 if uniform else row_area[_row_of(r, ncols, inv)])
                area[r] = aj
            pos -= 1
            stack[pos] = r
            r = rec[r]
            if r < 0:
                break
    return pos


@njit(cache=True, nogil=True)
def _sweep_band(rec, ncols, row_area, with_area, uniform, r0, r1, pending, count, area,
                stack, pos):
    """Sweep of the rows r0..r1-1, emitting into ``stack`` back to front from ``pos``;
    walks stop at receivers outside the band. Returns the position of the last cell."""
    ia = r0 * ncols
    ib = r1 * ncols
    a0 = row_area[0]
    by_offset = ncols >= 3  # the row step follows from the index step to a neighbour
    row = r0
    col = -1
    for i in range(ia, ib):
        col += 1
        if col == ncols:
            col = 0
            row += 1
        # no donor left to wait for, not emitted yet (_DONE), valid
        if pending[i] != 0:
            continue
        r = rec[i]
        if r == -2:
            continue
        j = i
        rj = row
        cj = count[j] + 1
        aj = 0.0
        while True:
            count[j] = cj
            if with_area:
                aj = area[j] + (a0 if uniform else row_area[rj])
                area[j] = aj
            pos -= 1
            stack[pos] = j
            if r < ia or r >= ib:  # leaves the grid or the band
                break
            cr = count[r] + cj
            count[r] = cr
            if with_area:
                area[r] += aj
            p = pending[r] - 1
            if p != 0:
                pending[r] = p
                break
            pending[r] = _DONE
            if with_area and not uniform:
                if by_offset:
                    d = r - j
                    if d > 1:
                        rj += 1
                    elif d < -1:
                        rj -= 1
                else:
                    rj = r // ncols
            j = r
            cj = cr + 1
            r = rec[j]
    return pos
