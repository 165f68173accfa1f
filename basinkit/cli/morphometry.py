"""``basinkit morphometry``: network, shape and relief descriptors of the catchments above
one or more outlets; hypsometric curves as CSV and PNG."""

import click

from .options import outlet_options, overwrite_option, parse_area


@click.command("morphometry")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Folder to write morphometry.csv, morphometry.json and hypsometric "
                   "curves.")
@outlet_options
@click.option("--min-area", default=None,
              help="Channel threshold (e.g. 0.5km2) for the network measures (stream "
                   "counts, Horton ratios, drainage density); without it they are left "
                   "out.")
@click.option("--slope-area-exponent", type=float, default=None,
              help="Exponent α of a slope–area channel criterion A·S^α ≥ C.")
@click.option("--slope-area-constant", type=float, default=None,
              help="Constant C of the slope–area criterion.")
@click.option("--figures/--no-figures", default=True, show_default=True,
              help="Write a PNG of each hypsometric curve.")
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, outlets, min_area, slope_area_exponent,
            slope_area_constant, figures, overwrite):
    """Measure the catchments above the outlets: area, perimeter, lengths, elongation,
    circularity, relief, hypsometry, slope, aspect and (with --min-area) the channel
    network's orders, Horton ratios and drainage density. Nested outlets each get their
    full catchment.

    Outlets are snapped as in every basinkit command (see --snap-radius and
    --snap-to-channel).

    \b
    Example: basinkit morphometry flow/ --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha --min-area 2ha -o morph/
    """
    import time

    import numpy as np
    import pandas as pd

    from ..analysis.catchments import delineate
    from ..analysis.channels import extract_channels
    from ..errors import InputError
    from ..analysis.morphometry import CAUTIONS, morphometry_table, write_hypsometric_curve
    from ..io.flow_folder import load_flow
    from ..io.writers import prepare_output_dir, provenance, write_csv, write_json

    t0 = time.perf_counter()
    if (slope_area_exponent is None) != (slope_area_constant is None):
        raise InputError("the slope–area criterion needs both --slope-area-exponent and "
                         "--slope-area-constant")
    outlets.require()
    min_area_m2 = parse_area(min_area, "--min-area") if min_area is not None else None
    out = prepare_output_dir(output, overwrite)
    fm = load_flow(flowdir)
    raw, read_errors = outlets.read()
    if not len(raw):
        from ..analysis.outlets import require_outlets

        require_outlets(raw, read_errors)
    # placed with prepare_outlets and the same settings as OutletRequest.snap
    d = delineate(fm, raw, **outlets.snap_kwargs(), polygons=False)
    tab = d.table
    cells = tab["cell"].to_numpy(np.int64)
    net = None
    if min_area_m2 is not None:
        sa = (None if slope_area_exponent is None
              else (slope_area_exponent, slope_area_constant))
        net = extract_channels(fm, min_area_m2, slope_area=sa, outlet_cells=cells,
                               geometry=False)
    else:
        console.warn("no --min-area given: network measures (stream counts, Horton ratios, "
                     "drainage density) are left out")
    nested = bool((tab["upstream_outlet_count"] > 0).any())
    if nested:  # full catchments overlap: one mask per outlet
        masks = [d.catchment_mask(oid) for oid in tab["outlet_id"]]
        ids = np.arange(1, len(tab) + 1)
    else:  # sub-catchments are the catchments: the label grid, one window each
        masks = d.labels
        ids = tab["label"].to_numpy(np.int64)
    table, curves = morphometry_table(fm, masks, cells, ids=ids, network=net,
                                      return_curves=True)
    curves = [curves.get(i) for i in table["catchment_id"]]
    table = table.drop(columns="catchment_id")
    table.insert(0, "outlet_id", tab["outlet_id"].to_numpy())
    table.insert(1, "snap_distance_m", tab["snap_distance_m"].to_numpy())
    errors = pd.concat([e for e in (read_errors, d.errors) if len(e)] or [d.errors],
                       ignore_index=True)
    if len(errors):  # outlets that could not be placed: a row each, with the reason
        extra = pd.DataFrame({"outlet_id": errors["outlet_id"].astype(str),
                              "error": errors["reason"].astype(str)})
        table = pd.concat([table, extra], ignore_index=True)
        table["error"] = table["error"].fillna("")
    write_csv(out / "morphometry.csv", table)
    files = ["morphometry.csv", "morphometry.json"]
    for k, curve in enumerate(curves):
        if curve is None:
            continue
        fid = tab["file_id"].iloc[k]
        base = out / "hypsometry" / f"hypsometric_curve_{fid}"
        write_hypsometric_curve(curve, base.with_suffix(".csv"),
                                base.with_suffix(".png") if figures else None,
                                label=f"outlet {tab['outlet_id'].iloc[k]}",
                                integral=float(table.loc[k, "hypsometric_integral"]))
        files.append(f"hypsometry/{base.name}.csv")
        if figures:
            files.append(f"hypsometry/{base.name}.png")
    params = {**outlets.parameters(), "min_area_m2": min_area_m2,
              "slope_area_exponent": slope_area_exponent,
              "slope_area_constant": slope_area_constant}
    t = fm.terrain
    records = table.astype(object).where(table.notna(), None).to_dict(orient="records")
    meta = provenance(params, {"flow": fm.parameters.get("flow_folder"), "dem": t.source},
                      crs=t.crs, shape=t.shape, catchments=records, files=files,
                      nested_outlets=nested, warnings=list(d.warnings), cautions=CAUTIONS,
                      seconds=round(time.perf_counter() - t0, 3))
    write_json(out / "morphometry.json", meta)
    for w in d.warnings:
        console.warn(w)
    bad = int((table["error"] != "").sum())
    if bad:
        console.warn(f"{bad} of {len(table)} outlets could not be measured (see the error "
                     "column)")
    console.info(f"measured {len(table) - bad} catchments; wrote {out} "
                 f"({time.perf_counter() - t0:.1f} s)")
