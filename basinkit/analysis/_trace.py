"""Numba kernels: outlines of label ranges traced along cell edges.

A region is the cells whose label lies in a range ``lo..hi``; its outline is made of the
cell edges between a cell of the region and one outside it (or the grid's border). The
edges of every label are listed once (:func:`label_edges`); the outline of a range is
found among the edges of its labels and followed ring by ring (:func:`trace_range`), so
the work per region is proportional to the edges of its labels, not to its bounding box.

Edges are walked with the region on the right (rows run downwards): a shell comes out
clockwise on screen (positive shoelace area in (col, row) coordinates), a hole the other
way. Cells of the region that meet only at a corner are not joined (4-connectivity), as
in ``rasterio.features.shapes(..., connectivity=4)``.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._sorting import argsort_stable, search_left

# side s of a cell: 0 north, 1 east, 2 south, 3 west; an edge on side s is walked in
# direction s: 0 east, 1 south, 2 west, 3 north
_DR = np.array([-1, 0, 1, 0], dtype=np.int64)  # neighbour across side s
_DC = np.array([0, 1, 0, -1], dtype=np.int64)


@njit(cache=True, nogil=True)
def label_edges(lab, nr, nc, nlab):
    """Cell edges between different labels, grouped by label: ``(offsets, keys)`` with
    ``keys[offsets[a]:offsets[a + 1]]`` the edges ``cell * 4 + side`` of label ``a``
    (sorted), for labels 1..nlab-1 (``lab`` flat, 0 = none)."""
    dr = np.array([-1, 0, 1, 0])
    dc = np.array([0, 1, 0, -1])
    count = np.zeros(nlab + 1, dtype=np.int64)
    for r in range(nr):
        for c in range(nc):
            a = lab[r * nc + c]
            if a <= 0 or a >= nlab:
                continue
            for s in range(4):
                rr = r + dr[s]
                cc = c + dc[s]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc or lab[rr * nc + cc] != a:
                    count[a + 1] += 1
    off = np.cumsum(count)
    keys = np.empty(off[-1], dtype=np.int64)
    pos = off[:-1].copy()
    for r in range(nr):
        for c in range(nc):
            a = lab[r * nc + c]
            if a <= 0 or a >= nlab:
                continue
            for s in range(4):
                rr = r + dr[s]
                cc = c + dc[s]
                if rr < 0 or rr >= nr or cc < 0 or cc >= nc or lab[rr * nc + cc] != a:
                    keys[pos[a]] = (r * nc + c) * 4 + s
                    pos[a] += 1
    return off[:-1], keys, off[-1]


@njit(cache=True, nogil=True)
def _inside(lab, nr, nc, r, c, lo, hi):
    if r < 0 or r >= nr or c < 0 or c >= nc:
        return False
    v = lab[r * nc + c]
    return v >= lo and v <= hi


@njit(cache=True, nogil=True)
def _find(keys, a0, a1, key):
    """Position of ``key`` in the sorted ``keys[a0:a1]`` (-1 if absent)."""
    lo = a0 + search_left(keys[a0:a1], key)
    if lo < a1 and keys[lo] == key:
        return lo
    return -1


@njit(cache=True, nogil=True)
def trace_range(lab, nr, nc, keys, e0, e1, lo, hi):
    """Rings of the outline of the cells labelled ``lo..hi``.

    ``keys[e0:e1]`` (sorted edge keys ``cell * 4 + side``) must hold every edge of the
    outline: the edges of the range's labels, or those of its first label plus the
    outlines of the ranges nested in it.

    Returns ``(cols, rows, starts, area2, on_outline)``: corner coordinates (grid
    corners, integer column and row) of every ring one after the other, each ring closed
    (its first corner repeated); ``starts`` the first corner of each ring (plus the end);
    ``area2`` twice the shoelace area of each ring in (col, row) coordinates (> 0: shell,
    < 0: hole); ``on_outline`` which of ``keys[e0:e1]`` lie on the outline.
    """
    dr = np.array([-1, 0, 1, 0])
    dc = np.array([0, 1, 0, -1])
    m = e1 - e0
    visited = np.zeros(m, dtype=np.bool_)
    on_outline = np.zeros(m, dtype=np.bool_)
    cap = m + m // 4 + 8
    cols = np.empty(cap, dtype=np.int64)
    rows = np.empty(cap, dtype=np.int64)
    starts = np.empty(m // 4 + 2, dtype=np.int64)
    area2 = np.empty(m // 4 + 2, dtype=np.int64)
    nv = 0
    nring = 0
    for i in range(m):
        if visited[i]:
            continue
        key = keys[e0 + i]
        cell = key >> 2
        s = key & 3
        r = cell // nc
        c = cell - r * nc
        if _inside(lab, nr, nc, r + dr[s], c + dc[s], lo, hi):
            visited[i] = True  # between two labels of the range: not on the outline
            continue
        # follow the ring from this edge
        starts[nring] = nv
        first = nv
        sr, sc, ss = r, c, s
        while True:
            j = _find(keys, e0, e1, (r * nc + c) * 4 + s) - e0
            if j < 0:
                raise ValueError("an edge of the outline is missing from the keys")
            visited[j] = True
            on_outline[j] = True
            # cells ahead of the edge's end: AR next to this cell, AL across the edge
            d = s  # walking direction
            md = (d + 1) & 3  # the walking direction as a neighbour offset
            ar_r, ar_c = r + dr[md], c + dc[md]
            al_r, al_c = ar_r + dr[s], ar_c + dc[s]
            if not _inside(lab, nr, nc, ar_r, ar_c, lo, hi):
                nr_, nc_, ns = r, c, (s + 1) & 3  # turn right, same cell
            elif not _inside(lab, nr, nc, al_r, al_c, lo, hi):
                nr_, nc_, ns = ar_r, ar_c, s  # straight on
            else:
                nr_, nc_, ns = al_r, al_c, (s + 3) & 3  # turn left
            if ns != s:  # a corner at the end of this edge
                if s == 0:
                    cols[nv] = c + 1
                    rows[nv] = r
                elif s == 1:
                    cols[nv] = c + 1
                    rows[nv] = r + 1
                elif s == 2:
                    cols[nv] = c
                    rows[nv] = r + 1
                else:
                    cols[nv] = c
                    rows[nv] = r
                nv += 1
            r, c, s = nr_, nc_, ns
            if r == sr and c == sc and s == ss:
                break
        nv, nring = _close_ring(cols, rows, first, nv, starts, area2, nring, nc)
    starts[nring] = nv
    return cols[:nv], rows[:nv], starts[:nring + 1], area2[:nring], on_outline


@njit(cache=True, nogil=True, inline="always")
def _emit(cols, rows, nv, sc, sr, k0, k1, starts, area2, nring):
    """Write corners sc/sr[k0:k1] as a closed ring at nv; returns (nv, nring)."""
    starts[nring] = nv
    first = nv
    for k in range(k0, k1):
        cols[nv] = sc[k]
        rows[nv] = sr[k]
        nv += 1
    cols[nv] = cols[first]
    rows[nv] = rows[first]
    nv += 1
    a2 = 0
    for k in range(first, nv - 1):
        a2 += cols[k] * rows[k + 1] - cols[k + 1] * rows[k]
    area2[nring] = a2
    return nv, nring + 1


@njit(cache=True, nogil=True, inline="always")
def _close_ring(cols, rows, first, nv, starts, area2, nring, nc):
    """Close the ring of corners ``first..nv-1``. A ring that passes a corner twice (the
    region's cells meet there diagonally around an outside pocket) is split there into
    rings that touch at that corner (a shell and a hole), as valid polygons need."""
    n = nv - first
    sc = cols[first:nv].copy()
    sr = rows[first:nv].copy()
    key = sr * (nc + 1) + sc
    sk = key[argsort_stable(key)]
    ndup = 0
    for k in range(1, n):
        if sk[k] == sk[k - 1] and (ndup == 0 or sk[k] != sk[k - 2]):
            ndup += 1
    if ndup == 0:
        return _emit(cols, rows, first, sc, sr, 0, n, starts, area2, nring)
    dup = np.empty(ndup, dtype=np.int64)
    j = 0
    for k in range(1, n):
        if sk[k] == sk[k - 1] and (j == 0 or dup[j - 1] != sk[k]):
            dup[j] = sk[k]
            j += 1
    last = np.full(ndup, -1, dtype=np.int64)  # stack position of each repeated corner
    stc = np.empty(n, dtype=np.int64)
    str_ = np.empty(n, dtype=np.int64)
    stk = np.empty(n, dtype=np.int64)
    top = 0
    nv = first
    for k in range(n):
        q = search_left(dup, key[k])
        isdup = q < ndup and dup[q] == key[k]
        if isdup and last[q] >= 0:
            p = last[q]  # a loop from the corner's first visit back to it
            nv, nring = _emit(cols, rows, nv, stc, str_, p, top, starts, area2, nring)
            for t in range(p + 1, top):  # corners of the loop leave the stack
                qq = search_left(dup, stk[t])
                if qq < ndup and dup[qq] == stk[t]:
                    last[qq] = -1
            top = p + 1
            continue
        stc[top] = sc[k]
        str_[top] = sr[k]
        stk[top] = key[k]
        if isdup:
            last[q] = top
        top += 1
    if top >= 4:
        nv, nring = _emit(cols, rows, nv, stc, str_, 0, top, starts, area2, nring)
    return nv, nring
