"""Raster labels to polygons built from cell boundaries, and their true area and perimeter."""

from __future__ import annotations

import numpy as np

__all__ = ["labels_to_polygons", "mask_to_polygon", "ground_area_perimeter"]


def labels_to_polygons(labels, transform, ids=None) -> dict:
    """Polygons (shapely) of labelled regions from cell boundaries.

    Parameters
    ----------
    labels : ndarray of int (nrows, ncols)
        0 = no region.
    transform : affine.Affine
    ids : iterable of int, optional
        Labels to return (default: all > 0).

    Returns
    -------
    dict label -> Polygon or MultiPolygon (valid, holes kept; MultiPolygon only when the
    region is in pieces, i.e. not 4-connected).
    """
    import shapely
    from rasterio.features import shapes
    from shapely.geometry import shape

    lab = np.ascontiguousarray(labels, dtype=np.int32)
    mask = lab > 0
    if ids is not None:
        wanted = np.asarray(sorted(set(int(i) for i in ids)), dtype=np.int32)
        mask &= np.isin(lab, wanted)
    parts: dict[int, list] = {}
    for geom, value in shapes(lab, mask=mask, connectivity=4, transform=transform):
        parts.setdefault(int(value), []).append(shape(geom))
    out = {}
    for k, ps in parts.items():
        g = ps[0] if len(ps) == 1 else shapely.union_all(ps)
        if not g.is_valid:
            g = shapely.make_valid(g)
        out[k] = g
    return out


def mask_to_polygon(mask, transform):
    """Polygon of a boolean mask (None when empty)."""
    return labels_to_polygons(np.asarray(mask, dtype=np.int32), transform).get(1)


def ground_area_perimeter(geom, crs):
    """Area (m²) and perimeter (m) of a polygon on the ground.

    Projected CRSs: planar measures converted from the CRS's linear unit. Geographic CRSs:
    geodesic area and perimeter on the CRS's ellipsoid (Karney 2013, via pyproj.Geod).
    """
    from pyproj import Geod

    from .geometry import _linear_unit_to_metres

    if crs.is_geographic:
        ell = crs.ellipsoid
        f = 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0
        area, perim = Geod(a=ell.semi_major_metre, f=f).geometry_area_perimeter(geom)
        return abs(float(area)), float(perim)
    k = _linear_unit_to_metres(crs)
    return float(geom.area) * k * k, float(geom.length) * k
