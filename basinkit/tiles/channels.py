"""The channel network by tiles: channel cells (upstream area at or above a threshold),
their Strahler order and Shreve magnitude, equal to
:func:`basinkit.analysis.channels.extract_channels` cell for cell.

Layers read: ``directions`` and ``upstream_area_m2`` (from
:func:`basinkit.tiles.flow_accumulation`). Layers written: ``strahler_order`` (int16, 0 off
the network) and ``shreve_magnitude`` (int64, 0 off the network).
"""

from __future__ import annotations

import numpy as np

from . import _flow_kernels as K
from ..errors import InputError
from .accumulate import TileFlow, _check_layout, by_tile
from .engine import Engine, check_settings, open_store

__all__ = ["channel_orders", "CHANNEL_LAYERS"]

CHANNEL_LAYERS = ("strahler_order", "shreve_magnitude")


def _mask(store, area_layer, ti, tj, min_area):
    if not store.has(area_layer, ti, tj):
        raise InputError(f"the tile store has no tile ({ti}, {tj}) of the {area_layer!r} "
                         "layer; run flow_accumulation first")
    a = np.asarray(store.read(area_layer, ti, tj), dtype=np.float64).ravel()
    with np.errstate(invalid="ignore"):
        return a >= min_area


def _graph_task(spec, ti, tj, directions, area_layer, min_area, layers):
    """Pass 1 of a tile: its channel graph reduced to the cells other tiles can change
    (see :func:`basinkit.tiles._flow_kernels.order_graph`)."""
    store = open_store(spec)
    name = f"{layers[0]}.graph_{ti}_{tj}"
    if store.has_meta(name):
        return store.read_meta(name)
    f = TileFlow(store, directions, ti, tj)
    mask = _mask(store, area_layer, ti, tj, min_area)
    (nodes, top, ntop, nloc, mag, e_src, e_dst, e_tab, e_mag,
     too_high) = K.order_graph(f.rl, f.tgt, f.stack, mask, f.h, f.w, f.r0, f.c0, f.ncols)
    g = {"node_cell": f.to_global(nodes), "top": top, "ntop": ntop, "nloc": nloc,
         "mag": mag, "edge_src": f.to_global(nodes[e_src]), "edge_dst": e_dst,
         "edge_table": e_tab, "edge_mag": e_mag, "too_high": bool(too_high)}
    store.write_meta(name, g)
    return g


def _orders_task(spec, ti, tj, node_cells, node_order, node_shreve, directions, area_layer,
                 min_area, layers):
    """Pass 2 of a tile: orders and magnitudes, those of its graph's nodes given."""
    store = open_store(spec)
    if all(store.has(layer, ti, tj) for layer in layers):
        return False
    f = TileFlow(store, directions, ti, tj)
    mask = _mask(store, area_layer, ti, tj, min_area)
    order, shreve = K.orders_tile(f.rl, f.stack, mask, f.to_local(node_cells),
                                  node_order, node_shreve)
    store.write(layers[0], ti, tj, order.reshape(f.h, f.w))
    store.write(layers[1], ti, tj, shreve.reshape(f.h, f.w))
    return True


def join_graphs(graphs):
    """The pass on the client: order and magnitude of every node of the joined graph.
    Returns (node cells, orders, magnitudes)."""
    def cat(k, dtype=np.int64, shape=(0,)):
        parts = [g[k] for g in graphs]
        return np.concatenate(parts) if parts else np.zeros(shape, dtype)

    cells = cat("node_cell")
    order = np.argsort(cells, kind="stable")
    keys = cells[order]
    src = order[K.lookup(keys, cat("edge_src"))]
    dpos = K.lookup(keys, cat("edge_dst"))
    dst = np.where(dpos >= 0, order[np.maximum(dpos, 0)], -1)
    tab = cat("edge_table", np.uint8, (0, K.ORDER_TABLE))
    o, s = K.solve_orders(cat("top"), cat("ntop"), cat("nloc"), cat("mag"), src, dst,
                          np.ascontiguousarray(tab, dtype=np.uint8), cat("edge_mag"))
    return cells, o, s


def channel_orders(layout, store, min_area_m2, *, directions: str = "directions",
                   area: str = "upstream_area_m2", layers=CHANNEL_LAYERS,
                   scheduler=None, workers: int | None = None) -> dict:
    """Channel cells, Strahler order and Shreve magnitude of a grid held as tiles.

    Parameters
    ----------
    layout : TileLayout
    store : tile store
        Holding ``directions`` and ``area``; receives ``strahler_order`` and
        ``shreve_magnitude``.
    min_area_m2 : float
        A cell is a channel cell when its upstream area is at least this (m²).
    directions, area : str
        Layer names.
    layers : (str, str)
        Names of the layers written: Strahler order, Shreve magnitude (another pair keeps
        a network of another threshold in the same store).
    scheduler, workers
        See :func:`basinkit.tiles.flow_accumulation`.

    Returns
    -------
    dict
        ``tiles``, ``computed`` (tiles of the second pass computed now), ``nodes`` (channel
        cells whose orders were joined on the client).

    Notes
    -----
    Strahler (1957) order and Shreve (1966) magnitude are folds down the flow like
    accumulation, but the order is not a sum, so Barnes's (2017) join of tiles by what
    crosses their edges is carried further: pass 1 keeps, per tile, only the channel cells
    another tile can change (edge cells and confluences of their paths) and, between
    them, the effect of each chain of cells as a table of orders and an added magnitude.
    The client solves that small graph in topological order; pass 2 computes every
    tile's cells with the values of those cells given. Since upstream area grows
    downstream, the cells at or above the threshold form a network continuous down to
    the exits, as in :func:`extract_channels`. Orders and magnitudes equal the in-memory
    ones wherever the areas do (see :func:`flow_accumulation` on areas that are not sums
    of exact terms: a cell whose area equals the threshold to the last bits could fall on
    the other side).

    References
    ----------
    Strahler, A. N. (1957). Transactions, American Geophysical Union 38:913-920.
    Shreve, R. L. (1966). Journal of Geology 74:17-37.
    Barnes, R. (2017). Environmental Modelling & Software 92:202-212.

    Examples
    --------
    The V valley of :func:`extract_channels`' example, in tiles of 2 × 2 cells: the same
    orders down its axis (the cells with 500 m² or more upstream).

    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.tiles import MemoryTiles, TileLayout, flow_accumulation
    >>> z = np.add.outer(np.arange(6.0, 0, -1), np.abs(np.arange(5.0) - 2))
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> layout = TileLayout.square(6, 5, 2)
    >>> store = MemoryTiles(layout)
    >>> for (ti, tj), part in layout.split(fm.direction_d8()).items():
    ...     store.write("directions", ti, tj, part)
    >>> _ = flow_accumulation(layout, store, fm.terrain.geometry.area)
    >>> _ = channel_orders(layout, store, 500)
    >>> layout.join({t: store.read("strahler_order", *t) for t in layout.tiles()})[:, 2].tolist()
    [0, 0, 1, 1, 1, 1]
    """
    _check_layout(layout, store)
    try:
        thr = float(min_area_m2)
    except (TypeError, ValueError):
        raise InputError(f"the channel threshold must be an area in m², got "
                         f"{min_area_m2!r}") from None
    if not thr > 0:
        raise InputError(f"the channel threshold must be a positive area, got {min_area_m2!r}")
    layers = tuple(str(x) for x in layers)
    if len(layers) != 2 or layers[0] == layers[1]:
        raise InputError(f"give two different layer names for the orders, got {layers!r}")
    check_settings(store, f"{layers[0]}.settings",
                   {"directions": directions, "area": area, "min_area_m2": thr,
                    "layers": layers})
    tiles = layout.tiles()
    with Engine(scheduler, workers) as eng:
        spec = eng.spec(store)
        graphs = eng.map(_graph_task, spec, [(ti, tj, ()) for ti, tj in tiles],
                         shared=(directions, area, thr, layers))
        if any(g["too_high"] for g in graphs):
            raise InputError("Strahler orders above 60 met: the directions are damaged")
        cells, order, shreve = join_graphs(graphs)
        per_tile = by_tile(layout, cells, order.astype(np.int16), shreve)
        empty = (np.zeros(0, np.int64), np.zeros(0, np.int16), np.zeros(0, np.int64))
        done = eng.map(_orders_task, spec,
                       [(ti, tj, per_tile.get((ti, tj), empty)) for ti, tj in tiles],
                       shared=(directions, area, thr, layers))
    return {"tiles": len(tiles), "computed": int(sum(bool(x) for x in done)),
            "nodes": int(cells.size)}
