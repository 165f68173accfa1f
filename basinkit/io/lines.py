"""Reading line layers (culverts, known channels) for burning into a DEM."""

from __future__ import annotations

from pathlib import Path

from ..conditioning.burn import line_geometries, only_lines
from ..errors import InputError

__all__ = ["read_lines"]


def read_lines(lines, crs=None) -> list:
    """Line geometries from a vector file (GeoPackage, GeoJSON, shapefile, ...) or from
    geometries already in memory.

    Parameters
    ----------
    lines : str, Path, or what :func:`basinkit.conditioning.burn.line_geometries` takes
        A file is read with geopandas and reprojected to ``crs`` when it states its own CRS
        (one without a CRS is taken to be in ``crs`` already).
    crs : pyproj.CRS, optional
        Target CRS (the DEM's).

    Returns
    -------
    list of shapely.LineString
    """
    if not isinstance(lines, (str, Path)):
        return line_geometries(lines, crs)
    import geopandas as gpd

    p = Path(lines)
    if not p.exists():
        raise InputError(f"the line layer {str(p)!r} does not exist")
    try:
        gdf = gpd.read_file(p)
    except Exception as exc:  # noqa: BLE001 - any reader failure is an input problem
        raise InputError(f"cannot read the line layer {str(p)!r}: {exc}") from None
    if gdf.crs is not None and crs is not None:
        gdf = gdf.to_crs(crs.to_wkt())
    return only_lines(list(gdf.geometry), f"the layer {str(p)!r}")
