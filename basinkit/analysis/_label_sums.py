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


@njit(cache=True, inline="always")
def _two_sum(s, c, v):
    """Neumaier's step: (new sum, new correction) after adding v to s (correction c)."""
    t = s + v
    if abs(s) >= abs(v):
        c += (s - t) + v
    else:
        c += (v - t) + s
    return t, c


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
    sec = np.zeros(8)
    secc = np.zeros(8)
    for l in range(nlab):
        s_area = c_area = s_za = c_za = s_zw = c_zw = 0.0
        s_gw = c_gw = s_sa = c_sa = s_flat = c_flat = 0.0
        sec[:] = 0.0
        secc[:] = 0.0
        zmin, zmax, dmax, nz, ng, mean, m2 = np.inf, -np.inf, -np.inf, 0, 0, 0.0, 0.0
        for p in range(starts[l], starts[l + 1]):
            i = order[p]
            a = row_area[i // ncols]
            s_area, c_area = _two_sum(s_area, c_area, a)
            d = dl[i]
            if d > dmax:
                dmax = d
            v = np.float64(z[i])
            if np.isfinite(v):
                nz += 1
                zmin = min(zmin, v)
                zmax = max(zmax, v)
                s_za, c_za = _two_sum(s_za, c_za, v * a)
                s_zw, c_zw = _two_sum(s_zw, c_zw, a)
            g = slope[i]
            if np.isfinite(g):
                ng += 1
                delta = g - mean
                mean += delta / ng
                m2 += delta * (g - mean)
                s_gw, c_gw = _two_sum(s_gw, c_gw, a)
                s_sa, c_sa = _two_sum(s_sa, c_sa, g * a)
                asp = aspect[i]
                if np.isfinite(asp):
                    k = int(np.floor(((asp + 22.5) % 360.0) / 45.0))
                    sec[k], secc[k] = _two_sum(sec[k], secc[k], a)
                else:
                    s_flat, c_flat = _two_sum(s_flat, c_flat, a)
        sums[l, AREA], corr[l, AREA] = s_area, c_area
        sums[l, ZA], corr[l, ZA] = s_za, c_za
        sums[l, ZW], corr[l, ZW] = s_zw, c_zw
        sums[l, GW], corr[l, GW] = s_gw, c_gw
        sums[l, SA], corr[l, SA] = s_sa, c_sa
        sums[l, FLAT], corr[l, FLAT] = s_flat, c_flat
        for k in range(8):
            sums[l, 6 + k] = sec[k]
            corr[l, 6 + k] = secc[k]
        _put(l, nz, ng, zmin, zmax, dmax, mean, m2, counts, ext, mom)
    return sums, corr, counts, ext, mom


@njit(cache=True, nogil=True, inline="always")
def _put(i, nz, ng, zmin, zmax, dmax, mean, m2, counts, ext, mom):
    """Row ``i`` of the counts, extremes and moments."""
    counts[i, 0] = nz
    counts[i, 1] = ng
    ext[i, 0] = zmin
    ext[i, 1] = zmax
    ext[i, 2] = dmax
    mom[i, 0] = mean
    mom[i, 1] = m2


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
        zmin, zmax, dmax, nz, ng, mean, m2 = np.inf, -np.inf, -np.inf, 0, 0, 0.0, 0.0
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
        _put(i, nz, ng, zmin, zmax, dmax, mean, m2, ocnt, oext, omom)
    return out, ocnt, oext, omom
