"""``basinkit route``: condition, route flow and accumulate; writes a flow folder."""

import click

from .options import (conditioning_options, dem_options, overwrite_option, parse_length,
                      read_dem_from_options)


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
@conditioning_options
@dem_options
@overwrite_option
@click.pass_obj
def command(console, dem, output, method, mfd_exponent, conditioning, epsilon,
            max_breach_depth, max_breach_length, burn, burn_depth, band, crs, sea_level,
            base_level, overwrite):
    """Route flow over a DEM and write the flow folder later commands read.

    \b
    Example: basinkit route demo_rasters/upland_valley.tif \\
        --burn demo_rasters/culverts.geojson --burn-depth 1m -o flow/
    """
    import time
    from pathlib import Path

    from ..io.flow_folder import write_flow_folder
    from ..routing.flow_model import route
    from ..io.writers import prepare_output_dir

    if Path(output).exists():  # refuse a used folder now; create it only when writing
        prepare_output_dir(output, overwrite)
    t0 = time.perf_counter()
    terrain = read_dem_from_options(dem, band, crs, sea_level, base_level)
    console.info(f"read {dem}: {terrain.shape[0]} x {terrain.shape[1]} cells, "
                 f"{int(terrain.valid.sum()):,} valid")
    mbl = parse_length(max_breach_length, "--max-breach-length") if max_breach_length else None
    opts = dict(epsilon=epsilon, max_breach_depth=max_breach_depth, max_breach_length=mbl)
    if burn:
        from ..io.lines import read_lines

        opts.update(burn=read_lines(burn, terrain.crs), burn_depth=burn_depth)
    fm = route(terrain, method=method, conditioning=conditioning, mfd_exponent=mfd_exponent,
               **opts)
    if burn:  # the layer's name, not the geometries, in the provenance
        fm.parameters["burn"] = str(burn)
    if sea_level is not None:
        fm.parameters["sea_level"] = sea_level
    if base_level is not None:
        fm.parameters["base_level"] = str(base_level)
    if fm.summary:
        for line in fm.summary.lines():
            console.info(line)
    write_flow_folder(fm, output, overwrite=True,
                      extra_provenance={"seconds": round(time.perf_counter() - t0, 3)})
    console.info(f"wrote flow folder {output} ({time.perf_counter() - t0:.1f} s)")
