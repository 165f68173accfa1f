"""Channel segments from tiles: the segment of every channel cell and the per-segment
table of :func:`basinkit.analysis.channels.extract_channels`, for a network whose cells and
orders were found by :func:`basinkit.tiles.channel_orders`.

Layers read: ``directions``, the upstream area, the order and magnitude layers and,
optionally, the routed elevation. Layer written: ``segment_id`` (int32, 0 off the network).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numba import njit

from ..analysis._channels import segment_paths, strahler_streams
from ..errors import InputError
from . import _flow_kernels as K
from .accumulate import TileFlow, _check_layout, by_tile, take
from .channels import CHANNEL_LAYERS
from .engine import Engine, check_settings, open_store

__all__ = ["channel_segments"]


@njit(cache=True, nogil=True)
def _pieces(d, rl, stack, mask, split, dist, h, w):
    """Cut a tile's channel cells into pieces: chains that end where a segment surely ends
    (exit, split cell, a receiver with two channel donors in the tile) or where it may end
    (a receiver on the tile edge or in another tile, which may have donors elsewhere).

    Returns (piece of every cell (-1 off the network), bottom, top, cell count and length
    of every piece, channel donors in the tile of every cell)."""
    n = rl.shape[0]
    ndon = np.zeros(n, dtype=np.int64)
    for i in range(n):
        r = rl[i]
        if r >= 0 and mask[i]:
            ndon[r] += 1
    piece = np.full(n, -1, dtype=np.int64)
    bottom = np.empty(n, dtype=np.int64)
    top = np.empty(n, dtype=np.int64)
    count = np.zeros(n, dtype=np.int64)
    length = np.zeros(n, dtype=np.float64)
    npc = 0
    for t in range(stack.shape[0]):
        i = stack[t]
        if not mask[i]:
            continue
        r = rl[i]
        cut = r < 0 or split[i]
        if not cut:
            rr = r // w
            rc = r - rr * w
            cut = rr == 0 or rr == h - 1 or rc == 0 or rc == w - 1 or ndon[r] >= 2
        if cut:
            p = npc
            npc += 1
            bottom[p] = i
        else:
            p = piece[r]
        piece[i] = p
        top[p] = i  # the last cell met is the most upstream one
        count[p] += 1
        if r != -1:  # a receiver in this tile or another one
            row = i // w
            length[p] += dist[row, d[row, i - row * w] // 45]
    return (piece, bottom[:npc].copy(), top[:npc].copy(), count[:npc].copy(),
            length[:npc].copy(), ndon)


class _Tile:
    """A tile's flow, network and pieces (pass A and pass B compute the same)."""

    def __init__(self, store, ti, tj, directions, area, orders, min_area, split_cells,
                 dist):
        self.f = f = TileFlow(store, directions, ti, tj)
        self.d = f.d
        a = np.asarray(store.read(area, ti, tj), dtype=np.float64).ravel()
        with np.errstate(invalid="ignore"):
            self.mask = a >= min_area
        self.area = a
        split = np.zeros(f.rl.shape[0], dtype=np.bool_)
        if split_cells.size:
            split[f.to_local(split_cells)] = True
        (self.piece, self.bottom, self.top, self.count, self.length,
         self.ndon) = _pieces(self.d, f.rl, f.stack, self.mask, split, dist, f.h, f.w)
        self.split = split


def _pieces_task(spec, ti, tj, split_cells, dist, directions, area, orders, elevation,
                 min_area, layer):
    store = open_store(spec)
    name = f"{layer}.pieces_{ti}_{tj}"
    if store.has_meta(name):
        return store.read_meta(name)
    for lay in (area, *orders) + ((elevation,) if elevation else ()):
        if not store.has(lay, ti, tj):
            raise InputError(f"the tile store has no tile ({ti}, {tj}) of the {lay!r} layer; "
                             "run flow_accumulation and channel_orders first")
    t = _Tile(store, ti, tj, directions, area, orders, min_area, split_cells, dist)
    f = t.f
    b = t.bottom
    rb = f.rl[b]
    nxt = np.where(rb >= 0, f.to_global(np.maximum(rb, 0)), np.where(rb == -3, f.tgt[b], -1))
    order = np.asarray(store.read(orders[0], ti, tj)).ravel()
    shreve = np.asarray(store.read(orders[1], ti, tj)).ravel()
    z = (np.asarray(store.read(elevation, ti, tj), dtype=np.float64).ravel() if elevation
         else np.zeros(f.rl.shape[0]))
    border = K.border_cells(f.rl, f.h, f.w)
    border = border[t.mask[border]]
    leaving = np.flatnonzero((f.rl == -3) & t.mask)
    out = {"top": f.to_global(t.top), "bottom": f.to_global(b), "next": nxt,
           "count": t.count, "length": t.length, "split": t.split[b],
           "order": order[b], "shreve": shreve[b], "area_top": t.area[t.top],
           "area_bottom": t.area[b], "z_top": z[t.top], "z_bottom": z[b],
           "border": f.to_global(border), "border_ndon": t.ndon[border],
           "leaving_target": f.tgt[leaving]}
    store.write_meta(name, out)
    return out


def _segments_task(spec, ti, tj, split_cells, seg_of_piece, dist, edge_cells, edge_ndon,
                   directions, area, orders, elevation, min_area, layer):
    """Pass 2 of a tile: the segment of every cell, and (kept in the store's metadata, so
    that a resumed run finds them) the tile's junctions and the cell paths of its pieces."""
    store = open_store(spec)
    name = f"{layer}.cells_{ti}_{tj}"
    if store.has(layer, ti, tj) and store.has_meta(name):
        return store.read_meta(name)
    t = _Tile(store, ti, tj, directions, area, orders, min_area, split_cells, dist)
    f = t.f
    lut = np.concatenate([np.asarray(seg_of_piece, dtype=np.int32), [0]])
    out = lut[t.piece]  # piece -1 -> the 0 appended
    ndon = t.ndon.copy()  # channel donors, those in other tiles added on the edge
    ndon[f.to_local(edge_cells)] = edge_ndon
    junction = np.flatnonzero(t.mask & (ndon >= 2))
    order = np.asarray(store.read(orders[0], ti, tj)).ravel()
    shreve = np.asarray(store.read(orders[1], ti, tj)).ravel()
    z = (np.asarray(store.read(elevation, ti, tj), dtype=np.float64).ravel() if elevation
         else np.zeros(f.rl.shape[0]))
    # the in-memory walk, with no junction cell appended (a mask of no channel cells)
    cells, offsets = segment_paths(f.rl, np.zeros(f.rl.shape[0], dtype=np.bool_), t.top,
                                   t.bottom)
    res = {"junction": f.to_global(junction), "junction_segment": out[junction],
           "junction_order": order[junction], "junction_shreve": shreve[junction],
           "junction_ndon": ndon[junction], "junction_area": t.area[junction],
           "junction_z": z[junction], "path": f.to_global(cells), "path_offsets": offsets}
    store.write_meta(name, res)
    store.write(layer, ti, tj, out.reshape(f.h, f.w))
    return res


def _join(parts):
    """The pass on the client: pieces chained into segments, numbered downstream first."""
    cat = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    npc = cat["top"].size
    tsort = np.argsort(cat["top"], kind="stable")
    tkeys = cat["top"][tsort]
    # channel donors of edge cells: those in their tile and those in other tiles
    bsort = np.argsort(cat["border"], kind="stable")
    bkeys = cat["border"][bsort]
    ndon = cat["border_ndon"][bsort].copy()
    pos = K.lookup(bkeys, cat["leaving_target"])
    np.add.at(ndon, pos[pos >= 0], 1)
    nxt = cat["next"]
    bpos = K.lookup(bkeys, nxt)
    npos = K.lookup(tkeys, nxt)
    below = np.where(npos >= 0, tsort[np.maximum(npos, 0)], -1)  # piece whose top is next
    cont = (nxt >= 0) & ~cat["split"] & (bpos >= 0) & (below >= 0)
    cont &= take(ndon, bpos, 2) < 2
    up = np.full(npc, -1, dtype=np.int64)
    up[below[cont]] = np.flatnonzero(cont)
    bottoms = np.flatnonzero(~cont)  # pieces that end a segment
    ns = bottoms.size
    seg_of_piece = np.full(npc, -1, dtype=np.int64)
    top_piece = np.empty(ns, dtype=np.int64)
    count = np.zeros(ns, dtype=np.int64)
    length = np.zeros(ns)
    for s, p in enumerate(bottoms.tolist()):
        q = p
        while q >= 0:  # upwards from the bottom piece, as the cells are met in memory
            seg_of_piece[q] = s
            count[s] += cat["count"][q]
            length[s] += cat["length"][q]
            top_piece[s] = q
            q = up[q]
    down_piece = below[bottoms]
    # the water goes on into a channel cell (the top of a piece; a direction into nodata,
    # which routed directions never hold, counts as leaving the grid)
    has_down = (nxt[bottoms] >= 0) & (down_piece >= 0)
    down = np.where(has_down, seg_of_piece[np.maximum(down_piece, 0)], -1)
    # ids downstream first: by depth in the segment tree, then by bottom cell
    depth = np.full(ns, -1, dtype=np.int64)
    for s in range(ns):
        path = []
        k = s
        while k >= 0 and depth[k] < 0:
            path.append(k)
            k = down[k]
        base = depth[k] if k >= 0 else -1
        for j in reversed(path):
            base += 1
            depth[j] = base
    bottom_cell = cat["bottom"][bottoms]
    rank = np.lexsort((bottom_cell, depth))
    new_id = np.empty(ns, dtype=np.int64)
    new_id[rank] = np.arange(1, ns + 1)
    z_end = np.where(has_down, cat["z_top"][np.maximum(down_piece, 0)],
                     cat["z_bottom"][bottoms])
    seg = {
        "segment_id": new_id, "downstream_id": np.where(down >= 0, new_id[np.maximum(down, 0)], 0),
        "order": cat["order"][bottoms], "shreve": cat["shreve"][bottoms],
        "length": length, "count": count, "top": cat["top"][top_piece],
        "bottom": bottom_cell, "end": np.where(has_down, nxt[bottoms], bottom_cell),
        "area_top": cat["area_top"][top_piece], "area_bottom": cat["area_bottom"][bottoms],
        "z_top": cat["z_top"][top_piece], "z_end": z_end,
    }
    seg = {k: v[rank] for k, v in seg.items()}
    # every segment's pieces from the top down (for its line)
    pieces_down = [None] * ns
    for s in range(ns):
        q, chain = top_piece[s], []
        while True:
            chain.append(q)
            if not cont[q]:
                break
            q = below[q]
        pieces_down[s] = chain
    pieces_down = [pieces_down[k] for k in rank]
    edges = (cat["border"][bsort], ndon)
    return seg, new_id[seg_of_piece], pieces_down, edges


def _straight(top, end, ncols, geometry, crs, transform):
    ra, ca = np.divmod(top, ncols)
    rb, cb = np.divmod(end, ncols)
    if crs is not None and crs.is_geographic:
        from pyproj import Geod

        ell = crs.ellipsoid
        f = 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0
        t = transform
        # cell centres as Terrain.xy_of places them
        xa, ya = t.c + (ca + 0.5) * t.a, t.f + (ra + 0.5) * t.e
        xb, yb = t.c + (cb + 0.5) * t.a, t.f + (rb + 0.5) * t.e
        _, _, dist = Geod(a=ell.semi_major_metre, f=f).inv(xa, ya, xb, yb)
        return np.abs(np.asarray(dist, dtype=np.float64))
    return np.hypot((cb - ca) * geometry.dx[0], (rb - ra) * geometry.dy_down[0])


def channel_segments(layout, store, min_area_m2, geometry=None, *, outlet_cells=None,
                     crs=None, transform=None, directions: str = "directions",
                     area: str = "upstream_area_m2", orders=CHANNEL_LAYERS,
                     elevation: str | None = None, layer: str = "segment_id",
                     lines: bool = False, scheduler=None, workers: int | None = None):
    """The channel segments of a grid held as tiles, and the segment of every cell.

    Parameters
    ----------
    layout : TileLayout
    store : tile store
        Holding ``directions``, ``area``, the ``orders`` layers written by
        :func:`basinkit.tiles.channel_orders` for the same ``min_area_m2`` and, when
        given, ``elevation`` (the routed surface); receives ``layer``.
    min_area_m2 : float
        The channel threshold the orders were computed with.
    geometry : CellGeometry, optional
        The grid's cell geometry (lengths along the flow, m). Without it, the geometry,
        ``crs`` and ``transform`` come from the store's metadata.
    outlet_cells : array of int, optional
        Flat cells where segments are also split (catchment outlets).
    crs, transform : optional
        For the straight distance between a segment's ends (geodesic on geographic
        grids, as :func:`basinkit.analysis.channels.ground_distance`); without a CRS the
        grid is taken as projected.

    lines : bool
        Also build the segment lines through the cell centres (a GeoDataFrame, in
        ``crs``, as :func:`extract_channels` with ``geometry=True``).

    Returns
    -------
    (segments, junctions) : (pandas.DataFrame, pandas.DataFrame)
        ``segments``: one row per segment, ``segment_id`` 1, 2, ... with every segment's downstream
        one first, and the columns of :func:`extract_channels`' table: ``downstream_id``,
        ``stream_id``, ``strahler_order``, ``shreve_magnitude``, ``length_m``,
        ``straight_length_m``, ``sinuosity``, ``upstream_area_top_m2``,
        ``upstream_area_bottom_m2``, ``cell_count``, ``top_row``, ``top_col``,
        ``bottom_row``, ``bottom_col`` and, with an elevation layer, ``drop_m``,
        ``mean_slope_m_per_m``, ``top_elevation_m``, ``bottom_elevation_m``.
        ``junctions``: one row per channel cell with two or more channel donors, by cell:
        ``junction_id``, ``segment_id``, ``strahler_order``, ``shreve_magnitude``,
        ``tributary_count``, ``upstream_area_m2``, ``elevation_m`` (with an elevation
        layer), ``row``, ``col``.

    Notes
    -----
    A segment runs from a channel head or junction down to a cell whose water leaves the
    grid, enters a junction, or which is an outlet, as in memory. Pass 1 cuts every
    tile's channel cells into pieces: chains ending where a segment surely ends, or at a
    receiver on the tile edge, which may have channel donors in another tile. The client
    counts those donors, chains the pieces into segments and numbers them; pass 2 writes
    the segment of every cell. The segments are those of :func:`extract_channels` (the
    same cells, ends and values); their ids follow another order (the in-memory ids
    follow the stack of the whole grid). Lengths are sums of the same steps in another
    grouping: equal within rounding (see :func:`flow_accumulation`).
    """
    _check_layout(layout, store)
    if geometry is None:
        from .accumulate import store_georeference

        geometry, transform, crs = store_georeference(layout, store)
    try:
        thr = float(min_area_m2)
    except (TypeError, ValueError):
        raise InputError(f"the channel threshold must be an area in m², got "
                         f"{min_area_m2!r}") from None
    split = (np.zeros(0, np.int64) if outlet_cells is None
             else np.unique(np.asarray(outlet_cells, dtype=np.int64).ravel()))
    if split.size and (split.min() < 0 or split.max() >= layout.nrows * layout.ncols):
        raise InputError("an outlet cell lies outside the grid")
    from .engine import digest

    check_settings(store, f"{layer}.settings",
                   {"directions": directions, "area": area, "orders": tuple(orders),
                    "min_area_m2": thr, "split": digest(split), "elevation": elevation})
    dist_all = geometry.neighbour_distances()
    per_tile = by_tile(layout, split)
    tiles = layout.tiles()
    none = (np.zeros(0, np.int64),)

    def extra(ti, tj):
        r0, r1, _, _ = layout.window(ti, tj)
        return (per_tile.get((ti, tj), none)[0], np.ascontiguousarray(dist_all[r0:r1]))

    shared = (directions, area, tuple(orders), elevation, thr, layer)
    with Engine(scheduler, workers) as eng:
        spec = eng.spec(store)
        parts = eng.map(_pieces_task, spec, [(ti, tj, extra(ti, tj)) for ti, tj in tiles],
                        shared=shared)
        seg, seg_of_piece, pieces_down, (edge_cells, edge_ndon) = _join(parts)
        edges = by_tile(layout, edge_cells, edge_ndon)
        no_edges = (np.zeros(0, np.int64), np.zeros(0, np.int64))
        items, start = [], 0
        for (ti, tj), p in zip(tiles, parts):
            k = p["top"].size
            sp, dist = extra(ti, tj)
            items.append((ti, tj, (sp, seg_of_piece[start:start + k], dist,
                                   *edges.get((ti, tj), no_edges))))
            start += k
        cells = eng.map(_segments_task, spec, items, shared=shared)
    junctions = _junctions(cells, layout.ncols, elevation)
    tab = _table(seg, layout.ncols, geometry, crs, transform, elevation)
    if lines:
        tab = _with_lines(tab, seg, pieces_down, cells, layout.ncols, crs, transform)
    return tab, junctions


def _junctions(cells, nc, elevation):
    """The junction table: channel cells with two or more channel donors, by cell."""
    cat = {k: np.concatenate([c[k] for c in cells]) for k in cells[0]
           if k.startswith("junction")}
    o = np.argsort(cat["junction"], kind="stable")
    j = cat["junction"][o]
    jt = pd.DataFrame({
        "junction_id": np.arange(1, j.size + 1, dtype=np.int32),
        "segment_id": cat["junction_segment"][o].astype(np.int32),
        "strahler_order": cat["junction_order"][o].astype(np.int16),
        "shreve_magnitude": cat["junction_shreve"][o].astype(np.int64),
        "tributary_count": cat["junction_ndon"][o].astype(np.int16),
        "upstream_area_m2": cat["junction_area"][o],
    })
    if elevation:
        jt["elevation_m"] = cat["junction_z"][o]
    jt["row"] = (j // nc).astype(np.int32)
    jt["col"] = (j % nc).astype(np.int32)
    return jt


def _with_lines(tab, seg, pieces_down, cells, nc, crs, transform):
    """Segment lines through cell centres, from the top cell down to the bottom and on to
    the receiver of the bottom cell (where consecutive segments meet), as in memory."""
    import geopandas as gpd
    import shapely

    if transform is None:
        raise InputError("segment lines need the grid's transform")
    paths, offs = [], []
    for c in cells:
        paths.append(c["path"])
        offs.append(c["path_offsets"])
    piece_path = []
    for path, off in zip(paths, offs):
        piece_path.extend(path[off[k]:off[k + 1]] for k in range(off.size - 1))
    seq = []
    for s, chain in enumerate(pieces_down):
        pts = [piece_path[q] for q in chain]
        if seg["end"][s] != seg["bottom"][s]:  # on to the receiver of the bottom cell
            pts.append(seg["end"][s:s + 1])
        pts = np.concatenate(pts)
        seq.append(np.repeat(pts, 2) if pts.size == 1 else pts)  # one cell: zero length
    counts = np.array([p.size for p in seq], dtype=np.int64)
    lines = np.empty(0, dtype=object)
    if counts.size:
        cells = np.concatenate(seq)
        r, c = np.divmod(cells, nc)
        t = transform
        # cell centres as Terrain.xy_of places them
        xy = np.column_stack([t.c + (c + 0.5) * t.a, t.f + (r + 0.5) * t.e])
        lines = shapely.linestrings(xy, indices=np.repeat(np.arange(counts.size), counts))
    wkt = crs.to_wkt() if crs is not None and hasattr(crs, "to_wkt") else crs
    return gpd.GeoDataFrame(tab, geometry=lines, crs=wkt)


def _table(seg, nc, geometry, crs, transform, elevation):
    ns = seg["segment_id"].size
    stream = strahler_streams(seg["order"].astype(np.int16),
                              seg["downstream_id"].astype(np.int32)) if ns else np.zeros(0)
    straight = (_straight(seg["top"], seg["end"], nc, geometry, crs, transform) if ns
                else np.zeros(0))
    with np.errstate(invalid="ignore", divide="ignore"):
        sinuosity = np.where(straight > 0, seg["length"] / straight, np.nan)
    tab = pd.DataFrame({
        "segment_id": seg["segment_id"].astype(np.int32),
        "downstream_id": seg["downstream_id"].astype(np.int32),
        "stream_id": np.asarray(stream, dtype=np.int32),
        "strahler_order": seg["order"].astype(np.int16),
        "shreve_magnitude": seg["shreve"].astype(np.int64),
        "length_m": seg["length"], "straight_length_m": straight, "sinuosity": sinuosity,
        "upstream_area_top_m2": seg["area_top"], "upstream_area_bottom_m2": seg["area_bottom"],
        "cell_count": seg["count"].astype(np.int32),
        "top_row": (seg["top"] // nc).astype(np.int32),
        "top_col": (seg["top"] % nc).astype(np.int32),
        "bottom_row": (seg["bottom"] // nc).astype(np.int32),
        "bottom_col": (seg["bottom"] % nc).astype(np.int32),
    })
    if elevation:
        drop = seg["z_top"] - seg["z_end"]
        with np.errstate(invalid="ignore", divide="ignore"):
            tab["drop_m"] = drop
            tab["mean_slope_m_per_m"] = np.where(seg["length"] > 0, drop / seg["length"],
                                                 np.nan)
        tab["top_elevation_m"] = seg["z_top"]
        tab["bottom_elevation_m"] = seg["z_end"]
    return tab
