"""Burning known channels and culverts into a DEM."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ..terrain.model import Terrain

__all__ = ["burn_lines", "line_geometries", "line_cell_paths"]

_LINE_TYPES = ("LineString", "MultiLineString", "LinearRing")


def line_geometries(lines, crs=None) -> list:
    """Line geometries from shapely lines, a GeoSeries or a GeoDataFrame.

    Parameters
    ----------
    lines : shapely geometry, sequence of shapely geometries, GeoSeries or GeoDataFrame
        Reprojected to ``crs`` when they carry a CRS of their own. Multi-lines are split
        into their parts; points and polygons are ignored. Files are read by
        :func:`basinkit.read_lines` (``basinkit.io.lines``), not here.
    crs : pyproj.CRS, optional
        Target CRS (the DEM's).

    Returns
    -------
    list of shapely.LineString
    """
    import shapely

    if isinstance(lines, (str, Path)):
        raise InputError(f"burn lines must be line geometries, not a file name ({str(lines)!r});"
                         " read the layer first with basinkit.read_lines(path, terrain.crs)")
    if hasattr(lines, "geometry") and not hasattr(lines, "geom_type"):  # GeoDataFrame
        gs = lines.geometry
        if gs.crs is not None and crs is not None:
            gs = gs.to_crs(crs.to_wkt())
        geoms = list(gs)
    elif hasattr(lines, "to_crs") and hasattr(lines, "crs"):  # GeoSeries
        gs = lines.to_crs(crs.to_wkt()) if (lines.crs is not None and crs is not None) \
            else lines
        geoms = list(gs)
    elif isinstance(lines, shapely.Geometry):
        geoms = [lines]
    else:
        geoms = list(lines)
    return only_lines(geoms, "the burn lines")


def only_lines(geoms, what) -> list:
    """The line parts of ``geoms`` (multi-lines split); refuses a set with no line."""
    import shapely

    out = []
    for g in geoms:
        if g is None or not isinstance(g, shapely.Geometry) or g.is_empty:
            continue
        if g.geom_type in ("MultiLineString", "GeometryCollection"):
            out.extend(p for p in g.geoms if p.geom_type in _LINE_TYPES and not p.is_empty)
        elif g.geom_type in _LINE_TYPES:
            out.append(g)
    if not out:
        raise InputError(f"{what} holds no lines; give a layer of line features (channels "
                         "or culverts drawn in the downhill direction or either way)")
    return out


def line_cell_paths(terrain: Terrain, lines) -> list:
    """Ordered 8-connected cell paths (flat indices) of lines on the DEM's grid.

    Each line is densified to steps of at most half a cell, its points are mapped to the
    cells that contain them and repeated cells are dropped; points off the grid or on nodata
    are left out. Lines that touch no valid cell give no path.
    """
    import shapely

    t = terrain.transform
    nr, nc = terrain.shape
    step = 0.5 * min(abs(t.a), abs(t.e))
    paths = []
    for g in lines:
        xy = shapely.get_coordinates(shapely.segmentize(g, step))
        if xy.shape[0] == 0:
            continue
        row, col = terrain.rowcol_of(xy[:, 0], xy[:, 1])
        inside = (row >= 0) & (row < nr) & (col >= 0) & (col < nc)
        row, col = row[inside], col[inside]
        if row.size == 0:
            continue
        cell = row * nc + col
        cell = cell[terrain.valid.ravel()[cell]]
        if cell.size == 0:
            continue
        keep = np.ones(cell.size, dtype=bool)
        keep[1:] = cell[1:] != cell[:-1]
        paths.append(cell[keep])
    return paths


def burn_lines(terrain: Terrain, lines, depth: float):
    """Lower the cells under known channels or culverts so that embankments do not dam them.

    Parameters
    ----------
    terrain : Terrain
    lines : sequence of shapely lines, GeoSeries or GeoDataFrame
        Line geometries in the DEM's CRS, or carrying their own CRS (reprojected); a layer
        on disk is read with :func:`basinkit.read_lines` first.
    depth : float
        Metres to lower every cell a line crosses (0 allowed).

    Returns
    -------
    (Terrain, int)
        The burned terrain and the number of cells burned.

    Notes
    -----
    Each line becomes an 8-connected path of cells (see :func:`line_cell_paths`); every cell
    on a path is lowered once by ``depth``. Then, along each line, taken downstream from its
    end with the lower (burned) elevation, the elevation is made non-increasing (a running
    minimum), so the burned path falls all the way through an embankment instead of
    climbing over it. Lines are handled in their input order; where lines cross, the lower
    value wins. This is the usual practice of burning known hydrography and culverts into a
    DEM (common practice, no source).

    Examples
    --------
    >>> import numpy as np
    >>> from shapely.geometry import LineString
    >>> from basinkit import terrain_from_array
    >>> z = np.array([[5, 5, 5], [5, 9, 5], [5, 4, 5]], dtype=float)
    >>> t, n = burn_lines(terrain_from_array(z), [LineString([(1.5, 2.5), (1.5, 0.5)])], 1.0)
    >>> t.elevation[:, 1].tolist(), n
    ([4.0, 4.0, 3.0], 3)
    """
    try:
        d = float(depth)
    except (TypeError, ValueError):
        raise InputError(f"the burn depth must be a number of metres, got {depth!r}") from None
    if not (d >= 0 and np.isfinite(d)):
        raise InputError(f"the burn depth must be zero or a positive number of metres, "
                         f"got {depth!r}")
    geoms = line_geometries(lines, terrain.crs)
    paths = line_cell_paths(terrain, geoms)
    if not paths:
        raise InputError("none of the burn lines crosses a valid cell of the DEM; check that "
                         "the line layer covers the DEM's area and has the right CRS")
    z = terrain.elevation.astype(np.float32, copy=True).ravel()
    cells = np.unique(np.concatenate(paths))
    z[cells] = z[cells] - np.float32(d)
    for path in paths:
        if z[path[0]] < z[path[-1]]:  # the lower end is downstream
            path = path[::-1]
        run = np.minimum.accumulate(z[path])
        np.minimum.at(z, path, run)
    return terrain.with_elevation(z.reshape(terrain.shape)), int(cells.size)
