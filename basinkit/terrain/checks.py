"""Checks that a DEM's numbers can be what they claim to be, before anything is computed
from them: georeferencing present, geographic coordinates within ±180°/±90°, elevations
within a plausible range.

These take arrays, transforms and CRSs (the file reader, :func:`basinkit.read_dem`, calls
them); each refusal is an :class:`~basinkit.errors.InputError` saying what is wrong and what
to do.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["PLAUSIBLE_ELEVATION_M", "IMPLAUSIBLE_ACTIONS", "lacks_georeferencing",
           "given_transform", "check_geographic_extent", "check_elevation_range",
           "screen_elevations"]

# The lowest dry land is the Dead Sea shore (about -430 m) and the highest summit about
# 8 850 m (values from memory), so a DEM in metres holds nothing outside -500 ... 9 000 m;
# values beyond are fill values (1e30, -3.4e38), the wrong vertical unit or a bathymetry.
PLAUSIBLE_ELEVATION_M = (-500.0, 9000.0)
IMPLAUSIBLE_ACTIONS = ("refuse", "nodata")
# slack for grids whose edges lie on ±180°/±90° up to rounding of the cell size
_DEGREE_SLACK = 1e-6


def lacks_georeferencing(transform) -> bool:
    """True when a raster's transform is the identity: no cell size or position was stored
    (a PNG or a plain TIFF; GDAL then reports 1-unit cells at the origin with rows running
    upwards).

    Examples
    --------
    >>> from affine import Affine
    >>> lacks_georeferencing(Affine.identity()), lacks_georeferencing(Affine(10, 0, 0, 0, -10, 0))
    (True, False)
    """
    return bool(transform.is_identity)


def given_transform(cell_size, origin):
    """The transform of a raster without georeferencing from the user's cell size and the
    map coordinates of its upper-left corner (rows run top-down, north-up).

    Parameters
    ----------
    cell_size : float
        Cell width and height in the CRS's units (metres, feet or degrees).
    origin : (float, float)
        X and Y of the grid's upper-left corner.

    Examples
    --------
    >>> given_transform(10, (500000, 5000000))
    Affine(10.0, 0.0, 500000.0,
           0.0, -10.0, 5000000.0)
    """
    from affine import Affine

    try:
        s = float(cell_size)
        x0, y0 = (float(v) for v in origin)
    except (TypeError, ValueError):
        raise InputError(f"the cell size must be a number and the origin two numbers X,Y; "
                         f"got {cell_size!r} and {origin!r}") from None
    if not (np.isfinite(s) and s > 0):
        raise InputError(f"the cell size must be a positive number, got {cell_size!r}")
    if not (np.isfinite(x0) and np.isfinite(y0)):
        raise InputError(f"the origin must be two finite numbers X,Y, got {origin!r}")
    return Affine(s, 0.0, x0, 0.0, -s, y0)


def check_geographic_extent(transform, shape, crs, name="the DEM"):
    """Refuse a grid in a geographic CRS whose edges lie beyond ±180° longitude or ±90°
    latitude: its coordinates are not degrees (typically metres of a projected CRS tagged
    as EPSG:4326), and every area computed from them would be nonsense.

    Raises
    ------
    InputError
        Naming the extent and what to do (state the right CRS with ``--replace-crs``).
    """
    if crs is None or not crs.is_geographic:
        return
    nr, nc = shape
    xs = (transform.c, transform.c + transform.a * nc)
    ys = (transform.f, transform.f + transform.e * nr)
    lo_x, hi_x, lo_y, hi_y = min(xs), max(xs), min(ys), max(ys)
    if lo_x >= -180 - _DEGREE_SLACK and hi_x <= 180 + _DEGREE_SLACK \
            and lo_y >= -90 - _DEGREE_SLACK and hi_y <= 90 + _DEGREE_SLACK:
        return
    raise InputError(
        f"{name} is in a geographic CRS ({crs.name}, degrees) but its coordinates run "
        f"x {lo_x:.6g} to {hi_x:.6g}, y {lo_y:.6g} to {hi_y:.6g}, beyond ±180° / ±90°: "
        "they are not degrees (metres tagged as longitude/latitude?); state the CRS the "
        "coordinates are really in with --replace-crs (e.g. --replace-crs EPSG:32633)")


def check_elevation_range(elevation_range):
    """The (min, max) pair as floats, refused unless min < max and both finite."""
    try:
        lo, hi = (float(v) for v in elevation_range)
    except (TypeError, ValueError):
        raise InputError(f"the elevation range must be two numbers MIN,MAX (metres), got "
                         f"{elevation_range!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise InputError(f"the elevation range must be two finite numbers with MIN < MAX, "
                         f"got {lo:g}, {hi:g}")
    return lo, hi


def screen_elevations(elevation, valid, elevation_range=PLAUSIBLE_ELEVATION_M,
                      action="refuse", name="the DEM"):
    """Find valid cells whose elevation lies outside a plausible range and refuse them or
    turn them into nodata.

    Parameters
    ----------
    elevation : ndarray
    valid : ndarray of bool
    elevation_range : (float, float)
        Plausible minimum and maximum (metres); default :data:`PLAUSIBLE_ELEVATION_M`.
    action : {"refuse", "nodata"}
        Refuse the DEM, or treat those cells as nodata.
    name : str
        How messages name the DEM.

    Returns
    -------
    (ndarray of bool, int)
        The validity mask (implausible cells removed when ``action="nodata"``) and the
        number of implausible cells.

    Raises
    ------
    InputError
        With ``action="refuse"`` when any cell is implausible, naming the count, the
        extremes and the two ways on.

    Examples
    --------
    >>> z = np.array([[100.0, 1e30], [120.0, 130.0]], dtype=np.float32)
    >>> v, n = screen_elevations(z, np.isfinite(z), action="nodata")
    >>> n, v.tolist()
    (1, [[True, False], [True, True]])
    """
    if action not in IMPLAUSIBLE_ACTIONS:
        raise InputError(f"implausible elevations are either refused or treated as nodata "
                         f"({' or '.join(IMPLAUSIBLE_ACTIONS)}), got {action!r}")
    lo, hi = check_elevation_range(elevation_range)
    with np.errstate(invalid="ignore"):
        bad = valid & ((elevation < lo) | (elevation > hi))
    n = int(bad.sum())
    if n == 0:
        return valid, 0
    if action == "nodata":
        return valid & ~bad, n
    zb = elevation[bad]
    raise InputError(
        f"{name} holds {n:,} cell{'s' if n != 1 else ''} with elevations outside the "
        f"plausible range {lo:g} to {hi:g} m (lowest {float(zb.min()):.6g}, highest "
        f"{float(zb.max()):.6g}); if they are missing-data values, pass "
        "--implausible-elevations nodata; if the terrain really reaches them (or the "
        "elevations are not in metres), widen --elevation-range MIN,MAX")
