"""Compiled kernels of the tiled fill and directions: the links between border cells of
neighbouring tiles, and the pieces of flats inside one tile.

Windows are a tile with the 1-cell ring of its neighbours (see :mod:`basinkit.tiles.window`);
the tile is the box rows ``a0:a1``, columns ``b0:b1`` of the window.
"""

import numpy as np
from numba import njit

from ..conditioning._fill import DCOL, DROW


@njit(cache=True, nogil=True)
def border_links(zl, valid, labels, a0, a1, b0, b1, w0, v0, tile_rows, tile_cols, ntc,
                 self_id):
    """Edges of the fill's label graph between the tile's border cells and the cells of the
    ring that belong to tiles later in row-major order (each edge is found once): for two
    adjacent valid cells, their two labels meet at the higher of their locally filled
    elevations (Barnes 2016, as in :func:`basinkit.conditioning._tiled_fill.solve_levels`).

    Returns (own label, other tile id, other label, level)."""
    nr, nc = zl.shape
    cap = 5 * 2 * ((a1 - a0) + (b1 - b0)) + 8
    la = np.empty(cap, dtype=np.int64)
    tb = np.empty(cap, dtype=np.int64)
    lb = np.empty(cap, dtype=np.int64)
    ww = np.empty(cap, dtype=np.float32)
    n = 0
    for r in range(a0, a1):
        step = 1 if (r == a0 or r == a1 - 1) else max(b1 - 1 - b0, 1)
        c = b0
        while c < b1:
            if valid[r, c]:
                for k in range(8):
                    rr = r + DROW[k]
                    cc = c + DCOL[k]
                    if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                        continue
                    if a0 <= rr < a1 and b0 <= cc < b1:
                        continue
                    if not valid[rr, cc]:
                        continue
                    other = ((rr + w0) // tile_rows) * ntc + (cc + v0) // tile_cols
                    if other <= self_id:
                        continue
                    la[n] = labels[r, c]
                    tb[n] = other
                    lb[n] = labels[rr, cc]
                    ww[n] = max(zl[r, c], zl[rr, cc])
                    n += 1
            c += step
    return la[:n], tb[:n], lb[:n], ww[:n]


@njit(cache=True, nogil=True)
def flat_components(z, valid, flat, a0, a1, b0, b1):
    """The pieces of flats inside the tile, as :func:`basinkit.routing._d8.resolve_flats`
    groups them: the nodes are flat cells and low edges (valid cells that drain, next to a
    flat cell of the same elevation); two adjacent nodes of the same elevation are joined
    when at least one of them is a flat cell. Connected nodes inside the tile share a
    label 1, 2, ...; joins to nodes in the ring (other tiles) are listed as links.

    Returns (labels of the tile's cells int32, 0 off the nodes; number of pieces; whether
    each piece holds a low edge (index 1..n); its bounding box rows/cols in window
    coordinates (n+1, 4); links as piece, from row, from col, to row, to col in window
    coordinates)."""
    nr, nc = z.shape
    th = a1 - a0
    tw = b1 - b0
    lab = np.zeros((th, tw), dtype=np.int32)
    queue = np.empty(th * tw, dtype=np.int64)
    pcap = 64  # pieces' tables, grown as needed
    has_low = np.zeros(pcap, dtype=np.bool_)
    box = np.empty((pcap, 4), dtype=np.int64)
    lcap = 16
    links = np.empty((lcap, 5), dtype=np.int64)
    nlink = 0
    npiece = 0
    for sr in range(a0, a1):
        for sc in range(b0, b1):
            if lab[sr - a0, sc - b0] != 0 or not valid[sr, sc]:
                continue
            if not flat[sr, sc]:
                # a low edge? (a flat neighbour of the same elevation, in the window)
                low = False
                for k in range(8):
                    rr = sr + DROW[k]
                    cc = sc + DCOL[k]
                    if 0 <= rr < nr and 0 <= cc < nc and flat[rr, cc] and valid[rr, cc] \
                            and z[rr, cc] == z[sr, sc]:
                        low = True
                        break
                if not low:
                    continue
            npiece += 1
            if npiece == pcap:
                grown_low = np.zeros(2 * pcap, dtype=np.bool_)
                grown_low[:pcap] = has_low
                has_low = grown_low
                grown_box = np.empty((2 * pcap, 4), dtype=np.int64)
                grown_box[:pcap] = box
                box = grown_box
                pcap *= 2
            lab[sr - a0, sc - b0] = npiece
            box[npiece, 0] = sr
            box[npiece, 1] = sr
            box[npiece, 2] = sc
            box[npiece, 3] = sc
            has_low[npiece] = not flat[sr, sc]
            head = 0
            tail = 1
            queue[0] = (sr - a0) * tw + (sc - b0)
            while head < tail:
                q = queue[head]
                head += 1
                r = q // tw + a0
                c = q % tw + b0
                fi = flat[r, c]
                zi = z[r, c]
                for k in range(8):
                    rr = r + DROW[k]
                    cc = c + DCOL[k]
                    if rr < 0 or rr >= nr or cc < 0 or cc >= nc:
                        continue
                    if not valid[rr, cc] or z[rr, cc] != zi:
                        continue
                    fj = flat[rr, cc]
                    if not (fi or fj):
                        continue
                    if a0 <= rr < a1 and b0 <= cc < b1:
                        if lab[rr - a0, cc - b0] == 0:
                            lab[rr - a0, cc - b0] = npiece
                            queue[tail] = (rr - a0) * tw + (cc - b0)
                            tail += 1
                            if not fj:
                                has_low[npiece] = True
                            box[npiece, 0] = min(box[npiece, 0], rr)
                            box[npiece, 1] = max(box[npiece, 1], rr)
                            box[npiece, 2] = min(box[npiece, 2], cc)
                            box[npiece, 3] = max(box[npiece, 3], cc)
                    else:
                        if nlink == lcap:
                            grown = np.empty((2 * lcap, 5), dtype=np.int64)
                            grown[:lcap] = links
                            links = grown
                            lcap *= 2
                        links[nlink, 0] = npiece
                        links[nlink, 1] = r
                        links[nlink, 2] = c
                        links[nlink, 3] = rr
                        links[nlink, 4] = cc
                        nlink += 1
    return lab, npiece, has_low[:npiece + 1].copy(), box[:npiece + 1].copy(), \
        links[:nlink].copy()
