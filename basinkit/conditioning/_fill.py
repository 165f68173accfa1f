"""Compiled kernels: Priority-Flood depression filling and neighbour helpers.

Neighbour order everywhere in basinkit: k = 0..7 is N, NE, E, SE, S, SW, W, NW, i.e. the
azimuth 45·k degrees clockwise from grid north.
"""

import numpy as np
from numba import njit, prange

from .._jit import parallel_for_large_grids

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


@njit(cache=True, inline='always')
def _key(bits, i):
    b = bits[i]
    if b & np.uint32(0x80000000):
        k = np.uint64(b ^ np.uint32(0xFFFFFFFF))
    else:
        k = np.uint64(b | np.uint32(0x80000000))
    return (k << np.uint64(32)) | np.uint64(i)

@njit(cache=True, inline='always')
def _push(heap, hs, item):
    """Insert into a 4-ary min-heap (children of j at 4j+1 .. 4j+4)."""
    j = hs
    while j > 0:
        p = (j - 1) >> 2
        if heap[p] <= item:
            break
        heap[j] = heap[p]
        j = p
    heap[j] = item
    return hs + 1

@njit(cache=True, inline='always')
def _pop(heap, hs):
    top = heap[0]
    hs -= 1
    if hs > 0:
        item = heap[hs]
        j = 0
        while True:
            c = 4 * j + 1
            if c >= hs:
                break
            m = c
            v = heap[c]
            e = c + 4
            if e > hs:
                e = hs
            for q in range(c + 1, e):
                w = heap[q]
                if w < v:
                    v = w
                    m = q
            if v >= item:
                break
            heap[j] = v
            j = m
        heap[j] = item
    return hs, np.int64(top & np.uint64(0xFFFFFFFF))

@njit(cache=True, nogil=True)
def fill_exact(z, valid, seeds):
    """Exact depression filling, in place; returns the number of cells raised.

    Priority-Flood (Barnes, Lehman & Mulla 2014) with the plain queue for depression cells
    and, after Zhou, Sun & Fu (2016, Computers & Geosciences 90:87-96), slope cells traced
    uphill with a plain queue: a cell reached from a cell lower than itself keeps its own
    elevation, so it enters the priority queue only if it still has an unvisited neighbour
    not higher than itself (a possible spill point). The result is identical to the plain
    Priority-Flood; far fewer cells pass through the priority queue.
    Keys are the float32 elevation mapped to an order-preserving uint32, packed with the
    cell index into one uint64, so ties pop in cell order. The priority queue is a 4-ary
    heap (fewer levels, and the children of an entry share a cache line; a d-ary heap,
    Johnson 1975, Information Processing Letters 4:53-57). ``fill_depressions`` calls it
    for grids of up to one tile (see :mod:`basinkit.conditioning._tiled_fill`), which stay in cache.
    """
    nr, nc = z.shape
    n = nr * nc
    zf = z.ravel()
    closed = (~valid).ravel()
    bits = zf.view(np.uint32)
    heap = np.empty(n + 1, dtype=np.uint64)
    pit = np.empty(n + 1, dtype=np.int32)
    trace = np.empty(n + 1, dtype=np.int32)
    sf = seeds.ravel()
    hs = 0
    for i in range(n):
        if sf[i]:
            closed[i] = True
            hs = _push(heap, hs, _key(bits, i))
    offs = np.empty(8, dtype=np.int64)
    for k in range(8):
        offs[k] = DROW[k] * nc + DCOL[k]
    ph = 0
    pt = 0
    raised = 0
    while hs > 0 or pt > ph:
        if pt > ph:
            cell = np.int64(pit[ph]); ph += 1
            if ph == pt:
                ph = 0; pt = 0
        else:
            hs, cell = _pop(heap, hs)
        r = cell // nc
        c0 = cell - r * nc
        zc = zf[cell]
        interior = r > 0 and r < nr - 1 and c0 > 0 and c0 < nc - 1
        for k in range(8):
            if not interior:
                rr = r + DROW[k]; cc = c0 + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
            nb = cell + offs[k]
            if closed[nb]:
                continue
            closed[nb] = True
            if zf[nb] <= zc:
                if zf[nb] < zc:
                    zf[nb] = zc
                    raised += 1
                pit[pt] = nb; pt += 1
                continue
            # nb is final at its own elevation: trace uphill from it
            th = 0; tt = 1
            trace[0] = nb
            while th < tt:
                t = np.int64(trace[th]); th += 1
                tr = t // nc; tc = t - tr * nc
                zt = zf[t]
                tin = tr > 0 and tr < nr - 1 and tc > 0 and tc < nc - 1
                spill = False
                for q in range(8):
                    if not tin:
                        rr = tr + DROW[q]; cc = tc + DCOL[q]
                        if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                            continue
                    m = t + offs[q]
                    if closed[m]:
                        continue
                    if zf[m] > zt:
                        closed[m] = True
                        trace[tt] = m; tt += 1
                    else:
                        spill = True
                if spill:
                    hs = _push(heap, hs, _key(bits, t))
    return raised


@njit(cache=True, nogil=True)
def _seed_row(valid, base_level, out, r, full):
    nr, nc = valid.shape
    edge_row = r == 0 or r == nr - 1
    for c in range(nc):
        if not valid[r, c]:
            continue
        if base_level[r, c] or edge_row or c == 0 or c == nc - 1:
            out[r, c] = True
            continue
        if full:
            continue  # rows r-1, r, r+1 hold no nodata
        for k in range(8):
            if not valid[r + DROW[k], c + DCOL[k]]:
                out[r, c] = True
                break


@parallel_for_large_grids(cache=True, nogil=True)
def seed_mask(valid, base_level):
    """Cells where water leaves the grid: valid cells on the grid edge, next to nodata, or
    marked as base level. Rows in parallel; a row whose neighbourhood holds no nodata
    skips the neighbour checks."""
    nr, nc = valid.shape
    out = np.zeros((nr, nc), dtype=np.bool_)
    row_full = np.empty(nr, dtype=np.bool_)
    for r in prange(nr):
        f = True
        for c in range(nc):
            if not valid[r, c]:
                f = False
                break
        row_full[r] = f
    for r in prange(nr):
        full = r > 0 and r < nr - 1 and row_full[r - 1] and row_full[r] and row_full[r + 1]
        _seed_row(valid, base_level, out, r, full)
    return out


@njit(cache=True, nogil=True)
def priority_flood_fill(z, valid, seeds, epsilon):
    """Priority-Flood+ε in place (Barnes, Lehman & Mulla 2014, "improved Priority-Flood":
    cells inside a depression go to a plain FIFO queue instead of the priority queue).

    Every filled cell is raised at least ``epsilon`` (> 0) above the cell it was reached
    from, using the next representable float32 when ``z + epsilon`` rounds back to ``z``,
    so every cell has a strictly lower neighbour. For the exact filled surface use
    :func:`fill_exact`. Returns the number of cells raised.
    """
    nr, nc = z.shape
    n = nr * nc
    closed = ~valid  # invalid cells are never entered
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
        target = np.float32(zc + epsilon)
        if target <= zc:
            target = np.nextafter(zc, np.float32(np.inf))
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc or closed[rr, cc]:
                continue
            closed[rr, cc] = True
            zn = z[rr, cc]
            if zn <= target:
                if zn < target:
                    z[rr, cc] = target
                    raised += 1
                pit[ptail] = rr * nc + cc
                ptail += 1
            else:
                hsize = _heap_push(keys, vals, hsize, zn, rr * nc + cc)
    return raised


@njit(cache=True, nogil=True)
def change_summary(orig, cond, valid, row_area):
    """One pass over the grid: cells raised/lowered, deepest change, volumes (m³), and the
    number of 8-connected areas that were raised (depressions)."""
    nr, nc = orig.shape
    raised = 0
    lowered = 0
    max_up = 0.0
    max_down = 0.0
    vol_up = 0.0
    vol_down = 0.0
    # raised cells not yet reached by the count of depressions below
    up = np.zeros(nr * nc, dtype=np.uint8)
    for r in range(nr):
        a = row_area[r]
        for c in range(nc):
            if not valid[r, c]:
                continue
            d = np.float64(cond[r, c]) - np.float64(orig[r, c])
            if d > 0:
                raised += 1
                up[r * nc + c] = 1
                vol_up += d * a
                if d > max_up:
                    max_up = d
            elif d < 0:
                lowered += 1
                vol_down -= d * a
                if -d > max_down:
                    max_down = -d
    # count depressions: connected components of raised cells
    offs = np.empty(8, dtype=np.int64)
    for k in range(8):
        offs[k] = DROW[k] * nc + DCOL[k]
    inv = 1.0 / max(nc, 1)
    queue = np.empty(max(raised, 1), dtype=np.int64)
    ndep = 0
    for i0 in range(nr * nc):
        if up[i0] == 0:
            continue
        ndep += 1
        up[i0] = 0
        head = 0
        tail = 1
        queue[0] = i0
        while head < tail:
            i = queue[head]
            head += 1
            # the row by a floating-point estimate and one correction (exact below 2**52
            # cells; an integer division per cell costs more)
            r = np.int64(i * inv)
            if r * nc > i:
                r -= 1
            elif (r + 1) * nc <= i:
                r += 1
            c = i - r * nc
            if r > 0 and r < nr - 1 and c > 0 and c < nc - 1:
                for k in range(8):
                    j = i + offs[k]
                    if up[j]:
                        up[j] = 0
                        queue[tail] = j
                        tail += 1
            else:
                for k in range(8):
                    rr = r + DROW[k]
                    cc = c + DCOL[k]
                    if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                        continue
                    j = rr * nc + cc
                    if up[j]:
                        up[j] = 0
                        queue[tail] = j
                        tail += 1
    return raised, lowered, max_up, max_down, vol_up, vol_down, ndep
