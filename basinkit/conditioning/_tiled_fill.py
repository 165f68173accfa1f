"""Exact depression filling by tiles, in parallel.

After Barnes (2016), "Parallel Priority-Flood depression filling for trillion cell digital
elevation models", Computers & Geosciences 96:56-68, in three stages:

1. Each tile is flooded on its own (Priority-Flood with the slope tracing of
   :func:`basinkit.conditioning._fill.fill_exact`), as if it were a whole grid: its exit cells and every
   cell on its border with another tile are seeds. The exits share one label ("outside");
   each border cell gets a label of its own, and every cell the flood reaches takes the
   label of the seed it came from. Where two labels meet, the lowest level at which water
   can pass between them (the higher of the two locally filled cells) is kept as an edge.
2. Adjacent border cells of neighbouring tiles add edges at the higher of their two
   elevations. On this graph of labels a Priority-Flood from "outside" gives each label the
   level below which its water cannot leave the grid.
3. Every cell is raised to the level of its label where that is higher than its locally
   filled elevation.

For any cell x with local level L(x) and label level W, max(L(x), W) is an upper bound of
the filled elevation (the flood tree leads from x to its seed below L(x), and the graph path
from there to an exit stays below W) and a lower bound (every path from x to an exit visits
a sequence of labels whose edges are no higher than the path), so the result equals the
filled surface of the whole grid exactly. Tiles are independent, so they run in threads
(the kernels release the GIL); a tile's working set stays in the processor caches, which
keeps the time per cell nearly constant as grids grow.
"""

from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np
from numba import njit

from ._fill import DCOL, DROW, _key, _pop, _push, fill_exact

#: side of a tile, in cells
TILE = 512
#: entries of a tile's first table of label edges (grown fourfold when more are needed)
FIRST_EDGE_TABLE = 1 << 15
_OUTSIDE = 1  # tile-local label of the exits
_NODATA = np.uint16(0xFFFF)  # tile-local mark of nodata cells


@njit(cache=True, nogil=True, inline='always')
def _note(hk, hv, key, w):
    """Keep the lowest ``w`` per ``key`` in an open-addressing table; returns 1 if the key
    is new."""
    mask = hk.shape[0] - 1
    h = (np.uint64(key) * np.uint64(11400714819323198485)) >> np.uint64(40)
    j = np.int64(h) & mask
    while True:
        k = hk[j]
        if k == key:
            if w < hv[j]:
                hv[j] = w
            return 0
        if k == 0:
            hk[j] = key
            hv[j] = w
            return 1
        j = (j + 1) & mask


@njit(cache=True, nogil=True, inline='always')
def _meet(hk, hv, la, lb, w):
    """Labels ``la`` and ``lb`` meet at level ``w``: note it under the ordered pair."""
    key = (np.uint32(min(la, lb)) << np.uint32(16)) | np.uint32(max(la, lb))
    return _note(hk, hv, key, w)


@njit(cache=True, nogil=True)
def flood_tile(z, valid, seeds, labels, r0, r1, c0, c1, cap):
    """Stage 1 for the tile rows r0..r1-1, columns c0..c1-1: fill it locally in place, write
    the tile-local labels (0 for nodata) and return the edges between labels as arrays
    (label a, label b, level), the number of labels used and True. The edges are kept in a
    table of ``cap`` entries (a power of two); if more than half of it would be used, the
    tile is left unchanged and the last value is False (call again with a larger table)."""
    nr, nc = z.shape
    th = r1 - r0
    tw = c1 - c0
    m = th * tw
    zt = np.empty(m, dtype=np.float32)
    lab = np.zeros(m, dtype=np.uint16)  # 0: not reached yet; _NODATA: never entered
    heap = np.empty(m + 1, dtype=np.uint64)
    pit = np.empty(m + 1, dtype=np.int32)
    trace = np.empty(m + 1, dtype=np.int32)
    bits = zt.view(np.uint32)
    hs = 0
    nlab = _OUTSIDE
    for rr in range(th):
        border_row = (rr == 0 and r0 > 0) or (rr == th - 1 and r1 < nr)
        for cc in range(tw):
            i = rr * tw + cc
            zt[i] = z[r0 + rr, c0 + cc]
            if not valid[r0 + rr, c0 + cc]:
                lab[i] = _NODATA
                continue
            if seeds[r0 + rr, c0 + cc]:
                lab[i] = _OUTSIDE
            elif border_row or (cc == 0 and c0 > 0) or (cc == tw - 1 and c1 < nc):
                nlab += 1
                lab[i] = nlab
            else:
                continue
            hs = _push(heap, hs, _key(bits, i))
    offs = np.empty(8, dtype=np.int64)
    for k in range(8):
        offs[k] = DROW[k] * tw + DCOL[k]
    hk = np.zeros(cap, dtype=np.uint32)
    hv = np.empty(cap, dtype=np.float32)
    ea = np.empty(0, dtype=np.int64)
    ew = np.empty(0, dtype=np.float32)
    nedges = 0
    ph = 0
    pt = 0
    while hs > 0 or pt > ph:
        if pt > ph:
            cell = np.int64(pit[ph])
            ph += 1
            if ph == pt:
                ph = 0
                pt = 0
        else:
            hs, cell = _pop(heap, hs)
        r = cell // tw
        c = cell - r * tw
        zc = zt[cell]
        lc = lab[cell]
        interior = r > 0 and r < th - 1 and c > 0 and c < tw - 1
        for k in range(8):
            if not interior:
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= th or cc < 0 or cc >= tw:
                    continue
            nb = cell + offs[k]
            ln = lab[nb]
            if ln != 0:
                if ln != lc and ln != _NODATA:
                    nedges += _meet(hk, hv, lc, ln, max(zc, zt[nb]))
                    if 2 * nedges > cap:
                        return ea, ea, ew, nlab, False
                continue
            lab[nb] = lc
            if zt[nb] <= zc:
                zt[nb] = zc
                pit[pt] = nb
                pt += 1
                continue
            # nb keeps its own elevation: trace uphill from it (as in fill_exact)
            tq = 0
            tt = 1
            trace[0] = nb
            while tq < tt:
                t = np.int64(trace[tq])
                tq += 1
                tr = t // tw
                tc = t - tr * tw
                zz = zt[t]
                tin = tr > 0 and tr < th - 1 and tc > 0 and tc < tw - 1
                spill = False
                for q in range(8):
                    if not tin:
                        rr = tr + DROW[q]
                        cc = tc + DCOL[q]
                        if rr < 0 or rr >= th or cc < 0 or cc >= tw:
                            continue
                    u = t + offs[q]
                    lu = lab[u]
                    if lu != 0:
                        if lu != lc and lu != _NODATA:
                            nedges += _meet(hk, hv, lc, lu, max(zz, zt[u]))
                            if 2 * nedges > cap:
                                return ea, ea, ew, nlab, False
                        continue
                    if zt[u] > zz:
                        lab[u] = lc
                        trace[tt] = u
                        tt += 1
                    else:
                        spill = True
                if spill:
                    hs = _push(heap, hs, _key(bits, t))
    for rr in range(th):
        for cc in range(tw):
            i = rr * tw + cc
            z[r0 + rr, c0 + cc] = zt[i]
            labels[r0 + rr, c0 + cc] = lab[i] if lab[i] != _NODATA else 0
    ea = np.empty(nedges, dtype=np.int64)
    eb = np.empty(nedges, dtype=np.int64)
    ew = np.empty(nedges, dtype=np.float32)
    e = 0
    for j in range(hk.shape[0]):
        if hk[j] != 0:
            ea[e] = np.int64(hk[j] >> np.uint32(16))
            eb[e] = np.int64(hk[j] & np.uint32(0xFFFF))
            ew[e] = hv[j]
            e += 1
    return ea, eb, ew, nlab, True


@njit(cache=True, nogil=True, inline='always')
def _gid(labels, base, r, c, tile, ntc):
    lv = np.int64(labels[r, c])
    if lv == _OUTSIDE:
        return 0
    return base[(r // tile) * ntc + c // tile] + lv - 1


@njit(cache=True, nogil=True)
def solve_levels(z, valid, labels, tile, ntc, base, nnodes, ga, gb, gw):
    """Stage 2: add the edges across tile borders, then flood the label graph from the
    outside (node 0). ``ga, gb, gw`` hold the edges found inside the tiles, already as graph
    nodes. Returns the level of every node (float32; -inf for the outside)."""
    nr, nc = z.shape
    # edges across tile borders: each border cell with its neighbours in the next tile
    cap = 3 * nr * ((nc - 1) // tile) + 3 * nc * ((nr - 1) // tile)
    xa = np.empty(cap, dtype=np.int64)
    xb = np.empty(cap, dtype=np.int64)
    xw = np.empty(cap, dtype=np.float32)
    nx = 0
    for c in range(tile, nc, tile):  # vertical borders between columns c-1 and c
        for r in range(nr):
            if not valid[r, c - 1]:
                continue
            a = _gid(labels, base, r, c - 1, tile, ntc)
            for dr in range(-1, 2):
                rr = r + dr
                if rr < 0 or rr >= nr or not valid[rr, c]:
                    continue
                xa[nx] = a
                xb[nx] = _gid(labels, base, rr, c, tile, ntc)
                xw[nx] = max(z[r, c - 1], z[rr, c])
                nx += 1
    for r in range(tile, nr, tile):  # horizontal borders between rows r-1 and r
        for c in range(nc):
            if not valid[r - 1, c]:
                continue
            a = _gid(labels, base, r - 1, c, tile, ntc)
            for dc in range(-1, 2):
                cc = c + dc
                if cc < 0 or cc >= nc or not valid[r, cc]:
                    continue
                xa[nx] = a
                xb[nx] = _gid(labels, base, r, cc, tile, ntc)
                xw[nx] = max(z[r - 1, c], z[r, cc])
                nx += 1
    return flood_graph(nnodes, np.concatenate((ga, xa[:nx])), np.concatenate((gb, xb[:nx])),
                       np.concatenate((gw, xw[:nx])))


@njit(cache=True, nogil=True)
def flood_graph(nnodes, ga, gb, gw):
    """Priority-Flood on the graph of labels: node 0 is the outside, edge e joins ``ga[e]``
    and ``gb[e]`` at level ``gw[e]``. Returns the level of every node (float32; -inf for the
    outside): the lowest level at which water from it can reach the outside (minimax path)."""
    # adjacency lists (both directions)
    deg = np.zeros(nnodes + 1, dtype=np.int64)
    for e in range(ga.shape[0]):
        deg[ga[e] + 1] += 1
        deg[gb[e] + 1] += 1
    for v in range(nnodes):
        deg[v + 1] += deg[v]
    fill = deg[:-1].copy()
    nbr = np.empty(deg[nnodes], dtype=np.int64)
    wt = np.empty(deg[nnodes], dtype=np.float32)
    for e in range(ga.shape[0]):
        a = ga[e]
        b = gb[e]
        w = gw[e]
        nbr[fill[a]] = b
        wt[fill[a]] = w
        fill[a] += 1
        nbr[fill[b]] = a
        wt[fill[b]] = w
        fill[b] += 1
    # Priority-Flood on the graph (minimax path from the outside)
    level = np.full(nnodes, np.inf, dtype=np.float32)
    done = np.zeros(nnodes, dtype=np.bool_)
    bits = level.view(np.uint32)
    heap = np.empty(deg[nnodes] + 2, dtype=np.uint64)
    level[0] = -np.inf
    hs = _push(heap, 0, _key(bits, 0))
    while hs > 0:
        hs, v = _pop(heap, hs)
        if done[v]:
            continue
        done[v] = True
        lv = level[v]
        for j in range(deg[v], deg[v + 1]):
            u = nbr[j]
            if done[u]:
                continue
            w = max(lv, wt[j])
            if w < level[u]:
                level[u] = w
                hs = _push(heap, hs, _key(bits, u))
    return level


@njit(cache=True, nogil=True)
def raise_tile(z, labels, r0, r1, c0, c1, level, base_t):
    """Stage 3 for one tile: raise each cell to the level of its label."""
    for r in range(r0, r1):
        for c in range(c0, c1):
            lv = np.int64(labels[r, c])
            if lv > _OUTSIDE:
                w = level[base_t + lv - 1]
                if w > z[r, c]:
                    z[r, c] = w


def _workers():
    """Threads for the tiles: numba's thread count (NUMBA_NUM_THREADS, by default the
    number of processors), as for the parallel kernels."""
    return max(1, int(numba.config.NUMBA_NUM_THREADS))


def _each(fn, items, workers):
    """``[fn(x) for x in items]``, in ``workers`` threads when there is more than one."""
    items = list(items)
    if workers > 1 and len(items) > 1:
        with ThreadPoolExecutor(workers) as pool:
            return list(pool.map(fn, items))
    return [fn(x) for x in items]


def fill_exact_any(z, valid, seeds):
    """Exact depression filling in place: by tiles in threads for grids larger than one
    tile, else :func:`basinkit.conditioning._fill.fill_exact` directly (same result)."""
    if z.shape[0] > TILE or z.shape[1] > TILE:
        fill_exact_tiled(z, valid, seeds)
    else:
        fill_exact(z, valid, seeds)


def fill_exact_tiled(z, valid, seeds, tile=TILE, workers=None):
    """Exact depression filling of ``z`` (float32, C order) in place, by tiles of
    ``tile`` × ``tile`` cells run in ``workers`` threads (default: NUMBA_NUM_THREADS,
    normally the number of processors). The result is identical to
    :func:`basinkit.conditioning._fill.fill_exact`."""
    nr, nc = z.shape
    if not 2 <= tile <= 16000:  # border labels must fit below _NODATA
        raise ValueError("tile must be between 2 and 16000 cells")
    ntr = -(-nr // tile)
    ntc = -(-nc // tile)
    boxes = [(i * tile, min(nr, (i + 1) * tile), j * tile, min(nc, (j + 1) * tile))
             for i in range(ntr) for j in range(ntc)]
    labels = np.empty((nr, nc), dtype=np.uint16)
    workers = workers or _workers()

    def stage1(box):
        cap = FIRST_EDGE_TABLE
        while True:
            ea, eb, ew, nlab, ok = flood_tile(z, valid, seeds, labels, *box, cap)
            if ok:
                return ea, eb, ew, nlab
            cap *= 4

    parts = _each(stage1, boxes, workers)
    # graph node of tile t's label l (l >= 2): base[t] + l - 1; node 0 is the outside
    base = np.zeros(len(boxes), dtype=np.int64)
    total = 1
    for t, (*_, nlab) in enumerate(parts):
        base[t] = total - 1
        total += nlab - 1
    # in an edge (a, b) a < b, so only a can be the outside
    ga = np.concatenate([np.where(p[0] == _OUTSIDE, 0, p[0] + base[t] - 1)
                         for t, p in enumerate(parts)])
    gb = np.concatenate([p[1] + base[t] - 1 for t, p in enumerate(parts)])
    gw = np.concatenate([p[2] for p in parts])
    level = solve_levels(z, valid, labels, tile, ntc, base, total, ga, gb, gw)

    def stage3(t):
        raise_tile(z, labels, *boxes[t], level, base[t])

    _each(stage3, range(len(boxes)), workers)
