"""The per-catchment table from tiles: areas, cell counts, elevations and the outlet tree
of the catchments labelled by :func:`basinkit.tiles.catchment_labels`, with the columns and
values of :func:`basinkit.analysis.catchments.delineate`'s table (those that need no
polygon).

Layers read: the labels, ``directions`` (for nodata) and optionally an elevation layer.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numba import njit

from ..analysis.catchments import ACRE_M2, SQUARE_MILE_M2, carry_up
from ..errors import InputError
from . import _flow_kernels as K
from .accumulate import _check_layout
from .engine import Engine, open_store

__all__ = ["catchment_table"]


@njit(cache=True, nogil=True)
def _summary(idx, nlab, valid, z, has_z, row_area, r0, c0, nrows, ncols):
    """Per label index of a tile: count, area, elevation sum/count/min/max, and whether a
    cell lies on the grid edge or next to nodata inside the tile."""
    h, w = valid.shape
    count = np.zeros(nlab, dtype=np.int64)
    area = np.zeros(nlab, dtype=np.float64)
    zsum = np.zeros(nlab, dtype=np.float64)
    zcount = np.zeros(nlab, dtype=np.int64)
    zmin = np.full(nlab, np.inf)
    zmax = np.full(nlab, -np.inf)
    touches = np.zeros(nlab, dtype=np.bool_)
    for r in range(h):
        gr = r0 + r
        for c in range(w):
            k = idx[r, c]
            if k < 0:
                continue
            count[k] += 1
            area[k] += row_area[r]
            if has_z:
                v = z[r, c]
                if np.isfinite(v):
                    zsum[k] += v
                    zcount[k] += 1
                    if v < zmin[k]:
                        zmin[k] = v
                    if v > zmax[k]:
                        zmax[k] = v
            if touches[k]:
                continue
            gc = c0 + c
            if gr == 0 or gr == nrows - 1 or gc == 0 or gc == ncols - 1:
                touches[k] = True
                continue
            for n in range(8):
                rr = r + K.DROW[n]
                cc = c + K.DCOL[n]
                if rr >= 0 and rr < h and cc >= 0 and cc < w and not valid[rr, cc]:
                    touches[k] = True
                    break
    return count, area, zsum, zcount, zmin, zmax, touches


def _table_task(spec, ti, tj, row_area, layer, directions, elevation, nlab):
    store = open_store(spec)
    lay = store.layout
    r0, r1, c0, c1 = lay.window(ti, tj)
    for name in (layer, directions) + ((elevation,) if elevation else ()):
        if not store.has(name, ti, tj):
            raise InputError(f"the tile store has no tile ({ti}, {tj}) of the {name!r} layer")
    lab = np.asarray(store.read(layer, ti, tj)).astype(np.int64)
    valid = np.asarray(store.read(directions, ti, tj)) != -32768
    lab = np.where(valid, lab, 0)
    if lab.size and (lab.min() < 0 or lab.max() > nlab):
        raise InputError(f"the {layer!r} layer holds labels the outlets do not have; label "
                         "the catchments again")
    idx = lab - 1  # label 0 -> -1 (left out)
    if elevation:
        z = np.asarray(store.read(elevation, ti, tj), dtype=np.float64)
    else:
        z = np.zeros((1, 1))
    stats = _summary(idx, nlab, valid, z, bool(elevation), row_area, r0, c0,
                     lay.nrows, lay.ncols)
    seen = np.flatnonzero(stats[0])  # the labels present, compacted
    labels = seen + 1
    stats = tuple(a[seen] for a in stats)
    h, w = lab.shape
    edge = np.zeros((h, w), dtype=bool)
    edge[[0, -1], :] = True
    edge[:, [0, -1]] = True
    rr, cc = np.nonzero(edge)
    return {"labels": labels, "stats": stats,
            "border_cell": (r0 + rr) * np.int64(lay.ncols) + c0 + cc,
            "border_valid": valid[rr, cc], "border_label": lab[rr, cc]}


def _touches_across(layout, parts):
    """Labels with a cell next to a nodata cell of another tile."""
    cells = np.concatenate([p["border_cell"] for p in parts])
    valid = np.concatenate([p["border_valid"] for p in parts])
    lab = np.concatenate([p["border_label"] for p in parts])
    order = np.argsort(cells, kind="stable")
    keys = cells[order]
    sel = lab > 0
    c, L = cells[sel], lab[sel]
    r, col = np.divmod(c, layout.ncols)
    hit = np.zeros(c.size, dtype=bool)
    for k in range(8):
        r2, c2 = r + K.DROW[k], col + K.DCOL[k]
        inside = (r2 >= 0) & (r2 < layout.nrows) & (c2 >= 0) & (c2 < layout.ncols)
        other = inside & ((r2 // layout.tile_rows != r // layout.tile_rows)
                          | (c2 // layout.tile_cols != col // layout.tile_cols))
        pos = K.lookup(keys, np.where(other, r2 * layout.ncols + c2, -1))
        hit |= (pos >= 0) & ~valid[order][np.maximum(pos, 0)]
    return np.unique(L[hit])


def catchment_table(layout, store, catchments, row_area=None, *, outlet_ids=None,
                    outlet_cells=None, directions: str = "directions",
                    elevation: str | None = None, scheduler=None,
                    workers: int | None = None) -> pd.DataFrame:
    """The per-catchment table of outlets labelled by tiles.

    Parameters
    ----------
    layout : TileLayout
    store : tile store
        Holding the labels (``catchments.layer``), ``directions`` and, when given,
        ``elevation`` (the DEM as read, NaN or nodata where missing).
    catchments : TiledCatchments
        From :func:`basinkit.tiles.catchment_labels`.
    row_area : array of float (nrows,), optional
        Cell area of each row, m² (default: from the store's metadata).
    outlet_ids : sequence of str, optional
        Ids of the outlets, in the order given to :func:`catchment_labels` (default
        ``"1"``, ``"2"``, ...).
    outlet_cells : array of int, optional
        Their flat cells, copied into a ``cell`` column.

    Returns
    -------
    pandas.DataFrame
        One row per outlet, in the order given: ``outlet_id``, ``label``, ``area_m2``,
        ``area_km2``, ``area_ha``, ``area_acres``, ``area_mi2``, ``cell_count``,
        ``subcatchment_area_m2``, ``subcatchment_cell_count``, ``upstream_outlet_count``,
        ``upstream_outlet_ids``, ``downstream_outlet_id``, ``touches_edge`` and, with an
        elevation layer, ``elevation_min_m``, ``elevation_max_m``, ``elevation_mean_m``,
        ``relief_m``: the values of :func:`delineate`'s columns of the same names.

    Notes
    -----
    One pass over the tiles sums each label's cells, areas and elevations; the client
    adds the tiles' sums, marks the labels with a cell next to nodata across a tile edge
    (from the tiles' edge cells), and aggregates every subtree of the outlet tree (labels
    are depth-first, so children come after their parent). Sums of areas and elevations
    are taken in another order than in memory: equal where every sum is exact (equal
    cell areas, integer elevations), otherwise within rounding (see
    :func:`flow_accumulation`).
    """
    _check_layout(layout, store)
    if row_area is None:
        from .accumulate import store_georeference

        row_area = store_georeference(layout, store)[0].area
    row_area = np.ascontiguousarray(row_area, dtype=np.float64)
    if row_area.shape != (layout.nrows,):
        raise InputError(f"row_area needs one cell area per row ({layout.nrows}), got shape "
                         f"{row_area.shape}")
    L = np.asarray(catchments.label, dtype=np.int64)
    n = catchments.subtree_size.size - 1
    ids = (np.array([str(i + 1) for i in range(L.size)], dtype=object) if outlet_ids is None
           else np.asarray([str(x) for x in outlet_ids], dtype=object))
    if ids.size != L.size:
        raise InputError(f"{ids.size} outlet ids for {L.size} outlets")
    tiles = layout.tiles()
    with Engine(scheduler, workers) as eng:
        spec = eng.spec(store)

        def rows(ti, tj):
            r0, r1, _, _ = layout.window(ti, tj)
            return row_area[r0:r1]

        parts = eng.map(_table_task, spec, [(ti, tj, (rows(ti, tj),)) for ti, tj in tiles],
                        shared=(catchments.layer, directions, elevation, n))
    count = np.zeros(n + 1, dtype=np.int64)
    area = np.zeros(n + 1)
    zsum = np.zeros(n + 1)
    zcount = np.zeros(n + 1, dtype=np.int64)
    zmin = np.full(n + 1, np.inf)
    zmax = np.full(n + 1, -np.inf)
    touches = np.zeros(n + 1, dtype=bool)
    for p in parts:
        lab = p["labels"]
        c, a, zs, zc, zlo, zhi, t = p["stats"]
        count[lab] += c
        area[lab] += a
        zsum[lab] += zs
        zcount[lab] += zc
        zmin[lab] = np.minimum(zmin[lab], zlo)
        zmax[lab] = np.maximum(zmax[lab], zhi)
        touches[lab] |= t
    touches[_touches_across(layout, parts)] = True
    sub_area, sub_count = area.copy(), count.copy()
    down = np.asarray(catchments.downstream, dtype=np.int64)
    carry_up(down, n, sums=(area, count, zsum, zcount), lows=(zmin,), highs=(zmax,),
             flags=(touches,))
    size = np.asarray(catchments.subtree_size, dtype=np.int64)
    ids_by_lab = np.full(n + 1, "", dtype=object)
    for lab, oid in zip(L, ids):  # outlets sharing a cell: "a;b"
        ids_by_lab[lab] = f"{ids_by_lab[lab]};{oid}" if ids_by_lab[lab] else oid
    per_label = np.concatenate([[0], np.cumsum(np.bincount(L, minlength=n + 1)[1:])])
    tab = pd.DataFrame({"outlet_id": ids, "label": L.astype(np.int32)})
    if outlet_cells is not None:
        tab["cell"] = np.asarray(outlet_cells, dtype=np.int64)
    tab["area_m2"] = area[L]
    tab["area_km2"] = area[L] / 1e6
    tab["area_ha"] = area[L] / 1e4
    tab["area_acres"] = area[L] / ACRE_M2
    tab["area_mi2"] = area[L] / SQUARE_MILE_M2
    tab["cell_count"] = count[L]
    tab["subcatchment_area_m2"] = sub_area[L]
    tab["subcatchment_cell_count"] = sub_count[L]
    tab["upstream_outlet_count"] = per_label[L + size[L] - 1] - per_label[L]
    tab["upstream_outlet_ids"] = [";".join(ids_by_lab[lab + 1:lab + size[lab]]) for lab in L]
    tab["downstream_outlet_id"] = [ids_by_lab[down[lab]] if down[lab] else "" for lab in L]
    if elevation:
        with np.errstate(invalid="ignore", divide="ignore"):
            tab["elevation_min_m"] = np.where(zcount[L] > 0, zmin[L], np.nan)
            tab["elevation_max_m"] = np.where(zcount[L] > 0, zmax[L], np.nan)
            tab["elevation_mean_m"] = np.where(zcount[L] > 0, zsum[L] / zcount[L], np.nan)
        tab["relief_m"] = tab["elevation_max_m"] - tab["elevation_min_m"]
    tab["touches_edge"] = touches[L]
    return tab
