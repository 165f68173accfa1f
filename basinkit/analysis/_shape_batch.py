"""Outline measures of many catchment polygons at once: perimeter along the cell edges,
perimeter of the simplified outline and the farthest boundary corner from the outlet.

The same GEOS operations as one polygon at a time (``morphometry._assemble``), applied to
arrays of polygons (shapely 2's vectorised functions release the GIL, so chunks run in
threads), on projected grids. Geographic grids measure each polygon on the ellipsoid and
are left to the one-at-a-time path.
"""

from __future__ import annotations

import numpy as np


def outline_measures(polys, x0, y0, tol, k, threads=2):
    """``(perimeter_cell_edges, perimeter, farthest)`` arrays (metres, with ``k`` metres
    per CRS unit) of planar polygons: the length of each polygon, the length of its
    outline (corners snapped to ``tol`` × 1e-6, collinear corners dropped, normal form)
    simplified by ``tol`` keeping its topology (Douglas & Peucker 1973), and the largest
    distance from ``(x0[i], y0[i])`` to a corner of an exterior ring."""
    import shapely

    polys = np.asarray(polys, dtype=object)
    n = polys.size
    out = (np.full(n, np.nan), np.full(n, np.nan), np.full(n, np.nan))
    if n == 0:
        return out
    x0 = np.asarray(x0, dtype=np.float64)
    y0 = np.asarray(y0, dtype=np.float64)
    # chunks of about equal vertex counts, handed to the threads as they come free
    verts = shapely.get_num_coordinates(polys)
    nchunks = max(1, min(n, 8 * max(int(threads), 1)))
    edges = np.searchsorted(np.cumsum(verts), np.linspace(0, verts.sum(), nchunks + 1)[1:-1])
    bounds = np.unique(np.concatenate([[0], edges, [n]]))

    def run(a, b):
        p = polys[a:b]
        snapped = shapely.set_precision(p, tol * 1e-6, mode="pointwise")
        # dropping collinear corners (simplify by 0) changes nothing where every corner
        # turns: left to GEOS only for polygons with a (nearly) straight corner
        straight = _straight_corners(snapped)
        if straight.any():
            snapped[straight] = shapely.simplify(snapped[straight], 0)
        outline = shapely.normalize(snapped)
        smooth = shapely.simplify(outline, tol, preserve_topology=True)
        out[0][a:b] = shapely.length(p) * k
        out[1][a:b] = shapely.length(smooth) * k
        parts, pidx = shapely.get_parts(p, return_index=True)
        xy, cidx = shapely.get_coordinates(shapely.get_exterior_ring(parts),
                                           return_index=True)
        owner = pidx[cidx] + a
        d = np.hypot(xy[:, 0] - x0[owner], xy[:, 1] - y0[owner])
        far = np.full(b - a, -np.inf)
        np.maximum.at(far, owner - a, d)
        out[2][a:b] = far * k

    if len(bounds) <= 2 or threads <= 1:
        for a, b in zip(bounds[:-1], bounds[1:]):
            run(a, b)
    else:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(int(threads)) as pool:
            for f in [pool.submit(run, a, b) for a, b in zip(bounds[:-1], bounds[1:])]:
                f.result()
    return out


def _straight_corners(geoms):
    """Whether a polygon has a ring corner that does not clearly turn (the sine of the
    angle between its edges below 1e-6, a repeated point) or a ring too short to tell:
    only those can lose a corner to a Douglas–Peucker simplification by 0."""
    import shapely

    out = np.zeros(geoms.size, dtype=bool)
    parts, pidx = shapely.get_parts(geoms, return_index=True)
    rings, ridx = shapely.get_rings(parts, return_index=True)
    xy, cidx = shapely.get_coordinates(rings, return_index=True)
    nring = np.bincount(cidx, minlength=rings.size)
    out[pidx[ridx[nring < 4]]] = True
    if xy.shape[0] == 0:
        return out
    change = np.r_[cidx[1:] != cidx[:-1], True]
    v = xy[~change]  # each ring without its closing point
    rid = cidx[~change]
    n = rid.size
    start = np.r_[True, rid[1:] != rid[:-1]]
    end = np.r_[rid[1:] != rid[:-1], True]
    idx = np.arange(n)
    first = np.maximum.accumulate(np.where(start, idx, 0))
    last = np.minimum.accumulate(np.where(end, idx, n)[::-1])[::-1]
    prev = np.where(start, last, idx - 1)
    nxt = np.where(end, first, idx + 1)
    d1 = v - v[prev]
    d2 = v[nxt] - v
    cross = d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]
    scale = np.hypot(d1[:, 0], d1[:, 1]) * np.hypot(d2[:, 0], d2[:, 1])
    flat = ~(np.abs(cross) > 1e-6 * scale)  # NaN or zero-length edges count as straight
    out[pidx[ridx[rid[flat]]]] = True
    return out
