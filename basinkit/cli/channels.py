"""``basinkit channels``: channel network, Strahler order and segment table from a flow
folder (the channels step of :mod:`basinkit.workflow.steps`); optionally choose the
channel threshold by the constant-drop test."""

import click

from .options import (finish, load_flow_folder, outlet_options, output_folder,
                      overwrite_option, parse_area, place, tell_peak_memory)


def _parse_range(text):
    from ..errors import InputError

    parts = str(text).split(":")
    if len(parts) != 2:
        raise InputError(f"cannot read the threshold range {text!r}; write LOW:HIGH, e.g. "
                         "0.05km2:5km2")
    return (parse_area(parts[0], "the low end of --choose-threshold"),
            parse_area(parts[1], "the high end of --choose-threshold"))


def slope_area_option(exponent, constant):
    """The slope–area criterion of --slope-area-exponent/--slope-area-constant."""
    from ..errors import InputError

    if (exponent is None) != (constant is None):
        raise InputError("the slope–area criterion needs both --slope-area-exponent and "
                         "--slope-area-constant")
    return None if exponent is None else (exponent, constant)


@click.command("channels")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Folder to write (GeoPackage, GeoTIFF, CSV, JSON).")
@click.option("--min-area", default=None,
              help="Upstream area at which channels begin, with a unit (e.g. 0.5km2, 20ha). "
                   "Required unless --choose-threshold picks it; with it, the fallback "
                   "when no threshold passes.")
@click.option("--min-order", type=int, default=1, show_default=True,
              help="Lowest Strahler order written (segments; the order raster holds 0 "
                   "below it).")
@click.option("--slope-area-exponent", type=float, default=None,
              help="Exponent α of the slope–area criterion A·S^α ≥ C (Montgomery & "
                   "Dietrich 1988 used 2).")
@click.option("--slope-area-constant", type=float, default=None,
              help="Constant C of the slope–area criterion (A in m², S in m per m).")
@click.option("--choose-threshold", "choose", default=None,
              help="Pick the threshold in LOW:HIGH (e.g. 0.05km2:5km2) by the constant-drop "
                   "test: the smallest threshold passing it.")
@click.option("--threshold-steps", type=int, default=12, show_default=True,
              help="Number of thresholds (log spaced) tried by --choose-threshold.")
@click.option("--critical-t", type=float, default=2.0, show_default=True,
              help="Largest |t| of the constant-drop test that passes.")
@outlet_options(purpose="An outlet at which to split segments")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Tiled flow folders: run the tile tasks on a running dask.distributed "
                   "cluster, e.g. tcp://host:8786 [default: threads here].")
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, min_area, min_order, slope_area_exponent,
            slope_area_constant, choose, threshold_steps, critical_t, outlets, scheduler,
            overwrite):
    """Extract the channel network: segments with Strahler order, Shreve magnitude,
    length, drop, slope, upstream areas and sinuosity; junctions; a Strahler order raster.

    With --outlet/--outlets, segments are also split at the outlets, snapped as in every
    basinkit command (see --snap-radius and --snap-to-channel); exits with status 1 when
    one of them could not be placed.

    On a flow folder routed by tiles (route --max-memory) the network is computed by tiles,
    reading the folder's rasters by windows: the same files, the segments numbered in
    another order; --min-area is then required (no --choose-threshold or slope-area
    criterion yet).

    \b
    Example: basinkit channels flow/ --min-area 2ha --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha -o channels/
    """
    from ..io.tiled_flow_folder import is_tiled_folder
    from ..workflow.steps import ChannelSettings, channels_step

    settings = ChannelSettings(
        min_area_m2=parse_area(min_area, "--min-area") if min_area is not None else None,
        slope_area=slope_area_option(slope_area_exponent, slope_area_constant),
        choose_threshold=_parse_range(choose) if choose is not None else None,
        threshold_steps=threshold_steps, critical_t=critical_t,
        min_order=min_order).check()
    out = output_folder(output, overwrite)
    if is_tiled_folder(flowdir):
        return _tiled(console, flowdir, out, settings, outlets, scheduler)
    with console.stage("read"):
        fm = load_flow_folder(console, flowdir)
    placed = place(console, fm, outlets) if outlets else None
    with out.open(console), console.stage("channels"):
        channels_step(out, fm, settings,
                      outlet_cells=None if placed is None else placed.cells,
                      reporter=console,
                      parameters={"flowdir": str(flowdir),
                                  **(outlets.parameters() if outlets else {})},
                      inputs=outlets.inputs() if outlets else None)
    console.info(f"wrote {out.folder}")
    return finish(console, 0 if placed is None else len(placed.errors))


def _tiled(console, flowdir, out, settings, outlets, scheduler):
    from ..io.tiled_flow_folder import TiledFlowFolder, gdal_cache_env
    from ..workflow.steps.tiled_steps import tiled_channels_step

    flow = TiledFlowFolder(flowdir)
    lay = flow.layout
    console.info(f"read flow folder {flowdir} (routed by tiles): {lay.nrows} x {lay.ncols} "
                 f"cells in tiles of {lay.tile_rows} x {lay.tile_cols}; channels by tiles")
    fm = flow.windowed_model()
    placed = place(console, fm, outlets) if outlets else None
    with out.open(console), console.stage("channels by tiles"), gdal_cache_env():
        tiled_channels_step(out, fm, settings,
                            outlet_cells=None if placed is None else placed.cells,
                            reporter=console,
                            parameters={"flowdir": str(flowdir),
                                        **(outlets.parameters() if outlets else {})},
                            inputs=outlets.inputs() if outlets else None,
                            scheduler=scheduler)
    console.info(f"wrote {out.folder}")
    tell_peak_memory(console)
    return finish(console, 0 if placed is None else len(placed.errors))
