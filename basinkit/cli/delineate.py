"""``basinkit delineate``: catchments of one outlet or thousands from a flow folder."""

import click

from .options import outlet_options, overwrite_option

# files written into the output folder
OUTPUT_FILES = {
    "vectors": "catchments.gpkg",
    "table": "catchments.csv",
    "errors": "outlet_errors.csv",
    "labels": "subcatchment_labels.tif",
    "web": "catchments_wgs84.geojson",
    "meta": "delineation.json",
    "fractions": "contributing_fraction",
}

# columns of the per-outlet CSV, in this order (others follow)
_FIRST = ["outlet_id", "status", "error", "file_id", "label", "x_given", "y_given",
          "x_snapped", "y_snapped", "lon_snapped", "lat_snapped", "snap_distance_m",
          "upstream_area_given_cell_m2", "area_m2", "area_km2", "area_ha", "area_acres",
          "area_mi2", "perimeter_m", "subcatchment_area_m2", "upstream_outlet_count",
          "upstream_outlet_ids", "downstream_outlet_id", "elevation_min_m",
          "elevation_max_m", "elevation_mean_m", "relief_m", "touches_edge", "warning"]
_DROP = ["given_crs", "row_given", "col_given", "cell_given", "upstream_area_m2",
         "snap_warning", "x", "y"]


@click.command("delineate")
@click.argument("flowdir", type=click.Path())
@outlet_options
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output folder.")
@click.option("--labels-raster", is_flag=True,
              help="Also write the sub-catchment labels as a GeoTIFF.")
@click.option("--web-geojson", is_flag=True,
              help="Also write the catchments as GeoJSON in EPSG:4326 for web maps.")
@click.option("--fraction-rasters", is_flag=True,
              help="D-infinity/MFD flow folders: write each outlet's contributing-fraction "
                   "raster (share of each cell's flow reaching the outlet).")
@click.option("--workers", type=int, default=2, show_default=True,
              help="Worker processes for the polygons (forked on large jobs only).")
@overwrite_option
@click.pass_obj
def command(console, flowdir, outlets, output, labels_raster, web_geojson,
            fraction_rasters, workers, overwrite):
    """Delineate the catchments of outlets on a flow folder written by 'basinkit route'.

    Writes catchments.gpkg (layers outlets, catchments, subcatchments, errors),
    catchments.csv (one row per outlet), delineation.json (provenance) and, on request, a
    label GeoTIFF and a WGS 84 GeoJSON. Exits with status 1 when any outlet failed (the
    others are still delineated and written).

    Outlets are snapped as in every basinkit command (see --snap-radius and
    --snap-to-channel), so the same options put an outlet on the same cell in delineate,
    channels, profile and morphometry.

    \b
    Example: basinkit delineate flow/ --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha -o basin/
    """
    import time
    from pathlib import Path

    import pandas as pd

    from ..analysis.catchments import delineate
    from ..analysis.outlets import ERROR_COLUMNS, require_outlets
    from ..io.flow_folder import load_flow
    from ..io.writers import prepare_output_dir

    t0 = time.perf_counter()
    outlets.require()
    if Path(output).exists():  # refuse a used folder before doing the work
        prepare_output_dir(output, overwrite)
    fm = load_flow(flowdir)
    console.info(f"read flow folder {flowdir}: {fm.shape[0]} x {fm.shape[1]} cells, "
                 f"{fm.method} routing")
    raw, given_errors = outlets.read()
    n_given = len(raw) + len(given_errors)
    if not len(raw):
        require_outlets(raw, given_errors)
    console.info(f"{n_given} outlet{'s' if n_given != 1 else ''} given")

    out = Path(output)
    fraction_paths = {}
    callback = None
    if fraction_rasters and fm.method != "d8":
        from ..io.writers import write_geotiff

        fdir = out / OUTPUT_FILES["fractions"]

        def callback(row, frac):
            p = fdir / f"{row['file_id']}.tif"
            write_geotiff(p, frac.astype("float32"), fm.terrain.transform, fm.terrain.crs,
                          nodata=float("nan"))
            fraction_paths[row["outlet_id"]] = str(p.relative_to(out))
    elif fraction_rasters:
        console.warn("--fraction-rasters applies to D-infinity and MFD flow folders; this "
                     "one is D8 (the catchment polygons are the exact contributing areas)")

    def progress(it, total=None, desc=""):
        return console.progress(it, total=total, desc=desc)

    prepare_output_dir(out, overwrite)
    # catchments.delineate places the outlets with prepare_outlets and the same settings
    # as OutletRequest.snap (used by profile and channels)
    res = delineate(fm, raw, **outlets.snap_kwargs(), workers=workers, progress=progress,
                    fraction_callback=callback)
    errors = pd.concat([given_errors, res.errors], ignore_index=True)[ERROR_COLUMNS]
    res.errors = errors
    _write_outputs(console, res, fm, out, outlets.file, labels_raster, web_geojson,
                   fraction_paths, dict(flowdir=str(flowdir), **outlets.parameters()))
    _report(console, res, n_given)
    console.info(f"wrote {out} ({time.perf_counter() - t0:.1f} s)")
    return 1 if len(errors) else 0


def _csv_table(res):
    import pandas as pd

    tab = res.table.drop(columns=[c for c in _DROP if c in res.table.columns])
    tab = tab.assign(status="ok", error="")
    if len(res.errors):
        e = res.errors.rename(columns={"reason": "error"}).assign(status="failed")
        tab = pd.concat([tab, e.drop(columns=["source"])], ignore_index=True)
    first = [c for c in _FIRST if c in tab.columns]
    return tab[first + [c for c in tab.columns if c not in first]]


def _write_outputs(console, res, fm, out, outlet_file, labels_raster, web_geojson,
                   fraction_paths, params):
    import geopandas as gpd
    import pandas as pd
    import pyogrio

    from ..io.hashing import file_sha256
    from ..io.writers import atomic_path, provenance, write_csv, write_geotiff, write_json

    inputs = dict(fm.meta.get("inputs", {}))
    inputs["flow_folder"] = params["flowdir"]
    if outlet_file:
        inputs["outlets"] = {"path": str(outlet_file), "sha256": file_sha256(outlet_file)}
    files = {k: v for k, v in OUTPUT_FILES.items() if k in ("vectors", "table", "meta")}
    if len(res.errors):
        files["errors"] = OUTPUT_FILES["errors"]
    if labels_raster:
        files["labels"] = OUTPUT_FILES["labels"]
    if web_geojson:
        files["web"] = OUTPUT_FILES["web"]
    meta = provenance({**params, **res.parameters}, inputs, crs=fm.terrain.crs,
                      shape=fm.shape, cautions=res.cautions, files=files,
                      outlets_delineated=int(len(res.table)),
                      outlets_failed=int(len(res.errors)),
                      catchments_touching_edge=int(res.table["touches_edge"].sum()),
                      warnings=res.warnings[:1000],
                      contributing_fraction_rasters=fraction_paths or None)
    import json

    layer_meta = {"cautions": res.cautions,
                  "provenance": json.dumps(meta, default=str, sort_keys=True)}
    drop = [c for c in _DROP if c in res.table.columns and c not in ("x", "y")]
    cat = res.catchments_frame().drop(columns=drop)
    sub = res.subcatchments_frame()
    given = res.outlets_frame("given")
    snapped = res.outlets_frame("snapped")
    pts = gpd.GeoDataFrame(pd.concat([given, snapped], ignore_index=True),
                           geometry="geometry", crs=given.crs)
    # a fixed timestamp in the GeoPackage tables keeps the file byte-identical per input
    old = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2000-01-01T00:00:00.000Z"})
    try:
        _write_gpkg(out / OUTPUT_FILES["vectors"], pts, cat, sub, res.errors, layer_meta)
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": old})
    write_csv(out / OUTPUT_FILES["table"], _csv_table(res))
    if len(res.errors):
        write_csv(out / OUTPUT_FILES["errors"], res.errors)
    if labels_raster:
        write_geotiff(out / OUTPUT_FILES["labels"], res.labels, fm.terrain.transform,
                      fm.terrain.crs, nodata=0,
                      tags={"cautions": res.cautions, "label_to_outlet_id": json.dumps(
                          dict(zip(res.table["label"].astype(int).astype(str),
                                   res.table["outlet_id"])))})
    if web_geojson:
        web = cat[["outlet_id", "area_km2", "touches_edge", "warning",
                   "geometry"]].to_crs(4326)
        with atomic_path(out / OUTPUT_FILES["web"]) as tmp:
            web.to_file(tmp, driver="GeoJSON", layer="catchments", RFC7946="YES")
    write_json(out / OUTPUT_FILES["meta"], meta)


def _write_gpkg(path, pts, cat, sub, errors, layer_meta):
    import pyogrio

    from ..io.writers import atomic_path

    with atomic_path(path) as tmp:
        pts.to_file(tmp, layer="outlets", driver="GPKG", layer_metadata=layer_meta)
        cat.to_file(tmp, layer="catchments", driver="GPKG", layer_metadata=layer_meta)
        sub.to_file(tmp, layer="subcatchments", driver="GPKG", layer_metadata=layer_meta)
        pyogrio.write_dataframe(errors.astype({"reason": str, "outlet_id": str,
                                               "source": str}),
                                tmp, layer="errors", driver="GPKG")


def _report(console, res, n_given):
    tab = res.table
    if len(tab) <= 20:
        for r in tab.itertuples():
            console.info(f"  {r.outlet_id}: {r.area_km2:.4g} km2, snapped {r.snap_distance_m:.0f}"
                         f" m, {r.upstream_outlet_count} outlets upstream"
                         + (", TOUCHES EDGE" if r.touches_edge else ""))
    else:
        console.info(f"  {len(tab)} catchments covering "
                     f"{tab['subcatchment_area_m2'].sum() / 1e6:.4g} km2 in all, "
                     f"{int(tab['touches_edge'].sum())} reaching the grid edge or nodata")
    for m in res.warnings[:20]:
        console.warn(m)
    if len(res.warnings) > 20:
        console.warn(f"... and {len(res.warnings) - 20} more warnings (see catchments.csv)")
    for r in res.errors.head(20).itertuples():
        console.error(f"outlet {r.outlet_id!r} ({r.source}): {r.reason}")
    if len(res.errors) > 20:
        console.error(f"... and {len(res.errors) - 20} more failed outlets "
                      "(see outlet_errors.csv)")
    console.info(f"{len(tab)} of {n_given} outlets delineated"
                 + (f", {len(res.errors)} failed" if len(res.errors) else ""))
    console.info("caution: " + res.cautions)
