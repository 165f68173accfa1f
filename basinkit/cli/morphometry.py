"""``basinkit morphometry``: network, shape and relief descriptors of the catchments above
one or more outlets; hypsometric curves (the morphometry step of
:mod:`basinkit.workflow.steps`)."""

import click

from .channels import slope_area_option
from .options import (figure_options, finish, load_flow_folder, outlet_options,
                      output_folder, overwrite_option, parse_area, place)


@click.command("morphometry")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Folder to write morphometry.csv, hypsometry.csv, morphometry.json and "
                   "the hypsometric curves of the figure outlets.")
@outlet_options
@click.option("--min-area", default=None,
              help="Channel threshold (e.g. 0.5km2) for the network measures (stream "
                   "counts, Horton ratios, drainage density); without it they are left "
                   "out.")
@click.option("--slope-area-exponent", type=float, default=None,
              help="Exponent α of a slope–area channel criterion A·S^α ≥ C.")
@click.option("--slope-area-constant", type=float, default=None,
              help="Constant C of the slope–area criterion.")
@figure_options
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, outlets, min_area, slope_area_exponent,
            slope_area_constant, figures, figures_for, overwrite):
    """Measure the catchments above the outlets: area, perimeter, lengths, elongation,
    circularity, relief, hypsometry, slope, aspect and (with --min-area) the channel
    network's orders, Horton ratios and drainage density. Nested outlets each get their
    full catchment. One row per outlet given in morphometry.csv; an outlet that could not
    be placed or measured gets the reason in the error column and the exit status is 1.

    Outlets are snapped as in every basinkit command (see --snap-radius and
    --snap-to-channel).

    \b
    Example: basinkit morphometry flow/ --outlets demo_rasters/outlets.csv \\
        --snap-radius 30m --snap-to-channel 1ha --min-area 2ha -o morph/
    """
    from ..workflow.steps import MorphometrySettings, morphometry_step

    settings = MorphometrySettings(
        min_area_m2=parse_area(min_area, "--min-area") if min_area is not None else None,
        slope_area=slope_area_option(slope_area_exponent, slope_area_constant),
        figures=figures, figure_outlets=tuple(figures_for)).check()
    outlets.require()
    out = output_folder(output, overwrite)
    with console.stage("read"):
        fm = load_flow_folder(console, flowdir)
    placed = place(console, fm, outlets)
    with out.open(console), console.stage("morphometry"):
        res = morphometry_step(out, fm, placed, settings=settings, reporter=console,
                               parameters={"flowdir": str(flowdir), **outlets.parameters()},
                               inputs=outlets.inputs())
    console.info(f"wrote {out.folder}")
    return finish(console, res.failed)
