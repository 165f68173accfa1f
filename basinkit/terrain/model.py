"""The Terrain object: elevation, validity, georeferencing and cell geometry of a DEM."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import InputError
from .geometry import CellGeometry, cell_geometry

__all__ = ["Terrain", "terrain_from_array"]

@dataclass
class Terrain:
    """A DEM on a north-up grid with everything needed to route flow over it.

    Attributes
    ----------
    elevation : ndarray of float32 (nrows, ncols)
        Elevation in the DEM's vertical unit (assumed metres). Invalid cells hold NaN.
    valid : ndarray of bool
        True where the DEM has data.
    transform : affine.Affine
        Georeferencing of the grid (rows north to south).
    crs : pyproj.CRS
        Horizontal coordinate reference system.
    geometry : CellGeometry
        Cell sizes and areas in metres.
    base_level : ndarray of bool or None
        Cells that are exits besides the grid edge and nodata (sea, lake, reservoir).
    source : dict
        Provenance of the input: path, SHA-256, band.
    """

    elevation: np.ndarray
    valid: np.ndarray
    transform: object
    crs: object
    geometry: CellGeometry
    base_level: np.ndarray | None = None
    source: dict = field(default_factory=dict)

    @property
    def shape(self):
        return self.elevation.shape

    @property
    def size(self):
        return self.elevation.size

    def with_elevation(self, elevation: np.ndarray, **extra) -> "Terrain":
        """A copy sharing everything but the elevation array."""
        return replace(self, elevation=elevation, **extra)

    def cell_area(self) -> np.ndarray:
        """Cell areas (m²) as a full grid (a broadcast view for projected grids)."""
        return self.geometry.cell_area_grid(self.shape)

    def xy_of(self, rows, cols):
        """Map coordinates of cell centres."""
        t = self.transform
        rows = np.asarray(rows, dtype=float)
        cols = np.asarray(cols, dtype=float)
        return t.c + (cols + 0.5) * t.a, t.f + (rows + 0.5) * t.e

    def rowcol_of(self, x, y):
        """Row and column (floored) of map coordinates; may fall outside the grid."""
        t = self.transform
        col = np.floor((np.asarray(x, dtype=float) - t.c) / t.a).astype(np.int64)
        row = np.floor((np.asarray(y, dtype=float) - t.f) / t.e).astype(np.int64)
        return row, col


def _to_pyproj(crs_like):
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    try:
        return CRS.from_user_input(crs_like)
    except CRSError as exc:
        raise InputError(f"cannot understand the CRS {crs_like!r}: {exc}") from None


def _prepare(elevation, valid, transform, crs, base_level, source, sea_level):
    from affine import Affine

    if transform.b != 0 or transform.d != 0:
        raise InputError("the DEM's grid is rotated or sheared; resample it to a north-up "
                         "grid first")
    if transform.e > 0:  # rows run south to north: flip so that row 0 is the northern edge
        elevation = elevation[::-1].copy()
        valid = valid[::-1].copy()
        if base_level is not None:
            base_level = base_level[::-1].copy()
        transform = Affine(transform.a, 0, transform.c, 0, -transform.e,
                           transform.f + transform.e * elevation.shape[0])
    if transform.a < 0:
        raise InputError("the DEM's columns run east to west; resample it first")
    if not valid.any():
        raise InputError("the DEM holds no valid cells (every cell is nodata)")
    elevation = np.where(valid, elevation, np.nan).astype(np.float32, copy=False)
    if sea_level is not None:
        sea = valid & (elevation <= sea_level)
        base_level = sea if base_level is None else (base_level | sea)
    if base_level is not None:
        base_level = base_level & valid
    geom = cell_geometry(transform, elevation.shape, crs)
    return Terrain(elevation, valid, transform, crs, geom, base_level, source)


def terrain_from_array(elevation, transform=None, crs="EPSG:32633", nodata=None,
                       base_level=None, sea_level=None, cellsize=None) -> Terrain:
    """Build a Terrain from an array (for tests, notebooks and the Python API).

    Parameters
    ----------
    elevation : array_like (nrows, ncols)
    transform : affine.Affine, optional
        Defaults to a grid of ``cellsize`` (default 1) with its top-left corner at (0, 0).
    crs : anything pyproj understands
    nodata : float, optional
        Value marking missing cells; NaN always does.
    base_level : array of bool, optional
        Cells that are exits (sea, lake).
    sea_level : float, optional
        Cells at or below this elevation are exits.
    """
    from affine import Affine

    z = np.asarray(elevation, dtype=np.float64)
    if z.ndim != 2:
        raise InputError(f"the DEM must be 2-D, got an array of shape {z.shape}")
    if transform is None:
        s = 1.0 if cellsize is None else float(cellsize)
        transform = Affine(s, 0, 0, 0, -s, z.shape[0] * s)
    valid = np.isfinite(z)
    if nodata is not None:
        valid &= z != nodata
    bl = None if base_level is None else np.asarray(base_level, dtype=bool)
    return _prepare(z.astype(np.float32), valid, transform, _to_pyproj(crs), bl,
                    {"path": None}, sea_level)
