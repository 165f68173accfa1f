"""The flow folder: a FlowModel written as GeoTIFFs plus flow.json, and read back."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..routing import _d8, _stack
from ..routing.flow_model import D8_NODATA, FlowModel
from ..terrain.model import Terrain
from .writers import (prepare_output_dir, provenance, raster_codec, write_geotiff,
                      write_json)

__all__ = ["FILES", "write_flow_folder", "FlowFolderWriter", "load_flow"]

# file names inside a flow folder
FILES = {
    "input": "elevation_input.tif",
    "conditioned": "elevation_conditioned.tif",
    "d8": "direction_d8.tif",
    "dinf": "direction_dinf.tif",
    "cells": "accumulation_cells.tif",
    "area": "upstream_area_m2.tif",
    "meta": "flow.json",
}


def write_flow_folder(fm, folder, overwrite: bool = False,
                      extra_provenance: dict | None = None, copy_input: bool | None = None):
    """Write the flow folder of a FlowModel: GeoTIFFs with the input's georeferencing and
    flow.json. Returns the folder.

    The DEM as read is not copied when it came from a file: flow.json names that file and
    its SHA-256, and :func:`load_flow` reads it from there (refusing a file that changed).
    ``copy_input=True`` (``basinkit route --copy-input``) writes the copy,
    elevation_input.tif, as well, so that the folder stands on its own; a DEM that did not
    come from a file (an array) is always copied.
    """
    with FlowFolderWriter(folder, overwrite) as writer:
        return writer.finish(fm, extra_provenance=extra_provenance, copy_input=copy_input)


#: the layers ``route`` hands over as they become final (its ``ready`` callback): key in
#: FILES, nodata value
_EARLY_LAYERS = {"conditioned": ("conditioned", np.float32(np.nan)),
                 "receivers": ("d8", D8_NODATA)}


def _write_layer(path, name, grid, transform, crs, shape, nodata):
    if name == "receivers":  # the direction codes, made here (a kernel without the GIL)
        grid = _d8.receivers_to_azimuth(grid, shape[1]).reshape(shape)
    write_geotiff(path, grid, transform, crs, nodata=nodata)


class FlowFolderWriter:
    """A flow folder written while the route is still running.

    Pass :meth:`ready` as ``route(..., ready=writer.ready)``: the conditioned elevations
    and the D8 directions are written in one background thread as soon as ``route`` has
    them (the direction codes are made there too; GDAL compresses and writes without the
    GIL, and the routing kernels that follow leave a core free part of the time), and
    :meth:`finish` writes the rest once the model is complete and waits for them. The
    files are the bytes
    :func:`write_flow_folder` writes. Use it as a context manager, so that the thread has
    stopped before the folder is given up after an error.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.io.flow_folder import FlowFolderWriter
    >>> t = terrain_from_array(np.add.outer(np.arange(4.0, 0, -1), np.zeros(3)), cellsize=10)
    >>> with FlowFolderWriter("flow_example", overwrite=True) as w:
    ...     w.georeference(t)
    ...     out = w.finish(route(t, ready=w.ready))
    >>> sorted(p.name for p in out.iterdir())[:2]
    ['accumulation_cells.tif', 'direction_d8.tif']
    """

    def __init__(self, folder, overwrite: bool = False):
        self.out = prepare_output_dir(folder, overwrite)
        for name in FILES.values():  # no stale layer of an earlier run may stay listed
            (self.out / name).unlink(missing_ok=True)
        self._pool = None
        self._pending = {}
        self._georef = None

    def georeference(self, terrain):
        """The transform and CRS of the layers (the terrain's); needed before
        :meth:`ready` is called."""
        self._georef = (terrain.transform, terrain.crs, terrain.shape)

    def ready(self, name, grid):
        """Start writing a layer ``route`` has finished (see its ``ready``); layers this
        writer does not write early are left to :meth:`finish`."""
        if name not in _EARLY_LAYERS or self._georef is None:
            return
        from concurrent.futures import ThreadPoolExecutor

        key, nodata = _EARLY_LAYERS[name]
        if self._pool is None:
            self._pool = ThreadPoolExecutor(1, thread_name_prefix="basinkit-flow-writer")
        self._pending[key] = self._pool.submit(_write_layer, self.out / FILES[key], name,
                                               grid, *self._georef, nodata)

    def finish(self, fm, extra_provenance: dict | None = None,
               copy_input: bool | None = None):
        """Write the layers not written yet and flow.json; wait for the background writes
        (their errors raise here). Returns the folder (see :func:`write_flow_folder`)."""
        out = self.out
        t = fm.terrain
        nod = np.float32(np.nan)
        src = t.source if isinstance(t.source, dict) else {}
        input_record = None
        if fm.input_elevation is not None:
            if copy_input is None:
                copy_input = not (src.get("path") and src.get("sha256"))
            if copy_input:
                write_geotiff(out / FILES["input"], fm.input_elevation, t.transform, t.crs,
                              nodata=nod)
                input_record = {"stored": "copy", "file": FILES["input"]}
            else:
                input_record = {"stored": "reference", "path": src["path"],
                                "sha256": src["sha256"], "band": src.get("band") or 1}
        if "conditioned" not in self._pending:
            write_geotiff(out / FILES["conditioned"], t.elevation, t.transform, t.crs,
                          nodata=nod)
        if "d8" not in self._pending:
            write_geotiff(out / FILES["d8"], fm.direction_d8(), t.transform, t.crs,
                          nodata=D8_NODATA)
        if fm.dinf_azimuth is not None:
            write_geotiff(out / FILES["dinf"], fm.dinf_azimuth, t.transform, t.crs,
                          nodata=nod)
        cells = fm.accumulation(unit="cells")
        if cells.dtype.kind == "i":
            cells = np.where(t.valid, cells.astype(np.int32, copy=False), np.int32(0))
            write_geotiff(out / FILES["cells"], cells, t.transform, t.crs, nodata=0)
        else:
            write_geotiff(out / FILES["cells"], cells.astype(np.float32), t.transform,
                          t.crs, nodata=nod)
        del cells
        write_geotiff(out / FILES["area"], fm.upstream_area(), t.transform, t.crs,
                      nodata=np.nan)
        for key in list(self._pending):
            self._pending.pop(key).result()
        meta = provenance(fm.parameters, {"dem": t.source}, crs=t.crs, shape=t.shape,
                          conditioning=(fm.summary.to_dict() if fm.summary else None),
                          files={k: v for k, v in FILES.items()
                                 if (out / v).exists() or k == "meta"},
                          base_level=bool(t.base_level is not None and t.base_level.any()),
                          input_elevation=input_record, raster_codec=raster_codec(),
                          **(extra_provenance or {}))
        write_json(out / FILES["meta"], meta)
        return out

    def close(self):
        """Wait for the background thread (a write under way ends; queued ones are
        dropped)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
        self._pending.clear()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


def _read_band(path):
    import rasterio

    try:
        with rasterio.open(path) as ds:
            return ds.read(1), ds.transform, ds.crs
    except Exception as exc:  # noqa: BLE001 - a truncated or damaged raster (GDAL's errors)
        if not isinstance(exc, OSError) and not \
                (type(exc).__module__ or "").startswith("rasterio"):
            raise
        why = " ".join(str(exc).split())[:200]
        raise InputError(f"cannot read {str(path)!r} ({why}); the flow folder is damaged "
                         "or incomplete: run 'basinkit route' again") from None


def _read_referenced_input(rec, folder, shape, crs):
    """The DEM as read by route, from the file flow.json names, if it is unchanged."""
    from .dem import read_dem

    path = Path(rec["path"])
    again = ("run route again, or run it with --copy-input to keep a copy of the DEM in "
             "the flow folder")
    if not path.is_file():
        raise InputError(f"the flow folder {str(folder)!r} reads the DEM as given to route "
                         f"from {str(path)!r}, which is no longer there; put it back or "
                         f"{again}")
    terrain = read_dem(path, band=int(rec.get("band") or 1), crs=crs.to_wkt(),
                       check_ram=False)
    if terrain.source.get("sha256") != rec.get("sha256"):
        raise InputError(f"the DEM {str(path)!r} changed since the flow folder "
                         f"{str(folder)!r} was made from it (its SHA-256 differs); {again}")
    z = terrain.elevation
    if z.shape != shape:
        raise InputError(f"the DEM {str(path)!r} is not on the grid of the flow folder "
                         f"{str(folder)!r}; {again}")
    return z


def load_flow(folder) -> FlowModel:
    """Read a flow folder written by :func:`write_flow_folder` (or ``basinkit route``).

    The D8 receivers come from the direction raster; the stack is rebuilt (one O(N) pass).
    """
    from pyproj import CRS

    from ..terrain.geometry import cell_geometry

    p = Path(folder)
    meta_path = p / FILES["meta"]
    if not meta_path.exists():
        raise InputError(f"{str(p)!r} is not a flow folder (no {FILES['meta']}); create one "
                         "with 'basinkit route DEM -o FOLDER'")
    try:
        meta = json.loads(meta_path.read_text())
    except json.JSONDecodeError as exc:
        raise InputError(f"{str(meta_path)!r} is damaged ({exc}); run route again") from None
    for k in ("conditioned", "d8"):
        if not (p / FILES[k]).exists():
            raise InputError(f"the flow folder {str(p)!r} lacks {FILES[k]}; run route again")
    z, transform, crs = _read_band(p / FILES["conditioned"])
    code, _, _ = _read_band(p / FILES["d8"])
    pcrs = CRS.from_wkt(crs.to_wkt())
    valid = np.isfinite(z)
    rec, bad = _d8.azimuth_to_receivers(code.ravel().astype(np.int32), z.shape[1], z.shape[0])
    if bad:
        raise InputError(f"{FILES['d8']} in {str(p)!r} holds {bad} cells with codes other "
                         "than 0, 45, ..., 315, -1 or -32768")
    terrain = Terrain(z.astype(np.float32), valid, transform, pcrs,
                      cell_geometry(transform, z.shape, pcrs), None,
                      meta.get("inputs", {}).get("dem", {}))
    stack = _stack.build_stack(rec)
    if stack.size != int(valid.sum()):
        raise InputError(f"{FILES['d8']} in {str(p)!r} has directions that loop back on "
                         f"themselves ({int(valid.sum()) - stack.size} cells never reach an "
                         "exit); it was edited outside basinkit: run route again")
    params = meta.get("parameters", {})
    fm = FlowModel(terrain, rec, stack, params.get("method", "d8"), parameters=params)
    if (p / FILES["input"]).exists():
        fm.input_elevation = _read_band(p / FILES["input"])[0].astype(np.float32)
    elif (meta.get("input_elevation") or {}).get("stored") == "reference":
        fm.input_elevation = _read_referenced_input(meta["input_elevation"], p, z.shape,
                                                    pcrs)
    if fm.method in ("dinf", "mfd"):
        from ..routing.multi import dinf_azimuth, multi_receivers

        fm.multi = multi_receivers(fm, fm.method, params.get("mfd_exponent", 1.1))
        if fm.method == "dinf":  # same kernel, same surface: equals the saved raster
            fm.dinf_azimuth = dinf_azimuth(fm)
    fm.parameters["flow_folder"] = str(p.resolve())
    fm.meta = meta
    return fm
