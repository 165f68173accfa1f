"""D8 directions by tiles, flats resolved across tile borders, equal to ``route()``.

Steps (each per-tile function is a pure function of ``(layout, store, ti, tj, ...)`` that
reads and writes only through the store):

1. :func:`d8_one_tile` -- steepest-descent receivers of the tile's cells from the ``filled``
   layer and the 1-cell ring of its neighbours (the in-memory kernel
   :func:`basinkit.routing._d8.d8_receivers` run on the tile with its ring, so the slopes,
   the true distances and the tie-breaking -- first of N, NE, ..., NW -- are the same).
   Exits (grid edge, next to nodata, base level) get -1, nodata -2, cells on a flat -3.
   Layer ``d8_raw``.
2. :func:`flat_pieces_one_tile` -- the pieces of flats inside the tile, grouped as
   :func:`basinkit.routing._d8.resolve_flats` groups them (Barnes, Lehman & Mulla 2014b:
   flat cells and their low edges of the same elevation; flats that share a low edge are
   one), and the links of each piece to nodes in neighbouring tiles. Layer ``flat_labels``
   (int32, written only for tiles that hold flats) and meta ``flats_TI_TJ``.
3. :func:`merge_flats` (on the client) -- a union-find over the links joins the pieces of
   flats that cross tile borders into whole flats, and puts those into batches: the flats
   whose bounding box fits in the 2 × 2 tiles starting at the tile of its first cell are
   one batch per such tile, a larger flat is a batch of its own (meta ``flat_groups_TI_TJ``:
   the batch of each piece, 0 for a piece wholly inside its tile; meta ``flat_crossing``:
   each batch's bounding box).
4. :func:`resolve_crossing_flats` -- the flats of one batch resolved in one go on a window
   that covers their bounding box and a 1-cell ring, read from the store (meta
   ``flat_fix_B``: the receivers of their cells).
5. :func:`finish_one_tile` -- the flats wholly inside the tile resolved on the tile with
   its ring, the receivers of crossing flats put in; layers ``receivers`` and
   ``directions``.

A flat is resolved from its own cells and their neighbours only (the gradients away from
higher and toward lower terrain run inside the flat), so resolving each flat on a window
that holds it and its ring gives the in-memory result cell for cell (distinct flats share
neither cells nor low edges, so several flats may share a window). Memory bound: a tile
with its ring, and for the flats that cross tile borders a window of at most 2 × 2 tiles
plus a ring, or the bounding box (plus a ring) of a larger flat: a single flat's bounding
box must fit in memory (about 25 bytes per cell of it, and up to 60 more per flat cell).

Layers written (the contract with the flow accumulation by tiles):

- ``receivers`` -- int64, the global flat index ``row * ncols + col`` of each cell's D8
  receiver (independent of the tiling); -1 where the water leaves the grid (grid edge, next
  to nodata, base level, or a flat with no way out), -2 on nodata. As ``route()``'s
  ``FlowModel.receiver``.
- ``directions`` -- int16 azimuth in degrees clockwise from north (0, 45, ..., 315),
  -1 no outflow, -32768 nodata. As ``FlowModel.direction_d8()``.
- working layers ``d8_raw`` (int64) and ``flat_labels`` (int32).
"""

from __future__ import annotations

import numpy as np

from ..routing._d8 import NO_FLOW, d8_receivers, resolve_flats
from ._kernels import flat_components
from .fill import exit_window
from .layout import TileLayout
from .window import read_window, reader, ring_box, ring_window

__all__ = ["directions_by_tiles", "d8_one_tile", "flat_pieces_one_tile", "merge_flats",
           "resolve_crossing_flats", "finish_one_tile", "receivers_to_azimuth_tile"]

# azimuth code of a step (dr, dc), indexed by (dr + 1) * 3 + dc + 1
_AZIMUTH = np.array([315, 0, 45, 270, -1, 90, 225, 180, 135], dtype=np.int16)


def _to_global(rec, wr0, wc0, wcols, ncols):
    """Window-local flat indices (negatives kept) as global ones, int64."""
    rec = np.asarray(rec, dtype=np.int64)
    r = rec // wcols + wr0
    c = rec % wcols + wc0
    return np.where(rec >= 0, r * ncols + c, rec)


def d8_one_tile(layout: TileLayout, store, ti: int, tj: int, dist: np.ndarray,
                surface: str = "filled") -> int:
    """Step 1 for one tile; ``dist`` is the grid's (nrows, 8) table of neighbour distances
    (``CellGeometry.neighbour_distances()``). Returns the tile's number of flat cells."""
    (w0, w1, v0, v1), (a0, a1, b0, b1), z, valid, bl, seeds = exit_window(
        layout, store, ti, tj, surface)
    d = np.ascontiguousarray(dist[w0:w1], dtype=np.float64)
    rec, _ = d8_receivers(z, valid, seeds, bl, d)
    rec = rec.reshape(z.shape)[a0:a1, b0:b1]
    out = _to_global(rec, w0, v0, v1 - v0, layout.ncols)
    store.write("d8_raw", ti, tj, out)
    return int(np.count_nonzero(out == NO_FLOW))


def flat_pieces_one_tile(layout: TileLayout, store, ti: int, tj: int,
                         surface: str = "filled") -> int:
    """Step 2 for one tile (after step 1 of it and its neighbours); returns its number of
    pieces of flats."""
    raw = ring_window(layout, store, "d8_raw", ti, tj)
    if not (raw == NO_FLOW).any():
        store.write_meta(f"flats_{ti}_{tj}", {"pieces": 0})
        return 0
    (w0, _, v0, _), (a0, a1, b0, b1) = ring_box(layout, ti, tj)
    z = ring_window(layout, store, surface, ti, tj, np.float32)
    valid = ring_window(layout, store, "valid", ti, tj, np.bool_)
    lab, n, has_low, box, links = flat_components(z, valid, raw == NO_FLOW, a0, a1, b0, b1)
    nc = layout.ncols
    summary = {"pieces": int(n), "has_low": has_low,
               "box": box + np.array([w0, w0, v0, v0]),  # rows min, max, cols min, max
               "link_piece": links[:, 0],
               "link_from": (links[:, 1] + w0) * nc + links[:, 2] + v0,
               "link_to": (links[:, 3] + w0) * nc + links[:, 4] + v0}
    if n:
        store.write("flat_labels", ti, tj, lab)
    store.write_meta(f"flats_{ti}_{tj}", summary)
    return int(n)


def _find(parent, x):
    root = x
    while parent[root] != root:
        root = parent[root]
    while parent[x] != root:
        parent[x], x = root, parent[x]
    return root


def merge_flats(layout: TileLayout, store) -> int:
    """Step 3, on the client: join the pieces of flats across tile borders. Returns the
    number of flats that cross a tile border."""
    summaries = {t: store.read_meta(f"flats_{t[0]}_{t[1]}") for t in layout.tiles()}
    # one union-find node per linked piece; owner of each linked cell
    node_of = {}
    owner = {}
    for t, s in summaries.items():
        if not s["pieces"]:
            continue
        for p, cell in zip(s["link_piece"].tolist(), s["link_from"].tolist()):
            node_of.setdefault((t, p), len(node_of))
            owner[cell] = node_of[(t, p)]
    parent = list(range(len(node_of)))
    for t, s in summaries.items():
        if not s["pieces"]:
            continue
        for p, cell in zip(s["link_piece"].tolist(), s["link_to"].tolist()):
            a = _find(parent, node_of[(t, p)])
            b = _find(parent, owner[cell])
            if a != b:
                parent[max(a, b)] = min(a, b)
    group_of_root = {}
    groups = []
    for (t, p), x in sorted(node_of.items(), key=lambda kv: kv[1]):
        root = _find(parent, x)
        if root not in group_of_root:
            group_of_root[root] = len(groups) + 1
            groups.append({"group": len(groups) + 1, "box": None, "has_low": False,
                           "tiles": []})
        g = groups[group_of_root[root] - 1]
        s = summaries[t]
        b = s["box"][p]
        g["box"] = b.copy() if g["box"] is None else np.array(
            [min(g["box"][0], b[0]), max(g["box"][1], b[1]),
             min(g["box"][2], b[2]), max(g["box"][3], b[3])])
        g["has_low"] = g["has_low"] or bool(s["has_low"][p])
        g["tiles"].append(t)
    # batches resolved in one window each: the flats whose box fits in the 2 × 2 tiles
    # from the tile of its first cell go together; a larger flat goes alone
    batch_of_group = {}
    batches = []
    for g in groups:
        b = g["box"]
        ti, tj = layout.tile_of(b[0], b[2])
        fits = b[1] < (ti + 2) * layout.tile_rows and b[3] < (tj + 2) * layout.tile_cols
        key = (ti, tj) if fits else ("alone", g["group"])
        if key not in batch_of_group:
            batch_of_group[key] = len(batches) + 1
            batches.append({"batch": len(batches) + 1, "box": b.copy(), "flats": 0})
        batch = batches[batch_of_group[key] - 1]
        batch["box"] = np.array([min(batch["box"][0], b[0]), max(batch["box"][1], b[1]),
                                 min(batch["box"][2], b[2]), max(batch["box"][3], b[3])])
        batch["flats"] += 1
        g["batch"] = batch["batch"]
    for t, s in summaries.items():
        n = s["pieces"]
        bid = np.zeros(n + 1, dtype=np.int64)
        for p in range(1, n + 1):
            x = node_of.get((t, p))
            if x is not None:
                bid[p] = groups[group_of_root[_find(parent, x)] - 1]["batch"]
        store.write_meta(f"flat_groups_{t[0]}_{t[1]}", bid)
    store.write_meta("flat_crossing", batches)
    return len(groups)


def _batch_flats(layout, store, r0, r1, c0, c1, batch):
    """Which cells of a window are flat cells of the crossing flats of ``batch`` (bool),
    built tile part by tile part."""
    read = reader(store)
    out = np.zeros((r1 - r0, c1 - c0), dtype=np.bool_)
    for ti in range(r0 // layout.tile_rows, (r1 - 1) // layout.tile_rows + 1):
        for tj in range(c0 // layout.tile_cols, (c1 - 1) // layout.tile_cols + 1):
            bid = store.read_meta(f"flat_groups_{ti}_{tj}")
            if not (bid == batch).any():
                continue
            tr0, tr1, tc0, tc1 = layout.window(ti, tj)
            rs, re = max(r0, tr0), min(r1, tr1)
            cs, ce = max(c0, tc0), min(c1, tc1)
            part = (slice(rs - tr0, re - tr0), slice(cs - tc0, ce - tc0))
            lab = read("flat_labels", ti, tj)[part]
            raw = read("d8_raw", ti, tj)[part]
            out[rs - r0:re - r0, cs - c0:ce - c0] = (bid[lab] == batch) & (raw == NO_FLOW)
    return out


def _resolve_marked(z, valid, flat, dist_rows):
    """Receivers (window-local, int32) of the ``flat`` cells of a window, every other
    cell counted as draining: :func:`resolve_flats` on the window. Returns them and the
    number of flat cells left without a way out."""
    rec = np.where(valid, np.int32(-1), np.int32(-2)).astype(np.int32, copy=False).ravel()
    rec[flat.ravel()] = NO_FLOW
    unresolved = resolve_flats(np.ascontiguousarray(z, dtype=np.float32),
                               np.ascontiguousarray(valid), rec,
                               np.ascontiguousarray(dist_rows, dtype=np.float64))[1]
    return rec.reshape(z.shape), int(unresolved)


def resolve_crossing_flats(layout: TileLayout, store, batch: dict, dist: np.ndarray,
                           surface: str = "filled") -> int:
    """Step 4 for one batch of flats that cross tile borders (an entry of meta
    ``flat_crossing``). Returns the number of their cells left without a way out."""
    g = batch["batch"]
    r0 = max(int(batch["box"][0]) - 1, 0)
    r1 = min(int(batch["box"][1]) + 2, layout.nrows)
    c0 = max(int(batch["box"][2]) - 1, 0)
    c1 = min(int(batch["box"][3]) + 2, layout.ncols)
    flat = _batch_flats(layout, store, r0, r1, c0, c1, g)
    z = read_window(layout, store, surface, r0, r1, c0, c1, np.float32)
    valid = read_window(layout, store, "valid", r0, r1, c0, c1, np.bool_)
    rec, unresolved = _resolve_marked(z, valid, flat, dist[r0:r1])
    rr, cc = np.nonzero(flat)
    cells = (rr + r0).astype(np.int64) * layout.ncols + cc + c0
    recv = _to_global(rec[rr, cc], r0, c0, c1 - c0, layout.ncols)
    store.write_meta(f"flat_fix_{g}", {"cells": cells, "receivers": recv,
                                       "unresolved": unresolved})
    return unresolved


def receivers_to_azimuth_tile(rec: np.ndarray, layout: TileLayout, ti: int, tj: int):
    """The int16 azimuth codes of a tile of global receivers."""
    r0, r1, c0, c1 = layout.window(ti, tj)
    rows = np.arange(r0, r1, dtype=np.int64)[:, None]
    cols = np.arange(c0, c1, dtype=np.int64)[None, :]
    safe = np.where(rec >= 0, rec, rows * layout.ncols + cols)
    dr = safe // layout.ncols - rows
    dc = safe % layout.ncols - cols
    code = _AZIMUTH[np.clip((dr + 1) * 3 + dc + 1, 0, 8)]
    return np.where(rec == -2, np.int16(-32768),
                    np.where(rec < 0, np.int16(-1), code)).astype(np.int16)


def finish_one_tile(layout: TileLayout, store, ti: int, tj: int, dist: np.ndarray,
                    surface: str = "filled") -> int:
    """Step 5 for one tile: layers ``receivers`` and ``directions``. Returns the number of
    cells of flats inside the tile left without a way out (-1), as ``route()`` counts them
    (those of crossing flats are counted by :func:`resolve_crossing_flats`)."""
    rec = np.array(store.read("d8_raw", ti, tj), dtype=np.int64)
    r0, r1, c0, c1 = layout.window(ti, tj)
    unresolved = 0
    if store.read_meta(f"flats_{ti}_{tj}")["pieces"]:
        gid = store.read_meta(f"flat_groups_{ti}_{tj}")
        lab = store.read("flat_labels", ti, tj)
        flat = rec == NO_FLOW
        inside = flat & (lab > 0) & (gid[lab] == 0)
        if inside.any():
            (w0, w1, v0, v1), (a0, a1, b0, b1) = ring_box(layout, ti, tj)
            z = ring_window(layout, store, surface, ti, tj, np.float32)
            valid = ring_window(layout, store, "valid", ti, tj, np.bool_)
            mark = np.zeros(z.shape, dtype=np.bool_)
            mark[a0:a1, b0:b1] = inside
            wrec, unresolved = _resolve_marked(z, valid, mark, dist[w0:w1])
            wrec = wrec[a0:a1, b0:b1]
            got = _to_global(wrec, w0, v0, v1 - v0, layout.ncols)
            rec[inside] = got[inside]
        for g in np.unique(gid[gid > 0]).tolist():
            fix = store.read_meta(f"flat_fix_{g}")
            cells = fix["cells"]
            r = cells // layout.ncols
            c = cells % layout.ncols
            here = (r >= r0) & (r < r1) & (c >= c0) & (c < c1)
            rec[r[here] - r0, c[here] - c0] = fix["receivers"][here]
        if (rec == NO_FLOW).any():
            raise RuntimeError(f"tile ({ti}, {tj}): flat cells left without a receiver")
    store.write("receivers", ti, tj, rec)
    store.write("directions", ti, tj, receivers_to_azimuth_tile(rec, layout, ti, tj))
    return unresolved


def _d8_task(spec, ti, tj, dist, surface):
    from .engine import open_store

    store = open_store(spec)
    return d8_one_tile(store.layout, store, ti, tj, dist, surface)


def _flat_pieces_task(spec, ti, tj, surface):
    from .engine import open_store

    store = open_store(spec)
    return flat_pieces_one_tile(store.layout, store, ti, tj, surface)


def _finish_task(spec, ti, tj, dist, surface):
    from .engine import open_store

    store = open_store(spec)
    n = finish_one_tile(store.layout, store, ti, tj, dist, surface)
    store.write_meta(f"directions_done_{ti}_{tj}", n)
    return n


def directions_by_tiles(layout: TileLayout, store, dist: np.ndarray,
                        surface: str = "filled", resume: bool = False, engine=None) -> dict:
    """D8 receivers and directions of the ``surface`` layer (by default ``filled``; the
    ``elevation`` layer routes the surface as it is), tile by tile (steps 1-5). Returns a
    summary: tiles, flat cells, flats crossing tile borders, and the cells left without an
    outlet (as ``route()``'s ``cells_without_outlet``).

    The per-tile steps run as tasks on ``engine`` (see
    :func:`basinkit.tiles.fill.fill_by_tiles`), or one after the other here without one;
    the flats crossing tile borders are joined and resolved here, on the client.

    With ``resume=True`` the per-tile and per-batch steps already done in the store (layer
    ``d8_raw``, meta ``flats_TI_TJ``, ``flat_fix_B``, ``directions_done_TI_TJ``) are not
    done again; the inputs must be those of the first run. The flats are always merged
    again (on the client)."""
    from .engine import run_tiles

    dist = np.asarray(dist, dtype=np.float64)
    if dist.shape != (layout.nrows, 8):
        raise ValueError(f"dist must be the ({layout.nrows}, 8) table of neighbour distances, "
                         f"got shape {dist.shape}")
    tiles = layout.tiles()
    done = [t for t in tiles if resume and store.has("d8_raw", *t)]
    nflat = sum(int(np.count_nonzero(store.read("d8_raw", ti, tj) == NO_FLOW))
                for ti, tj in done)
    nflat += sum(run_tiles(engine, store, _d8_task, [t for t in tiles if t not in done],
                           shared=(dist, surface)))
    run_tiles(engine, store, _flat_pieces_task, [
        (ti, tj) for ti, tj in tiles if not (resume and store.has_meta(f"flats_{ti}_{tj}"))],
        shared=(surface,))
    ncross = merge_flats(layout, store)
    unresolved = 0
    for batch in store.read_meta("flat_crossing"):
        name = f"flat_fix_{batch['batch']}"
        if resume and store.has_meta(name):
            unresolved += store.read_meta(name)["unresolved"]
        else:
            unresolved += resolve_crossing_flats(layout, store, batch, dist, surface)
    finished = [t for t in tiles if resume and store.has_meta(f"directions_done_{t[0]}_{t[1]}")]
    unresolved += sum(store.read_meta(f"directions_done_{ti}_{tj}") for ti, tj in finished)
    unresolved += sum(run_tiles(engine, store, _finish_task,
                                [t for t in tiles if t not in finished],
                                shared=(dist, surface)))
    return {"tiles": len(tiles), "flat_cells": nflat, "crossing_flats": ncross,
            "cells_without_outlet": unresolved}
