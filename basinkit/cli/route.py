"""``basinkit route``: condition, route flow and accumulate; writes a flow folder (the flow
step of :mod:`basinkit.workflow.steps`)."""

import click

from .options import (conditioning_options, dem_options, finish, output_folder,
                      overwrite_option, parse_length, tell_peak_memory)


@click.command("route")
@click.argument("dem", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Flow folder to write (GeoTIFFs and flow.json).")
@click.option("--method", type=click.Choice(["d8", "dinf", "mfd"]), default="d8",
              show_default=True, help="Routing used for accumulation.")
@click.option("--mfd-exponent", type=float, default=1.1, show_default=True,
              help="Exponent of the multiple-flow-direction partition (Freeman 1991).")
@click.option("--condition", "conditioning", type=click.Choice(["fill", "breach", "none"]),
              default="fill", show_default=True, help="Conditioning to run first.")
@click.option("--copy-input", is_flag=True,
              help="Keep a copy of the DEM as read in the flow folder "
                   "(elevation_input.tif); by default flow.json names the DEM file and its "
                   "SHA-256, and later commands read it from there.")
@click.option("--max-memory", default=None, metavar="SIZE",
              help="Peak memory allowed, e.g. 2GB, 256MB (GB = 10^9 bytes, GiB = 2^30): "
                   "when routing in memory would need more, the DEM is routed by tiles, "
                   "out of core [default: no limit, in memory].")
@click.option("--tile-size", type=int, default=None, metavar="CELLS",
              help="Route by tiles of this many cells a side, whatever the memory "
                   "[default: chosen from --max-memory].")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Run the tile tasks on a running dask.distributed cluster, e.g. "
                   "tcp://host:8786 (the output's folder must be on a file system every "
                   "worker reaches) [default: threads here].")
@conditioning_options
@dem_options
@overwrite_option
@click.pass_obj
def command(console, dem, output, method, mfd_exponent, copy_input, max_memory, tile_size,
            scheduler, conditioning, epsilon, max_breach_depth, max_breach_length, burn,
            burn_depth, band, crs, sea_level, base_level, overwrite, dem_checks):
    """Route flow over a DEM and write the flow folder later commands read.

    With --max-memory, a DEM whose in-memory route would not fit is read by windows and
    routed by tiles (D8 over the filled surface, equal to the in-memory result); the flow
    folder is then written window by window, and a stopped run goes on from the tiles
    already finished when the same command is run again.

    \b
    Example: basinkit route demo_rasters/upland_valley.tif \\
        --burn demo_rasters/culverts.geojson --burn-depth 1m -o flow/
    """
    from ..units import parse_memory
    from ..workflow.steps import FlowSettings
    from ..workflow.steps.tiled_flow import route_dem

    settings = FlowSettings(
        dem=dem, band=band, crs=crs, sea_level_m=sea_level, base_level=base_level,
        conditioning=conditioning, epsilon=epsilon, max_breach_depth_m=max_breach_depth,
        max_breach_length_m=(parse_length(max_breach_length, "--max-breach-length")
                             if max_breach_length else None),
        burn_lines=list(burn), burn_depth_m=burn_depth, method=method,
        mfd_exponent=mfd_exponent, copy_input=copy_input,
        **FlowSettings.dem_check_fields(dem_checks))
    budget = parse_memory(max_memory, "--max-memory") if max_memory is not None else None
    output_folder(output, overwrite)
    route_dem(dem, output, max_memory=budget, tile_size=tile_size, scheduler=scheduler,
              overwrite=overwrite, reporter=console, settings=settings)
    tell_peak_memory(console)
    return finish(console)
