"""``basinkit profile``: longitudinal profiles, χ, k_sn, knickpoints for one or more outlets.

Writes into the output folder:

- ``profile.csv``: one row per node: channel nodes of order ≥ --min-order
  (``profile_kind = channel``), the main stem and the longest flow path of every outlet;
- ``steepness.csv``: k_sn per channel segment; ``knickpoints.csv``;
- ``profiles.gpkg``: layers ``profiles`` (segment lines with k_sn and θ, plus the main stem
  and the longest flow path) and ``knickpoints``;
- per outlet ``long_profile_<id>.png`` (main stem), ``longest_flow_path_<id>.png``,
  ``chi_elevation_<id>.png``, ``slope_area_<id>.png``;
- ``summary.json``: flow-path lengths and slopes, θ, slope–area and Hack fits per outlet,
  failures, cautions and provenance.
"""

from __future__ import annotations

from pathlib import Path

import click

from .options import LENGTH, outlet_options, overwrite_option, parse_area, parse_length

CAUTIONS = [
    "Profiles, flow paths and steepness values are estimates derived from a DEM; their "
    "accuracy is limited by the DEM's resolution and vertical precision.",
    "Culverts, storm sewers, diversions and other structures are not represented unless "
    "they were burned into the DEM before routing.",
    "Verify flow paths and knickpoints in the field before relying on them.",
    "For design or permit work, defer to local codes and licensed professional practice.",
]


def _save_png(fig, path):
    from ..io.writers import atomic_path

    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=120, metadata={"Software": None})
    return Path(path)


def _write_gpkg(path, layers):
    from ..io.writers import atomic_path

    with atomic_path(path) as tmp:
        for i, (name, gdf) in enumerate(layers.items()):
            gdf.to_file(tmp, layer=name, driver="GPKG", mode="w" if i == 0 else "a")
    return Path(path)


@click.command("profile")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output folder (profile.csv, profiles.gpkg, PNG figures, summary.json).")
@outlet_options
@click.option("--min-order", type=int, default=2, show_default=True,
              help="Lowest Strahler order of the channels profiled.")
@click.option("--min-area", default="0.5km2", show_default=True,
              help="Channel initiation threshold (upstream area, e.g. 0.5km2, 20ha). "
                   "Outlets are snapped by --snap-radius/--snap-to-channel only.")
@click.option("--concavity", type=float, default=None,
              help="Concavity θ for χ and k_sn [default: 0.45].")
@click.option("--fit-concavity", is_flag=True,
              help="Fit θ per outlet from the collinearity of tributaries in χ–z.")
@click.option("--reference-area", default="1m2", show_default=True,
              help="Reference area A0 for χ (e.g. 1m2, 1km2).")
@click.option("--slope-window", default=None,
              help="Length of the window local slope is measured over [default: 20m].")
@click.option("--slope-drop", default=None,
              help="Measure local slope over this vertical interval instead (e.g. 5m).")
@click.option("--vertical-precision", type=LENGTH, default=1.0, show_default=True,
              help="Vertical precision of the DEM (e.g. 0.5m; bare numbers are metres), "
                   "for knickpoint detection.")
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, outlets, min_order, min_area, concavity, fit_concavity, reference_area,
            slope_window, slope_drop, vertical_precision, overwrite):
    """Longitudinal profiles, χ, channel steepness and knickpoints upstream of outlets.

    Outlets are snapped as in every basinkit command (greatest upstream area within
    --snap-radius, or the nearest channel cell with --snap-to-channel), so the same options
    put an outlet on the same cell as in delineate and morphometry.

    \b
    Example: basinkit profile flow/ --outlet crossing=513544.15,5204342.62 \\
        --snap-radius 30m --snap-to-channel 1ha --min-area 2ha --min-order 1 -o prof/
    """
    import time

    import numpy as np
    import pandas as pd

    from ..analysis import profiles as P
    from ..analysis.channels import extract_channels
    from ..errors import BasinkitError, InputError, OutletError
    from ..io.flow_folder import load_flow
    from ..io.writers import prepare_output_dir, provenance, write_csv, write_json

    t0 = time.perf_counter()
    if concavity is not None and fit_concavity:
        raise InputError("give either --concavity or --fit-concavity, not both")
    outlets.require()
    theta0 = P.DEFAULT_CONCAVITY if concavity is None else concavity
    P._check_theta(theta0)
    a0 = parse_area(reference_area, "--reference-area")
    if not a0 > 0:
        raise InputError("--reference-area must be positive (e.g. 1m2)")
    min_area_m2 = parse_area(min_area, "--min-area")
    if slope_window is not None and slope_drop is not None:
        raise InputError("give either --slope-window or --slope-drop, not both")
    sw = parse_length(slope_window, "--slope-window") if slope_window is not None else None
    sd = parse_length(slope_drop, "--slope-drop") if slope_drop is not None else None
    if min_order < 1:
        raise InputError("--min-order must be 1 or more")
    out = prepare_output_dir(output, overwrite)
    fm = load_flow(flowdir)
    console.info(f"read flow folder {flowdir}: {fm.shape[0]} x {fm.shape[1]} cells")
    crs_wkt = fm.terrain.crs.to_wkt() if fm.terrain.crs is not None else None
    snapped, errs = outlets.snap(fm)
    failures = [{"outlet_id": str(r.outlet_id), "stage": "outlet", "error": str(r.reason)}
                for r in errs.itertuples()]
    for f in failures:
        console.warn(f"outlet {f['outlet_id']}: {f['error']}")
    for r in snapped.itertuples():
        if r.snap_warning:
            console.warn(f"outlet {r.outlet_id}: {r.snap_warning}")
    placed = [(str(r.outlet_id), str(r.file_id), float(r.x_given), float(r.y_given),
               int(r.cell), float(r.snap_distance_m), str(r.snap_warning))
              for r in snapped.itertuples()]
    cells = np.array([p[4] for p in placed], dtype=np.int64)
    net = extract_channels(fm, min_area_m2, outlet_cells=cells)
    mo = net.max_order
    mo = mo() if callable(mo) else mo
    console.info(f"channel network: {len(net.segments):,} segments, highest Strahler order "
                 f"{mo}")
    node_tables, seg_rows, knick_tables, path_lines, summaries = [], [], [], [], []
    nc = fm.ncols
    for oid, fid, x, y, cell, snap_d, snap_w in console.progress(placed, desc="outlets"):
        try:
            res = _one_outlet(P, fm, net, oid, fid, cell, min_order, theta0, fit_concavity,
                              a0, sw, sd, vertical_precision, out)
        except BasinkitError as exc:
            failures.append({"outlet_id": oid, "stage": "profiles", "error": str(exc)})
            console.warn(f"outlet {oid}: {exc}")
            continue
        nodes, steep, knick, paths, summary = res
        for w in summary.get("warnings", []):
            console.warn(f"outlet {oid}: {w}")
        summary.update(outlet_x_given=x, outlet_y_given=y, outlet_row=cell // nc,
                       outlet_col=cell % nc, snap_distance_m=snap_d, snap_warning=snap_w,
                       file_id=fid)
        node_tables.append(nodes)
        seg_rows.append(steep)
        knick_tables.append(knick)
        path_lines.extend(paths)
        summaries.append(summary)
    if not summaries:
        raise OutletError("profiles failed for every outlet: "
                          + "; ".join(f"{f['outlet_id']}: {f['error']}" for f in failures))
    table = pd.concat(node_tables, ignore_index=True)
    write_csv(out / "profile.csv", table)
    steep_all = pd.concat(seg_rows, ignore_index=True)
    write_csv(out / "steepness.csv", steep_all)
    knick_all = pd.concat([k for k in knick_tables if len(k)], ignore_index=True) \
        if any(len(k) for k in knick_tables) else knick_tables[0]
    write_csv(out / "knickpoints.csv", knick_all)
    _write_layers(out / "profiles.gpkg", fm, net, steep_all, knick_all, path_lines, crs_wkt)
    params = {"min_order": min_order, "min_area_m2": min_area_m2,
              "concavity": None if fit_concavity else theta0, "fit_concavity": fit_concavity,
              "reference_area_m2": a0, "slope_window_m": sw, "slope_drop_m": sd,
              "vertical_precision_m": vertical_precision, **outlets.parameters()}
    meta = provenance(params, {"flow_folder": str(Path(flowdir).resolve()),
                               "dem": fm.terrain.source}, crs=fm.terrain.crs,
                      shape=fm.shape, outlets=summaries, failures=failures,
                      cautions=CAUTIONS, seconds=round(time.perf_counter() - t0, 3),
                      files=sorted(p.name for p in out.iterdir() if not p.name.startswith(".")))
    write_json(out / "summary.json", meta)
    console.info(f"wrote {out} ({len(summaries)} outlet(s), {len(failures)} failure(s), "
                 f"{time.perf_counter() - t0:.1f} s)")
    for c in CAUTIONS:
        console.info(f"note: {c}")
    return 1 if failures else 0


def _one_outlet(P, fm, net, oid, name, cell, min_order, theta0, fit, a0, sw, sd, prec, out):
    from ..analysis.steepness import find_knickpoints, steepness
    from ..analysis.profile_fits import fit_concavity, hack_law_fit, slope_area_fit
    from ..plot.profiles import plot_chi, plot_long_profile, plot_slope_area
    import numpy as np
    import pandas as pd

    from ..errors import OutletError

    order_here = int(np.asarray(net.strahler).ravel()[cell])
    if order_here < min_order:
        raise OutletError(f"the outlet lies on a channel of Strahler order {order_here}, below "
                          f"--min-order {min_order}; move it onto a larger channel, snap it "
                          "onto one (--snap-to-channel AREA), lower --min-order or lower "
                          "--min-area")
    summary = {"outlet_id": oid}
    theta = theta0
    if fit:
        cf = fit_concavity(fm, net, cell, min_order=min_order, reference_area_m2=a0)
        theta = cf.concavity
        summary["concavity_fit"] = cf.to_dict()
        if cf.at_grid_edge:
            summary["warnings"] = [f"the best-fit concavity {theta:.2f} lies at the end of the "
                                   "range tried; the fit is not reliable (too few or too "
                                   "short tributaries?)"]
    opts = dict(concavity=theta, reference_area_m2=a0, slope_window_m=sw, slope_drop_m=sd)
    nodes = P.channel_profiles(fm, net, cell, min_order=min_order, **opts)
    nodes["outlet_id"] = oid
    nodes.insert(1, "profile_kind", "channel")
    steep = steepness(nodes, by="segment_id")
    steep["outlet_id"] = oid
    knick = find_knickpoints(nodes, vertical_precision_m=prec)
    knick["outlet_id"] = oid
    lfp = P.longest_flow_path(fm, cell, network=net, **opts)
    ms = P.main_stem(fm, cell, network=net, **opts)
    frames = [nodes]
    for prof in (ms, lfp):
        f = prof.to_frame()
        f.insert(0, "outlet_id", oid)
        frames.append(f)
    nodes_all = pd.concat(frames, ignore_index=True)
    summary["concavity"] = theta
    summary["reference_area_m2"] = a0
    summary["longest_flow_path"] = lfp.summary()
    summary["main_stem"] = ms.summary()
    summary["channel_node_count"] = int(len(nodes))
    summary["knickpoint_count"] = int(len(knick))
    try:
        sa = slope_area_fit(nodes["upstream_area_m2"], nodes["slope_m_per_m"])
        summary["slope_area_fit"] = sa.to_dict()
    except Exception as exc:  # noqa: BLE001 - a failed fit is reported, not fatal
        sa = None
        summary["slope_area_fit"] = {"error": str(exc)}
    try:
        summary["hack_law_fit"] = hack_law_fit(fm, net, cell).to_dict()
    except Exception as exc:  # noqa: BLE001
        summary["hack_law_fit"] = {"error": str(exc)}
    ms_k = knick[knick["profile_id"] == nodes.loc[nodes["is_main_stem"], "profile_id"].iloc[0]] \
        if len(knick) and nodes["is_main_stem"].any() else None
    figs = [
        (f"long_profile_{name}.png",
         plot_long_profile(ms, knickpoints=ms_k, title=f"main stem, outlet {oid}")),
        (f"longest_flow_path_{name}.png",
         plot_long_profile(lfp, title=f"longest flow path, outlet {oid}")),
        (f"chi_elevation_{name}.png",
         plot_chi(nodes, knickpoints=knick, steepness_table=steep,
                    title=f"χ–elevation, outlet {oid}")),
        (f"slope_area_{name}.png",
         plot_slope_area(nodes["upstream_area_m2"], nodes["slope_m_per_m"], fit=sa,
                           title=f"slope–area, outlet {oid}")),
    ]
    for fname, fig in figs:
        _save_png(fig, out / fname)
    paths = [(oid, "longest_flow_path", lfp, theta), (oid, "main_stem", ms, theta)]
    return nodes_all, steep, knick, paths, summary


def _write_layers(path, fm, net, steep, knick, paths, crs_wkt):
    import geopandas as gpd
    import numpy as np
    import pandas as pd
    import shapely

    seg = net.segments
    geom = seg.set_index("segment_id").geometry
    s = steep.copy()
    keep_cols = ["segment_id", "length_m", "strahler_order"]
    s = s.merge(seg[keep_cols].rename(columns={"strahler_order": "_o"}), on="segment_id",
                how="left").drop(columns=["_o"])
    s.insert(0, "kind", "channel_segment")
    lines = list(geom.reindex(s["segment_id"]).to_numpy())
    extra = []
    for oid, kind, prof, theta in paths:
        xy = np.column_stack([prof.x, prof.y])
        if len(xy) == 1:
            xy = np.vstack([xy, xy])
        extra.append({"kind": kind, "outlet_id": oid, "length_m": prof.length_m,
                      "concavity": theta, "reference_area_m2": prof.reference_area_m2,
                      "ksn_m_per_m": np.nan,
                      "slope_10_85_m_per_m": prof.slope_10_85(),
                      "average_slope_m_per_m": prof.average_slope()})
        lines.append(shapely.linestrings(xy))
    table = pd.concat([s, pd.DataFrame(extra)], ignore_index=True)
    layers = {"profiles": gpd.GeoDataFrame(table, geometry=lines, crs=crs_wkt)}
    k = knick.reset_index(drop=True)
    layers["knickpoints"] = gpd.GeoDataFrame(
        k, geometry=shapely.points(k["x"].to_numpy(float), k["y"].to_numpy(float)),
        crs=crs_wkt)
    _write_gpkg(path, layers)
