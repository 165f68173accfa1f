"""Flow routing: the FlowModel (receivers, stack, cell geometry) and ``route``."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import _d8, _stack
from ..conditioning import ConditionSummary, condition, exit_cells
from ..errors import InputError
from ..terrain.memory import ROUTE_BYTES_PER_CELL, check_memory
from ..terrain.model import Terrain

__all__ = ["FlowModel", "route", "D8_NODATA", "D8_NO_OUTFLOW"]

D8_NODATA = -32768
D8_NO_OUTFLOW = -1
ROUTING_METHODS = ("d8", "dinf", "mfd")
# working memory D∞ and MFD need on top of D8 (two or eight receivers and shares per cell)
EXTRA_BYTES_PER_CELL = {"dinf": 32, "mfd": 75}

@dataclass
class FlowModel:
    """Everything later steps need about how water moves over a conditioned DEM.

    Attributes
    ----------
    terrain : Terrain
        The conditioned surface (elevation as routed).
    receiver : ndarray of int32 (ncells,)
        D8 receiver (flat index) of every cell: -1 = water leaves the grid here, -2 = nodata.
        Always present: catchments, channels and profiles follow it.
    stack : ndarray of int32
        Valid cells ordered so that every cell comes after its receiver
        (Braun & Willett 2013). Forward passes go downstream to upstream, backward passes
        upstream to downstream.
    method : str
        ``d8``, ``dinf`` or ``mfd``: the routing used for accumulation.
    input_elevation : ndarray of float32 or None
        The DEM before conditioning (for profiles and reports).
    multi : tuple or None
        For D∞ and MFD: (receivers (ncells, m) int32 with -1 for none, fractions (ncells, m)
        float32 summing to 1, topological order int32 upstream→downstream is reversed).
    dinf_azimuth : ndarray of float32 or None
        D∞ flow azimuth (degrees clockwise from north), NaN where none.
    summary : ConditionSummary or None
    parameters : dict
    """

    terrain: Terrain
    receiver: np.ndarray
    stack: np.ndarray
    method: str = "d8"
    input_elevation: np.ndarray | None = None
    multi: tuple | None = None
    dinf_azimuth: np.ndarray | None = None
    summary: ConditionSummary | None = None
    parameters: dict = field(default_factory=dict)
    meta: dict = field(default_factory=dict)
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def shape(self):
        return self.terrain.shape

    @property
    def ncols(self):
        return self.terrain.shape[1]

    def direction_d8(self) -> np.ndarray:
        """D8 directions as int16 azimuth degrees (0..315), -1 no outflow, -32768 nodata."""
        return _d8.receivers_to_azimuth(self.receiver, self.ncols).reshape(self.shape)

    def accumulation(self, weights=None, unit: str = "cells", method: str | None = None):
        """Flow accumulation.

        Parameters
        ----------
        weights : ndarray (nrows, ncols), optional
            Per-cell quantity to accumulate (e.g. runoff depth in m × cell area gives m³);
            NaN counts as 0. Overrides ``unit``.
        unit : {"cells", "m2"}
            Count of cells draining through each cell (itself included), or upstream area
            in square metres on the ground.
        method : {"d8", "dinf", "mfd"}, optional
            Defaults to the model's routing method.

        Returns
        -------
        ndarray (nrows, ncols)
            float64 (int32 for D8 cell counts); NaN on nodata. Read-only: the model keeps it
            for every later catchment, channel and profile (copy it to change it); a weighted
            accumulation is a new array of the caller's.
        """
        method = method or self.method
        if method not in ROUTING_METHODS:
            raise InputError(f"unknown routing method {method!r}; use d8, dinf or mfd")
        key = (method, unit) if weights is None else None
        if key is not None and key in self._cache:
            return _read_only(self._cache[key])
        n = self.receiver.shape[0]
        if weights is not None:
            w = np.asarray(weights, dtype=np.float64)
            if w.shape != self.shape:
                raise InputError(f"the weight raster has shape {w.shape}, the DEM "
                                 f"{self.shape}; put it on the DEM's grid first")
            w = np.where(self.terrain.valid & np.isfinite(w), w, 0.0).ravel()
        elif unit in ("cells", "m2"):
            w = None
        else:
            raise InputError(f"unknown accumulation unit {unit!r}; use cells or m2")
        if method == "d8":
            if weights is not None:
                acc = _stack.accumulate(self.receiver, self.stack, w)
            elif unit == "cells":
                acc = _stack.accumulate_count(self.receiver, self.stack, n)
            else:
                acc = _stack.accumulate_area(self.receiver, self.stack, self.ncols,
                                          self.terrain.geometry.area)
        else:
            from ._multi import accumulate_multi
            from .multi import multi_for

            if w is None:
                w = (np.ones(n) if unit == "cells"
                     else np.repeat(self.terrain.geometry.area, self.ncols))
                w = np.where(self.terrain.valid.ravel(), w, 0.0)
            rec, frac, order = multi_for(self, method)
            acc = accumulate_multi(rec, frac, order, w)
        acc = acc.reshape(self.shape)
        if acc.dtype.kind == "f":
            acc[~self.terrain.valid] = np.nan
        if key is None:
            return acc  # weighted: a new array of the caller's
        return self.derived(key, lambda: acc)

    def release(self, group) -> int:
        """Drop the derived arrays whose key starts with ``group`` (e.g. ``"profiles"``),
        to free their memory once no later step needs them; they are made again if asked
        for. Returns the bytes released."""
        keys = [k for k in self._cache if isinstance(k, tuple) and k and k[0] == group]
        freed = 0
        for k in keys:
            a = self._cache.pop(k)
            for x in (a if isinstance(a, tuple) else (a,)):
                freed += int(getattr(x, "nbytes", 0))
        return freed

    def derived(self, key, make):
        """An array derived from this model, computed once by ``make()`` and kept.

        The model owns its derived arrays and hands them out read-only, so that no caller
        can change what later catchments, channels and profiles see (copy to modify).
        """
        if key not in self._cache:
            a = make()
            if isinstance(a, np.ndarray):
                a.flags.writeable = False
            self._cache[key] = a
        return _read_only(self._cache[key])

    def receiver_distance(self) -> np.ndarray:
        """Distance (m, on the ground) from each cell centre to its D8 receiver, flat
        (read-only)."""
        return self.derived("step", lambda: _d8.receiver_distance(
            self.receiver, self.ncols, self.terrain.geometry.neighbour_distances()))

    def upstream_length(self) -> np.ndarray:
        """Length (m) of the longest D8 flow path upstream of each cell, as a grid."""
        return _d8.upstream_length(self.receiver, self.stack,
                                   self.receiver_distance()).reshape(self.shape)

    def downstream_length(self) -> np.ndarray:
        """D8 flow distance (m) from each cell to where its water leaves the grid."""
        return _d8.downstream_length(self.receiver, self.stack,
                                     self.receiver_distance()).reshape(self.shape)

    def label_outlets(self, outlet_cells, labels=None) -> np.ndarray:
        """Label every cell with the nearest outlet downstream of it (0: none), in one pass
        over the stack whatever the number of outlets. Returns an int32 grid.

        Parameters
        ----------
        outlet_cells : array of int
            Flat cell indices (``row * ncols + col``).
        labels : array of int, optional
            Label of each outlet (> 0); defaults to 1, 2, ...
        """
        cells = np.asarray(outlet_cells, dtype=np.int64)
        labs = (np.arange(1, cells.size + 1, dtype=np.int32) if labels is None
                else np.asarray(labels, dtype=np.int32))
        return _d8.label_nearest_outlet(self.receiver, self.stack, cells, labs,
                                        self.receiver.shape[0]).reshape(self.shape)

    def upstream_mask(self, cell) -> np.ndarray:
        """Boolean grid of the cells draining through ``cell`` (flat index), itself included."""
        return self.label_outlets([int(cell)]) == 1

    def upstream_area(self) -> np.ndarray:
        """Upstream area in m² (model's routing method)."""
        return self.accumulation(unit="m2")

    def d8_upstream_area_flat(self) -> np.ndarray:
        """D8 upstream area in m² as a flat float64 array (used by catchments and channels)."""
        return self.accumulation(unit="m2", method="d8").ravel()


def _read_only(a):
    """A read-only view of a kept array (tuples and other values pass through)."""
    if isinstance(a, np.ndarray) and a.flags.writeable:
        a = a.view()
        a.flags.writeable = False
    return a


def route(terrain: Terrain, method: str = "d8", conditioning: str = "fill",
          mfd_exponent: float = 1.1, *, ready=None, **condition_options) -> FlowModel:
    """Condition (unless ``conditioning="none"``) and route flow over a DEM.

    Parameters
    ----------
    terrain : Terrain
        As returned by :func:`basinkit.read_dem`.
    method : {"d8", "dinf", "mfd"}
        Routing used for accumulation. D8 receivers are always computed as well, since
        catchments, channels and profiles follow single flow paths.
    conditioning : {"fill", "breach", "none"}
        See :func:`basinkit.condition`.
    mfd_exponent : float
        Exponent p of the multiple-flow-direction partition (Freeman 1991: 1.1).
    ready : callable, optional
        Called as ``ready(name, grid)`` as soon as a layer of the model is final, while
        the routing goes on: ``"conditioned"`` (the conditioned elevations, float32) after
        conditioning, ``"receivers"`` (:attr:`FlowModel.receiver`, flat int32) once
        the receivers are final. The flow step writes them meanwhile
        (:class:`basinkit.io.flow_folder.FlowFolderWriter`); the grids must not be changed.
    **condition_options
        Passed to :func:`basinkit.condition` (``epsilon``, ``burn``, ``burn_depth``, ...).

    Returns
    -------
    FlowModel

    Notes
    -----
    D8 (O'Callaghan & Mark 1984) sends each cell to the neighbour of steepest descent, the
    drop divided by the true distance between cell centres (per row on geographic grids).
    Ties go to the first neighbour clockwise from north (N, NE, E, ..., NW). Flats left by
    filling are drained with the method of Barnes, Lehman & Mulla (2014b) without changing
    elevations. Exits: the grid edge, cells next to nodata, and base-level cells.

    References
    ----------
    O'Callaghan, J. F., Mark, D. M. (1984). The extraction of drainage networks from digital
    elevation data. Computer Vision, Graphics and Image Processing 28:323-344.
    Braun, J., Willett, S. D. (2013). A very efficient O(n), implicit and parallel method to
    solve the stream power equation governing fluvial incision and landscape evolution.
    Geomorphology 180-181:170-179.
    Barnes, R., Lehman, C., Mulla, D. (2014b). An efficient assignment of drainage direction
    over flat surfaces in raster digital elevation models. Computers & Geosciences
    62:128-135.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(4.0, 0, -1), np.zeros(3))  # slopes down to the south
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> fm.accumulation()[:, 1].tolist()
    [1, 2, 3, 4]
    """
    if method not in ROUTING_METHODS:
        raise InputError(f"unknown routing method {method!r}; use d8, dinf or mfd")
    check_memory(terrain.size, ROUTE_BYTES_PER_CELL + EXTRA_BYTES_PER_CELL.get(method, 0))
    raw = terrain.elevation
    cond, summary = condition(terrain, method=conditioning, **condition_options)
    if ready is not None:
        ready("conditioned", cond.elevation)
    params = {"method": method, "conditioning": conditioning,
              **{k: (str(v) if isinstance(v, Path) else v)
                 for k, v in condition_options.items() if v is not None}}
    if method == "mfd":
        params["mfd_exponent"] = mfd_exponent
    fm = flow_from_conditioned(cond, method, params, ready)
    fm.input_elevation = raw
    fm.summary = summary
    return fm


def flow_from_conditioned(cond: Terrain, method: str, params: dict,
                          ready=None) -> FlowModel:
    """Build the FlowModel from an already conditioned surface (``ready``: see
    :func:`route`)."""
    z = cond.elevation
    valid = cond.valid
    seeds = exit_cells(cond)
    bl = cond.base_level if cond.base_level is not None else np.zeros(cond.shape, bool)
    dist = cond.geometry.neighbour_distances()
    rec, nflat = _d8.d8_receivers(z, valid, seeds, bl, dist)
    del seeds
    if nflat:
        # the flat mask is not kept (not even bound to a name, which would hold its
        # int32 grid through the sweep): the D8 receivers carry the flat resolution
        unresolved = _d8.resolve_flats(z, valid, rec, dist)[1]
        if unresolved:
            params = {**params, "cells_without_outlet": int(unresolved)}
    if ready is not None:
        ready("receivers", rec)
    # the stack, the cell count and the upstream area come out of one sweep
    stack, count, area = _stack.stack_count_area(rec, cond.shape[1], cond.geometry.area)
    fm = FlowModel(cond, rec, stack, method, parameters=params)
    fm.derived(("d8", "cells"), lambda: count.reshape(cond.shape))
    area = area.reshape(cond.shape)
    area[~valid] = np.nan
    fm.derived(("d8", "m2"), lambda: area)
    if method in ("dinf", "mfd"):
        from .multi import multi_receivers

        fm.multi = multi_receivers(fm, method, params.get("mfd_exponent", 1.1))
        if method == "dinf":
            from .multi import dinf_azimuth

            fm.dinf_azimuth = dinf_azimuth(fm)
    return fm
