"""Raster labels to polygons built from cell boundaries, and their true area and perimeter."""

from __future__ import annotations

import numpy as np

__all__ = ["labels_to_polygons", "mask_to_polygon", "ground_area_perimeter",
           "range_polygons"]


def range_polygons(labels, ranges, transform, workers: int = 1) -> list:
    """Polygons (shapely) of label ranges, traced along cell edges.

    Parameters
    ----------
    labels : ndarray of int (nrows, ncols)
        0 = no region.
    ranges : array of int (n, 2)
        Region ``i`` is the cells with ``ranges[i, 0] <= label <= ranges[i, 1]`` (a nested
        catchment of depth-first labels; ``(a, a)`` is the single label ``a``).
    transform : affine.Affine
    workers : int
        Threads for the validity check.

    Returns
    -------
    list of Polygon / MultiPolygon / None, one per range: the same regions as
    :func:`labels_to_polygons` gives for each range's mask (valid, holes kept,
    MultiPolygon only when the region is in 4-connected pieces); None when empty.

    Notes
    -----
    The cell edges between different labels are listed once, by label; the outline of a
    range is among the edges of its labels, so each region costs about its labels'
    edges, however large its bounding box (:mod:`basinkit.analysis._trace`).
    """
    import shapely

    from . import _trace

    lab = np.ascontiguousarray(labels, dtype=np.int32)
    nr, nc = lab.shape
    flat = lab.ravel()
    rg = np.asarray(ranges, dtype=np.int64).reshape(-1, 2)
    n = rg.shape[0]
    if n == 0:
        return []
    nlab = int(max(rg[:, 1].max(), 0)) + 1
    off, keys, nkeys = _trace.label_edges(flat, nr, nc, nlab)
    off = np.append(off, nkeys)
    cols, rows, ring_of, signs, job_of = [], [], [], [], []
    nring = 0
    outline = {}  # lo -> (hi, outline edge keys) of the widest range traced from lo
    # inner ranges first: a range's outline lies among its first label's edges and the
    # outlines of the traced ranges that tile the rest of it
    for i in np.lexsort((rg[:, 1], -rg[:, 0])):
        lo, hi = int(rg[i, 0]), int(rg[i, 1])
        if not (0 < lo <= hi < nlab):
            continue
        parts, k, used = [keys[off[lo]:off[lo + 1]]], lo + 1, []
        while k <= hi and k in outline and outline[k][0] <= hi:
            parts.append(outline[k][1])
            used.append(k)
            k = outline[k][0] + 1
        if k > hi:
            for u in used:  # nested ranges are used by the range just around them only
                del outline[u]
        else:  # not tiled by traced ranges: every edge of its labels
            parts = [keys[off[lo]:off[hi + 1]]]
        cand = np.sort(np.concatenate(parts)) if len(parts) > 1 or hi > lo else parts[0]
        c, r, st, a2, on = _trace.trace_range(flat, nr, nc, cand, 0, cand.size, lo, hi)
        edges = cand[on]
        if lo not in outline or outline[lo][0] < hi:
            outline[lo] = (hi, edges)
        if a2.size == 0:
            continue
        cols.append(c)
        rows.append(r)
        ring_of.append(np.repeat(np.arange(nring, nring + a2.size), np.diff(st)))
        signs.append(a2)
        job_of.append(np.full(a2.size, i))
        nring += a2.size
    out = [None] * n
    if not nring:
        return out
    c = np.concatenate(cols).astype(np.float64)
    r = np.concatenate(rows).astype(np.float64)
    t = transform
    xy = np.column_stack([t.a * c + t.b * r + t.c, t.d * c + t.e * r + t.f])
    rings = shapely.linearrings(xy, indices=np.concatenate(ring_of))
    area2 = np.concatenate(signs)
    job = np.concatenate(job_of)
    o = np.argsort(job, kind="stable")  # rings by range, in tracing order within each
    rings, area2, job = rings[o], area2[o], job[o]
    first = np.flatnonzero(np.r_[True, job[1:] != job[:-1]])
    count = np.diff(np.r_[first, job.size])
    simple = first[count == 1]  # one ring: a shell (a region has at least one)
    geoms = np.empty(n, dtype=object)
    geoms[job[simple]] = shapely.polygons(rings[simple])
    for f, k in zip(first[count > 1], count[count > 1]):
        geoms[job[f]] = _assemble(rings[f:f + k], area2[f:f + k])
    # a single ring along cell edges with no corner twice (traced rings are split at
    # repeated corners) is simple, so only regions of several rings are checked
    done = job[first[count > 1]]
    g = geoms[done]
    if workers > 1 and g.size >= 64:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(workers) as ex:
            bad = ~np.concatenate(list(ex.map(shapely.is_valid,
                                              np.array_split(g, workers))))
    else:
        bad = ~shapely.is_valid(g)
    if bad.any():
        g[bad] = shapely.make_valid(g[bad])
    geoms[done] = g
    for i in job[first]:
        out[i] = geoms[i]
    return out


def _assemble(rings, area2):
    """Polygon or MultiPolygon from the shells (area2 > 0) and holes of one region, each
    hole in the smallest shell that holds it."""
    import shapely

    shells = [rg for rg, a in zip(rings, area2) if a > 0]
    holes = [rg for rg, a in zip(rings, area2) if a < 0]
    if len(shells) == 1:
        return shapely.polygons(shells[0], holes=holes or None)
    shell_polys = shapely.polygons(np.array(shells, dtype=object))
    sizes = shapely.area(shell_polys)
    mine = [[] for _ in shells]
    for h in holes:
        hp = shapely.polygons(h)
        inside = np.flatnonzero(shapely.covers(shell_polys, hp))
        k = inside[np.argmin(sizes[inside])] if inside.size else int(np.argmax(sizes))
        mine[k].append(h)
    parts = [shapely.polygons(s, holes=hs or None) for s, hs in zip(shells, mine)]
    return shapely.multipolygons(parts)


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
