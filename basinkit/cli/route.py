"""``basinkit route``: condition, route flow and accumulate; writes a flow folder (the flow
step of :mod:`basinkit.workflow.steps`)."""

import click

from .options import (conditioning_options, dem_options, finish, output_folder,
                      overwrite_option, parse_length)


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
@conditioning_options
@dem_options
@overwrite_option
@click.pass_obj
def command(console, dem, output, method, mfd_exponent, copy_input, conditioning, epsilon,
            max_breach_depth, max_breach_length, burn, burn_depth, band, crs, sea_level,
            base_level, overwrite, dem_checks):
    """Route flow over a DEM and write the flow folder later commands read.

    \b
    Example: basinkit route demo_rasters/upland_valley.tif \\
        --burn demo_rasters/culverts.geojson --burn-depth 1m -o flow/
    """
    from ..workflow.steps import FlowSettings, flow_step
    from ..workflow.steps.flow import read_burn_lines, read_terrain

    settings = FlowSettings(
        dem=dem, band=band, crs=crs, sea_level_m=sea_level, base_level=base_level,
        conditioning=conditioning, epsilon=epsilon, max_breach_depth_m=max_breach_depth,
        max_breach_length_m=(parse_length(max_breach_length, "--max-breach-length")
                             if max_breach_length else None),
        burn_lines=list(burn), burn_depth_m=burn_depth, method=method,
        mfd_exponent=mfd_exponent, copy_input=copy_input,
        **FlowSettings.dem_check_fields(dem_checks))
    out = output_folder(output, overwrite)
    with console.stage("read"):
        terrain = read_terrain(settings)
        lines = read_burn_lines(settings, terrain.crs)
    with out.open(console), console.stage("flow"):
        flow_step(out, settings, terrain=terrain, burn=lines, reporter=console)
    return finish(console)
