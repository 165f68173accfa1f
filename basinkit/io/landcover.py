"""Reading land-cover values for design flows — curve numbers or runoff coefficients — from
a raster on the DEM's grid or from a polygon layer with a value field, onto the DEM's grid.

The values are checked (curve numbers 30-100, C 0-1) by :mod:`basinkit.hydrology`; this
module only reads and places them. Polygons are placed by cell centre: a cell takes the
value of the polygon containing its centre (where polygons overlap, the later feature
wins); cells outside every polygon have no value (NaN), and a catchment that reaches them
is reported, never guessed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["read_value_raster", "read_value_polygons", "read_land_values",
           "VECTOR_SUFFIXES"]

VECTOR_SUFFIXES = (".gpkg", ".geojson", ".json", ".shp", ".fgb")


def _exists(path, what):
    p = Path(path)
    if not p.exists():
        raise InputError(f"the {what} file {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"{str(p)!r} is a folder, not a {what} file")
    return p


def _same_grid(ds, terrain):
    if (ds.height, ds.width) != tuple(terrain.shape):
        return f"{ds.height} x {ds.width} cells against the DEM's {terrain.shape[0]} x " \
               f"{terrain.shape[1]}"
    a, b = ds.transform, terrain.transform
    tol = 1e-6 * max(abs(b.a), abs(b.e))
    if any(abs(x - y) > tol for x, y in zip(tuple(a)[:6], tuple(b)[:6])):
        return "its cells are offset or sized differently from the DEM's"
    if ds.crs is not None:
        from pyproj import CRS

        if not CRS.from_wkt(ds.crs.to_wkt()).equals(terrain.crs, ignore_axis_order=True):
            return "its coordinate reference system differs from the DEM's"
    return None


def read_value_raster(path, terrain, what="curve number", band=1):
    """Values (float64 grid, NaN = no value) from a raster that must lie on the DEM's grid.

    Raises
    ------
    InputError
        Missing or unreadable file, or a raster on another grid (shape, cell size, origin
        or CRS): resample it onto the DEM's grid first.
    """
    import rasterio
    from rasterio.errors import RasterioIOError

    p = _exists(path, f"{what} raster")
    try:
        with rasterio.open(p) as ds:
            why = _same_grid(ds, terrain)
            if why:
                raise InputError(f"the {what} raster {p.name!r} is on another grid ({why}); "
                                 "resample it onto the DEM's grid first")
            if not 1 <= band <= ds.count:
                raise InputError(f"the {what} raster {p.name!r} has no band {band}")
            m = ds.read(band, masked=True)
    except RasterioIOError as exc:
        raise InputError(f"cannot read the {what} raster {str(p)!r}: {exc}") from None
    v = np.asarray(m.filled(np.nan) if np.ma.isMaskedArray(m) else m, dtype=np.float64)
    return np.where(np.isfinite(v), v, np.nan)


def read_value_polygons(path, field, terrain, what="curve number"):
    """Values on the DEM's grid from a polygon layer's numeric ``field`` (cell-centre rule;
    NaN outside every polygon)."""
    import geopandas as gpd
    import pandas as pd
    from rasterio.features import rasterize

    p = _exists(path, f"{what} polygon")
    try:
        gdf = gpd.read_file(p)
    except Exception as exc:  # noqa: BLE001 - any reader failure is an input problem
        raise InputError(f"cannot read the {what} polygon layer {str(p)!r}: {exc}") from None
    cols = [c for c in gdf.columns if c != gdf.geometry.name]
    if field is None or field not in cols:
        raise InputError(f"the {what} layer {p.name!r} has no field {field!r}; name the "
                         f"field that holds the {what} (its fields: "
                         f"{', '.join(map(str, cols)) or 'none'})")
    vals = pd.to_numeric(gdf[field], errors="coerce").to_numpy(np.float64)
    if np.any(~np.isfinite(vals)):
        k = int(np.nonzero(~np.isfinite(vals))[0][0])
        raise InputError(f"the field {field!r} of {p.name!r} holds an empty or non-numeric "
                         f"{what} in feature {k + 1} ({gdf[field].iloc[k]!r})")
    if gdf.crs is None:
        raise InputError(f"the {what} layer {p.name!r} has no coordinate reference system; "
                         "save it with one")
    gdf = gdf.to_crs(terrain.crs.to_wkt())
    shapes = [(g, float(v)) for g, v in zip(gdf.geometry, vals)
              if g is not None and not g.is_empty and g.geom_type in ("Polygon",
                                                                       "MultiPolygon")]
    if not shapes:
        raise InputError(f"the {what} layer {p.name!r} holds no polygons")
    return rasterize(shapes, out_shape=terrain.shape, transform=terrain.transform,
                     fill=np.nan, dtype="float64")


def read_land_values(path, terrain, field=None, what="curve number"):
    """A raster (on the DEM's grid) or, for vector files, a polygon layer with ``field``."""
    if Path(path).suffix.lower() in VECTOR_SUFFIXES:
        return read_value_polygons(path, field, terrain, what)
    if field is not None:
        raise InputError(f"{Path(path).name!r} is read as a raster; a field ({field!r}) "
                         "applies to polygon layers (.gpkg, .geojson, .shp, .fgb) only")
    return read_value_raster(path, terrain, what)
