"""Compiled kernels: Priority-Flood depression filling and neighbour helpers.

Neighbour order everywhere in basinkit: k = 0..7 is N, NE, E, SE, S, SW, W, NW, i.e. the
azimuth 45·k degrees clockwise from grid north.
"""

import numpy as np
from numba import njit

# row and column offsets of the 8 neighbours, in azimuth order N, NE, E, SE, S, SW, W, NW
DROW = np.array([-1, -1, 0, 1, 1, 1, 0, -1], dtype=np.int64)
DCOL = np.array([0, 1, 1, 1, 0, -1, -1, -1], dtype=np.int64)


@njit(cache=True, nogil=True)
def _heap_push(keys, vals, n, key, val):
    i = n
    keys[i] = key
    vals[i] = val
    while i > 0:
        p = (i - 1) >> 1
        if keys[p] <= key:
            break
        keys[i] = keys[p]
        vals[i] = vals[p]
        i = p
    keys[i] = key
    vals[i] = val
    return n + 1


@njit(cache=True, nogil=True)
def _heap_pop(keys, vals, n):
    """Remove the smallest entry; returns (new size, value). Caller reads keys[0] first."""
    top = vals[0]
    n -= 1
    if n == 0:
        return 0, top
    key = keys[n]
    val = vals[n]
    i = 0
    while True:
        c = 2 * i + 1
        if c >= n:
            break
        if c + 1 < n and keys[c + 1] < keys[c]:
            c += 1
        if keys[c] >= key:
            break
        keys[i] = keys[c]
        vals[i] = vals[c]
        i = c
    keys[i] = key
    vals[i] = val
    return n, top


@njit(cache=True, nogil=True)
def seed_mask(valid, base_level):
    """Cells where water leaves the grid: valid cells on the grid edge, next to nodata, or
    marked as base level."""
    nr, nc = valid.shape
    out = np.zeros((nr, nc), dtype=np.bool_)
    for r in range(nr):
        for c in range(nc):
            if not valid[r, c]:
                continue
            if base_level[r, c] or r == 0 or c == 0 or r == nr - 1 or c == nc - 1:
                out[r, c] = True
                continue
            for k in range(8):
                if not valid[r + DROW[k], c + DCOL[k]]:
                    out[r, c] = True
                    break
    return out


@njit(cache=True, nogil=True)
def priority_flood_fill(z, valid, seeds, epsilon):
    """Fill depressions in place (Barnes, Lehman & Mulla 2014, "improved Priority-Flood":
    cells inside a depression go to a plain FIFO queue instead of the priority queue).

    With ``epsilon == 0`` the result is exactly the depression-filled surface (equal to
    morphological reconstruction by erosion). With ``epsilon > 0`` every filled cell is
    raised just above the cell it was reached from (Priority-Flood+ε), using the next
    representable float32 when ``z + epsilon`` rounds back to ``z``.
    Returns the number of cells raised.
    """
    nr, nc = z.shape
    n = nr * nc
    closed = ~valid  # invalid cells are never entered
    nseed = 0
    for r in range(nr):
        for c in range(nc):
            if seeds[r, c]:
                nseed += 1
    cap = n + 1
    keys = np.empty(cap, dtype=np.float32)
    vals = np.empty(cap, dtype=np.int32)
    pit = np.empty(n + 1, dtype=np.int32)
    hsize = 0
    for r in range(nr):
        for c in range(nc):
            if seeds[r, c]:
                closed[r, c] = True
                hsize = _heap_push(keys, vals, hsize, z[r, c], r * nc + c)
    phead = 0
    ptail = 0
    raised = 0
    while hsize > 0 or ptail > phead:
        if ptail > phead:
            cell = pit[phead]
            phead += 1
            if phead == ptail:
                phead = 0
                ptail = 0
        else:
            hsize, cell = _heap_pop(keys, vals, hsize)
        r = cell // nc
        c = cell - r * nc
        zc = z[r, c]
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc or closed[rr, cc]:
                continue
            closed[rr, cc] = True
            zn = z[rr, cc]
            if epsilon > 0.0:
                target = np.float32(zc + epsilon)
                if target <= zc:
                    target = np.nextafter(zc, np.float32(np.inf))
                if zn <= target:
                    if zn < target:
                        z[rr, cc] = target
                        raised += 1
                    pit[ptail] = rr * nc + cc
                    ptail += 1
                else:
                    hsize = _heap_push(keys, vals, hsize, zn, rr * nc + cc)
            elif zn <= zc:
                if zn < zc:
                    z[rr, cc] = zc
                    raised += 1
                pit[ptail] = rr * nc + cc
                ptail += 1
            else:
                hsize = _heap_push(keys, vals, hsize, zn, rr * nc + cc)
    return raised
