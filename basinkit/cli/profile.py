"""``basinkit profile``: longitudinal profiles, χ, k_sn, knickpoints and flow paths of one or
more outlets (the profiles step of :mod:`basinkit.workflow.steps`).

Writes into the output folder:

- ``profile.csv``: one row per node: channel nodes of order ≥ --min-order
  (``profile_kind = channel``), the main stem and the longest flow path of every outlet;
- ``steepness.csv``: k_sn per channel segment; ``knickpoints.csv``;
- ``flow_paths.csv``: one row per outlet and kind (longest flow path, main stem): length,
  10–85 and average slopes, elevations, upstream area;
- ``profiles.gpkg``: layers ``profiles`` (segment lines with k_sn, plus the main stem
  and the longest flow path) and ``knickpoints``;
- ``figures/<file_id>_long_profile.png``, ``_longest_flow_path.png``,
  ``_chi_elevation.png``, ``_slope_area.png`` for the figure outlets;
- ``profiles.json``: θ, slope–area and Hack fits per outlet, failures, cautions and
  provenance.
"""

from __future__ import annotations

import click

from .options import (LENGTH, figure_options, finish, load_flow_folder, outlet_options,
                      output_folder, overwrite_option, parse_area, parse_length, place)


@click.command("profile")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output folder (profile.csv, steepness.csv, knickpoints.csv, "
                   "flow_paths.csv, profiles.gpkg, profiles.json, figures/).")
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
@figure_options
@click.option("--workers", type=int, default=2, show_default=True,
              help="Worker processes sharing the outlets (1: none; the results do not "
                   "depend on it).")
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, outlets, min_order, min_area, concavity, fit_concavity,
            reference_area, slope_window, slope_drop, vertical_precision, figures,
            figures_for, workers, overwrite):
    """Longitudinal profiles, χ, channel steepness and knickpoints upstream of outlets.

    Outlets are snapped as in every basinkit command (greatest upstream area within
    --snap-radius, or the nearest channel cell with --snap-to-channel), so the same options
    put an outlet on the same cell as in delineate and morphometry. Exits with status 1
    when an outlet could not be placed or profiled (the others are written).

    \b
    Example: basinkit profile flow/ --outlet crossing=513544.15,5204342.62 \\
        --snap-radius 30m --snap-to-channel 1ha --min-area 2ha --min-order 1 -o prof/
    """
    from ..workflow.steps import ProfileSettings, build_network, profiles_step

    settings = ProfileSettings(
        min_order=min_order, concavity=concavity, fit_concavity=fit_concavity,
        reference_area_m2=parse_area(reference_area, "--reference-area"),
        slope_window_m=(parse_length(slope_window, "--slope-window")
                        if slope_window is not None else None),
        slope_drop_m=(parse_length(slope_drop, "--slope-drop")
                      if slope_drop is not None else None),
        vertical_precision_m=vertical_precision, figures=figures,
        figure_outlets=tuple(figures_for), workers=workers).check()
    min_area_m2 = parse_area(min_area, "--min-area")
    outlets.require()
    out = output_folder(output, overwrite)
    with console.stage("read"):
        fm = load_flow_folder(console, flowdir)
    placed = place(console, fm, outlets)
    with console.stage("channels"):
        net = build_network(fm, min_area_m2, outlet_cells=placed.cells)
    console.info(f"channel network: {len(net.segments):,} segments, highest Strahler order "
                 f"{net.max_order()}")
    with out.open(console), console.stage("profiles"):
        res = profiles_step(out, fm, placed, net, settings, reporter=console,
                            parameters={"flowdir": str(flowdir), "min_area_m2": min_area_m2,
                                        **outlets.parameters()},
                            inputs=outlets.inputs())
    console.info(f"wrote {out.folder}")
    return finish(console, len(placed.errors) + res.failed)
