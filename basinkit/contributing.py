"""Contributing fractions: the share of each cell's flow that reaches an outlet.

Under D∞ (Tarboton 1997) and MFD (Freeman 1991; Quinn et al. 1991) routing a cell may send
part of its water to one outlet and part elsewhere, so a catchment is not a set of cells but
a field of fractions: 1 where all of a cell's flow passes through the outlet, between 0 and 1
where the flow splits on the way, 0 where none of it arrives. Summed with the cell areas it
gives exactly the D∞/MFD upstream area at the outlet.

Under D8 the fraction is the catchment mask (0 or 1).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .errors import InputError, OutletError

__all__ = ["contributing_fraction", "contributing_fractions", "contributing_area_m2"]


@njit(cache=True, nogil=True)
def _fraction_pass(rec, frac, order, outlet, value):
    """One reverse pass over the topological order: ``value[outlet] = 1`` and, downstream
    cells first, ``value[i] = Σ_k frac[i, k] · value[rec[i, k]]``. Only cells before the
    outlet in ``order`` can reach it; ``value`` must be zero on entry (it is left as the
    fraction, float64). Returns the outlet's position in ``order`` (-1: not there)."""
    pos = -1
    for t in range(order.shape[0]):
        if order[t] == outlet:
            pos = t
            break
    if pos < 0:
        return pos
    value[outlet] = 1.0
    m = rec.shape[1]
    for t in range(pos - 1, -1, -1):
        i = order[t]
        s = 0.0
        for k in range(m):
            j = rec[i, k]
            if j < 0:
                break
            s += np.float64(frac[i, k]) * value[j]
        value[i] = s
    return pos


@njit(cache=True, nogil=True)
def _areas(rec, frac, order, outlets, ncols, row_area):
    """Σ fraction × cell area (m²) for each outlet, reusing one work array."""
    n = rec.shape[0]
    value = np.zeros(n, dtype=np.float64)
    out = np.empty(outlets.shape[0], dtype=np.float64)
    for q in range(outlets.shape[0]):
        pos = _fraction_pass(rec, frac, order, outlets[q], value)
        tot = 0.0
        for t in range(max(pos, -1) + 1):
            i = order[t]
            tot += value[i] * row_area[i // ncols]
            value[i] = 0.0
        out[q] = tot
    return out


def _method_of(fm, method):
    method = method or fm.method
    if method not in ("d8", "dinf", "mfd"):
        raise InputError(f"unknown routing method {method!r}; use d8, dinf or mfd")
    return method


def _check_cells(fm, cells):
    cells = np.atleast_1d(np.asarray(cells))
    if cells.dtype.kind not in "iu":
        if cells.dtype.kind == "f" and np.all(np.isfinite(cells)) and np.all(
                cells == np.round(cells)):
            cells = cells.astype(np.int64)
        else:
            raise OutletError("outlet cells must be integer flat indices (row * ncols + col)")
    cells = cells.astype(np.int64)
    n = fm.receiver.shape[0]
    bad = (cells < 0) | (cells >= n)
    if bad.any():
        raise OutletError(f"outlet cell {int(cells[bad][0])} is outside the grid of {n} "
                          "cells; give flat indices row * ncols + col")
    nod = ~fm.terrain.valid.ravel()[cells]
    if nod.any():
        c = int(cells[nod][0])
        raise OutletError(f"outlet cell {c} (row {c // fm.ncols}, column {c % fm.ncols}) is "
                          "on nodata; move it onto a valid cell (snap it to a channel)")
    return cells


def contributing_fractions(fm, outlet_cells, method=None) -> np.ndarray:
    """Contributing fractions for several outlets, each on its own.

    Parameters
    ----------
    fm : FlowModel
    outlet_cells : sequence of int
        Flat cell indices ``row * ncols + col``.
    method : {"d8", "dinf", "mfd"}, optional
        Routing to follow; defaults to the model's.

    Returns
    -------
    ndarray of float32 (noutlets, nrows, ncols)
        One fraction grid per outlet (see :func:`contributing_fraction`). Each outlet is
        treated alone: for nested outlets the upstream one's cells also count fully toward
        the downstream one.
    """
    method = _method_of(fm, method)
    cells = _check_cells(fm, outlet_cells)
    out = np.zeros((cells.size,) + tuple(fm.shape), dtype=np.float32)
    valid = fm.terrain.valid
    if method == "d8":
        for q, c in enumerate(cells):
            out[q] = fm.upstream_mask(int(c))
    else:
        from ._multi import multi_for

        rec, frac, order = multi_for(fm, method)
        value = np.zeros(rec.shape[0], dtype=np.float64)
        for q, c in enumerate(cells):
            value[:] = 0.0
            _fraction_pass(rec, frac, order, int(c), value)
            out[q] = value.reshape(fm.shape)
    out[:, ~valid] = np.nan
    return out


def contributing_fraction(fm, outlet_cell, method=None) -> np.ndarray:
    """Share of each cell's flow that reaches an outlet cell.

    Parameters
    ----------
    fm : FlowModel
        A routed flow model (:func:`basinkit.route` or :func:`basinkit.load_flow`).
    outlet_cell : int
        Flat index ``row * ncols + col`` of the outlet.
    method : {"d8", "dinf", "mfd"}, optional
        Routing to follow; defaults to the model's.

    Returns
    -------
    ndarray of float32 (nrows, ncols)
        1 at the outlet and where all of a cell's flow passes through it, a fraction where
        the flow splits between the outlet and elsewhere, 0 where none arrives; NaN on
        nodata. Under D8 the catchment mask as 0/1.

    Notes
    -----
    One reverse pass over the topological order of the multi-receiver graph (receivers
    before donors): the outlet gets 1 and every other cell the proportion-weighted sum of its
    receivers' values, ``f_i = Σ_k p_ik · f_{r_ik}``. The result summed with the cell areas
    equals the D∞/MFD upstream area at the outlet (:func:`contributing_area_m2`). Fractions
    are computed in float64 and stored as float32.

    Like every DEM-derived boundary, the result is an estimate: culverts, storm sewers and
    diversions are not represented unless burned in; verify in the field and defer to local
    codes and licensed professional practice.

    References
    ----------
    Tarboton, D. G. (1997). A new method for the determination of flow directions and
    upslope areas in grid digital elevation models. Water Resources Research
    33(2):309-319.
    Freeman, T. G. (1991). Calculating catchment area with divergent flow based on a regular
    grid. Computers & Geosciences 17(3):413-422.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(4.0, 0, -1), np.zeros(3))  # slopes down to the south
    >>> fm = route(terrain_from_array(z, cellsize=10), method="dinf")
    >>> contributing_fraction(fm, 3 * 3 + 1)[:, 1].tolist()
    [1.0, 1.0, 1.0, 1.0]
    """
    return contributing_fractions(fm, [outlet_cell], method)[0]


def contributing_area_m2(fm, outlet_cell, method=None):
    """Σ contributing fraction × cell area (m², true on the ground) at one or more outlets.

    Parameters
    ----------
    fm : FlowModel
    outlet_cell : int or sequence of int
        Flat index (or indices) ``row * ncols + col``.
    method : {"d8", "dinf", "mfd"}, optional
        Routing to follow; defaults to the model's.

    Returns
    -------
    float or ndarray of float64
        A float for one outlet, an array for a sequence. Equals the model's upstream area at
        the outlet (:meth:`FlowModel.accumulation` with ``unit="m2"``).

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(4.0, 0, -1), np.zeros(3))
    >>> fm = route(terrain_from_array(z, cellsize=10), method="dinf")
    >>> contributing_area_m2(fm, [10, 7]).tolist()  # bottom and third row, middle column
    [400.0, 300.0]
    >>> fm = route(terrain_from_array(z, cellsize=10), method="mfd")  # spreads sideways
    >>> bool(np.isclose(contributing_area_m2(fm, 10), fm.upstream_area()[3, 1]))
    True
    """
    method = _method_of(fm, method)
    scalar = np.ndim(outlet_cell) == 0
    cells = _check_cells(fm, outlet_cell)
    if method == "d8":
        area = fm.d8_upstream_area_flat()
        res = area[cells].astype(np.float64)
    else:
        from ._multi import multi_for

        rec, frac, order = multi_for(fm, method)
        res = _areas(rec, frac, order, cells, fm.ncols,
                     np.ascontiguousarray(fm.terrain.geometry.area, dtype=np.float64))
    return float(res[0]) if scalar else res
