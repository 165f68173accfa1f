"""Options and helpers shared by the subcommands."""

from __future__ import annotations

import click

from ..errors import InputError


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
    f = click.option("--burn-depth", type=float, default=2.0, show_default=True,
                     help="Metres to lower the cells under --burn lines.")(f)
    f = click.option("--burn", type=click.Path(), default=None,
                     help="Line layer (GeoPackage, GeoJSON, ...) of known channels or "
                          "culverts to cut into the DEM before conditioning.")(f)
    f = click.option("--max-breach-length", type=str, default=None,
                     help="Longest breach channel for --method breach (e.g. 200m, 1km).")(f)
    f = click.option("--max-breach-depth", type=float, default=None,
                     help="Deepest cut (m) a breach may make.")(f)
    f = click.option("--epsilon", type=float, default=0.0, show_default=True,
                     help="Raise filled cells by at least this much above their outlet so "
                          "that the surface drains strictly (0: exact filled surface).")(f)
    return f


def overwrite_option(f):
    return click.option("--overwrite", is_flag=True,
                        help="Replace outputs that already exist.")(f)


_AREA = {"m2": 1.0, "ha": 1e4, "km2": 1e6}
_LENGTH = {"m": 1.0, "km": 1e3}


def _parse_quantity(text, units, what, default_unit):
    s = str(text).strip().lower().replace(" ", "")
    for u in sorted(units, key=len, reverse=True):
        if s.endswith(u):
            num = s[: -len(u)]
            break
    else:
        num, u = s, default_unit
    try:
        v = float(num)
    except ValueError:
        raise InputError(f"cannot read {what} {text!r}; write a number with a unit, one of "
                         f"{', '.join(units)} (e.g. 0.5km2)") from None
    if not v >= 0:
        raise InputError(f"{what} must be zero or positive, got {text!r}")
    return v * units[u]


def parse_area(text, what="the area"):
    """'0.5km2', '20ha', '5000m2' (bare numbers are m²) → square metres."""
    return _parse_quantity(text, _AREA, what, "m2")


def parse_length(text, what="the length"):
    """'200m', '1.5km' (bare numbers are metres) → metres."""
    return _parse_quantity(text, _LENGTH, what, "m")


def read_dem_from_options(dem, band, crs, sea_level, base_level):
    from ..terrain import read_dem

    return read_dem(dem, band=band, crs=crs, sea_level=sea_level, base_level=base_level)
