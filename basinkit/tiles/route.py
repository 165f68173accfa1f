"""From elevation tiles to filled elevations and D8 directions per tile, and the grid's
cell geometry from a store's metadata.

Store metadata used here (written by :func:`write_terrain` or by
:func:`basinkit.io.tile_source.dem_into_tiles`): ``transform`` (the six numbers a, b, c, d,
e, f of the north-up affine transform) and ``crs`` (WKT).
"""

from __future__ import annotations

import numpy as np

from ..terrain.geometry import cell_geometry
from ..terrain.model import Terrain
from .directions import directions_by_tiles
from .fill import fill_by_tiles
from .layout import TileLayout

__all__ = ["write_terrain", "grid_distances", "route_by_tiles"]


def write_terrain(layout: TileLayout, store, terrain: Terrain) -> None:
    """A Terrain that fits in memory cut into the store: layers ``elevation``, ``valid``,
    ``base_level`` (when it has one) and its georeferencing as metadata (for tests and for
    grids that fit; large DEMs are read by windows with
    :func:`basinkit.io.tile_source.dem_into_tiles`)."""
    if terrain.shape != layout.shape:
        raise ValueError(f"the terrain has shape {terrain.shape}, the layout {layout.shape}")
    layers = [("elevation", terrain.elevation), ("valid", terrain.valid)]
    if terrain.base_level is not None:
        layers.append(("base_level", terrain.base_level & terrain.valid))
    for ti, tj in layout.tiles():
        r0, r1, c0, c1 = layout.window(ti, tj)
        for name, grid in layers:
            store.write(name, ti, tj, np.ascontiguousarray(grid[r0:r1, c0:c1]))
    store.write_meta("base_level", terrain.base_level is not None)
    store.write_meta("transform", tuple(float(v) for v in tuple(terrain.transform)[:6]))
    store.write_meta("crs", terrain.crs.to_wkt())


def grid_distances(layout: TileLayout, store) -> np.ndarray:
    """The (nrows, 8) table of distances (m) between neighbouring cell centres, from the
    store's ``transform`` and ``crs`` (as ``CellGeometry.neighbour_distances()``)."""
    from affine import Affine
    from pyproj import CRS

    t = Affine(*store.read_meta("transform"))
    crs = CRS.from_wkt(store.read_meta("crs"))
    return cell_geometry(t, layout.shape, crs).neighbour_distances()


def route_by_tiles(layout: TileLayout, store, dist: np.ndarray | None = None,
                   resume: bool = False, engine=None) -> dict:
    """Fill every depression and compute D8 directions, tile by tile: layers ``filled``,
    ``receivers`` and ``directions`` (see :mod:`basinkit.tiles.directions`), equal cell for
    cell to ``route(terrain, conditioning="fill")``. ``dist`` defaults to
    :func:`grid_distances`. ``resume``: go on from the steps a killed run finished (see
    :func:`fill_by_tiles`). ``engine``: run the per-tile steps as Dask tasks on this
    :class:`~basinkit.tiles.engine.Engine`. Returns a summary of both steps."""
    if dist is None:
        dist = grid_distances(layout, store)
    fill = fill_by_tiles(layout, store, resume, engine=engine)
    d8 = directions_by_tiles(layout, store, dist, resume=resume, engine=engine)
    return {"fill": fill, "directions": d8}
