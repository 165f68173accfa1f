"""Flow accumulation by tiles (Barnes 2017): the D8 cell count and upstream area of a grid
held as tiles, each tile read twice, the tiles joined by one pass over their border links
on the client.

Layers read: ``directions`` (int16 D8 azimuths, -1 no outflow, -32768 nodata). Layers
written: ``cell_count`` (int64, cells draining through each cell, itself included, 0 on
nodata) and ``upstream_area_m2`` (float64, ground area of those cells, NaN on nodata).
"""

from __future__ import annotations

import numpy as np

from . import _flow_kernels as K
from ..errors import InputError
from .engine import Engine, check_settings, digest, open_store

__all__ = ["flow_accumulation", "ACCUMULATION_LAYERS"]

ACCUMULATION_LAYERS = ("cell_count", "upstream_area_m2")


class TileFlow:
    """A tile's local receivers, its targets in other tiles and its stack."""

    __slots__ = ("h", "w", "r0", "c0", "ncols", "d", "rl", "tgt", "stack", "bad")

    def __init__(self, store, layer, ti, tj):
        lay = store.layout
        r0, r1, c0, c1 = lay.window(ti, tj)
        if not store.has(layer, ti, tj):
            raise InputError(f"the tile store has no tile ({ti}, {tj}) of the {layer!r} layer; "
                             "compute the directions of every tile first")
        d = np.asarray(store.read(layer, ti, tj))
        if d.shape != (r1 - r0, c1 - c0):
            raise InputError(f"tile ({ti}, {tj}) of {layer!r} has shape {d.shape}, expected "
                             f"{(r1 - r0, c1 - c0)}")
        if d.dtype != np.int16:
            if d.dtype.kind not in "iu":
                raise InputError(f"the {layer!r} tiles must hold integer D8 azimuths, tile "
                                 f"({ti}, {tj}) holds {d.dtype}")
            d = d.astype(np.int16)
        self.h, self.w, self.r0, self.c0, self.ncols = r1 - r0, c1 - c0, r0, c0, lay.ncols
        self.d = d
        self.rl, self.tgt, self.bad = K.local_receivers(d, r0, c0, lay.nrows, lay.ncols)
        self.stack = K.tile_stack(self.rl)

    def to_global(self, local):
        local = np.asarray(local, dtype=np.int64)
        return (self.r0 + local // self.w) * np.int64(self.ncols) + self.c0 + local % self.w

    def to_local(self, cells):
        cells = np.asarray(cells, dtype=np.int64)
        return (cells // self.ncols - self.r0) * self.w + (cells % self.ncols - self.c0)


def _links_task(spec, ti, tj, directions, row_area):
    """Pass 1 of a tile: its own accumulation at the cells where water leaves it, and the
    exit each edge cell's water reaches (kept in the store's metadata)."""
    store = open_store(spec)
    name = f"flow_links_{ti}_{tj}"
    if store.has_meta(name):
        return store.read_meta(name)
    f = TileFlow(store, directions, ti, tj)
    none = np.zeros(0, dtype=np.int64)
    cnt, area = K.accumulate_tile(f.rl, f.stack, f.w, row_area, none, none, np.zeros(0))
    exits = np.flatnonzero(f.rl == -3)
    border = K.border_cells(f.rl, f.h, f.w)
    reach = K.exit_reached(f.rl, f.stack)[border]
    links = {
        "exit_cell": f.to_global(exits), "exit_target": f.tgt[exits],
        "exit_count": cnt[exits], "exit_area": area[exits],
        "border_cell": f.to_global(border),
        "border_exit": np.where(reach >= 0, f.to_global(np.maximum(reach, 0)), -1),
        "bad_codes": int(f.bad),
    }
    store.write_meta(name, links)
    return links


def _accumulate_task(spec, ti, tj, in_cells, in_count, in_area, directions, row_area):
    """Pass 2 of a tile: its accumulation with the inflows from other tiles."""
    store = open_store(spec)
    if all(store.has(layer, ti, tj) for layer in ACCUMULATION_LAYERS):
        return False
    f = TileFlow(store, directions, ti, tj)
    cnt, area = K.accumulate_tile(f.rl, f.stack, f.w, row_area, f.to_local(in_cells),
                                  in_count, in_area)
    area[f.rl == -2] = np.nan
    store.write("cell_count", ti, tj, cnt.reshape(f.h, f.w))
    store.write("upstream_area_m2", ti, tj, area.reshape(f.h, f.w))
    return True


def take(values, pos, default):
    """``values[pos]`` where ``pos >= 0``, ``default`` elsewhere (``values`` may be empty)."""
    pos = np.asarray(pos, dtype=np.int64)
    out = np.full(pos.shape, default, dtype=np.result_type(values, np.asarray(default)))
    ok = pos >= 0
    out[ok] = np.asarray(values)[pos[ok]]
    return out


def join_exits(links):
    """The pass on the client: totals through every exit, summed into the cells they
    enter. Returns (target cells, counts, areas), target cells in grid order of the
    exits (tiles row-major)."""
    cat = {k: np.concatenate([lk[k] for lk in links]) if links else np.zeros(0, np.int64)
           for k in ("exit_cell", "exit_target", "exit_count", "exit_area", "border_cell",
                     "border_exit")}
    bsort = np.argsort(cat["border_cell"], kind="stable")
    bkeys = cat["border_cell"][bsort]
    xsort = np.argsort(cat["exit_cell"], kind="stable")
    xkeys = cat["exit_cell"][xsort]
    pos = K.lookup(bkeys, cat["exit_target"])
    nxt = take(cat["border_exit"][bsort], pos, -1)
    xpos = K.lookup(xkeys, nxt)
    down = take(xsort, np.where(nxt >= 0, xpos, -1), -1)
    tc, ta = K.exit_totals(down, cat["exit_count"].astype(np.int64),
                           cat["exit_area"].astype(np.float64))
    enters = pos >= 0  # a target that is no valid edge cell (nodata): the water leaves
    return cat["exit_target"][enters], tc[enters], ta[enters]


def by_tile(layout, cells, *arrays):
    """Split ``cells`` (grid flat indices) and their values by tile, keeping their order
    within a tile. Returns {(ti, tj): (cells, *values)}."""
    cells = np.asarray(cells, dtype=np.int64)
    ti = cells // layout.ncols // layout.tile_rows
    tj = cells % layout.ncols // layout.tile_cols
    key = ti * layout.n_tile_cols + tj
    order = np.argsort(key, kind="stable")
    key = key[order]
    out = {}
    bounds = np.flatnonzero(np.diff(key)) + 1
    for part in np.split(np.arange(key.size), bounds) if key.size else []:
        k = int(key[part[0]])
        sel = order[part]
        out[(k // layout.n_tile_cols, k % layout.n_tile_cols)] = (
            cells[sel], *(np.asarray(a)[sel] for a in arrays))
    return out


def store_georeference(layout, store):
    """(CellGeometry, transform, crs) of the grid from the store's metadata ``transform``
    (six numbers) and ``crs`` (WKT), as written by :func:`basinkit.tiles.route.write_terrain`
    and :func:`basinkit.io.tile_source.dem_into_tiles`."""
    from affine import Affine
    from pyproj import CRS

    from ..terrain.geometry import cell_geometry

    if not (store.has_meta("transform") and store.has_meta("crs")):
        raise InputError("the tile store does not record the grid's transform and CRS; give "
                         "the cell areas (or geometry, transform) yourself")
    t = Affine(*store.read_meta("transform"))
    crs = CRS.from_wkt(store.read_meta("crs"))
    return cell_geometry(t, layout.shape, crs), t, crs


def _check_layout(layout, store):
    found = getattr(store, "layout", None)
    if found is not None and found != layout:
        raise InputError(f"the tile store is cut as {found}, not as {layout}; use the "
                         "store's own layout")


def flow_accumulation(layout, store, row_area=None, *, directions: str = "directions",
                      scheduler=None, workers: int | None = None) -> dict:
    """D8 flow accumulation of a grid held as tiles: cell count and upstream area.

    Parameters
    ----------
    layout : TileLayout
        The cut of the grid (the store's).
    store : tile store
        :class:`MemoryTiles` or a tile folder on disk, holding the ``directions`` layer;
        receives ``cell_count`` and ``upstream_area_m2``.
    row_area : array of float (nrows,), optional
        Ground area of one cell of each row, m² (:attr:`CellGeometry.area`); by default
        from the store's ``transform`` and ``crs`` metadata.
    directions : str
        Name of the layer of D8 azimuth codes.
    scheduler : str or distributed.Client, optional
        None: Dask's threaded scheduler here; ``"synchronous"``; or the address of a
        dask.distributed scheduler (the store must then be a folder the workers reach).
    workers : int, optional
        Threads of the local scheduler.

    Returns
    -------
    dict
        ``tiles``, ``computed`` (tiles of the second pass computed now; the others were
        finished by an earlier, interrupted run), ``exits`` (cells where water crosses a
        tile edge).

    Raises
    ------
    InputError
        When the store holds codes that are not D8 azimuths, another layout, or tiles of
        a run with other cell areas.

    Notes
    -----
    The method of Barnes (2017). Pass 1, per tile: accumulate within the tile; keep, for
    every cell where water leaves the tile, what it carries out and where it goes, and for
    every edge cell the exit its water reaches. On the client: the exits form a forest
    (each exit's water reaches at most one next exit); summed over it in topological
    order they give what enters every cell fed from another tile. Pass 2, per tile: the
    accumulation again, the inflows added where they enter. Each tile is read twice; the
    client holds only border cells. Cell counts equal those of the in-memory route cell
    for cell. Areas are the same sums in another order: equal bit for bit where every sum
    is exact (equal cell areas of few significant bits, as 100 m² or 25 m²), otherwise
    within the rounding of a sum of positive terms (relative difference below
    2 · count · 2⁻⁵³; Higham 2002, section 4.2).

    A killed run resumes: pass-1 links are kept in the store's metadata and tiles whose
    outputs exist are not computed again.

    References
    ----------
    Barnes, R. (2017). Parallel non-divergent flow accumulation for trillion cell digital
    elevation models on desktops or clusters. Environmental Modelling & Software
    92:202-212.
    Higham, N. J. (2002). Accuracy and Stability of Numerical Algorithms, 2nd ed. SIAM.

    Examples
    --------
    A plane sloping south cut into tiles of 2 × 2 cells: in every column the count is the
    row number plus one (closed form, as for :func:`basinkit.route`).

    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.tiles import MemoryTiles, TileLayout
    >>> fm = route(terrain_from_array(np.add.outer(np.arange(4.0, 0, -1), np.zeros(3)),
    ...                               cellsize=10))
    >>> layout = TileLayout.square(4, 3, 2)
    >>> store = MemoryTiles(layout)
    >>> for (ti, tj), part in layout.split(fm.direction_d8()).items():
    ...     store.write("directions", ti, tj, part)
    >>> flow_accumulation(layout, store, fm.terrain.geometry.area)["tiles"]
    4
    >>> layout.join({t: store.read("cell_count", *t) for t in layout.tiles()})[:, 1].tolist()
    [1, 2, 3, 4]
    """
    _check_layout(layout, store)
    if row_area is None:
        row_area = store_georeference(layout, store)[0].area
    row_area = np.ascontiguousarray(row_area, dtype=np.float64)
    if row_area.shape != (layout.nrows,):
        raise InputError(f"row_area needs one cell area per row ({layout.nrows}), got shape "
                         f"{row_area.shape}")
    check_settings(store, "flow_accumulation.settings",
                   {"directions": directions, "row_area": digest(row_area)})
    tiles = layout.tiles()

    def rows(ti, tj):
        r0, r1, _, _ = layout.window(ti, tj)
        return row_area[r0:r1]

    with Engine(scheduler, workers) as eng:
        spec = eng.spec(store)
        links = eng.map(_links_task, spec, [(ti, tj, (directions, rows(ti, tj)))
                                            for ti, tj in tiles])
        bad = sum(lk["bad_codes"] for lk in links)
        if bad:
            raise InputError(f"the {directions!r} tiles hold {bad} values that are not D8 "
                             "azimuths (0, 45, ..., 315, -1, -32768); recompute the "
                             "directions")
        cells, cnt, area = join_exits(links)
        inflow = by_tile(layout, cells, cnt, area)
        empty = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))
        items = [(ti, tj, (*inflow.get((ti, tj), empty), directions, rows(ti, tj)))
                 for ti, tj in tiles]
        done = eng.map(_accumulate_task, spec, items)
    return {"tiles": len(tiles), "computed": int(sum(bool(x) for x in done)),
            "exits": int(sum(lk["exit_cell"].size for lk in links))}
