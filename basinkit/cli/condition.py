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
            burn, burn_depth, band, crs, sea_level, base_level, overwrite, summary_path):
    """Condition a DEM so that every cell drains to an exit.

    \b
    Example: basinkit condition demo_rasters/upland_valley.tif \\
        --burn demo_rasters/culverts.geojson --burn-depth 1m -o upland_valley_filled.tif
    """
    from pathlib import Path

    from ..conditioning import condition
    from ..io.lines import read_lines
    from ..io.writers import provenance, write_geotiff, write_json
    from ..workflow.cautions import CAUTION_TEXT

    from ..io.hashing import file_sha256
    from ..io.transaction import FileTransaction

    out, js = Path(output), Path(summary_path or Path(output).with_suffix(".json"))
    tx = FileTransaction([out, js], overwrite, record=js).check()
    mbl = parse_length(max_breach_length, "--max-breach-length") if max_breach_length else None
    with console.stage("read"):
        terrain = read_dem_from_options(dem, band, crs, sea_level, base_level)
        lines = [g for p in burn for g in read_lines(p, terrain.crs)]
    console.info(f"read {dem}: {terrain.shape[0]} x {terrain.shape[1]} cells")
    with console.stage("condition"):
        cond, summary = condition(terrain, method=method, epsilon=epsilon,
                                  burn=lines if burn else None,
                                  burn_depth=burn_depth if burn else 0.0,
                                  max_breach_depth=max_breach_depth, max_breach_length=mbl)
    params = {"method": method, "epsilon": epsilon, "burn": [str(p) for p in burn],
              "burn_depth": burn_depth, "max_breach_depth": max_breach_depth,
              "max_breach_length_m": mbl, "sea_level": sea_level, "base_level": base_level}
    with tx:  # both files written beside their names, renamed into place at the end
        write_geotiff(tx.staged(out), cond.elevation, cond.transform, cond.crs,
                      nodata=float("nan"), tags={"cautions": CAUTION_TEXT})
        write_json(tx.staged(js), provenance(
            params, {"dem": terrain.source}, crs=terrain.crs, shape=terrain.shape,
            summary=summary.to_dict(), cautions=CAUTION_TEXT,
            files={out.name: file_sha256(tx.staged(out))}))
    for name, kept, why in tx.kept:
        console.warn(f"kept {name} as {kept} ({why})")
    for line in summary.lines():
        console.info(line)
    console.info(f"wrote {out} and {js}")
    return finish(console)
