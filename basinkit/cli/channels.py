"""``basinkit channels``: channel network, Strahler order and segment table from a flow
folder; optionally choose the channel threshold by the constant-drop test."""

import click

from .options import outlet_options, overwrite_option, parse_area


def _parse_range(text):
    from ..errors import InputError

    parts = str(text).split(":")
    if len(parts) != 2:
        raise InputError(f"cannot read the threshold range {text!r}; write LOW:HIGH, e.g. "
                         "0.05km2:5km2")
    return (parse_area(parts[0], "the low end of --choose-threshold"),
            parse_area(parts[1], "the high end of --choose-threshold"))


def write_network(folder, fm, net, drop=None, params=None, extra=None):
    """Write a channel network: channels.gpkg (layers ``channels`` and ``junctions``),
    strahler_order.tif, channel_segments.csv, constant_drop_test.csv (when given) and
    channels.json (provenance). Returns the list of written paths."""
    from pathlib import Path

    import numpy as np

    from ..analysis.morphometry import CAUTIONS
    from ..io.writers import atomic_path, provenance, write_csv, write_geotiff, write_json

    out = Path(folder)
    written = []
    gpkg = out / "channels.gpkg"
    import pyogrio

    # a fixed timestamp in the GeoPackage tables keeps the file byte-identical per input
    old = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2000-01-01T00:00:00.000Z"})
    try:
        _write_gpkg(gpkg, net, atomic_path)
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": old})
    written.append(gpkg)
    t = fm.terrain
    order = np.where(t.valid, net.strahler, -1).astype(np.int16)
    written.append(write_geotiff(out / "strahler_order.tif", order, t.transform, t.crs,
                                 nodata=-1))
    written.append(write_csv(out / "channel_segments.csv",
                             net.segments.drop(columns="geometry")))
    if drop is not None:
        written.append(write_csv(out / "constant_drop_test.csv", drop.table))
    meta = provenance(params or {}, {"flow": fm.parameters.get("flow_folder"),
                                     "dem": t.source}, crs=t.crs, shape=t.shape,
                      network=net.summary(),
                      constant_drop_test=(drop.to_dict() if drop is not None else None),
                      files=[p.name for p in written], cautions=CAUTIONS, **(extra or {}))
    written.append(write_json(out / "channels.json", meta))
    return written


def _write_gpkg(path, net, atomic_path):
    with atomic_path(path) as tmp:
        net.segments.to_file(tmp, layer="channels", driver="GPKG")
        if len(net.junctions):
            net.junctions.to_file(tmp, layer="junctions", driver="GPKG", mode="a")
        else:  # an empty point layer still needs a schema
            import geopandas as gpd
            from shapely.geometry import Point

            empty = gpd.GeoDataFrame({"junction_id": [0]}, geometry=[Point(0, 0)],
                                     crs=net.junctions.crs).iloc[:0]
            empty.to_file(tmp, layer="junctions", driver="GPKG", mode="a")


@click.command("channels")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Folder to write (GeoPackage, GeoTIFF, CSV, JSON).")
@click.option("--min-area", default=None,
              help="Upstream area at which channels begin, with a unit (e.g. 0.5km2, 20ha). "
                   "Required unless --choose-threshold picks it; with it, the fallback "
                   "when no threshold passes.")
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
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, min_area, slope_area_exponent, slope_area_constant,
            choose, threshold_steps, critical_t, outlets, overwrite):
    """Extract the channel network: segments with Strahler order, Shreve magnitude,
    length, drop, slope, upstream areas and sinuosity; junctions; a Strahler order raster.

    With --outlet/--outlets, segments are also split at the outlets, snapped as in every
    basinkit command (see --snap-radius and --snap-to-channel).

    \b
    Example: basinkit channels flow/ --min-area 2ha --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha -o channels/
    """
    import time

    from ..analysis.channels import constant_drop_test, extract_channels, threshold_range
    from ..errors import InputError
    from ..io.flow_folder import load_flow
    from ..io.writers import prepare_output_dir

    t0 = time.perf_counter()
    if min_area is None and choose is None:
        raise InputError("give --min-area (e.g. 0.5km2) or --choose-threshold LOW:HIGH")
    if (slope_area_exponent is None) != (slope_area_constant is None):
        raise InputError("the slope–area criterion needs both --slope-area-exponent and "
                         "--slope-area-constant")
    slope_area = (None if slope_area_exponent is None
                  else (slope_area_exponent, slope_area_constant))
    min_area_m2 = parse_area(min_area, "--min-area") if min_area is not None else None
    prepare_output_dir(output, overwrite)
    fm = load_flow(flowdir)
    console.info(f"read flow folder {flowdir}: {fm.shape[0]} x {fm.shape[1]} cells")
    drop = None
    if choose is not None:
        lo, hi = _parse_range(choose)
        ths = threshold_range(lo, hi, threshold_steps)
        drop = constant_drop_test(fm, ths, slope_area=slope_area, critical_t=critical_t)
        for r in drop.table.itertuples():
            console.info(f"  {r.min_area_km2:10.4f} km²  first-order streams "
                         f"{r.first_order_streams:6d}  t = {r.t_statistic:7.2f}  "
                         f"{'passes' if r.passes else 'fails'}")
        if drop.chosen_min_area_m2 is not None:
            min_area_m2 = drop.chosen_min_area_m2
            console.info(f"constant-drop test: chose {min_area_m2 / 1e6:.4f} km²")
        elif min_area_m2 is not None:
            console.warn("no threshold in the range passes the constant-drop test; using "
                         f"--min-area {min_area}")
        else:
            raise InputError("no threshold in the range passes the constant-drop test; "
                             "widen --choose-threshold or give --min-area")
    cells = None
    if outlets:
        snapped, errors = outlets.snap(fm)
        cells = snapped["cell"].to_numpy(dtype="int64")
        for r in errors.itertuples():
            console.warn(f"outlet {r.outlet_id} not used: {r.reason}")
    net = extract_channels(fm, min_area_m2, slope_area=slope_area, outlet_cells=cells)
    s = net.summary()
    console.info(f"{s['segments']:,} segments, {s['junctions']:,} junctions, highest "
                 f"Strahler order {s['max_strahler_order']}, "
                 f"{s['total_length_m'] / 1e3:,.1f} km of channels")
    params = {"min_area_m2": min_area_m2, "slope_area_exponent": slope_area_exponent,
              "slope_area_constant": slope_area_constant, "choose_threshold": choose,
              "threshold_steps": threshold_steps, "critical_t": critical_t,
              **(outlets.parameters() if outlets else {})}
    write_network(output, fm, net, drop, params,
                  {"seconds": round(time.perf_counter() - t0, 3)})
    console.info(f"wrote {output} ({time.perf_counter() - t0:.1f} s)")
