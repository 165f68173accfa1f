"""The catchments step (``basinkit delineate``): catchments, sub-catchments and the outlet
tree of every placed outlet, with one row per outlet given (failed ones included)."""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np

from ..progress import as_reporter
from ._common import CAUTION_TEXT, layer_metadata, step_record

__all__ = ["CatchmentSettings", "CatchmentsResult", "catchments_step", "CATCHMENT_COLUMNS",
           "FILLED_DEPTH_WARN_M", "FILLED_FRACTION_WARN"]

# columns of catchments.csv, in this order (others follow)
CATCHMENT_COLUMNS = [
    "outlet_id", "status", "error", "file_id", "label", "x_given", "y_given", "x_snapped",
    "y_snapped", "lon_snapped", "lat_snapped", "snap_distance_m",
    "upstream_area_given_cell_m2", "area_m2", "area_km2", "area_ha", "area_acres",
    "area_mi2", "perimeter_m", "subcatchment_area_m2", "upstream_outlet_count",
    "upstream_outlet_ids", "downstream_outlet_id", "elevation_min_m", "elevation_max_m",
    "elevation_mean_m", "relief_m", "touches_edge", "filled_depth_max_m",
    "filled_volume_m3", "filled_cell_fraction", "warning", "source"]
_DROP = ["given_crs", "row_given", "col_given", "cell_given", "upstream_area_m2",
         "snap_warning", "x", "y", "snap_radius_m"]

# a catchment whose conditioning filled depressions at least this deep, or raised this
# share of its cells by more than 5 cm, gets a warning (common practice, no source)
FILLED_DEPTH_WARN_M = 1.0
FILLED_FRACTION_WARN = 0.02
_RAISED_M = 0.05


@dataclass
class CatchmentSettings:
    """Options of the catchments step (``basinkit delineate``)."""

    labels_raster: bool = False
    web_geojson: bool = False
    fraction_rasters: bool = False
    workers: int = 2


@dataclass
class CatchmentsResult:
    """What the catchments step produced.

    Attributes
    ----------
    delineation : basinkit.analysis.catchments.Delineation
    table : pandas.DataFrame
        catchments.csv: one row per outlet given (``status`` ok/failed).
    errors : pandas.DataFrame
        The failed outlets (``outlet_id, source, x_given, y_given, reason``).
    """

    delineation: object
    table: object
    errors: object

    @property
    def failed(self) -> int:
        return int(len(self.errors))


def catchments_step(out, fm, placed, settings: CatchmentSettings | None = None,
                    reporter=None, parameters: dict | None = None,
                    inputs: dict | None = None) -> CatchmentsResult:
    """Delineate the catchments of the placed outlets and write catchments.csv,
    catchments.gpkg (layers ``outlets``, ``catchments``, ``subcatchments``, ``errors``),
    catchments.json, outlet_errors.csv (when an outlet failed) and the optional label
    raster, WGS 84 GeoJSON and contributing-fraction rasters.

    Parameters
    ----------
    out : OutputFolder
    fm : FlowModel
    placed : PlacedOutlets
        From :func:`basinkit.workflow.outlets.place_outlets`.
    settings : CatchmentSettings, optional
    reporter : optional
    parameters, inputs : dict, optional
        Extra parameters and inputs for the provenance record.
    """
    from ...analysis.catchments import delineate
    from ...analysis.outlets import ERROR_COLUMNS

    s = settings or CatchmentSettings()
    rep = as_reporter(reporter)
    fraction_paths = {}

    def write_fraction(row, frac):
        name = f"contributing_fraction/{row['file_id']}.tif"
        t = fm.terrain
        out.geotiff(name, frac.astype("float32"), t.transform, t.crs, nodata=float("nan"),
                    tags={"cautions": CAUTION_TEXT, "outlet_id": str(row["outlet_id"])})
        fraction_paths[str(row["outlet_id"])] = name

    callback = None
    if s.fraction_rasters and fm.method != "d8":
        callback = write_fraction
    elif s.fraction_rasters:
        rep.warn("--fraction-rasters applies to D-infinity and MFD flow folders; this one "
                 "is D8 (the catchment polygons are the exact contributing areas)")
    d = delineate(fm, placed.table, workers=s.workers, progress=rep.progress,
                  fraction_callback=callback)
    _filled_depressions(fm, d)
    errors = placed.errors[ERROR_COLUMNS].reset_index(drop=True)
    d.errors = errors
    table = _csv_table(d, errors)
    files = _files(s, errors)
    params = {**(parameters or {}), **d.parameters, "snapping": placed.snapping,
              "labels_raster": s.labels_raster, "web_geojson": s.web_geojson,
              "fraction_rasters": s.fraction_rasters}
    meta = step_record(fm, params, inputs, files=files, snapping=placed.snapping,
                       outlets_given=placed.given, outlets_delineated=int(len(d.table)),
                       outlets_failed=int(len(errors)),
                       catchments_touching_edge=int(d.table["touches_edge"].sum()),
                       warnings=d.warnings[:1000],
                       contributing_fraction_rasters=fraction_paths or None)
    _write(out, fm, d, table, errors, s, meta)
    _tell(rep, d, errors, placed.given)
    return CatchmentsResult(d, table, errors)


def _files(s, errors) -> list:
    """The files the catchments step writes with settings ``s`` and these outlet errors."""
    files = ["catchments.csv", "catchments.gpkg", "catchments.json"]
    if len(errors):
        files.append("outlet_errors.csv")
    if s.labels_raster:
        files.append("subcatchment_labels.tif")
    if s.web_geojson:
        files.append("catchments_wgs84.geojson")
    return files


def _csv_table(d, errors):
    import pandas as pd

    tab = d.table.drop(columns=[c for c in _DROP if c in d.table.columns])
    tab = tab.assign(status="ok", error="")
    if len(errors):
        e = errors.rename(columns={"reason": "error"}).assign(status="failed")
        tab = pd.concat([tab, e], ignore_index=True)
    first = [c for c in CATCHMENT_COLUMNS if c in tab.columns]
    return tab[first + [c for c in tab.columns if c not in first]]


def _write(out, fm, d, table, errors, s, meta):
    import geopandas as gpd
    import pandas as pd

    t = fm.terrain
    lm = layer_metadata()
    drop = [c for c in _DROP if c in d.table.columns and c not in ("x", "y")]
    cat = d.catchments_frame().drop(columns=drop + ["x", "y"])
    pts = gpd.GeoDataFrame(pd.concat([d.outlets_frame("given"), d.outlets_frame("snapped")],
                                     ignore_index=True), geometry="geometry",
                           crs=cat.crs)
    errs = errors.astype({"reason": str, "outlet_id": str, "source": str})
    out.gpkg("catchments.gpkg", {"outlets": pts, "catchments": cat,
                                 "subcatchments": d.subcatchments_frame(), "errors": errs},
             metadata=lm)
    out.csv("catchments.csv", table)
    if len(errors):
        out.csv("outlet_errors.csv", errors)
    if s.labels_raster:
        by_label = {}
        for lab, oid in zip(d.table["label"].astype(int), d.table["outlet_id"].astype(str)):
            by_label[str(lab)] = f"{by_label[str(lab)]};{oid}" if str(lab) in by_label else oid
        out.geotiff("subcatchment_labels.tif", d.labels, t.transform, t.crs, nodata=0,
                    tags={"cautions": CAUTION_TEXT,
                          "content": "sub-catchment label of every cell (0: drains to no "
                                     "outlet); labels in catchments.csv",
                          "label_to_outlet_id": json.dumps(by_label, sort_keys=True)})
    if s.web_geojson:
        from ...io.writers import atomic_path

        web = cat[["outlet_id", "area_km2", "touches_edge", "warning", "geometry"]]
        web = web.to_crs(4326)
        p = out.path("catchments_wgs84.geojson")
        with atomic_path(p) as tmp:
            web.to_file(tmp, driver="GeoJSON", layer="catchments", RFC7946="YES")
        out.adopt("catchments_wgs84.geojson")
    out.json("catchments.json", meta)


def _filled_depressions(fm, d):
    """Per catchment: the deepest fill of conditioning, the filled volume and the share of
    raised cells; a warning where they are large (the area behind a filled depression may
    not drain to the outlet)."""
    tab = d.table
    n = len(tab)
    if fm.input_elevation is None or not n:
        for c in ("filled_depth_max_m", "filled_volume_m3", "filled_cell_fraction"):
            tab[c] = np.nan
        return
    t = fm.terrain
    valid = t.valid.ravel()
    raised = np.where(valid, t.elevation.ravel().astype(np.float64)
                      - np.asarray(fm.input_elevation).ravel().astype(np.float64), 0.0)
    raised = np.nan_to_num(np.maximum(raised, 0.0))
    area = t.cell_area().ravel().astype(np.float64)
    lab = d.labels.ravel().astype(np.int64)
    nl = int(lab.max()) + 1
    vol = np.bincount(lab, weights=raised * area, minlength=nl)
    nraised = np.bincount(lab, weights=(raised > _RAISED_M).astype(np.float64), minlength=nl)
    ncells = np.bincount(lab, weights=valid.astype(np.float64), minlength=nl)
    deep = np.zeros(nl)
    np.maximum.at(deep, lab, raised)
    filled_columns(d, vol, nraised, ncells, deep)


def filled_columns(d, vol, nraised, ncells, deep):
    """The filled-depression columns and warnings of a delineation's table from per-label
    sums (by sub-catchment label): filled volume (m³), raised cells (by more than 5 cm),
    valid cells and the deepest fill (m)."""
    tab = d.table
    size = d._subtree_size
    # a full catchment is the label range L .. L + size - 1 (depth-first labels)
    cvol, craised, ccells = (np.concatenate([[0.0], np.cumsum(a[1:])])
                             for a in (vol, nraised, ncells))
    L = tab["label"].to_numpy(np.int64)
    hi = L + size[L] - 1
    tab["filled_volume_m3"] = cvol[hi] - cvol[L - 1]
    frac = (craised[hi] - craised[L - 1]) / np.maximum(ccells[hi] - ccells[L - 1], 1)
    tab["filled_cell_fraction"] = frac
    tab["filled_depth_max_m"] = [float(deep[a:b + 1].max()) for a, b in zip(L, hi)]
    warn = tab["warning"].fillna("").astype(str).tolist()
    for i, (dep, fr, v) in enumerate(zip(tab["filled_depth_max_m"], frac,
                                         tab["filled_volume_m3"])):
        if dep >= FILLED_DEPTH_WARN_M or fr >= FILLED_FRACTION_WARN:
            note = (f"conditioning filled closed depressions in this catchment up to "
                    f"{dep:.1f} m deep ({v:,.0f} m3, {100 * fr:.1f} % of its cells): if one "
                    "really holds water (pond, sinkhole, quarry) or drains through a "
                    "structure, the area behind it may not reach the outlet")
            warn[i] = f"{warn[i]}; {note}" if warn[i] else note
            d.warnings.append(f"outlet {tab['outlet_id'].iloc[i]!r}: {note}")
    tab["warning"] = warn


def _tell(rep, d, errors, given):
    tab = d.table
    if len(tab) <= 20:
        for r in tab.itertuples():
            rep.info(f"  {r.outlet_id}: {r.area_km2:.4g} km2, snapped {r.snap_distance_m:.0f} "
                     f"m, {r.upstream_outlet_count} outlets upstream"
                     + (", TOUCHES EDGE" if r.touches_edge else ""))
    else:
        rep.info(f"  {len(tab)} catchments covering "
                 f"{tab['subcatchment_area_m2'].sum() / 1e6:.4g} km2 in all, "
                 f"{int(tab['touches_edge'].sum())} reaching the grid edge or nodata")
    told = {f"outlet {o!r}: {w}" for o, w in zip(tab["outlet_id"], tab["snap_warning"])
            if w}  # printed when the outlets were placed
    rest = [m for m in d.warnings if m not in told]
    for m in rest[:20]:
        rep.warn(m)
    if len(rest) > 20:
        rep.warn(f"... and {len(rest) - 20} more warnings (see catchments.csv)")
    rep.info(f"{len(tab)} of {given} outlets delineated"
             + (f", {len(errors)} failed (see outlet_errors.csv)" if len(errors) else ""))
