"""Numba kernels for exact order statistics over slices of one array: a wavelet matrix.

The values are first replaced by their dense ranks (an LSD radix sort of order-preserving
integer keys, :func:`dense_ranks`); the wavelet matrix over the ranks (Claude, Navarro &
Ordóñez 2015, "The wavelet matrix", Information Systems 47:15-32) then answers, for any
slice ``[s, e)``, how many values are below a rank and which rank is the k-th smallest, in
one step per bit of the ranks, whatever the slice's length. Nested catchments are slices
of the cells listed by depth-first label, so their percentiles and hypsometric counts
cost no more for a catchment of the whole grid than for one of a few cells.
"""

from __future__ import annotations

import numpy as np
from numba import njit

_M1 = np.uint64(0x5555555555555555)
_M2 = np.uint64(0x3333333333333333)
_M4 = np.uint64(0x0F0F0F0F0F0F0F0F)
_H01 = np.uint64(0x0101010101010101)
_ONE = np.uint64(1)
_TOP = np.uint64(0x8000000000000000)


@njit(cache=True, nogil=True)
def _order_keys(x, bits, top):
    """Keys of float bits (``top`` = the sign bit of the width): ordered as the values."""
    n = x.shape[0]
    keys = np.empty(n, dtype=bits.dtype)
    for i in range(n):
        b = bits[i]
        if np.isnan(x[i]):
            keys[i] = ~(b & 0)  # all ones: above everything
        elif b == top:  # -0.0: as 0.0
            keys[i] = top
        elif b & top:
            keys[i] = ~b
        else:
            keys[i] = b | top
    return keys


def order_keys(values) -> np.ndarray:
    """Unsigned integer keys ordered as the float values (−0.0 as 0.0, NaN above
    everything): uint32 for float32 values, uint64 otherwise."""
    x = np.asarray(values)
    if x.dtype == np.float32:
        x = np.ascontiguousarray(x)
        return _order_keys(x, x.view(np.uint32), np.uint32(0x80000000))
    x = np.ascontiguousarray(x, dtype=np.float64)
    return _order_keys(x, x.view(np.uint64), _TOP)


@njit(cache=True, nogil=True)
def _radix_order(keys, width):
    """Stable LSD radix sort of unsigned keys of ``width`` bits by 11-bit digits, in place
    (``keys`` is reused): the order (int32) that sorts them, and the sorted keys. Digits
    that are the same in every key are skipped."""
    n = keys.shape[0]
    nd = (width + 10) // 11
    mask = np.uint64(2047)
    hist = np.zeros((nd, 2049), dtype=np.int64)
    for i in range(n):
        k = np.uint64(keys[i])
        for d in range(nd):
            hist[d, ((k >> np.uint64(11 * d)) & mask) + 1] += 1
    idx = np.arange(n).astype(np.int32)
    kk = keys
    idx2 = np.empty(n, dtype=np.int32)
    kk2 = np.empty(n, dtype=keys.dtype)
    for d in range(nd):
        h = hist[d]
        skip = False
        for b in range(1, 2049):
            if h[b] == n:
                skip = True
        if skip or n == 0:
            continue
        for b in range(1, 2049):
            h[b] += h[b - 1]
        sh = np.uint64(11 * d)
        for i in range(n):
            k = kk[i]
            b = (np.uint64(k) >> sh) & mask
            p = h[b]
            h[b] = p + 1
            kk2[p] = k
            idx2[p] = idx[i]
        kk, kk2 = kk2, kk
        idx, idx2 = idx2, idx
    return idx, kk


@njit(cache=True, nogil=True)
def _ranks_from_order(order, sorted_keys):
    n = order.shape[0]
    ranks = np.empty(n, dtype=np.int32)
    first = np.empty(n, dtype=np.int32)  # position of each distinct key's first value
    r = -1
    for i in range(n):
        if i == 0 or sorted_keys[i] != sorted_keys[i - 1]:
            r += 1
            first[r] = order[i]
        ranks[order[i]] = r
    return ranks, first[:r + 1].copy()


def dense_ranks(values):
    """Dense ranks (int32) of float values and the distinct values in increasing order
    (``distinct[ranks] == values``; NaNs, if any, rank last)."""
    x = np.asarray(values)
    if x.size >= 2 ** 31:
        raise ValueError("dense_ranks: more than 2**31 values (int32 ranks and positions)")
    if x.dtype != np.float32:
        x = x.astype(np.float64, copy=False)
    keys = order_keys(x)
    order, sk = _radix_order(keys, keys.dtype.itemsize * 8)
    del keys
    ranks, first = _ranks_from_order(order, sk)
    del order, sk
    return ranks, x[first].astype(np.float64)


@njit(cache=True, inline="always")
def _popcount(x):
    x = x - ((x >> _ONE) & _M1)
    x = (x & _M2) + ((x >> np.uint64(2)) & _M2)
    x = (x + (x >> np.uint64(4))) & _M4
    return np.int64((x * _H01) >> np.uint64(56))


@njit(cache=True, nogil=True)
def build_wavelet(ranks, nbits):
    """Wavelet matrix of int32 ranks in ``[0, 2**nbits)`` (reordered in place): per level (highest bit first)
    and per 64 values, the count of ones before them and their bits (``blocks[level, w]
    = (ones before, bits)``, side by side so that a rank query reads one cache line), and
    per level the count of zeros."""
    n = ranks.shape[0]
    nw = (n >> 6) + 1
    blocks = np.zeros((nbits, nw + 1, 2), dtype=np.uint64)
    zeros = np.zeros(nbits, dtype=np.int64)
    cur = ranks  # reordered level by level: the ranks are used up
    nxt = np.empty(n, dtype=np.int32)
    ones = np.empty(n + 1, dtype=np.int32)
    for lvl in range(nbits):
        bit = nbits - 1 - lvl
        zi = 0
        oi = 0
        c = 0
        for w in range(nw):
            base = w << 6
            end = min(base + 64, n)
            word = np.uint64(0)
            for i in range(base, end):
                v = cur[i]
                b = (v >> bit) & 1
                word |= np.uint64(b) << np.uint64(i - base)
                nxt[zi] = v  # branch-free stable partition
                ones[oi] = v
                zi += 1 - b
                oi += b
            blocks[lvl, w, 1] = word
            blocks[lvl, w, 0] = np.uint64(c)
            c += _popcount(word)
        blocks[lvl, nw, 0] = np.uint64(c)
        zeros[lvl] = zi
        for j in range(oi):
            nxt[zi + j] = ones[j]
        cur, nxt = nxt, cur
    return blocks, zeros


@njit(cache=True, inline="always")
def _rank1(blocks, lvl, i):
    """Ones among the first i bits of a level."""
    w = i >> 6
    r = i & 63
    c = np.int64(blocks[lvl, w, 0])
    if r:
        c += _popcount(blocks[lvl, w, 1] & ((_ONE << np.uint64(r)) - _ONE))
    return c


@njit(cache=True, nogil=True)
def count_below(blocks, zeros, s, e, x):
    """How many values of the slice ``[s, e)`` have a rank below ``x``."""
    nbits = zeros.shape[0]
    if x <= 0 or e <= s:
        return 0
    if x >= (1 << nbits):
        return e - s
    res = 0
    for lvl in range(nbits):
        os_ = _rank1(blocks, lvl, s)
        oe = _rank1(blocks, lvl, e)
        if (x >> (nbits - 1 - lvl)) & 1:
            res += (e - s) - (oe - os_)
            s = zeros[lvl] + os_
            e = zeros[lvl] + oe
        else:
            s = s - os_
            e = e - oe
    return res


@njit(cache=True, nogil=True)
def kth_smallest(blocks, zeros, s, e, k):
    """Rank of the k-th smallest value (0-based) of the slice ``[s, e)`` (0 <= k < e - s)."""
    nbits = zeros.shape[0]
    val = 0
    for lvl in range(nbits):
        os_ = _rank1(blocks, lvl, s)
        oe = _rank1(blocks, lvl, e)
        nz = (e - s) - (oe - os_)
        if k < nz:
            s = s - os_
            e = e - oe
        else:
            k -= nz
            val |= 1 << (nbits - 1 - lvl)
            s = zeros[lvl] + os_
            e = zeros[lvl] + oe
    return val


@njit(cache=True, nogil=True)
def counts_below(blocks, zeros, s, e, x):
    """``count_below`` for slices ``[s[i], e[i])`` and thresholds ``x[i, :]``."""
    n, m = x.shape
    out = np.zeros((n, m), dtype=np.int64)
    for i in range(n):
        for j in range(m):
            out[i, j] = count_below(blocks, zeros, s[i], e[i], x[i, j])
    return out


@njit(cache=True, nogil=True)
def kth_ranks(blocks, zeros, s, e, k):
    """``kth_smallest`` for slices ``[s[i], e[i])`` and orders ``k[i, :]`` (−1 where
    ``k`` is outside the slice)."""
    n, m = k.shape
    out = np.full((n, m), -1, dtype=np.int64)
    for i in range(n):
        for j in range(m):
            if 0 <= k[i, j] < e[i] - s[i]:
                out[i, j] = kth_smallest(blocks, zeros, s[i], e[i], k[i, j])
    return out


class WaveletMatrix:
    """Order statistics over slices of a float array (exact: ranks of the values)."""

    def __init__(self, values):
        self.ranks, self.distinct = dense_ranks(values)
        nbits = max(int(self.distinct.size - 1).bit_length(), 1)
        self.blocks, self.zeros = build_wavelet(self.ranks, nbits)
        del self.ranks

    def counts_below(self, s, e, thresholds, threads=2):
        """How many values of each slice ``[s[i], e[i])`` are below ``thresholds[i, j]``
        (floats)."""
        x = np.searchsorted(self.distinct, thresholds, side="left").astype(np.int64)
        return _by_rows(counts_below, self.blocks, self.zeros, s, e, x, threads)

    def kth_values(self, s, e, k, threads=2):
        """The k[i, j]-th smallest value (0-based) of each slice (NaN where k is outside
        the slice)."""
        r = _by_rows(kth_ranks, self.blocks, self.zeros, s, e, np.asarray(k, np.int64),
                     threads)
        out = self.distinct[np.maximum(r, 0)]
        return np.where(r >= 0, out, np.nan)


def _by_rows(kernel, blocks, zeros, s, e, q, threads):
    """``kernel`` over the rows of the queries, split between threads (it drops the GIL)."""
    s = np.asarray(s, np.int64)
    e = np.asarray(e, np.int64)
    n = s.size
    if threads <= 1 or n < 64:
        return kernel(blocks, zeros, s, e, q)
    from concurrent.futures import ThreadPoolExecutor

    cut = np.linspace(0, n, int(threads) + 1).astype(np.int64)
    with ThreadPoolExecutor(int(threads)) as pool:
        parts = list(pool.map(lambda ab: kernel(blocks, zeros, s[ab[0]:ab[1]], e[ab[0]:ab[1]],
                                                 q[ab[0]:ab[1]]), zip(cut[:-1], cut[1:])))
    return np.concatenate(parts)
