"""Basin morphometry: network, shape and relief descriptors of catchments.

Each catchment is measured on its bounding-box window only, so a table of thousands of
catchments costs about as much as the cells they cover, not thousands of full-grid passes.
"""

from __future__ import annotations

import math

import numpy as np

from . import _catchments, _channels
from ._measure_arrays import (HYPSOMETRIC_LEVELS, CurveFrames, _curve_frame, _hypsometry,
                              _percentiles)
from ._network_measures import network_keys, network_numbers
from ..errors import InputError, OutletError

__all__ = ["basin_morphometry", "morphometry_table", "hypsometric_curve",
           "ASPECT_SECTORS", "CAUTIONS"]

ASPECT_SECTORS = ("n", "ne", "e", "se", "s", "sw", "w", "nw")
CAUTIONS = ("Morphometry is derived from a DEM: boundaries, channels and lengths are "
            "estimates that depend on the DEM's resolution and the channel threshold. "
            "Culverts, storm sewers and diversions are not represented unless burned in. "
            "Verify in the field and defer to local codes and licensed professional "
            "practice for design or permitting.")


class _Context:
    """Full-grid arrays shared by every catchment of a table (computed once)."""

    def __init__(self, fm, network):
        t = fm.terrain
        self.fm = fm
        self.network = network
        self.nc = t.shape[1]
        # NaN marks nodata in both (Terrain and flow folders); windows re-apply validity
        self.z = fm.input_elevation if fm.input_elevation is not None else t.elevation
        self.valid = t.valid
        g = t.geometry
        self.row_area = g.area
        nd = g.neighbour_distances()
        self.dx = np.ascontiguousarray(g.dx, dtype=np.float64)
        self.dy_up = np.ascontiguousarray(nd[:, 0], dtype=np.float64)
        self.dy_down = np.ascontiguousarray(g.dy_down, dtype=np.float64)
        self.cell_w = abs(t.transform.a)
        self.cell_h = abs(t.transform.e)
        self._dl = None
        if network is not None and network.mask.shape != t.shape:
            raise InputError("the channel network is not on the flow model's grid")
        if network is not None:
            self.channel_flat = np.asarray(network.mask).ravel()
            self.stream_flat = np.asarray(network.stream_id).ravel()
            self.strahler_flat = np.asarray(network.strahler).ravel()

    slope = aspect = None

    def horn(self, r0, r1, c0, c1):
        """Horn slope and aspect of the window rows r0..r1, cols c0..c1 (inclusive)."""
        zp = np.where(self.valid[r0:r1 + 1, c0:c1 + 1], self.z[r0:r1 + 1, c0:c1 + 1],
                      np.nan).astype(np.float64)
        return _channels.horn_slope_aspect(zp, self.dx[r0:r1 + 1], self.dy_up[r0:r1 + 1],
                                           self.dy_down[r0:r1 + 1])

    def use_full_grid_slope(self, r0, r1, c0, c1):
        """Compute slope and aspect once for the whole grid when the catchments' padded
        windows (rows ``r0..r1``, cols ``c0..c1`` each) cover more cells in all than the
        grid (nested catchments)."""
        nr, nc = self.valid.shape
        if _window_cells(r0, r1, c0, c1) > nr * nc:
            self.slope, self.aspect = self.horn(0, nr - 1, 0, nc - 1)

    @property
    def downstream_length(self):
        if self._dl is None:
            self._dl = self.fm.downstream_length().ravel()
        return self._dl


def _window_cells(r0, r1, c0, c1) -> float:
    """The cells of the windows rows ``r0..r1``, cols ``c0..c1`` padded by one cell, in
    all (empty windows, ``r1 < r0``, count nothing)."""
    ok = r1 >= r0
    return float(np.sum((r1[ok] - r0[ok] + 3.0) * (c1[ok] - c0[ok] + 3.0)))


#: Nested catchments (label ranges) are measured each on its window, as catchments
#: given by masks are, when they are at most this many and their padded windows hold at
#: most WINDOW_MAX_CELLS cells in all: a few tenths of a second of numpy work, less than
#: listing the whole grid's cells by label for :class:`._measure_arrays.NestedNumbers`
#: (and, on a new machine, than compiling its kernels: about 10 s). Both give the same
#: numbers up to the order of summation (``tests/test_morphometry_batch.py``).
WINDOW_MAX_CATCHMENTS = 64
WINDOW_MAX_CELLS = 2_000_000


def _range_boxes(ranges, rmin, rmax, cmin, cmax):
    """Bounding box of each label range (lo, hi) from the boxes of the labels."""
    n = ranges.shape[0]
    out = (np.full(n, 2 ** 62, np.int64), np.full(n, -1, np.int64),
           np.full(n, 2 ** 62, np.int64), np.full(n, -1, np.int64))
    for i in range(n):
        lo, hi = int(ranges[i, 0]), int(ranges[i, 1]) + 1
        if 0 < lo < hi <= rmin.size:
            out[0][i], out[1][i] = rmin[lo:hi].min(), rmax[lo:hi].max()
            out[2][i], out[3][i] = cmin[lo:hi].min(), cmax[lo:hi].max()
    return out


def hypsometric_curve(elevation, weights=None, levels: int = HYPSOMETRIC_LEVELS):
    """Hypsometric curve (Strahler 1952): share of the basin area above each relative height.

    Parameters
    ----------
    elevation : array of float
        Elevations (m) of the basin's cells (NaN ignored).
    weights : array of float, optional
        Cell areas (m²); equal areas when omitted.
    levels : int
        Number of relative heights from 0 to 1.

    Returns
    -------
    pandas.DataFrame
        ``relative_height``, ``relative_area_above``, ``elevation_m``, ``area_above_m2``.

    References
    ----------
    Strahler, A. N. (1952). Hypsometric (area-altitude) analysis of erosional topography.
    GSA Bulletin 63:1117-1142.

    Examples
    --------
    >>> from basinkit.analysis.morphometry import hypsometric_curve
    >>> c = hypsometric_curve([0.0, 1.0, 2.0, 3.0], levels=4)
    >>> c["relative_area_above"].tolist()
    [1.0, 0.75, 0.5, 0.25]
    """
    z = np.asarray(elevation, dtype=np.float64).ravel()
    w = np.ones_like(z) if weights is None else np.asarray(weights, np.float64).ravel()
    ok = np.isfinite(z)
    return _curve_frame(*_hypsometry(z[ok], w[ok], levels))


def _farthest_vertex(fm, poly, x0, y0):
    """Largest ground distance (m) from (x0, y0) to a vertex of the catchment polygon
    (cell corners on its boundary): planar on projected grids, geodesic on geographic."""
    import shapely

    xy = shapely.get_coordinates(shapely.get_exterior_ring(shapely.get_parts(poly)))
    t = fm.terrain
    if t.crs.is_geographic:
        from pyproj import Geod

        ell = t.crs.ellipsoid
        f = 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0
        n = xy.shape[0]
        _, _, d = Geod(a=ell.semi_major_metre, f=f).inv(np.full(n, x0), np.full(n, y0),
                                                         xy[:, 0], xy[:, 1])
        return float(np.max(np.abs(d)))
    from ..terrain.geometry import _linear_unit_to_metres

    k = _linear_unit_to_metres(t.crs)
    return float(np.max(np.hypot(xy[:, 0] - x0, xy[:, 1] - y0)) * k)


def _measure(ctx, r0, r1, c0, c1, mwin, outlet, want_curve, poly=None):
    """Descriptors of the catchment ``mwin`` (bool) in the window rows r0..r1, cols c0..c1
    (inclusive)."""
    from affine import Affine

    from .polygons import mask_to_polygon

    t = ctx.fm.terrain
    nc = ctx.nc
    win = (slice(r0, r1 + 1), slice(c0, c1 + 1))
    rows = np.arange(r0, r1 + 1)
    cols = np.arange(c0, c1 + 1)
    mwin = mwin & ctx.valid[win]  # nodata cells are never part of a catchment
    orow, ocol = divmod(int(outlet), nc)
    if not (r0 <= orow <= r1 and c0 <= ocol <= c1 and mwin[orow - r0, ocol - c0]):
        _outlet_outside(orow, ocol)
    ri, ci = np.nonzero(mwin)
    cells = (rows[ri] * nc + cols[ci]).astype(np.int64)
    if poly is None:
        poly = mask_to_polygon(mwin, t.transform @ Affine.translation(c0, r0))
    # slope and aspect (Horn 1981) on the window padded by one cell (or read from the
    # whole grid's, computed once: the same values, as every cell of the catchment sees
    # its true neighbours either way)
    if ctx.slope is not None:
        sm, aspm = ctx.slope[win][mwin], ctx.aspect[win][mwin]
    else:
        pr0, pr1 = max(r0 - 1, 0), min(r1 + 1, t.shape[0] - 1)
        pc0, pc1 = max(c0 - 1, 0), min(c1 + 1, t.shape[1] - 1)
        s, asp = ctx.horn(pr0, pr1, pc0, pc1)
        inner = (slice(r0 - pr0, r0 - pr0 + mwin.shape[0]),
                 slice(c0 - pc0, c0 - pc0 + mwin.shape[1]))
        sm, aspm = s[inner][mwin], asp[inner][mwin]

    def member(flat):
        rr, cc = np.divmod(flat, nc)
        ok = (rr >= r0) & (rr <= r1) & (cc >= c0) & (cc <= c1)
        ok[ok] = mwin[rr[ok] - r0, cc[ok] - c0]
        return ok

    return _describe(ctx, cells, ctx.z[win][mwin], sm, aspm, int(outlet), member,
                     want_curve, poly)


def _outlet_outside(orow, ocol):
    raise OutletError(f"the outlet cell (row {orow}, col {ocol}) is not inside its "
                      "catchment; give the outlet the catchment was delineated from")


def _describe(ctx, cells, zm, sm, aspm, outlet, member, want_curve, poly):
    """Descriptors of the catchment of ``cells`` (flat) from its cells' elevations, slopes
    and aspects, its polygon and ``member`` (see :func:`_network_stats`)."""
    am = ctx.row_area[cells // ctx.nc]
    area = float(am.sum())
    ok = np.isfinite(zm)
    num = {"count": int(cells.size), "area": area,
           "dl_max": ctx.downstream_length[cells].max(),
           "zmin": float(zm[ok].min()), "zmax": float(zm[ok].max()),
           "zmean": float(np.sum(zm[ok] * am[ok]) / am[ok].sum()),
           "curve": _hypsometry(zm[ok].astype(np.float64), am[ok])}
    good = np.isfinite(sm)
    sw, aw = sm[good], am[good]
    if sw.size:
        p10, p50, p90 = _percentiles(sw, [10, 50, 90])
        num["slope"] = (float(np.sum(sw * aw) / aw.sum()), float(p50), float(np.std(sw)),
                        float(p10), float(p90), float(sw.max()))
    am_asp = aspm[good]
    flat = ~np.isfinite(am_asp)
    sector = np.floor(((np.where(flat, 0.0, am_asp) + 22.5) % 360.0) / 45.0).astype(np.int64)
    tot = aw.sum()
    num["sectors"] = (np.bincount(sector[~flat], weights=aw[~flat], minlength=8) / tot
                      if tot else np.zeros(8))
    num["flat_fraction"] = float(aw[flat].sum() / tot) if tot else np.nan
    if ctx.network is not None:
        num["channel_cells"] = cells[ctx.channel_flat[cells]]
    return _assemble(ctx, num, outlet, member, want_curve, poly)


def _outline(ctx, poly, ox, oy):
    """Perimeter along the cell edges, perimeter of the simplified outline and straight
    basin length (m) of a catchment's polygon (see ``_shape_batch.outline_measures``)."""
    from .polygons import ground_area_perimeter

    t = ctx.fm.terrain
    _, p_edges = ground_area_perimeter(poly, t.crs)
    # corners snapped to a millionth of a cell, no collinear vertices, rings in normal form
    # (start vertex, orientation): the simplified outline, and so the perimeter, then
    # depend on the polygon only, not on how its tracer walked it or rounded its corners
    import shapely

    tol = max(ctx.cell_w, ctx.cell_h)
    outline = shapely.normalize(shapely.set_precision(poly, tol * 1e-6, mode="pointwise")
                                .simplify(0))
    smooth = outline.simplify(tol, preserve_topology=True)
    _, perim = ground_area_perimeter(smooth, t.crs)
    return p_edges, perim, _farthest_vertex(ctx.fm, poly, ox, oy)


def _assemble(ctx, num, outlet, member, want_curve, poly, shape=None):
    """The descriptors' dict from the cell-based numbers ``num`` (see :func:`_describe`),
    the polygon (or its ``shape``: the three numbers of :func:`_outline`) and the
    network."""
    fm = ctx.fm
    t = fm.terrain
    orow, ocol = divmod(outlet, ctx.nc)
    area = num["area"]
    ox, oy = t.xy_of(orow, ocol)
    out = {"outlet_x": float(ox), "outlet_y": float(oy), "outlet_row": orow,
           "outlet_col": ocol, "cell_count": num["count"], "area_m2": area,
           "area_km2": area / 1e6}
    # ---- shape
    p_edges, perim, lstraight = _outline(ctx, poly, ox, oy) if shape is None else shape
    out["perimeter_m"] = perim
    out["perimeter_cell_edges_m"] = p_edges
    out["longest_flow_path_m"] = float(num["dl_max"] - ctx.downstream_length[outlet])
    out["basin_length_straight_m"] = lstraight
    with np.errstate(invalid="ignore", divide="ignore"):
        out["elongation_ratio"] = (2.0 * math.sqrt(area / math.pi) / lstraight
                                   if lstraight > 0 else np.nan)
        out["circularity_ratio"] = 4.0 * math.pi * area / perim ** 2 if perim > 0 else np.nan
        out["form_factor"] = area / lstraight ** 2 if lstraight > 0 else np.nan
        out["compactness_coefficient"] = (perim / (2.0 * math.sqrt(math.pi * area))
                                          if area > 0 else np.nan)
    # ---- relief
    zmin, zmax, zmean = num["zmin"], num["zmax"], num["zmean"]
    relief = zmax - zmin
    zo = float(ctx.z[orow, ocol])
    out.update(outlet_elevation_m=zo, min_elevation_m=zmin,
               max_elevation_m=zmax, mean_elevation_m=zmean, relief_m=relief)
    out["relief_ratio"] = relief / lstraight if lstraight > 0 else np.nan
    out["melton_ruggedness"] = relief / math.sqrt(area) if area > 0 else np.nan
    h, a_above, elev = num["curve"]
    hi = float(np.trapezoid(a_above / a_above[0], h))
    curve = (h, a_above, elev) if want_curve else None  # a frame when asked for
    out["hypsometric_integral"] = hi if relief > 0 else np.nan
    out["elevation_relief_ratio"] = (zmean - zmin) / relief if relief > 0 else np.nan
    # ---- slope and aspect
    if "slope" in num:
        mean, p50, std, p10, p90, smax = num["slope"]
        out["mean_slope_m_per_m"] = mean
        out["mean_slope_deg"] = float(np.degrees(np.arctan(out["mean_slope_m_per_m"])))
        out["median_slope_m_per_m"] = p50
        out["slope_std_m_per_m"] = std
        out["slope_p10_m_per_m"] = p10
        out["slope_p90_m_per_m"] = p90
        out["max_slope_m_per_m"] = smax
    fr = num["sectors"]
    for k, name in enumerate(ASPECT_SECTORS):
        out[f"aspect_{name}_fraction"] = float(fr[k])
    out["flat_fraction"] = num["flat_fraction"]
    # ---- network
    if ctx.network is not None:
        out["channel_min_area_m2"] = float(ctx.network.min_area_m2)
        net = num["network"] if "network" in num else network_numbers(
            ctx.fm, ctx.stream_flat, ctx.strahler_flat, num["channel_cells"], member)
        network_keys(out, area, *net)
    return out, curve


def basin_morphometry(fm, mask, outlet_cell, network=None, return_curve=False):
    """Network, shape and relief descriptors of one catchment.

    Parameters
    ----------
    fm : FlowModel
    mask : ndarray of bool (nrows, ncols)
        The catchment's cells (e.g. ``fm.upstream_mask(cell)``).
    outlet_cell : int
        Flat index of the outlet (inside ``mask``).
    network : ChannelNetwork, optional
        From :func:`basinkit.analysis.channels.extract_channels`; without it the network keys are
        left out.
    return_curve : bool
        Also return the hypsometric curve (pandas.DataFrame).

    Returns
    -------
    dict
        Every key names its unit (dimensionless ratios have none). Shape:
        ``area_km2``, ``perimeter_m`` (cell-boundary polygon simplified by one cell width,
        Douglas & Peucker 1973, which removes the raster staircase),
        ``perimeter_cell_edges_m``, ``longest_flow_path_m`` (D8, Hack 1957),
        ``basin_length_straight_m`` (farthest boundary corner from the outlet centre),
        ``elongation_ratio`` = 2√(A/π)/L (Schumm 1956), ``circularity_ratio`` = 4πA/P²
        (Miller 1953), ``form_factor`` = A/L² (Horton 1932), ``compactness_coefficient`` =
        P/(2√(πA)) (Gravelius 1914), all with L the straight basin length. Relief:
        ``relief_m`` (highest minus lowest cell), ``relief_ratio`` = relief/L (Schumm 1956),
        ``melton_ruggedness`` = relief/√A (Melton 1965), ``hypsometric_integral`` (area
        under the hypsometric curve, Strahler 1952) and ``elevation_relief_ratio`` =
        (mean − min)/(max − min) (Pike & Wilson 1971), slope statistics
        ``*_slope_m_per_m`` (Horn 1981 with true per-row cell sizes, area weighted mean),
        ``aspect_<sector>_fraction`` (share of the non-flat area facing each of 8 sectors
        centred on N, NE, ...). Network (with ``network``): ``stream_count`` and
        ``stream_count_order_k``, ``total_stream_length_m`` and ``stream_length_order_k_m``,
        ``bifurcation_ratio``, ``length_ratio``, ``area_ratio`` (Horton ratios from the
        least-squares slope of log10 count, mean length and mean area on order; Horton
        1945, Strahler 1957), ``drainage_density_km_per_km2`` = ΣL/A (Horton 1945),
        ``stream_frequency_per_km2`` (Strahler streams per km²),
        ``channel_maintenance_km2_per_km`` = 1/D_d (Schumm 1956),
        ``overland_flow_length_m`` = 1/(2 D_d) (Horton 1945).

    Notes
    -----
    Relief, hypsometry and slope use the DEM as read (before conditioning) when the flow
    model has it. Only the part of each stream inside the catchment counts (the stream
    at the outlet is cut there). Stream lengths are D8 paths between cell centres, so
    they run longer than the true channel on diagonal-rich networks.

    References
    ----------
    Horton, R. E. (1932). Drainage-basin characteristics. Transactions AGU 13:350-361.
    Horton, R. E. (1945). Erosional development of streams and their drainage basins.
    Geological Society of America Bulletin 56:275-370.
    Miller, V. C. (1953). A quantitative geomorphic study of drainage basin characteristics
    in the Clinch Mountain area. Technical Report 3, Columbia University.
    Schumm, S. A. (1956). Evolution of drainage systems and slopes in badlands at Perth
    Amboy, New Jersey. GSA Bulletin 67:597-646.
    Strahler, A. N. (1952). Hypsometric (area-altitude) analysis of erosional topography.
    GSA Bulletin 63:1117-1142.
    Strahler, A. N. (1957). Quantitative analysis of watershed geomorphology. Transactions
    AGU 38:913-920.
    Melton, M. A. (1965). The geomorphic and paleoclimatic significance of alluvial deposits
    in southern Arizona. Journal of Geology 73:1-38.
    Pike, R. J., Wilson, S. E. (1971). Elevation-relief ratio, hypsometric integral and
    geomorphic area-altitude analysis. GSA Bulletin 82:1079-1084.
    Gravelius, H. (1914). Flusskunde. Göschen, Berlin.
    Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the IEEE
    69:14-47.
    Douglas, D. H., Peucker, T. K. (1973). Algorithms for the reduction of the number of
    points required to represent a digitized line. Cartographica 10:112-122.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.morphometry import basin_morphometry
    >>> z = np.add.outer(np.arange(20.0, 0, -1), np.zeros(10))  # a plane sloping south
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> outlet = 19 * 10 + 5
    >>> m = basin_morphometry(fm, fm.upstream_mask(outlet), outlet)
    >>> round(m["hypsometric_integral"], 2), m["cell_count"]
    (0.5, 20)
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.shape != fm.shape:
        raise InputError(f"the catchment mask has shape {mask.shape}, the grid {fm.shape}")
    rr, cc = np.nonzero(mask)
    if rr.size == 0:
        raise InputError("the catchment mask is empty")
    ctx = _Context(fm, network)
    r0, r1, c0, c1 = rr.min(), rr.max(), cc.min(), cc.max()
    out, curve = _measure(ctx, r0, r1, c0, c1, mask[r0:r1 + 1, c0:c1 + 1], outlet_cell, True)
    return (out, _curve_frame(*curve)) if return_curve else out


def morphometry_table(fm, masks_or_labels, outlet_cells, ids=None, network=None,
                      return_curves=False, progress=None, label_ranges=None, polygons=None):
    """Morphometry of many catchments, one row each (see :func:`basin_morphometry`).

    Parameters
    ----------
    fm : FlowModel
    masks_or_labels : ndarray of int (nrows, ncols) or sequence of bool masks
        A label grid (catchment ``ids[i]`` = cells labelled ``ids[i]``, as from
        ``fm.label_outlets``), or one boolean grid per catchment (a sequence with
        ``len`` and indexing is read one mask at a time, so its masks may be made on
        demand).
    outlet_cells : array of int
        Flat outlet cell of each catchment.
    ids : array of int, optional
        Catchment ids; with a label grid, the labels (default 1, 2, ...).
    network : ChannelNetwork, optional
    return_curves : bool
        Also return ``{id: hypsometric curve DataFrame}``.
    progress : callable, optional
        ``progress(iterable, total=, desc=)`` wrapper (e.g. a progress bar).
    label_ranges : array of int (n, 2), optional
        With a label grid: catchment ``i`` is the cells labelled ``label_ranges[i, 0]`` to
        ``label_ranges[i, 1]`` (the depth-first labels of
        :class:`~basinkit.analysis.catchments.Delineation`, where a nested catchment is a
        contiguous label range). Many (more than ``WINDOW_MAX_CATCHMENTS``, or windows
        of more than ``WINDOW_MAX_CELLS`` cells in all) are measured on their cells,
        listed once for all catchments by label (a range is one slice of that list),
        without masks or windows; a few each on its window, as masks are.
    polygons : sequence of shapely geometries, optional
        With ``label_ranges``: each catchment's polygon, as the delineation traced it
        (default: traced here from its cells).

    Returns
    -------
    pandas.DataFrame
        Column ``catchment_id`` then the keys of :func:`basin_morphometry`; a catchment that
        cannot be measured gets its message in ``error`` and NaN elsewhere (the batch
        carries on).

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.morphometry import morphometry_table
    >>> z = np.add.outer(np.arange(20.0, 0, -1), np.zeros(10))  # a plane sloping south
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> outlets = [19 * 10 + 2, 19 * 10 + 7]  # two cells of the southern row
    >>> tab = morphometry_table(fm, fm.label_outlets(outlets), outlets)
    >>> tab["area_m2"].tolist(), tab["error"].tolist()
    ([2000.0, 2000.0], ['', ''])
    """
    outlets = np.asarray(outlet_cells, dtype=np.int64).ravel()
    n = outlets.size
    ids = np.arange(1, n + 1) if ids is None else np.asarray(ids).ravel()
    if ids.size != n:
        raise InputError(f"{ids.size} catchment ids for {n} outlets")
    ctx = _Context(fm, network)
    rows, curves = [], {}
    labels = None
    polys = {}
    if isinstance(masks_or_labels, np.ndarray) and masks_or_labels.ndim == 2 \
            and masks_or_labels.dtype.kind in "iu":
        labels = masks_or_labels
        if labels.shape != fm.shape:
            raise InputError(f"the label grid has shape {labels.shape}, the grid {fm.shape}")
        lab32 = labels if labels.dtype == np.int32 else labels.astype(np.int64)
        if label_ranges is not None:
            ranges = np.asarray(label_ranges, dtype=np.int64).reshape(-1, 2)
            if ranges.shape[0] != n:
                raise InputError(f"{ranges.shape[0]} label ranges for {n} outlets")
            nlab = int(max(ranges[:, 1].max() if n else 0, 0)) + 1
        else:
            nlab = int(max(ids.max() if n else 0, 0)) + 1
        rmin, rmax, cmin, cmax = _channels.label_bounding_boxes(lab32, nlab)
        if label_ranges is not None:
            rmin, rmax, cmin, cmax = _range_boxes(ranges, rmin, rmax, cmin, cmax)
        # polygons: one polygonize of the whole label grid beats one call per window
        # once there are many catchments (a call costs about as much as ~25 000 cells)
        if label_ranges is None and n * 25_000 > labels.size:
            from .polygons import labels_to_polygons

            wanted = [int(i) for i in ids if 0 < int(i) < nlab]
            polys = labels_to_polygons(lab32, fm.terrain.transform, ids=wanted)
    else:
        masks = (masks_or_labels if hasattr(masks_or_labels, "__getitem__")
                 and hasattr(masks_or_labels, "__len__") else list(masks_or_labels))
        if len(masks) != n:
            raise InputError(f"{len(masks)} catchment masks for {n} outlets")
    if labels is not None and label_ranges is not None:
        if n > WINDOW_MAX_CATCHMENTS or \
                _window_cells(rmin, rmax, cmin, cmax) > WINDOW_MAX_CELLS:
            rows, curves = _range_rows(ctx, labels, ranges, nlab, outlets, ids,
                                       return_curves, progress, polygons,
                                       (rmin, rmax, cmin, cmax))
            return _finish_table(rows, curves, return_curves)
        ctx.use_full_grid_slope(rmin, rmax, cmin, cmax)
    elif labels is not None:
        k = ids[(ids > 0) & (ids < rmin.size)]
        ctx.use_full_grid_slope(rmin[k], rmax[k], cmin[k], cmax[k])
    import rasterio

    with rasterio.Env():  # one GDAL environment for every polygon of the batch
        todo = range(n)
        if progress is not None:
            todo = progress(todo, total=n, desc="morphometry")
        for i in todo:
            cid = ids[i]

            def measure(i=i, cid=cid):
                poly = None
                if labels is not None and label_ranges is not None:
                    lo, hi = int(ranges[i, 0]), int(ranges[i, 1])
                    if not 0 < lo <= hi < nlab or rmin[i] > rmax[i]:
                        raise InputError(f"catchment {cid} has no cells in the label grid")
                    r0, r1, c0, c1 = rmin[i], rmax[i], cmin[i], cmax[i]
                    w = labels[r0:r1 + 1, c0:c1 + 1]
                    mwin = (w >= lo) & (w <= hi)
                    poly = polygons[i] if polygons is not None else None
                elif labels is not None:
                    if cid <= 0 or rmin[cid] > rmax[cid]:
                        raise InputError(f"catchment {cid} has no cells in the label grid")
                    r0, r1, c0, c1 = rmin[cid], rmax[cid], cmin[cid], cmax[cid]
                    mwin = labels[r0:r1 + 1, c0:c1 + 1] == cid
                    poly = polys.get(int(cid))
                else:
                    m = np.asarray(masks[i], dtype=bool)
                    if m.shape != fm.shape:
                        raise InputError(f"mask {i} has shape {m.shape}, the grid {fm.shape}")
                    rr = np.flatnonzero(m.any(axis=1))
                    cc = np.flatnonzero(m.any(axis=0))
                    if rr.size == 0:
                        raise InputError(f"catchment {cid} is empty")
                    r0, r1, c0, c1 = rr[0], rr[-1], cc[0], cc[-1]
                    mwin = m[r0:r1 + 1, c0:c1 + 1]
                out, curve = _measure(ctx, r0, r1, c0, c1, mwin, outlets[i], return_curves,
                                      poly)
                return out, curve

            _catchment_row(cid, measure, rows, curves, return_curves)
    return _finish_table(rows, curves, return_curves)


def _range_rows(ctx, labels, ranges, nlab, outlets, ids, want_curves, progress, polygons,
                boxes):
    """Rows (and curves) of the catchments given as depth-first label ranges: the
    cell-based numbers of all of them at once (:class:`._measure_arrays.NestedNumbers`),
    then the polygon and network measures of each."""
    from affine import Affine

    from ._measure_arrays import NestedNumbers
    from .polygons import mask_to_polygon

    lab = labels.ravel()
    order, starts = _catchments.cells_by_label(lab, ctx.valid.ravel(), nlab)
    if ctx.slope is None:  # nested catchments cover the grid many times over: once here
        nr, nc = ctx.valid.shape
        ctx.slope, ctx.aspect = ctx.horn(0, nr - 1, 0, nc - 1)
    z, slope, aspect = ctx.z.ravel(), ctx.slope.ravel(), ctx.aspect.ravel()
    lo_all, hi_all = ranges[:, 0], ranges[:, 1]
    okr = (lo_all > 0) & (lo_all <= hi_all) & (hi_all < nlab)
    okr[okr] = starts[lo_all[okr]] < starts[hi_all[okr] + 1]
    where = np.full(outlets.size, -1, np.int64)
    where[okr] = np.arange(int(okr.sum()))
    import numba

    threads = max(1, int(numba.config.NUMBA_NUM_THREADS))  # as the tiled fill
    num = NestedNumbers(order, starts, lo_all[okr], hi_all[okr], ctx.nc, ctx.row_area, z,
                        slope, aspect, ctx.downstream_length, threads=threads)
    if ctx.network is not None:  # the channel cells, listed by label too
        corder = order[ctx.channel_flat[order]]
        cstarts = np.concatenate([[0], np.cumsum(np.bincount(lab[corder], minlength=nlab))])
        nets = _range_networks(ctx, lab, corder, cstarts, lo_all[okr], hi_all[okr])
    h = np.linspace(0.0, 1.0, HYPSOMETRIC_LEVELS)
    shapes = _range_shapes(ctx, polygons, outlets, where >= 0, threads)
    rows, curves = [], {}
    todo = range(outlets.size)
    if progress is not None:
        todo = progress(todo, total=outlets.size, desc="morphometry")
    for i in todo:
        cid = ids[i]
        lo, hi = int(ranges[i, 0]), int(ranges[i, 1])

        def measure(i=i, cid=cid, lo=lo, hi=hi):
            if where[i] < 0:
                raise InputError(f"catchment {cid} has no cells in the label grid")
            o = int(outlets[i])
            if not lo <= lab[o] <= hi:
                _outlet_outside(*divmod(o, ctx.nc))
            poly = polygons[i] if polygons is not None else None
            if poly is None:
                r0, r1, c0, c1 = (int(b[i]) for b in boxes)
                poly = mask_to_polygon(
                    _catchments.range_mask(labels[r0:r1 + 1, c0:c1 + 1], lo, hi),
                    ctx.fm.terrain.transform @ Affine.translation(c0, r0))

            def member(flat, lo=lo, hi=hi):
                v = lab[flat]
                return (v >= lo) & (v <= hi)

            k = where[i]
            if num.z_count[k] == 0:  # as measured on the cells (no elevation: an error)
                cells = order[starts[lo]:starts[hi + 1]]
                out, curve = _describe(ctx, cells, z[cells], slope[cells], aspect[cells], o,
                                       member, want_curves, poly)
            else:
                nums = _range_numbers(ctx, num, k, h, order, starts, lo, hi)
                if ctx.network is not None:
                    nums["network"] = tuple(v[k] for v in nets)
                out, curve = _assemble(ctx, nums, o, member, want_curves, poly,
                                       shapes.get(i))
            return out, curve

        _catchment_row(cid, measure, rows, curves, want_curves)
    return rows, curves


def _range_networks(ctx, lab, corder, cstarts, lo, hi):
    """The numbers of ``network_numbers`` of every label range, as arrays (one row each)."""
    from ._nested_network import range_network

    fm = ctx.fm
    sid = ctx.stream_flat[corder]
    order = ctx.strahler_flat[corder]
    return range_network(lo, hi, cstarts, corder, lab, fm.receiver.ravel(),
                         fm.receiver_distance().ravel(), ctx.stream_flat, ctx.strahler_flat,
                         fm.d8_upstream_area_flat(), int(sid.max()) + 1 if sid.size else 1,
                         int(order.max()) if order.size else 0)


def _range_shapes(ctx, polygons, outlets, ok, threads):
    """``{row: (perimeter along the cell edges, perimeter, straight length)}`` of the
    given polygons, measured all at once (projected grids; else measured one by one)."""
    if polygons is None or ctx.fm.terrain.crs.is_geographic:
        return {}
    from ..terrain.geometry import _linear_unit_to_metres
    from ._shape_batch import outline_measures

    rows = np.flatnonzero(ok & np.array([p is not None for p in polygons], dtype=bool))
    orow, ocol = np.divmod(outlets[rows], ctx.nc)
    x0, y0 = ctx.fm.terrain.xy_of(orow, ocol)
    m = outline_measures([polygons[i] for i in rows], x0, y0,
                         max(ctx.cell_w, ctx.cell_h), _linear_unit_to_metres(ctx.fm.terrain.crs),
                         threads=threads)
    return {int(i): (float(a), float(b), float(c)) for i, a, b, c in zip(rows, *m)}


def _range_numbers(ctx, num, k, h, order, starts, lo, hi):
    """The numbers of :func:`_describe` for row ``k`` of a :class:`NestedNumbers`."""
    area = float(num.area[k])
    out = {"count": int(num.count[k]), "area": area, "dl_max": num.dl_max[k],
           "zmin": float(num.zmin[k]), "zmax": float(num.zmax[k]),
           "zmean": float(num.zmean[k])}
    if num.curve_ok[k]:
        out["curve"] = (h, num.a_above[k], num.elev[k])
    else:  # unequal cell areas: the running sums of the sorted areas
        cells = order[starts[lo]:starts[hi + 1]]
        zm = ctx.z.ravel()[cells]
        ok = np.isfinite(zm)
        out["curve"] = _hypsometry(zm[ok].astype(np.float64),
                                   ctx.row_area[cells // ctx.nc][ok])
    if num.slope_count[k]:
        out["slope"] = (float(num.slope_mean[k]), float(num.slope_p50[k]),
                        float(num.slope_std[k]), float(num.slope_p10[k]),
                        float(num.slope_p90[k]), float(num.slope_max[k]))
    out["sectors"] = num.sector_fraction[k]
    out["flat_fraction"] = float(num.flat_fraction[k])
    return out


def _catchment_row(cid, measure, rows, curves, want_curves):
    """One catchment's row of the table into ``rows`` (its curve into ``curves``):
    ``measure()`` gives (values, curve); an InputError or OutletError it raises becomes
    the row's ``error``, and the batch goes on."""
    rec = {"catchment_id": cid.item() if hasattr(cid, "item") else cid}
    try:
        out, curve = measure()
        rec.update(out)
        rec["error"] = ""
        if want_curves:
            curves[rec["catchment_id"]] = curve
    except (InputError, OutletError) as exc:
        rec["error"] = str(exc)
    rows.append(rec)


def _finish_table(rows, curves, return_curves):
    import pandas as pd

    table = pd.DataFrame(rows)
    # per-order columns last, in order
    order_cols = sorted([c for c in table.columns if "_order_" in c],
                        key=lambda c: (c.split("_order_")[0],
                                       int(c.split("_order_")[1].split("_")[0])))
    other = [c for c in table.columns if c not in order_cols and c != "error"]
    table = table[other + order_cols + ["error"]]
    return (table, CurveFrames(curves)) if return_curves else table
