"""Per-catchment sums of grid values for any number of (nested) outlets at once.

:func:`basinkit.analysis.catchments.delineate` numbers sub-catchments in depth-first
order of the outlet tree, so an outlet's full catchment is the contiguous label range
``label … label + upstream_outlet_count``. A sum over a catchment is therefore a
difference of two prefix sums over per-label sums: one pass over the grid serves every
outlet, nested or not.
"""

from __future__ import annotations

import numpy as np

from ..analysis import _channels
from ..errors import InputError

__all__ = ["label_ranges", "catchment_sums", "mean_land_slope", "value_distributions",
           "check_grid"]


def check_grid(values, shape, what):
    """A float64 grid of the DEM's shape, or an InputError naming the mismatch."""
    a = np.asarray(values, dtype=np.float64)
    if a.shape != tuple(shape):
        raise InputError(f"the {what} raster has {a.shape[0]} x {a.shape[1] if a.ndim > 1 else 1}"
                         f" cells, the DEM {shape[0]} x {shape[1]}: it is on another grid; "
                         "resample it onto the DEM's grid first")
    return a


def label_ranges(delineation):
    """(first, last) sub-catchment label of each outlet's full catchment, in table order."""
    t = delineation.table
    lo = t["label"].to_numpy(np.int64)
    hi = lo + t["upstream_outlet_count"].to_numpy(np.int64)
    return lo, hi


def catchment_sums(labels, weights, lo, hi):
    """Σ weights over each full catchment [lo, hi] of the label grid (label 0 ignored)."""
    lab = np.asarray(labels).ravel()
    w = np.asarray(weights, dtype=np.float64).ravel()
    n = int(hi.max()) if hi.size else 0
    per = np.bincount(lab, weights=w, minlength=n + 1)
    per[0] = 0.0
    cs = np.concatenate([[0.0], np.cumsum(per)])
    return cs[hi + 1] - cs[lo]


def _area_grid(fm):
    return np.broadcast_to(fm.terrain.geometry.area[:, None], fm.shape)


def mean_land_slope(fm, delineation):
    """Area-weighted mean land slope (m/m) of each outlet's catchment by Horn (1981) with
    true per-row cell sizes, on the DEM as read (as :mod:`basinkit.analysis.morphometry`
    measures it)."""
    t = fm.terrain
    g = t.geometry
    z = fm.input_elevation if fm.input_elevation is not None else t.elevation
    z = np.where(t.valid, z, np.nan).astype(np.float64)
    nd = g.neighbour_distances()
    s, _ = _channels.horn_slope_aspect(z, np.ascontiguousarray(g.dx, dtype=np.float64),
                                       np.ascontiguousarray(nd[:, 0], dtype=np.float64),
                                       np.ascontiguousarray(g.dy_down, dtype=np.float64))
    a = _area_grid(fm)
    ok = np.isfinite(s)
    lo, hi = label_ranges(delineation)
    num = catchment_sums(delineation.labels, np.where(ok, s * a, 0.0), lo, hi)
    den = catchment_sums(delineation.labels, np.where(ok, a, 0.0), lo, hi)
    with np.errstate(invalid="ignore", divide="ignore"):
        return num / den


def value_distributions(fm, delineation, values, what, quantum=None):
    """For each outlet: the distinct grid values in its catchment and the area of each,
    plus the share of the catchment without a value (NaN).

    Parameters
    ----------
    values : ndarray (nrows, ncols)
        On the DEM's grid; NaN where there is no value.
    quantum : float, optional
        Values are rounded to multiples of this first (keeps the number of distinct
        values small for continuous rasters).

    Returns
    -------
    list of (values, area_m2, missing_fraction), one per delineation table row.
    """
    v = check_grid(values, fm.shape, what)
    if quantum:
        v = np.round(v / quantum) * quantum
    a = _area_grid(fm)
    lab = delineation.labels
    inside = lab > 0
    ok = inside & np.isfinite(v)
    uniq, inv = np.unique(v[ok], return_inverse=True)
    lo, hi = label_ranges(delineation)
    n = int(hi.max()) if hi.size else 0
    k = uniq.size
    total = catchment_sums(lab, np.where(inside & fm.terrain.valid, a, 0.0), lo, hi)
    out = []
    if k:
        flat = lab[ok].astype(np.int64) * k + inv
        per = np.bincount(flat, weights=a[ok], minlength=(n + 1) * k).reshape(n + 1, k)
        per[0] = 0.0
        cs = np.vstack([np.zeros((1, k)), np.cumsum(per, axis=0)])
        areas = cs[hi + 1] - cs[lo]
    else:
        areas = np.zeros((lo.size, 0))
    for i in range(lo.size):
        keep = areas[i] > 0
        have = float(areas[i].sum())
        miss = 1.0 - have / total[i] if total[i] > 0 else 1.0
        out.append((uniq[keep], areas[i][keep], max(miss, 0.0)))
    return out
