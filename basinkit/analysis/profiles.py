"""Longitudinal profiles, χ, channel steepness, knickpoints, slope–area and Hack's law.

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
    "Profile", "FlowPath", "ConcavityFit", "SlopeAreaFit", "HackFit",
    "longest_flow_path", "main_stem", "channel_profiles", "chi_transform", "fit_concavity",
    "steepness", "find_knickpoints", "slope_area_fit", "hack_law_fit",
    "plot_long_profile", "plot_chi", "plot_slope_area", "DEFAULT_CONCAVITY",
    "DEFAULT_SLOPE_WINDOW_M",
]

#: Default concavity θ (a common reference value, e.g. Wobus et al. 2006; value from memory).
DEFAULT_CONCAVITY = 0.45
#: Default length of the window over which local channel slope is measured (m).
DEFAULT_SLOPE_WINDOW_M = 20.0

COLOURS = {"conditioned": "#23395b", "raw": "#8ea8c3", "base": "#b5533c",
           "knick": "#d1495b", "tributary": "#9bb1a8", "main": "#23395b",
           "fit": "#e09f3e", "bins": "#3c6e71"}


# ---------------------------------------------------------------------- helpers
def _cached(fm, key, make):
    return fm.derived(("profiles", key), make)


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

    def make():
        up = _upstream_length_flat(fm)
        key = up + fm.receiver_distance()
        return _profiles.preferred_donor(fm.receiver, fm.stack, key, _area_flat(fm))

    donor = _cached(fm, "donor_longest", make)
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

    def make():
        tie = _upstream_length_flat(fm) + fm.receiver_distance()
        return _profiles.preferred_donor(fm.receiver, fm.stack, _area_flat(fm), tie)

    donor = _cached(fm, "donor_area", make)
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
    ldonor = _profiles.preferred_donor(lrec, order, area, area)
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
@dataclass
class ConcavityFit:
    """Best-fit concavity θ from the collinearity of tributaries with the main stem.

    Attributes
    ----------
    concavity : float
        θ of least misfit (refined between grid values by a parabola).
    spread : float
        Standard deviation of θ over bootstrap resamples of the tributaries.
    low, high : float
        16th and 84th percentiles of the bootstrap θ.
    thetas, misfit_m : ndarray
        The θ grid and the RMS elevation misfit (m) of tributary nodes about the main
        stem's χ–z curve at each θ.
    tributary_count, node_count : int
    reference_area_m2 : float
    at_grid_edge : bool
        The least misfit, or the bootstrap 16–84 % range, reaches the first or last θ
        tried: the misfit has no clear interior minimum and the fit is not reliable.
    """

    concavity: float
    spread: float
    low: float
    high: float
    thetas: np.ndarray
    misfit_m: np.ndarray
    tributary_count: int
    node_count: int
    reference_area_m2: float
    at_grid_edge: bool = False

    def to_dict(self) -> dict:
        return {"concavity": self.concavity, "at_grid_edge": self.at_grid_edge,
                "concavity_spread": self.spread,
                "concavity_p16": self.low, "concavity_p84": self.high,
                "tributary_count": self.tributary_count, "node_count": self.node_count,
                "reference_area_m2": self.reference_area_m2,
                "misfit_min_m": float(np.nanmin(self.misfit_m))}


def fit_concavity(fm, network, outlet_cell, min_order=1, thetas=None, reference_area_m2=1.0,
                  elevation="conditioned", n_bootstrap=200, seed=0) -> ConcavityFit:
    """Best-fit concavity θ: the value that makes tributaries most collinear with the main
    stem in χ–z space (Perron & Royden 2013).

    Parameters
    ----------
    fm : FlowModel
    network : ChannelNetwork
    outlet_cell : int
        The catchment's outlet.
    min_order : int
        Lowest Strahler order of the channels used (default 1: all).
    thetas : array of float, optional
        θ values tried (default 0.05, 0.06, ..., 1.00).
    reference_area_m2 : float
        A0 (does not change the best θ).
    elevation : {"conditioned", "raw"}
    n_bootstrap : int
        Bootstrap resamples of the tributaries for the spread (0: none).
    seed : int
        Seed of the bootstrap (deterministic output).

    Returns
    -------
    ConcavityFit

    Notes
    -----
    For every θ, χ is computed from the outlet; the main stem (from the outlet along the
    donor of greatest area) gives a χ–z curve, and each tributary node within the main
    stem's χ range is compared with that curve at its own χ (linear interpolation). The
    misfit is the RMS of these elevation differences; at steady state with uniform
    erodibility all channels fall on one line in χ–z at the true θ. The spread comes from
    resampling whole tributaries with replacement (``n_bootstrap`` times) and taking the θ
    of least misfit of each resample.

    References
    ----------
    Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile
    analysis. Earth Surface Processes and Landforms 38:570-576.
    Mudd, S. M., et al. (2018). Evaluation of methods to determine concavity in bedrock
    rivers. Earth Surface Dynamics 6:505-523.
    """
    c = _check_cell(fm, outlet_cell)
    a0 = _check_a0(reference_area_m2)
    th = (np.round(np.arange(0.05, 1.0001, 0.01), 10) if thetas is None
          else np.asarray(thetas, dtype=float).ravel())
    if th.size < 3 or not np.all(np.diff(th) > 0):
        raise InputError("give at least three increasing θ values to try")
    for v in th:
        _check_theta(v)
    t = _build_tree(fm, network, c, min_order)
    if t.cells.size == 0:
        raise OutletError("the outlet is not on a channel of the requested order; move it "
                          "onto the channel or lower the channel threshold")
    z = t.zc if elevation == "conditioned" else t.zr
    main_id = t.profile[t.lrec < 0][0]
    ms = t.profile == main_id
    trib = ~ms
    if not trib.any():
        raise InputError("the catchment has no tributaries on the channel network; lower the "
                         "channel threshold (--min-area) or the minimum order to fit θ")
    groups, gidx = np.unique(t.profile[trib], return_inverse=True)
    ng = groups.size
    sse = np.zeros((th.size, ng))
    cnt = np.zeros((th.size, ng))
    zt = z[trib]
    logr = np.log(t.area / a0)
    ms_idx = np.flatnonzero(ms)
    for i, theta in enumerate(th):
        chi = _profiles.chi_local(t.lrec, t.step, logr, theta)
        xm = chi[ms_idx]
        zm = z[ms_idx]
        ct = chi[trib]
        inside = ct <= xm[-1]
        res = np.where(inside, zt - np.interp(ct, xm, zm), 0.0)
        sse[i] = np.bincount(gidx, weights=res * res, minlength=ng)
        cnt[i] = np.bincount(gidx, weights=inside.astype(float), minlength=ng)
    tot_n = cnt.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mis = np.where(tot_n > 0, sse.sum(axis=1) / tot_n, np.nan)
    if not np.isfinite(mis).any():
        raise InputError("no tributary node lies within the main stem's χ range; the "
                         "catchment is too small to fit θ")
    best = _refine_min(th, mis)
    imin = int(np.nanargmin(mis))
    edge = imin == 0 or imin == th.size - 1
    boots = np.zeros(0)
    if n_bootstrap and ng > 1:
        rng = np.random.default_rng(seed)
        w = rng.multinomial(ng, np.full(ng, 1.0 / ng), size=int(n_bootstrap)).astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            m = (w @ sse.T) / (w @ cnt.T)
        m = np.where(np.isfinite(m), m, np.inf)
        boots = th[np.argmin(m, axis=1)]
    if boots.size:
        spread, lo, hi = (float(np.std(boots)), float(np.percentile(boots, 16)),
                          float(np.percentile(boots, 84)))
        edge = edge or lo <= th[0] or hi >= th[-1]
    else:
        spread, lo, hi = float("nan"), float("nan"), float("nan")
    return ConcavityFit(concavity=float(best), spread=spread, low=lo, high=hi, thetas=th,
                        misfit_m=np.sqrt(mis), tributary_count=int(ng),
                        node_count=int(t.cells.size), reference_area_m2=a0,
                        at_grid_edge=bool(edge))


def _refine_min(x, y):
    yy = np.where(np.isfinite(y), y, np.inf)
    i = int(np.argmin(yy))
    if 0 < i < x.size - 1 and np.isfinite(yy[i - 1]) and np.isfinite(yy[i + 1]):
        y0, y1, y2 = yy[i - 1], yy[i], yy[i + 1]
        den = y0 - 2 * y1 + y2
        if den > 0:
            h = (x[i + 1] - x[i - 1]) / 2.0
            off = 0.5 * (y0 - y2) / den * h
            return float(np.clip(x[i] + off, x[i - 1], x[i + 1]))
    return float(x[i])


# ---------------------------------------------------------------------- steepness
def steepness(nodes, by="segment_id", elevation="elevation_conditioned_m"):
    """Normalised steepness k_sn of each segment (or profile) as the slope of elevation
    against χ (Whipple & Tucker 1999; Perron & Royden 2013).

    Parameters
    ----------
    nodes : pandas.DataFrame
        As returned by :func:`channel_profiles` (columns ``cell``, ``downstream_cell``,
        ``chi_m``, the elevation column and ``by``).
    by : str
        Grouping column: ``"segment_id"`` (default) or ``"profile_id"``.
    elevation : str
        Elevation column (default the conditioned surface).

    Returns
    -------
    pandas.DataFrame
        One row per group: ``by``, ``outlet_id``, ``profile_id``/``segment_id`` (first
        node's), ``strahler_order`` (highest), ``ksn_m_per_m`` (least-squares slope of z on
        χ over the group's nodes and the node just downstream of it), ``ksn_stderr_m_per_m``,
        ``r2``, ``node_count``, ``chi_min_m``, ``chi_max_m``, ``elevation_min_m``,
        ``elevation_max_m``, ``concavity``, ``reference_area_m2``. Groups with fewer than
        two nodes get NaN.

    Notes
    -----
    With S = k_s·A^-θ, z = z_b + k_s·A0^-θ·χ, so dz/dχ = k_s·A0^-θ = k_sn. With A0 = 1 m²
    the value equals k_s in m^(2θ).

    References
    ----------
    Whipple, K. X., Tucker, G. E. (1999). Journal of Geophysical Research 104:17661-17674.
    Perron, J. T., Royden, L. (2013). Earth Surface Processes and Landforms 38:570-576.

    Examples
    --------
    See :func:`channel_profiles`; ``steepness(nodes, by="profile_id")`` gives one k_sn per
    profile instead of per segment.
    """
    import pandas as pd

    need = {"cell", "downstream_cell", "chi_m", elevation, by}
    miss = need - set(nodes.columns)
    if miss:
        raise InputError(f"the node table lacks the columns {sorted(miss)}; make it with "
                         "channel_profiles()")
    key = nodes[by].to_numpy()
    ok = key > 0
    x = nodes["chi_m"].to_numpy(dtype=float)
    y = nodes[elevation].to_numpy(dtype=float)
    # the node just downstream of each group's lowest node (a junction or the outlet)
    pos = pd.Index(nodes["cell"].to_numpy()).get_indexer(nodes["downstream_cell"].to_numpy())
    has = (pos >= 0) & ok
    has[has] = key[pos[has]] != key[has]
    gkeys = np.unique(key[ok])
    gi = np.searchsorted(gkeys, key)
    ai = np.concatenate([gi[ok], gi[has]])
    ax = np.concatenate([x[ok], x[pos[has]]])
    ay = np.concatenate([y[ok], y[pos[has]]])
    ng = gkeys.size
    cnt = np.bincount(ai, minlength=ng).astype(float)

    def s(w):
        return np.bincount(ai, weights=w, minlength=ng)

    with np.errstate(invalid="ignore", divide="ignore"):
        mx = s(ax) / cnt
        my = s(ay) / cnt
        dx = ax - mx[ai]
        dy = ay - my[ai]
        sxx, sxy, syy = s(dx * dx), s(dx * dy), s(dy * dy)
        slope = np.where((cnt >= 2) & (sxx > 0), sxy / sxx, np.nan)
        sse = np.maximum(syy - slope * sxy, 0.0)
        r2 = np.where(syy > 0, 1.0 - sse / syy, 1.0)
        stderr = np.where(cnt > 2, np.sqrt(sse / np.maximum(cnt - 2, 1) / sxx), np.nan)
    out = pd.DataFrame({by: gkeys})
    gok = gi[ok]
    _, first = np.unique(gok, return_index=True)  # first node of each group (table order)
    for col in ("outlet_id", "profile_id", "segment_id"):
        if col in nodes.columns and col != by:
            out[col] = nodes[col].to_numpy()[ok][first]
    if "strahler_order" in nodes.columns and ng:
        so = nodes["strahler_order"].to_numpy()[ok]
        o1 = np.argsort(gok, kind="stable")
        out["strahler_order"] = np.maximum.reduceat(so[o1], _starts(gok, ng))
    out["ksn_m_per_m"] = slope
    out["ksn_stderr_m_per_m"] = stderr
    out["r2"] = r2
    out["node_count"] = cnt.astype(np.int32)
    if ng:
        o2 = np.argsort(ai, kind="stable")
        st2 = _starts(ai, ng)
        xs, ys = ax[o2], ay[o2]
        out["chi_min_m"] = np.minimum.reduceat(xs, st2)
        out["chi_max_m"] = np.maximum.reduceat(xs, st2)
        out["elevation_min_m"] = np.minimum.reduceat(ys, st2)
        out["elevation_max_m"] = np.maximum.reduceat(ys, st2)
    else:
        for c in ("chi_min_m", "chi_max_m", "elevation_min_m", "elevation_max_m"):
            out[c] = np.zeros(0)
    out["concavity"] = nodes.attrs.get("concavity", np.nan)
    out["reference_area_m2"] = nodes.attrs.get("reference_area_m2", np.nan)
    return out


def _starts(ai, ng):
    c = np.bincount(ai, minlength=ng)
    return np.concatenate([[0], np.cumsum(c)[:-1]]).astype(np.int64)


# ---------------------------------------------------------------------- knickpoints
def find_knickpoints(nodes, by="profile_id", elevation="elevation_conditioned_m",
                     min_nodes=5, vertical_precision_m=1.0, min_change=0.3,
                     min_relief_m=None, max_per_profile=20):
    """Knickpoints as breaks of slope in the χ–z profile (segmented regression).

    Parameters
    ----------
    nodes : pandas.DataFrame or Profile
        Channel nodes from :func:`channel_profiles` (grouped by ``by``) or a single
        :class:`Profile` (for example the main stem).
    by : str
        Grouping column of a node table.
    elevation : str
        Elevation column (default the conditioned surface).
    min_nodes : int
        Fewest nodes on each side of a break.
    vertical_precision_m : float
        Vertical precision of the DEM (m): residuals below it are not counted as misfit.
    min_change : float
        Smallest relative change of steepness, ``|k_above - k_below| / max(|k|)``.
    min_relief_m : float, optional
        Smallest elevation by which the reach above departs from the line below at its
        top end (default 3 × ``vertical_precision_m``).
    max_per_profile : int

    Returns
    -------
    pandas.DataFrame
        One row per knickpoint: the grouping column (when a table is given), ``outlet_id``,
        ``row``, ``col``, ``x``, ``y``, ``distance_from_outlet_m``, ``elevation_m``,
        ``chi_m``, ``upstream_area_m2``, ``ksn_below_m_per_m``, ``ksn_above_m_per_m``,
        ``ksn_change_ratio`` (above / below), ``step_m`` (offset between the two pieces at
        the break: the height of a vertical step), ``relief_m`` (magnitude: elevation of
        the reach's top above (+) or below (-) the extension of the line below the
        knickpoint), ``kind`` (``"steeper upstream"`` or ``"gentler upstream"`` for
        slope breaks, ``"vertical step up"``/``"vertical step down"`` for offsets without
        a change of steepness, placed at the top of the step) and, when the table
        has both elevations, ``in_filled_depression`` (the conditioned surface lies more
        than the vertical precision above the DEM there: the break may be the edge of a
        filled depression rather than of the channel).

    Notes
    -----
    Each profile, ordered by χ, is fitted by a two-piece line at every possible break
    (segmented regression, the pieces free to change slope and to be offset); the best
    break is kept when the Bayesian information criterion (Schwarz 1978) prefers it to a
    single line (residual variance floored at the square of the vertical precision) and
    the change of steepness (or the offset) and the relief exceed their thresholds. Each
    piece is searched again (binary segmentation). In χ–z a steady-state channel of uniform
    k_sn is one straight line (Perron & Royden 2013), so breaks mark slope-break and
    vertical-step knickpoints in the sense of Kirby & Whipple (2012).

    References
    ----------
    Perron, J. T., Royden, L. (2013). Earth Surface Processes and Landforms 38:570-576.
    Kirby, E., Whipple, K. X. (2012). Expression of active tectonics in erosional
    landscapes. Journal of Structural Geology 44:54-75.
    Schwarz, G. (1978). Estimating the dimension of a model. Annals of Statistics 6:461-464.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(30.0, 0, -1), np.abs(np.arange(5.0) - 2))  # a V valley
    >>> z[:15] += 20  # a 20 m step in its upper half
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> kp = find_knickpoints(main_stem(fm, 29 * 5 + 2, concavity=0.0))  # χ = distance
    >>> kp[["row", "kind"]].values.tolist(), round(float(kp["step_m"].iloc[0]))
    ([[14, 'vertical step up']], 20)
    """
    import pandas as pd

    if isinstance(nodes, Profile):
        df = nodes.to_frame()
        df["profile_id"] = 1
        df.attrs.update(concavity=nodes.concavity)
        by = "profile_id"
        single = True
    else:
        df = nodes
        single = False
    if int(min_nodes) < 2:
        raise InputError("min_nodes must be at least 2")
    prec = float(vertical_precision_m)
    if not prec > 0:
        raise InputError("the vertical precision must be positive (m)")
    relief = 3.0 * prec if min_relief_m is None else float(min_relief_m)
    cols = ["row", "col", "x", "y", "distance_from_outlet_m", elevation, "chi_m",
            "upstream_area_m2"]
    miss = set(cols + [by]) - set(df.columns)
    if miss:
        raise InputError(f"the node table lacks the columns {sorted(miss)}")
    out = []
    key = df[by].to_numpy()
    order = np.lexsort((df["chi_m"].to_numpy(), key))
    ks = key[order]
    starts = np.flatnonzero(np.r_[True, ks[1:] != ks[:-1]])
    ends = np.r_[starts[1:], ks.size]
    chi_all = df["chi_m"].to_numpy(dtype=float)[order]
    z_all = df[elevation].to_numpy(dtype=float)[order]
    for s0, s1 in zip(starts, ends):
        if s1 - s0 < 2 * int(min_nodes) + 1:
            continue
        xs = np.ascontiguousarray(chi_all[s0:s1])
        ys = np.ascontiguousarray(z_all[s0:s1])
        if not (np.isfinite(xs).all() and np.isfinite(ys).all()):
            continue
        k, kb, ka, kd, kr = _profiles.knickpoints_one(xs, ys, int(min_nodes), prec * prec,
                                                      float(min_change), relief,
                                                      int(max_per_profile))
        for j in range(k.size):
            ref = max(abs(kb[j]), abs(ka[j]))
            is_step = abs(kd[j]) >= relief and not (ref > 0 and
                                                   abs(ka[j] - kb[j]) >= min_change * ref)
            # a vertical step is placed at its top (the first node of the upper piece)
            node = s0 + k[j] + (1 if is_step and k[j] + 1 < s1 - s0 else 0)
            out.append((order[node], kb[j], ka[j], kr[j], kd[j], is_step))
    cols_out = ([] if single else [by]) + (["outlet_id"] if "outlet_id" in df.columns
                                           else []) + cols
    if not out:
        res = pd.DataFrame({c: pd.Series(dtype=float) for c in cols_out})
        for c in ("ksn_below_m_per_m", "ksn_above_m_per_m", "ksn_change_ratio", "step_m",
                  "relief_m"):
            res[c] = pd.Series(dtype=float)
        res["kind"] = pd.Series(dtype=object)
        if {"elevation_m", "elevation_conditioned_m"} <= set(df.columns):
            res["in_filled_depression"] = pd.Series(dtype=bool)
        return res.rename(columns={elevation: "elevation_m"})
    idx = np.array([o[0] for o in out])
    res = df.iloc[idx][cols_out].reset_index(drop=True)
    kb = np.array([o[1] for o in out])
    ka = np.array([o[2] for o in out])
    res["ksn_below_m_per_m"] = kb
    res["ksn_above_m_per_m"] = ka
    with np.errstate(divide="ignore", invalid="ignore"):
        res["ksn_change_ratio"] = ka / kb
    res["step_m"] = np.array([o[4] for o in out])
    res["relief_m"] = np.array([o[3] for o in out])
    steps = np.array([o[5] for o in out], dtype=bool)
    res["kind"] = np.where(steps, np.where(res["step_m"] > 0, "vertical step up",
                                           "vertical step down"),
                           np.where(ka > kb, "steeper upstream", "gentler upstream"))
    if {"elevation_m", "elevation_conditioned_m"} <= set(df.columns):
        raised = (df["elevation_conditioned_m"].to_numpy(float)[idx]
                  - df["elevation_m"].to_numpy(float)[idx])
        res["in_filled_depression"] = raised > prec
    return res.rename(columns={elevation: "elevation_m"})


# ---------------------------------------------------------------------- regressions
@dataclass
class SlopeAreaFit:
    """S = k_s·A^-θ fitted in log space (Flint 1974).

    Attributes
    ----------
    steepness_index : float
        k_s (m^(2θ)).
    concavity : float
        θ.
    steepness_index_ci, concavity_ci : tuple of float
        Confidence intervals at ``confidence``.
    r2 : float
    point_count : int
    confidence : float
    binned : bool
        Whether the fit used log-bin medians rather than all points.
    """

    steepness_index: float
    concavity: float
    steepness_index_ci: tuple
    concavity_ci: tuple
    r2: float
    point_count: int
    confidence: float
    binned: bool

    def predict(self, area_m2):
        return self.steepness_index * np.asarray(area_m2, dtype=float) ** -self.concavity

    def to_dict(self) -> dict:
        return {"steepness_index_m2theta": self.steepness_index,
                "steepness_index_ci_low": self.steepness_index_ci[0],
                "steepness_index_ci_high": self.steepness_index_ci[1],
                "concavity": self.concavity, "concavity_ci_low": self.concavity_ci[0],
                "concavity_ci_high": self.concavity_ci[1], "r2": self.r2,
                "point_count": self.point_count, "confidence": self.confidence,
                "binned": self.binned}


def _loglog_fit(x, y, confidence):
    from scipy import stats

    lx, ly = np.log10(x), np.log10(y)
    fit = stats.linregress(lx, ly)
    tcrit = stats.t.ppf(0.5 + confidence / 2.0, lx.size - 2)
    return fit, tcrit


def _log_bins(area, slope, bins):
    la = np.log10(area)
    edges = np.linspace(la.min(), la.max(), int(bins) + 1)
    which = np.clip(np.digitize(la, edges) - 1, 0, int(bins) - 1)
    xa, ys = [], []
    for b in range(int(bins)):
        m = which == b
        if m.sum() >= 3:
            xa.append(10 ** np.median(la[m]))
            ys.append(10 ** np.median(np.log10(slope[m])))
    return np.array(xa), np.array(ys)


def slope_area_fit(area_m2, slope_m_per_m, confidence=0.95, bins=None) -> SlopeAreaFit:
    """Slope–area regression S = k_s·A^-θ (Flint 1974) by least squares in log space.

    Parameters
    ----------
    area_m2, slope_m_per_m : array_like
        Upstream areas and local channel slopes; pairs with S ≤ 0, A ≤ 0 or NaN are left
        out.
    confidence : float
        Level of the confidence intervals (default 0.95; Student t on the regression's
        standard errors, scipy.stats.linregress).
    bins : int, optional
        Fit the medians of log S in this many equal bins of log A (with at least three
        points) instead of all points.

    Returns
    -------
    SlopeAreaFit

    References
    ----------
    Flint, J. J. (1974). Stream gradient as a function of order, magnitude, and discharge.
    Water Resources Research 10:969-973.
    Montgomery, D. R., Dietrich, W. E. (1988). Where do channels begin? Nature 336:232-234.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.logspace(4, 8, 50)
    >>> f = slope_area_fit(a, 30.0 * a ** -0.5)
    >>> round(f.concavity, 6), round(f.steepness_index, 6)
    (0.5, 30.0)
    """
    a = np.asarray(area_m2, dtype=float).ravel()
    s = np.asarray(slope_m_per_m, dtype=float).ravel()
    if a.shape != s.shape:
        raise InputError("give one slope per area")
    if not 0 < confidence < 1:
        raise InputError("the confidence level must lie between 0 and 1")
    ok = np.isfinite(a) & np.isfinite(s) & (a > 0) & (s > 0)
    a, s = a[ok], s[ok]
    if bins is not None and a.size:
        a, s = _log_bins(a, s, bins)
    if a.size < 3 or np.ptp(np.log10(a)) == 0:
        raise InputError(f"a slope–area fit needs at least three points with positive slope "
                         f"over a range of areas; got {a.size}")
    fit, tc = _loglog_fit(a, s, confidence)
    theta = -fit.slope
    return SlopeAreaFit(
        steepness_index=float(10 ** fit.intercept), concavity=float(theta),
        steepness_index_ci=(float(10 ** (fit.intercept - tc * fit.intercept_stderr)),
                            float(10 ** (fit.intercept + tc * fit.intercept_stderr))),
        concavity_ci=(float(theta - tc * fit.stderr), float(theta + tc * fit.stderr)),
        r2=float(fit.rvalue ** 2), point_count=int(a.size), confidence=float(confidence),
        binned=bins is not None)


@dataclass
class HackFit:
    """Hack's law L = c·A^h (Hack 1957) fitted in log space.

    Attributes
    ----------
    coefficient : float
        c, for L in metres and A in square metres.
    exponent : float
        h (Hack 1957 found about 0.6).
    coefficient_ci, exponent_ci : tuple of float
    r2 : float
    point_count : int
    confidence : float
    """

    coefficient: float
    exponent: float
    coefficient_ci: tuple
    exponent_ci: tuple
    r2: float
    point_count: int
    confidence: float

    def to_dict(self) -> dict:
        return {"hack_coefficient": self.coefficient, "hack_exponent": self.exponent,
                "hack_exponent_ci_low": self.exponent_ci[0],
                "hack_exponent_ci_high": self.exponent_ci[1],
                "hack_coefficient_ci_low": self.coefficient_ci[0],
                "hack_coefficient_ci_high": self.coefficient_ci[1], "r2": self.r2,
                "point_count": self.point_count, "confidence": self.confidence}


def hack_law_fit(fm, network, outlet_cell=None, confidence=0.95) -> HackFit:
    """Hack's law L = c·A^h fitted across a channel network (Hack 1957).

    Parameters
    ----------
    fm : FlowModel
    network : ChannelNetwork
    outlet_cell : int or array of int, optional
        Keep only segments upstream of these outlets (default: the whole network).
    confidence : float
        Level of the confidence intervals.

    Returns
    -------
    HackFit

    Notes
    -----
    One point per channel segment, at its lowest cell: L is the longest flow-path length
    upstream of that cell (``fm.upstream_length()``, metres on the ground) and A its D8
    upstream area (m²). The fit is least squares of log L on log A.

    References
    ----------
    Hack, J. T. (1957). Studies of longitudinal stream profiles in Virginia and Maryland.
    USGS Professional Paper 294-B.

    Examples
    --------
    >>> from basinkit.analysis.channels import extract_channels
    >>> # fm: a FlowModel of a real DEM
    >>> fit = hack_law_fit(fm, extract_channels(fm, 1e6))  # doctest: +SKIP
    >>> fit.exponent  # doctest: +SKIP
    0.54
    """
    if network is None:
        raise InputError("Hack's law needs a channel network (extract_channels)")
    seg = network.segments
    nc = fm.ncols
    bottom = (seg["bottom_row"].to_numpy(np.int64) * nc + seg["bottom_col"].to_numpy(np.int64))
    if outlet_cell is not None:
        cells_o, _ = _outlet_arrays(fm, outlet_cell, None)
        offsets, donors = _donor_lists(fm)
        mask = np.ascontiguousarray(network.mask, dtype=bool).ravel().view(np.uint8)
        cells, _, _ = _profiles.upstream_cells(offsets, donors, cells_o, mask, 1,
                                               np.sort(cells_o))
        bottom = bottom[np.isin(bottom, cells)]
    L = _upstream_length_flat(fm)[bottom]
    A = _area_flat(fm)[bottom]
    ok = (L > 0) & (A > 0) & np.isfinite(A)
    if ok.sum() < 3:
        raise InputError("Hack's law needs at least three channel segments; lower the "
                         "channel threshold")
    fit, tc = _loglog_fit(A[ok], L[ok], confidence)
    return HackFit(coefficient=float(10 ** fit.intercept), exponent=float(fit.slope),
                   coefficient_ci=(float(10 ** (fit.intercept - tc * fit.intercept_stderr)),
                                   float(10 ** (fit.intercept + tc * fit.intercept_stderr))),
                   exponent_ci=(float(fit.slope - tc * fit.stderr),
                                float(fit.slope + tc * fit.stderr)),
                   r2=float(fit.rvalue ** 2), point_count=int(ok.sum()),
                   confidence=float(confidence))


# ---------------------------------------------------------------------- figures
def _axes(ax, figsize=(7.5, 4.5)):
    # a bare Figure (no pyplot): no GUI backend is touched, saving uses Agg
    if ax is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=figsize, dpi=120)
        ax = fig.add_subplot(1, 1, 1)
    return ax.figure, ax


def _style(ax):
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    ax.grid(True, color="#e6e6e6", linewidth=0.6)
    ax.set_axisbelow(True)


def plot_long_profile(profile, ax=None, knickpoints=None, title=None):
    """Long profile: elevation against distance from the outlet, raw and conditioned DEM,
    base level marked.

    Parameters
    ----------
    profile : Profile
        E.g. from :func:`longest_flow_path` or :func:`main_stem`.
    ax : matplotlib Axes, optional
    knickpoints : pandas.DataFrame, optional
        From :func:`find_knickpoints` (columns ``distance_from_outlet_m``, ``elevation_m``).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _axes(ax)
    d = profile.distance_m
    km = profile.length_m >= 5000
    dd = d / 1000.0 if km else d
    ax.plot(dd, profile.elevation_m, color=COLOURS["raw"], lw=1.0, label="DEM as read")
    ax.plot(dd, profile.elevation_conditioned_m, color=COLOURS["conditioned"], lw=1.6,
            label="conditioned DEM")
    zb = float(profile.elevation_conditioned_m[0])
    ax.axhline(zb, color=COLOURS["base"], lw=0.9, ls="--",
               label=f"base level at outlet ({zb:.1f} m)")
    ax.plot([0], [zb], marker="v", color=COLOURS["base"], ms=7, ls="none")
    if knickpoints is not None and len(knickpoints):
        kd = knickpoints["distance_from_outlet_m"].to_numpy()
        ax.plot(kd / 1000.0 if km else kd, knickpoints["elevation_m"], ls="none",
                marker="o", mfc="white", mec=COLOURS["knick"], mew=1.6, ms=7,
                label="knickpoint")
    ax.set_xlabel("distance from outlet (km)" if km else "distance from outlet (m)")
    ax.set_ylabel("elevation (m)")
    ax.set_xlim(left=0)
    ax.set_title(title or profile.kind.replace("_", " "))
    ax.legend(frameon=False, loc="upper left", fontsize=8)
    _style(ax)
    fig.tight_layout()
    return fig


def plot_chi(nodes, ax=None, knickpoints=None, steepness_table=None,
             elevation="elevation_conditioned_m", title=None):
    """χ–elevation plot: tributaries in a light colour, the main stem dark.

    Parameters
    ----------
    nodes : pandas.DataFrame or Profile
        From :func:`channel_profiles` (uses ``is_main_stem``) or a single Profile.
    ax : matplotlib Axes, optional
    knickpoints : pandas.DataFrame, optional
    steepness_table : pandas.DataFrame, optional
        Unused columns aside, its median ``ksn_m_per_m`` is quoted in the legend.
    elevation : str
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _axes(ax)
    if isinstance(nodes, Profile):
        ax.plot(nodes.chi_m, nodes.elevation_conditioned_m, color=COLOURS["main"], lw=1.6,
                label="profile")
        theta = nodes.concavity
    else:
        theta = nodes.attrs.get("concavity", np.nan)
        trib = nodes[~nodes["is_main_stem"]]
        if len(trib):
            ax.scatter(trib["chi_m"], trib[elevation], s=3, color=COLOURS["tributary"],
                       linewidths=0, rasterized=True)
            ax.plot([], [], ls="none", marker="o", ms=4, color=COLOURS["tributary"],
                    label="tributaries")
        ms = nodes[nodes["is_main_stem"]].sort_values("chi_m")
        for _, g in ms.groupby("outlet_id"):
            ax.plot(g["chi_m"], g[elevation], color=COLOURS["main"], lw=1.6,
                    label="main stem" if _ == ms["outlet_id"].iloc[0] else None)
    if knickpoints is not None and len(knickpoints):
        ax.plot(knickpoints["chi_m"], knickpoints["elevation_m"], ls="none", marker="o",
                mfc="white", mec=COLOURS["knick"], mew=1.6, ms=7, label="knickpoint")
    if steepness_table is not None and len(steepness_table):
        med = float(np.nanmedian(steepness_table["ksn_m_per_m"]))
        ax.plot([], [], " ", label=f"median k_sn {med:.3g}")
    ax.set_xlabel(f"χ (m), θ = {theta:.2f}")
    ax.set_ylabel("elevation (m)")
    ax.set_xlim(left=0)
    ax.set_title(title or "χ–elevation")
    ax.legend(frameon=False, loc="upper left", fontsize=8)
    _style(ax)
    fig.tight_layout()
    return fig


def plot_slope_area(area_m2, slope_m_per_m, fit=None, ax=None, bins=20, title=None):
    """Slope–area plot on log axes with log-bin medians and the fitted power law.

    Parameters
    ----------
    area_m2, slope_m_per_m : array_like
    fit : SlopeAreaFit, optional
        Drawn as a line with its parameters in the legend.
    ax : matplotlib Axes, optional
    bins : int
        Number of log-area bins for the medians (0: none).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _axes(ax)
    a = np.asarray(area_m2, dtype=float)
    s = np.asarray(slope_m_per_m, dtype=float)
    ok = np.isfinite(a) & np.isfinite(s) & (a > 0) & (s > 0)
    a, s = a[ok], s[ok]
    if a.size:
        ax.scatter(a, s, s=3, color=COLOURS["tributary"], linewidths=0, rasterized=True)
        ax.plot([], [], ls="none", marker="o", ms=4, color=COLOURS["tributary"],
                label="channel nodes")
        if bins:
            ba, bs = _log_bins(a, s, bins)
            if ba.size:
                ax.plot(ba, bs, ls="none", marker="s", ms=5, color=COLOURS["bins"],
                        label="median per area bin")
    if fit is not None and a.size:
        xa = np.logspace(np.log10(a.min()), np.log10(a.max()), 50)
        lo, hi = fit.concavity_ci
        ax.plot(xa, fit.predict(xa), color=COLOURS["fit"], lw=2,
                label=(f"fit $S = {fit.steepness_index:.3g}\\,A^{{-{fit.concavity:.3f}}}$, "
                       f"θ {lo:.2f} to {hi:.2f} ({100 * fit.confidence:.0f} %)"))
    ax.set_xscale("log")
    ax.set_yscale("log")
    from matplotlib.ticker import NullFormatter

    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.yaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("upstream area (m²)")
    ax.set_ylabel("channel slope (m/m)")
    ax.set_title(title or "slope–area")
    ax.legend(frameon=False, loc="lower left", fontsize=8)
    _style(ax)
    fig.tight_layout()
    return fig
