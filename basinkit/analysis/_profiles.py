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

from ._sorting import argsort_stable, search_left


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
def best_break(x, y, lo, hi, min_nodes):
    """Best single break of a two-piece line over nodes lo..hi-1 (x increasing), by least
    squares: y = a + b·x + c·h + d·H with h = max(0, x - x_k) and H = 1 above node k
    (nodes k+1..), trying every node with at least ``min_nodes`` nodes on each side as k.
    ``c`` is the change of slope (a slope-break knickpoint), ``d`` the offset between the
    two pieces (a vertical-step knickpoint). Running sums make each trial O(1); the data
    are centred first for round-off.

    Returns (k, sse_break, sse_line, slope_below, slope_above, step).
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
    best_d = np.nan
    if n < 2 * min_nodes + 1:
        return best_k, best_sse, sse_line, best_b, best_c, best_d
    M = np.empty((4, 4))
    r = np.empty(4)
    ux = 0.0
    ux2 = 0.0
    uy = 0.0
    uxy = 0.0
    nu = 0
    for i in range(n - 1, min_nodes - 1, -1):
        # the suffix sums hold nodes i+1..n-1, the ones above a break at node i
        if nu >= min_nodes and i >= min_nodes:
            xk = xs[i]
            sh = ux - nu * xk
            shh = ux2 - 2 * xk * ux + nu * xk * xk
            shx = ux2 - xk * ux
            shy = uxy - xk * uy
            M[0, 0] = n
            M[0, 1] = sx
            M[0, 2] = sh
            M[0, 3] = nu
            M[1, 1] = sxx
            M[1, 2] = shx
            M[1, 3] = ux
            M[2, 2] = shh
            M[2, 3] = sh
            M[3, 3] = nu
            for p in range(4):
                for q in range(p):
                    M[p, q] = M[q, p]
            r[0] = sy
            r[1] = sxy
            r[2] = shy
            r[3] = uy
            # Gaussian elimination with partial pivoting (4 x 4)
            A = M.copy()
            v = r.copy()
            ok = True
            for col in range(4):
                piv = col
                for row in range(col + 1, 4):
                    if abs(A[row, col]) > abs(A[piv, col]):
                        piv = row
                if abs(A[piv, col]) < 1e-12 * (abs(M[0, 0]) + abs(M[1, 1]) + 1.0):
                    ok = False
                    break
                if piv != col:
                    for q in range(4):
                        tmp = A[col, q]
                        A[col, q] = A[piv, q]
                        A[piv, q] = tmp
                    tmp = v[col]
                    v[col] = v[piv]
                    v[piv] = tmp
                for row in range(col + 1, 4):
                    f = A[row, col] / A[col, col]
                    for q in range(col, 4):
                        A[row, q] -= f * A[col, q]
                    v[row] -= f * v[col]
            if ok:
                beta = np.empty(4)
                for row in range(3, -1, -1):
                    acc = v[row]
                    for q in range(row + 1, 4):
                        acc -= A[row, q] * beta[q]
                    beta[row] = acc / A[row, row]
                sse = syy - (beta[0] * r[0] + beta[1] * r[1] + beta[2] * r[2]
                             + beta[3] * r[3])
                if sse < 0:
                    sse = 0.0
                if sse < best_sse:
                    best_sse = sse
                    best_k = lo + i
                    best_b = beta[1]
                    best_c = beta[1] + beta[2]
                    best_d = beta[3]
        ux += xs[i]
        ux2 += xs[i] * xs[i]
        uy += ys[i]
        uxy += xs[i] * ys[i]
        nu += 1
    return best_k, best_sse, sse_line, best_b, best_c, best_d


@njit(cache=True, nogil=True)
def knickpoints_one(x, y, min_nodes, noise_var, min_ratio, min_relief, max_breaks):
    """Binary segmentation of one χ–z profile with two-piece fits (:func:`best_break`).

    A break is kept when the Bayesian information criterion of the two-piece fit (three
    more parameters: position, slope change, offset) beats the single line's, the residual
    variance floored at ``noise_var`` (the square of the vertical precision), and either
    the steepness changes by at least the fraction ``min_ratio`` or the pieces are offset
    by at least ``min_relief`` metres; besides, the elevation of the reach's top above (or
    below) the extension of the lower line must be at least ``min_relief``. Each kept
    piece is searched again.
    Returns arrays (node index, slope below, slope above, step m, relief m), by node.
    """
    n = x.shape[0]
    ks = np.empty(max_breaks, dtype=np.int64)
    kb = np.empty(max_breaks)
    ka = np.empty(max_breaks)
    kd = np.empty(max_breaks)
    kr = np.empty(max_breaks)
    nk = 0
    stack_lo = np.empty(2 * max_breaks + 2, dtype=np.int64)
    stack_hi = np.empty(2 * max_breaks + 2, dtype=np.int64)
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
        k, sse2, sse1, b, c, d = best_break(x, y, lo, hi, min_nodes)
        if k < 0:
            continue
        v1 = max(sse1 / m, noise_var)
        v2 = max(sse2 / m, noise_var)
        bic1 = m * np.log(v1) + 2 * np.log(m)
        bic2 = m * np.log(v2) + 5 * np.log(m)
        if bic2 >= bic1:
            continue
        ref = max(abs(b), abs(c))
        slope_break = ref > 0 and abs(c - b) >= min_ratio * ref
        step = abs(d) >= min_relief
        if not (slope_break or step):
            continue
        relief = d + (c - b) * (x[hi - 1] - x[k])
        if abs(relief) < min_relief and not step:
            continue
        ks[nk] = k
        kb[nk] = b
        ka[nk] = c
        kd[nk] = d
        kr[nk] = relief
        nk += 1
        stack_lo[sp] = lo
        stack_hi[sp] = k + 1
        sp += 1
        stack_lo[sp] = k + 1
        stack_hi[sp] = hi
        sp += 1
    order = argsort_stable(ks[:nk])
    return (ks[:nk][order], kb[:nk][order], ka[:nk][order], kd[:nk][order],
            kr[:nk][order])


@njit(cache=True, nogil=True)
def donor_lists(rec):
    """Donors of every cell in compressed form: the donors of cell i are
    ``donors[offsets[i]:offsets[i + 1]]`` (increasing cell index). One O(N) pass. Both
    int32 (a grid in memory has fewer than 2**31 cells: its receivers are int32), so
    that the table kept for a batch's profiles is 8 bytes per cell."""
    n = rec.shape[0]
    offsets = np.zeros(n + 1, dtype=np.int32)
    for i in range(n):
        r = rec[i]
        if r >= 0:
            offsets[r + 1] += 1
    for i in range(n):
        offsets[i + 1] += offsets[i]
    fill = offsets[:-1].copy()
    donors = np.empty(offsets[n], dtype=np.int32)
    for i in range(n):
        r = rec[i]
        if r >= 0:
            donors[fill[r]] = i
            fill[r] += 1
    return offsets, donors


@njit(cache=True, nogil=True)
def upstream_cells(offsets, donors, starts, level, threshold, stops):
    """Cells upstream of each start cell (itself included), breadth first, so that every
    cell comes after its receiver, only through cells with ``level >= threshold`` (e.g.
    Strahler order ≥ k, or a mask viewed as uint8 with threshold 1). Cells listed in
    ``stops`` (sorted; other outlets) are not entered. Work is proportional to the cells
    visited, not to the grid.

    Returns (cells int64, owner int64: index of the start cell each was reached from,
    parent int64: position of each cell's receiver in ``cells``, -1 for start cells).
    """
    nstop = stops.shape[0]
    cap = 1024
    out = np.empty(cap, dtype=np.int64)
    own = np.empty(cap, dtype=np.int64)
    par = np.empty(cap, dtype=np.int64)
    m = 0
    for s in range(starts.shape[0]):
        c0 = starts[s]
        if level[c0] < threshold:
            continue
        if m == cap:
            cap *= 2
            out = _grow(out, cap)
            own = _grow(own, cap)
            par = _grow(par, cap)
        out[m] = c0
        own[m] = s
        par[m] = -1
        m += 1
        head = m - 1
        while head < m:
            c = out[head]
            for t in range(offsets[c], offsets[c + 1]):
                d = donors[t]
                if level[d] < threshold:
                    continue
                if nstop > 1:
                    j = search_left(stops, d)
                    if j < nstop and stops[j] == d:
                        continue
                if m == cap:
                    cap *= 2
                    out = _grow(out, cap)
                    own = _grow(own, cap)
                    par = _grow(par, cap)
                out[m] = d
                own[m] = s
                par[m] = head
                m += 1
            head += 1
    return out[:m].copy(), own[:m].copy(), par[:m].copy()


@njit(cache=True, nogil=True)
def _grow(a, cap):
    b = np.empty(cap, dtype=a.dtype)
    for i in range(a.shape[0]):  # a loop: a slice assignment costs 2.5 s to compile
        b[i] = a[i]
    return b
