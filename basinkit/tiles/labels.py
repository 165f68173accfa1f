"""Catchment labels of many outlets by tiles: every cell takes the label of the nearest
outlet downstream, the labels renumbered in depth-first order of the outlet tree, exactly
as :func:`basinkit.analysis.catchments.delineate` numbers them.

Layers read: ``directions``. Layer written: ``catchment_labels`` (int32, 0: drains to no
outlet, or nodata).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _flow_kernels as K
from ..analysis.catchments import outlet_tree
from ..errors import InputError, OutletError
from .accumulate import TileFlow, _check_layout, by_tile, take
from .engine import Engine, check_settings, digest, open_store

__all__ = ["catchment_labels", "TiledCatchments"]


@dataclass
class TiledCatchments:
    """Result of :func:`catchment_labels` (the labels themselves are in the store).

    Attributes
    ----------
    layer : str
        Layer of the store holding the labels.
    label : ndarray of int32
        Label of every outlet given, in the order given (outlets sharing a cell share
        a label).
    subtree_size : ndarray of int64 (n + 1,)
        By label: the outlets in the subtree, itself included; the full catchment of
        label ``L`` is the cells with ``L <= label <= L + subtree_size[L] - 1``.
    downstream : ndarray of int64 (n + 1,)
        By label: the label of the next outlet downstream (0 at a root of the tree).
    computed : int
        Tiles whose labels were computed in this run (the others by an earlier one).
    """

    layer: str
    label: np.ndarray
    subtree_size: np.ndarray
    downstream: np.ndarray
    computed: int = 0


def _tile_labels(f, cells, labels):
    local = f.to_local(cells)
    if (f.rl[local] == -2).any():
        return None, local
    return K.label_tile(f.rl, f.stack, local, np.asarray(labels, dtype=np.int64)), local


def _links_task(spec, ti, tj, directions, layer, cells, labels):
    """Pass 1 of a tile: what every edge cell's and every outlet's water meets in the
    tile (a label, nothing, or the cell of another tile it enters)."""
    store = open_store(spec)
    name = f"{layer}.links_{ti}_{tj}"
    if store.has_meta(name):
        return store.read_meta(name)
    f = TileFlow(store, directions, ti, tj)
    lab, local = _tile_labels(f, cells, labels)
    if lab is None:
        return {"nodata_outlets": cells[f.rl[local] == -2]}
    border = K.border_cells(f.rl, f.h, f.w)
    bval = lab[border]
    btgt = np.where(bval < 0, f.tgt[np.maximum(-bval - 1, 0)], -1)
    # the water of an outlet cell, from its receiver on
    rec = f.rl[local]
    dval = np.where(rec >= 0, lab[np.maximum(rec, 0)], 0)
    dtgt = np.where(dval < 0, f.tgt[np.maximum(-dval - 1, 0)], -1)
    dtgt = np.where(rec == -3, f.tgt[local], dtgt)
    dval = np.where(rec == -3, -1, dval)
    exits = np.flatnonzero(f.rl == -3)
    links = {"border_cell": f.to_global(border), "border_value": np.maximum(bval, -1),
             "border_target": btgt, "outlet_cell": np.asarray(cells, dtype=np.int64),
             "outlet_value": np.maximum(dval, -1), "outlet_target": dtgt,
             "exit_cell": f.to_global(exits), "exit_target": f.tgt[exits],
             "bad_codes": int(f.bad)}
    store.write_meta(name, links)
    return links


def _labels_task(spec, ti, tj, cells, labels, exit_cells, exit_labels, directions, layer,
                 lut):
    """Pass 2 of a tile: its labels, the labels beyond its edges given, renumbered."""
    store = open_store(spec)
    if store.has(layer, ti, tj):
        return False
    f = TileFlow(store, directions, ti, tj)
    lab, _ = _tile_labels(f, cells, labels)
    beyond = np.zeros(f.rl.shape[0], dtype=np.int64)
    beyond[f.to_local(exit_cells)] = exit_labels
    out = K.finish_labels(lab, beyond, lut)
    store.write(layer, ti, tj, out.reshape(f.h, f.w))
    return True


def _resolve(links):
    """The pass on the client: the label every edge cell's water meets (border cells in
    sorted order), and a lookup from grid cells to them."""
    bc = np.concatenate([lk["border_cell"] for lk in links])
    order = np.argsort(bc, kind="stable")
    keys = bc[order]
    val = np.concatenate([lk["border_value"] for lk in links])[order]
    tgt = np.concatenate([lk["border_target"] for lk in links])[order]
    nxt = np.where(val < 0, K.lookup(keys, tgt), -1)
    res = K.resolve_labels(val.astype(np.int64), nxt)

    def beyond(cells):  # the label a water entering these cells meets
        pos = K.lookup(keys, np.asarray(cells, dtype=np.int64))
        return take(res, pos, 0)

    return beyond


def catchment_labels(layout, store, outlet_cells, *, directions: str = "directions",
                     layer: str = "catchment_labels", scheduler=None,
                     workers: int | None = None) -> TiledCatchments:
    """Label every cell of a grid held as tiles with the nearest outlet downstream.

    Parameters
    ----------
    layout : TileLayout
    store : tile store
        Holding the ``directions`` layer (D8 azimuths); receives ``layer``.
    outlet_cells : array of int
        Flat grid cells (``row * ncols + col``) of the outlets, placed already (snapping
        needs upstream areas: see :func:`basinkit.tiles.flow_accumulation`).
    directions, layer : str
        Layer names.
    scheduler, workers
        See :func:`basinkit.tiles.flow_accumulation`.

    Returns
    -------
    TiledCatchments

    Raises
    ------
    OutletError
        No outlets, or an outlet outside the grid or on nodata.
    InputError
        A store holding labels of other outlets under the same layer name.

    Notes
    -----
    Outlets sharing a cell share one label (the first of them sets the order). Labels
    are numbered 1..n in the order of the outlets; a forward pass over each tile's stack
    gives every cell the label of the nearest outlet downstream within the tile, or the
    cell of another tile its water enters. On the client the chains of those cells are
    followed once each, which gives the next outlet downstream of every outlet, hence the
    outlet tree and its depth-first renumbering (that of :func:`delineate`, so a full
    catchment is a contiguous label range). A second pass over the tiles writes the
    final labels. Labels equal those of the in-memory path cell for cell. Each tile is
    read twice; the client holds border cells and per-outlet arrays only.

    References
    ----------
    Barnes, R. (2017). Parallel non-divergent flow accumulation for trillion cell digital
    elevation models on desktops or clusters. Environmental Modelling & Software
    92:202-212 (the border links between tiles).
    Braun, J., Willett, S. D. (2013). Geomorphology 180-181:170-179 (the stack).
    """
    _check_layout(layout, store)
    given = np.asarray(outlet_cells, dtype=np.int64).ravel()
    if given.size == 0:
        raise OutletError("no outlets given; give at least one outlet cell")
    if given.min() < 0 or given.max() >= layout.nrows * layout.ncols:
        raise OutletError("an outlet cell lies outside the grid; give flat indices "
                          "row * ncols + col of cells inside it")
    _, first, inverse = np.unique(given, return_index=True, return_inverse=True)
    primary = np.sort(first)
    cells = given[primary]
    n = cells.size
    check_settings(store, f"{layer}.settings", {"directions": directions,
                                                "outlets": digest(cells)})
    # labels 1..n in the order of first appearance; srt[j]: the outlet j-th by cell
    srt = np.argsort(cells, kind="stable")
    sorted_cells = cells[srt]
    label_of_given = srt[np.searchsorted(sorted_cells, given)] + 1
    per_tile = by_tile(layout, cells, np.arange(1, n + 1, dtype=np.int64))
    tiles = layout.tiles()
    none = (np.zeros(0, np.int64), np.zeros(0, np.int64))
    with Engine(scheduler, workers) as eng:
        spec = eng.spec(store)
        links = eng.map(_links_task, spec, [(ti, tj, (directions, layer,
                                                      *per_tile.get((ti, tj), none)))
                                            for ti, tj in tiles])
        on_nodata = [c for lk in links for c in lk.get("nodata_outlets", ())]
        if on_nodata:
            r, c = divmod(int(on_nodata[0]), layout.ncols)
            raise OutletError(f"{len(on_nodata)} outlet(s) lie on nodata cells (the first at "
                              f"row {r}, column {c}); move them onto the DEM")
        bad = sum(lk["bad_codes"] for lk in links)
        if bad:
            raise InputError(f"the {directions!r} tiles hold {bad} values that are not D8 "
                             "azimuths; recompute the directions")
        beyond = _resolve(links)
        # next outlet downstream of every outlet (old labels)
        down0 = np.zeros(n, dtype=np.int64)
        for lk in links:
            v = lk["outlet_value"]
            d = np.where(v >= 0, v, beyond(lk["outlet_target"]))
            down0[srt[np.searchsorted(sorted_cells, lk["outlet_cell"])]] = d
        lut, size, down = outlet_tree(down0)
        lut = np.ascontiguousarray(lut, dtype=np.int32)
        items = []
        for (ti, tj), lk in zip(tiles, links):
            oc, ol = per_tile.get((ti, tj), none)
            items.append((ti, tj, (oc, ol, lk["exit_cell"], beyond(lk["exit_target"]))))
        done = eng.map(_labels_task, spec, items, shared=(directions, layer, lut))
    return TiledCatchments(layer, lut[label_of_given].astype(np.int32), size, down,
                           int(sum(bool(x) for x in done)))
