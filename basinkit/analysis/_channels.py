"""Compiled kernels for channel networks and basin morphometry.

All kernels work on flat arrays: ``rec`` is the D8 receiver (flat index, -1 leaves the grid,
-2 nodata), ``stack`` orders valid cells so that each comes after its receiver
(Braun & Willett 2013). Backward passes over the stack go upstream to downstream.
"""

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def extend_downstream(rec, stack, mask):
    """Make the channel mask continuous: every cell downstream of a channel cell becomes a
    channel cell too (in place; one backward pass)."""
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        if mask[i]:
            r = rec[i]
            if r >= 0:
                mask[r] = True


@njit(cache=True, nogil=True)
def stream_orders(rec, stack, mask):
    """Strahler order (Strahler 1957) and Shreve magnitude (Shreve 1966) of every channel
    cell in one backward pass over the stack.

    A channel cell without channel donors has order 1 and magnitude 1. Otherwise its order
    is the highest donor order, plus one when two or more donors share that highest order;
    its magnitude is the sum of the donors' magnitudes.

    Returns (strahler int16, shreve int32, channel donor count int32), all flat.
    """
    n = rec.shape[0]
    strahler = np.zeros(n, dtype=np.int16)
    shreve = np.zeros(n, dtype=np.int32)
    ndon = np.zeros(n, dtype=np.int32)
    top = np.zeros(n, dtype=np.int16)
    ntop = np.zeros(n, dtype=np.int32)
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        if not mask[i]:
            continue
        if ndon[i] == 0:
            strahler[i] = 1
            shreve[i] = 1
        elif ntop[i] >= 2:
            strahler[i] = top[i] + 1
        else:
            strahler[i] = top[i]
        r = rec[i]
        if r >= 0 and mask[r]:
            ndon[r] += 1
            shreve[r] += shreve[i]
            o = strahler[i]
            if o > top[r]:
                top[r] = o
                ntop[r] = 1
            elif o == top[r]:
                ntop[r] += 1
    return strahler, shreve, ndon


@njit(cache=True, nogil=True)
def build_network(rec, stack, area, min_area, crit, use_crit, step, split):
    """Channel cells, Strahler order, Shreve magnitude and segments in two passes.

    Backward pass (upstream to downstream): a cell is a channel cell when its upstream
    ``area`` reaches ``min_area`` (and ``crit`` holds, when ``use_crit``) or when a channel
    cell drains into it, so the network is continuous down to the exits. Orders as in
    :func:`stream_orders`.

    Forward pass (downstream to upstream): a channel cell ends a segment (is its *bottom*)
    when its water leaves the grid, when its receiver is a junction (two or more channel
    donors) or when it is a ``split`` cell (an outlet). Segment ids run 1, 2, ... in stack
    order, so a segment's downstream neighbour always has a smaller id. Segment length is
    the sum of ``step`` (ground distance to the receiver) of its cells whose receiver is a
    channel cell (every one but a bottom cell at the grid edge).

    Returns (mask, strahler int16, shreve int32, channel donors int8, segment id int32,
    bottom, top, length, cell count (per segment), junction cells).
    """
    n = rec.shape[0]
    mask = np.zeros(n, dtype=np.bool_)
    strahler = np.zeros(n, dtype=np.int16)
    shreve = np.zeros(n, dtype=np.int32)
    ndon = np.zeros(n, dtype=np.int8)
    top_o = np.zeros(n, dtype=np.int16)
    ntop = np.zeros(n, dtype=np.int8)
    nch = 0
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        if not mask[i]:
            if area[i] >= min_area and (not use_crit or crit[i]):
                mask[i] = True
            else:
                continue
        nch += 1
        if ndon[i] == 0:
            strahler[i] = 1
            shreve[i] = 1
        elif ntop[i] >= 2:
            strahler[i] = top_o[i] + 1
        else:
            strahler[i] = top_o[i]
        r = rec[i]
        if r >= 0:
            mask[r] = True
            ndon[r] += 1
            shreve[r] += shreve[i]
            o = strahler[i]
            if o > top_o[r]:
                top_o[r] = o
                ntop[r] = 1
            elif o == top_o[r]:
                ntop[r] += 1
    seg = np.zeros(n, dtype=np.int32)
    m = max(nch, 1)
    bottom = np.empty(m, dtype=np.int64)
    top = np.empty(m, dtype=np.int64)
    length = np.zeros(m, dtype=np.float64)
    count = np.zeros(m, dtype=np.int32)
    junctions = np.empty(m, dtype=np.int64)
    ns = 0
    nj = 0
    for t in range(stack.shape[0]):
        i = stack[t]
        if not mask[i]:
            continue
        r = rec[i]
        if r < 0 or ndon[r] >= 2 or split[i]:
            bottom[ns] = i
            ns += 1
            seg[i] = ns
        else:
            seg[i] = seg[r]
        s = seg[i] - 1
        top[s] = i  # the last cell written is the most upstream one
        count[s] += 1
        if r >= 0:
            length[s] += step[i]
        if ndon[i] >= 2:
            junctions[nj] = i
            nj += 1
    return (mask, strahler, shreve, ndon, seg, bottom[:ns].copy(), top[:ns].copy(),
            length[:ns].copy(), count[:ns].copy(), junctions[:nj].copy())


@njit(cache=True, nogil=True)
def segment_paths(rec, mask, top, bottom):
    """Cells of every segment from top to bottom, followed by the receiver of the bottom cell
    when it is a channel cell (so consecutive segments share their junction point).

    Returns (cells int64, offsets int64 (nseg + 1)).
    """
    ns = top.shape[0]
    offsets = np.zeros(ns + 1, dtype=np.int64)
    for s in range(ns):
        i = top[s]
        k = 1
        while i != bottom[s]:
            i = rec[i]
            k += 1
        r = rec[bottom[s]]
        if r >= 0 and mask[r]:
            k += 1
        offsets[s + 1] = offsets[s] + k
    cells = np.empty(offsets[ns], dtype=np.int64)
    for s in range(ns):
        p = offsets[s]
        i = top[s]
        cells[p] = i
        p += 1
        while i != bottom[s]:
            i = rec[i]
            cells[p] = i
            p += 1
        r = rec[bottom[s]]
        if r >= 0 and mask[r]:
            cells[p] = r
    return cells, offsets


@njit(cache=True, nogil=True)
def strahler_streams(order, downstream):
    """Group segments into Strahler streams: chains of segments of one order.

    ``order`` and ``downstream`` (downstream segment id, 0 none) are indexed by segment id - 1
    and ordered so that a downstream segment comes first. Returns the stream id (1, 2, ...)
    of every segment.
    """
    ns = order.shape[0]
    stream = np.zeros(ns, dtype=np.int32)
    nst = 0
    for s in range(ns):
        d = downstream[s]
        if d > 0 and d - 1 < s and order[d - 1] == order[s]:
            stream[s] = stream[d - 1]
        else:
            nst += 1
            stream[s] = nst
    return stream


@njit(cache=True, nogil=True)
def label_bounding_boxes(labels, nlab):
    """Row/column bounding box of every label 1..nlab-1 of a 2-D int grid in one pass.

    Returns (rmin, rmax, cmin, cmax) int64 arrays of length nlab (rmin > rmax: absent).
    """
    nr, nc = labels.shape
    rmin = np.full(nlab, nr, dtype=np.int64)
    rmax = np.full(nlab, -1, dtype=np.int64)
    cmin = np.full(nlab, nc, dtype=np.int64)
    cmax = np.full(nlab, -1, dtype=np.int64)
    for r in range(nr):
        for c in range(nc):
            v = labels[r, c]
            if v > 0 and v < nlab:
                if r < rmin[v]:
                    rmin[v] = r
                if r > rmax[v]:
                    rmax[v] = r
                if c < cmin[v]:
                    cmin[v] = c
                if c > cmax[v]:
                    cmax[v] = c
    return rmin, rmax, cmin, cmax


@njit(cache=True, nogil=True)
def horn_slope_aspect(z, dx, dy_up, dy_down):
    """Slope (m per m) and aspect (degrees clockwise from north, NaN on flats) by the
    third-order finite difference of Horn (1981) with true per-row cell sizes.

    ``z`` is a 2-D window (NaN = nodata); ``dx[r]`` is the east-west spacing of row r,
    ``dy_up[r]`` / ``dy_down[r]`` the distance to the row above / below (all in metres).
    Missing neighbours (outside the window or nodata) take the centre cell's value.
    """
    nr, nc = z.shape
    slope = np.full((nr, nc), np.nan)
    aspect = np.full((nr, nc), np.nan)
    w = np.empty((3, 3))
    for r in range(nr):
        for c in range(nc):
            zc = z[r, c]
            if not np.isfinite(zc):
                continue
            for a in range(3):
                for b in range(3):
                    rr = r + a - 1
                    cc = c + b - 1
                    v = zc
                    if rr >= 0 and rr < nr and cc >= 0 and cc < nc:
                        v = z[rr, cc]
                        if not np.isfinite(v):
                            v = zc
                    w[a, b] = v
            # east gradient: per-row spacing of the three rows
            rt = max(r - 1, 0)
            rb = min(r + 1, nr - 1)
            gx = ((w[0, 2] - w[0, 0]) / (2.0 * dx[rt]) + 2.0 * (w[1, 2] - w[1, 0])
                  / (2.0 * dx[r]) + (w[2, 2] - w[2, 0]) / (2.0 * dx[rb])) / 4.0
            # north gradient (rows run north to south)
            gy = ((w[0, 0] + 2.0 * w[0, 1] + w[0, 2]) - (w[2, 0] + 2.0 * w[2, 1] + w[2, 2])) \
                / (4.0 * (dy_up[r] + dy_down[r]))
            s = np.sqrt(gx * gx + gy * gy)
            slope[r, c] = s
            if s > 0:
                az = np.degrees(np.arctan2(-gx, -gy))
                if az < 0:
                    az += 360.0
                aspect[r, c] = az
    return slope, aspect
