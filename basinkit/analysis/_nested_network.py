"""Numba kernels for the network measures of nested catchments: per label range, its
channel cells (listed by label), their Strahler streams cut at the catchment's edge, and
the counts, lengths and areas per order, summed in the same order as numpy's ``bincount``
and ``sum`` over the catchment's cells would (so the results are the same, bit for bit).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._sorting import argsort_stable


@njit(cache=True, nogil=True)
def _block_sum(a, start, n):
    """numpy's sum of at most 128 values: plain below 8, else 8 accumulators."""
    if n < 8:
        res = 0.0
        for i in range(start, start + n):
            res += a[i]
        return res
    r = np.empty(8)
    for j in range(8):
        r[j] = a[start + j]
    i = 8
    m = n - n % 8
    while i < m:
        for j in range(8):
            r[j] += a[start + i + j]
        i += 8
    res = ((r[0] + r[1]) + (r[2] + r[3])) + ((r[4] + r[5]) + (r[6] + r[7]))
    while i < n:
        res += a[start + i]
        i += 1
    return res


@njit(cache=True, nogil=True)
def pairwise_sum(a, start, n):
    """``np.sum`` of ``a[start:start + n]`` (float64, contiguous): numpy's pairwise
    summation (blocks of at most 128, halves at multiples of 8), without recursion."""
    if n <= 128:
        return _block_sum(a, start, n)
    fs = np.empty(64, dtype=np.int64)  # frames: start, length, phase, left sum
    fn = np.empty(64, dtype=np.int64)
    fp = np.empty(64, dtype=np.int64)
    fl = np.empty(64)
    top = 0
    fs[0] = start
    fn[0] = n
    fp[0] = 0
    ret = 0.0
    while top >= 0:
        s = fs[top]
        m = fn[top]
        if m <= 128:
            ret = _block_sum(a, s, m)
            top -= 1
            continue
        m2 = m // 2
        m2 -= m2 % 8
        if fp[top] == 0:
            fp[top] = 1
            top += 1
            fs[top] = s
            fn[top] = m2
            fp[top] = 0
        elif fp[top] == 1:
            fl[top] = ret
            fp[top] = 2
            top += 1
            fs[top] = s + m2
            fn[top] = m - m2
            fp[top] = 0
        else:
            ret = fl[top] + ret
            top -= 1
    return ret


@njit(cache=True, nogil=True)
def range_network(lo, hi, cstarts, corder, lab, receiver, rdist, stream, strahler, uparea,
                  nstreams, maxorder):
    """For each label range ``lo[i]..hi[i]`` (channel cells
    ``corder[cstarts[lo]:cstarts[hi + 1]]``): the channel cell count, the number of
    streams, the highest order, the total length and per order ``k`` (columns 1..maxorder)
    the stream count, the summed stream length and the summed largest upstream area of
    each stream. A step to a receiver outside the range counts 0 (the stream is cut
    there)."""
    n = lo.shape[0]
    ncell = np.zeros(n, dtype=np.int64)
    nstream = np.zeros(n, dtype=np.int64)
    kmax = np.zeros(n, dtype=np.int64)
    total = np.zeros(n)
    n_k = np.zeros((n, maxorder + 1), dtype=np.int64)
    l_k = np.zeros((n, maxorder + 1))
    a_k = np.zeros((n, maxorder + 1))
    slot = np.full(nstreams, -1, dtype=np.int64)
    ids = np.empty(nstreams, dtype=np.int64)
    s_len = np.empty(nstreams)
    s_ord = np.empty(nstreams, dtype=np.int64)
    s_area = np.empty(nstreams)
    steps = np.empty(corder.shape[0])
    for i in range(n):
        s = cstarts[lo[i]]
        e = cstarts[hi[i] + 1]
        m = 0
        for p in range(s, e):
            c = corder[p]
            r = receiver[c]
            st = 0.0
            if r >= 0:
                lr = lab[r]
                if lr >= lo[i] and lr <= hi[i]:
                    st = rdist[c]
            steps[p - s] = st
            sid = stream[c]
            j = slot[sid]
            if j < 0:
                j = m
                slot[sid] = j
                ids[j] = sid
                s_len[j] = 0.0
                s_area[j] = 0.0
                m += 1
            s_len[j] += st
            s_ord[j] = strahler[c]
            a = uparea[c]
            if a > s_area[j] or a != a:  # as np.maximum: NaN wins
                s_area[j] = a
        ncell[i] = e - s
        nstream[i] = m
        total[i] = pairwise_sum(steps, np.int64(0), e - s)
        # streams in increasing id (as np.unique), sums per order in that order
        srt = argsort_stable(ids[:m])
        km = 0
        for q in range(m):
            j = srt[q]
            k = s_ord[j]
            n_k[i, k] += 1
            l_k[i, k] += s_len[j]
            a_k[i, k] += s_area[j]
            if k > km:
                km = k
            slot[ids[j]] = -1
        kmax[i] = km
    return ncell, nstream, kmax, total, n_k, l_k, a_k
