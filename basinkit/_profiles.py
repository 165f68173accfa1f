"""Compiled kernels for longitudinal profiles, χ and knickpoints.

Two kinds of arrays are used:

- *grid* arrays: flat, one entry per DEM cell, with the D8 receiver ``rec`` (-1 leaves the
  grid, -2 nodata) and the ``stack`` (Braun & Willett 2013);
- *local* arrays: a subset of cells (a channel network, or one flow path) in stack order,
  with ``lrec`` the local index of each cell's receiver (-1 where the subset ends: the
  outlet or base level). Because the order is the stack's, a forward loop over local arrays
  goes downstream to upstream.
"""

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def preferred_donor(rec, order, key, tie):
    """For every cell, the donor with the greatest ``key`` (ties: greatest ``tie``, then the
    smallest index). ``order`` lists the cells to consider (any order); ``rec`` may be a grid
    or a local receiver array. Returns int64 donor indices, -1 where there is no donor."""
    n = rec.shape[0]
    donor = np.full(n, -1, dtype=np.int64)
    for t in range(order.shape[0]):
        i = order[t]
        r = rec[i]
        if r < 0:
            continue
        d = donor[r]
        if d < 0:
            donor[r] = i
            continue
        ki = key[i]
        kd = key[d]
        if ki > kd or (ki == kd and (tie[i] > tie[d] or (tie[i] == tie[d] and i < d))):
            donor[r] = i
    return donor


@njit(cache=True, nogil=True)
def trace_donors(donor, start):
    """Cells from ``start`` upstream, always to the preferred donor, until none is left."""
    n = 0
    j = start
    while j >= 0:
        n += 1
        j = donor[j]
    out = np.empty(n, dtype=np.int64)
    j = start
    for t in range(n):
        out[t] = j
        j = donor[j]
    return out


@njit(cache=True, nogil=True)
def cumulate_upstream(lrec, increment):
    """out[j] = out[lrec[j]] + increment[j] (0 + increment at base cells is replaced by 0):
    integrates a quantity from base level upstream over local arrays in stack order."""
    n = lrec.shape[0]
    out = np.zeros(n, dtype=np.float64)
    for j in range(n):
        r = lrec[j]
        if r >= 0:
            out[j] = out[r] + increment[j]
    return out


@njit(cache=True, nogil=True)
def chi_local(lrec, step, log_area_ratio, theta):
    """χ = ∫ (A0/A)^θ dx from base level (Perron & Royden 2013) over local arrays.

    The reach from a cell to its receiver carries the cell's own upstream area A, so its
    contribution is step · exp(-θ · ln(A / A0)).
    """
    n = lrec.shape[0]
    out = np.zeros(n, dtype=np.float64)
    for j in range(n):
        r = lrec[j]
        if r >= 0:
            out[j] = out[r] + step[j] * np.exp(-theta * log_area_ratio[j])
    return out


@njit(cache=True, nogil=True)
def stream_ids(lrec, ldonor):
    """Hack-style decomposition of a tree into streams: a cell continues its receiver's
    stream when it is the receiver's preferred donor, otherwise it starts a new stream
    (numbered 1, 2, ... in stack order, so the first base cell's stream is number 1)."""
    n = lrec.shape[0]
    sid = np.zeros(n, dtype=np.int32)
    nxt = 0
    for j in range(n):
        r = lrec[j]
        if r >= 0 and ldonor[r] == j:
            sid[j] = sid[r]
        else:
            nxt += 1
            sid[j] = nxt
    return sid


@njit(cache=True, nogil=True)
def window_slope(lrec, ldonor, step, z, half, mode, max_walk_m):
    """Local slope at every node over a window along the flow path.

    ``mode`` 0: the window reaches ``half`` metres downstream (along receivers) and
    ``half`` metres upstream (along preferred donors); elevations at its ends are linearly
    interpolated between nodes. ``mode`` 1: the window reaches down and up until the
    elevation differs by ``half`` metres from the node's (a fixed vertical interval), the
    distances at its ends being interpolated; walks stop after ``max_walk_m``.
    Where the path ends first, the window stops at its end. Slope = drop / window length.
    """
    n = lrec.shape[0]
    out = np.full(n, np.nan)
    for j in range(n):
        zj = z[j]
        # downstream end
        k = j
        dd = 0.0
        zd = zj
        while True:
            r = lrec[k]
            if r < 0:
                zd = z[k]
                break
            s = step[k]
            if mode == 0:
                if dd + s >= half:
                    f = (half - dd) / s if s > 0 else 1.0
                    zd = z[k] + f * (z[r] - z[k])
                    dd = half
                    break
            else:
                drop_r = zj - z[r]
                if drop_r >= half or dd + s > max_walk_m:
                    drop_k = zj - z[k]
                    if drop_r > drop_k and drop_r >= half:
                        f = (half - drop_k) / (drop_r - drop_k)
                    else:
                        f = 1.0
                    dd = dd + f * s
                    zd = z[k] + f * (z[r] - z[k])
                    break
            dd += s
            k = r
        # upstream end
        u = j
        du = 0.0
        zu = zj
        while True:
            d = ldonor[u]
            if d < 0:
                zu = z[u]
                break
            s = step[d]
            if mode == 0:
                if du + s >= half:
                    f = (half - du) / s if s > 0 else 1.0
                    zu = z[u] + f * (z[d] - z[u])
                    du = half
                    break
            else:
                rise_d = z[d] - zj
                if rise_d >= half or du + s > max_walk_m:
                    rise_u = z[u] - zj
                    if rise_d > rise_u and rise_d >= half:
                        f = (half - rise_u) / (rise_d - rise_u)
                    else:
                        f = 1.0
                    du = du + f * s
                    zu = z[u] + f * (z[d] - z[u])
                    break
            du += s
            u = d
        span = dd + du
        if span > 0:
            out[j] = (zu - zd) / span
    return out


@njit(cache=True, nogil=True)
def _line_sse(sx, sy, sxx, sxy, syy, n):
    """Residual sum of squares of the least-squares line from the running sums."""
    if n < 2:
        return 0.0
    vx = sxx - sx * sx / n
    vy = syy - sy * sy / n
    cxy = sxy - sx * sy / n
    if vx <= 0:
        return max(vy, 0.0)
    return max(vy - cxy * cxy / vx, 0.0)


@njit(cache=True, nogil=True)
def best_hinge(x, y, lo, hi, min_nodes):
    """Best single break of a continuous two-piece line (hinge model
    y = a + b·x + c·max(0, x - x_k)) over nodes lo..hi-1 (x increasing), by least squares,
    trying every node with at least ``min_nodes`` nodes on each side as the hinge. Running
    sums make each trial O(1) (data centred first for round-off).

    Returns (k, sse_hinge, sse_line, slope_below, slope_above); k = -1 if none fits.
    """
    n = hi - lo
    mx = 0.0
    my = 0.0
    for i in range(lo, hi):
        mx += x[i]
        my += y[i]
    mx /= n
    my /= n
    xs = x[lo:hi] - mx
    ys = y[lo:hi] - my
    sx = 0.0
    sy = 0.0
    sxx = 0.0
    sxy = 0.0
    syy = 0.0
    for i in range(n):
        sx += xs[i]
        sy += ys[i]
        sxx += xs[i] * xs[i]
        sxy += xs[i] * ys[i]
        syy += ys[i] * ys[i]
    sse_line = _line_sse(sx, sy, sxx, sxy, syy, n)
    best_k = -1
    best_sse = np.inf
    best_b = np.nan
    best_c = np.nan
    if n < 2 * min_nodes + 1:
        return best_k, best_sse, sse_line, best_b, best_c
    ux = 0.0
    ux2 = 0.0
    uy = 0.0
    uxy = 0.0
    nu = 0
    for i in range(n - 1, min_nodes - 1, -1):
        # the suffix sums hold nodes i+1..n-1, the ones above a hinge at node i
        if nu >= min_nodes and i >= min_nodes:
            xk = xs[i]
            sh = ux - nu * xk
            shh = ux2 - 2 * xk * ux + nu * xk * xk
            shx = ux2 - xk * ux
            shy = uxy - xk * uy
            m00 = float(n)
            m01 = sx
            m02 = sh
            m11 = sxx
            m12 = shx
            m22 = shh
            r0 = sy
            r1 = sxy
            r2 = shy
            c00 = m11 * m22 - m12 * m12
            c01 = m01 * m22 - m12 * m02
            c02 = m01 * m12 - m11 * m02
            det = m00 * c00 - m01 * c01 + m02 * c02
            if det > 0 and np.isfinite(det):
                a = (r0 * c00 - m01 * (r1 * m22 - m12 * r2) + m02 * (r1 * m12 - m11 * r2)) / det
                b = (m00 * (r1 * m22 - r2 * m12) - r0 * c01 + m02 * (m01 * r2 - r1 * m02)) / det
                c = (m00 * (m11 * r2 - m12 * r1) - m01 * (m01 * r2 - r1 * m02) + r0 * c02) / det
                sse = syy - (a * r0 + b * r1 + c * r2)
                if sse < 0:
                    sse = 0.0
                if sse < best_sse:
                    best_sse = sse
                    best_k = lo + i
                    best_b = b
                    best_c = b + c
        ux += xs[i]
        ux2 += xs[i] * xs[i]
        uy += ys[i]
        uxy += xs[i] * ys[i]
        nu += 1
    return best_k, best_sse, sse_line, best_b, best_c


@njit(cache=True, nogil=True)
def knickpoints_one(x, y, min_nodes, noise_var, min_ratio, min_relief, max_breaks):
    """Binary segmentation of one χ–z profile with hinge fits.

    A break is kept when the Bayesian information criterion of the two-piece fit beats the
    single line's (residual variance floored at ``noise_var``, the square of the vertical
    precision), the steepness changes by at least the fraction ``min_ratio`` and the
    elevation above (or below) the downstream line at the reach's top end is at least
    ``min_relief`` metres; each kept piece is searched again.
    Returns arrays (node index, slope below, slope above, relief m), by node index.
    """
    n = x.shape[0]
    ks = np.empty(max_breaks, dtype=np.int64)
    kb = np.empty(max_breaks)
    ka = np.empty(max_breaks)
    kr = np.empty(max_breaks)
    nk = 0
    stack_lo = np.empty(2 * max_breaks + 2, dtype=np.int64)
    stack_hi = np.empty(2 * max_breaks + 2, dtype=np.int64)
    sp = 0
    stack_lo[0] = 0
    stack_hi[0] = n
    sp = 1
    while sp > 0 and nk < max_breaks:
        sp -= 1
        lo = stack_lo[sp]
        hi = stack_hi[sp]
        m = hi - lo
        if m < 2 * min_nodes + 1:
            continue
        k, sse2, sse1, b, c = best_hinge(x, y, lo, hi, min_nodes)
        if k < 0:
            continue
        v1 = max(sse1 / m, noise_var)
        v2 = max(sse2 / m, noise_var)
        bic1 = m * np.log(v1) + 2 * np.log(m)
        bic2 = m * np.log(v2) + 4 * np.log(m)
        if bic2 >= bic1:
            continue
        ref = max(abs(b), abs(c))
        if ref <= 0 or abs(c - b) < min_ratio * ref:
            continue
        relief = (c - b) * (x[hi - 1] - x[k])
        if abs(relief) < min_relief:
            continue
        ks[nk] = k
        kb[nk] = b
        ka[nk] = c
        kr[nk] = relief
        nk += 1
        stack_lo[sp] = lo
        stack_hi[sp] = k + 1
        sp += 1
        stack_lo[sp] = k
        stack_hi[sp] = hi
        sp += 1
    order = np.argsort(ks[:nk])
    return ks[:nk][order], kb[:nk][order], ka[:nk][order], kr[:nk][order]
