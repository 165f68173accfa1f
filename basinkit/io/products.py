"""Read back what the workflow steps wrote into an output folder (the products contract):
tables, GeoPackage layers, the flow folder's rasters and the JSON records.

Every reader is tolerant: a product that is not there (its step was turned off) reads as
``None``; a file that cannot be read is noted in :attr:`RunFolder.problems` and also reads
as ``None``, so that whoever builds on the folder can leave that part out and say why.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["RunFolder", "PRODUCT_FILES", "RasterWindow"]

#: The products a folder may hold: key -> (file inside the folder, what writes it).
PRODUCT_FILES = {
    "provenance": ("provenance.json", "the job runner"),
    "flow": ("flow/flow.json", "the flow folder step (route)"),
    "catchments": ("catchments.csv", "the catchments step (delineate)"),
    "catchments_gpkg": ("catchments.gpkg", "the catchments step (delineate)"),
    "outlet_errors": ("outlet_errors.csv", "the catchments step (delineate)"),
    "channel_segments": ("channel_segments.csv", "the channels step (channels)"),
    "channels_gpkg": ("channels.gpkg", "the channels step (channels)"),
    "morphometry": ("morphometry.csv", "the morphometry step (morphometry)"),
    "hypsometry": ("hypsometry.csv", "the morphometry step (morphometry)"),
    "profile": ("profile.csv", "the profiles step (profile)"),
    "steepness": ("steepness.csv", "the profiles step (profile)"),
    "knickpoints": ("knickpoints.csv", "the profiles step (profile)"),
    "flow_paths": ("flow_paths.csv", "the profiles step (profile)"),
    "design_flows": ("design_flows.csv", "the design-flow step (design-flow)"),
    "hydrographs": ("hydrographs.csv", "the design-flow step (design-flow)"),
    "design_flows_json": ("design_flows.json", "the design-flow step (design-flow)"),
}

#: The first bytes of every PNG file (PNG specification, section 5.2).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"

#: Rasters of the flow folder, in the order they are tried for a map background.
ELEVATION_RASTERS = ("flow/elevation_input.tif", "flow/elevation_conditioned.tif")
#: Sub-catchment label rasters (one label per cell, labels in catchments.csv).
LABEL_RASTERS = ("subcatchment_labels.tif", "catchment_labels.tif")


class RasterWindow:
    """Part of a raster read into memory: ``array`` (float64, NaN outside the data),
    ``extent`` (xmin, xmax, ymin, ymax in map units), ``step`` (cells of the file per
    cell of ``array``; 1 = full resolution) and the file's ``crs`` (pyproj) and
    ``cell_size`` (x, y in map units)."""

    def __init__(self, array, extent, step, crs, cell_size):
        self.array, self.extent, self.step = array, extent, step
        self.crs, self.cell_size = crs, cell_size


class RunFolder:
    """An output folder of a job or of the commands, read lazily.

    Parameters
    ----------
    folder : str or Path
        The folder; it must exist.

    Raises
    ------
    InputError
        The folder does not exist or is not a folder.
    """

    def __init__(self, folder):
        self.folder = Path(folder)
        if not self.folder.is_dir():
            raise InputError(f"{str(self.folder)!r} is not a folder; give the output folder "
                             "of 'basinkit run' or of the commands")
        self.problems: list[str] = []
        self._json: dict = {}

    # ------------------------------------------------------------------ presence
    def path(self, key) -> Path:
        return self.folder / PRODUCT_FILES[key][0]

    def has(self, key) -> bool:
        return self.path(key).is_file()

    def first_existing(self, names):
        for n in names:
            if (self.folder / n).is_file():
                return self.folder / n
        return None

    def _problem(self, name, exc):
        msg = f"{name} could not be read ({type(exc).__name__}: {exc})"
        if msg not in self.problems:
            self.problems.append(msg)

    # ------------------------------------------------------------------ JSON
    def json(self, key):
        """The parsed JSON product ``key`` (``provenance``, ``flow`` or
        ``design_flows_json``), or None."""
        if key not in self._json:
            p = self.path(key)
            value = None
            if p.is_file():
                try:
                    value = json.loads(p.read_text(encoding="utf-8"))
                except (OSError, ValueError) as exc:
                    self._problem(PRODUCT_FILES[key][0], exc)
            self._json[key] = value if isinstance(value, dict) else None
        return self._json[key]

    # ------------------------------------------------------------------ figures
    def png(self, name):
        """The bytes of the PNG ``name`` (relative to the folder, e.g. a figure a step
        wrote under ``figures/``), or None when it is missing or not a PNG (noted in
        :attr:`problems` when it cannot be read)."""
        p = self.folder / name
        if not p.is_file():
            return None
        try:
            data = p.read_bytes()
        except OSError as exc:
            self._problem(name, exc)
            return None
        return data if data.startswith(PNG_SIGNATURE) else None

    # ------------------------------------------------------------------ tables
    def table(self, key, outlet_ids=None, usecols=None):
        """The CSV product ``key`` as a DataFrame (``outlet_id`` as text), or None.

        ``outlet_ids`` keeps only the rows of those outlets (read in chunks, so a table of
        millions of profile nodes is never held whole); ``usecols`` the named columns that
        exist.
        """
        import pandas as pd

        p = self.path(key)
        if not p.is_file():
            return None
        try:
            if usecols is not None:
                head = pd.read_csv(p, nrows=0).columns
                usecols = [c for c in head if c in set(usecols) | {"outlet_id"}]
            kw = dict(dtype={"outlet_id": str, "file_id": str}, keep_default_na=True,
                      usecols=usecols, low_memory=False)
            if outlet_ids is None:
                return pd.read_csv(p, **kw)
            want = {str(i) for i in outlet_ids}
            parts = [c[c["outlet_id"].isin(want)]
                     for c in pd.read_csv(p, chunksize=250_000, **kw)]
            return pd.concat(parts, ignore_index=True) if parts else None
        except (OSError, ValueError, KeyError) as exc:
            self._problem(PRODUCT_FILES[key][0], exc)
            return None

    # ------------------------------------------------------------------ layers
    def layer(self, key, names, columns=None):
        """The first of the GeoPackage layers ``names`` found in product ``key``, as a
        GeoDataFrame, or None."""
        p = self.path(key)
        if not p.is_file():
            return None
        try:
            import pyogrio

            have = {str(n) for n in pyogrio.list_layers(p)[:, 0]}
            name = next((n for n in names if n in have), None)
            if name is None:
                return None
            return pyogrio.read_dataframe(p, layer=name, columns=columns)
        except Exception as exc:  # noqa: BLE001 - any unreadable GeoPackage is a note
            self._problem(f"{PRODUCT_FILES[key][0]} layer {names[0]}", exc)
            return None

    # ------------------------------------------------------------------ rasters
    def elevation_raster(self):
        """Path of the DEM as read (else the conditioned DEM) in the flow folder, or None."""
        return self.input_elevation_raster() or self.first_existing(ELEVATION_RASTERS)

    def input_elevation_raster(self):
        """Path of the DEM as route read it: the flow folder's copy (elevation_input.tif)
        or the file flow.json names, when it is unchanged (same SHA-256), north-up and on
        the flow folder's grid; else None."""
        if "input_elevation" not in self._json:
            self._json["input_elevation"] = self._input_elevation_raster()
        return self._json["input_elevation"]

    def _input_elevation_raster(self):
        copy = self.first_existing(ELEVATION_RASTERS[:1])
        if copy is not None:
            return copy
        rec = (self.json("flow") or {}).get("input_elevation") or {}
        cond = self.first_existing(ELEVATION_RASTERS[1:])
        if rec.get("stored") != "reference" or rec.get("band", 1) != 1 or cond is None:
            return None
        p = Path(str(rec.get("path", "")))
        try:
            from .hashing import file_sha256

            if not p.is_file() or file_sha256(p) != rec.get("sha256"):
                return None
            a, b = self.raster_info(p), self.raster_info(cond)
        except Exception as exc:  # noqa: BLE001 - an unreadable DEM is a note, not a stop
            self._problem(str(p), exc)
            return None
        return p if a[:2] == b[:2] else None

    def raster_info(self, path):
        """``(transform, shape, crs, units)`` of a raster (units: the band's unit string,
        '' when the file does not say)."""
        import rasterio
        from pyproj import CRS

        with rasterio.open(path) as ds:
            crs = CRS.from_wkt(ds.crs.to_wkt()) if ds.crs else None
            units = (ds.units[0] if ds.units else "") or ""
            return ds.transform, (ds.height, ds.width), crs, units

    def read_window(self, path, bounds=None, max_cells=1_000_000):
        """Read ``bounds`` (xmin, xmax, ymin, ymax; default: everything) of a raster,
        decimated by a whole step so that at most about ``max_cells`` cells are held.

        Returns
        -------
        RasterWindow or None
            None when ``bounds`` misses the raster.
        """
        import rasterio
        from pyproj import CRS
        from rasterio.enums import Resampling
        from rasterio.windows import Window

        with rasterio.open(path) as ds:
            tr = ds.transform
            H, W = ds.height, ds.width
            if bounds is None:
                r0, r1, c0, c1 = 0, H, 0, W
            else:
                xmin, xmax, ymin, ymax = bounds
                c0 = max(int(math.floor((xmin - tr.c) / tr.a)), 0)
                c1 = min(int(math.ceil((xmax - tr.c) / tr.a)), W)
                r0 = max(int(math.floor((ymax - tr.f) / tr.e)), 0)
                r1 = min(int(math.ceil((ymin - tr.f) / tr.e)), H)
                if c1 <= c0 or r1 <= r0:
                    return None
            h, w = r1 - r0, c1 - c0
            step = max(1, int(math.ceil(math.sqrt(h * w / max_cells))))
            out_shape = (max(1, h // step), max(1, w // step))
            arr = ds.read(1, window=Window(c0, r0, w, h), out_shape=out_shape,
                          resampling=Resampling.nearest, masked=True)
            a = np.asarray(arr.filled(np.nan) if np.ma.isMaskedArray(arr) else arr,
                           dtype=np.float64)
            a[~np.isfinite(a)] = np.nan
            crs = CRS.from_wkt(ds.crs.to_wkt()) if ds.crs else None
            extent = (tr.c + c0 * tr.a, tr.c + c1 * tr.a, tr.f + r1 * tr.e, tr.f + r0 * tr.e)
            return RasterWindow(a, extent, step, crs, (abs(tr.a), abs(tr.e)))

    def raster_strips(self, paths, rows_per_strip=512):
        """Yield ``(row0, arrays)`` strips of several rasters of one grid, row block by row
        block, so that a whole-grid statistic never holds the grid in memory."""
        import rasterio
        from rasterio.windows import Window

        handles = [rasterio.open(p) for p in paths]
        try:
            H, W = handles[0].height, handles[0].width
            if any((h.height, h.width) != (H, W) for h in handles):
                raise InputError("the rasters " + ", ".join(str(p) for p in paths)
                                 + " are not on one grid")
            for r0 in range(0, H, rows_per_strip):
                win = Window(0, r0, W, min(rows_per_strip, H - r0))
                yield r0, [h.read(1, window=win, masked=True) for h in handles]
        finally:
            for h in handles:
                h.close()
