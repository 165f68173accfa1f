"""``basinkit condition``: fill or breach depressions and write the conditioned DEM."""

import click

from .options import (conditioning_options, dem_options, finish, overwrite_option,
                      parse_length, read_dem_from_options)


@click.command("condition")
@click.argument("dem", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Conditioned DEM (GeoTIFF) to write.")
@click.option("--method", type=click.Choice(["fill", "breach"]), default="fill",
              show_default=True, help="Priority-Flood filling or least-cost breaching.")
@conditioning_options
@dem_options
@overwrite_option
@click.option("--summary", "summary_path", type=click.Path(), default=None,
              help="Also write the summary as JSON here (default: OUTPUT with .json).")
@click.pass_obj
def command(console, dem, output, method, epsilon, max_breach_depth, max_breach_length,
            burn, burn_depth, band, crs, sea_level, base_level, overwrite, summary_path, dem_checks):
    """Condition a DEM so that every cell drains to an exit.

    \b
    Example: basinkit condition demo_rasters/upland_valley.tif \\
        --burn demo_rasters/culverts.geojson --burn-depth 1m -o upland_valley_filled.tif
    """
    from pathlib import Path

    from ..conditioning import condition
    from ..io.lines import read_lines
    from ..io.transaction import FileTransaction
    from ..io.writers import provenance, write_geotiff, write_json
    from ..workflow.cautions import CAUTION_TEXT

    # both files are written beside their names and renamed into place at the end
    tx = FileTransaction([output, summary_path or Path(output).with_suffix(".json")],
                         overwrite, record=True).check()
    mbl = parse_length(max_breach_length, "--max-breach-length") if max_breach_length else None
    with console.stage("read"):
        terrain = read_dem_from_options(dem, band, crs, sea_level, base_level, dem_checks)
        lines = [g for p in burn for g in read_lines(p, terrain.crs)]
    console.info(f"read {dem}: {terrain.shape[0]} x {terrain.shape[1]} cells")
    with console.stage("condition"):
        cond, summary = condition(terrain, method=method, epsilon=epsilon,
                                  burn=lines if burn else None,
                                  burn_depth=burn_depth if burn else 0.0,
                                  max_breach_depth=max_breach_depth, max_breach_length=mbl)
    params = {"method": method, "epsilon": epsilon, "burn": [str(p) for p in burn],
              "burn_depth": burn_depth, "max_breach_depth": max_breach_depth,
              "max_breach_length_m": mbl, "sea_level": sea_level, "base_level": base_level,
              **{k: (list(v) if isinstance(v, tuple) else v) for k, v in dem_checks.items()}}
    staged = tx.begin().staged_paths()
    try:
        write_geotiff(staged[0], cond.elevation, cond.transform, cond.crs,
                      nodata=float("nan"), tags={"cautions": CAUTION_TEXT})
        write_json(staged[1], provenance(params, {"dem": terrain.source}, crs=terrain.crs,
                                         shape=terrain.shape, summary=summary.to_dict(),
                                         cautions=CAUTION_TEXT))
    except OSError as exc:  # GDAL's and the OS's errors name the staged file: name ours
        from ..errors import OutputError, os_error_message

        if isinstance(exc, OutputError):
            raise
        raise OutputError(os_error_message(exc, output)) from None
    _tell_screened(console, terrain)
    for line in summary.lines():
        console.info(line)
    out, js = tx.commit(console)
    console.info(f"wrote {out} and {js}")
    return finish(console)


def _tell_screened(console, terrain):
    n = terrain.source.get("implausible_elevation_cells", 0)
    if n:
        lo, hi = terrain.source["elevation_range_m"]
        console.warn(f"{n:,} cells with elevations outside {lo:g} to {hi:g} m were treated "
                     "as nodata (--implausible-elevations nodata)")
