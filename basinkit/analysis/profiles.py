"""Longitudinal profiles and χ: flow paths, main stems and channel profiles.

Steepness and knickpoints are in :mod:`basinkit.analysis.steepness`, the concavity,
slope–area and Hack fits in :mod:`basinkit.analysis.profile_fits`, the figures in
:mod:`basinkit.plot.profiles`.

Everything follows the D8 receivers and the stack of a :class:`basinkit.FlowModel`
(Braun & Willett 2013):

- paths (:func:`longest_flow_path`, :func:`main_stem`) are traced from an outlet upstream,
  always to one preferred donor;
- channel profiles (:func:`channel_profiles`) cover every channel cell of Strahler order
  ≥ k upstream of an outlet, split into streams the way Hack (1957) followed main streams:
  from the outlet upstream along the donor of greatest area, every other donor starting a
  stream of its own;
- χ (Perron & Royden 2013) is integrated from the outlet upstream in one forward pass.

Distances are true ground distances between cell centres (geodesic on geographic grids);
areas are D8 upstream areas on the ground in m². Elevations: ``elevation_m`` is the DEM as
read (before conditioning) where the flow model has it, ``elevation_conditioned_m`` the
routed surface. χ, k_sn, slopes and knickpoints use the conditioned surface by default
(it never rises downstream).

Normalised steepness k_sn is reported as the slope of elevation against χ
(``ksn_m_per_m``: metres of elevation per metre of χ). With the default reference area
A0 = 1 m² it equals, in value, the steepness index k_s of S = k_s·A^-θ in m^(2θ).

References
----------
Hack, J. T. (1957). Studies of longitudinal stream profiles in Virginia and Maryland. USGS
Professional Paper 294-B.
Flint, J. J. (1974). Stream gradient as a function of order, magnitude, and discharge.
Water Resources Research 10:969-973.
Whipple, K. X., Tucker, G. E. (1999). Dynamics of the stream-power river incision model.
Journal of Geophysical Research 104(B8):17661-17674.
Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile analysis.
Earth Surface Processes and Landforms 38:570-576.
Braun, J., Willett, S. D. (2013). A very efficient O(n), implicit and parallel method to
solve the stream power equation. Geomorphology 180-181:170-179.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import _profiles
from ..errors import InputError, OutletError

__all__ = [
    "Profile", "FlowPath", "longest_flow_path", "main_stem", "channel_profiles",
    "chi_transform", "DEFAULT_CONCAVITY", "DEFAULT_SLOPE_WINDOW_M",
]

DEFAULT_CONCAVITY = 0.45
#: Default length of the window over which local channel slope is measured (m).
DEFAULT_SLOPE_WINDOW_M = 20.0


# ---------------------------------------------------------------------- helpers
def _cached(fm, key, make):
    return fm.derived(("profiles", key), make)


def _preferred_donor(rec, order, key, tie):
    """:func:`_profiles.preferred_donor` called with one set of types (int32 indices,
    read-only float64 keys), so that numba compiles it once, not once per caller."""
    def ro(a):
        a = np.asarray(a, dtype=np.float64).view()
        a.flags.writeable = False
        return a

    return _profiles.preferred_donor(np.ascontiguousarray(rec, dtype=np.int32),
                                     np.ascontiguousarray(order, dtype=np.int32),
                                     ro(key), ro(tie))


def _grid_donor(fm, name, key, tie):
    """The preferred donor of every cell of the grid (:func:`_preferred_donor`), kept as
    int32 (4 bytes per cell for the rest of a batch's profiles, not 8)."""
    return _cached(fm, name, lambda: _preferred_donor(fm.receiver, fm.stack, key(),
                                                      tie()).astype(np.int32))


def _area_flat(fm):
    return fm.d8_upstream_area_flat()


def _upstream_length_flat(fm):
    return _cached(fm, "uplen", lambda: fm.upstream_length().ravel())


def _donor_lists(fm):
    return _cached(fm, "donors", lambda: _profiles.donor_lists(fm.receiver))


def _elevations(fm):
    zc = fm.terrain.elevation.ravel()
    zr = zc if fm.input_elevation is None else np.asarray(fm.input_elevation).ravel()
    return zr, zc


def _check_cell(fm, cell, what="outlet cell"):
    try:
        c = int(cell)
    except (TypeError, ValueError):
        raise OutletError(f"the {what} must be a flat cell index (row * ncols + col), got "
                          f"{cell!r}") from None
    n = fm.receiver.shape[0]
    if not 0 <= c < n:
        raise OutletError(f"the {what} {c} lies outside the grid of {n} cells")
    if fm.receiver[c] == -2:
        raise OutletError(f"the {what} {c} (row {c // fm.ncols}, col {c % fm.ncols}) is a "
                          "nodata cell; move the outlet onto the DEM")
    return c


def _check_theta(theta):
    t = float(theta)
    if not (np.isfinite(t) and 0.0 <= t <= 2.0):
        raise InputError(f"the concavity θ must lie between 0 and 2 (typically 0.3-0.7), "
                         f"got {theta!r}")
    return t


def _check_a0(a0):
    a = float(a0)
    if not (np.isfinite(a) and a > 0):
        raise InputError(f"the reference area A0 must be positive (m²), got {a0!r}")
    return a


def _slope_mode(slope_window_m, slope_drop_m):
    if slope_drop_m is not None:
        d = float(slope_drop_m)
        if not (np.isfinite(d) and d > 0):
            raise InputError(f"the slope interval must be a positive elevation drop in m, got "
                             f"{slope_drop_m!r}")
        return 1, d / 2.0
    w = DEFAULT_SLOPE_WINDOW_M if slope_window_m is None else float(slope_window_m)
    if not (np.isfinite(w) and w > 0):
        raise InputError(f"the slope window must be a positive length in m, got "
                         f"{slope_window_m!r}")
    return 0, w / 2.0


# ---------------------------------------------------------------------- paths
@dataclass
class Profile:
    """Nodes along a flow path, from the outlet (index 0) upstream.

    Attributes
    ----------
    kind : str
        ``"longest_flow_path"`` or ``"main_stem"``.
    cells : ndarray of int64
        Flat cell indices.
    distance_m : ndarray
        Flow distance from the outlet along the path (m, on the ground).
    elevation_m, elevation_conditioned_m : ndarray
        DEM as read (the conditioned one where the model has no raw DEM) and routed surface.
    upstream_area_m2 : ndarray
        D8 upstream area (m²).
    slope_m_per_m : ndarray
        Local slope of the conditioned surface over the slope window.
    chi_m : ndarray
        χ from the outlet (m) for ``concavity`` and ``reference_area_m2``.
    strahler_order : ndarray of int16
        Strahler order (0 off the channel network or without one).
    x, y : ndarray
        Map coordinates of cell centres (DEM CRS).
    """

    kind: str
    cells: np.ndarray
    row: np.ndarray
    col: np.ndarray
    x: np.ndarray
    y: np.ndarray
    distance_m: np.ndarray
    elevation_m: np.ndarray
    elevation_conditioned_m: np.ndarray
    upstream_area_m2: np.ndarray
    slope_m_per_m: np.ndarray
    chi_m: np.ndarray
    strahler_order: np.ndarray
    concavity: float = DEFAULT_CONCAVITY
    reference_area_m2: float = 1.0
    slope_method: dict = field(default_factory=dict)

    def __len__(self):
        return int(self.cells.shape[0])

    @property
    def length_m(self) -> float:
        """Flow length from the outlet to the upstream end (m)."""
        return float(self.distance_m[-1]) if len(self) else 0.0

    def elevation_at(self, distance_m, conditioned: bool = True):
        """Elevation interpolated along the path at a distance from the outlet."""
        z = self.elevation_conditioned_m if conditioned else self.elevation_m
        return np.interp(distance_m, self.distance_m, z)

    def slope_10_85(self) -> float:
        """Slope between the points at 10 % and 85 % of the length from the outlet,
        (z85 - z10) / (0.75 L), on the conditioned surface (the 10–85 slope of US design
        hydrology; common practice, value from memory)."""
        L = self.length_m
        if L <= 0:
            return float("nan")
        z10, z85 = self.elevation_at([0.10 * L, 0.85 * L])
        return float((z85 - z10) / (0.75 * L))

    def average_slope(self) -> float:
        """(z_head - z_outlet) / L on the conditioned surface."""
        L = self.length_m
        if L <= 0:
            return float("nan")
        zc = self.elevation_conditioned_m
        return float((zc[-1] - zc[0]) / L)

    def summary(self) -> dict:
        """Length, ends, elevations and slopes as a flat dictionary (units in the keys)."""
        return {
            "kind": self.kind, "length_m": self.length_m, "node_count": len(self),
            "outlet_x": float(self.x[0]), "outlet_y": float(self.y[0]),
            "head_x": float(self.x[-1]), "head_y": float(self.y[-1]),
            "outlet_elevation_m": float(self.elevation_m[0]),
            "head_elevation_m": float(self.elevation_m[-1]),
            "outlet_elevation_conditioned_m": float(self.elevation_conditioned_m[0]),
            "head_elevation_conditioned_m": float(self.elevation_conditioned_m[-1]),
            "average_slope_m_per_m": self.average_slope(),
            "slope_10_85_m_per_m": self.slope_10_85(),
            "upstream_area_m2": float(self.upstream_area_m2[0]),
            "chi_head_m": float(self.chi_m[-1]),
            "concavity": self.concavity, "reference_area_m2": self.reference_area_m2,
        }

    def to_frame(self):
        """One row per node (pandas DataFrame, units in the column names)."""
        import pandas as pd

        return pd.DataFrame({
            "profile_kind": self.kind, "node": np.arange(len(self), dtype=np.int32),
            "row": self.row, "col": self.col, "x": self.x, "y": self.y,
            "distance_from_outlet_m": self.distance_m, "elevation_m": self.elevation_m,
            "elevation_conditioned_m": self.elevation_conditioned_m,
            "upstream_area_m2": self.upstream_area_m2,
            "strahler_order": self.strahler_order, "slope_m_per_m": self.slope_m_per_m,
            "chi_m": self.chi_m,
        })


class FlowPath(Profile):
    """The longest flow path of a catchment (a :class:`Profile` of kind
    ``"longest_flow_path"``); ``summary()`` gives its length, start (head) and end (outlet),
    elevations, average slope and 10–85 slope."""


def _path_profile(fm, cells, kind, network, theta, a0, slope_window_m, slope_drop_m,
                  cls=Profile):
    nc = fm.ncols
    step_all = fm.receiver_distance()
    area_all = _area_flat(fm)
    zr_all, zc_all = _elevations(fm)
    n = cells.shape[0]
    step = step_all[cells].astype(np.float64)
    dist = np.zeros(n)
    if n > 1:
        dist[1:] = np.cumsum(step[1:])
    lrec = np.arange(-1, n - 1, dtype=np.int64)
    ldon = np.arange(1, n + 1, dtype=np.int64)
    ldon[-1] = -1
    zc = zc_all[cells].astype(np.float64)
    zr = zr_all[cells].astype(np.float64)
    area = area_all[cells]
    mode, half = _slope_mode(slope_window_m, slope_drop_m)
    slope = _profiles.window_slope(lrec, ldon, step, zc, half, mode, _max_walk(fm, half))
    chi = _profiles.chi_local(lrec, step, np.log(area / a0), theta)
    order = (np.asarray(network.strahler).ravel()[cells].astype(np.int16)
             if network is not None else np.zeros(n, np.int16))
    row, col = cells // nc, cells % nc
    x, y = fm.terrain.xy_of(row, col)
    return cls(kind=kind, cells=cells, row=row.astype(np.int32), col=col.astype(np.int32),
               x=x, y=y, distance_m=dist, elevation_m=zr, elevation_conditioned_m=zc,
               upstream_area_m2=area, slope_m_per_m=slope, chi_m=chi, strahler_order=order,
               concavity=theta, reference_area_m2=a0,
               slope_method=_slope_description(mode, half))


def _max_walk(fm, half):
    g = fm.terrain.geometry
    return float(max(200.0 * max(g.dx.max(), g.dy_down.max()), 4 * half))


def _slope_description(mode, half):
    if mode == 0:
        return {"slope_window_m": 2 * half}
    return {"slope_drop_m": 2 * half}


def longest_flow_path(fm, outlet_cell, network=None, concavity=DEFAULT_CONCAVITY,
                      reference_area_m2=1.0, slope_window_m=None,
                      slope_drop_m=None) -> FlowPath:
    """The longest D8 flow path upstream of an outlet.

    Parameters
    ----------
    fm : FlowModel
    outlet_cell : int
        Flat index of the outlet cell.
    network : ChannelNetwork, optional
        Supplies the Strahler order of the nodes (0 without it).
    concavity, reference_area_m2 : float
        θ and A0 for the χ column.
    slope_window_m : float, optional
        Length of the window over which local slope is measured (default 20 m).
    slope_drop_m : float, optional
        Measure local slope over this fixed vertical interval instead.

    Returns
    -------
    FlowPath
        Nodes from the outlet to the farthest cell upstream.

    Notes
    -----
    ``fm.upstream_length()`` holds the longest D8 path length upstream of every cell (one
    backward pass over the stack). From the outlet the path goes upstream, always to the
    donor whose own longest upstream path plus the step to the receiver is greatest (ties:
    greater area, then the lower cell index), which ends at the cell farthest from the
    outlet along the flow.

    References
    ----------
    Hack, J. T. (1957). USGS Professional Paper 294-B.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(5.0, 0, -1), np.zeros(3))   # slopes south, 10 m cells
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> longest_flow_path(fm, 4 * 3 + 1).length_m
    40.0
    """
    c = _check_cell(fm, outlet_cell)
    theta, a0 = _check_theta(concavity), _check_a0(reference_area_m2)

    donor = _grid_donor(fm, "donor_longest",
                        lambda: _upstream_length_flat(fm) + fm.receiver_distance(),
                        lambda: _area_flat(fm))
    cells = _profiles.trace_donors(donor, c)
    return _path_profile(fm, cells, "longest_flow_path", network, theta, a0, slope_window_m,
                         slope_drop_m, cls=FlowPath)


def main_stem(fm, outlet_cell, network=None, concavity=DEFAULT_CONCAVITY,
              reference_area_m2=1.0, slope_window_m=None, slope_drop_m=None) -> Profile:
    """The main stem (Hack 1957): from the outlet upstream, always the donor of greatest
    upstream area, to the divide.

    Parameters
    ----------
    fm : FlowModel
    outlet_cell : int
        Flat index of the outlet cell.
    network, concavity, reference_area_m2, slope_window_m, slope_drop_m
        As for :func:`longest_flow_path`.

    Returns
    -------
    Profile
        Nodes from the outlet upstream (ties between donors of equal area go to the one
        with the longer upstream path, then the lower cell index).

    References
    ----------
    Hack, J. T. (1957). Studies of longitudinal stream profiles in Virginia and Maryland.
    USGS Professional Paper 294-B.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(5.0, 0, -1), np.abs(np.arange(5.0) - 2))  # a V valley
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> main_stem(fm, 4 * 5 + 2).col.tolist()  # at the top, equal areas: the longer step
    [2, 2, 2, 2, 1]
    """
    c = _check_cell(fm, outlet_cell)
    theta, a0 = _check_theta(concavity), _check_a0(reference_area_m2)

    donor = _grid_donor(fm, "donor_area", lambda: _area_flat(fm),
                        lambda: _upstream_length_flat(fm) + fm.receiver_distance())
    cells = _profiles.trace_donors(donor, c)
    return _path_profile(fm, cells, "main_stem", network, theta, a0, slope_window_m,
                         slope_drop_m)


# ---------------------------------------------------------------------- channel trees
@dataclass
class _Tree:
    """Channel cells of order ≥ k upstream of the outlets, in stack order (local arrays)."""

    cells: np.ndarray
    lrec: np.ndarray
    ldonor: np.ndarray
    step: np.ndarray
    area: np.ndarray
    zc: np.ndarray
    zr: np.ndarray
    order: np.ndarray
    segment: np.ndarray
    outlet_id: np.ndarray
    distance: np.ndarray
    profile: np.ndarray
    downstream_cell: np.ndarray


def _outlet_arrays(fm, outlet_cell, outlet_ids):
    if outlet_cell is None:
        return None, None
    cells = np.atleast_1d(np.asarray(outlet_cell, dtype=np.int64)).ravel()
    for c in cells:
        _check_cell(fm, c)
    if np.unique(cells).size != cells.size:
        raise InputError("two outlets lie on the same cell; give each cell once")
    ids = (np.arange(1, cells.size + 1, dtype=np.int32) if outlet_ids is None
           else np.atleast_1d(np.asarray(outlet_ids, dtype=np.int32)).ravel())
    if ids.shape != cells.shape:
        raise InputError("give one outlet id per outlet cell")
    if (ids <= 0).any():
        raise InputError("outlet ids must be positive integers")
    return cells, ids


def _build_tree(fm, network, outlet_cell, min_order, outlet_ids=None) -> _Tree:
    if network is None:
        raise InputError("channel profiles need a channel network; build one with "
                         "basinkit.extract_channels(fm, min_area_m2)")
    try:
        k = int(min_order)
    except (TypeError, ValueError):
        raise InputError(f"the minimum Strahler order must be an integer, got "
                         f"{min_order!r}") from None
    if k < 1:
        raise InputError(f"the minimum Strahler order must be 1 or more, got {k}")
    n = fm.receiver.shape[0]
    strahler = np.asarray(network.strahler).ravel()
    if strahler.shape[0] != n:
        raise InputError("the channel network is not on the flow model's grid")
    rec = fm.receiver
    cells_o, ids = _outlet_arrays(fm, outlet_cell, outlet_ids)
    if cells_o is not None:
        # breadth-first from each outlet through the channel cells: work in proportion to
        # the catchment's channel cells, not the grid; other outlets are not entered
        offsets, donors = _donor_lists(fm)
        sel, owner, lrec = _profiles.upstream_cells(offsets, donors, cells_o, strahler, k,
                                                    np.sort(cells_o))
        oid = ids[owner].astype(np.int32)
    else:
        keep = strahler >= k
        sel = fm.stack[keep[fm.stack]].astype(np.int64)
        loc = np.full(n, -1, dtype=np.int32)
        loc[sel] = np.arange(sel.size, dtype=np.int32)
        r = rec[sel].astype(np.int64)
        lrec = np.where(r >= 0, loc[np.maximum(r, 0)], -1).astype(np.int64)
        oid = np.ones(sel.size, dtype=np.int32)
    step = fm.receiver_distance()[sel].astype(np.float64)
    area = _area_flat(fm)[sel]
    zr_all, zc_all = _elevations(fm)
    zc = zc_all[sel].astype(np.float64)
    zr = zr_all[sel].astype(np.float64)
    order = np.arange(sel.size, dtype=np.int64)
    ldonor = _preferred_donor(lrec, order, area, area)
    distance = _profiles.cumulate_upstream(lrec, step)
    profile = _profiles.stream_ids(lrec, ldonor)
    down = np.where(lrec >= 0, sel[np.maximum(lrec, 0)], -1)
    seg = np.asarray(network.segment_id).ravel()[sel].astype(np.int32)
    return _Tree(sel, lrec, ldonor, step, area, zc, zr, strahler[sel].astype(np.int16), seg,
                 oid, distance, profile, down)


def chi_transform(fm, outlet_cell=None, concavity=DEFAULT_CONCAVITY, reference_area_m2=1.0,
                  mask=None) -> np.ndarray:
    """χ (Perron & Royden 2013) of every cell, integrated upstream from base level.

    Parameters
    ----------
    fm : FlowModel
    outlet_cell : int or array of int, optional
        Outlet cell(s): χ = 0 there and is integrated upstream of each; cells draining to no
        outlet get NaN. Default: every grid exit (edge, nodata, base level) is base level.
    concavity : float
        θ (default 0.45).
    reference_area_m2 : float
        A0 (default 1 m²).
    mask : ndarray of bool (nrows, ncols), optional
        Restrict to these cells (must be closed downstream, e.g. a channel mask); NaN
        elsewhere.

    Returns
    -------
    ndarray of float64 (nrows, ncols)
        χ in metres.

    Notes
    -----
    χ = ∫_{x_b}^{x} (A0 / A(x'))^θ dx'. One forward pass over the stack: χ of a cell is χ
    of its receiver plus the step between their centres times (A0/A)^θ, A being the area
    draining through the cell (the discharge the reach carries). On a steady-state profile
    with S = k_s·A^-θ, z = z_b + k_s·A0^-θ·χ, a straight line in χ–z.

    References
    ----------
    Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile
    analysis. Earth Surface Processes and Landforms 38:570-576.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(3.0, 0, -1), np.zeros(1))
    >>> fm = route(terrain_from_array(z, cellsize=1))
    >>> chi_transform(fm, concavity=0.5)[:, 0].round(3).tolist()  # reaches carry 1, 2 m²
    [1.707, 0.707, 0.0]
    """
    theta, a0 = _check_theta(concavity), _check_a0(reference_area_m2)
    n = fm.receiver.shape[0]
    keep = fm.terrain.valid.ravel().copy()
    if mask is not None:
        m = np.asarray(mask, dtype=bool).ravel()
        if m.shape[0] != n:
            raise InputError("the mask is not on the flow model's grid")
        keep &= m
    cells_o, _ = _outlet_arrays(fm, outlet_cell, None)
    if cells_o is not None:
        offsets, donors = _donor_lists(fm)
        sel, _, lrec = _profiles.upstream_cells(offsets, donors, cells_o, keep.view(np.uint8),
                                                1, np.sort(cells_o))
    else:
        sel = fm.stack[keep[fm.stack]].astype(np.int64)
        loc = np.full(n, -1, dtype=np.int32)
        loc[sel] = np.arange(sel.size, dtype=np.int32)
        r = fm.receiver[sel].astype(np.int64)
        lrec = np.where(r >= 0, loc[np.maximum(r, 0)], -1).astype(np.int64)
    step = fm.receiver_distance()[sel]
    chi_sel = _profiles.chi_local(lrec, step, np.log(_area_flat(fm)[sel] / a0), theta)
    out = np.full(n, np.nan)
    out[sel] = chi_sel
    return out.reshape(fm.shape)


def channel_profiles(fm, network, outlet_cell=None, min_order=2,
                     concavity=DEFAULT_CONCAVITY, reference_area_m2=1.0, slope_window_m=None,
                     slope_drop_m=None, outlet_ids=None):
    """Profiles of every channel of Strahler order ≥ ``min_order`` upstream of the outlet(s).

    Parameters
    ----------
    fm : FlowModel
    network : ChannelNetwork
        From :func:`basinkit.analysis.channels.extract_channels` (Strahler order, segments).
    outlet_cell : int or array of int, optional
        Outlet cell(s); default: the whole grid, every exit being base level.
    min_order : int
        Lowest Strahler order kept (default 2).
    concavity, reference_area_m2 : float
        θ and A0 of the χ column (defaults 0.45 and 1 m²).
    slope_window_m : float, optional
        Window length for local slope (default 20 m), centred on each node, reaching
        downstream along the flow and upstream along the donor of greatest area.
    slope_drop_m : float, optional
        Measure local slope over this fixed vertical interval instead.
    outlet_ids : array of int, optional
        Id of each outlet (default 1, 2, ...).

    Returns
    -------
    pandas.DataFrame
        One row per channel node, sorted by outlet, profile and distance: ``outlet_id``,
        ``profile_id`` (streams after Hack 1957: the outlet's main stem continues upstream
        along the donor of greatest area, every other donor starts a profile of its own;
        the profile holding the outlet is the main stem, ``is_main_stem``),
        ``segment_id`` and ``strahler_order`` (from the network), ``cell``, ``row``, ``col``,
        ``x``, ``y``, ``downstream_cell`` (-1 at the outlet), ``distance_from_outlet_m``,
        ``elevation_m``, ``elevation_conditioned_m``, ``upstream_area_m2``,
        ``slope_m_per_m``, ``chi_m``, ``ksn_local_m_per_m`` (S·(A/A0)^θ). θ and A0 are in
        ``DataFrame.attrs``.

    References
    ----------
    Hack, J. T. (1957). USGS Professional Paper 294-B.
    Perron, J. T., Royden, L. (2013). Earth Surface Processes and Landforms 38:570-576.
    Wobus, C., et al. (2006). Tectonics from topography: procedures, promise, and pitfalls.
    GSA Special Paper 398:55-74 (smoothing windows for channel slope).

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.channels import extract_channels
    >>> z = np.add.outer(np.arange(6.0, 0, -1), np.abs(np.arange(5.0) - 2))  # a V valley
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> net = extract_channels(fm, min_area_m2=500)
    >>> nodes = channel_profiles(fm, net, outlet_cell=5 * 5 + 2, min_order=1)
    >>> nodes[["row", "distance_from_outlet_m", "upstream_area_m2"]].values.tolist()
    [[5.0, 0.0, 3000.0], [4.0, 10.0, 1900.0], [3.0, 20.0, 1400.0], [2.0, 30.0, 900.0]]
    >>> from basinkit.analysis.steepness import steepness
    >>> steepness(nodes)["node_count"].tolist()
    [4]
    """
    import pandas as pd

    theta, a0 = _check_theta(concavity), _check_a0(reference_area_m2)
    mode, half = _slope_mode(slope_window_m, slope_drop_m)
    t = _build_tree(fm, network, outlet_cell, min_order, outlet_ids)
    chi = _profiles.chi_local(t.lrec, t.step, np.log(t.area / a0), theta)
    slope = _profiles.window_slope(t.lrec, t.ldonor, t.step, t.zc, half, mode,
                                   _max_walk(fm, half))
    nc = fm.ncols
    row, col = t.cells // nc, t.cells % nc
    x, y = fm.terrain.xy_of(row, col)
    main = np.zeros(t.cells.size, dtype=bool)
    base = t.lrec < 0
    main_ids = np.unique(t.profile[base])
    main[np.isin(t.profile, main_ids)] = True
    o = np.lexsort((t.distance, t.profile, t.outlet_id))
    cols = {
        "outlet_id": t.outlet_id, "profile_id": t.profile, "is_main_stem": main,
        "segment_id": t.segment, "strahler_order": t.order, "cell": t.cells,
        "row": row.astype(np.int32), "col": col.astype(np.int32), "x": x, "y": y,
        "downstream_cell": t.downstream_cell, "distance_from_outlet_m": t.distance,
        "elevation_m": t.zr, "elevation_conditioned_m": t.zc, "upstream_area_m2": t.area,
        "slope_m_per_m": slope, "chi_m": chi,
        "ksn_local_m_per_m": slope * np.exp(theta * np.log(t.area / a0)),
    }
    df = pd.DataFrame({k: v[o] for k, v in cols.items()})
    df.attrs.update({"concavity": theta, "reference_area_m2": a0, "min_order": int(min_order),
                     **_slope_description(mode, half)})
    return df


# ---------------------------------------------------------------------- concavity
