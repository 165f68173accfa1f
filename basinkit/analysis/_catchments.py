"""Numba kernels for catchments: per-label summaries in one pass over the grid."""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def label_summary(lab, nlab, ncols, z, row_area, edge):
    """Per-label cell count, area (m²), elevation sum/min/max (finite values only), whether
    any cell is an edge cell, and bounding box (row/col min and max, inclusive).

    ``lab`` is the flat label grid (0 = none), ``row_area`` the cell area of each row,
    ``edge`` a flat boolean grid of cells on the grid border or next to nodata.
    """
    count = np.zeros(nlab + 1, dtype=np.int64)
    area = np.zeros(nlab + 1, dtype=np.float64)
    zsum = np.zeros(nlab + 1, dtype=np.float64)
    zcount = np.zeros(nlab + 1, dtype=np.int64)
    zmin = np.full(nlab + 1, np.inf)
    zmax = np.full(nlab + 1, -np.inf)
    touches = np.zeros(nlab + 1, dtype=np.bool_)
    rmin = np.full(nlab + 1, 2 ** 62, dtype=np.int64)
    rmax = np.full(nlab + 1, -1, dtype=np.int64)
    cmin = np.full(nlab + 1, 2 ** 62, dtype=np.int64)
    cmax = np.full(nlab + 1, -1, dtype=np.int64)
    for i in range(lab.shape[0]):
        k = lab[i]
        if k <= 0:
            continue
        r = i // ncols
        c = i - r * ncols
        count[k] += 1
        area[k] += row_area[r]
        v = z[i]
        if np.isfinite(v):
            zsum[k] += v
            zcount[k] += 1
            if v < zmin[k]:
                zmin[k] = v
            if v > zmax[k]:
                zmax[k] = v
        if edge[i]:
            touches[k] = True
        if r < rmin[k]:
            rmin[k] = r
        if r > rmax[k]:
            rmax[k] = r
        if c < cmin[k]:
            cmin[k] = c
        if c > cmax[k]:
            cmax[k] = c
    return count, area, zsum, zcount, zmin, zmax, touches, rmin, rmax, cmin, cmax


@njit(cache=True, nogil=True)
def remap(lab, lut):
    """``lut[lab]`` for a flat int32 label grid (0 stays 0)."""
    out = np.empty_like(lab)
    for i in range(lab.shape[0]):
        out[i] = lut[lab[i]]
    return out


@njit(cache=True, nogil=True)
def range_mask(lab, lo, hi):
    """Boolean (as uint8) of ``lo <= lab <= hi`` on a 2-D window."""
    nr, nc = lab.shape
    out = np.zeros((nr, nc), dtype=np.uint8)
    for r in range(nr):
        for c in range(nc):
            v = lab[r, c]
            if v >= lo and v <= hi:
                out[r, c] = 1
    return out


@njit(cache=True, nogil=True)
def cells_by_label(lab, valid, nlab):
    """The cells with a label in 1..nlab-1 (and valid), grouped by label in row-major order
    within each (a counting sort), and ``starts`` (nlab + 1): label l's cells are
    ``order[starts[l]:starts[l + 1]]``, so a range of labels is one contiguous slice."""
    n = lab.shape[0]
    counts = np.zeros(nlab + 1, dtype=np.int64)
    for i in range(n):
        v = lab[i]
        if v > 0 and v < nlab and valid[i]:
            counts[v + 1] += 1
    for l in range(1, nlab + 1):
        counts[l] += counts[l - 1]
    starts = counts.copy()
    order = np.empty(counts[nlab], dtype=np.int32)  # 4 bytes a cell: grids hold < 2**31
    for i in range(n):
        v = lab[i]
        if v > 0 and v < nlab and valid[i]:
            order[counts[v]] = i
            counts[v] += 1
    return order, starts
