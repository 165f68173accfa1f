"""Catchment polygons from tiles: each tile's labels traced along cell edges (as in
memory, :func:`basinkit.analysis.polygons.range_polygons`) in whole-cell coordinates, the
pieces of a label joined across tiles on the client, nested catchments joined from their
sub-catchments, and only then placed on the map with the grid's transform.

Layers read: the labels of :func:`basinkit.tiles.catchment_labels`.
"""

from __future__ import annotations

import numpy as np

from ..analysis.polygons import range_polygons
from ..errors import InputError
from .accumulate import _check_layout
from .engine import Engine, open_store

__all__ = ["catchment_polygons", "perimeters_m"]


def _pieces_task(spec, ti, tj, layer):
    """A tile's sub-catchment pieces in grid cell coordinates (x = column, y = row of the
    cell corners), which are whole numbers, so pieces of neighbouring tiles share their
    edges exactly."""
    from affine import Affine

    store = open_store(spec)
    if not store.has(layer, ti, tj):
        raise InputError(f"the tile store has no tile ({ti}, {tj}) of the {layer!r} layer; "
                         "label the catchments first")
    r0, _, c0, _ = store.layout.window(ti, tj)
    lab = np.asarray(store.read(layer, ti, tj), dtype=np.int32)
    labels = np.unique(lab)
    labels = labels[labels > 0]
    if labels.size == 0:
        return labels, []
    geoms = range_polygons(lab, np.column_stack([labels, labels]),
                           Affine(1.0, 0.0, float(c0), 0.0, 1.0, float(r0)))
    return labels, geoms


def _to_map(geoms, transform):
    import shapely

    t = transform

    def place(xy):
        c, r = xy[:, 0], xy[:, 1]
        return np.column_stack([t.a * c + t.b * r + t.c, t.d * c + t.e * r + t.f])

    return [None if g is None else shapely.transform(g, place) for g in geoms]


def catchment_polygons(layout, store, catchments, transform=None, *, crs=None,
                       scheduler=None, workers: int | None = None):
    """Full-catchment and sub-catchment polygons of outlets labelled by tiles.

    Parameters
    ----------
    layout : TileLayout
    store : tile store
        Holding the labels (``catchments.layer``).
    catchments : TiledCatchments
        From :func:`basinkit.tiles.catchment_labels`.
    transform : affine.Affine, optional
        The grid's transform (default, with ``crs``: from the store's metadata).
    crs : optional
        The grid's CRS; on a geographic grid the edges are densified to one vertex per
        cell, as :func:`delineate` does, so that geodesic areas match the cell sums.
    scheduler, workers
        See :func:`basinkit.tiles.flow_accumulation`.

    Returns
    -------
    (list, list)
        Full-catchment polygons and sub-catchment polygons, one per outlet in the order
        given to :func:`catchment_labels` (None where a region is empty).

    Notes
    -----
    Each tile traces its labels along cell edges, in whole-cell coordinates; the client
    joins the pieces of a label (their shared edges coincide exactly), then every nested
    catchment from its sub-catchment and the full catchments of the outlets just
    upstream (labels are depth-first, so children come after their parents). The
    regions are those of :func:`delineate` (equal as point sets; vertices along a tile
    edge may be kept where the in-memory outline has none). The client holds the
    polygons, not the grid.
    """
    import shapely

    _check_layout(layout, store)
    if transform is None:
        from .accumulate import store_georeference

        _, transform, crs = store_georeference(layout, store)
    n = catchments.subtree_size.size - 1
    with Engine(scheduler, workers) as eng:
        spec = eng.spec(store)
        parts = eng.map(_pieces_task, spec, [(ti, tj, ()) for ti, tj in layout.tiles()],
                        shared=(catchments.layer,))
    pieces = [[] for _ in range(n + 1)]
    for labels, geoms in parts:
        if labels.size and labels.max() > n:
            raise InputError(f"the {catchments.layer!r} layer holds labels the outlets do not "
                             "have; label the catchments again")
        for lab, g in zip(labels.tolist(), geoms):
            if g is not None:
                pieces[lab].append(g)
    sub = [None] * (n + 1)
    for lab in range(1, n + 1):
        ps = pieces[lab]
        if len(ps) == 1:
            sub[lab] = ps[0]
        elif ps:
            sub[lab] = shapely.union_all(ps)
    children = [[] for _ in range(n + 1)]
    down = np.asarray(catchments.downstream, dtype=np.int64)
    for lab in range(1, n + 1):
        if down[lab]:
            children[down[lab]].append(lab)
    full = [None] * (n + 1)
    for lab in range(n, 0, -1):  # children first
        ps = [g for g in [sub[lab]] + [full[k] for k in children[lab]] if g is not None]
        if len(ps) == 1:
            full[lab] = ps[0]
        elif ps:
            full[lab] = shapely.union_all(ps)
    full_map = _to_map(full, transform)
    sub_map = _to_map(sub, transform)
    if crs is not None and getattr(crs, "is_geographic", False):
        seg = min(abs(transform.a), abs(transform.e)) * 1.0000001
        full_map = [None if g is None else shapely.segmentize(g, seg) for g in full_map]
        sub_map = [None if g is None else shapely.segmentize(g, seg) for g in sub_map]
    labels = np.asarray(catchments.label, dtype=np.int64)
    return [full_map[k] for k in labels], [sub_map[k] for k in labels]


def perimeters_m(polygons, crs) -> np.ndarray:
    """Perimeter (m, on the ground) of every polygon, as :func:`delineate` measures it:
    geodesic on a geographic CRS (Karney 2013), else the planar length in the CRS's linear
    unit converted to metres; NaN for None."""
    import shapely

    from pyproj import CRS

    crs = CRS.from_user_input(crs)
    if crs.is_geographic:
        from ..analysis.polygons import ground_area_perimeter

        return np.array([ground_area_perimeter(g, crs)[1] if g is not None else np.nan
                         for g in polygons], dtype=float)
    from ..terrain.geometry import _linear_unit_to_metres

    return np.asarray(shapely.length(np.array(polygons, dtype=object)),
                      dtype=float) * _linear_unit_to_metres(crs)
