"""Raster labels to polygons built from cell boundaries, and their true area and perimeter."""

from __future__ import annotations

import numpy as np

__all__ = ["labels_to_polygons", "mask_to_polygon", "ground_area_perimeter"]


def labels_to_polygons(labels, transform, ids=None, workers: int = 1) -> dict:
    """Polygons (shapely) of labelled regions from cell boundaries.

    Parameters
    ----------
    labels : ndarray of int (nrows, ncols)
        0 = no region.
    transform : affine.Affine
    ids : iterable of int, optional
        Labels to return (default: all > 0).
    workers : int
        Threads for the validity check (shapely 2 releases the GIL).

    Returns
    -------
    dict label -> Polygon or MultiPolygon (valid, holes kept; MultiPolygon only when the
    region is in pieces, i.e. not 4-connected).
    """
    import shapely
    from rasterio.features import shapes

    lab = np.ascontiguousarray(labels, dtype=np.int32)
    mask = lab > 0
    if ids is not None:
        wanted = np.asarray(sorted(set(int(i) for i in ids)), dtype=np.int32)
        mask &= np.isin(lab, wanted)
    parts: dict[int, list] = {}
    for geom, value in shapes(lab, mask=mask, connectivity=4, transform=transform):
        parts.setdefault(int(value), []).append(_polygon_from_rings(geom["coordinates"]))
    keys = list(parts)
    # the pieces of one label are its 4-connected components: their interiors are
    # disjoint and they touch at most at cell corners, so they form a valid MultiPolygon
    # as they are (no overlay union needed)
    geoms = np.array([ps[0] if len(ps) == 1 else shapely.multipolygons(ps)
                      for ps in parts.values()], dtype=object)
    if geoms.size:
        if workers > 1 and geoms.size >= 64:
            from concurrent.futures import ThreadPoolExecutor

            chunks = np.array_split(geoms, workers)
            with ThreadPoolExecutor(workers) as ex:
                bad = ~np.concatenate(list(ex.map(shapely.is_valid, chunks)))
        else:
            bad = ~shapely.is_valid(geoms)
        if bad.any():
            geoms[bad] = shapely.make_valid(geoms[bad])
    return dict(zip(keys, geoms))


def _polygon_from_rings(rings):
    """Polygon from GeoJSON-like rings (shell first), built from arrays (fast path)."""
    import shapely

    shell = shapely.linearrings(np.asarray(rings[0], dtype=np.float64))
    if len(rings) == 1:
        return shapely.polygons(shell)
    holes = [shapely.linearrings(np.asarray(r, dtype=np.float64)) for r in rings[1:]]
    return shapely.polygons(shell, holes=holes)


def mask_to_polygon(mask, transform):
    """Polygon of a boolean mask (None when empty)."""
    return labels_to_polygons(np.asarray(mask, dtype=np.int32), transform).get(1)


def ground_area_perimeter(geom, crs):
    """Area (m²) and perimeter (m) of a polygon on the ground.

    Projected CRSs: planar measures converted from the CRS's linear unit. Geographic CRSs:
    geodesic area and perimeter on the CRS's ellipsoid (Karney 2013, via pyproj.Geod).
    """
    from pyproj import Geod

    from ..terrain.geometry import _linear_unit_to_metres

    if crs.is_geographic:
        ell = crs.ellipsoid
        f = 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0
        area, perim = Geod(a=ell.semi_major_metre, f=f).geometry_area_perimeter(geom)
        return abs(float(area)), float(perim)
    k = _linear_unit_to_metres(crs)
    return float(geom.area) * k * k, float(geom.length) * k
