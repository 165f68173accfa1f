"""Channel networks: channel cells, Strahler order, Shreve magnitude, segments, junctions
and the constant-drop test for choosing the channel initiation threshold.

Everything follows the D8 receivers and the stack of a :class:`basinkit.FlowModel`: orders
come from one backward pass over the stack, segments from one forward pass.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import _channels
from ..errors import InputError

__all__ = ["ChannelNetwork", "extract_channels", "constant_drop_test", "ConstantDropResult",
           "threshold_range", "ground_distance"]


@dataclass
class ChannelNetwork:
    """A D8 channel network on the grid of a FlowModel.

    Attributes
    ----------
    mask : ndarray of bool (nrows, ncols)
        Channel cells.
    strahler : ndarray of int16 (nrows, ncols)
        Strahler order (Strahler 1957), 0 off the network.
    shreve : ndarray of int32 (nrows, ncols)
        Shreve magnitude (Shreve 1966), 0 off the network.
    segment_id : ndarray of int32 (nrows, ncols)
        Segment of every channel cell, 0 off the network.
    stream_id : ndarray of int32 (nrows, ncols)
        Strahler stream (chain of segments of one order) of every channel cell, 0 off
        (a property, built on first use).
    segments : geopandas.GeoDataFrame
        One row per segment (columns listed in :func:`extract_channels`), line geometry
        through cell centres in the DEM's CRS.
    junctions : geopandas.GeoDataFrame
        One point per confluence cell (two or more channel donors).
    min_area_m2 : float
        Upstream-area threshold used for channel initiation.
    slope_area : tuple (exponent, constant) or None
        Slope–area criterion A·S^exponent ≥ constant, when used.
    outlet_cells : ndarray of int64
        Flat cells where segments were also split.
    """

    mask: np.ndarray
    strahler: np.ndarray
    shreve: np.ndarray
    segment_id: np.ndarray
    segments: object
    junctions: object
    min_area_m2: float
    slope_area: tuple | None = None
    outlet_cells: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    segment_stream: np.ndarray | None = field(default=None, repr=False)
    _stream_grid: np.ndarray | None = field(default=None, repr=False)

    @property
    def stream_id(self) -> np.ndarray:
        """Strahler stream (chain of segments of one order) of every channel cell, 0 off
        the network (int32 grid, built on first use)."""
        if self._stream_grid is None:
            seg = self.segment_id
            lut = np.zeros(int(seg.max()) + 1 if seg.size else 1, dtype=np.int32)
            if self.segment_stream is not None:
                lut[1:] = self.segment_stream
            else:
                lut[self.segments["segment_id"].to_numpy()] = self.segments["stream_id"]
            self._stream_grid = lut[seg]
        return self._stream_grid

    def max_order(self) -> int:
        """Highest Strahler order of the network (0 when it is empty)."""
        return int(self.strahler.max()) if self.strahler.size else 0

    def summary(self) -> dict:
        """Counts and lengths of the whole network (for logs and provenance)."""
        seg = self.segments
        return {"channel_cells": int(self.mask.sum()), "segments": int(len(seg)),
                "junctions": int(len(self.junctions)), "max_strahler_order": self.max_order(),
                "total_length_m": float(seg["length_m"].sum()) if len(seg) else 0.0,
                "min_area_m2": float(self.min_area_m2)}


def ground_distance(fm, cells_a, cells_b) -> np.ndarray:
    """Straight ground distance (m) between the centres of two sets of flat cells.

    Projected grids: planar distance in metres. Geographic grids: geodesic distance on the
    CRS's ellipsoid (Karney 2013, through pyproj.Geod).
    """
    t = fm.terrain
    nc = t.shape[1]
    a = np.asarray(cells_a, dtype=np.int64)
    b = np.asarray(cells_b, dtype=np.int64)
    ra, ca = np.divmod(a, nc)
    rb, cb = np.divmod(b, nc)
    if t.crs.is_geographic:
        from pyproj import Geod

        ell = t.crs.ellipsoid
        f = 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0
        xa, ya = t.xy_of(ra, ca)
        xb, yb = t.xy_of(rb, cb)
        _, _, d = Geod(a=ell.semi_major_metre, f=f).inv(xa, ya, xb, yb)
        return np.abs(np.asarray(d, dtype=np.float64))
    g = t.geometry
    return np.hypot((cb - ca) * g.dx[0], (rb - ra) * g.dy_down[0])


def _d8_slope(fm) -> np.ndarray:
    """Slope (m per m) from each cell to its D8 receiver on the routed surface, flat."""
    z = fm.terrain.elevation.ravel().astype(np.float64)
    rec = fm.receiver
    step = fm.receiver_distance()
    s = np.zeros(rec.shape[0])
    ok = (rec >= 0) & (step > 0)
    s[ok] = (z[ok] - z[rec[ok]]) / step[ok]
    return np.maximum(s, 0.0)


def _check_threshold(min_area_m2, slope_area):
    try:
        v = float(min_area_m2)
    except (TypeError, ValueError):
        raise InputError(f"the channel threshold must be an area in m², got "
                         f"{min_area_m2!r}") from None
    if not v > 0:
        raise InputError(f"the channel threshold must be a positive area, got {min_area_m2!r}; "
                         "give e.g. 0.5km2")
    if slope_area is not None:
        if len(slope_area) != 2:
            raise InputError("the slope–area criterion needs (exponent, constant)")
        alpha, const = (float(x) for x in slope_area)
        if not (alpha >= 0 and const > 0):
            raise InputError("the slope–area exponent must be ≥ 0 and the constant > 0, got "
                             f"{slope_area!r}")
        slope_area = (alpha, const)
    return v, slope_area


def _core(fm, min_area_m2, slope_area, outlet_cells):
    """Mask, orders and per-segment arrays (no geometry): two passes over the stack."""
    n = fm.receiver.shape[0]
    area = fm.d8_upstream_area_flat()
    if slope_area is not None:
        alpha, const = slope_area
        with np.errstate(invalid="ignore", over="ignore"):
            crit = area * _d8_slope(fm) ** alpha >= const
        use_crit = True
    else:
        crit = np.zeros(1, dtype=np.bool_)
        use_crit = False
    split = np.zeros(n, dtype=np.bool_)
    if outlet_cells is not None and len(outlet_cells):
        oc = np.asarray(outlet_cells, dtype=np.int64)
        if oc.min() < 0 or oc.max() >= n:
            raise InputError("an outlet cell lies outside the grid")
        split[oc] = True
    (mask, strahler, shreve, ndon, seg, bottom, top, length, count,
     junctions) = _channels.build_network(fm.receiver, fm.stack, area, float(min_area_m2),
                                          crit, use_crit, fm.receiver_distance(), split)
    rec_b = fm.receiver[bottom]
    has_down = rec_b >= 0
    end = np.where(has_down, rec_b, bottom)
    downstream = np.where(has_down, seg[end], 0).astype(np.int32)
    order = strahler[bottom]
    stream = _channels.strahler_streams(order, downstream)
    z = fm.terrain.elevation.ravel()
    drop = z[top].astype(np.float64) - z[end].astype(np.float64)
    return dict(mask=mask, strahler=strahler, shreve=shreve, ndon=ndon, seg=seg,
                bottom=bottom, top=top, end=end, downstream=downstream, order=order,
                stream=stream, drop=drop, has_down=has_down, length=length, count=count,
                junctions=junctions, area=area)


def extract_channels(fm, min_area_m2, slope_area=None, outlet_cells=None,
                     geometry: bool = True) -> ChannelNetwork:
    """Extract the D8 channel network, its Strahler order and Shreve magnitude, and its
    segments and junctions.

    Parameters
    ----------
    fm : FlowModel
    min_area_m2 : float
        Channel initiation threshold: a cell is a channel cell when its D8 upstream area on
        the ground is at least this many square metres.
    slope_area : tuple (exponent, constant), optional
        Also require ``A · S**exponent >= constant`` (A in m², S the D8 slope to the
        receiver in m per m; Montgomery & Dietrich 1988 used exponent 2). Every cell
        downstream of a channel cell is a channel cell, so the criterion marks channel
        heads and the network continues down to the outlet.
    outlet_cells : array of int, optional
        Flat cells where segments are also split (catchment outlets), so that every
        segment lies inside or outside each catchment.
    geometry : bool
        Build the line and point geometries (False: table columns only, faster).

    Returns
    -------
    ChannelNetwork
        ``segments`` columns: ``segment_id``, ``downstream_id`` (0 = none),
        ``stream_id`` (Strahler stream), ``strahler_order``, ``shreve_magnitude``,
        ``length_m`` (ground length from the top cell centre to the junction or the bottom
        cell centre), ``drop_m``, ``mean_slope_m_per_m``, ``upstream_area_top_m2``,
        ``upstream_area_bottom_m2``, ``straight_length_m``, ``sinuosity`` (length / straight
        distance between the ends), ``top_elevation_m``, ``bottom_elevation_m``,
        ``cell_count``, ``top_row``, ``top_col``, ``bottom_row``, ``bottom_col``.
        Elevations are those of the routed (conditioned) surface.

    Notes
    -----
    Strahler order: a channel head has order 1; below a confluence the order is the highest
    tributary order, plus one when two or more tributaries share it (Strahler 1957). Shreve
    magnitude: the number of channel heads upstream (Shreve 1966). Both come from one
    backward pass over the stack (Braun & Willett 2013). Segments run between channel heads,
    junctions and outlets; lengths are sums of the true ground distances between cell
    centres (geodesic on geographic grids).

    References
    ----------
    Strahler, A. N. (1957). Quantitative analysis of watershed geomorphology. Transactions,
    American Geophysical Union 38:913-920.
    Shreve, R. L. (1966). Statistical law of stream numbers. Journal of Geology 74:17-37.
    Montgomery, D. R., Dietrich, W. E. (1988). Where do channels begin? Nature 336:232-234.
    O'Callaghan, J. F., Mark, D. M. (1984). The extraction of drainage networks from
    digital elevation data. Computer Vision, Graphics and Image Processing 28:323-344.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.channels import extract_channels
    >>> z = np.add.outer(np.arange(6.0, 0, -1), np.abs(np.arange(5.0) - 2))  # a V valley
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> net = extract_channels(fm, min_area_m2=500)
    >>> net.strahler[:, 2].tolist()
    [0, 0, 1, 1, 1, 1]
    """
    min_area_m2, slope_area = _check_threshold(min_area_m2, slope_area)
    shape = fm.shape
    oc = (np.zeros(0, np.int64) if outlet_cells is None
          else np.unique(np.asarray(outlet_cells, dtype=np.int64).ravel()))
    c = _core(fm, min_area_m2, slope_area, oc)
    top, bottom, end = c["top"], c["bottom"], c["end"]
    ns = top.shape[0]
    mask = c["mask"]
    seg = c["seg"]
    rec = fm.receiver
    length = c["length"]
    area = c["area"]
    z = fm.terrain.elevation.ravel()
    straight = ground_distance(fm, top, end) if ns else np.zeros(0)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(length > 0, c["drop"] / length, np.nan)
        sinuosity = np.where(straight > 0, length / straight, np.nan)
    nc = shape[1]
    table = {
        "segment_id": np.arange(1, ns + 1, dtype=np.int32),
        "downstream_id": c["downstream"],
        "stream_id": c["stream"],
        "strahler_order": c["order"].astype(np.int16),
        "shreve_magnitude": c["shreve"][bottom].astype(np.int32),
        "length_m": length,
        "drop_m": c["drop"],
        "mean_slope_m_per_m": slope,
        "upstream_area_top_m2": area[top],
        "upstream_area_bottom_m2": area[bottom],
        "straight_length_m": straight,
        "sinuosity": sinuosity,
        "top_elevation_m": z[top].astype(np.float64),
        "bottom_elevation_m": z[end].astype(np.float64),
        "cell_count": c["count"],
        "top_row": (top // nc).astype(np.int32), "top_col": (top % nc).astype(np.int32),
        "bottom_row": (bottom // nc).astype(np.int32),
        "bottom_col": (bottom % nc).astype(np.int32),
    }
    junction_cells = c["junctions"]
    jt = {"junction_id": np.arange(1, junction_cells.size + 1, dtype=np.int32),
          "segment_id": seg[junction_cells],
          "strahler_order": c["strahler"][junction_cells],
          "shreve_magnitude": c["shreve"][junction_cells],
          "tributary_count": c["ndon"][junction_cells].astype(np.int16),
          "upstream_area_m2": area[junction_cells],
          "elevation_m": z[junction_cells].astype(np.float64),
          "row": (junction_cells // nc).astype(np.int32),
          "col": (junction_cells % nc).astype(np.int32)}
    segments, junctions = _frames(fm, table, jt, junction_cells, top, bottom, rec, mask,
                                  geometry)
    return ChannelNetwork(mask=mask.reshape(shape), strahler=c["strahler"].reshape(shape),
                          shreve=c["shreve"].reshape(shape), segment_id=seg.reshape(shape),
                          segments=segments, junctions=junctions, min_area_m2=min_area_m2,
                          slope_area=slope_area, outlet_cells=oc,
                          segment_stream=c["stream"])


def _frames(fm, table, jt, junction_cells, top, bottom, rec, mask, geometry):
    import geopandas as gpd
    import pandas as pd

    crs = fm.terrain.crs.to_wkt() if fm.terrain.crs is not None else None
    if not geometry:
        return pd.DataFrame(table), pd.DataFrame(jt)
    import shapely

    nc = fm.shape[1]
    if top.size:
        cells, offsets = _channels.segment_paths(rec, mask, top, bottom)
        counts = np.diff(offsets)
        # a one-point segment (a single cell leaving the grid) becomes a zero-length line
        single = counts == 1
        if single.any():
            rep = np.where(single, 2, 1)
            cells = np.repeat(cells, np.repeat(rep, counts))
            counts = counts * rep
        x, y = fm.terrain.xy_of(cells // nc, cells % nc)
        idx = np.repeat(np.arange(top.size), counts)
        lines = shapely.linestrings(np.column_stack([x, y]), indices=idx)
    else:
        lines = np.empty(0, dtype=object)
    jx, jy = fm.terrain.xy_of(junction_cells // nc, junction_cells % nc)
    segments = gpd.GeoDataFrame(table, geometry=lines, crs=crs)
    junctions = gpd.GeoDataFrame(jt, geometry=shapely.points(jx, jy), crs=crs)
    return segments, junctions


# ---------------------------------------------------------------------- constant drop test
@dataclass
class ConstantDropResult:
    """Outcome of :func:`constant_drop_test`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per threshold (ascending): ``min_area_m2``, ``min_area_km2``,
        ``first_order_streams``, ``higher_order_streams``, ``first_order_mean_drop_m``,
        ``higher_order_mean_drop_m``, ``first_order_drop_std_m``,
        ``higher_order_drop_std_m``, ``t_statistic``, ``passes``.
    chosen_min_area_m2 : float or None
        The smallest threshold that passes (None when none does).
    critical_t : float
    """

    table: object
    chosen_min_area_m2: float | None
    critical_t: float

    def to_dict(self) -> dict:
        t = self.table.astype(object).where(self.table.notna(), None)  # NaN -> null
        return {"chosen_min_area_m2": self.chosen_min_area_m2, "critical_t": self.critical_t,
                "test": "Welch two-sample t, first-order vs higher-order stream drops",
                "thresholds": t.to_dict(orient="records")}


def threshold_range(low_m2, high_m2, count=12) -> np.ndarray:
    """``count`` thresholds spaced evenly in log between ``low_m2`` and ``high_m2``."""
    lo, hi = float(low_m2), float(high_m2)
    if not (0 < lo < hi):
        raise InputError(f"the threshold range needs 0 < low < high, got {low_m2!r} to "
                         f"{high_m2!r}; write e.g. 0.05km2:5km2")
    if int(count) < 2:
        raise InputError("the threshold range needs at least 2 steps")
    return np.geomspace(lo, hi, int(count))


def constant_drop_test(fm, thresholds, slope_area=None, critical_t: float = 2.0,
                       min_streams: int = 3) -> ConstantDropResult:
    """Constant-drop test for the channel initiation threshold.

    For each threshold the network is extracted and cut into Strahler streams (chains of
    segments of one order); the drop of a stream is the elevation difference between its
    top and its end. Broscoe (1959) found the mean drop of streams to be about the same for
    every order; Tarboton, Bras & Rodriguez-Iturbe (1991) proposed to take the smallest
    threshold at which the mean drop of first-order streams does not differ significantly
    from the mean drop of higher-order streams. The difference is judged here with Welch's
    two-sample t statistic (unequal variances, Welch 1947); ``|t| < critical_t`` passes
    (2, about the two-sided 5 % point of Student's t for more than ~30 streams; common
    practice).

    Parameters
    ----------
    fm : FlowModel
    thresholds : array of float
        Upstream-area thresholds in m² (any order; reported ascending).
    slope_area : tuple, optional
        As in :func:`extract_channels`.
    critical_t : float
        Largest |t| that passes.
    min_streams : int
        A threshold with fewer first-order or higher-order streams than this cannot pass.

    Returns
    -------
    ConstantDropResult

    References
    ----------
    Broscoe, A. J. (1959). Quantitative analysis of longitudinal stream profiles of small
    watersheds. Office of Naval Research, Project NR 389-042, Technical Report 18,
    Columbia University.
    Tarboton, D. G., Bras, R. L., Rodriguez-Iturbe, I. (1991). On the extraction of channel
    networks from digital elevation data. Hydrological Processes 5:81-100.
    Welch, B. L. (1947). The generalization of "Student's" problem when several different
    population variances are involved. Biometrika 34:28-35.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.channels import constant_drop_test, threshold_range
    >>> z = np.add.outer(np.arange(30.0, 0, -1), np.abs(np.arange(21.0) - 10) % 5)
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> res = constant_drop_test(fm, threshold_range(500, 5000, 4))
    >>> res.table["min_area_m2"].round().tolist()
    [500.0, 1077.0, 2321.0, 5000.0]
    >>> list(res.table.columns[-2:])
    ['t_statistic', 'passes']
    """
    import pandas as pd

    ths = np.unique(np.asarray(thresholds, dtype=np.float64).ravel())
    if ths.size == 0 or not np.all(ths > 0):
        raise InputError("the constant-drop test needs positive area thresholds")
    rows = []
    for th in ths:
        _, sa = _check_threshold(th, slope_area)
        c = _core(fm, th, sa, None)
        ns = c["stream"].max() if c["stream"].size else 0
        if ns:
            sd = np.bincount(c["stream"] - 1, weights=c["drop"], minlength=ns)
            so = np.zeros(ns, dtype=np.int64)
            so[c["stream"] - 1] = c["order"]
        else:
            sd = np.zeros(0)
            so = np.zeros(0, dtype=np.int64)
        d1 = sd[so == 1]
        d2 = sd[so > 1]
        m1 = float(d1.mean()) if d1.size else np.nan
        m2 = float(d2.mean()) if d2.size else np.nan
        s1 = float(d1.std(ddof=1)) if d1.size > 1 else np.nan
        s2 = float(d2.std(ddof=1)) if d2.size > 1 else np.nan
        t = np.nan
        if d1.size >= 2 and d2.size >= 2:
            se = np.sqrt(s1 * s1 / d1.size + s2 * s2 / d2.size)
            t = (m1 - m2) / se if se > 0 else (0.0 if m1 == m2 else np.inf)
        ok = bool(np.isfinite(t) and abs(t) < critical_t and d1.size >= min_streams
                  and d2.size >= min_streams)
        rows.append({"min_area_m2": float(th), "min_area_km2": float(th) / 1e6,
                     "first_order_streams": int(d1.size), "higher_order_streams": int(d2.size),
                     "first_order_mean_drop_m": m1, "higher_order_mean_drop_m": m2,
                     "first_order_drop_std_m": s1, "higher_order_drop_std_m": s2,
                     "t_statistic": float(t), "passes": ok})
    table = pd.DataFrame(rows)
    passing = table.loc[table["passes"], "min_area_m2"]
    chosen = float(passing.iloc[0]) if len(passing) else None
    return ConstantDropResult(table, chosen, float(critical_t))
