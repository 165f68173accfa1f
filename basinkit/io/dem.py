"""Reading DEMs (and base-level masks) from raster and vector files into a Terrain."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ..terrain.memory import check_memory
from ..terrain.model import _prepare, _to_pyproj
from .hashing import file_sha256

__all__ = ["read_dem"]


def read_dem(path, band: int | None = None, crs=None, sea_level: float | None = None,
             base_level=None, check_ram: bool = True) -> Terrain:
    """Read a single-band DEM from any raster file rasterio opens.

    Parameters
    ----------
    path : str or Path
    band : int, optional
        1-based band number; required when the file has more than one band.
    crs : str, optional
        CRS to assume when the file has none (e.g. ``"EPSG:32633"``); refused otherwise.
    sea_level : float, optional
        Cells at or below this elevation become exits (base level), like the grid edge.
    base_level : str, Path or ndarray of bool, optional
        A mask raster on the same grid (non-zero = exit) or a polygon layer (cells whose
        centre lies inside are exits), or a boolean array.
    check_ram : bool
        Estimate the working memory first and refuse a grid that would not fit.

    Returns
    -------
    Terrain

    Raises
    ------
    InputError
        Missing, unreadable or unsuitable files, with what to do about it.
    """
    import rasterio
    from rasterio.errors import RasterioIOError

    p = Path(path)
    if not p.exists():
        raise InputError(f"the DEM file {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"{str(p)!r} is a folder, not a raster file")
    try:
        ds = rasterio.open(p)
    except RasterioIOError as exc:
        raise InputError(f"{str(p)!r} is not a raster file rasterio can read ({exc})") from None
    with ds:
        if ds.count == 0:
            raise InputError(f"{str(p)!r} has no raster bands")
        if band is None:
            if ds.count > 1:
                raise InputError(f"{str(p)!r} has {ds.count} bands; say which one holds "
                                 "elevation with --band N (1-based)")
            band = 1
        if not 1 <= band <= ds.count:
            raise InputError(f"band {band} does not exist; {str(p)!r} has {ds.count} "
                             "band(s)")
        if ds.crs is None and crs is None:
            raise InputError(f"{str(p)!r} has no coordinate reference system; state it with "
                             "--crs (e.g. --crs EPSG:32633) so that areas and lengths can "
                             "be computed in metres")
        if check_ram:
            check_memory(ds.width * ds.height)
        dtype = ds.dtypes[band - 1]
        if dtype.startswith("complex"):
            raise InputError(f"band {band} of {str(p)!r} holds complex numbers, not "
                             "elevations")
        try:
            data = ds.read(band, masked=True)
        except RasterioIOError as exc:
            why = exc.__cause__ or exc
            raise InputError(f"cannot read band {band} of {str(p)!r}: the file is damaged or "
                             f"truncated ({why}); copy or export it again") from None
        pcrs = _to_pyproj(crs if crs is not None else ds.crs.to_wkt())
        transform = ds.transform
    z = np.asarray(data.data, dtype=np.float32)
    valid = ~np.ma.getmaskarray(data) & np.isfinite(z)
    bl = None
    if base_level is not None:
        bl = _read_base_level(base_level, z.shape, transform, pcrs)
    source = {"path": str(p.resolve()), "sha256": file_sha256(p), "band": band}
    return _prepare(z, valid, transform, pcrs, bl, source, sea_level)


def _read_base_level(spec, shape, transform, crs):
    """Base-level mask from an array, a mask raster on the same grid or a polygon layer."""
    if isinstance(spec, np.ndarray):
        if spec.shape != shape:
            raise InputError(f"the base-level mask has shape {spec.shape}, the DEM {shape}")
        return spec.astype(bool)
    p = Path(spec)
    if not p.exists():
        raise InputError(f"the base-level file {str(p)!r} does not exist")
    if p.suffix.lower() in (".gpkg", ".geojson", ".json", ".shp", ".fgb"):
        import geopandas as gpd
        from rasterio.features import rasterize

        try:
            gdf = gpd.read_file(p)
        except Exception as exc:  # noqa: BLE001 - any reader failure is a user input problem
            raise InputError(f"cannot read the polygon layer {str(p)!r}: {exc}") from None
        if gdf.crs is not None:
            gdf = gdf.to_crs(crs.to_wkt())
        geoms = [g for g in gdf.geometry if g is not None and not g.is_empty]
        if not geoms:
            raise InputError(f"the polygon layer {str(p)!r} holds no geometries")
        return rasterize(((g, 1) for g in geoms), out_shape=shape, transform=transform,
                         fill=0, dtype="uint8").astype(bool)
    import rasterio
    from rasterio.errors import RasterioIOError

    try:
        with rasterio.open(p) as ds:
            if (ds.height, ds.width) != shape or ds.transform != transform:
                raise InputError(f"the base-level raster {str(p)!r} is not on the DEM's grid "
                                 f"({ds.height}x{ds.width} vs {shape[0]}x{shape[1]}); "
                                 "resample it")
            m = ds.read(1, masked=True)
    except RasterioIOError as exc:
        raise InputError(f"cannot read the base-level file {str(p)!r} as a raster or a "
                         f"polygon layer (.gpkg, .geojson, .shp, .fgb): {exc}") from None
    return np.asarray(m.filled(0)) != 0
