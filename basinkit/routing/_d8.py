"""Compiled kernels: D8 receivers, flat resolution, direction codes and distances along
the receivers (the stack and accumulation sweeps are in ``_stack.py``).

Receivers are flat indices ``r * ncols + c``; ``-1`` means the water leaves the grid here
(grid edge, next to nodata, base level) and ``-2`` marks invalid cells.
"""

import numpy as np
from numba import njit, prange

from ..conditioning._fill import DCOL, DROW
from .._jit import parallel_for_large_grids
from ._stack import _row_of

NO_FLOW = -3  # internal: a cell with no downslope neighbour that is not an exit (a flat)


@njit(cache=True, nogil=True, inline='always')
def _steeper(zc, zn, dk, best, bt, t):
    # a neighbour not lower (or NaN, nodata) gives s <= 0 or NaN, never above best >= 0,
    # so no separate test is needed; the choice compiles to selects rather than branches
    s = (zc - zn) / dk
    up = s > best
    return (s if up else best), (t if up else bt)


@njit(cache=True, nogil=True)
def _d8_cell(r, c, zf, vf, sf, bf, dist, rec, nr, nc):
    """Receiver of one cell, with bounds checks; returns 1 for a flat cell, else 0."""
    i = r * nc + c
    if not vf[i]:
        rec[i] = -2
        return 0
    if bf[i]:
        rec[i] = -1
        return 0
    zc = zf[i]
    best = 0.0
    bt = -1
    for k in range(8):
        rr = r + DROW[k]
        cc = c + DCOL[k]
        if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
            continue
        j = rr * nc + cc
        best, bt = _steeper(zc, zf[j], dist[r, k], best, bt, j)
    if bt >= 0:
        rec[i] = bt
        return 0
    if sf[i]:
        rec[i] = -1
        return 0
    rec[i] = NO_FLOW
    return 1


@njit(cache=True, nogil=True)
def _d8_row(r, zf, vf, sf, bf, dist, rec, nr, nc):
    """Receivers of one row (see :func:`d8_receivers`); returns its number of flat cells.

    Interior cells go through a loop without branches (selects only, on flat indices with
    the neighbour offsets worked out once), which the compiler turns into SIMD code; the
    first and last column and the first and last row take the checked path."""
    if r == 0 or r == nr - 1 or nc < 3:
        nflat = 0
        for c in range(nc):
            nflat += _d8_cell(r, c, zf, vf, sf, bf, dist, rec, nr, nc)
        return nflat
    o0 = -nc
    o1 = -nc + 1
    o3 = nc + 1
    o4 = nc
    o5 = nc - 1
    o7 = -nc - 1
    d0 = dist[r, 0]
    d1 = dist[r, 1]
    d2 = dist[r, 2]
    d3 = dist[r, 3]
    d4 = dist[r, 4]
    d5 = dist[r, 5]
    d6 = dist[r, 6]
    d7 = dist[r, 7]
    no_flow = np.int64(NO_FLOW)
    leaves = np.int64(-1)
    invalid = np.int64(-2)
    start = r * nc
    nflat = 0
    for i in range(start + 1, start + nc - 1):
        zc = zf[i]
        best = 0.0
        bt = np.int64(-1)
        best, bt = _steeper(zc, zf[i + o0], d0, best, bt, i + o0)
        best, bt = _steeper(zc, zf[i + o1], d1, best, bt, i + o1)
        best, bt = _steeper(zc, zf[i + 1], d2, best, bt, i + 1)
        best, bt = _steeper(zc, zf[i + o3], d3, best, bt, i + o3)
        best, bt = _steeper(zc, zf[i + o4], d4, best, bt, i + o4)
        best, bt = _steeper(zc, zf[i + o5], d5, best, bt, i + o5)
        best, bt = _steeper(zc, zf[i - 1], d6, best, bt, i - 1)
        best, bt = _steeper(zc, zf[i + o7], d7, best, bt, i + o7)
        # the same decisions as _d8_cell, as selects: nodata, base level, a lower
        # neighbour, an exit, else a flat
        alt = leaves if sf[i] else no_flow
        res = bt if bt >= 0 else alt
        res = leaves if bf[i] else res
        res = res if vf[i] else invalid
        nflat += res == no_flow
        rec[i] = res
    nflat += _d8_cell(r, np.int64(0), zf, vf, sf, bf, dist, rec, nr, nc)
    nflat += _d8_cell(r, nc - 1, zf, vf, sf, bf, dist, rec, nr, nc)
    return nflat


@parallel_for_large_grids(cache=True, nogil=True)
def _d8_into(z, valid, seeds, base_level, dist, rec):
    nr, nc = z.shape
    zf = z.ravel()
    vf = valid.ravel()
    sf = seeds.ravel()
    bf = base_level.ravel()
    flats_in_row = np.zeros(nr, dtype=np.int64)
    for r in prange(nr):
        flats_in_row[r] = _d8_row(r, zf, vf, sf, bf, dist, rec, nr, nc)
    return flats_in_row.sum()


def _receivers_with(kernel):
    def run(z, valid, seeds, base_level, dist):
        # allocated by NumPy, which asks for huge pages for large blocks: a fresh array
        # faults in several times faster than one allocated inside a kernel
        rec = np.empty(z.size, dtype=np.int32)
        return rec, kernel(z, valid, seeds, base_level, dist, rec)
    return run


def d8_receivers(z, valid, seeds, base_level, dist):
    """Steepest-descent receiver of every cell (O'Callaghan & Mark 1984).

    Slope to each neighbour is the drop divided by the true distance between cell centres
    (``dist[row, k]``). Ties go to the first neighbour in the order N, NE, E, SE, S, SW, W,
    NW. Exits (``seeds``) without a lower neighbour get -1, base-level cells always -1;
    other cells without a lower neighbour get NO_FLOW (they lie on a flat).
    Rows are processed in parallel on large grids (``.serial`` and ``.parallel`` give the
    two versions; identical results). Returns (rec int32, number of flat cells).
    """
    return _receivers_with(_d8_into)(z, valid, seeds, base_level, dist)


d8_receivers.serial = _receivers_with(_d8_into.serial)
d8_receivers.parallel = _receivers_with(_d8_into.parallel)


_HIGH = np.uint8(1)     # flat cell with a higher valid neighbour
_LOW = np.uint8(2)      # drains, and touches a flat cell of the same elevation
_TOUCHED = np.uint8(4)  # non-flat valid neighbour of a flat, already listed
_REACHED = np.uint8(8)  # reached by the breadth-first pass toward lower terrain


@parallel_for_large_grids(cache=True, nogil=True)
def resolve_flats(z, valid, rec, dist):
    """Give every flat cell a receiver, in place, without changing elevations.

    Barnes, Lehman & Mulla (2014), "An efficient assignment of drainage direction over flat
    surfaces in raster digital elevation models", Computers & Geosciences 62:128-135
    (after Garbrecht & Martz 1997): a breadth-first gradient away from higher terrain and a
    stronger one toward lower terrain are combined into an integer mask, and each flat cell
    drains to the neighbour of the same flat with the lowest mask value (the steepest mask
    descent, using true distances; ties to the first neighbour N, NE, ..., NW).

    Work is proportional to the number of flat cells: one sweep over the flat cells finds
    the high and low edges, one flood labels the flats, and then each flat is finished on
    its own (both gradients and the drainage directions), the flats in parallel. Flats are
    labelled by flooding from the low edges in the order of their first flat neighbour,
    through flat cells and low edges of the same elevation, so flats that share an outlet
    cell are labelled as one (as flooding over equal elevations does in Barnes et al.).

    Returns the flat mask (int32 per cell: the combined gradient on labelled flat cells,
    2 on their low edges, 0 elsewhere) and the number of flat cells left without a receiver
    (flats with no lower way out; 0 on a depression-filled surface); those get -1.
    """
    nr, nc = z.shape
    n = nr * nc
    zf = z.ravel()
    vf = valid.ravel()
    inv = 1.0 / nc  # rows by _row_of: an integer division costs more, cell after cell
    offs = np.empty(8, dtype=np.int64)
    for k in range(8):
        offs[k] = DROW[k] * nc + DCOL[k]
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
    # one sweep over the flat cells: high edges (flat cells next to higher terrain), and the
    # non-flat neighbours in the order of their first flat neighbour, the low edges among them
    mark = np.zeros(n, dtype=np.uint8)
    touched = np.empty(max(min(8 * nflat, n - nflat), 1), dtype=np.int32)
    ntouch = 0
    for t in range(nflat):
        i = flats[t]
        r = _row_of(i, nc, inv)
        c = i - r * nc
        zc = zf[i]
        inside = r > 0 and r < nr - 1 and c > 0 and c < nc - 1
        for k in range(8):
            if not inside:
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
            j = i + offs[k]
            if not vf[j]:
                continue
            zn = zf[j]
            if zn > zc:
                mark[i] |= _HIGH
            if rec[j] != NO_FLOW:
                if mark[j] & _TOUCHED == 0:
                    mark[j] |= _TOUCHED
                    touched[ntouch] = j
                    ntouch += 1
                if zn == zc:
                    mark[j] |= _LOW
    nlow = 0
    for t in range(ntouch):
        j = touched[t]
        if mark[j] & _LOW:
            touched[nlow] = j
            nlow += 1
    low = touched[:nlow].copy()
    # label each flat by flooding from its low edges over flat cells of the same elevation:
    # flat cells get +label, low edges -label; members lists each label's cells together
    labels = np.zeros(n, dtype=np.int32)
    members = np.empty(nflat + nlow + 1, dtype=np.int32)
    start = np.empty(nlow + 1, dtype=np.int64)
    nlab = 0
    tail = 0
    for t in range(nlow):
        s0 = low[t]
        if labels[s0] != 0:
            continue
        start[nlab] = tail
        nlab += 1
        zh = zf[s0]
        labels[s0] = -nlab
        head = tail
        members[tail] = s0
        tail += 1
        while head < tail:
            i = members[head]
            head += 1
            is_flat = labels[i] > 0
            # low edges spread too: flats that share an outlet cell become one flat
            r = _row_of(i, nc, inv)
            c = i - r * nc
            inside = r > 0 and r < nr - 1 and c > 0 and c < nc - 1
            for k in range(8):
                if not inside:
                    rr = r + DROW[k]
                    cc = c + DCOL[k]
                    if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                        continue
                j = i + offs[k]
                if labels[j] != 0 or zf[j] != zh:
                    continue
                if rec[j] == NO_FLOW:
                    labels[j] = nlab
                    members[tail] = j
                    tail += 1
                elif is_flat and mark[j] & _LOW:
                    labels[j] = -nlab
                    members[tail] = j
                    tail += 1
    start[nlab] = tail
    mask = np.zeros(n, dtype=np.int32)
    queue = np.empty(tail + 1, dtype=np.int32)
    # each flat on its own (independent: disjoint cells), in parallel
    for L in prange(nlab):
        _finish_flat(L + 1, members, start[L], start[L + 1], queue, labels, mark, mask, rec,
                     dist, offs, nr, nc, inv)
    unresolved = 0
    for t in range(nflat):
        i = flats[t]
        if labels[i] == 0:
            rec[i] = -1
            unresolved += 1
    return mask, unresolved


@njit(cache=True, nogil=True)
def _finish_flat(lab, members, a, b, queue, labels, mark, mask, rec, dist, offs, nr, nc,
                 inv):
    # gradient away from higher terrain, breadth first from the high edges; held in mask
    tail = a
    for t in range(a, b):
        i = members[t]
        if labels[i] > 0 and mark[i] & _HIGH:
            mask[i] = 1
            queue[tail] = i
            tail += 1
    head = a
    height = 0
    while head < tail:
        i = queue[head]
        head += 1
        d = mask[i]
        if d > height:
            height = d
        r = _row_of(i, nc, inv)
        c = i - r * nc
        inside = r > 0 and r < nr - 1 and c > 0 and c < nc - 1
        for k in range(8):
            if not inside:
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
            j = i + offs[k]
            if labels[j] == lab and mask[j] == 0:
                mask[j] = d + 1
                queue[tail] = j
                tail += 1
    # gradient toward lower terrain, breadth first (level by level) from the low edges,
    # combined on arrival: towards lower counts twice, away from higher once
    tail = a
    for t in range(a, b):
        i = members[t]
        if labels[i] < 0:
            mask[i] = 2
            queue[tail] = i
            tail += 1
    head = a
    level_end = tail
    d = 1
    while head < tail:
        if head == level_end:
            d += 1
            level_end = tail
        i = queue[head]
        head += 1
        r = _row_of(i, nc, inv)
        c = i - r * nc
        inside = r > 0 and r < nr - 1 and c > 0 and c < nc - 1
        for k in range(8):
            if not inside:
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
            j = i + offs[k]
            if labels[j] == lab and mark[j] & _REACHED == 0:
                mark[j] |= _REACHED
                away = mask[j]
                if away > 0:
                    mask[j] = height - away + 2 * (d + 1)
                else:
                    mask[j] = 2 * (d + 1)
                queue[tail] = j
                tail += 1
    # each flat cell drains down the mask, within its own flat
    for t in range(a, tail):
        i = queue[t]
        if labels[i] < 0:
            continue
        r = _row_of(i, nc, inv)
        c = i - r * nc
        inside = r > 0 and r < nr - 1 and c > 0 and c < nc - 1
        mi = mask[i]
        best = 0.0
        bk = -1
        for k in range(8):
            if not inside:
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                    continue
            j = i + offs[k]
            lj = labels[j]
            if lj != lab and lj != -lab:
                continue
            drop = mi - mask[j]
            if drop > 0:
                s = drop / dist[r, k]
                if s > best:
                    best = s
                    bk = k
        if bk >= 0:
            rec[i] = i + offs[bk]
        else:
            rec[i] = -1


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
    """Inverse of :func:`receivers_to_azimuth`. Unknown codes give -9 and are counted;
    a direction off the grid or into a nodata cell becomes an exit (-1)."""
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
            if r < 0 or r >= nrows or c < 0 or c >= ncols or code[r * ncols + c] == -32768:
                rec[i] = -1  # pointing off the grid or into nodata: the water leaves here
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
