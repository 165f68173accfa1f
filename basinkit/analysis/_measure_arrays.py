"""Measures of catchments on arrays of their cells' values: the hypsometric curve by
sorting or by counting, percentiles, and every cell-based measure of many nested
catchments at once (label ranges of the cells listed by depth-first label), from per-label
sums (``_label_sums``) and order statistics over slices (``_order_stats``)."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

HYPSOMETRIC_LEVELS = 101


def _hypsometry(z, w, levels=HYPSOMETRIC_LEVELS):
    """Relative heights, area above each (m²) and their elevations, as arrays."""
    h = np.linspace(0.0, 1.0, int(levels))
    if z.size == 0:
        return h, np.full(h.shape, np.nan), np.full(h.shape, np.nan)
    zmin, zmax = z.min(), z.max()
    elev = zmin + h * (zmax - zmin)
    w0 = w[0]
    if w0 == np.floor(w0) and w0 * z.size < 2.0 ** 52 and np.all(w == w0):
        # equal whole-number cell areas (projected grids): the running sums of the sorted
        # areas are exact, so area above a level is w0 times the count of cells at or above
        # it; the counts come from binning against the levels, without a sort
        n = z.size
        if zmax > zmin:
            j = np.searchsorted(elev, z, side="right")  # levels at or below each cell
            below = np.cumsum(np.bincount(j, minlength=elev.size + 1))[:elev.size]
            below[-1] = n - int(np.count_nonzero(z == zmax))  # top level: z < zmax
            a = w0 * (n - below).astype(np.float64)
        else:
            a = np.full(h.shape, w0 * n)
        return h, a, elev
    order = np.argsort(z, kind="stable")
    zs = z[order]
    above = np.concatenate([np.cumsum(w[order][::-1])[::-1], [0.0]])  # area with z >= zs[i]
    if zmax > zmin:
        idx = np.searchsorted(zs, elev, side="left")
        # guard the top level against rounding: the highest cells are at relative height 1
        idx[-1] = np.searchsorted(zs, zmax, side="left")
        a = above[idx]
    else:
        a = np.full(h.shape, above[0])
    return h, a, elev


def _curve_frame(h, a, elev):
    import pandas as pd

    return pd.DataFrame({"relative_height": h, "relative_area_above": a / a[0],
                         "elevation_m": elev, "area_above_m2": a})


class CurveFrames(Mapping):
    """``{catchment id: hypsometric curve DataFrame}`` (columns ``relative_height``,
    ``relative_area_above``, ``elevation_m``, ``area_above_m2``), each frame made when it
    is asked for from the arrays kept; ``arrays(id)`` gives them (relative heights, area
    above in m², elevations) without a frame."""

    def __init__(self, arrays):
        self._arrays = dict(arrays)

    def __getitem__(self, key):
        return _curve_frame(*self._arrays[key])

    def __contains__(self, key):
        return key in self._arrays

    def __iter__(self):
        return iter(self._arrays)

    def __len__(self):
        return len(self._arrays)

    def arrays(self, key):
        return self._arrays[key]


def _percentiles(v, qs):
    """Linear-interpolation percentiles of a 1-D array (numpy's default rule)."""
    pos = np.asarray(qs, dtype=float) / 100.0 * (v.size - 1)
    lo = np.floor(pos).astype(np.int64)
    hi = np.minimum(lo + 1, v.size - 1)
    s = np.partition(v, np.unique(np.concatenate([lo, hi])))  # those ranks in place
    return s[lo] + (s[hi] - s[lo]) * (pos - lo)


class NestedNumbers:
    """The cell-based measures of catchments given as label ranges ``lo[i]..hi[i]`` of
    cells listed by label (``order[starts[l]:starts[l + 1]]`` are label l's cells), as
    arrays with one row per range (valid ranges only: ``0 < lo <= hi < len(starts) - 1``).

    Attributes: ``count``, ``area``, ``dl_max`` (largest of ``dl``), ``z_count`` (finite
    elevations), ``zmin``, ``zmax``, ``zmean`` (area weighted), ``elev`` and ``a_above``
    (n, levels) (the hypsometric curve; NaN rows where ``curve_ok`` is False: the cell
    areas differ or are not whole numbers, so the curve is left to the sorting
    :func:`_hypsometry`), ``slope_count`` (finite slopes), ``slope_mean`` (area
    weighted), ``slope_std``, ``slope_p10``, ``slope_p50``, ``slope_p90``, ``slope_max``,
    ``sector_fraction`` (n, 8), ``flat_fraction``, ``slope_area``.

    Sums come from per-label compensated sums; minima, maxima, counts against the
    hypsometric levels and the slope percentiles are exact (order statistics over the
    slices, :class:`basinkit.analysis._order_stats.WaveletMatrix`), so the hypsometric curve
    and the percentiles are the same, bit for bit, as those computed from the cells.
    """

    def __init__(self, order, starts, lo, hi, ncols, row_area, z, slope, aspect, dl,
                 levels=HYPSOMETRIC_LEVELS, threads=2):
        from concurrent.futures import ThreadPoolExecutor

        from . import _label_sums as ls
        from ._order_stats import WaveletMatrix

        lo = np.asarray(lo, np.int64)
        hi = np.asarray(hi, np.int64)
        s, e = starts[lo], starts[hi + 1]
        row_area = np.ascontiguousarray(row_area, dtype=np.float64)
        threads = max(int(threads), 1)
        # the two matrices one after the other, beside the sums (the kernels drop the GIL):
        # building one holds about 32 bytes per cell for a moment, so two at once would
        # double a batch's peak memory for a second or two of wall time
        with ThreadPoolExecutor(min(threads, 2)) as pool:
            both = pool.submit(lambda: (WaveletMatrix(z[order]), WaveletMatrix(slope[order])))
            sums = ls.label_sums(order, starts, ncols, row_area, z, slope, aspect, dl)
            tot, cnt, ext, mom = ls.range_sums(lo, hi, *sums)
            zwm, swm = both.result()
        self.count = e - s
        self.area = tot[:, ls.AREA]
        self.dl_max = ext[:, 2]
        self.z_count = nz = cnt[:, 0]
        self.zmin, self.zmax = ext[:, 0], ext[:, 1]
        with np.errstate(invalid="ignore", divide="ignore"):
            self.zmean = tot[:, ls.ZA] / tot[:, ls.ZW]
        # hypsometric curve by counting (see _hypsometry: equal whole-number cell areas)
        h = np.linspace(0.0, 1.0, int(levels))
        zmin, zmax = self.zmin[:, None], self.zmax[:, None]
        self.elev = zmin + h * (zmax - zmin)
        w0 = row_area[0] if row_area.size else np.nan
        equal = bool(row_area.size) and w0 == np.floor(w0) and bool(np.all(row_area == w0))
        self.curve_ok = (nz > 0) & (w0 * nz < 2.0 ** 52) & equal
        x = self.elev.copy()
        x[:, -1] = self.zmax  # the top level: below the highest cells
        x[~self.curve_ok] = -np.inf
        below = zwm.counts_below(s, e, x, threads)
        a = w0 * (nz[:, None] - below).astype(np.float64)
        flat = (self.zmax <= self.zmin)[:, None]
        a = np.where(flat, w0 * nz[:, None], a)
        self.a_above = np.where(self.curve_ok[:, None], a, np.nan)
        # slope: area-weighted mean, standard deviation, percentiles (as _percentiles)
        ng = cnt[:, 1]
        self.slope_count = ng
        gw = tot[:, ls.GW]
        self.slope_area = gw
        with np.errstate(invalid="ignore", divide="ignore"):
            self.slope_mean = tot[:, ls.SA] / gw
            self.slope_std = np.sqrt(mom[:, 1] / ng)
            self.sector_fraction = np.where(gw[:, None] != 0, tot[:, 6:14] / gw[:, None], 0.0)
            self.flat_fraction = np.where(gw != 0, tot[:, ls.FLAT] / gw, np.nan)
        pos = np.asarray([10, 50, 90], dtype=float)[None, :] / 100.0 * (ng[:, None] - 1)
        klo = np.floor(pos).astype(np.int64)
        khi = np.minimum(klo + 1, ng[:, None] - 1)
        ks = np.concatenate([klo, khi, ng[:, None] - 1], axis=1)
        ks[ng == 0] = -1
        v = swm.kth_values(s, e, ks, threads)
        vlo, vhi = v[:, :3], v[:, 3:6]
        p = vlo + (vhi - vlo) * (pos - klo)
        self.slope_p10, self.slope_p50, self.slope_p90 = p[:, 0], p[:, 1], p[:, 2]
        self.slope_max = v[:, 6]
