"""The catchments and channels steps on a tiled flow folder (one made by
``basinkit route --max-memory``): the same files as :func:`catchments_step` and
:func:`channels_step`, computed by tiles (:mod:`basinkit.tiles`) from the folder's GeoTIFFs
read window by window, so the grid is never held whole.

What the tiled path does not produce yet:

- catchments: every file and column of the in-memory step; the elevation and
  filled-depression columns need the DEM as read, by windows: a copy in the flow folder
  (``route --copy-input``) or the DEM file itself, unchanged; a DEM given as a folder of
  tiles leaves them empty;
- channels: the files of the in-memory step, with the segments numbered in another order;
  not ``--choose-threshold`` or the slope–area criterion.
"""

from __future__ import annotations

import shutil
from dataclasses import replace

import numpy as np

from ...errors import InputError
from ..progress import as_reporter
from ._common import CAUTION_TEXT, step_record

__all__ = ["tiled_catchments_step", "tiled_channels_step", "NOT_YET_CATCHMENTS",
           "NOTE_SEGMENT_IDS"]

NOT_YET_CATCHMENTS = ("the DEM this tiled flow folder was routed from cannot be read by "
                      "windows (moved, changed, or a folder of tiles): the columns "
                      "elevation_*, relief_m and filled_* are left empty; route with "
                      "--copy-input to keep a copy in the flow folder")
# columns of channel_segments.csv in the in-memory step's order
SEGMENT_ORDER = ["segment_id", "downstream_id", "stream_id", "strahler_order",
                 "shreve_magnitude", "length_m", "drop_m", "mean_slope_m_per_m",
                 "upstream_area_top_m2", "upstream_area_bottom_m2", "straight_length_m",
                 "sinuosity", "top_elevation_m", "bottom_elevation_m", "cell_count", "top_row",
                 "top_col", "bottom_row", "bottom_col"]
NOTE_SEGMENT_IDS = ("segments computed by tiles: the same segments as in memory, numbered "
                    "in another order (each segment's downstream one first)")


def _work(out, what):
    """A fresh working tile folder beside the output (``.NAME.tiles``)."""
    import json

    from .tiled_flow import work_folder_for

    work = work_folder_for(out.root)
    mark = work / "run.json"
    if work.exists():
        try:
            ok = json.loads(mark.read_text()).get("software") == "basinkit"
        except (OSError, ValueError, AttributeError):
            ok = False
        if not ok:
            raise InputError(f"{str(work)!r} is in the way of the working tiles of this "
                             "output and was not made by basinkit; move it away")
        shutil.rmtree(work)
    work.mkdir(parents=True)
    mark.write_text(json.dumps({"software": "basinkit", "step": what}))
    return work


def tiled_catchments_step(out, fm, placed, settings=None, reporter=None,
                          parameters: dict | None = None, inputs: dict | None = None, *,
                          scheduler=None, workers: int | None = None):
    """The catchments step by tiles.

    Parameters
    ----------
    out : OutputFolder
    fm : the windowed model of the folder
        :meth:`basinkit.io.tiled_flow_folder.TiledFlowFolder.windowed_model` (the outlets
        placed on it with :func:`place_outlets`, as on an in-memory flow folder).
    placed : PlacedOutlets
    settings : CatchmentSettings, optional
    reporter, parameters, inputs
        As for :func:`catchments_step`.
    scheduler, workers
        The Dask engine of the tile tasks (see :class:`basinkit.tiles.Engine`).

    Returns
    -------
    CatchmentsResult
        Its delineation has no ``labels`` grid (the labels stay in tiles; written with
        ``labels_raster``).
    """
    from pyproj import CRS, Transformer

    from ...analysis.catchments import CAUTIONS, Delineation
    from ...analysis.outlets import ERROR_COLUMNS
    from ...analysis.polygons import ground_area_perimeter
    from ...io.tiled_flow_folder import layer_reader, write_tiled_geotiff
    from ...tiles.filled import filled_by_label
    from ...tiles.labels import catchment_labels
    from ...tiles.polygons import catchment_polygons
    from ...tiles.tables import catchment_table
    from .catchments import (CatchmentSettings, CatchmentsResult, _csv_table, _files, _tell,
                             _write, filled_columns)

    s = settings or CatchmentSettings()
    rep = as_reporter(reporter)
    flow = fm.flow
    layout = flow.layout
    if s.fraction_rasters:
        rep.warn("--fraction-rasters applies to D-infinity and MFD flow folders; this one "
                 "is D8 (the catchment polygons are the exact contributing areas)")
    work = _work(out, "delineate")
    store = flow.store(work)
    cells = placed.cells
    cats = catchment_labels(layout, store, cells, scheduler=scheduler, workers=workers)
    geom = flow.geometry()
    has_z = store.has("elevation", 0, 0)
    tt = catchment_table(layout, store, cats, geom.area,
                         outlet_ids=placed.table["outlet_id"].astype(str).tolist(),
                         elevation="elevation" if has_z else None, scheduler=scheduler,
                         workers=workers)
    full, sub = catchment_polygons(layout, store, cats, flow.transform, crs=flow.crs,
                                   scheduler=scheduler, workers=workers)
    tab = placed.table.copy()
    tab.insert(2, "label", tt["label"].to_numpy(np.int32))
    for c in tt.columns:
        if c not in ("outlet_id", "label", "cell"):
            tab[c] = tt[c].to_numpy()
    for c in ("elevation_min_m", "elevation_max_m", "elevation_mean_m", "relief_m"):
        if c not in tab:
            tab[c] = np.nan
    if len(tab):
        tr = Transformer.from_crs(flow.crs, CRS.from_epsg(4326), always_xy=True)
        tab["lon_snapped"], tab["lat_snapped"] = tr.transform(
            tab["x_snapped"].to_numpy(), tab["y_snapped"].to_numpy())
    msgs, warn_col = [], []
    for oid, sw, te in zip(tab["outlet_id"], tab["snap_warning"], tab["touches_edge"]):
        w = [sw] if sw else []
        if te:
            w.append("catchment reaches the grid edge or nodata: its area may be truncated")
        msgs.extend(f"outlet {oid!r}: {m}" for m in w)
        warn_col.append("; ".join(w))
    tab["warning"] = warn_col
    tab["perimeter_m"] = [ground_area_perimeter(g, flow.crs)[1] if g is not None else np.nan
                          for g in full]
    params = {"snap_radius_m": float(tab["snap_radius_m"].iloc[0]) if len(tab) else None,
              "snap_to_channel_m2": placed.snapping.get("snap_to_channel_m2"),
              "outlet_crs": placed.snapping.get("outlet_crs"), "routing_method": "d8"}
    d = Delineation(tab, placed.errors[ERROR_COLUMNS], None, full, sub, flow.transform,
                    flow.crs, msgs, CAUTIONS, params, cats.subtree_size, None)
    if has_z:
        filled_columns(d, *filled_by_label(layout, store, cats, geom.area,
                                           scheduler=scheduler, workers=workers))
    else:
        for c in ("filled_volume_m3", "filled_cell_fraction", "filled_depth_max_m"):
            tab[c] = np.nan
        rep.warn(NOT_YET_CATCHMENTS)
    errors = placed.errors[ERROR_COLUMNS].reset_index(drop=True)
    d.errors = errors
    table = _csv_table(d, errors)
    files = _files(s, errors)
    allp = {**(parameters or {}), **params, "snapping": placed.snapping,
            "labels_raster": s.labels_raster, "web_geojson": s.web_geojson,
            "fraction_rasters": s.fraction_rasters, "by_tiles": True}
    meta = step_record(fm, allp, inputs, files=files, snapping=placed.snapping,
                       outlets_given=placed.given, outlets_delineated=int(len(tab)),
                       outlets_failed=int(len(errors)),
                       catchments_touching_edge=int(tab["touches_edge"].sum()),
                       warnings=msgs[:1000], contributing_fraction_rasters=None,
                       by_tiles={"tile_rows": layout.tile_rows,
                                 "tile_cols": layout.tile_cols,
                                 "not_computed": None if has_z else NOT_YET_CATCHMENTS})
    _write(out, fm, d, table, errors, replace(s, labels_raster=False), meta)
    if s.labels_raster:
        import json

        by_label = {}
        for lab, oid in zip(tab["label"].astype(int), tab["outlet_id"].astype(str)):
            by_label[str(lab)] = f"{by_label[str(lab)]};{oid}" if str(lab) in by_label else oid
        tags = {"cautions": CAUTION_TEXT,
                "content": "sub-catchment label of every cell (0: drains to no outlet); "
                           "labels in catchments.csv",
                "label_to_outlet_id": json.dumps(by_label, sort_keys=True)}
        write_tiled_geotiff(out.path("subcatchment_labels.tif"), layout.shape,
                            layer_reader(layout, store, cats.layer), "int32", 0,
                            flow.transform, flow.crs, tags=tags)
        out.adopt("subcatchment_labels.tif")
    _tell(rep, d, errors, placed.given)
    shutil.rmtree(work, ignore_errors=True)
    return CatchmentsResult(d, table, errors)


def tiled_channels_step(out, fm, settings, outlet_cells=None, reporter=None,
                        parameters: dict | None = None, inputs: dict | None = None, *,
                        scheduler=None, workers: int | None = None) -> dict:
    """The channels step by tiles: channel_segments.csv, channels.gpkg (layers ``channels``
    and ``junctions``), strahler_order.tif (int16, 0 off the network and below
    ``min_order``, -1 on nodata) and channels.json, as :func:`channels_step` writes them.

    The segments are those of the in-memory step (the same cells, ends and values); their
    ids follow another order (see :func:`basinkit.tiles.segments.channel_segments`).
    ``outlet_cells``: cells where segments are also split (the placed outlets).

    Returns the network's summary (as :meth:`ChannelNetwork.summary`).
    """
    import geopandas as gpd
    import shapely

    from ...io.tiled_flow_folder import layer_reader, write_tiled_geotiff
    from ...tiles.channels import channel_orders
    from ...tiles.segments import channel_segments
    from ._common import layer_metadata

    rep = as_reporter(reporter)
    if settings.min_area_m2 is None or settings.choose_threshold is not None \
            or settings.slope_area is not None:
        raise InputError("on a tiled flow folder channels takes --min-area only (not yet "
                         "--choose-threshold or the slope-area criterion)")
    flow = fm.flow
    layout = flow.layout
    thr = float(settings.min_area_m2)
    work = _work(out, "channels")
    store = flow.store(work)
    channel_orders(layout, store, thr, scheduler=scheduler, workers=workers)
    split = None if outlet_cells is None else np.unique(np.asarray(outlet_cells, np.int64))
    seg, jun = channel_segments(layout, store, thr, flow.geometry(), outlet_cells=split,
                                crs=flow.crs, transform=flow.transform, elevation="filled",
                                lines=True, scheduler=scheduler, workers=workers)
    t = flow.transform
    jx = t.c + (jun["col"].to_numpy() + 0.5) * t.a
    jy = t.f + (jun["row"].to_numpy() + 0.5) * t.e
    jun = gpd.GeoDataFrame(jun, geometry=shapely.points(jx, jy), crs=flow.crs.to_wkt())
    counts = {}
    min_order = int(settings.min_order)
    orders = layer_reader(layout, store, "strahler_order")
    directions = layer_reader(layout, store, "directions")

    def window(r0, r1, c0, c1):
        a = np.array(orders(r0, r1, c0, c1), dtype=np.int16)
        counts["cells"] = counts.get("cells", 0) + int(np.count_nonzero(a > 0))
        a[a < min_order] = 0
        a[directions(r0, r1, c0, c1) == -32768] = -1  # as in memory: -1 on nodata
        return a

    write_tiled_geotiff(out.path("strahler_order.tif"), layout.shape, window, "int16", -1,
                        flow.transform, flow.crs,
                        tags={"cautions": CAUTION_TEXT,
                              "content": f"Strahler order of channel cells of order >= "
                                         f"{min_order} (0: not a channel)",
                              "min_area_m2": f"{thr:.10g}"})
    out.adopt("strahler_order.tif")
    summ = {"channel_cells": counts.get("cells", 0), "segments": int(len(seg)),
            "junctions": int(len(jun)),
            "max_strahler_order": int(seg["strahler_order"].max()) if len(seg) else 0,
            "total_length_m": float(seg["length_m"].sum()) if len(seg) else 0.0,
            "min_area_m2": thr}
    rep.info(f"{summ['segments']:,} segments, {summ['junctions']:,} junctions, highest "
             f"Strahler order {summ['max_strahler_order']}, "
             f"{summ['total_length_m'] / 1e3:,.1f} km of channels")
    segk = seg[seg["strahler_order"] >= min_order]
    segk = segk[[c for c in SEGMENT_ORDER if c in segk] +
                [c for c in segk.columns if c not in SEGMENT_ORDER]]
    # the in-memory magnitudes are int32 (the layers' field types follow)
    segk = segk.astype({"shreve_magnitude": np.int32})
    jun = jun.astype({"shreve_magnitude": np.int32})
    files = ["channel_segments.csv", "channels.gpkg", "channels.json", "strahler_order.tif"]
    params = {**settings.parameters(), **(parameters or {}),
              "min_area_given_m2": settings.min_area_m2, "min_area_m2": thr,
              "outlet_cells_split": 0 if split is None else int(split.size),
              "by_tiles": True}
    meta = step_record(fm, params, inputs, network=summ, files=files,
                       constant_drop_test=None,
                       by_tiles={"tile_rows": layout.tile_rows,
                                 "tile_cols": layout.tile_cols,
                                 "segment_ids": NOTE_SEGMENT_IDS})
    out.gpkg("channels.gpkg", {"channels": segk, "junctions": jun},
             metadata=layer_metadata(),
             geometry_types={"channels": "LineString", "junctions": "Point"})
    out.csv("channel_segments.csv", segk.drop(columns="geometry"))
    out.json("channels.json", meta)
    shutil.rmtree(work, ignore_errors=True)
    return summ
