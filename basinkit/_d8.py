"""Compiled kernels: D8 receivers, flat resolution, the stack and accumulation.

Receivers are flat indices ``r * ncols + c``; ``-1`` means the water leaves the grid here
(grid edge, next to nodata, base level) and ``-2`` marks invalid cells.
"""

import numpy as np
from numba import njit

from ._fill import DCOL, DROW

NO_FLOW = -3  # internal: a cell with no downslope neighbour that is not an exit (a flat)


@njit(cache=True, nogil=True)
def d8_receivers(z, valid, seeds, base_level, dist):
    """Steepest-descent receiver of every cell (O'Callaghan & Mark 1984).

    Slope to each neighbour is the drop divided by the true distance between cell centres
    (``dist[row, k]``). Ties go to the first neighbour in the order N, NE, E, SE, S, SW, W,
    NW. Exits (``seeds``) without a lower neighbour get -1, base-level cells always -1;
    other cells without a lower neighbour get NO_FLOW (they lie on a flat).
    """
    nr, nc = z.shape
    rec = np.empty(nr * nc, dtype=np.int32)
    nflat = 0
    for r in range(nr):
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
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc or not valid[rr, cc]:
                    continue
                drop = zc - z[rr, cc]
                if drop > 0.0:
                    s = drop / dist[r, k]
                    if s > best:
                        best = s
                        bk = k
            if bk >= 0:
                rec[i] = (r + DROW[bk]) * nc + c + DCOL[bk]
            elif seeds[r, c]:
                rec[i] = -1
            else:
                rec[i] = NO_FLOW
                nflat += 1
    return rec, nflat


@njit(cache=True, nogil=True)
def resolve_flats(z, valid, rec, dist):
    """Give every flat cell a receiver, in place, without changing elevations.

    Barnes, Lehman & Mulla (2014), "An efficient assignment of drainage direction over flat
    surfaces in raster digital elevation models", Computers & Geosciences 62:128-135
    (after Garbrecht & Martz 1997): a breadth-first gradient away from higher terrain and a
    stronger one toward lower terrain are combined into an integer mask, and each flat cell
    drains to the neighbour of the same flat with the lowest mask value.
    Returns the flat mask (int32 per cell, 0 off flats) and the number of cells left without
    a receiver (0 on a depression-filled surface).
    """
    nr, nc = z.shape
    n = nr * nc
    labels = np.zeros(n, dtype=np.int32)
    away = np.zeros(n, dtype=np.int32)
    queue = np.empty(n, dtype=np.int32)
    low = np.empty(n, dtype=np.int32)
    nlow = 0
    nhigh = 0
    # edges: low = drains and touches a same-height flat cell; high = flat next to higher
    for r in range(nr):
        for c in range(nc):
            i = r * nc + c
            if rec[i] == -2:
                continue
            zc = z[r, c]
            is_low = False
            is_high = False
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc or not valid[rr, cc]:
                    continue
                j = rr * nc + cc
                if rec[i] != NO_FLOW and rec[j] == NO_FLOW and z[rr, cc] == zc:
                    is_low = True
                    break
                if rec[i] == NO_FLOW and z[rr, cc] > zc:
                    is_high = True
            if is_low:
                low[nlow] = i
                nlow += 1
            elif is_high:
                queue[nhigh] = i
                nhigh += 1
    # label each flat by flooding from its low edges over cells of the same elevation
    nlab = 0
    stack = np.empty(n, dtype=np.int32)
    for t in range(nlow):
        s0 = low[t]
        if labels[s0] != 0:
            continue
        nlab += 1
        zf = z[s0 // nc, s0 % nc]
        sp = 0
        stack[sp] = s0
        sp += 1
        labels[s0] = nlab
        while sp > 0:
            sp -= 1
            i = stack[sp]
            r = i // nc
            c = i - r * nc
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc or not valid[rr, cc]:
                    continue
                j = rr * nc + cc
                if labels[j] == 0 and z[rr, cc] == zf:
                    labels[j] = nlab
                    stack[sp] = j
                    sp += 1
    flat_height = np.zeros(nlab + 1, dtype=np.int32)
    # gradient away from higher terrain (breadth first from the high edges)
    head = 0
    tail = 0
    for t in range(nhigh):
        i = queue[t]
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
    # gradient toward lower terrain (breadth first from the low edges), combined
    mask = np.zeros(n, dtype=np.int32)
    towards = stack  # reuse as the BFS distance
    towards[:] = 0
    head = 0
    tail = 0
    for t in range(nlow):
        i = low[t]
        queue[tail] = i
        tail += 1
        towards[i] = 1
    while head < tail:
        i = queue[head]
        head += 1
        lab = labels[i]
        d = towards[i]
        if away[i] > 0:
            mask[i] = flat_height[lab] - away[i] + 2 * d
        else:
            mask[i] = 2 * d
        r = i // nc
        c = i - r * nc
        for k in range(8):
            rr = r + DROW[k]
            cc = c + DCOL[k]
            if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                continue
            j = rr * nc + cc
            if labels[j] == lab and rec[j] == NO_FLOW and towards[j] == 0:
                towards[j] = d + 1
                queue[tail] = j
                tail += 1
    # each flat cell drains down the mask, within its own flat
    unresolved = 0
    for i in range(n):
        if rec[i] != NO_FLOW:
            continue
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
def build_stack(rec):
    """Order cells so that every cell comes after its receiver (Braun & Willett 2013).

    Returns the stack (valid cells only) as int32 flat indices.
    """
    n = rec.shape[0]
    ndon = np.zeros(n + 1, dtype=np.int32)
    nvalid = 0
    for i in range(n):
        r = rec[i]
        if r >= 0:
            ndon[r + 1] += 1
        if r != -2:
            nvalid += 1
    for i in range(n):
        ndon[i + 1] += ndon[i]
    donors = np.empty(max(ndon[n], 1), dtype=np.int32)
    fillp = ndon[:n].copy()
    for i in range(n):
        r = rec[i]
        if r >= 0:
            donors[fillp[r]] = i
            fillp[r] += 1
    stack = np.empty(nvalid, dtype=np.int32)
    # breadth-first from every exit: each level follows its receivers
    ns = 0
    for i in range(n):
        if rec[i] == -1:
            stack[ns] = i
            ns += 1
    head = 0
    while head < ns:
        i = stack[head]
        head += 1
        for t in range(ndon[i], ndon[i + 1]):
            stack[ns] = donors[t]
            ns += 1
    return stack[:ns]


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
