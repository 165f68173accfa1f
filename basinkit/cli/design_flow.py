"""``basinkit design-flow``: time of concentration, peak discharge and the design hydrograph
at one or more outlets (the design-flow step of :mod:`basinkit.workflow.steps`)."""

import click

from .options import (LENGTH, NUMBER_PAIR, figure_options, load_flow_folder, outlet_options,
                      output_folder, overwrite_option, parse_area, place)

_PATTERNS = ["nrcs_type_i", "nrcs_type_ia", "nrcs_type_ii", "nrcs_type_iii", "uniform"]
_TC = ["tr55_velocity", "kirpich", "nrcs_lag", "shortest", "longest", "mean"]


def _area(value, name):
    return parse_area(value, name) if value is not None else None


@click.command("design-flow")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Folder to write design_flows.csv, hydrographs.csv, design_flows.gpkg, "
                   "design_flows.json and the hydrograph figures.")
@outlet_options
@click.option("--rainfall-depth", metavar="DEPTH",
              help="Design rainfall depth with its unit (110mm, 4.3in): your agency's "
                   "figure for the return period.")
@click.option("--storm-duration", default="24h", show_default=True, metavar="DURATION",
              help="Storm duration with its unit (the NRCS patterns are 24h storms).")
@click.option("--rainfall-pattern", type=click.Choice(_PATTERNS), default="nrcs_type_ii",
              show_default=True, help="Temporal pattern of the depth.")
@click.option("--return-period", "return_period_yr", type=float, default=None,
              metavar="YEARS", help="Return period: recorded, and looked up in --idf-table.")
@click.option("--idf-table", type=click.Path(),
              help="IDF CSV (duration_min, return_period_yr, intensity_mm_per_h or "
                   "depth_mm; in/h or in also): the Rational intensity at Tc, and the "
                   "storm depth when --rainfall-depth is not given.")
@click.option("--hyetograph", type=click.Path(),
              help="Your own storm: CSV with time_min and cumulative_depth_mm, depth_mm or "
                   "cumulative_fraction (with --rainfall-depth).")
@click.option("--curve-number", type=float, default=None,
              help="Uniform curve number (ARC II, 30-100).")
@click.option("--curve-number-file", type=click.Path(),
              help="Curve numbers: a raster on the DEM's grid, or a polygon layer with "
                   "--curve-number-field.")
@click.option("--curve-number-field", default=None, help="Field holding the curve number.")
@click.option("--runoff-coefficient", type=float, default=None,
              help="Uniform Rational C (0-1); without C no Rational peak.")
@click.option("--runoff-coefficient-file", type=click.Path(),
              help="Rational C as a raster on the DEM's grid or a polygon layer.")
@click.option("--runoff-coefficient-field", default=None, help="Field holding C.")
@click.option("--cn-weighting", type=click.Choice(["area_weighted_cn", "runoff_per_cell"]),
              default="area_weighted_cn", show_default=True,
              help="Runoff from the area-weighted CN, or per cell and summed.")
@click.option("--ia-ratio", type=float, default=0.2, show_default=True,
              help="Initial abstraction ratio Ia/S: 0.2 or 0.05 (Hawkins et al. 2009).")
@click.option("--antecedent-condition", type=click.Choice(["I", "II", "III"]), default="II",
              show_default=True, help="Antecedent runoff condition.")
@click.option("--tc-method", type=click.Choice(_TC), default="tr55_velocity",
              show_default=True, help="Tc behind the peaks (all are reported).")
@click.option("--sheet-flow-n", type=float, default=None,
              help="Manning's n for sheet flow (TR-55 table 3-1).")
@click.option("--p2-24h", default=None, metavar="DEPTH",
              help="2-year 24-hour rainfall with its unit, for sheet flow (else from "
                   "--idf-table).")
@click.option("--sheet-flow-max-length", type=LENGTH, default=30.0, show_default=True,
              help="Longest sheet flow (30 m = 100 ft, NEH 630 ch. 15).")
@click.option("--shallow-surface", type=click.Choice(["unpaved", "paved"]),
              default="unpaved", show_default=True, help="Shallow concentrated flow surface.")
@click.option("--channel-n", type=float, default=None, help="Manning's n of the channels.")
@click.option("--hydraulic-radius", type=LENGTH, default=None,
              help="Bankfull hydraulic radius of the channels (e.g. 0.6m).")
@click.option("--bankfull-width", type=NUMBER_PAIR, default=None, metavar="A,B",
              help="Instead of --hydraulic-radius, a width-depth relation: bankfull width "
                   "A*area^B in m, area upstream in km2 (your region's relation); with "
                   "--bankfull-depth.")
@click.option("--bankfull-depth", type=NUMBER_PAIR, default=None, metavar="C,F",
              help="Bankfull depth C*area^F in m (area in km2); with --bankfull-width.")
@click.option("--channel-threshold", default=None, metavar="AREA",
              help="Upstream area from which a flow path is a channel (e.g. 2ha).")
@click.option("--peak-rate-factor", type=float, default=484.0, show_default=True,
              help="Unit-hydrograph peak rate factor in US units.")
@click.option("--time-step", "time_step_min", type=float, default=None, metavar="MIN",
              help="Convolution step in minutes (default from Tc).")
@click.option("--base-flow", "base_flow_m3_per_s", type=float, default=0.0,
              show_default=True, help="Constant base flow (m3/s) under the hydrograph.")
@figure_options
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, outlets, figures, figures_for, overwrite,
            channel_threshold, **opts):
    """Design flows at the outlets: time of concentration by Kirpich, the NRCS lag and the
    TR-55 velocity method side by side; curve-number runoff; the Rational peak (with C and
    an IDF table) and the NRCS unit-hydrograph design hydrograph. Nested outlets each get
    their own catchment. Every rainfall, curve number and roughness is yours: basinkit ships
    none for real places. Planning-level estimates: each method's range of applicability
    is stated and flagged; follow the local drainage manual; design is the work of a
    licensed professional.

    \b
    Example: basinkit design-flow flow/ --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha --rainfall-depth 95mm \\
        --return-period 100 --curve-number 74 --sheet-flow-n 0.24 --p2-24h 45mm \\
        --channel-n 0.045 --hydraulic-radius 0.5m --channel-threshold 2ha -o design/
    """
    from ..workflow.steps.design_flow import (DesignFlowStepSettings, compute_design_flows,
                                              design_flow_cautions, write_design_flows)

    settings = DesignFlowStepSettings(
        channel_threshold=_area(channel_threshold, "--channel-threshold"),
        figures=figures, figure_outlets=tuple(figures_for), **opts)
    outlets.require()
    out = output_folder(output, overwrite)
    with console.stage("read"):
        fm = load_flow_folder(console, flowdir)
        hydro = settings.build(fm.terrain)  # every input read and checked first
    placed = place(console, fm, outlets)
    with console.stage("design flows"):
        res = compute_design_flows(fm, placed, settings, hydro=hydro, reporter=console)
    with out.open(console):
        write_design_flows(out, fm, placed, res, settings, reporter=console,
                           parameters={"flowdir": str(flowdir), **outlets.parameters()},
                           inputs=outlets.inputs())
    console.info(f"wrote {out.folder}")
    console.cautions(design_flow_cautions())
    return 1 if res.failed or len(placed.errors) else 0
