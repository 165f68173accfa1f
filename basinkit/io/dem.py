"""Reading DEMs (and base-level masks) from raster and vector files into a Terrain."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from ..terrain.checks import (PLAUSIBLE_ELEVATION_M, check_elevation_range,
                              check_geographic_extent, given_transform, lacks_georeferencing,
                              screen_elevations)
from ..terrain.memory import check_memory
from ..terrain.model import _prepare, _to_pyproj
from .hashing import file_sha256

__all__ = ["read_dem"]


def check_band(p, ds, band) -> int:
    """The elevation band of the open raster ``ds`` (1-based; the only one when ``band`` is
    None), or InputError: no bands, several and none chosen, out of range, complex."""
    if ds.count == 0:
        raise InputError(f"{str(p)!r} has no raster bands")
    if band is None:
        if ds.count > 1:
            raise InputError(f"{str(p)!r} has {ds.count} bands; say which one holds "
                             "elevation with --band N (1-based)")
        band = 1
    if not 1 <= band <= ds.count:
        raise InputError(f"band {band} does not exist; {str(p)!r} has {ds.count} band(s)")
    if ds.dtypes[band - 1].startswith("complex"):
        raise InputError(f"band {band} of {str(p)!r} holds complex numbers, not elevations")
    return band


def read_dem(path, band: int | None = None, crs=None, sea_level: float | None = None,
             base_level=None, check_ram: bool = True, *, replace_crs=None,
             cell_size: float | None = None, origin=None,
             elevation_range=PLAUSIBLE_ELEVATION_M,
             implausible_elevations: str = "refuse") -> Terrain:
    """Read a single-band DEM from any raster file rasterio opens.

    Parameters
    ----------
    path : str or Path
    band : int, optional
        1-based band number; required when the file has more than one band.
    crs : str, optional
        CRS to assume when the file has none (e.g. ``"EPSG:32633"``). A file that has a
        CRS keeps it: a different ``crs`` is refused (``replace_crs`` says to replace it).
    sea_level : float, optional
        Cells at or below this elevation become exits (base level), like the grid edge.
    base_level : str, Path or ndarray of bool, optional
        A mask raster on the same grid (non-zero = exit) or a polygon layer (cells whose
        centre lies inside are exits), or a boolean array.
    check_ram : bool
        Estimate the working memory first and refuse a grid that would not fit.
    replace_crs : str, optional
        CRS to use instead of the one the file has (a mislabelled file); recorded in
        ``Terrain.source``.
    cell_size : float, optional
        For a raster without georeferencing (identity transform, e.g. a PNG): the cell
        size in the CRS's units. Needs ``origin``; refused for a georeferenced file.
    origin : (float, float), optional
        Map coordinates of the upper-left corner of such a raster (rows run top-down).
    elevation_range : (float, float)
        Plausible elevations in metres (default -500 to 9 000 m).
    implausible_elevations : {"refuse", "nodata"}
        What to do with valid cells outside ``elevation_range``: refuse the DEM, or treat
        them as nodata (their count is recorded in ``Terrain.source``).

    Returns
    -------
    Terrain
        ``source`` records the path, SHA-256, band, where the CRS and the georeferencing
        came from, and the elevation screening.

    Raises
    ------
    InputError
        Missing, unreadable, damaged or unsuitable files, a CRS option that contradicts
        the file, missing georeferencing, coordinates that cannot be degrees, implausible
        elevations -- each with what to do about it.
    """
    import warnings

    import rasterio
    from rasterio.errors import NotGeoreferencedWarning, RasterioIOError

    p = Path(path)
    if not p.exists():
        raise InputError(f"the DEM file {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"{str(p)!r} is a folder, not a raster file")
    if crs is not None and replace_crs is not None:
        raise InputError("give either --crs (a DEM without a CRS) or --replace-crs (replace "
                         "the DEM's CRS), not both")
    if (cell_size is None) != (origin is None):
        raise InputError("--cell-size and --origin go together: give both (the cell size "
                         "and the X,Y of the upper-left corner) for a raster without "
                         "georeferencing")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            ds = rasterio.open(p)
    except RasterioIOError as exc:
        raise InputError(f"{str(p)!r} is not a raster file rasterio can read, or it is "
                         f"damaged or truncated ({exc})") from None
    with ds:
        band = check_band(p, ds, band)
        if check_ram:
            check_memory(ds.width * ds.height)
        # read first: a file cut short may have lost its georeferencing tags, and must be
        # called damaged, not told to add --crs
        try:
            data = ds.read(band, masked=True)
        except RasterioIOError as exc:
            why = exc.__cause__ or exc
            raise InputError(f"cannot read band {band} of {str(p)!r}: the file is damaged or "
                             f"truncated ({why}); copy or export it again") from None
        file_crs = ds.crs
        transform = ds.transform
        no_georef = lacks_georeferencing(transform) and not ds.gcps[0]
        if no_georef and _shorter_than_its_data(p, ds, band):
            raise InputError(f"{str(p)!r} is damaged or truncated: it holds fewer bytes "
                             "than its cells need and no georeferencing; copy or export it "
                             "again")
    if no_georef:
        if cell_size is None:
            raise InputError(f"{str(p)!r} has no georeferencing (no cell size or position; "
                             "e.g. a PNG or a plain TIFF); state them with --cell-size SIZE "
                             "--origin X,Y (the upper-left corner, in the CRS's units; rows "
                             "run top-down) and --crs")
        transform = given_transform(cell_size, origin)
        georef_from = "given (--cell-size, --origin)"
    elif cell_size is not None:
        raise InputError(f"{str(p)!r} has its own georeferencing (cell size "
                         f"{abs(transform.a):g}, upper-left corner {transform.c:g}, "
                         f"{transform.f:g}); --cell-size and --origin are only for a raster "
                         "without one")
    else:
        georef_from = "file"
    pcrs, crs_record = _choose_crs(p, file_crs, crs, replace_crs)
    z = np.asarray(data.data, dtype=np.float32)
    valid = ~np.ma.getmaskarray(data) & np.isfinite(z)
    check_geographic_extent(transform, z.shape, pcrs, name=repr(str(p)))
    lo, hi = check_elevation_range(elevation_range)
    valid, n_bad = screen_elevations(z, valid, (lo, hi), implausible_elevations,
                                     name=repr(str(p)))
    bl = None
    if base_level is not None:
        bl = _read_base_level(base_level, z.shape, transform, pcrs)
    source = {"path": str(p.resolve()), "sha256": file_sha256(p), "band": band,
              **crs_record, "georeferencing": georef_from,
              "elevation_range_m": [lo, hi], "implausible_elevations": implausible_elevations,
              "implausible_elevation_cells": n_bad}
    return _prepare(z, valid, transform, pcrs, bl, source, sea_level)


def _shorter_than_its_data(p, ds, band) -> bool:
    """True when an uncompressed GeoTIFF is smaller than its cells (a cut-off header)."""
    if ds.driver != "GTiff":
        return False
    try:
        need = ds.width * ds.height * np.dtype(ds.dtypes[band - 1]).itemsize
    except TypeError:
        return False
    comp = (ds.compression.value if ds.compression is not None else "").upper()
    return comp in ("", "NONE") and p.stat().st_size < need


def _choose_crs(p, file_crs, crs, replace_crs):
    """The DEM's CRS from the file and the options, and how it was chosen (for provenance).

    ``crs`` applies only to a file without a CRS (one equal to the file's is accepted);
    ``replace_crs`` replaces the file's."""
    in_file = None if file_crs is None else _to_pyproj(file_crs.to_wkt())
    record = {"crs_in_file": None if in_file is None else _crs_name(in_file)}
    if replace_crs is not None:
        new = _to_pyproj(replace_crs)
        record["crs_from"] = ("--replace-crs, replacing the file's" if in_file is not None
                              else "--replace-crs (the file has none)")
        return new, record
    if in_file is None:
        if crs is None:
            raise InputError(f"{str(p)!r} has no coordinate reference system; state it with "
                             "--crs (e.g. --crs EPSG:32633) so that areas and lengths can "
                             "be computed in metres")
        record["crs_from"] = "--crs (the file has none)"
        return _to_pyproj(crs), record
    if crs is not None:
        given = _to_pyproj(crs)
        if not given.equals(in_file, ignore_axis_order=True):
            raise InputError(f"{str(p)!r} already has a CRS ({_crs_name(in_file)}) and --crs "
                             f"{crs} differs; --crs is only for a DEM without one; to "
                             f"override the file's CRS, use --replace-crs {crs}")
    record["crs_from"] = "file"
    return in_file, record


def _crs_name(c) -> str:
    epsg = c.to_epsg()
    return f"EPSG:{epsg} ({c.name})" if epsg else c.name


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
