"""D∞ and MFD routing on a FlowModel: receivers with proportions, their topological order,
and the D∞ azimuth grid (array kernels in ``_multi.py``; see its notes on which cells split
their flow and on the topological order)."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ._multi import accumulate_multi, dinf_kernel, mfd_kernel, topological_order

__all__ = ["multi_receivers", "dinf_azimuth", "multi_for", "accumulate_multi"]


def _check_exponent(exponent):
    try:
        p = float(exponent)
    except (TypeError, ValueError):
        raise InputError(f"the MFD exponent must be a number, got {exponent!r}") from None
    if not np.isfinite(p) or p < 0:
        raise InputError(f"the MFD exponent must be a finite number >= 0 (Freeman 1991 used "
                         f"1.1), got {exponent!r}")
    return p


def multi_receivers(fm, method, exponent=1.1, flat_mask=None):
    """Receivers, proportions and topological order for D∞ or MFD routing.

    Parameters
    ----------
    fm : FlowModel
        Supplies the conditioned elevation, the cell geometry and the D8 receivers (which
        mark exits and drain flats).
    method : {"dinf", "mfd"}
    exponent : float
        MFD exponent p of ``tan(β) ** p`` (Freeman 1991: 1.1; Quinn et al. 1991: 1).
        Ignored for D∞.
    flat_mask : ndarray of int32, optional
        The flat-resolution mask; accepted for the routing contract and not used (the D8
        receivers already drain the flats, and ignoring it keeps a reloaded model identical).

    Notes
    -----
    D∞: the steepest of the 8 triangular facets, the flow split between its two cells in
    proportion to the angles (:func:`dinf_kernel`). MFD: every lower neighbour in
    proportion to ``tan(β)^p · L`` with the contour lengths L of Quinn et al. (1991),
    generalised to rectangular cells — half the perpendicular cell side for the cardinal
    neighbours, a quarter of the cell diagonal for the diagonal ones (:func:`mfd_kernel`).
    Distances are the true per-row spacings (geographic grids too). Exits, flats and the
    order: see the module notes.

    Returns
    -------
    rec : ndarray of int32 (ncells, m)
        Receivers packed to the front, -1 in unused slots; m = 2 (D∞) or 8 (MFD).
    frac : ndarray of float32 (ncells, m)
        Proportions, summing to 1 where a cell has receivers.
    order : ndarray of int32
        Valid cells, every cell before all of its receivers (Kahn 1962).

    References
    ----------
    Tarboton, D. G. (1997). Water Resources Research 33(2):309-319.
    Freeman, T. G. (1991). Computers & Geosciences 17(3):413-422.
    Quinn, P. et al. (1991). Hydrological Processes 5:59-79.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> fm = route(terrain_from_array(np.add.outer(np.arange(3.0, 0, -1), np.zeros(3))))
    >>> rec, frac, order = multi_receivers(fm, "dinf")  # plane dipping south
    >>> rec[1].tolist(), frac[1].tolist()
    ([4, -1], [1.0, 0.0])
    >>> rec, frac, order = multi_receivers(fm, "mfd")  # S, SE, SW all lower
    >>> rec[1].tolist()[:4], round(float(frac[1].sum()), 6)
    ([5, 4, 3, -1], 1.0)
    """
    t = fm.terrain
    z = np.ascontiguousarray(t.elevation, dtype=np.float32)
    dist = np.ascontiguousarray(t.geometry.neighbour_distances(), dtype=np.float64)
    rec8 = np.ascontiguousarray(fm.receiver, dtype=np.int32)
    if method == "dinf":
        rec, frac, az = dinf_kernel(z, rec8, dist)
        fm._cache["dinf_azimuth"] = az.reshape(t.shape)
    elif method == "mfd":
        rec, frac = mfd_kernel(z, rec8, dist, _check_exponent(exponent))
    else:
        raise InputError(f"unknown multiple-flow method {method!r}; use dinf or mfd")
    order = topological_order(rec, rec8)
    return rec, frac, order


def dinf_azimuth(fm):
    """D∞ flow direction as an azimuth.

    Parameters
    ----------
    fm : FlowModel

    Returns
    -------
    ndarray of float32 (nrows, ncols)
        Degrees clockwise from grid north, 0 <= a < 360, measured on the ground (true cell
        spacings); NaN on nodata and where water leaves the model (D8 receiver -1). Drained
        flat cells get the direction of their D8 receiver.

    References
    ----------
    Tarboton, D. G. (1997). Water Resources Research 33(2):309-319.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> r, c = np.mgrid[0:5, 0:5]
    >>> fm = route(terrain_from_array(10.0 - r - c, cellsize=1))  # falls to the south-east
    >>> round(float(dinf_azimuth(fm)[2, 2]), 3)
    135.0
    """
    az = fm._cache.pop("dinf_azimuth", None)
    if az is None or az.shape != fm.shape:
        t = fm.terrain
        az = dinf_kernel(np.ascontiguousarray(t.elevation, dtype=np.float32),
                         np.ascontiguousarray(fm.receiver, dtype=np.int32),
                         np.ascontiguousarray(t.geometry.neighbour_distances(),
                                              dtype=np.float64))[2].reshape(t.shape)
    return az


def multi_for(fm, method):
    """The (rec, frac, order) of ``method`` for a flow model: its own ``fm.multi`` when that
    is of this method, else computed once and kept in the model's cache."""
    want = 2 if method == "dinf" else 8
    if method not in ("dinf", "mfd"):
        raise InputError(f"unknown multiple-flow method {method!r}; use dinf or mfd")
    if fm.multi is not None and fm.method == method and fm.multi[0].shape[1] == want:
        return fm.multi
    key = ("multi", method)
    if key not in fm._cache:
        had = "dinf_azimuth" in fm._cache
        fm._cache[key] = multi_receivers(fm, method, fm.parameters.get("mfd_exponent", 1.1))
        if not had:
            fm._cache.pop("dinf_azimuth", None)
    return fm._cache[key]
