"""Compiled kernel: least-cost breaching of depressions (Lindsay 2016).

Neighbour order: k = 0..7 is N, NE, E, SE, S, SW, W, NW (see ``_fill.DROW``/``DCOL``).
"""

import numpy as np
from numba import njit

from ._fill import DCOL, DROW


@njit(cache=True, nogil=True)
def _less(c1, l1, i1, c2, l2, i2):
    """Strict lexicographic order on (cost, length, cell index)."""
    if c1 != c2:
        return c1 < c2
    if l1 != l2:
        return l1 < l2
    return i1 < i2


@njit(cache=True, nogil=True)
def _push(hc, hl, hv, n, cost, length, val):
    i = n
    while i > 0:
        p = (i - 1) >> 1
        if not _less(cost, length, val, hc[p], hl[p], hv[p]):
            break
        hc[i] = hc[p]
        hl[i] = hl[p]
        hv[i] = hv[p]
        i = p
    hc[i] = cost
    hl[i] = length
    hv[i] = val
    return n + 1


@njit(cache=True, nogil=True)
def _pop(hc, hl, hv, n):
    """Remove the smallest entry (caller reads hc[0], hl[0], hv[0] first); new size."""
    n -= 1
    if n == 0:
        return 0
    cost = hc[n]
    length = hl[n]
    val = hv[n]
    i = 0
    while True:
        c = 2 * i + 1
        if c >= n:
            break
        if c + 1 < n and _less(hc[c + 1], hl[c + 1], hv[c + 1], hc[c], hl[c], hv[c]):
            c += 1
        if not _less(hc[c], hl[c], hv[c], cost, length, val):
            break
        hc[i] = hc[c]
        hl[i] = hl[c]
        hv[i] = hv[c]
        i = c
    hc[i] = cost
    hl[i] = length
    hv[i] = val
    return n


@njit(cache=True, nogil=True)
def find_pits(z, valid, exits):
    """Representative cell of every pit: a connected set of equal-elevation cells (usually
    one cell) none of which is an exit or has a strictly lower valid neighbour.

    Returns the flat indices of the representatives (the first cell of each set in row-major
    order), in row-major order. O(N): every cell is visited at most once by the flood.
    """
    nr, nc = z.shape
    n = nr * nc
    seen = np.zeros(n, dtype=np.bool_)
    queue = np.empty(n, dtype=np.int32)
    reps = np.empty(n, dtype=np.int32)
    nrep = 0
    for r0 in range(nr):
        for c0 in range(nc):
            i0 = r0 * nc + c0
            if seen[i0] or not valid[r0, c0] or exits[r0, c0]:
                continue
            zc = z[r0, c0]
            lower = False
            for k in range(8):
                rr = r0 + DROW[k]
                cc = c0 + DCOL[k]
                if 0 <= rr < nr and 0 <= cc < nc and valid[rr, cc] and z[rr, cc] < zc:
                    lower = True
                    break
            if lower:
                continue
            # flood the set of equal-elevation cells connected to this candidate
            seen[i0] = True
            head = 0
            tail = 1
            queue[0] = i0
            drains = False
            while head < tail:
                i = queue[head]
                head += 1
                r = i // nc
                c = i - r * nc
                if exits[r, c]:
                    drains = True
                for k in range(8):
                    rr = r + DROW[k]
                    cc = c + DCOL[k]
                    if rr < 0 or rr >= nr or cc < 0 or cc >= nc or not valid[rr, cc]:
                        continue
                    zn = z[rr, cc]
                    if zn < zc:
                        drains = True
                    elif zn == zc:
                        j = rr * nc + cc
                        if not seen[j]:
                            seen[j] = True
                            queue[tail] = j
                            tail += 1
            if not drains:
                reps[nrep] = i0
                nrep += 1
    return reps[:nrep].copy()


@njit(cache=True, nogil=True)
def breach(z, valid, exits, dist, max_depth, max_length):
    """Breach depressions in place by least-cost paths (Lindsay 2016).

    Pits (see :func:`find_pits`) are handled from the lowest to the highest (ties in
    row-major order). From each pit at elevation z0 a Dijkstra search expands over valid
    cells; entering a cell costs its height above z0 (zero for cells at or below z0), ties
    go to the shorter path, then to the lower flat index. The search stops at the first cell
    it settles that is lower than z0, an exit, or on a channel carved earlier; cells more
    than ``max_depth`` above z0 are never entered and paths longer than ``max_length``
    (metres between cell centres, ``dist[row, k]``) are dropped. The cells of the path are
    then lowered to ``min(z, z0)``, which makes the elevation along it non-increasing from
    the pit to where it ends. Pits whose search finds nothing are left unchanged.

    Returns (number of pits, number breached, number of cells lowered).
    """
    nr, nc = z.shape
    n = nr * nc
    reps = find_pits(z, valid, exits)
    npit = reps.shape[0]
    if npit == 0:
        return 0, 0, 0
    zr = np.empty(npit, dtype=np.float32)
    for t in range(npit):
        zr[t] = z[reps[t] // nc, reps[t] % nc]
    order = np.argsort(zr, kind="mergesort")  # stable: ties keep row-major order
    best_cost = np.empty(n, dtype=np.float64)
    best_len = np.empty(n, dtype=np.float64)
    parent = np.empty(n, dtype=np.int32)
    seen = np.zeros(n, dtype=np.int32)
    done = np.zeros(n, dtype=np.int32)
    carved = np.zeros(n, dtype=np.bool_)
    path = np.empty(n, dtype=np.int32)
    cap = min(n, 1 << 16) + 16
    hc = np.empty(cap, dtype=np.float64)
    hl = np.empty(cap, dtype=np.float64)
    hv = np.empty(cap, dtype=np.int32)
    nbreached = 0
    nlowered = 0
    for t in range(npit):
        p = reps[order[t]]
        stamp = t + 1
        pr = p // nc
        pc = p - pr * nc
        if carved[p]:
            continue
        z0 = np.float64(z[pr, pc])
        lower_now = False
        for k in range(8):
            rr = pr + DROW[k]
            cc = pc + DCOL[k]
            if 0 <= rr < nr and 0 <= cc < nc and valid[rr, cc] and z[rr, cc] < z0:
                lower_now = True
                break
        if lower_now:  # an earlier channel passes next to it
            continue
        seen[p] = stamp
        best_cost[p] = 0.0
        best_len[p] = 0.0
        parent[p] = -1
        hsize = _push(hc, hl, hv, 0, 0.0, 0.0, p)
        target = -1
        while hsize > 0:
            cu = hc[0]
            lu = hl[0]
            u = hv[0]
            hsize = _pop(hc, hl, hv, hsize)
            if done[u] == stamp:
                continue
            done[u] = stamp
            r = u // nc
            c = u - r * nc
            if u != p and (z[r, c] < z0 or exits[r, c] or carved[u]):
                target = u
                break
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc or not valid[rr, cc]:
                    continue
                v = rr * nc + cc
                if done[v] == stamp:
                    continue
                excess = np.float64(z[rr, cc]) - z0
                if excess > max_depth:
                    continue
                nl = lu + dist[r, k]
                if nl > max_length:
                    continue
                ncost = cu + (excess if excess > 0.0 else 0.0)
                if seen[v] == stamp and not _less(ncost, nl, v, best_cost[v], best_len[v],
                                                  v):
                    continue
                seen[v] = stamp
                best_cost[v] = ncost
                best_len[v] = nl
                parent[v] = u
                if hsize == cap:
                    cap *= 2
                    hc2 = np.empty(cap, dtype=np.float64)
                    hl2 = np.empty(cap, dtype=np.float64)
                    hv2 = np.empty(cap, dtype=np.int32)
                    hc2[:hsize] = hc[:hsize]
                    hl2[:hsize] = hl[:hsize]
                    hv2[:hsize] = hv[:hsize]
                    hc = hc2
                    hl = hl2
                    hv = hv2
                hsize = _push(hc, hl, hv, hsize, ncost, nl, v)
        if target < 0:
            continue
        nbreached += 1
        m = 0
        v = target
        while v >= 0:
            path[m] = v
            m += 1
            v = parent[v]
        z0f = np.float32(z0)
        for q in range(m):
            v = path[q]
            r = v // nc
            c = v - r * nc
            if z[r, c] > z0f:
                z[r, c] = z0f
                nlowered += 1
            carved[v] = True
    return npit, nbreached, nlowered
