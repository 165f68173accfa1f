"""Compiled kernels: D8 receivers, flat resolution, the stack and accumulation.

Receivers are flat indices ``r * ncols + c``; ``-1`` means the water leaves the grid here
(grid edge, next to nodata, base level) and ``-2`` marks invalid cells.
"""

import numpy as np
from numba import njit, prange

from ._fill import DCOL, DROW

NO_FLOW = -3  # internal: a cell with no downslope neighbour that is not an exit (a flat)


@njit(cache=True, nogil=True, parallel=True)
def d8_receivers(z, valid, seeds, base_level, dist):
    """Steepest-descent receiver of every cell (O'Callaghan & Mark 1984).

    Slope to each neighbour is the drop divided by the true distance between cell centres
    (``dist[row, k]``). Ties go to the first neighbour in the order N, NE, E, SE, S, SW, W,
    NW. Exits (``seeds``) without a lower neighbour get -1, base-level cells always -1;
    other cells without a lower neighbour get NO_FLOW (they lie on a flat).
    Rows are processed in parallel.
    """
    nr, nc = z.shape
    rec = np.empty(nr * nc, dtype=np.int32)
    flats_in_row = np.zeros(nr, dtype=np.int64)
    for r in prange(nr):
        d = dist[r]
        interior_row = r > 0 and r < nr - 1
        nrow_flat = 0
        for c in range(nc):
            i = r * nc + c
            if not valid[r, c]:
                rec[i] = -2
                continue
            if base_level[r, c]:
                rec[i] = -1
                continue
            zc = z[r, c]
            best = 0.0
            bk = -1
            inside = interior_row and c > 0 and c < nc - 1
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if not inside:
                    if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                        continue
                zn = z[rr, cc]
                if zn < zc:  # NaN (nodata) compares False
                    s = (zc - zn) / d[k]
                    if s > best:
                        best = s
                        bk = k
            if bk >= 0:
                rec[i] = (r + DROW[bk]) * nc + c + DCOL[bk]
            elif seeds[r, c]:
                rec[i] = -1
            else:
                rec[i] = NO_FLOW
                nrow_flat += 1
        flats_in_row[r] = nrow_flat
    return rec, flats_in_row.sum()


@njit(cache=True, nogil=True)
def resolve_flats(z, valid, rec, dist):
    """Give every flat cell a receiver, in place, without changing elevations.

    Barnes, Lehman & Mulla (2014), "An efficient assignment of drainage direction over flat
    surfaces in raster digital elevation models", Computers & Geosciences 62:128-135
    (after Garbrecht & Martz 1997): a breadth-first gradient away from higher terrain and a
    stronger one toward lower terrain are combined into an integer mask, and each flat cell
    drains to the neighbour of the same flat with the lowest mask value (the steepest mask
    descent, using true distances). Work is proportional to the number of flat cells.
    Returns the flat mask (int32 per cell, 0 off flats) and the number of cells left without
    a receiver (0 on a depression-filled surface).
    """
    nr, nc = z.shape
    n = nr * nc
    nflat = 0
    for i in range(n):
        if rec[i] == NO_FLOW:
            nflat += 1
    flats = np.empty(nflat, dtype=np.int32)
    t = 0
    for i in range(n):
        if rec[i] == NO_FLOW:
            flats[t] = i
            t += 1
    # mark: 1 = low edge (drains, touches a same-height flat cell), 2 = high edge
    mark = np.zeros(n, dtype=np.uint8)
    nlow = 0
    nhigh = 0
    for t in range(nflat):
        i = flats[t]
        r = i // nc
        c = i - r * nc
        zc = z[r, c]
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc or not valid[rr, cc]:
                continue
            j = rr * nc + cc
            zn = z[rr, cc]
            if zn > zc:
                if mark[i] == 0:
                    mark[i] = 2
                    nhigh += 1
            elif zn == zc and rec[j] != NO_FLOW and mark[j] == 0:
                mark[j] = 1
                nlow += 1
    low = np.empty(nlow, dtype=np.int32)
    high = np.empty(nhigh, dtype=np.int32)
    a = 0
    b = 0
    for t in range(nflat):
        i = flats[t]
        if mark[i] == 2:
            high[b] = i
            b += 1
        r = i // nc
        c = i - r * nc
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                continue
            j = rr * nc + cc
            if mark[j] == 1:
                low[a] = j
                a += 1
                mark[j] = 3  # collected
    # label each flat by flooding from its low edges over flat cells of the same elevation
    labels = np.zeros(n, dtype=np.int32)
    queue = np.empty(nflat + nlow + 1, dtype=np.int32)
    nlab = 0
    for t in range(nlow):
        s0 = low[t]
        if labels[s0] != 0:
            continue
        nlab += 1
        zf = z[s0 // nc, s0 % nc]
        sp = 0
        queue[sp] = s0
        sp += 1
        labels[s0] = nlab
        while sp > 0:
            sp -= 1
            i = queue[sp]
            r = i // nc
            c = i - r * nc
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
                j = rr * nc + cc
                if labels[j] != 0 or z[rr, cc] != zf:
                    continue
                if rec[j] == NO_FLOW:
                    labels[j] = nlab
                    queue[sp] = j
                    sp += 1
                elif rec[i] == NO_FLOW and mark[j] == 3:
                    labels[j] = nlab  # another low edge of the same flat
    flat_height = np.zeros(nlab + 1, dtype=np.int32)
    away = np.zeros(n, dtype=np.int32)
    # gradient away from higher terrain (breadth first from the high edges)
    head = 0
    tail = 0
    for t in range(nhigh):
        i = high[t]
        if labels[i] != 0:
            queue[tail] = i
            tail += 1
            away[i] = 1
    while head < tail:
        i = queue[head]
        head += 1
        lab = labels[i]
        d = away[i]
        if d > flat_height[lab]:
            flat_height[lab] = d
        r = i // nc
        c = i - r * nc
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                continue
            j = rr * nc + cc
            if labels[j] == lab and rec[j] == NO_FLOW and away[j] == 0:
                away[j] = d + 1
                queue[tail] = j
                tail += 1
    # gradient toward lower terrain (breadth first from the low edges)
    mask = np.zeros(n, dtype=np.int32)
    head = 0
    tail = 0
    for t in range(nlow):
        i = low[t]
        queue[tail] = i
        tail += 1
        mask[i] = 1
    while head < tail:
        i = queue[head]
        head += 1
        lab = labels[i]
        d = mask[i]
        r = i // nc
        c = i - r * nc
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                continue
            j = rr * nc + cc
            if labels[j] == lab and rec[j] == NO_FLOW and mask[j] == 0:
                mask[j] = d + 1
                queue[tail] = j
                tail += 1
    # combine: towards lower counts twice, away from higher once (Barnes et al. 2014b)
    for t in range(tail):
        i = queue[t]
        if away[i] > 0:
            mask[i] = flat_height[labels[i]] - away[i] + 2 * mask[i]
        else:
            mask[i] = 2 * mask[i]
    # each flat cell drains down the mask, within its own flat
    unresolved = 0
    for t in range(nflat):
        i = flats[t]
        lab = labels[i]
        r = i // nc
        c = i - r * nc
        best = 0.0
        bk = -1
        if lab != 0:
            mi = mask[i]
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
                j = rr * nc + cc
                if labels[j] != lab:
                    continue
                drop = mi - mask[j]
                if drop > 0:
                    s = drop / dist[r, k]
                    if s > best:
                        best = s
                        bk = k
        if bk >= 0:
            rec[i] = (r + DROW[bk]) * nc + c + DCOL[bk]
        else:
            rec[i] = -1
            unresolved += 1
    return mask, unresolved


@njit(cache=True, nogil=True)
def stack_and_count(rec):
    """The stack (Braun & Willett 2013) and the D8 cell-count accumulation in one sweep.

    Cells are emitted upstream-first: a scan finds every cell without donors and walks
    downstream from it, adding its count to the receiver, for as long as the receiver has
    no donor left to wait for. Written back to front, that order is the stack: valid cells
    ordered so that every cell comes after its receiver. Cells on a receiver cycle (only
    possible in a damaged direction raster) are left out.

    Returns (stack int32, count int32 per cell, 0 on nodata).
    """
    n = rec.shape[0]
    pending = np.zeros(n, dtype=np.uint8)
    nvalid = 0
    for i in range(n):
        r = rec[i]
        if r >= 0:
            pending[r] += 1
        if r != -2:
            nvalid += 1
    count = np.zeros(n, dtype=np.int32)
    stack = np.empty(nvalid, dtype=np.int32)
    pos = nvalid
    for i in range(n):
        if pending[i] != 0 or rec[i] == -2 or count[i] != 0:
            continue
        j = i
        while True:
            count[j] += 1
            pos -= 1
            stack[pos] = j
            r = rec[j]
            if r < 0:
                break
            count[r] += count[j]
            pending[r] -= 1
            if pending[r] != 0:
                break
            j = r
    if pos != 0:
        stack = stack[pos:].copy()
    return stack, count


@njit(cache=True, nogil=True)
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
def accumulate_area(rec, stack, ncols, row_area):
    """Upstream area (m²) from the per-row cell area, float64."""
    n = rec.shape[0]
    acc = np.zeros(n, dtype=np.float64)
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        acc[i] += row_area[i // ncols]
        r = rec[i]
        if r >= 0:
            acc[r] += acc[i]
    return acc


@njit(cache=True, nogil=True)
def receivers_to_azimuth(rec, ncols):
    """D8 direction raster codes: azimuth in degrees (0..315), -1 no outflow, -32768 nodata."""
    n = rec.shape[0]
    out = np.empty(n, dtype=np.int16)
    for i in range(n):
        r = rec[i]
        if r == -2:
            out[i] = -32768
        elif r < 0:
            out[i] = -1
        else:
            dr = r // ncols - i // ncols
            dc = r % ncols - i % ncols
            for k in range(8):
                if DROW[k] == dr and DCOL[k] == dc:
                    out[i] = 45 * k
                    break
    return out


@njit(cache=True, nogil=True)
def azimuth_to_receivers(code, ncols, nrows):
    """Inverse of :func:`receivers_to_azimuth`; raises on unknown codes (returns -9 there)."""
    n = code.shape[0]
    rec = np.empty(n, dtype=np.int32)
    bad = 0
    for i in range(n):
        v = code[i]
        if v == -32768:
            rec[i] = -2
        elif v == -1:
            rec[i] = -1
        elif v >= 0 and v <= 315 and v % 45 == 0:
            k = v // 45
            r = i // ncols + DROW[k]
            c = i % ncols + DCOL[k]
            if r < 0 or r >= nrows or c < 0 or c >= ncols:
                rec[i] = -1
            else:
                rec[i] = r * ncols + c
        else:
            rec[i] = -9
            bad += 1
    return rec, bad


@njit(cache=True, nogil=True)
def receiver_distance(rec, ncols, dist):
    """Distance (m) from each cell centre to its receiver's; 0 where there is none.
    ``dist`` is the (nrows, 8) table of CellGeometry.neighbour_distances()."""
    n = rec.shape[0]
    out = np.zeros(n, dtype=np.float64)
    for i in range(n):
        r = rec[i]
        if r < 0:
            continue
        row = i // ncols
        dr = r // ncols - row
        dc = r % ncols - i % ncols
        for k in range(8):
            if DROW[k] == dr and DCOL[k] == dc:
                out[i] = dist[row, k]
                break
    return out


@njit(cache=True, nogil=True)
def label_nearest_outlet(rec, stack, outlet_cells, outlet_labels, n):
    """Label every cell with the nearest outlet downstream (one forward pass over the stack).

    ``outlet_cells`` are flat indices, ``outlet_labels`` their labels (> 0). Cells that
    drain to no outlet get 0. Where two outlets share a cell the later one wins.
    """
    lab = np.zeros(n, dtype=np.int32)
    for t in range(outlet_cells.shape[0]):
        lab[outlet_cells[t]] = outlet_labels[t]
    for t in range(stack.shape[0]):
        i = stack[t]
        if lab[i] == 0:
            r = rec[i]
            if r >= 0:
                lab[i] = lab[r]
    return lab


@njit(cache=True, nogil=True)
def upstream_length(rec, stack, step):
    """Longest flow-path length (m) upstream of every cell, from ``step`` = distance to the
    receiver (one backward pass over the stack; Hack 1957 main-stream length)."""
    n = rec.shape[0]
    up = np.zeros(n, dtype=np.float64)
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        r = rec[i]
        if r >= 0:
            v = up[i] + step[i]
            if v > up[r]:
                up[r] = v
    return up


@njit(cache=True, nogil=True)
def downstream_length(rec, stack, step):
    """Flow distance (m) from every cell down to where its water leaves the grid
    (one forward pass over the stack)."""
    n = rec.shape[0]
    down = np.zeros(n, dtype=np.float64)
    for t in range(stack.shape[0]):
        i = stack[t]
        r = rec[i]
        if r >= 0:
            down[i] = down[r] + step[i]
    return down
