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


def dem_options(f):
    """Options for reading a DEM: band, CRS, base level."""
    f = click.option("--base-level", "base_level", type=click.Path(),
                     help="Mask raster on the DEM's grid (non-zero = exit) or polygon layer "
                          "(sea, lake, reservoir) whose cells are exits.")(f)
    f = click.option("--sea-level", type=float, default=None,
                     help="Cells at or below this elevation (m) are exits (base level).")(f)
    f = click.option("--crs", default=None,
                     help="CRS to assume when the DEM has none, e.g. EPSG:32633.")(f)
    f = click.option("--band", type=int, default=None,
                     help="Band holding elevation (1-based); needed for multi-band files.")(f)
    return f


def conditioning_options(f):
    """Options of the conditioning step (shared by condition and route)."""
    f = click.option("--burn-depth", type=LENGTH, default=2.0, show_default=True,
                     help="How far to lower the cells under --burn lines (e.g. 2m; bare "
                          "numbers are metres).")(f)
    f = click.option("--burn", type=click.Path(), default=None,
                     help="Line layer (GeoPackage, GeoJSON, ...) of known channels or "
                          "culverts to cut into the DEM before conditioning.")(f)
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


def read_dem_from_options(dem, band, crs, sea_level, base_level):
    from ..io.dem import read_dem

    return read_dem(dem, band=band, crs=crs, sea_level=sea_level, base_level=base_level)


# ---------------------------------------------------------------------- outlets
OUTLET_HELP_EXAMPLE = ("--outlets demo_rasters/outlets.csv --snap-radius 30m "
                       "--snap-to-channel 1ha")


class OutletRequest:
    """The outlet options of a subcommand, read once and snapped the same way everywhere.

    Every subcommand that takes outlets (delineate, profile, morphometry, channels) gets one
    of these from :func:`outlet_options`; :meth:`snap` places the outlets on the grid with
    :func:`basinkit.analysis.outlets.prepare_outlets`, so one outlet given with the same options
    lands on the same cell in every command (and in ``basinkit run``).

    Snapping (see :func:`basinkit.analysis.outlets.snap_outlets`): by default each outlet moves to
    the cell of greatest upstream area within ``--snap-radius`` (3 cells if not given);
    with ``--snap-to-channel AREA`` it moves instead to the nearest cell whose upstream area
    is at least AREA within ``--snap-radius`` (10 cells if not given).
    """

    def __init__(self, values=(), file=None, crs=None, id_column=None, snap_radius=None,
                 snap_to_channel=None):
        self.values = tuple(values or ())
        self.file = file
        self.crs = crs
        self.id_column = id_column
        self.snap_radius = snap_radius
        self.snap_to_channel = snap_to_channel
        self.radius_m = (parse_length(snap_radius, "--snap-radius")
                         if snap_radius is not None else None)
        self.channel_area_m2 = (parse_area(snap_to_channel, "--snap-to-channel")
                                if snap_to_channel is not None else None)

    def __bool__(self):
        return bool(self.values or self.file)

    def require(self):
        """Raise InputError when no outlet option was given at all."""
        if not self:
            raise InputError("no outlets given; pass --outlet X,Y (repeatable) or "
                             "--outlets FILE")

    def read(self):
        """Outlets as given (``outlet_id, source, x_given, y_given, given_crs``) and the
        rows that could not be read; --outlet values come first, then the file."""
        import pandas as pd

        from ..analysis.outlets import ERROR_COLUMNS, outlets_from_text, read_outlet_file

        self.require()
        raws, errs = [], []
        if self.values:
            r, e = outlets_from_text(self.values, crs=self.crs)
            raws.append(r)
            errs.append(e)
        if self.file:
            r, e = read_outlet_file(self.file, crs=self.crs, id_column=self.id_column)
            raws.append(r)
            errs.append(e)
        raw = pd.concat(raws, ignore_index=True)
        errors = pd.concat([e for e in errs if len(e)] or errs[:1], ignore_index=True)
        return raw, errors[ERROR_COLUMNS]

    def snap_kwargs(self):
        """Keyword arguments of :func:`basinkit.analysis.catchments.delineate` that place the
        outlets exactly as :meth:`snap` does."""
        return dict(crs=self.crs, snap_radius_m=self.radius_m,
                    snap_to_channel_m2=self.channel_area_m2)

    def snap(self, fm, raw=None, read_errors=None):
        """Snapped outlets and all errors (reading, placing, snapping).

        Returns
        -------
        (DataFrame, DataFrame)
            As :func:`basinkit.analysis.outlets.prepare_outlets`; the errors table also holds the
            rows that could not be read. Raises OutletError when no outlet is usable.
        """
        import pandas as pd

        from ..analysis.outlets import ERROR_COLUMNS, prepare_outlets, require_outlets

        if raw is None:
            raw, read_errors = self.read()
        if len(raw):
            snapped, e = prepare_outlets(fm, raw, crs=self.crs, radius_m=self.radius_m,
                                         channel_area_m2=self.channel_area_m2)
        else:
            snapped, e = raw.assign(cell=pd.Series(dtype="int64")), read_errors.iloc[:0]
        parts = [x for x in (read_errors, e) if x is not None and len(x)]
        errors = (pd.concat(parts, ignore_index=True) if parts else e)[ERROR_COLUMNS]
        require_outlets(snapped, errors)
        return snapped, errors.reset_index(drop=True)

    def parameters(self):
        """The outlet options for provenance records."""
        return {"outlets": list(self.values), "outlets_file": self.file,
                "outlet_crs": self.crs, "id_column": self.id_column,
                "snap_radius": self.snap_radius, "snap_radius_m": self.radius_m,
                "snap_to_channel": self.snap_to_channel,
                "snap_to_channel_m2": self.channel_area_m2,
                "snap_mode": ("nearest channel cell" if self.channel_area_m2 is not None
                              else "greatest upstream area")}


def outlet_options(f=None, *, purpose="An outlet position"):
    """The outlet options shared by every subcommand that takes outlets.

    Adds ``--outlet [NAME=]X,Y`` (repeatable), ``--outlets FILE``, ``--outlet-crs``,
    ``--id-column``, ``--snap-radius LENGTH`` and ``--snap-to-channel AREA``, and passes
    the command one keyword argument ``outlets``: an :class:`OutletRequest` (units are
    parsed, and bad values rejected, before the command body runs).
    """
    import functools

    def deco(fn):
        @functools.wraps(fn)
        def wrapper(*args, **kw):
            req = OutletRequest(kw.pop("outlet_values"), kw.pop("outlet_file"),
                                kw.pop("outlet_crs"), kw.pop("id_column"),
                                kw.pop("snap_radius"), kw.pop("snap_to_channel"))
            return fn(*args, outlets=req, **kw)

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
                              "within this distance (e.g. 30m, 0.1km; 0 = no snapping) "
                              "[default: 3 cells; 10 cells with --snap-to-channel]."),
            click.option("--snap-to-channel", default=None, metavar="AREA",
                         help="Instead, move each outlet to the nearest cell whose upstream "
                              "area is at least this (e.g. 1ha, 0.5km2, 5000m2) within "
                              "--snap-radius."),
        ]
        for o in reversed(opts):
            wrapper = o(wrapper)
        return wrapper

    return deco(f) if f is not None else deco
