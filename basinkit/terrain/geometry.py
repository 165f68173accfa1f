"""Cell geometry in metres for projected and geographic grids.

A projected grid has one cell width, height, diagonal and area for every cell, converted from
the CRS's linear unit (feet, US survey feet, ...) to metres. A geographic grid has them per
row: the geodesic distances between neighbouring cell centres on the WGS 84 (or the CRS's own)
ellipsoid and the exact ellipsoidal area of each latitude-longitude cell.

References
----------
Karney, C. F. F. (2013). Algorithms for geodesics. Journal of Geodesy 87:43-55.
Snyder, J. P. (1987). Map Projections: A Working Manual. USGS Professional Paper 1395
(authalic latitude, area of an ellipsoidal zone).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

__all__ = ["CellGeometry", "cell_geometry"]


@dataclass(frozen=True)
class CellGeometry:
    """Distances between neighbouring cell centres and cell areas, per row, in metres.

    Attributes
    ----------
    dx : ndarray (nrows,)
        East-west distance between the centres of cells (r, c) and (r, c+1), m.
    dy_down : ndarray (nrows,)
        Distance from the centre of (r, c) to (r+1, c), m (last entry repeats the previous).
    diag_down : ndarray (nrows,)
        Distance from the centre of (r, c) to (r+1, c+1), m.
    area : ndarray (nrows,)
        Area of one cell of row r on the ground, m².
    geographic : bool
        True when the grid is in longitude/latitude.
    """

    dx: np.ndarray
    dy_down: np.ndarray
    diag_down: np.ndarray
    area: np.ndarray
    geographic: bool

    def neighbour_distances(self) -> np.ndarray:
        """Distances (nrows, 8) from each row's cells to the 8 neighbours, in the order
        N, NE, E, SE, S, SW, W, NW (azimuth 0, 45, ..., 315)."""
        n = self.dx.shape[0]
        up = np.empty(n)
        up_diag = np.empty(n)
        up[1:] = self.dy_down[:-1]
        up[0] = self.dy_down[0]
        up_diag[1:] = self.diag_down[:-1]
        up_diag[0] = self.diag_down[0]
        d = np.empty((n, 8))
        d[:, 0] = up
        d[:, 1] = up_diag
        d[:, 2] = self.dx
        d[:, 3] = self.diag_down
        d[:, 4] = self.dy_down
        d[:, 5] = self.diag_down
        d[:, 6] = self.dx
        d[:, 7] = up_diag
        return d

    def cell_area_grid(self, shape) -> np.ndarray:
        """Cell area (m²) broadcast to a full grid of ``shape``."""
        return np.broadcast_to(self.area[:, None], shape)


def _linear_unit_to_metres(crs) -> float:
    """Metres per CRS unit for a projected CRS (handles feet and US survey feet)."""
    factors = [ax.unit_conversion_factor for ax in crs.axis_info
               if ax.unit_conversion_factor and ax.direction in ("east", "north", "west",
                                                                  "south")]
    if not factors:
        raise InputError(f"cannot tell the linear unit of the CRS {crs.name!r}; "
                         "reproject the DEM to a CRS in metres or feet")
    if max(factors) - min(factors) > 1e-12:
        raise InputError(f"the CRS {crs.name!r} uses different units on its two axes; "
                         "reproject the DEM first")
    return float(factors[0])


def _authalic_q(phi: np.ndarray, e: float) -> np.ndarray:
    """q(φ) of the authalic-latitude formulas (Snyder 1987, eq. 3-12)."""
    s = np.sin(phi)
    if e == 0.0:
        return 2.0 * s
    es = e * s
    return (1 - e * e) * (s / (1 - es * es) - (1 / (2 * e)) * np.log((1 - es) / (1 + es)))


def cell_geometry(transform, shape, crs) -> CellGeometry:
    """Compute per-row cell geometry in metres.

    Parameters
    ----------
    transform : affine.Affine
        North-up transform (no rotation); ``transform.e`` negative (rows run north to south).
    shape : tuple of int
        (nrows, ncols).
    crs : pyproj.CRS
        The grid's coordinate reference system.

    Returns
    -------
    CellGeometry

    Notes
    -----
    Geographic grids: neighbour distances are geodesics between cell centres (Karney 2013,
    through pyproj); the cell area is the exact area of the ellipsoidal quadrangle,
    ``A = a²/2 · Δλ · (q(φ₂) - q(φ₁))`` with the authalic ``q`` (Snyder 1987, eq. 3-12,
    which already carries the factor 1-e²; the whole ellipsoid gives 2πa²·q(90°)).
    """
    nrows = shape[0]
    if crs.is_geographic:
        from pyproj import Geod

        ell = crs.ellipsoid
        a = ell.semi_major_metre
        inv_f = ell.inverse_flattening
        f = 0.0 if not inv_f else 1.0 / inv_f
        geod = Geod(a=a, f=f)
        e2 = f * (2 - f)
        e = np.sqrt(e2)
        dlon = abs(transform.a)
        dlat = abs(transform.e)
        top = transform.f
        centres = top - dlat * (np.arange(nrows) + 0.5)
        nxt = centres - dlat
        lon0 = np.zeros(nrows)
        _, _, dx = geod.inv(lon0, centres, lon0 + dlon, centres)
        _, _, dyd = geod.inv(lon0, centres, lon0, nxt)
        _, _, diag = geod.inv(lon0, centres, lon0 + dlon, nxt)
        if nrows > 1:
            dyd[-1] = dyd[-2]
            diag[-1] = diag[-2]
        north = np.radians(np.clip(top - dlat * np.arange(nrows), -90, 90))
        south = np.radians(np.clip(top - dlat * (np.arange(nrows) + 1), -90, 90))
        area = (a * a / 2.0 * np.radians(dlon)
                * np.abs(_authalic_q(north, e) - _authalic_q(south, e)))
        return CellGeometry(np.abs(dx), np.abs(dyd), np.abs(diag), area, True)
    k = _linear_unit_to_metres(crs)
    w = abs(transform.a) * k
    h = abs(transform.e) * k
    ones = np.ones(nrows)
    return CellGeometry(ones * w, ones * h, ones * np.hypot(w, h), ones * w * h, False)
