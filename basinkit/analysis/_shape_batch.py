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
        outline = shapely.normalize(shapely.simplify(
            shapely.set_precision(p, tol * 1e-6, mode="pointwise"), 0))
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
