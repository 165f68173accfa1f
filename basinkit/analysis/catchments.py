"""Catchments for one outlet or ten thousand: one pass over the stack labels every cell with
the nearest outlet downstream; sub-catchments, nested catchments, the outlet tree, the
per-catchment table and the polygons all follow from that label grid."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import _catchments
from ..conditioning import _fill
from ..errors import OutletError
from .outlets import ERROR_COLUMNS, prepare_outlets, require_outlets

__all__ = ["delineate", "Delineation", "CAUTIONS", "ACRE_M2", "SQUARE_MILE_M2"]

ACRE_M2 = 4046.8564224          # international acre, exact (1959 yard and pound agreement)
SQUARE_MILE_M2 = 2589988.110336  # international square mile, exact (same definition)

CAUTIONS = (
    "Catchment boundaries derived from a DEM are estimates. Culverts, storm sewers, "
    "diversions and other structures are not represented unless they were burned into the "
    "DEM. Verify boundaries and areas in the field, and defer to local codes and licensed "
    "professional practice for any permit or design decision.")


@dataclass
class Delineation:
    """Result of :func:`delineate`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per usable outlet, in the order given: ``outlet_id``, ``file_id``
        (sanitised for file names), ``label`` (value in :attr:`labels`), the given,
        reprojected and snapped positions (``x_given, y_given, x, y, x_snapped,
        y_snapped`` and ``lon_snapped, lat_snapped`` in EPSG:4326), ``snap_distance_m``,
        ``upstream_area_given_cell_m2``, full-catchment ``area_m2, area_km2, area_ha,
        area_acres, area_mi2, cell_count, perimeter_m``, ``subcatchment_area_m2``,
        ``upstream_outlet_count`` and ``upstream_outlet_ids`` (``;``-separated: every
        outlet inside the catchment, nested at any depth), ``downstream_outlet_id`` (the
        next outlet downstream, empty at a root of the outlet tree),
        ``subcatchment_cell_count``, ``elevation_min_m, elevation_max_m, elevation_mean_m,
        relief_m``, ``touches_edge`` and ``warning``. With D∞/MFD routing also
        ``contributing_area_m2``.
    errors : pandas.DataFrame
        Outlets that could not be used: ``outlet_id, source, x_given, y_given, reason``.
    labels : ndarray of int32 (nrows, ncols)
        Sub-catchment label of every cell (0: drains to no outlet). Labels follow a
        depth-first order of the outlet tree, so the full catchment of the outlet with
        label ``L`` is exactly the cells with ``L <= label <= L + subtree_size - 1``.
    polygons : list of shapely geometries or None
        Full-catchment polygons aligned with :attr:`table` rows (None when
        ``polygons=False``, or once a job has released them: :meth:`release_polygons`).
    subcatchment_polygons : list of shapely geometries or None
        Sub-catchment polygons aligned with :attr:`table` rows (None: the sub-catchment is
        empty, which cannot happen for an outlet on a valid cell, or polygons were off).
    warnings : list of str
        Messages worth showing (long snaps, other branch, truncated catchments).
    cautions : str
        The caution text every output that may feed a permit carries.
    """

    table: pd.DataFrame
    errors: pd.DataFrame
    labels: np.ndarray
    polygons: list | None
    subcatchment_polygons: list | None
    transform: object
    crs: object
    warnings: list = field(default_factory=list)
    cautions: str = CAUTIONS
    parameters: dict = field(default_factory=dict)
    _subtree_size: np.ndarray = field(default=None, repr=False)
    _fm: object = field(default=None, repr=False)
    _fractions: dict = field(default_factory=dict, repr=False)
    _index: dict = field(default=None, repr=False)
    _polygons_file: object = field(default=None, repr=False)

    def release_polygons(self, path) -> None:
        """Let go of the polygons held in memory (a job does, once its later steps no
        longer need them: a batch of nested catchments holds about 24 bytes per vertex).
        :attr:`polygons` and :attr:`subcatchment_polygons` are None afterwards, until
        :meth:`catchment_polygon`, :meth:`catchments_frame` or
        :meth:`subcatchments_frame` reads them back from ``path``, the catchments
        GeoPackage the job wrote."""
        if self.polygons is not None:
            self.polygons = self.subcatchment_polygons = None
            self._polygons_file = path

    def _geometries(self, layer):
        """The polygons of ``layer`` (``catchments``/``subcatchments``) in table order:
        held, or read back once from the job's GeoPackage after a release (and held
        again, so that asking outlet by outlet reads the file once), or None."""
        attr = "polygons" if layer == "catchments" else "subcatchment_polygons"
        held = getattr(self, attr)
        if held is not None or self._polygons_file is None:
            return held
        import pyogrio

        f = pyogrio.read_dataframe(self._polygons_file, layer=layer, columns=["outlet_id"])
        where = dict(zip(f["outlet_id"].astype(str), f.geometry.to_numpy()))
        held = [where.get(k) for k in self.table["outlet_id"].astype(str)]
        setattr(self, attr, held)
        return held

    def _label_of(self, outlet_id):
        index = self._index
        if index is None or len(index) != len(self.table):
            index = {str(k): (int(lab), i) for i, (k, lab) in
                     enumerate(zip(self.table["outlet_id"], self.table["label"]))}
            self._index = index
        hit = index.get(str(outlet_id))
        if hit is None:
            raise OutletError(f"no delineated outlet has the id {outlet_id!r}")
        return hit

    def catchment_mask(self, outlet_id) -> np.ndarray:
        """Boolean grid of the full (nested) catchment of an outlet."""
        lab, _ = self._label_of(outlet_id)
        hi = lab + int(self._subtree_size[lab]) - 1
        return (self.labels >= lab) & (self.labels <= hi)

    def label_ranges(self) -> np.ndarray:
        """(lo, hi) label range of every table row's full catchment (int64, shape (n, 2)):
        the catchment is the cells with ``lo <= label <= hi``."""
        lab = self.table["label"].to_numpy(np.int64)
        return np.column_stack([lab, lab + self._subtree_size[lab] - 1])

    def subcatchment_mask(self, outlet_id) -> np.ndarray:
        """Boolean grid of an outlet's sub-catchment (its catchment minus those of the
        outlets upstream)."""
        lab, _ = self._label_of(outlet_id)
        return self.labels == lab

    def catchment_polygon(self, outlet_id):
        """Full-catchment polygon of an outlet."""
        _, row = self._label_of(outlet_id)
        polys = self._geometries("catchments")
        return None if polys is None else polys[row]

    @property
    def downstream(self) -> dict:
        """Outlet tree: outlet id -> id of the next outlet downstream (None at the root)."""
        d = self.table["downstream_outlet_id"]
        return {k: (v if isinstance(v, str) and v else None)
                for k, v in zip(self.table["outlet_id"], d)}

    def catchments_frame(self):
        """Full catchments as a GeoDataFrame (table columns + geometry), in the DEM CRS."""
        import geopandas as gpd

        return gpd.GeoDataFrame(self.table.copy(), geometry=self._geometries("catchments"),
                                crs=self._crs())

    def subcatchments_frame(self):
        """Sub-catchments as a GeoDataFrame in the DEM CRS."""
        import geopandas as gpd

        cols = ["outlet_id", "file_id", "label", "downstream_outlet_id",
                "subcatchment_area_m2", "subcatchment_cell_count", "touches_edge"]
        f = self.table[cols].rename(columns={"subcatchment_area_m2": "area_m2",
                                             "subcatchment_cell_count": "cell_count"})
        f = f.assign(area_km2=f["area_m2"] / 1e6)
        return gpd.GeoDataFrame(f, geometry=self._geometries("subcatchments"),
                                crs=self._crs())

    def outlets_frame(self, which="snapped"):
        """Outlet points (``"snapped"`` or ``"given"``, the latter in the DEM CRS)."""
        import geopandas as gpd

        t = self.table
        if which == "snapped":
            xs, ys = t["x_snapped"], t["y_snapped"]
        else:
            xs, ys = t["x"], t["y"]
        cols = ["outlet_id", "file_id", "label", "x_given", "y_given", "x_snapped",
                "y_snapped", "snap_distance_m", "upstream_area_m2",
                "upstream_area_given_cell_m2", "snap_warning"]
        f = t[cols].assign(position=which)
        return gpd.GeoDataFrame(f, geometry=gpd.points_from_xy(xs, ys), crs=self._crs())

    def contributing_fraction(self, outlet_id) -> np.ndarray:
        """Share of each cell's flow reaching the outlet (D∞/MFD models; float32 grid).
        For D8 models this is the catchment mask as 0/1."""
        lab, row = self._label_of(outlet_id)
        if self._fm is None or self._fm.method == "d8":
            return self.catchment_mask(outlet_id).astype(np.float32)
        from ..routing import contributing

        cell = int(self.table["cell"].iloc[row])
        return contributing.contributing_fraction(self._fm, cell)

    def _crs(self):
        c = self.crs
        return c.to_wkt() if hasattr(c, "to_wkt") else c


def _outlet_tree(fm, cells):
    """Labels 1..n in the given order, next-outlet-downstream of each, the depth-first
    preorder relabelling and subtree sizes."""
    lab0 = fm.label_outlets(cells).ravel()
    rec = fm.receiver[cells]
    down0 = np.where(rec >= 0, lab0[np.maximum(rec, 0)], 0).astype(np.int64)
    lut, new_size, new_down = outlet_tree(down0)
    labels = _catchments.remap(lab0, lut).reshape(fm.shape)
    return labels, lut, new_size, new_down


def carry_up(down, n, sums=(), lows=(), highs=(), flags=()):
    """Per-label values made per-catchment in place: each label's value is combined into
    its downstream label's (``down[k]``, 0 at the top), children first. Sums add, lows
    take the minimum, highs the maximum, flags OR. Labels 1..n are depth-first, so a child
    carries a larger label than its parent."""
    for k in range(n, 0, -1):
        p = down[k]
        if p:
            for a in sums:
                a[p] += a[k]
            for a in lows:
                a[p] = min(a[p], a[k])
            for a in highs:
                a[p] = max(a[p], a[k])
            for a in flags:
                a[p] |= a[k]


def outlet_tree(down0):
    """The depth-first renumbering of an outlet tree (also used by the tiled path).

    ``down0[i]`` is the label (1..n, in the outlets' order) of the next outlet downstream
    of outlet ``i + 1``, 0 at a root. Returns ``lut`` (old label -> new label, ``lut[0]``
    is 0), the subtree size and the next outlet downstream of every new label (both
    indexed by new label)."""
    down0 = np.asarray(down0, dtype=np.int64)
    n = down0.size
    children = [[] for _ in range(n + 1)]
    for i in range(n):  # input order: deterministic
        children[down0[i]].append(i + 1)
    pre = []
    todo = list(reversed(children[0]))
    while todo:
        k = todo.pop()
        pre.append(k)
        todo.extend(reversed(children[k]))
    pre = np.asarray(pre, dtype=np.int64)
    lut = np.zeros(n + 1, dtype=np.int32)
    lut[pre] = np.arange(1, n + 1, dtype=np.int32)
    size = np.ones(n + 1, dtype=np.int64)
    for k in pre[::-1]:
        if down0[k - 1]:
            size[down0[k - 1]] += size[k]
    # everything below is indexed by the new label
    new_size = np.zeros(n + 1, dtype=np.int64)
    new_size[lut[1:]] = size[1:]
    new_down = np.zeros(n + 1, dtype=np.int64)
    new_down[lut[1:]] = lut[down0]
    return lut, new_size, new_down


def delineate(fm, outlets, crs=None, snap_radius_m=None, snap_to_channel_m2=None,
              polygons=True, workers=2, id_column=None, progress=None,
              fraction_callback=None) -> Delineation:
    """Delineate the catchments of any number of outlets in one pass over the flow model.

    Parameters
    ----------
    fm : FlowModel
        From :func:`basinkit.route` or :func:`basinkit.load_flow`.
    outlets : (DataFrame, DataFrame), DataFrame, sequence of (x, y) / (id, x, y), or array
        See :func:`basinkit.analysis.outlets.prepare_outlets`; an outlet file is read first
        by :func:`basinkit.read_outlet_file`. Coordinates are in ``crs`` (default: the
        DEM's); files carry their own CRS.
    crs : optional
        CRS of coordinates that carry none (e.g. ``"EPSG:4326"``).
    snap_radius_m : float, optional
        Snap search radius in metres (default: the larger of 30 m and one cell; 0: no
        snapping).
    snap_to_channel_m2 : float, optional
        Snap to the nearest cell whose upstream area is at least this (m²) instead of to
        the greatest upstream area within the radius.
    polygons : bool
        Build the cell-boundary polygons and the perimeter (default True).
    workers : int
        Threads for the polygons' validity check (the tracing itself is one pass in
        this process).
    id_column : str, optional
        Unused (give it to :func:`basinkit.read_outlet_file`).
    progress : callable, optional
        ``progress(iterable, total=, desc=)`` wrapper (e.g. a tqdm-like bar).
    fraction_callback : callable, optional
        For D∞/MFD models: called as ``fraction_callback(table_row, fraction_grid)`` for
        each outlet (``table_row`` a pandas Series with ``outlet_id`` and ``file_id``),
        to write contributing-fraction rasters without keeping them all in memory.

    Returns
    -------
    Delineation
        ``.table`` (one row per outlet), ``.errors``, ``.labels``, ``.polygons``,
        ``.subcatchment_polygons``, ``.catchment_mask(outlet_id)``, ``.downstream``.

    Raises
    ------
    OutletError
        When no outlet at all can be used (otherwise bad outlets go to ``.errors``).

    Notes
    -----
    All outlets are labelled in one forward pass over the D8 stack (Braun & Willett 2013):
    every cell takes the label of the nearest outlet downstream of it. The label grid is
    the partition into sub-catchments; each outlet's next outlet downstream is the label
    of its outlet cell's receiver. Labels are renumbered in depth-first order of that
    tree, so a full (nested) catchment is a contiguous label range and its area, relief
    and edge flag are sums/extrema over the sub-catchments of its subtree (no per-outlet
    traversal). Areas are sums of true cell areas (ellipsoidal on geographic grids).
    Polygons follow cell boundaries, traced along the edges between labels (a nested
    catchment's outline lies among its sub-catchments' edges); on geographic grids their
    edges are densified to one cell so that their geodesic area (Karney 2013) matches
    the cell sum.

    References
    ----------
    Braun, J., Willett, S. D. (2013). A very efficient O(n), implicit and parallel method
    to solve the stream power equation governing fluvial incision and landscape
    evolution. Geomorphology 180-181:170-179.
    O'Callaghan, J. F., Mark, D. M. (1984). The extraction of drainage networks from
    digital elevation data. Computer Vision, Graphics and Image Processing 28:323-344.
    Karney, C. F. F. (2013). Algorithms for geodesics. Journal of Geodesy 87:43-55.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(5.0, 0, -1), np.zeros(4))  # slopes down to the south
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> d = delineate(fm, [("gauge", 15.0, 5.0)], snap_radius_m=0)
    >>> float(d.table.loc[0, "area_m2"])  # the column above the gauge: 5 cells of 100 m²
    500.0
    """
    t = fm.terrain
    nr, nc = t.shape
    if _is_placed(outlets):  # already placed (e.g. by basinkit.workflow): used as given
        snapped = outlets.reset_index(drop=True)
        errors = pd.DataFrame(columns=ERROR_COLUMNS)
        if "file_id" not in snapped.columns:
            from .outlets import sanitize_ids

            snapped = snapped.assign(file_id=sanitize_ids(snapped["outlet_id"]))
    else:
        snapped, errors = prepare_outlets(fm, outlets, crs=crs, radius_m=snap_radius_m,
                                          channel_area_m2=snap_to_channel_m2,
                                          id_column=id_column)
    require_outlets(snapped, errors)
    # outlets that share a cell share its catchment: the tree is built on the first
    # outlet of each cell, and every outlet row takes the label of its cell
    cells_all = snapped["cell"].to_numpy(np.int64)
    _, first_idx, inverse = np.unique(cells_all, return_index=True, return_inverse=True)
    primary_of_row = first_idx[inverse.ravel()]
    prim_idx = np.flatnonzero(primary_of_row == np.arange(cells_all.size))
    n = prim_idx.size
    cells = cells_all[prim_idx]
    labels, lut, size, down = _outlet_tree(fm, cells)
    prim_rank = np.full(cells_all.size, -1, dtype=np.int64)
    prim_rank[prim_idx] = np.arange(n)
    lab_of_prim = lut[1:].astype(np.int64)  # new label of each primary outlet

    z = fm.input_elevation if fm.input_elevation is not None else t.elevation
    z = np.where(t.valid, z, np.nan).astype(np.float64).ravel()
    # the grid edge and cells next to nodata: the exits of conditioning without base level
    edge = _fill.seed_mask(t.valid, np.zeros(t.shape, dtype=bool)).ravel()
    (count, area, zsum, zcount, zmin, zmax, touches, rmin, rmax, cmin,
     cmax) = _catchments.label_summary(labels.ravel(), n, nc, z, t.geometry.area, edge)
    sub_area, sub_count = area.copy(), count.copy()
    carry_up(down, n, sums=(area, count, zsum, zcount), lows=(zmin, rmin, cmin),
             highs=(zmax, rmax, cmax), flags=(touches,))

    L = lab_of_prim[prim_rank[primary_of_row]]  # label of every outlet row
    tab = snapped.copy()
    tab.insert(2, "label", L.astype(np.int32))
    ids = tab["outlet_id"].astype(str).to_numpy(object)
    ids_by_lab = np.full(n + 1, "", dtype=object)
    for lab, oid in zip(L, ids):  # outlets sharing a cell: "a;b"
        ids_by_lab[lab] = f"{ids_by_lab[lab]};{oid}" if ids_by_lab[lab] else oid
    per_label = np.concatenate([[0], np.cumsum(np.bincount(L, minlength=n + 1)[1:])])
    tab["area_m2"] = area[L]
    tab["area_km2"] = area[L] / 1e6
    tab["area_ha"] = area[L] / 1e4
    tab["area_acres"] = area[L] / ACRE_M2
    tab["area_mi2"] = area[L] / SQUARE_MILE_M2
    tab["cell_count"] = count[L]
    tab["subcatchment_area_m2"] = sub_area[L]
    tab["subcatchment_cell_count"] = sub_count[L]
    # outlets strictly upstream: labels lab+1 .. lab+size-1 (a contiguous range)
    tab["upstream_outlet_count"] = per_label[L + size[L] - 1] - per_label[L]
    tab["upstream_outlet_ids"] = [";".join(ids_by_lab[lab + 1:lab + size[lab]])
                                  for lab in L]
    tab["downstream_outlet_id"] = [ids_by_lab[down[lab]] if down[lab] else ""
                                   for lab in L]
    with np.errstate(invalid="ignore", divide="ignore"):
        tab["elevation_min_m"] = np.where(zcount[L] > 0, zmin[L], np.nan)
        tab["elevation_max_m"] = np.where(zcount[L] > 0, zmax[L], np.nan)
        tab["elevation_mean_m"] = np.where(zcount[L] > 0, zsum[L] / zcount[L], np.nan)
    tab["relief_m"] = tab["elevation_max_m"] - tab["elevation_min_m"]
    tab["touches_edge"] = touches[L].astype(bool)
    if n:
        from pyproj import CRS, Transformer

        tr = Transformer.from_crs(t.crs, CRS.from_epsg(4326), always_xy=True)
        lon, lat = tr.transform(tab["x_snapped"].to_numpy(), tab["y_snapped"].to_numpy())
        tab["lon_snapped"], tab["lat_snapped"] = lon, lat

    msgs = []
    warn_col = []
    for oid, sw, te in zip(tab["outlet_id"], tab["snap_warning"], tab["touches_edge"]):
        w = [sw] if sw else []
        if te:
            w.append("catchment reaches the grid edge or nodata: its area may be truncated")
        for m in w:
            msgs.append(f"outlet {oid!r}: {m}")
        warn_col.append("; ".join(w))
    tab["warning"] = warn_col

    if fm.method != "d8":
        tab["contributing_area_m2"] = _contributing(fm, tab, msgs, progress,
                                                    fraction_callback)

    polys = subpolys = None
    if polygons:
        polys, subpolys, perim = _polygons(t, labels, n, lab_of_prim, size, rmin, rmax,
                                           cmin, cmax, workers, progress)
        k = prim_rank[primary_of_row]
        polys = [polys[i] for i in k]
        subpolys = [subpolys[i] for i in k]
        tab["perimeter_m"] = np.asarray(perim, dtype=float)[k]
    else:
        tab["perimeter_m"] = np.nan
    params = {"snap_radius_m": float(tab["snap_radius_m"].iloc[0]) if n else snap_radius_m,
              "snap_to_channel_m2": snap_to_channel_m2, "outlet_crs": str(crs) if crs else
              None, "routing_method": fm.method}
    return Delineation(tab, errors[ERROR_COLUMNS], labels, polys, subpolys, t.transform,
                       t.crs, msgs, CAUTIONS, params, size, fm)


def _is_placed(outlets):
    """A frame of outlets already placed and snapped (by prepare_outlets)."""
    return isinstance(outlets, pd.DataFrame) and {
        "cell", "snap_distance_m", "x_snapped", "y_snapped", "snap_warning",
        "upstream_area_given_cell_m2", "snap_radius_m"} <= set(outlets.columns)


def _contributing(fm, tab, msgs, progress, callback):
    try:
        from ..routing import contributing
    except ImportError:
        msgs.append(f"contributing areas for {fm.method} routing are not available in this "
                    "installation (basinkit.routing.contributing is missing); D8 areas reported")
        return np.full(len(tab), np.nan)
    cells = tab["cell"].to_numpy(np.int64)
    if callback is None:
        # no fraction rasters wanted: the upstream area at the outlet is the same figure
        return np.atleast_1d(np.asarray(
            contributing.contributing_area_m2(fm, cells, from_fractions=False),
            dtype=np.float64))
    out = np.empty(len(tab))
    area = fm.terrain.cell_area().ravel()
    it = range(len(tab))
    if progress is not None:
        it = progress(it, total=len(tab), desc="contributing fractions")
    for i in it:
        frac = contributing.contributing_fraction(fm, int(cells[i]))
        callback(tab.iloc[i], frac)
        out[i] = float(np.nansum(frac.astype(np.float64).ravel() * area))
    return out


def _polygons(t, labels, n, L, size, rmin, rmax, cmin, cmax, workers, progress):
    """Sub-catchment polygons and full-catchment polygons from cell boundaries.

    Every sub-catchment is its label; a leaf's full catchment is its sub-catchment; any
    other full catchment is its label range (depth-first labels). All are traced along
    the cell edges between labels in one pass per range
    (:func:`basinkit.analysis.polygons.range_polygons`), so a nested catchment costs
    about the edges of its sub-catchments, not its bounding box. ``workers`` threads
    check validity; on geographic grids the edges are densified to one vertex per cell.
    """
    import shapely

    from .polygons import ground_area_perimeter, range_polygons

    labs = np.arange(1, n + 1, dtype=np.int64)
    nested = labs[size[1:n + 1] > 1]
    ranges = np.concatenate([np.column_stack([labs, labs]),
                             np.column_stack([nested, nested + size[nested] - 1])])
    if progress is not None:  # one step: the tracing is not split into items
        list(progress(range(1), total=1, desc="polygons"))
    geoms = np.array(range_polygons(labels, ranges, t.transform, workers=max(1, workers)),
                     dtype=object)
    if t.crs.is_geographic:
        seg = min(abs(t.transform.a), abs(t.transform.e)) * 1.0000001
        ok = np.array([g is not None for g in geoms], dtype=bool)
        geoms[ok] = shapely.segmentize(geoms[ok], seg)
    subs = dict(zip(labs.tolist(), geoms[:n]))
    full = dict(zip(nested.tolist(), geoms[n:]))
    polys = [full.get(lab) if size[lab] > 1 else subs.get(lab) for lab in L]
    subpolys = [subs.get(lab) for lab in L]
    if t.crs.is_geographic:
        perim = np.array([ground_area_perimeter(g, t.crs)[1] if g is not None else np.nan
                          for g in polys])
    else:
        from ..terrain.geometry import _linear_unit_to_metres

        k = _linear_unit_to_metres(t.crs)
        perim = shapely.length(np.array(polys, dtype=object)) * k
    return polys, subpolys, perim
