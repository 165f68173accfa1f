"""The flow step by tiles (``basinkit route --max-memory``): the DEM read window by window
into a working tile folder, filled, routed and accumulated by tiles
(:mod:`basinkit.tiles`), and the flow folder written window by window as tiled GeoTIFFs
with overviews (:mod:`basinkit.io.tiled_flow_folder`).

The working tile folder sits beside the output (``.FLOW.tiles``). It outlives a killed or
failed run: the same command run again finds it, checks that the DEM and the settings are
the same, and goes on from the tiles already finished. It is removed once the flow folder
has been swapped in.

:func:`route_dem` is the Python face of ``basinkit route``: it plans the run under a
memory budget (:func:`basinkit.tiles.plan.plan_route`) and routes in memory or by tiles.
"""

from __future__ import annotations

import json
import os
import shutil
import time
from pathlib import Path

import numpy as np

from ...errors import InputError
from ..progress import as_reporter
from ._common import CAUTION_TEXT

__all__ = ["route_dem", "tiled_flow_step", "work_folder_for", "check_tiled_settings",
           "grid_shape_of"]

RUN_RECORD = "run.json"


def work_folder_for(output) -> Path:
    """The working tile folder of the flow folder ``output``: ``.NAME.tiles`` beside it."""
    from ...io.lock import short_name
    from ...io.transaction import real_target

    target = real_target(output)
    return target.parent / f".{short_name(target)}.tiles"


def check_tiled_settings(settings) -> None:
    """Refuse settings the route by tiles does not offer (one line, before any work)."""
    bad = []
    if settings.method != "d8":
        bad.append(f"--method {settings.method}")
    if settings.conditioning != "fill":
        bad.append(f"--condition {settings.conditioning}")
    if settings.epsilon:
        bad.append("--epsilon")
    if settings.burn_lines:
        bad.append("--burn")
    if settings.cell_size is not None or settings.origin is not None:
        bad.append("--cell-size/--origin")
    if bad:
        raise InputError(f"routing by tiles offers D8 routing over the exactly filled "
                         f"surface only, not {', '.join(bad)}; leave those out, or route in "
                         "memory (a larger --max-memory, no --tile-size)")


def grid_shape_of(settings) -> tuple[int, int] | None:
    """The DEM's rows and columns from its header (a folder of tiles: their mosaic); None
    when a single file's header cannot be read as a georeferenced raster (the in-memory
    reader then says what is wrong with it: damaged, or georeferencing to give)."""
    from ...io.tile_source import _sources

    if not Path(settings.dem).is_dir():
        try:
            import rasterio

            with rasterio.open(settings.dem) as ds:
                return (ds.height, ds.width)
        except Exception:  # noqa: BLE001 - read_terrain reports it in the user's terms
            return None
    parts, _, shape, _, _ = _sources(settings.dem, settings.band)
    for q in parts:
        q.ds.close()
    return shape


def _stat(p):
    p = Path(p)
    files = sorted(f for f in p.iterdir() if f.suffix.lower() in (".tif", ".tiff")) \
        if p.is_dir() else [p]
    out = []
    for f in files:
        s = f.stat()
        out.append([str(f.resolve()), int(s.st_size), int(s.st_mtime_ns)])
    return out


def _run_key(settings, tile: int) -> dict:
    from ... import __version__

    return {"software": "basinkit", "version": __version__, "dem": _stat(settings.dem),
            "band": settings.band, "crs": None if settings.crs is None else str(settings.crs),
            "replace_crs": (None if settings.replace_crs is None
                            else str(settings.replace_crs)),
            "sea_level_m": settings.sea_level_m,
            "base_level": None if settings.base_level is None else _stat(settings.base_level),
            "elevation_range_m": [float(v) for v in settings.elevation_range_m],
            "implausible_elevations": settings.implausible_elevations, "tile": int(tile)}


def _prepare_work(work: Path, key: dict, rep) -> bool:
    """Make the working folder, or reuse the one a killed run of the same settings left
    (True), or start it again when the DEM or the settings changed."""
    rec = work / RUN_RECORD
    if work.exists():
        try:
            found = json.loads(rec.read_text())
        except (OSError, ValueError):
            found = None
        if not isinstance(found, dict) or found.get("software") != "basinkit":
            raise InputError(f"{str(work)!r} is in the way of the working tiles of this "
                             "output and was not made by basinkit; move it away")
        if found == key:
            return True
        rep.info(f"the working tiles in {work} were made from another DEM or with other "
                 "settings: starting them again")
        shutil.rmtree(work)
    work.mkdir(parents=True)
    tmp = work / f".{RUN_RECORD}.{os.getpid()}.tmp"
    tmp.write_text(json.dumps(key, sort_keys=True))
    os.replace(tmp, rec)
    return False


def _done(store, layout) -> dict:
    tiles = layout.tiles()
    return {"filled": sum(store.has("filled", *t) for t in tiles),
            "directed": sum(store.has_meta(f"directions_done_{ti}_{tj}") for ti, tj in tiles),
            "accumulated": sum(store.has("upstream_area_m2", *t) and store.has("cell_count", *t)
                               for t in tiles)}


def tiled_flow_step(out, settings, tile: int, *, scheduler=None, workers: int | None = None,
                    work=None, reporter=None) -> dict:
    """Route the DEM by tiles and write the tiled flow folder into ``out``.

    Parameters
    ----------
    out : OutputFolder
        The flow folder, open (the files go to its staging folder).
    settings : FlowSettings
        D8 over the filled surface only (:func:`check_tiled_settings`).
    tile : int
        Tile side in cells.
    scheduler : str, optional
        Address of a dask.distributed scheduler for the accumulation passes (the working
        folder must then be on a file system every worker reaches); default: threads here.
    workers : int, optional
        Threads of the local engine.
    work : path, optional
        The working tile folder (default :func:`work_folder_for` of the output).
    reporter : optional

    Returns
    -------
    dict
        The record written as flow.json's ``tiled``: tile size, what was resumed, the
        summaries of the passes, the working folder.
    """
    from ...io.tile_folder import TileFolder
    from ...io.tile_source import dem_into_tiles
    from ...tiles.accumulate import flow_accumulation
    from ...tiles.route import grid_distances, route_by_tiles

    rep = as_reporter(reporter)
    check_tiled_settings(settings)
    work = Path(work) if work is not None else work_folder_for(out.root)
    t0 = time.perf_counter()
    resumed = _prepare_work(work, _run_key(settings, tile), rep)
    read_before = resumed and (work / "meta" / "read_done.pkl").exists()
    if read_before:
        store = TileFolder.open(work)
    else:
        store = dem_into_tiles(settings.dem, tile, folder=work, band=settings.band,
                               crs=settings.crs, sea_level=settings.sea_level_m,
                               base_level=settings.base_level,
                               replace_crs=settings.replace_crs,
                               elevation_range=settings.elevation_range_m,
                               implausible_elevations=settings.implausible_elevations)
        store.write_meta("read_done", True)
    layout = store.layout
    n = len(layout.tiles())
    if resumed:
        d = _done(store, layout)
        rep.info(f"resuming from the working tiles of an earlier run in {work}: DEM "
                 f"{'already' if read_before else 'read again,'} read, {d['filled']} of {n} "
                 f"tiles filled, {d['directed']} routed, {d['accumulated']} accumulated")
    else:
        rep.info(f"working tiles in {work} ({n} tiles); if the run is stopped, the same "
                 "command goes on from the tiles already finished")
    src = store.read_meta("source")
    rep.info(f"read {settings.dem} by windows: {layout.nrows} x {layout.ncols} cells in "
             f"{layout.n_tile_rows} x {layout.n_tile_cols} tiles of {tile} x {tile}")
    if src.get("implausible_elevation_cells"):
        lo, hi = src["elevation_range_m"]
        rep.warn(f"{src['implausible_elevation_cells']:,} cells with elevations outside "
                 f"{lo:g} to {hi:g} m were treated as nodata (implausible elevations)")
    t1 = time.perf_counter()
    dist = grid_distances(layout, store)
    from ...tiles.engine import Engine

    with Engine(scheduler, workers=workers) as engine:  # the tiles as Dask tasks
        summary = route_by_tiles(layout, store, dist, resume=True, engine=engine)
    t2 = time.perf_counter()
    geom = _geometry(layout, store)
    acc = flow_accumulation(layout, store, geom.area, scheduler=scheduler, workers=workers)
    t3 = time.perf_counter()
    rep.info(f"filled and routed by tiles in {t2 - t1:.1f} s "
             f"({summary['directions']['crossing_flats']:,} flats across tile borders), "
             f"accumulated in {t3 - t2:.1f} s")
    rec = _write(out, settings, layout, store, geom, summary, acc, rep)
    rec.update({"working_folder": str(work), "resumed": bool(resumed),
                "seconds": {"read": round(t1 - t0, 3), "fill_and_directions": round(t2 - t1, 3),
                            "accumulation": round(t3 - t2, 3),
                            "write": round(time.perf_counter() - t3, 3)}})
    rep.info(f"wrote flow folder {out.destination} by windows "
             f"({time.perf_counter() - t0:.1f} s)")
    return rec


def _geometry(layout, store):
    from affine import Affine
    from pyproj import CRS

    from ...terrain.geometry import cell_geometry

    return cell_geometry(Affine(*store.read_meta("transform")), layout.shape,
                         CRS.from_wkt(store.read_meta("crs")))


def _write(out, settings, layout, store, geom, summary, acc, rep) -> dict:
    from affine import Affine
    from pyproj import CRS

    from ...io.flow_folder import FILES
    from ...io.tiled_flow_folder import (TILED_PRODUCTS, layer_reader, overview_factors,
                                         write_tiled_geotiff)
    from ...io.writers import provenance, raster_codec

    transform = Affine(*store.read_meta("transform"))
    crs = CRS.from_wkt(store.read_meta("crs"))
    src = dict(store.read_meta("source"))
    single = len(src.get("files", [])) == 1 and Path(src["path"]).is_file()
    if single:
        src["sha256"] = src["sha256"][0]
    area = np.asarray(geom.area, dtype=np.float64)
    cond = {"method": "fill", "cells_raised": 0, "cells_lowered": 0,
            "max_fill_depth_m": 0.0, "max_cut_depth_m": 0.0, "filled_volume_m3": 0.0,
            "cut_volume_m3": 0.0, "burned_cells": 0}  # no count of depressions by tiles

    elevation = layer_reader(layout, store, "elevation")

    def on_filled(r0, r1, c0, c1, filled):
        z = np.asarray(elevation(r0, r1, c0, c1), dtype=np.float64)
        with np.errstate(invalid="ignore"):
            up = np.where(np.isfinite(filled), filled.astype(np.float64) - z, 0.0)
        up = np.nan_to_num(np.maximum(up, 0.0))
        cond["cells_raised"] += int(np.count_nonzero(up > 0))
        cond["max_fill_depth_m"] = max(cond["max_fill_depth_m"], float(up.max(initial=0.0)))
        cond["filled_volume_m3"] += float((up * area[r0:r1, None]).sum())

    big = layout.nrows * layout.ncols >= 2**31
    files = {}
    for layer, (key, dtype, nodata, resampling) in TILED_PRODUCTS.items():
        if layer == "cell_count" and big:
            dtype = "int64"
        name = FILES[key]
        write_tiled_geotiff(out.path(name), layout.shape, layer_reader(layout, store, layer),
                            dtype, nodata, transform, crs, resampling=resampling,
                            on_window=on_filled if layer == "filled" else None)
        out.adopt(name)
        files[key] = name
    if settings.copy_input:
        write_tiled_geotiff(out.path(FILES["input"]), layout.shape, elevation, "float32",
                            float("nan"), transform, crs, resampling="average")
        out.adopt(FILES["input"])
        files["input"] = FILES["input"]
        input_record = {"stored": "copy", "file": FILES["input"]}
    elif single:
        input_record = {"stored": "reference", "path": src["path"], "sha256": src["sha256"],
                        "band": src.get("band") or 1}
    else:  # a folder of tiles: named, not readable as one file by load_flow
        input_record = {"stored": "reference to a folder of tiles", "path": src["path"],
                        "files": src.get("files"), "sha256": src.get("sha256")}
    files["meta"] = FILES["meta"]
    rep.info(f"cells raised by filling: {cond['cells_raised']:,} (deepest fill "
             f"{cond['max_fill_depth_m']:.3f} m, volume {cond['filled_volume_m3']:,.1f} m3)")
    if summary["directions"]["cells_without_outlet"]:
        rep.warn(f"{summary['directions']['cells_without_outlet']:,} cells on flats with no "
                 "way out drain nowhere (their direction is -1)")
    tiled = {"tile_rows": layout.tile_rows, "tile_cols": layout.tile_cols,
             "transform": [float(v) for v in tuple(transform)[:6]],
             "overviews": overview_factors(layout.shape),
             "fill": summary["fill"], "directions": summary["directions"],
             "accumulation": acc}
    params = {**settings.parameters(), "route": "by tiles", "tile_size": layout.tile_rows}
    meta = provenance(params, {"dem": src}, crs=crs, shape=layout.shape, conditioning=cond,
                      files=files, base_level=bool(store.read_meta("base_level")),
                      input_elevation=input_record, raster_codec=raster_codec(),
                      cautions=CAUTION_TEXT, burn_line_inputs={}, tiled=tiled)
    out.json(FILES["meta"], meta)
    return tiled


def route_dem(dem, output, *, max_memory=None, tile_size: int | None = None,
              scheduler=None, workers: int | None = None, overwrite: bool = False,
              reporter=None, settings=None, **options) -> dict:
    """Route a DEM into a flow folder, in memory or by tiles as the memory budget says
    (the Python face of ``basinkit route``).

    Parameters
    ----------
    dem : str or Path
        A raster file, a VRT, or (by tiles) a folder of GeoTIFF tiles on one grid.
    output : str or Path
        The flow folder to write (a transaction: see :class:`OutputFolder`).
    max_memory : int or str, optional
        Peak memory allowed, bytes or a size such as ``"2GB"``: when the in-memory route
        would need more, the DEM is routed by tiles.
    tile_size : int, optional
        Route by tiles of this side (cells) whatever the budget.
    scheduler : str, optional
        Address of a dask.distributed scheduler for the tile tasks.
    workers : int, optional
        Threads of the local engine (default: one per core).
    overwrite : bool
    reporter : optional
        See :mod:`basinkit.workflow.progress`.
    settings : FlowSettings, optional
        The flow settings (default: built from ``dem`` and ``options``, keywords of
        :class:`FlowSettings`).

    Returns
    -------
    dict
        ``tiled`` (bool), ``tile`` (side, when tiled), ``plan`` (the estimates),
        ``peak_memory_bytes`` and, when tiled, the ``record`` of :func:`tiled_flow_step`.

    Examples
    --------
    >>> from basinkit.workflow.steps.tiled_flow import route_dem
    >>> route_dem("demo_rasters/upland_valley.tif", "flow/", max_memory="256MB")
    ... # doctest: +SKIP
    """
    from ..._processes import peak_memory
    from ...tiles.plan import plan_route
    from ...units import parse_memory
    from ..output import OutputFolder
    from .flow import FlowSettings, flow_step, read_burn_lines, read_terrain

    rep = as_reporter(reporter)
    if settings is None:
        settings = FlowSettings(dem=dem, **options)
    budget = None
    if max_memory is not None:
        budget = parse_memory(max_memory, "--max-memory") if isinstance(max_memory, str) \
            else int(max_memory)
        if budget <= 0:
            raise InputError(f"--max-memory must be a positive size, got {max_memory!r}")
    if tile_size is not None and not 1 <= int(tile_size) <= 16000:
        raise InputError(f"--tile-size must be between 1 and 16000 cells, got {tile_size}")
    nw = int(workers) if workers else (os.cpu_count() or 1)
    shape = grid_shape_of(settings)
    if shape is None:  # not readable as a raster here: the in-memory reader says why
        shape = read_terrain(settings).shape
    nrows, ncols = shape
    plan = plan_route(nrows, ncols, budget, tile_size=tile_size, workers=nw)
    if plan.tiled:
        check_tiled_settings(settings)
        if scheduler is not None:  # an unreachable cluster is told before any work
            from ...tiles.engine import Engine

            with Engine(scheduler):
                pass
    elif scheduler is not None:
        rep.warn("--scheduler applies to the route by tiles; this grid is routed in memory")
    out = OutputFolder(output, overwrite).check()
    result = {"tiled": plan.tiled, "tile": plan.tile if plan.tiled else None,
              "plan": {"in_memory_bytes": plan.in_memory_bytes,
                       "tiled_bytes": plan.tiled_bytes, "budget_bytes": plan.budget,
                       "reason": plan.reason}}
    if plan.tiled or budget is not None:
        rep.info(plan.reason[0].upper() + plan.reason[1:]
                 if plan.tiled else f"routing in memory: {plan.reason}")
    if plan.tiled:
        work = work_folder_for(output)
        from ...io.tiled_flow_folder import gdal_cache_env

        with out.open(rep), rep.stage("flow by tiles"), gdal_cache_env():
            result["record"] = tiled_flow_step(out, settings, plan.tile, scheduler=scheduler,
                                               workers=workers, work=work, reporter=rep)
        shutil.rmtree(work, ignore_errors=True)
        rep.info(f"removed the working tiles {work}")
    else:
        with rep.stage("read"):
            terrain = read_terrain(settings)
            lines = read_burn_lines(settings, terrain.crs)
        with out.open(rep), rep.stage("flow"):
            flow_step(out, settings, terrain=terrain, burn=lines, reporter=rep)
    result["peak_memory_bytes"] = peak_memory()["peak_memory_bytes"]
    return result
