"""Reading a DEM by windows into a tile store, never the whole grid at once.

The source is a raster file rasterio opens (a GeoTIFF, a VRT mosaic, ...) or a folder of
GeoTIFF tiles on one grid (same CRS and cell size, aligned to whole cells; where files
overlap, the later file in name order wins where it has data, and cells no file covers are
nodata). Each tile of the layout is read as one window and written as the layers
``elevation`` (float32, NaN on nodata), ``valid`` (bool) and, with ``sea_level`` or
``base_level``, ``base_level`` (bool); the georeferencing goes to the store's metadata (``transform``: the six
numbers of the north-up affine transform; ``crs``: WKT; ``source``: what was read;
``base_level``: whether that layer is to be used). The
cells are those :func:`basinkit.io.dem.read_dem` would give: nodata from the file's mask and
NaN, rows flipped to run north to south, the same elevation screening (applied window by
window, so a refusal counts the cells of the window where it stopped).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..terrain.checks import (PLAUSIBLE_ELEVATION_M, check_elevation_range,
                              check_geographic_extent, screen_elevations)
from ..tiles.layout import MemoryTiles, TileLayout
from .dem import _choose_crs, check_band
from .hashing import file_sha256
from .tile_folder import TileFolder

__all__ = ["dem_into_tiles"]

_TIFF_SUFFIXES = (".tif", ".tiff")


@dataclass
class _Part:
    ds: object      # an open rasterio dataset
    row: int        # its first row and column in the mosaic (north-up)
    col: int
    height: int
    width: int
    flipped: bool   # rows run south to north in the file


def _open(p):
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning, RasterioIOError

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            return rasterio.open(p)
    except RasterioIOError as exc:
        raise InputError(f"{str(p)!r} is not a raster file rasterio can read, or it is "
                         f"damaged or truncated ({exc})") from None


def _check_band(p, ds, band):
    band = check_band(p, ds, band)
    t = ds.transform
    if t.is_identity and not ds.gcps[0]:
        raise InputError(f"{str(p)!r} has no georeferencing; a DEM read by tiles must carry "
                         "its own (convert it to a GeoTIFF with a transform and CRS first)")
    if t.b != 0 or t.d != 0:
        raise InputError(f"{str(p)!r} is on a rotated or sheared grid; resample it to a "
                         "north-up grid first")
    if t.a < 0:
        raise InputError(f"the columns of {str(p)!r} run east to west; resample it first")
    return band


def _sources(path, band):
    """The parts of the mosaic, its north-up transform, shape, band and the files."""
    from affine import Affine

    p = Path(path)
    if not p.exists():
        raise InputError(f"the DEM {str(p)!r} does not exist")
    if p.is_dir():
        files = sorted(f for f in p.iterdir() if f.suffix.lower() in _TIFF_SUFFIXES)
        if not files:
            raise InputError(f"the folder {str(p)!r} holds no GeoTIFF tiles (.tif, .tiff)")
    else:
        files = [p]
    dss = []
    try:
        for f in files:
            dss.append(_open(f))
        band = _check_band(files[0], dss[0], band)
        for f, ds in zip(files[1:], dss[1:]):
            _check_band(f, ds, band)
        t0 = dss[0].transform
        a, e = t0.a, abs(t0.e)
        boxes = []
        for f, ds in zip(files, dss):
            t = ds.transform
            if ds.crs != dss[0].crs:
                raise InputError(f"the tiles {files[0].name!r} and {f.name!r} have different "
                                 "CRSs; reproject them onto one grid first")
            if not (np.isclose(t.a, a, rtol=1e-9) and np.isclose(abs(t.e), e, rtol=1e-9)):
                raise InputError(f"the tiles {files[0].name!r} and {f.name!r} have different "
                                 "cell sizes; resample them onto one grid first")
            top = t.f if t.e < 0 else t.f + t.e * ds.height
            boxes.append((t.c, top, ds.width, ds.height, t.e > 0))
        left = min(b[0] for b in boxes)
        top = max(b[1] for b in boxes)
        parts = []
        for f, ds, (x0, y0, w, h, flipped) in zip(files, dss, boxes):
            col = (x0 - left) / a
            row = (top - y0) / e
            if abs(col - round(col)) > 1e-6 or abs(row - round(row)) > 1e-6:
                raise InputError(f"the tile {f.name!r} is not aligned with {files[0].name!r} "
                                 "to whole cells; resample the tiles onto one grid first")
            parts.append(_Part(ds, int(round(row)), int(round(col)), h, w, flipped))
        nrows = max(q.row + q.height for q in parts)
        ncols = max(q.col + q.width for q in parts)
    except BaseException:
        for ds in dss:
            ds.close()
        raise
    return parts, Affine(a, 0.0, left, 0.0, -e, top), (nrows, ncols), band, files


def _read_window(parts, band, r0, r1, c0, c1):
    from rasterio.windows import Window

    z = np.full((r1 - r0, c1 - c0), np.nan, dtype=np.float32)
    valid = np.zeros(z.shape, dtype=bool)
    for q in parts:
        rs, re = max(r0, q.row), min(r1, q.row + q.height)
        cs, ce = max(c0, q.col), min(c1, q.col + q.width)
        if rs >= re or cs >= ce:
            continue
        fr0, fr1 = rs - q.row, re - q.row
        if q.flipped:
            fr0, fr1 = q.height - fr1, q.height - fr0
        win = Window(cs - q.col, fr0, ce - cs, fr1 - fr0)
        try:
            data = q.ds.read(band, window=win, masked=True)
        except Exception as exc:  # noqa: BLE001 - a read failure is a damaged input file
            raise InputError(f"cannot read {q.ds.name!r}: the file is damaged or truncated "
                             f"({exc}); copy or export it again") from None
        zz = np.asarray(data.data, dtype=np.float32)
        vv = ~np.ma.getmaskarray(data) & np.isfinite(zz)
        if q.flipped:
            zz, vv = zz[::-1], vv[::-1]
        dst = (slice(rs - r0, re - r0), slice(cs - c0, ce - c0))
        z[dst] = np.where(vv, zz, z[dst])
        valid[dst] |= vv
    return z, valid


_POLYGON_SUFFIXES = (".gpkg", ".geojson", ".json", ".shp", ".fgb")


class _BaseLevel:
    """Base-level cells from a polygon layer or a mask raster on the DEM's grid, by window."""

    def __init__(self, spec, shape, transform, crs):
        self.shape = shape
        self.transform = transform
        self.ds = None
        self.geoms = None
        p = Path(spec)
        if not p.exists():
            raise InputError(f"the base-level file {str(p)!r} does not exist")
        if p.suffix.lower() in _POLYGON_SUFFIXES:
            import geopandas as gpd

            try:
                gdf = gpd.read_file(p)
            except Exception as exc:  # noqa: BLE001 - any reader failure is a user input problem
                raise InputError(f"cannot read the polygon layer {str(p)!r}: {exc}") from None
            if gdf.crs is not None:
                gdf = gdf.to_crs(crs.to_wkt())
            self.geoms = [g for g in gdf.geometry if g is not None and not g.is_empty]
            if not self.geoms:
                raise InputError(f"the polygon layer {str(p)!r} holds no geometries")
            return
        ds = _open(p)
        if (ds.height, ds.width) != tuple(shape) or ds.transform != transform:
            ds.close()
            raise InputError(f"the base-level raster {str(p)!r} is not on the DEM's grid "
                             f"({ds.height}x{ds.width} vs {shape[0]}x{shape[1]}); resample it")
        self.ds = ds

    def window(self, r0, r1, c0, c1) -> np.ndarray:
        from affine import Affine

        if self.geoms is not None:
            from rasterio.features import rasterize

            return rasterize(((g, 1) for g in self.geoms), out_shape=(r1 - r0, c1 - c0),
                             transform=self.transform @ Affine.translation(c0, r0),
                             fill=0, dtype="uint8").astype(bool)
        from rasterio.windows import Window

        m = self.ds.read(1, window=Window(c0, r0, c1 - c0, r1 - r0), masked=True)
        return np.asarray(m.filled(0)) != 0

    def close(self):
        if self.ds is not None:
            self.ds.close()


def dem_into_tiles(path, tile: int = 1024, folder=None, band: int | None = None, crs=None,
                   sea_level: float | None = None, base_level=None, *, replace_crs=None,
                   elevation_range=PLAUSIBLE_ELEVATION_M,
                   implausible_elevations: str = "refuse"):
    """Read a DEM (a raster file, a VRT, or a folder of GeoTIFF tiles) window by window
    into a tile store of ``tile`` × ``tile`` cells.

    Parameters
    ----------
    path : str or Path
    tile : int
        Side of a tile, in cells.
    folder : str or Path, optional
        Working folder for a :class:`~basinkit.io.tile_folder.TileFolder`; without one the
        tiles are kept in memory (:class:`~basinkit.tiles.MemoryTiles`).
    band, crs, replace_crs, sea_level, elevation_range, implausible_elevations
        As for :func:`basinkit.io.dem.read_dem`.
    base_level : str or Path, optional
        Extra exits, as for ``read_dem``: a polygon layer (cells whose centre lies inside;
        rasterized window by window) or a mask raster on the DEM's grid (non-zero = exit;
        read window by window; a raster must be on the mosaic's north-up grid).

    Returns
    -------
    The tile store (its ``layout`` attribute is the :class:`TileLayout`).
    """
    parts, transform, shape, band, files = _sources(path, band)
    extra = None
    try:
        file_crs = parts[0].ds.crs
        pcrs, crs_record = _choose_crs(files[0], file_crs, crs, replace_crs)
        check_geographic_extent(transform, shape, pcrs, name=repr(str(path)))
        lo, hi = check_elevation_range(elevation_range)
        if int(tile) < 1:
            raise InputError(f"the tile side must be at least 1 cell, got {tile}")
        layout = TileLayout.square(shape[0], shape[1], int(tile))
        if folder is None:
            store = MemoryTiles(layout)
        else:
            try:
                store = TileFolder(folder, layout)
            except ValueError as exc:  # a folder holding tiles of another layout
                raise InputError(str(exc)) from None
        store.write_meta("base_level", sea_level is not None or base_level is not None)
        extra = _BaseLevel(base_level, shape, transform, pcrs) if base_level is not None \
            else None
        any_valid = False
        n_bad = 0
        for ti, tj in layout.tiles():
            r0, r1, c0, c1 = layout.window(ti, tj)
            z, valid = _read_window(parts, band, r0, r1, c0, c1)
            valid, bad = screen_elevations(z, valid, (lo, hi), implausible_elevations,
                                           name=repr(str(path)))
            n_bad += bad
            z[~valid] = np.nan
            any_valid = any_valid or bool(valid.any())
            store.write("elevation", ti, tj, z)
            store.write("valid", ti, tj, valid)
            if sea_level is not None or extra is not None:
                bl = valid & (z <= sea_level) if sea_level is not None \
                    else np.zeros(valid.shape, dtype=bool)
                if extra is not None:
                    bl |= valid & extra.window(r0, r1, c0, c1)
                store.write("base_level", ti, tj, bl)
    finally:
        for q in parts:
            q.ds.close()
        if extra is not None:
            extra.close()
    if not any_valid:
        raise InputError("the DEM holds no valid cells (every cell is nodata)")
    store.write_meta("transform", tuple(float(v) for v in tuple(transform)[:6]))
    store.write_meta("crs", pcrs.to_wkt())
    store.write_meta("source", {"path": str(Path(path).resolve()),
                                "files": [f.name for f in files],
                                "sha256": [file_sha256(f) for f in files],
                                "band": band, **crs_record, "elevation_range_m": [lo, hi],
                                "implausible_elevations": implausible_elevations,
                                "implausible_elevation_cells": n_bad})
    return store
