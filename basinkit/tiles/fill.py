"""Exact depression filling by tiles, out of core (Barnes 2016).

Barnes, R. (2016). Parallel Priority-Flood depression filling for trillion cell digital
elevation models. Computers & Geosciences 96:56-68. The kernels are those of the threaded
in-memory fill (:mod:`basinkit.conditioning._tiled_fill`); here each tile is a separate
array read from a tile store, with the 1-cell ring of its neighbours, so only one tile (and
the label graph) is ever in memory:

1. :func:`flood_one_tile` -- Priority-Flood of the tile on its own, its exits and its border
   cells as labelled seeds; writes the locally filled tile and the labels, and keeps the
   edges between labels (meta ``fill_edges_TI_TJ``).
2. :func:`link_one_tile` -- edges between the tile's border cells and those of the tiles
   after it (meta ``fill_links_TI_TJ``).
3. :func:`solve_fill_levels` (on the client) -- the label graph flooded from the outside;
   each tile's share of the levels goes to meta ``fill_levels_TI_TJ``.
4. :func:`raise_one_tile` -- each cell raised to the level of its label: layer ``filled``.

The result equals :func:`basinkit.conditioning.fill_depressions` (``epsilon=0``, the fill
``route(conditioning="fill")`` uses) cell for cell.

Layers read: ``elevation`` (float32, NaN on nodata), ``valid`` (bool), and ``base_level``
(bool, optional: cells that are exits besides the grid edge and nodata; used when the meta
``base_level`` is True, or, without that meta, when the layer is there).
Layers written: ``fill_local`` (float32) and ``fill_labels`` (uint16), working layers, and
``filled`` (float32, NaN on nodata).

Each per-tile function is a pure function of ``(layout, store, ti, tj)`` that reads and
writes only through the store, so each can run as a task of any engine; :func:`fill_by_tiles`
runs them in a loop.
"""

from __future__ import annotations

import numpy as np

from ..conditioning._fill import seed_mask
from ..conditioning._tiled_fill import (FIRST_EDGE_TABLE, _OUTSIDE, flood_graph, flood_tile,
                                        raise_tile)
from ._kernels import border_links
from .layout import TileLayout
from .window import has_layer, ring_box, ring_window

__all__ = ["fill_by_tiles", "flood_one_tile", "link_one_tile", "solve_fill_levels",
           "raise_one_tile", "exit_window", "MAX_TILE"]

#: largest tile side: a tile's border labels must fit in 16 bits
MAX_TILE = 16000


def check_layout(layout: TileLayout) -> None:
    if layout.tile_rows > MAX_TILE or layout.tile_cols > MAX_TILE:
        raise ValueError(f"tiles of at most {MAX_TILE} × {MAX_TILE} cells, got "
                         f"{layout.tile_rows} × {layout.tile_cols}")


def exit_window(layout: TileLayout, store, ti: int, tj: int, layer: str = "elevation"):
    """The tile with its ring: ``layer`` as float32, validity, base level, and the exit
    cells (valid cells on the grid edge, next to nodata, or base level; exact for the
    tile's own cells). Returns (ring box, tile box, z, valid, base_level, exits)."""
    wbox, tbox = ring_box(layout, ti, tj)
    z = np.ascontiguousarray(ring_window(layout, store, layer, ti, tj, np.float32))
    valid = np.ascontiguousarray(ring_window(layout, store, "valid", ti, tj, np.bool_))
    if (store.read_meta("base_level") if store.has_meta("base_level")
            else has_layer(store, "base_level")):
        bl = np.ascontiguousarray(ring_window(layout, store, "base_level", ti, tj, np.bool_))
        bl &= valid
    else:
        bl = np.zeros(valid.shape, dtype=np.bool_)
    return wbox, tbox, z, valid, bl, seed_mask(valid, bl)


def flood_one_tile(layout: TileLayout, store, ti: int, tj: int) -> int:
    """Stage 1 for one tile; returns its number of labels."""
    _, (a0, a1, b0, b1), z, valid, _, seeds = exit_window(layout, store, ti, tj)
    labels = np.zeros(z.shape, dtype=np.uint16)
    cap = FIRST_EDGE_TABLE
    while True:
        ea, eb, ew, nlab, ok = flood_tile(z, valid, seeds, labels, a0, a1, b0, b1, cap)
        if ok:
            break
        cap *= 4
    store.write("fill_local", ti, tj, z[a0:a1, b0:b1])
    store.write("fill_labels", ti, tj, labels[a0:a1, b0:b1])
    store.write_meta(f"fill_edges_{ti}_{tj}", {"a": ea, "b": eb, "w": ew, "nlab": int(nlab)})
    return int(nlab)


def link_one_tile(layout: TileLayout, store, ti: int, tj: int) -> int:
    """Stage 2 for one tile (after stage 1 of it and its neighbours); returns the number of
    edges found."""
    (w0, _, v0, _), (a0, a1, b0, b1) = ring_box(layout, ti, tj)
    zl = ring_window(layout, store, "fill_local", ti, tj, np.float32)
    lab = ring_window(layout, store, "fill_labels", ti, tj, np.uint16)
    valid = ring_window(layout, store, "valid", ti, tj, np.bool_)
    la, tb, lb, w = border_links(zl, valid, lab, a0, a1, b0, b1, w0, v0, layout.tile_rows,
                                 layout.tile_cols, layout.n_tile_cols,
                                 ti * layout.n_tile_cols + tj)
    store.write_meta(f"fill_links_{ti}_{tj}", {"a": la, "tile_b": tb, "b": lb, "w": w})
    return int(la.size)


def solve_fill_levels(layout: TileLayout, store) -> int:
    """Stage 3, on the client: the label graph of all tiles, flooded from the outside.
    Returns the number of graph nodes."""
    tiles = layout.tiles()
    edges = [store.read_meta(f"fill_edges_{ti}_{tj}") for ti, tj in tiles]
    # graph node of tile t's label l (l >= 2): base[t] + l - 1; node 0 is the outside
    base = np.zeros(len(tiles), dtype=np.int64)
    total = 1
    for t, e in enumerate(edges):
        base[t] = total - 1
        total += e["nlab"] - 1

    def node(t, lab):
        lab = np.asarray(lab, dtype=np.int64)
        return np.where(lab == _OUTSIDE, 0, lab + base[t] - 1)

    ga = [node(t, e["a"]) for t, e in enumerate(edges)]
    gb = [node(t, e["b"]) for t, e in enumerate(edges)]
    gw = [np.asarray(e["w"], dtype=np.float32) for e in edges]
    del edges
    for t, (ti, tj) in enumerate(tiles):
        x = store.read_meta(f"fill_links_{ti}_{tj}")
        ga.append(node(t, x["a"]))
        other = np.asarray(x["tile_b"], dtype=np.int64)
        b = np.asarray(x["b"], dtype=np.int64)
        gb.append(np.where(b == _OUTSIDE, 0, b + base[other] - 1))
        gw.append(np.asarray(x["w"], dtype=np.float32))
    level = flood_graph(total, np.concatenate(ga), np.concatenate(gb), np.concatenate(gw))
    for t, (ti, tj) in enumerate(tiles):
        nlab = (base[t + 1] + 1 if t + 1 < len(tiles) else total) - base[t]
        # the tile's levels indexed by its own label (0 and 1 unused)
        own = np.full(nlab + 1, -np.inf, dtype=np.float32)
        own[2:] = level[base[t] + 1:base[t] + nlab]
        store.write_meta(f"fill_levels_{ti}_{tj}", own)
    return int(total)


def raise_one_tile(layout: TileLayout, store, ti: int, tj: int) -> None:
    """Stage 4 for one tile: the layer ``filled``."""
    z = np.array(store.read("fill_local", ti, tj), dtype=np.float32)
    lab = np.ascontiguousarray(store.read("fill_labels", ti, tj))
    own = store.read_meta(f"fill_levels_{ti}_{tj}")
    h, w = z.shape
    raise_tile(z, lab, 0, h, 0, w, own, 1)
    store.write("filled", ti, tj, z)


def _flood_task(spec, ti, tj):
    from .engine import open_store

    store = open_store(spec)
    return flood_one_tile(store.layout, store, ti, tj)


def _link_task(spec, ti, tj):
    from .engine import open_store

    store = open_store(spec)
    return link_one_tile(store.layout, store, ti, tj)


def _raise_task(spec, ti, tj):
    from .engine import open_store

    store = open_store(spec)
    return raise_one_tile(store.layout, store, ti, tj)


def fill_by_tiles(layout: TileLayout, store, resume: bool = False, engine=None) -> dict:
    """Fill every depression of the ``elevation`` layer exactly, tile by tile; writes the
    ``filled`` layer. Returns a summary (tiles, graph nodes).

    The per-tile steps run as tasks on ``engine`` (:class:`~basinkit.tiles.engine.Engine`:
    Dask's threads or a dask.distributed cluster; the store must then carry its
    ``layout``), or one after the other in this thread without one; the label graph is
    solved here, on the client.

    With ``resume=True`` a tile whose step is already done in the store (its output written
    last: meta ``fill_edges_TI_TJ``, ``fill_links_TI_TJ``, layer ``filled``) is not done
    again, so a killed run on a :class:`~basinkit.io.tile_folder.TileFolder` goes on where
    it stopped; the inputs must be those of the first run. The label graph is always
    solved again (on the client, from the tiles' small outputs)."""
    from .engine import run_tiles

    check_layout(layout)
    tiles = layout.tiles()
    run_tiles(engine, store, _flood_task, [
        (ti, tj) for ti, tj in tiles
        if not (resume and store.has_meta(f"fill_edges_{ti}_{tj}"))])
    run_tiles(engine, store, _link_task, [
        (ti, tj) for ti, tj in tiles
        if not (resume and store.has_meta(f"fill_links_{ti}_{tj}"))])
    nodes = solve_fill_levels(layout, store)
    run_tiles(engine, store, _raise_task, [
        (ti, tj) for ti, tj in tiles if not (resume and store.has("filled", ti, tj))])
    return {"tiles": len(tiles), "graph_nodes": nodes}
