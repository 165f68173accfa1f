"""Compiled kernels of the tiled flow passes: local receivers of a tile, its stack, the
per-tile accumulation, labels and stream orders, and the passes over the border graph that
join the tiles (Barnes 2017).

Within a tile, ``rl`` is the local receiver of every cell (flat index ``r * w + c`` in the
tile): ``>= 0`` a cell of the tile, ``-1`` no outflow (the water leaves the grid, a sink, a
base-level cell), ``-2`` nodata, ``-3`` the water goes on into another tile, to the grid
cell ``tgt[i]`` (flat index in the whole grid). All kernels are serial and release the GIL,
so that tiles run side by side in threads.
"""

import numpy as np
from numba import njit

DROW = (-1, -1, 0, 1, 1, 1, 0, -1)
DCOL = (0, 1, 1, 1, 0, -1, -1, -1)

#: size of the order tables of a chain of channel cells: Strahler orders stay below this
#: (an order k needs at least 2**(k-1) channel heads)
ORDER_TABLE = 64


@njit(cache=True, nogil=True)
def local_receivers(d, r0, c0, nrows, ncols):
    """Local receivers of a tile of D8 azimuth codes ``d`` at grid rows/columns r0, c0.

    A direction off the grid or into a nodata cell of the tile is an exit (-1), as in
    :func:`basinkit.routing._d8.azimuth_to_receivers`. Returns (rl int32, tgt int64,
    number of unknown codes, which become exits)."""
    h, w = d.shape
    n = h * w
    rl = np.empty(n, dtype=np.int32)
    tgt = np.full(n, -1, dtype=np.int64)
    bad = 0
    for r in range(h):
        for c in range(w):
            i = r * w + c
            v = d[r, c]
            if v == -32768:
                rl[i] = -2
            elif v == -1:
                rl[i] = -1
            elif v >= 0 and v <= 315 and v % 45 == 0:
                k = v // 45
                rr = r + DROW[k]
                cc = c + DCOL[k]
                gr = r0 + rr
                gc = c0 + cc
                if gr < 0 or gr >= nrows or gc < 0 or gc >= ncols:
                    rl[i] = -1
                elif rr >= 0 and rr < h and cc >= 0 and cc < w:
                    rl[i] = -1 if d[rr, cc] == -32768 else rr * w + cc
                else:
                    rl[i] = -3
                    tgt[i] = np.int64(gr) * ncols + gc
            else:
                rl[i] = -1
                bad += 1
    return rl, tgt, bad


@njit(cache=True, nogil=True)
def tile_stack(rl):
    """Valid cells of a tile ordered so that every cell comes after its receiver
    (Braun & Willett 2013): walks downstream from cells without donors, emitted back to
    front. Cells on a receiver cycle are left out."""
    n = rl.shape[0]
    pending = np.zeros(n, dtype=np.uint8)
    nvalid = 0
    for i in range(n):
        r = rl[i]
        if r >= 0:
            pending[r] += 1
        if r != -2:
            nvalid += 1
    stack = np.empty(nvalid, dtype=np.int32)
    pos = nvalid
    for i in range(n):
        if pending[i] != 0 or rl[i] == -2:
            continue
        j = i
        while True:
            pos -= 1
            stack[pos] = j
            pending[j] = 255
            r = rl[j]
            if r < 0:
                break
            p = pending[r] - 1
            if p != 0:
                pending[r] = p
                break
            j = r
    return stack[pos:].copy()


@njit(cache=True, nogil=True)
def accumulate_tile(rl, stack, w, row_area, in_cells, in_count, in_area):
    """Cell count (int64) and upstream area (float64) of a tile's cells from its own
    cells plus the inflows ``in_count``/``in_area`` entering at ``in_cells`` (local)."""
    n = rl.shape[0]
    cnt = np.zeros(n, dtype=np.int64)
    area = np.zeros(n, dtype=np.float64)
    for t in range(in_cells.shape[0]):
        cnt[in_cells[t]] += in_count[t]
        area[in_cells[t]] += in_area[t]
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        cnt[i] += 1
        area[i] += row_area[i // w]
        r = rl[i]
        if r >= 0:
            cnt[r] += cnt[i]
            area[r] += area[i]
    return cnt, area


@njit(cache=True, nogil=True)
def border_cells(rl, h, w):
    """Local indices of the valid cells on the edge of a tile."""
    out = np.empty(2 * (h + w), dtype=np.int64)
    m = 0
    for r in range(h):
        for c in range(w):
            if r == 0 or r == h - 1 or c == 0 or c == w - 1:
                i = r * w + c
                if rl[i] != -2:
                    out[m] = i
                    m += 1
    return out[:m].copy()


@njit(cache=True, nogil=True)
def exit_reached(rl, stack):
    """For every cell, the cell of the tile where its water goes on into another tile
    (-1: it stops in the tile): one forward pass over the stack."""
    n = rl.shape[0]
    reach = np.full(n, -1, dtype=np.int64)
    for t in range(stack.shape[0]):
        i = stack[t]
        r = rl[i]
        if r == -3:
            reach[i] = i
        elif r >= 0:
            reach[i] = reach[r]
    return reach


@njit(cache=True, nogil=True)
def lookup(sorted_keys, keys):
    """Position of each key in the sorted array ``sorted_keys`` (-1 when absent)."""
    out = np.full(keys.shape[0], -1, dtype=np.int64)
    if sorted_keys.shape[0] == 0:
        return out
    pos = np.searchsorted(sorted_keys, keys)
    for t in range(keys.shape[0]):
        p = pos[t]
        if p < sorted_keys.shape[0] and sorted_keys[p] == keys[t]:
            out[t] = p
    return out


@njit(cache=True, nogil=True)
def exit_totals(down, local_count, local_area):
    """Totals leaving every tile exit: its own tile's part plus everything that reached it
    through exits upstream (``down[k]``: the exit that exit k's water reaches next, -1
    none). Exits in topological order (Kahn); exits on a cycle keep their own part."""
    m = down.shape[0]
    indeg = np.zeros(m, dtype=np.int64)
    for k in range(m):
        if down[k] >= 0:
            indeg[down[k]] += 1
    tc = local_count.copy()
    ta = local_area.copy()
    queue = np.empty(m, dtype=np.int64)
    qn = 0
    for k in range(m):
        if indeg[k] == 0:
            queue[qn] = k
            qn += 1
    q = 0
    while q < qn:
        k = queue[q]
        q += 1
        d = down[k]
        if d >= 0:
            tc[d] += tc[k]
            ta[d] += ta[k]
            indeg[d] -= 1
            if indeg[d] == 0:
                queue[qn] = d
                qn += 1
    return tc, ta


# ---------------------------------------------------------------- catchment labels


@njit(cache=True, nogil=True)
def label_tile(rl, stack, outlet_local, outlet_label):
    """Labels of the nearest outlet downstream within a tile (one forward pass). Cells
    whose water leaves the tile before meeting an outlet get ``-(e + 1)``, ``e`` the local
    cell where it leaves; 0: it stops in the tile without meeting one."""
    n = rl.shape[0]
    lab = np.zeros(n, dtype=np.int64)
    for t in range(outlet_local.shape[0]):
        lab[outlet_local[t]] = outlet_label[t]
    for t in range(stack.shape[0]):
        i = stack[t]
        if lab[i] == 0:
            r = rl[i]
            if r >= 0:
                lab[i] = lab[r]
            elif r == -3:
                lab[i] = -(i + 1)
    return lab


@njit(cache=True, nogil=True)
def resolve_labels(value, next_pos):
    """Final label of every border cell: ``value >= 0`` is final; ``value < 0`` means the
    label of border cell ``next_pos`` (-1: none, label 0). Chains followed once each."""
    m = value.shape[0]
    out = value.copy()
    path = np.empty(m, dtype=np.int64)
    for b in range(m):
        if out[b] >= 0:
            continue
        np_ = 0
        j = b
        lab = 0
        while True:
            if out[j] >= 0:
                lab = out[j]
                break
            if out[j] == -2:  # on the current path: a cycle (damaged directions)
                lab = 0
                break
            path[np_] = j
            np_ += 1
            out[j] = -2
            j = next_pos[j]
            if j < 0:
                lab = 0
                break
        for t in range(np_):
            out[path[t]] = lab
    return out


@njit(cache=True, nogil=True)
def finish_labels(lab, tgt_label_of_cell, lut):
    """Replace the markers ``-(e + 1)`` of :func:`label_tile` by the label found beyond
    the tile edge (``tgt_label_of_cell[e]``) and renumber through ``lut``; int32."""
    n = lab.shape[0]
    out = np.zeros(n, dtype=np.int32)
    for i in range(n):
        v = lab[i]
        if v < 0:
            v = tgt_label_of_cell[-v - 1]
        out[i] = lut[v]
    return out


# ---------------------------------------------------------------- stream orders


@njit(cache=True, nogil=True)
def _order_step(o, top, ntop, nloc):
    """Strahler order of a cell whose donors are one of order ``o`` (0: none) and the
    others summarised by their highest order ``top``, its count ``ntop`` and their
    number ``nloc``."""
    if o > 0:
        nloc += 1
        if o > top:
            top = o
            ntop = 1
        elif o == top:
            ntop += 1
    if nloc == 0:
        return 1
    return top + 1 if ntop >= 2 else top


@njit(cache=True, nogil=True)
def order_graph(rl, tgt, stack, mask, h, w, r0, c0, ncols):
    """The channel graph of a tile, reduced to the cells other tiles can change.

    Channel cells on the tile edge may receive water from other tiles; every cell
    downstream of one inside the tile is *affected*. Nodes: the affected channel cells on
    the edge or with two or more affected donors. Between a node and the next one
    downstream lies a chain of cells with one affected donor each; what the chain does to
    the Strahler order is a table (order at the node → order of the chain's last cell),
    to the Shreve magnitude an added constant. Unaffected cells get their final orders
    here.

    Returns (node cells (local), per node: highest order, its count and number of
    unaffected channel donors and their summed magnitude; edges: source node index, target
    as a grid cell (a node of this tile or the edge cell of another tile), order table
    (ORDER_TABLE uint8 per edge), added magnitude; too_high flag).
    """
    n = rl.shape[0]
    edge = np.zeros(n, dtype=np.bool_)
    aff = np.zeros(n, dtype=np.bool_)
    naff = np.zeros(n, dtype=np.int32)
    top = np.zeros(n, dtype=np.int64)
    ntop = np.zeros(n, dtype=np.int64)
    nloc = np.zeros(n, dtype=np.int64)
    mag = np.zeros(n, dtype=np.int64)  # summed magnitude of unaffected donors
    order = np.zeros(n, dtype=np.int64)
    shreve = np.zeros(n, dtype=np.int64)
    too_high = False
    for r in range(h):
        for c in range(w):
            if r == 0 or r == h - 1 or c == 0 or c == w - 1:
                edge[r * w + c] = True
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        if not mask[i]:
            continue
        if edge[i]:
            aff[i] = True
        if not aff[i]:
            order[i] = _order_step(0, top[i], ntop[i], nloc[i])
            shreve[i] = 1 if nloc[i] == 0 else mag[i]
            if order[i] >= ORDER_TABLE - 2:
                too_high = True
        r = rl[i]
        if r >= 0:
            if aff[i]:
                aff[r] = True
                naff[r] += 1
            else:
                nloc[r] += 1
                mag[r] += shreve[i]
                o = order[i]
                if o > top[r]:
                    top[r] = o
                    ntop[r] = 1
                elif o == top[r]:
                    ntop[r] += 1
    node = np.zeros(n, dtype=np.bool_)
    nn = 0
    for i in range(n):
        if mask[i] and aff[i] and (edge[i] or naff[i] >= 2):
            node[i] = True
            nn += 1
    nodes = np.empty(nn, dtype=np.int64)
    k = 0
    for i in range(n):
        if node[i]:
            nodes[k] = i
            k += 1
    e_src = np.empty(nn, dtype=np.int64)
    e_dst = np.empty(nn, dtype=np.int64)
    e_tab = np.empty((nn, ORDER_TABLE), dtype=np.uint8)
    e_mag = np.zeros(nn, dtype=np.int64)
    ne = 0
    tab = np.empty(ORDER_TABLE, dtype=np.int64)
    for k in range(nn):
        v = nodes[k]
        for o in range(ORDER_TABLE):
            tab[o] = o
        add = 0
        cur = v
        dst = -1
        while True:
            r = rl[cur]
            if r == -3:
                dst = tgt[cur]
                break
            if r < 0:
                break
            if node[r]:
                dst = (r0 + r // w) * np.int64(ncols) + c0 + r % w
                break
            # a chain cell: one affected donor (the previous cell), the rest unaffected
            for o in range(ORDER_TABLE):
                tab[o] = min(_order_step(tab[o], top[r], ntop[r], nloc[r]), ORDER_TABLE - 1)
            add += mag[r]
            cur = r
        if dst >= 0:
            e_src[ne] = k
            e_dst[ne] = dst
            for o in range(ORDER_TABLE):
                e_tab[ne, o] = tab[o]
            e_mag[ne] = add
            ne += 1
    ntop_n = np.empty(nn, dtype=np.int64)
    top_n = np.empty(nn, dtype=np.int64)
    nloc_n = np.empty(nn, dtype=np.int64)
    mag_n = np.empty(nn, dtype=np.int64)
    for k in range(nn):
        v = nodes[k]
        top_n[k] = top[v]
        ntop_n[k] = ntop[v]
        nloc_n[k] = nloc[v]
        mag_n[k] = mag[v]
    return (nodes, top_n, ntop_n, nloc_n, mag_n, e_src[:ne].copy(), e_dst[:ne].copy(),
            e_tab[:ne].copy(), e_mag[:ne].copy(), too_high)


@njit(cache=True, nogil=True)
def solve_orders(top, ntop, nloc, mag, e_src, e_dst, e_tab, e_mag):
    """Strahler order and Shreve magnitude of every node of the joined graph: nodes in
    topological order (Kahn), each combining its unaffected donors with what arrives
    through its incoming edges (``e_dst`` a node index, -1: none)."""
    m = top.shape[0]
    ne = e_src.shape[0]
    indeg = np.zeros(m, dtype=np.int64)
    out_start = np.zeros(m + 1, dtype=np.int64)
    for e in range(ne):
        if e_dst[e] >= 0:
            indeg[e_dst[e]] += 1
            out_start[e_src[e] + 1] += 1
    for k in range(m):
        out_start[k + 1] += out_start[k]
    fill = out_start[:m].copy()
    out_edges = np.empty(out_start[m], dtype=np.int64)
    for e in range(ne):
        if e_dst[e] >= 0:
            out_edges[fill[e_src[e]]] = e
            fill[e_src[e]] += 1
    t = top.copy()
    nt = ntop.copy()
    nl = nloc.copy()
    mg = mag.copy()
    order = np.zeros(m, dtype=np.int64)
    shreve = np.zeros(m, dtype=np.int64)
    queue = np.empty(m, dtype=np.int64)
    qn = 0
    for k in range(m):
        if indeg[k] == 0:
            queue[qn] = k
            qn += 1
    q = 0
    while q < qn:
        k = queue[q]
        q += 1
        order[k] = _order_step(0, t[k], nt[k], nl[k])
        shreve[k] = 1 if nl[k] == 0 else mg[k]
        for s in range(out_start[k], out_start[k + 1]):
            e = out_edges[s]
            d = e_dst[e]
            o = np.int64(e_tab[e, min(order[k], ORDER_TABLE - 1)])
            nl[d] += 1
            mg[d] += shreve[k] + e_mag[e]
            if o > t[d]:
                t[d] = o
                nt[d] = 1
            elif o == t[d]:
                nt[d] += 1
            indeg[d] -= 1
            if indeg[d] == 0:
                queue[qn] = d
                qn += 1
    return order, shreve


@njit(cache=True, nogil=True)
def orders_tile(rl, stack, mask, node_cells, node_order, node_shreve):
    """Strahler order (int16) and Shreve magnitude (int64) of every channel cell of a tile,
    the nodes' values given (they already hold what comes from other tiles)."""
    n = rl.shape[0]
    order = np.zeros(n, dtype=np.int16)
    shreve = np.zeros(n, dtype=np.int64)
    fixed = np.zeros(n, dtype=np.bool_)
    top = np.zeros(n, dtype=np.int64)
    ntop = np.zeros(n, dtype=np.int64)
    nloc = np.zeros(n, dtype=np.int64)
    for k in range(node_cells.shape[0]):
        i = node_cells[k]
        fixed[i] = True
        order[i] = node_order[k]
        shreve[i] = node_shreve[k]
    for t in range(stack.shape[0] - 1, -1, -1):
        i = stack[t]
        if not mask[i]:
            continue
        if not fixed[i]:
            order[i] = _order_step(0, top[i], ntop[i], nloc[i])
            if nloc[i] == 0:
                shreve[i] = 1
        r = rl[i]
        if r >= 0:
            nloc[r] += 1
            if not fixed[r]:
                shreve[r] += shreve[i]
            o = order[i]
            if o > top[r]:
                top[r] = o
                ntop[r] = 1
            elif o == top[r]:
                ntop[r] += 1
    return order, shreve
