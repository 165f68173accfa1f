"""Numba kernels for per-label sums of the cells' values, combined over label ranges.

A nested catchment of depth-first labels is a range of labels, so each of its sums,
minima and maxima is a combination of its labels' (computed once, in one pass over the
cells listed by label) instead of a pass over its cells. Sums are compensated (Neumaier
1974) and the slope variance is combined from per-label means and squared deviations
(Chan, Golub & LeVeque 1983), so the results agree with a direct pass over the cells to
the last bits.
"""

from __future__ import annotations

import numpy as np
from numba import njit

#: columns of the per-label sums (compensated: value and correction)
AREA, ZA, ZW, GW, SA, FLAT = 0, 1, 2, 3, 4, 5  # then 6 + sector (8 aspect sectors)
NSUMS = 14


@njit(cache=True, inline="always")
def _add(s, c, k, v):
    """Neumaier's compensated addition of v into s[k] (correction in c[k])."""
    t = s[k] + v
    if abs(s[k]) >= abs(v):
        c[k] += (s[k] - t) + v
    else:
        c[k] += (v - t) + s[k]
    s[k] = t


@njit(cache=True, nogil=True)
def label_sums(order, starts, ncols, row_area, z, slope, aspect, dl):
    """Per label l (cells ``order[starts[l]:starts[l + 1]]``): compensated sums
    ``sums[l, :]`` (+ ``corr``) of the columns AREA (cell area), ZA (elevation × area)
    and ZW (area) over finite elevations, GW (area) and SA (slope × area) over finite
    slopes, FLAT (area of finite slope, no aspect) and 6 + k (area of aspect sector k);
    ``counts[l] = (finite elevations, finite slopes)``; ``ext[l] = (min z, max z,
    max dl)``; ``mom[l] = (mean slope, sum of squared deviations)`` (Welford)."""
    nlab = starts.shape[0] - 1
    sums = np.zeros((nlab, NSUMS))
    corr = np.zeros((nlab, NSUMS))
    counts = np.zeros((nlab, 2), dtype=np.int64)
    ext = np.empty((nlab, 3))
    mom = np.zeros((nlab, 2))
    for l in range(nlab):
        s = sums[l]
        c = corr[l]
        zmin = np.inf
        zmax = -np.inf
        dmax = -np.inf
        nz = 0
        ng = 0
        mean = 0.0
        m2 = 0.0
        for p in range(starts[l], starts[l + 1]):
            i = order[p]
            a = row_area[i // ncols]
            _add(s, c, AREA, a)
            d = dl[i]
            if d > dmax:
                dmax = d
            v = np.float64(z[i])
            if np.isfinite(v):
                nz += 1
                if v < zmin:
                    zmin = v
                if v > zmax:
                    zmax = v
                _add(s, c, ZA, v * a)
                _add(s, c, ZW, a)
            g = slope[i]
            if np.isfinite(g):
                ng += 1
                delta = g - mean
                mean += delta / ng
                m2 += delta * (g - mean)
                _add(s, c, GW, a)
                _add(s, c, SA, g * a)
                asp = aspect[i]
                if np.isfinite(asp):
                    k = int(np.floor(((asp + 22.5) % 360.0) / 45.0))
                    _add(s, c, 6 + k, a)
                else:
                    _add(s, c, FLAT, a)
        counts[l, 0] = nz
        counts[l, 1] = ng
        ext[l, 0] = zmin
        ext[l, 1] = zmax
        ext[l, 2] = dmax
        mom[l, 0] = mean
        mom[l, 1] = m2
    return sums, corr, counts, ext, mom


@njit(cache=True, nogil=True)
def range_sums(lo, hi, sums, corr, counts, ext, mom):
    """The per-label results of :func:`label_sums` combined over each label range
    ``lo[i]..hi[i]`` (inclusive): sums (corrections added), counts, extremes and
    ``(mean slope, sum of squared deviations)`` (Chan et al. 1983)."""
    n = lo.shape[0]
    nc = sums.shape[1]
    out = np.zeros((n, nc))
    ocnt = np.zeros((n, 2), dtype=np.int64)
    oext = np.empty((n, 3))
    omom = np.zeros((n, 2))
    s = np.zeros(nc)
    c = np.zeros(nc)
    for i in range(n):
        s[:] = 0.0
        c[:] = 0.0
        zmin = np.inf
        zmax = -np.inf
        dmax = -np.inf
        nz = 0
        ng = 0
        mean = 0.0
        m2 = 0.0
        for l in range(lo[i], hi[i] + 1):
            for k in range(nc):
                _add(s, c, k, sums[l, k])
                c[k] += corr[l, k]
            nz += counts[l, 0]
            nb = counts[l, 1]
            if nb > 0:
                tot = ng + nb
                delta = mom[l, 0] - mean
                mean += delta * (nb / tot)
                m2 += mom[l, 1] + delta * delta * (ng * nb / tot)
                ng = tot
            if ext[l, 0] < zmin:
                zmin = ext[l, 0]
            if ext[l, 1] > zmax:
                zmax = ext[l, 1]
            if ext[l, 2] > dmax:
                dmax = ext[l, 2]
        for k in range(nc):
            out[i, k] = s[k] + c[k]
        ocnt[i, 0] = nz
        ocnt[i, 1] = ng
        oext[i, 0] = zmin
        oext[i, 1] = zmax
        oext[i, 2] = dmax
        omom[i, 0] = mean
        omom[i, 1] = m2
    return out, ocnt, oext, omom
