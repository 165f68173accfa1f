"""Options and helpers shared by the subcommands."""

from __future__ import annotations

import click

from ..errors import InputError
from ..units import parse_area, parse_length  # noqa: F401 - used by the commands


class LengthParam(click.ParamType):
    """A click option value read by :func:`parse_length` ('2m', '0.5km'; bare numbers are
    metres), converted to a float in metres."""

    name = "LENGTH"

    def convert(self, value, param, ctx):
        if value is None or isinstance(value, float):
            return value
        try:
            return parse_length(value, f"--{param.name.replace('_', '-')}" if param else
                                "the length")
        except InputError as exc:
            self.fail(str(exc), param, ctx)


LENGTH = LengthParam()


class NumberPairParam(click.ParamType):
    """A click option value 'A,B' converted to a pair of floats."""

    name = "A,B"

    def convert(self, value, param, ctx):
        if value is None or isinstance(value, tuple):
            return value
        opt = f"--{param.name.replace('_', '-')}" if param else "the value"
        try:
            return _number_pair(value, opt)
        except click.BadParameter as exc:
            self.fail(exc.message, param, ctx)


NUMBER_PAIR = NumberPairParam()


def _number_pair(text, option):
    """'A,B' as two floats (for --origin and --elevation-range)."""
    parts = [t.strip() for t in str(text).replace(";", ",").split(",")]
    try:
        a, b = (float(t) for t in parts)
    except ValueError:
        raise click.BadParameter(f"{option} takes two numbers separated by a comma, got "
                                 f"{text!r}") from None
    return a, b


def dem_options(f):
    """Options for reading a DEM: band, CRS, base level, georeferencing and the elevation
    check. The command gets ``band, crs, sea_level, base_level`` and one keyword
    ``dem_checks`` (a dict of the keyword arguments of :func:`basinkit.read_dem` and of
    :class:`basinkit.workflow.steps.FlowSettings` for the rest)."""
    import functools

    from ..terrain.checks import PLAUSIBLE_ELEVATION_M

    @functools.wraps(f)
    def wrapper(*args, **kw):
        rng = kw.pop("elevation_range")
        origin = kw.pop("origin")
        kw["dem_checks"] = dict(
            replace_crs=kw.pop("replace_crs"), cell_size=kw.pop("cell_size"),
            origin=None if origin is None else _number_pair(origin, "--origin"),
            elevation_range=(PLAUSIBLE_ELEVATION_M if rng is None
                             else _number_pair(rng, "--elevation-range")),
            implausible_elevations=kw.pop("implausible_elevations"))
        return f(*args, **kw)

    lo, hi = PLAUSIBLE_ELEVATION_M
    opts = [
        click.option("--band", type=int, default=None,
                     help="Band holding elevation (1-based); needed for multi-band files."),
        click.option("--crs", default=None,
                     help="CRS of a DEM that has none, e.g. EPSG:32633 (a DEM with a "
                          "different CRS is refused: see --replace-crs)."),
        click.option("--replace-crs", default=None, metavar="CRS",
                     help="Use this CRS instead of the one the DEM file states (a "
                          "mislabelled file); the outputs record the replacement."),
        click.option("--cell-size", type=float, default=None,
                     help="Cell size, in the CRS's units, of a raster without "
                          "georeferencing (e.g. a PNG); with --origin."),
        click.option("--origin", default=None, metavar="X,Y",
                     help="Upper-left corner of a raster without georeferencing, in the "
                          "CRS's units (rows run top-down); with --cell-size."),
        click.option("--elevation-range", default=None, metavar="MIN,MAX",
                     help=f"Plausible elevations in metres [default: {lo:g},{hi:g}]."),
        click.option("--implausible-elevations", type=click.Choice(["refuse", "nodata"]),
                     default="refuse", show_default=True,
                     help="Cells outside --elevation-range: refuse the DEM, or treat them "
                          "as nodata (their count is printed and recorded)."),
        click.option("--sea-level", type=float, default=None,
                     help="Cells at or below this elevation (m) are exits (base level)."),
        click.option("--base-level", "base_level", type=click.Path(),
                     help="Mask raster on the DEM's grid (non-zero = exit) or polygon layer "
                          "(sea, lake, reservoir) whose cells are exits."),
    ]
    for o in reversed(opts):
        wrapper = o(wrapper)
    return wrapper


def conditioning_options(f):
    """Options of the conditioning step (shared by condition and route)."""
    f = click.option("--burn-depth", type=LENGTH, default=2.0, show_default=True,
                     help="How far to lower the cells under --burn lines (e.g. 2m; bare "
                          "numbers are metres).")(f)
    f = click.option("--burn", type=click.Path(), multiple=True,
                     help="Line layer (GeoPackage, GeoJSON, ...) of known channels or "
                          "culverts to cut into the DEM before conditioning "
                          "(repeatable).")(f)
    f = click.option("--max-breach-length", type=str, default=None,
                     help="Longest breach channel for --method breach (e.g. 200m, 1km).")(f)
    f = click.option("--max-breach-depth", type=LENGTH, default=None,
                     help="Deepest cut a breach may make (e.g. 3m; bare numbers are "
                          "metres).")(f)
    f = click.option("--epsilon", type=float, default=0.0, show_default=True,
                     help="Raise filled cells by at least this much above their outlet so "
                          "that the surface drains strictly (0: exact filled surface).")(f)
    return f


def overwrite_option(f):
    return click.option("--overwrite", is_flag=True,
                        help="Replace outputs that already exist.")(f)


def read_dem_from_options(dem, band, crs, sea_level, base_level, dem_checks=None):
    from ..io.dem import read_dem

    return read_dem(dem, band=band, crs=crs, sea_level=sea_level, base_level=base_level,
                    **(dem_checks or {}))


# ---------------------------------------------------------------------- outlets
OUTLET_HELP_EXAMPLE = ("--outlets demo_rasters/outlets.csv --snap-radius 30m "
                       "--snap-to-channel 1ha")


def outlet_spec(values=(), file=None, crs=None, id_column=None, snap_radius=None,
                snap_to_channel=None):
    """The outlet options as a :class:`basinkit.workflow.outlets.OutletSpec` (units parsed:
    bad values are refused before any work)."""
    from ..workflow.outlets import OutletSpec

    return OutletSpec(
        values=tuple(values or ()), file=file, crs=crs, id_column=id_column,
        snap_radius_m=(parse_length(snap_radius, "--snap-radius")
                       if snap_radius is not None else None),
        snap_to_channel_m2=(parse_area(snap_to_channel, "--snap-to-channel")
                            if snap_to_channel is not None else None))


def outlet_options(f=None, *, purpose="An outlet position"):
    """The outlet options shared by every subcommand that takes outlets.

    Adds ``--outlet [NAME=]X,Y`` (repeatable), ``--outlets FILE``, ``--outlet-crs``,
    ``--id-column``, ``--snap-radius LENGTH`` and ``--snap-to-channel AREA``, and passes
    the command one keyword argument ``outlets``: a
    :class:`basinkit.workflow.outlets.OutletSpec` (units are parsed, and bad values
    rejected, before the command body runs). Every command places outlets with
    :func:`basinkit.workflow.outlets.place_outlets`, so one outlet given with the same
    options lands on the same cell in every command and in ``basinkit run``.
    """
    import functools

    def deco(fn):
        @functools.wraps(fn)
        def wrapper(*args, **kw):
            spec = outlet_spec(kw.pop("outlet_values"), kw.pop("outlet_file"),
                               kw.pop("outlet_crs"), kw.pop("id_column"),
                               kw.pop("snap_radius"), kw.pop("snap_to_channel"))
            return fn(*args, outlets=spec, **kw)

        opts = [
            click.option("--outlet", "outlet_values", multiple=True, metavar="[NAME=]X,Y",
                         help=f"{purpose} (repeatable), in --outlet-crs; unnamed "
                              "outlets are called outlet_1, outlet_2, ..."),
            click.option("--outlets", "outlet_file", type=click.Path(), default=None,
                         help="CSV (id column and x/y or lon/lat columns), GeoJSON or "
                              "GeoPackage points (vector files carry their own CRS)."),
            click.option("--outlet-crs", default=None,
                         help="CRS of --outlet values and CSV x/y columns, e.g. EPSG:4326 "
                              "[default: the DEM's; lon/lat columns: EPSG:4326]."),
            click.option("--id-column", default=None,
                         help="Column of --outlets holding the ids [default: the first of "
                              "outlet_id, id, name, ...; else the row number]."),
            click.option("--snap-radius", default=None, metavar="LENGTH",
                         help="Move each outlet to the cell of greatest upstream area "
                              "within this distance on the ground (e.g. 30m, 0.1km; 0 = no "
                              "snapping); a snap that changes the upstream area by more "
                              "than 5 % is warned about [default: the larger of 30 m and "
                              "one cell]."),
            click.option("--snap-to-channel", default=None, metavar="AREA",
                         help="Instead, move each outlet to the nearest cell whose upstream "
                              "area is at least this (e.g. 1ha, 0.5km2, 5000m2) within "
                              "--snap-radius."),
        ]
        for o in reversed(opts):
            wrapper = o(wrapper)
        return wrapper

    return deco(f) if f is not None else deco


def figure_options(f):
    """``--figures-for ID`` (repeatable) and ``--figures/--no-figures``."""
    f = click.option("--figures/--no-figures", default=True, show_default=True,
                     help="Write PNG figures for the figure outlets.")(f)
    f = click.option("--figures-for", "figures_for", multiple=True, metavar="ID",
                     help="Outlet that gets figures (repeatable) [default: the first 20 "
                          "outlets].")(f)
    return f


def output_folder(output, overwrite):
    """The command's output folder, checked (refused when it holds files, unless
    --overwrite) before any work is done; created at the first write."""
    from ..workflow.output import OutputFolder

    return OutputFolder(output, overwrite).check()


def load_flow_folder(console, flowdir):
    """Read a flow folder written by ``basinkit route``."""
    from ..io.flow_folder import load_flow
    from ..io.tiled_flow_folder import TiledFlowFolder, is_tiled_folder

    if is_tiled_folder(flowdir):  # routed by tiles: this command needs it in memory
        from ..terrain.memory import check_memory

        lay = TiledFlowFolder(flowdir).layout
        check_memory(lay.nrows * lay.ncols,
                     what="this command reads the whole flow folder (it was routed by "
                          "tiles; only delineate and channels work by tiles):")
    fm = load_flow(flowdir)
    console.info(f"read flow folder {flowdir}: {fm.shape[0]} x {fm.shape[1]} cells, "
                 f"{fm.method} routing")
    return fm


def place(console, fm, outlets):
    """Read and place the outlets (as every command does); failures are reported."""
    from ..workflow.outlets import place_outlets

    with console.stage("outlets"):
        placed = place_outlets(fm, outlets, reporter=console)
    console.info(f"{len(placed.table)} of {placed.given} outlet"
                 f"{'s' if placed.given != 1 else ''} placed")
    return placed


def tell_peak_memory(console):
    """The peak resident memory of the command so far, on the console (as ``basinkit run``
    prints it; ``--log-json``: the record with ``"event": "peak_memory"``)."""
    from .._processes import peak_memory
    from ..terrain.memory import format_bytes

    peak = peak_memory()
    if peak["peak_memory_bytes"] is not None:
        console.info(f"peak memory {format_bytes(peak['peak_memory_bytes'])}", event="peak_memory",
                     **peak)


def finish(console, failed=0):
    """Print the cautions once and return the exit status (1 when outlets failed)."""
    from ..workflow.cautions import CAUTION_TEXT

    console.cautions(CAUTION_TEXT)
    return 1 if failed else 0


def report_writer():
    """The report room's writer, handed to the job runner (the workflow room does not
    import the report room)."""
    from ..report import write_report

    return write_report
