"""Compiled kernels for multiple-receiver routing: D∞ (Tarboton 1997) and MFD (Freeman 1991,
Quinn et al. 1991), the topological order of the multi-receiver graph and accumulation.

The public face is :func:`basinkit.route` (``method="dinf"`` or ``"mfd"``) and
:meth:`basinkit.routing.FlowModel.accumulation`; ``multi.py`` holds the functions that take a
FlowModel, this module the array kernels. Together they implement:

``multi_receivers(fm, method, exponent, flat_mask=None) -> (rec, frac, order)``
    ``rec`` (ncells, m) int32 flat receiver indices, ``-1`` in unused slots (receivers are
    packed to the front, so the first ``-1`` ends a cell's list); ``m = 2`` for D∞, ``8`` for
    MFD. ``frac`` (ncells, m) float32, summing to 1 for every cell with receivers.
    ``order`` int32: the valid cells, every cell before all of its receivers.
``accumulate_multi(rec, frac, order, weight) -> float64 flat array``
``dinf_azimuth(fm) -> float32 grid`` (degrees clockwise from grid north, NaN: no outflow).

Which cells split their flow
----------------------------
* A cell whose D8 receiver is negative (``-1``: the grid edge, next to nodata or base level
  without a lower neighbour, base-level cells, flats with no way out; ``-2``: nodata) has no
  receivers: its water leaves the model there, exactly as under D8.
* A cell with at least one strictly lower valid neighbour splits its flow by D∞ or MFD. All
  its receivers are strictly lower than it.
* A cell with no lower neighbour that D8 nevertheless drains (a flat cell, drained by the
  flat resolution of Barnes, Lehman & Mulla 2014) sends all its flow to that D8 receiver,
  which lies on the same flat (same elevation) or is its low edge.

The optional ``flat_mask`` of the flat resolution is accepted but not needed: the D8
receivers already carry the result of the flat resolution, and not using the mask makes a
model rebuilt from a flow folder (where the mask is not stored) identical to the one routed
in memory.

Topological order
-----------------
Every edge of the multi-receiver graph goes to a strictly lower cell, except the flat edges,
which are D8 edges between cells of equal elevation; the D8 graph is a forest, so the whole
graph is acyclic. ``order`` is computed by Kahn's algorithm (Kahn 1962): in-degrees (number
of donors, at most 8, held in one byte) and a first-in first-out queue that is the output
array itself. That is O(N·m) with no sorting, deterministic (cells enter in scan order) and
valid on flats by construction, which a sort by elevation would only be with a secondary key.

References
----------
Tarboton, D. G. (1997). A new method for the determination of flow directions and upslope
areas in grid digital elevation models. Water Resources Research 33(2):309-319.
Freeman, T. G. (1991). Calculating catchment area with divergent flow based on a regular
grid. Computers & Geosciences 17(3):413-422.
Quinn, P., Beven, K., Chevallier, P., Planchon, O. (1991). The prediction of hillslope flow
paths for distributed hydrological modelling using digital terrain models. Hydrological
Processes 5:59-79.
Kahn, A. B. (1962). Topological sorting of large networks. Communications of the ACM
5(11):558-562.
Barnes, R., Lehman, C., Mulla, D. (2014). An efficient assignment of drainage direction over
flat surfaces in raster digital elevation models. Computers & Geosciences 62:128-135.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from ..conditioning._fill import DCOL, DROW
from .._jit import parallel_for_large_grids
__all__ = ["dinf_kernel", "mfd_kernel", "accumulate_multi", "topological_order"]

# D∞ facets, clockwise from north: (cardinal neighbour k, diagonal neighbour k) in the
# neighbour order N, NE, E, SE, S, SW, W, NW; the facet angle is measured from the cardinal
# direction toward the diagonal, SIGN tells whether that is clockwise (+1) or not (-1).
FACET_CARD = np.array([0, 2, 2, 4, 4, 6, 6, 0], dtype=np.int64)
FACET_DIAG = np.array([1, 1, 3, 3, 5, 5, 7, 7], dtype=np.int64)
FACET_SIGN = np.array([1.0, -1.0, 1.0, -1.0, 1.0, -1.0, 1.0, -1.0])
CARD_AZIMUTH = np.array([0.0, 90.0, 90.0, 180.0, 180.0, 270.0, 270.0, 360.0])


@njit(cache=True, nogil=True)
def _inside(r, c, nr, nc):
    return r >= 0 and r < nr and c >= 0 and c < nc


@njit(cache=True, nogil=True)
def _direction_azimuth(k, r, dist):
    """Azimuth (degrees clockwise from north) of the straight line to neighbour ``k`` from a
    cell of row ``r``, with the row's true east-west and north-south spacings."""
    east = DCOL[k] * dist[r, 2]
    north = -DROW[k] * (dist[r, 0] if DROW[k] < 0 else dist[r, 4])
    a = math.degrees(math.atan2(east, north))
    if a < 0.0:
        a += 360.0
    return a


@njit(cache=True, nogil=True)
def _facet_geometry(r, nr, dist, d1, d2, alpha, diag):
    """Per facet of row ``r``: d1 (centre to cardinal neighbour), d2 (cardinal to diagonal
    neighbour, at right angles), the facet's opening angle α = atan2(d2, d1) and the
    diagonal length sqrt(d1² + d2²), all from the true spacings of the rows involved."""
    for f in range(8):
        kc = FACET_CARD[f]
        kd = FACET_DIAG[f]
        a = dist[r, kc]
        if kc == 0 or kc == 4:  # e1 north or south: e1 -> e2 is that row's dx
            r2 = r + DROW[kd]
            b = dist[r2, 2] if r2 >= 0 and r2 < nr else dist[r, 2]
        else:  # e1 east or west: e1 -> e2 is the spacing to the row above / below
            b = dist[r, 0] if kd == 1 or kd == 7 else dist[r, 4]
        d1[f] = a
        d2[f] = b
        alpha[f] = math.atan2(b, a)
        diag[f] = math.sqrt(a * a + b * b)


@parallel_for_large_grids(cache=True, nogil=True)
def dinf_kernel(z, rec8, dist):
    """D∞ receivers, proportions and flow azimuth of every cell (Tarboton 1997).

    For each of the 8 triangular facets (centre e0, cardinal neighbour e1 at distance d1,
    diagonal neighbour e2 at distance d2 from e1, at right angles) the facet plane gives
    ``s1 = (e0 - e1) / d1``, ``s2 = (e1 - e2) / d2``, direction ``r = atan2(s2, s1)`` and
    slope ``hypot(s1, s2)``; a direction outside ``[0, α]``, ``α = atan2(d2, d1)``, is set to
    the nearer facet edge with that edge's slope. A facet with one neighbour missing (grid
    edge, nodata) keeps only the edge to the other. The steepest facet wins (ties: the first
    clockwise from north) and the flow is split between e1 and e2 in proportion to the
    angles: ``r / α`` to the diagonal, ``1 - r / α`` to the cardinal neighbour. d1 and d2 are
    the true spacings of the rows involved (per row on geographic grids). Slopes are compared
    squared and the angle is computed for the winning facet only.

    Returns (rec (n, 2) int32, frac (n, 2) float32, azimuth (n,) float32 degrees, NaN where
    there is no outflow).
    """
    nr, nc = z.shape
    n = nr * nc
    rec = np.full((n, 2), -1, dtype=np.int32)
    frac = np.zeros((n, 2), dtype=np.float32)
    az = np.full(n, np.nan, dtype=np.float32)
    for r in prange(nr):
        d1 = np.empty(8)
        d2 = np.empty(8)
        alpha = np.empty(8)
        diag = np.empty(8)
        _facet_geometry(r, nr, dist, d1, d2, alpha, diag)
        e = np.empty(8)
        for c in range(nc):
            i = r * nc + c
            d8 = rec8[i]
            if d8 < 0:
                continue
            z0 = np.float64(z[r, c])
            for k in range(8):  # neighbour elevations, NaN outside the grid or on nodata
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if rr >= 0 and rr < nr and cc >= 0 and cc < nc:
                    e[k] = z[rr, cc]
                else:
                    e[k] = np.nan
            best = 0.0  # squared slope of the steepest facet so far
            bf = -1
            bkind = 0  # 0: along the cardinal edge, 1: inside the facet, 2: diagonal edge
            bs1 = 0.0
            bs2 = 0.0
            for f in range(8):
                e1 = e[FACET_CARD[f]]
                e2 = e[FACET_DIAG[f]]
                ok1 = e1 == e1
                ok2 = e2 == e2
                kind = -1
                s_sq = 0.0
                s1 = 0.0
                s2 = 0.0
                if ok1 and ok2:
                    s1 = (z0 - e1) / d1[f]
                    s2 = (e1 - e2) / d2[f]
                    if s2 <= 0.0:  # direction at or before the cardinal edge
                        if s1 > 0.0:
                            kind = 0
                            s_sq = s1 * s1
                    elif s2 * d1[f] >= s1 * d2[f]:  # at or beyond the diagonal edge
                        if z0 > e2:
                            kind = 2
                            t = (z0 - e2) / diag[f]
                            s_sq = t * t
                    else:  # strictly inside: s1 > 0 and s2 > 0
                        kind = 1
                        s_sq = s1 * s1 + s2 * s2
                elif ok1:
                    if z0 > e1:
                        kind = 0
                        t = (z0 - e1) / d1[f]
                        s_sq = t * t
                elif ok2:
                    if z0 > e2:
                        kind = 2
                        t = (z0 - e2) / diag[f]
                        s_sq = t * t
                if kind >= 0 and s_sq > best:
                    best = s_sq
                    bf = f
                    bkind = kind
                    bs1 = s1
                    bs2 = s2
            if bf < 0:  # no lower neighbour: a drained flat cell follows its D8 receiver
                rec[i, 0] = d8
                frac[i, 0] = 1.0
                dr = d8 // nc - r
                dc = d8 - (d8 // nc) * nc - c
                for k in range(8):
                    if DROW[k] == dr and DCOL[k] == dc:
                        az[i] = np.float32(_direction_azimuth(k, r, dist))
                        break
                continue
            kc = FACET_CARD[bf]
            kd = FACET_DIAG[bf]
            jc = (r + DROW[kc]) * nc + c + DCOL[kc]
            jd = (r + DROW[kd]) * nc + c + DCOL[kd]
            if bkind == 0:
                br = 0.0
                rec[i, 0] = jc
                frac[i, 0] = 1.0
            elif bkind == 2:
                br = alpha[bf]
                rec[i, 0] = jd
                frac[i, 0] = 1.0
            else:
                br = math.atan2(bs2, bs1)
                if br > alpha[bf]:
                    br = alpha[bf]
                fc = np.float32(1.0 - br / alpha[bf])
                fd = np.float32(1.0 - np.float64(fc))
                if fc <= 0.0:  # a share below float32 resolution goes with the other
                    rec[i, 0] = jd
                    frac[i, 0] = 1.0
                elif fd <= 0.0:
                    rec[i, 0] = jc
                    frac[i, 0] = 1.0
                else:
                    rec[i, 0] = jc
                    rec[i, 1] = jd
                    frac[i, 0] = fc
                    frac[i, 1] = fd
            a = CARD_AZIMUTH[bf] + FACET_SIGN[bf] * math.degrees(br)
            if a >= 360.0:
                a -= 360.0
            a32 = np.float32(a)
            if a32 >= np.float32(360.0):
                a32 = np.float32(0.0)
            az[i] = a32
    return rec, frac, az


@parallel_for_large_grids(cache=True, nogil=True)
def mfd_kernel(z, rec8, dist, exponent):
    """MFD receivers and proportions of every cell (Freeman 1991; Quinn et al. 1991).

    Each strictly lower valid neighbour k gets a share proportional to
    ``tan(β_k) ** p · L_k``: ``tan β_k`` the drop over the true distance to the neighbour's
    centre, ``L_k`` the contour length of Quinn et al. (1991) generalised to rectangular
    cells: half the cell side perpendicular to the flow for the cardinal neighbours
    (0.5·dx to N and S, 0.5·dy to E and W) and a quarter of the cell diagonal for the
    diagonal ones (0.354·w on a square cell of width w, as in Quinn et al.). These are the
    sides of the octagon through the quarter points of the cell sides. Returns (rec (n, 8)
    int32 packed to the front, frac (n, 8) float32).
    """
    nr, nc = z.shape
    n = nr * nc
    rec = np.full((n, 8), -1, dtype=np.int32)
    frac = np.zeros((n, 8), dtype=np.float32)
    for r in prange(nr):
        w = np.empty(8)
        js = np.empty(8, dtype=np.int64)
        dx = dist[r, 2]
        dy = 0.5 * (dist[r, 0] + dist[r, 4])
        for c in range(nc):
            i = r * nc + c
            d8 = rec8[i]
            if d8 < 0:
                continue
            z0 = np.float64(z[r, c])
            m = 0
            tot = 0.0
            for k in range(8):
                rr = r + DROW[k]
                cc = c + DCOL[k]
                if not _inside(rr, cc, nr, nc):
                    continue
                zn = np.float64(z[rr, cc])
                if zn < z0:  # NaN compares False
                    tanb = (z0 - zn) / dist[r, k]
                    if k == 0 or k == 4:
                        L = 0.5 * dx
                    elif k == 2 or k == 6:
                        L = 0.5 * dy
                    else:
                        L = 0.25 * dist[r, k]
                    wk = (tanb if exponent == 1.0 else tanb ** exponent) * L
                    w[m] = wk
                    js[m] = rr * nc + cc
                    tot += wk
                    m += 1
            if m == 0 or not tot > 0.0:
                rec[i, 0] = d8
                frac[i, 0] = 1.0
                continue
            big = 0
            for t in range(1, m):
                if w[t] > w[big]:
                    big = t
            acc = 0.0
            slot = 0
            bslot = 0
            for t in range(m):
                if t == big:
                    rec[i, slot] = js[t]
                    bslot = slot
                    slot += 1
                    continue
                f32 = np.float32(w[t] / tot)
                if f32 > 0.0:  # a share below float32 range joins the largest
                    rec[i, slot] = js[t]
                    frac[i, slot] = f32
                    acc += np.float64(f32)
                    slot += 1
            # the largest share (>= 1/8) closes the sum, so no share rounds to zero
            frac[i, bslot] = np.float32(1.0 - acc)
    return rec, frac


@njit(cache=True, nogil=True)
def topological_order(rec, rec8):
    """Valid cells (``rec8 != -2``) ordered so that every cell comes before all of its
    receivers: Kahn's (1962) algorithm, the output array doubling as the queue. Cells on a
    cycle (impossible for receivers built here) are left out."""
    n, m = rec.shape
    indeg = np.zeros(n, dtype=np.uint8)
    nvalid = 0
    for i in range(n):
        if rec8[i] != -2:
            nvalid += 1
        for k in range(m):
            j = rec[i, k]
            if j < 0:
                break
            indeg[j] += 1
    order = np.empty(nvalid, dtype=np.int32)
    tail = 0
    for i in range(n):
        if rec8[i] != -2 and indeg[i] == 0:
            order[tail] = i
            tail += 1
    head = 0
    while head < tail:
        i = order[head]
        head += 1
        for k in range(m):
            j = rec[i, k]
            if j < 0:
                break
            indeg[j] -= 1
            if indeg[j] == 0:
                order[tail] = j
                tail += 1
    if tail != nvalid:
        return order[:tail].copy()
    return order


@njit(cache=True, nogil=True)
def accumulate_kernel(rec, frac, order, weight):
    acc = weight.copy()
    m = rec.shape[1]
    for t in range(order.shape[0]):
        i = order[t]
        a = acc[i]
        if a == 0.0:
            continue
        # shares renormalised in float64: float32 shares sum to 1 only within ~1e-7, an
        # error that would compound along long flow paths
        tot = 0.0
        nk = 0
        for k in range(m):
            if rec[i, k] < 0:
                break
            tot += np.float64(frac[i, k])
            nk += 1
        if nk == 0:
            continue
        a /= tot
        for k in range(nk):
            acc[rec[i, k]] += np.float64(frac[i, k]) * a
    return acc


def accumulate_multi(rec, frac, order, weight):
    """Accumulate ``weight`` down a multi-receiver graph in one pass over ``order``.

    Parameters
    ----------
    rec : ndarray of int32 (ncells, m)
        Receivers, -1 for none (see :func:`multi_receivers`).
    frac : ndarray of float32 (ncells, m)
        Share of each cell's flow going to each receiver.
    order : ndarray of int32
        Valid cells, every cell before its receivers.
    weight : ndarray (ncells,)
        Quantity each cell contributes itself (its own weight stays in its total).

    Returns
    -------
    ndarray of float64 (ncells,)
        Weight of each cell plus the shares of all weight upstream that pass through it.
        Each cell's shares are renormalised to sum to 1 in float64, so the totals at the
        exits equal the total weight to float64 rounding.

    Examples
    --------
    >>> import numpy as np
    >>> rec = np.array([[1, 2], [-1, -1], [-1, -1]], dtype=np.int32)
    >>> frac = np.array([[0.25, 0.75], [0, 0], [0, 0]], dtype=np.float32)
    >>> accumulate_multi(rec, frac, np.array([0, 1, 2], dtype=np.int32), np.ones(3)).tolist()
    [1.0, 1.25, 1.75]
    """
    w = np.ascontiguousarray(weight, dtype=np.float64)
    return accumulate_kernel(rec, frac, order, w)
