"""The Terrain object and reading DEMs from raster files."""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import InputError, MemoryBudgetError
from .geometry import CellGeometry, cell_geometry

__all__ = ["Terrain", "read_dem", "terrain_from_array", "file_sha256", "check_memory"]

#: Working bytes per cell that ``route`` needs at its peak (measured in bench/, see RESULTS.md).
ROUTE_BYTES_PER_CELL = 45


@dataclass
class Terrain:
    """A DEM on a north-up grid with everything needed to route flow over it.

    Attributes
    ----------
    elevation : ndarray of float32 (nrows, ncols)
        Elevation in the DEM's vertical unit (assumed metres). Invalid cells hold NaN.
    valid : ndarray of bool
        True where the DEM has data.
    transform : affine.Affine
        Georeferencing of the grid (rows north to south).
    crs : pyproj.CRS
        Horizontal coordinate reference system.
    geometry : CellGeometry
        Cell sizes and areas in metres.
    base_level : ndarray of bool or None
        Cells that are exits besides the grid edge and nodata (sea, lake, reservoir).
    source : dict
        Provenance of the input: path, SHA-256, band.
    """

    elevation: np.ndarray
    valid: np.ndarray
    transform: object
    crs: object
    geometry: CellGeometry
    base_level: np.ndarray | None = None
    source: dict = field(default_factory=dict)

    @property
    def shape(self):
        return self.elevation.shape

    @property
    def size(self):
        return self.elevation.size

    def with_elevation(self, elevation: np.ndarray, **extra) -> "Terrain":
        """A copy sharing everything but the elevation array."""
        return replace(self, elevation=elevation, **extra)

    def cell_area(self) -> np.ndarray:
        """Cell areas (m²) as a full grid (a broadcast view for projected grids)."""
        return self.geometry.cell_area_grid(self.shape)

    def xy_of(self, rows, cols):
        """Map coordinates of cell centres."""
        t = self.transform
        rows = np.asarray(rows, dtype=float)
        cols = np.asarray(cols, dtype=float)
        return t.c + (cols + 0.5) * t.a, t.f + (rows + 0.5) * t.e

    def rowcol_of(self, x, y):
        """Row and column (floored) of map coordinates; may fall outside the grid."""
        t = self.transform
        col = np.floor((np.asarray(x, dtype=float) - t.c) / t.a).astype(np.int64)
        row = np.floor((np.asarray(y, dtype=float) - t.f) / t.e).astype(np.int64)
        return row, col


def file_sha256(path) -> str:
    """SHA-256 of a file, hex."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def available_memory_bytes() -> int | None:
    """Memory the OS reports as available to new allocations, or None if unknown."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def format_bytes(n) -> str:
    """A byte count in a readable binary unit: '512 bytes', '87.9 KiB', '1.5 GiB'."""
    n = float(n)
    if n < 1024:
        return f"{int(n)} bytes"
    for unit in ("KiB", "MiB", "GiB", "TiB"):
        n /= 1024.0
        if n < 1024 or unit == "TiB":
            return f"{n:.1f} {unit}"


def check_memory(ncells: int, bytes_per_cell: int = ROUTE_BYTES_PER_CELL, what="routing"):
    """Refuse, before allocating, a job whose working memory exceeds what is available."""
    need = int(ncells) * bytes_per_cell
    have = available_memory_bytes()
    if have is not None and need > have:
        raise MemoryBudgetError(
            f"{what} a grid of {ncells:,} cells needs about {format_bytes(need)} of working "
            f"memory but only {format_bytes(have)} is available; clip the DEM to the area "
            "of interest, coarsen it, or run on a machine with more memory")
    return need


def _to_pyproj(crs_like):
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    try:
        return CRS.from_user_input(crs_like)
    except CRSError as exc:
        raise InputError(f"cannot understand the CRS {crs_like!r}: {exc}") from None


def _prepare(elevation, valid, transform, crs, base_level, source, sea_level):
    from affine import Affine

    if transform.b != 0 or transform.d != 0:
        raise InputError("the DEM's grid is rotated or sheared; resample it to a north-up "
                         "grid first")
    if transform.e > 0:  # rows run south to north: flip so that row 0 is the northern edge
        elevation = elevation[::-1].copy()
        valid = valid[::-1].copy()
        if base_level is not None:
            base_level = base_level[::-1].copy()
        transform = Affine(transform.a, 0, transform.c, 0, -transform.e,
                           transform.f + transform.e * elevation.shape[0])
    if transform.a < 0:
        raise InputError("the DEM's columns run east to west; resample it first")
    if not valid.any():
        raise InputError("the DEM holds no valid cells (every cell is nodata)")
    elevation = np.where(valid, elevation, np.nan).astype(np.float32, copy=False)
    if sea_level is not None:
        sea = valid & (elevation <= sea_level)
        base_level = sea if base_level is None else (base_level | sea)
    if base_level is not None:
        base_level = base_level & valid
    geom = cell_geometry(transform, elevation.shape, crs)
    return Terrain(elevation, valid, transform, crs, geom, base_level, source)


def terrain_from_array(elevation, transform=None, crs="EPSG:32633", nodata=None,
                       base_level=None, sea_level=None, cellsize=None) -> Terrain:
    """Build a Terrain from an array (for tests, notebooks and the Python API).

    Parameters
    ----------
    elevation : array_like (nrows, ncols)
    transform : affine.Affine, optional
        Defaults to a grid of ``cellsize`` (default 1) with its top-left corner at (0, 0).
    crs : anything pyproj understands
    nodata : float, optional
        Value marking missing cells; NaN always does.
    base_level : array of bool, optional
        Cells that are exits (sea, lake).
    sea_level : float, optional
        Cells at or below this elevation are exits.
    """
    from affine import Affine

    z = np.asarray(elevation, dtype=np.float64)
    if z.ndim != 2:
        raise InputError(f"the DEM must be 2-D, got an array of shape {z.shape}")
    if transform is None:
        s = 1.0 if cellsize is None else float(cellsize)
        transform = Affine(s, 0, 0, 0, -s, z.shape[0] * s)
    valid = np.isfinite(z)
    if nodata is not None:
        valid &= z != nodata
    bl = None if base_level is None else np.asarray(base_level, dtype=bool)
    return _prepare(z.astype(np.float32), valid, transform, _to_pyproj(crs), bl,
                    {"path": None}, sea_level)


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
