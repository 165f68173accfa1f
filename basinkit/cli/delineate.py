"""``basinkit delineate``: catchments of one outlet or thousands from a flow folder (the
catchments step of :mod:`basinkit.workflow.steps`)."""

import click

from .options import (finish, load_flow_folder, outlet_options, output_folder,
                      overwrite_option, place, tell_peak_memory)


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
              help="Threads checking the polygons' validity (tracing is one pass).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Tiled flow folders: run the tile tasks on a running dask.distributed "
                   "cluster, e.g. tcp://host:8786 [default: threads here].")
@overwrite_option
@click.pass_obj
def command(console, flowdir, outlets, output, labels_raster, web_geojson,
            fraction_rasters, workers, scheduler, overwrite):
    """Delineate the catchments of outlets on a flow folder written by 'basinkit route'.

    Writes catchments.gpkg (layers outlets, catchments, subcatchments, errors),
    catchments.csv (one row per outlet given, failed ones included), catchments.json
    (provenance, snapping, cautions), outlet_errors.csv when an outlet failed and, on
    request, a label GeoTIFF and a WGS 84 GeoJSON. Exits with status 1 when any outlet
    failed (the others are still delineated and written).

    Outlets are snapped as in every basinkit command (see --snap-radius and
    --snap-to-channel), so the same options put an outlet on the same cell in delineate,
    channels, profile and morphometry.

    On a flow folder routed by tiles (route --max-memory) the catchments are labelled,
    measured and outlined by tiles, reading the folder's rasters by windows (the same
    files and columns; the elevation and filled-depression columns need the DEM as read:
    the file route read, unchanged, or route --copy-input).

    \b
    Example: basinkit delineate flow/ --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha -o basin/
    """
    from ..io.tiled_flow_folder import is_tiled_folder
    from ..workflow.steps import CatchmentSettings, catchments_step

    outlets.require()
    out = output_folder(output, overwrite)
    if is_tiled_folder(flowdir):
        return _tiled(console, flowdir, outlets, out, CatchmentSettings(
            labels_raster=labels_raster, web_geojson=web_geojson,
            fraction_rasters=fraction_rasters, workers=workers), scheduler)
    with console.stage("read"):
        fm = load_flow_folder(console, flowdir)
    placed = place(console, fm, outlets)
    with out.open(console), console.stage("catchments"):
        res = catchments_step(out, fm, placed,
                              CatchmentSettings(labels_raster=labels_raster,
                                                web_geojson=web_geojson,
                                                fraction_rasters=fraction_rasters,
                                                workers=workers),
                              reporter=console,
                              parameters={"flowdir": str(flowdir), **outlets.parameters()},
                              inputs=outlets.inputs())
    console.info(f"wrote {out.folder}")
    return finish(console, res.failed)


def _tiled(console, flowdir, outlets, out, settings, scheduler):
    from ..io.tiled_flow_folder import TiledFlowFolder, gdal_cache_env
    from ..workflow.steps.tiled_steps import tiled_catchments_step

    with console.stage("read"):
        flow = TiledFlowFolder(flowdir)
        fm = flow.windowed_model()
    lay = flow.layout
    console.info(f"read flow folder {flowdir} (routed by tiles): {lay.nrows} x {lay.ncols} "
                 f"cells in tiles of {lay.tile_rows} x {lay.tile_cols}; delineating by tiles")
    placed = place(console, fm, outlets)
    with out.open(console), console.stage("catchments by tiles"), gdal_cache_env():
        res = tiled_catchments_step(out, fm, placed, settings, reporter=console,
                                    parameters={"flowdir": str(flowdir),
                                                **outlets.parameters()},
                                    inputs=outlets.inputs(), scheduler=scheduler)
    console.info(f"wrote {out.folder}")
    tell_peak_memory(console)
    return finish(console, res.failed)
