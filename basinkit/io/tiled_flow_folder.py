"""The tiled flow folder: the products of the route by tiles written window by window as
tiled GeoTIFFs with overviews, and read back tile by tile.

A tiled flow folder holds the files of the in-memory flow folder
(:mod:`basinkit.io.flow_folder`) under the same names and encodings --
``elevation_conditioned.tif`` (float32, NaN nodata), ``direction_d8.tif`` (int16 azimuth,
-1 no outflow, -32768 nodata), ``accumulation_cells.tif`` (int32, 0 nodata; int64 on grids of
2³¹ cells or more), ``upstream_area_m2.tif`` (float64, NaN nodata), ``elevation_input.tif``
with ``--copy-input`` -- and ``flow.json``, whose ``tiled`` record says the folder was made
by tiles (its tile rows and columns). Any GDAL tool reads the rasters; the in-memory
:func:`~basinkit.io.flow_folder.load_flow` reads the folder too when the grid fits.

:class:`FlowRasterTiles` is a tile store (the methods of
:class:`basinkit.tiles.MemoryTiles`) whose flow layers are read by windows from the folder's
GeoTIFFs and whose other layers live in a working :class:`TileFolder`: the tiled delineation
and channel passes run on it without copying the grid.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..tiles.layout import TileLayout
from .tile_folder import TileFolder
from .writers import atomic_path, raster_codec

__all__ = ["TILED_PRODUCTS", "write_tiled_geotiff", "overview_factors", "is_tiled_folder",
           "TiledFlowFolder", "FlowRasterTiles", "gdal_cache_env", "layer_reader"]

#: tile-store layer -> (flow-folder key of :data:`basinkit.io.flow_folder.FILES`, dtype,
#: nodata, overview resampling)
TILED_PRODUCTS = {
    "filled": ("conditioned", "float32", float("nan"), "average"),
    "directions": ("d8", "int16", -32768, "nearest"),
    "cell_count": ("cells", "int32", 0, "nearest"),
    "upstream_area_m2": ("area", "float64", float("nan"), "nearest"),
}
BLOCK = 256


def gdal_cache_env():
    """A context in which GDAL's block cache holds at most
    :data:`basinkit.tiles.plan.GDAL_CACHE_MB`: the tiled passes read and write by windows,
    so a larger cache (GDAL's default is 5 % of the machine's memory) would only hold
    blocks already done -- building the overviews of four rasters filled it with ~600 MB
    at 4096² cells."""
    import rasterio

    from ..tiles.plan import GDAL_CACHE_MB

    return rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB)


def overview_factors(shape) -> list[int]:
    """Overview levels 2, 4, 8, ... down to about 64 cells on the longer side (at least one
    level on grids of more than one cell)."""
    n = max(shape)
    out = []
    f = 2
    while n // f >= 64 or (not out and n >= 2):
        out.append(f)
        f *= 2
    return out


#: columns of a window written at once (a multiple of the block)
WRITE_COLUMNS = 8 * BLOCK


def write_tiled_geotiff(path, shape, read_window, dtype, nodata, transform, crs, *,
                        resampling="nearest", tags=None, on_window=None):
    """Write a grid held as tiles into one tiled, compressed GeoTIFF window by window, then
    its internal overviews; only one window (a row of blocks, at most
    :data:`WRITE_COLUMNS` wide) is in memory at a time.

    ``read_window(r0, r1, c0, c1)`` gives rows ``r0:r1`` and columns ``c0:c1`` of the grid;
    ``on_window(r0, r1, c0, c1, array)`` (optional) sees each window as written (for
    summaries). Windows are whole blocks of 256 × 256 cells taken row by row, so the file
    does not depend on how the grid was cut into tiles: the same grid gives the same bytes.
    The codec and predictor are those of :func:`basinkit.io.writers.write_geotiff`; the
    file is written beside ``path`` and renamed when complete."""
    import rasterio
    from rasterio.enums import Resampling
    from rasterio.windows import Window

    from .writers import CODEC_LEVELS, _rio_crs

    nrows, ncols = (int(v) for v in shape)
    dtype = np.dtype(dtype)
    codec = raster_codec()
    profile = dict(driver="GTiff", height=nrows, width=ncols, count=1,
                   dtype=dtype.name, transform=transform, crs=_rio_crs(crs), nodata=nodata,
                   compress=codec, num_threads="ALL_CPUS", tiled=True, blockxsize=BLOCK,
                   blockysize=BLOCK, bigtiff="IF_SAFER")
    if codec == "zstd":
        profile.update(zstd_level=CODEC_LEVELS["zstd"],
                       predictor=3 if dtype == np.float32 else 1)
    else:
        profile.update(zlevel=CODEC_LEVELS.get(codec, 6),
                       predictor=2 if dtype.kind in "iu" else 3)
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", **profile) as ds:
            for r0 in range(0, nrows, BLOCK):
                r1 = min(r0 + BLOCK, nrows)
                for c0 in range(0, ncols, WRITE_COLUMNS):
                    c1 = min(c0 + WRITE_COLUMNS, ncols)
                    a = np.asarray(read_window(r0, r1, c0, c1))
                    if on_window is not None:
                        on_window(r0, r1, c0, c1, a)
                    ds.write(np.ascontiguousarray(a, dtype=dtype)[np.newaxis], [1],
                             window=Window(c0, r0, c1 - c0, r1 - r0))
            factors = overview_factors((nrows, ncols))
            if factors:
                ds.build_overviews(factors, getattr(Resampling, resampling))
                ds.update_tags(ns="rio_overview", resampling=resampling)
            if tags:
                ds.update_tags(**{k: (v if isinstance(v, str) else json.dumps(v))
                                  for k, v in tags.items()})
    return Path(path)


def layer_reader(layout, store, layer):
    """``read_window(r0, r1, c0, c1)`` of a store's layer (for :func:`write_tiled_geotiff`)."""
    from ..tiles.window import read_window

    return lambda r0, r1, c0, c1: read_window(layout, store, layer, r0, r1, c0, c1)


def is_tiled_folder(folder) -> bool:
    """Whether ``folder`` is a flow folder made by tiles (its flow.json says so)."""
    meta = Path(folder) / "flow.json"
    try:
        return bool(json.loads(meta.read_text()).get("tiled"))
    except (OSError, ValueError, AttributeError):
        return False


class TiledFlowFolder:
    """A tiled flow folder opened for reading: its record, grid and layout.

    Attributes
    ----------
    folder : Path
    meta : dict
        flow.json.
    layout : TileLayout
        The tiles it was routed in (the passes on it use the same cut).
    transform : affine.Affine
    crs : pyproj.CRS
    """

    def __init__(self, folder):
        from affine import Affine
        from pyproj import CRS

        from .flow_folder import FILES

        self.folder = Path(folder)
        try:
            self.meta = json.loads((self.folder / FILES["meta"]).read_text())
        except (OSError, ValueError) as exc:
            raise InputError(f"{str(self.folder)!r} is not a readable flow folder ({exc}); "
                             "create one with 'basinkit route DEM -o FOLDER'") from None
        rec = self.meta.get("tiled") or {}
        nrows, ncols = self.meta["grid_shape"]
        self.layout = TileLayout(int(nrows), int(ncols), int(rec["tile_rows"]),
                                 int(rec["tile_cols"]))
        for key in ("d8", "area", "conditioned"):
            if not (self.folder / FILES[key]).exists():
                raise InputError(f"the flow folder {str(self.folder)!r} lacks {FILES[key]}; "
                                 "run route again")
        self.transform = Affine(*rec["transform"])
        self.crs = CRS.from_wkt(self.meta["crs"])

    def path(self, key) -> Path:
        from .flow_folder import FILES

        return self.folder / FILES[key]

    def geometry(self):
        """The grid's :class:`~basinkit.terrain.geometry.CellGeometry` (per-row sizes)."""
        from ..terrain.geometry import cell_geometry

        return cell_geometry(self.transform, self.layout.shape, self.crs)

    def read_cells(self, key, cells) -> np.ndarray:
        """Values of the raster ``key`` at flat ``cells`` (any shape), read block by block."""
        import rasterio
        from rasterio.windows import Window

        cells = np.asarray(cells, dtype=np.int64)
        flat = cells.ravel()
        out = None
        uniq, inv = np.unique(flat, return_inverse=True)
        nc = self.layout.ncols
        r, c = uniq // nc, uniq % nc
        block = (r // BLOCK) * (nc // BLOCK + 1) + c // BLOCK
        with rasterio.open(self.path(key)) as ds:
            vals = np.empty(uniq.size, dtype=ds.dtypes[0])
            for b in np.unique(block):
                sel = np.flatnonzero(block == b)
                br, bc = int(r[sel[0]] // BLOCK) * BLOCK, int(c[sel[0]] // BLOCK) * BLOCK
                h, w = min(BLOCK, self.layout.nrows - br), min(BLOCK, nc - bc)
                a = ds.read(1, window=Window(bc, br, w, h))
                vals[sel] = a[r[sel] - br, c[sel] - bc]
            out = vals[inv].reshape(cells.shape)
        return out

    def elevation_source(self):
        """``(path, band)`` of the DEM as read, when it can be read by windows on this grid
        (a copy in the folder, or the referenced file, unchanged and north-up on the same
        grid); None otherwise."""
        import rasterio

        from .flow_folder import FILES
        from .hashing import file_sha256

        rec = self.meta.get("input_elevation") or {}
        if rec.get("stored") == "copy" and (self.folder / FILES["input"]).exists():
            return str(self.folder / FILES["input"]), 1
        if rec.get("stored") != "reference" or not Path(rec.get("path", "")).is_file():
            return None
        try:
            with rasterio.open(rec["path"]) as ds:
                same = (ds.transform.almost_equals(self.transform)
                        and (ds.height, ds.width) == self.layout.shape)
        except Exception:  # noqa: BLE001 - an unreadable DEM: no elevation columns
            return None
        if not same or file_sha256(rec["path"]) != rec.get("sha256"):
            return None
        return str(rec["path"]), int(rec.get("band") or 1)

    def windowed_model(self):
        """A stand-in for a FlowModel that places outlets (:func:`place_outlets`) and
        writes step records without holding the grid: its terrain's ``valid`` and its D8
        upstream area are read cell by cell from the rasters, on demand."""
        from ..terrain.model import Terrain

        shape = self.layout.shape
        valid = _Cells(self, "d8", shape, lambda a: a != -32768)
        area = _Cells(self, "area", shape, lambda a: a.astype(np.float64))
        src = (self.meta.get("inputs") or {}).get("dem") or {}
        terrain = Terrain(_Shape(shape), valid, self.transform, self.crs, self.geometry(),
                          None, src)
        return _WindowedFlow(terrain, area, self)

    def store(self, work) -> "FlowRasterTiles":
        """A tile store on this folder, writing its own layers into the working folder
        ``work``."""
        return FlowRasterTiles.create(work, self)


class _Shape:
    """Stands for a grid of which only the shape is known."""

    def __init__(self, shape):
        self.shape = tuple(shape)
        self.size = int(np.prod(self.shape))


class _Cells:
    """A grid read cell by cell from a raster of the folder: ``g.ravel()[cells]``."""

    def __init__(self, flow, key, shape, convert):
        self.flow, self.key, self.shape, self.convert = flow, key, tuple(shape), convert

    def ravel(self):
        return self

    def __getitem__(self, cells):
        cells = np.asarray(cells, dtype=np.int64)
        if cells.size == 0:
            return self.convert(np.zeros(cells.shape, dtype=np.int16))
        return self.convert(self.flow.read_cells(self.key, cells))


class _WindowedFlow:
    """See :meth:`TiledFlowFolder.windowed_model`."""

    method = "d8"
    input_elevation = None

    def __init__(self, terrain, area, flow):
        self.terrain = terrain
        self._area = area
        self.flow = flow
        self.meta = flow.meta
        self.parameters = {**(flow.meta.get("parameters") or {}),
                           "flow_folder": str(flow.folder.resolve())}

    @property
    def shape(self):
        return self.terrain.shape

    def d8_upstream_area_flat(self):
        return self._area


class FlowRasterTiles(TileFolder):
    """A tile store whose flow layers (``directions``, ``upstream_area_m2``,
    ``cell_count``, ``filled``) are windows of a tiled flow folder's GeoTIFFs, and whose
    other layers are tiles in a working folder (see :class:`TileFolder`). It reopens
    itself on a dask worker from the working folder (:meth:`open`)."""

    RECORD = "flow_rasters.json"

    @classmethod
    def create(cls, work, flow: TiledFlowFolder) -> "FlowRasterTiles":
        work = Path(work)
        store = cls(work, flow.layout)
        rec = {layer: [str(flow.path(key).resolve()), 1]
               for layer, (key, *_rest) in TILED_PRODUCTS.items()}
        elev = flow.elevation_source()
        if elev is not None:
            rec["elevation"] = [str(Path(elev[0]).resolve()), elev[1]]
        tmp = work / f".{cls.RECORD}.{os.getpid()}.tmp"
        tmp.write_text(json.dumps(rec))
        os.replace(tmp, work / cls.RECORD)
        store._rasters = rec
        return store

    @classmethod
    def open(cls, folder) -> "FlowRasterTiles":
        store = super().open(folder)
        store._rasters = json.loads((Path(folder) / cls.RECORD).read_text())
        return store

    def _raster(self, layer):
        return getattr(self, "_rasters", {}).get(layer)

    def has(self, layer: str, ti: int, tj: int) -> bool:
        if self._raster(layer):
            return True
        return super().has(layer, ti, tj)

    def read(self, layer: str, ti: int, tj: int, *, mmap: bool = False) -> np.ndarray:
        src = self._raster(layer)
        if not src:
            return super().read(layer, ti, tj, mmap=mmap)
        import rasterio
        from rasterio.windows import Window

        r0, r1, c0, c1 = self.layout.window(ti, tj)
        with rasterio.open(src[0]) as ds:  # one handle per read: safe in threads
            a = ds.read(src[1], window=Window(c0, r0, c1 - c0, r1 - r0))
        if layer == "cell_count":
            a = a.astype(np.int64)
        return a

    def write(self, layer: str, ti: int, tj: int, array: np.ndarray) -> None:
        if self._raster(layer):
            raise ValueError(f"the layer {layer!r} is read from the flow folder")
        super().write(layer, ti, tj, array)
