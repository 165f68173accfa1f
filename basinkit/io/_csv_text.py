"""Compiled kernels of the CSV writer: numbers as text, and columns interleaved into rows.

Python formats a float in about half a microsecond and joins fields at about as much again;
the tables of a 1 000-outlet job hold tens of millions of values. Here each column becomes
one byte buffer (every field followed by a NUL byte) and one compiled pass interleaves the
columns into rows.

Floats are written as ``"%.10g"`` (C99 ``%g``, precision 10, as pandas' ``float_format``
and Python's ``%`` give them). The kernel scales each value to ten digits with correctly
rounded powers of ten and marks those whose rounding it cannot be sure of (the scaled value
within ``_MARGIN`` of a half-way point, or beyond the range where the scaling is accurate);
the caller formats those few with Python's own ``"%.10g" % x``, so the text is always
exactly Python's.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# the scaled value a·10^(9-e) lies in [1e9, 1e10) after two roundings, each within half a
# unit in the last place (the power of ten is correctly rounded, then the product or the
# quotient): a relative error of at most 2.3e-16, under 2.3e-6 at 1e10. A value whose
# fraction lies within this margin of one half is left to Python
_MARGIN = 1e-5
# 10^k correctly rounded (Python's float("1e{k}")), k = -300 .. 300
_POW10 = np.array([float(f"1e{k}") for k in range(-300, 301)])


@njit(cache=True, nogil=True)
def _g10(values, pow10, out, unsure):
    """Each value as ``"%.10g"`` followed by a NUL byte, into ``out`` (26 bytes per value
    suffice); NaN gives an empty field. Where ``unsure[i]`` is set the field is left empty
    for Python to write. Returns the bytes used."""
    p = 0
    digits = np.empty(10, dtype=np.uint8)
    for i in range(values.shape[0]):
        v = values[i]
        if v != v:
            out[p] = 0
            p += 1
            continue
        start = p
        neg = math.copysign(1.0, v) < 0.0
        a = -v if neg else v
        if neg:
            out[p] = 45  # "-"
            p += 1
        if a == math.inf:
            out[p] = 105  # "inf"
            out[p + 1] = 110
            out[p + 2] = 102
            out[p + 3] = 0
            p += 4
            continue
        if a == 0.0:
            out[p] = 48
            out[p + 1] = 0
            p += 2
            continue
        ok = False
        m = 0
        e = 0
        if 1e-280 < a < 1e280:
            e = int(math.floor(math.log10(a)))
            for _ in range(3):  # log10 may miss by one near powers of ten
                k = 9 - e
                s = a * pow10[300 + k] if k >= 0 else a / pow10[300 - k]
                if s >= 10_000_000_000.0:
                    e += 1
                    continue
                if s < 1_000_000_000.0:
                    e -= 1
                    continue
                f = math.floor(s)
                frac = s - f
                if abs(frac - 0.5) < _MARGIN:
                    break
                m = int(f) + (1 if frac > 0.5 else 0)
                if m == 10_000_000_000:  # rounded up to the next power of ten
                    m = 1_000_000_000
                    e += 1
                ok = True
                break
        if not ok:
            unsure[i] = True
            out[start] = 0
            p = start + 1
            continue
        for j in range(9, -1, -1):
            digits[j] = 48 + m % 10
            m //= 10
        last = 9  # the last digit that is not a trailing zero
        while last > 0 and digits[last] == 48:
            last -= 1
        if -4 <= e < 10:  # positional
            if e >= 0:
                for j in range(e + 1):
                    out[p] = digits[j]
                    p += 1
                if last > e:
                    out[p] = 46
                    p += 1
                    for j in range(e + 1, last + 1):
                        out[p] = digits[j]
                        p += 1
            else:
                out[p] = 48
                out[p + 1] = 46
                p += 2
                for _ in range(-e - 1):
                    out[p] = 48
                    p += 1
                for j in range(last + 1):
                    out[p] = digits[j]
                    p += 1
        else:  # exponent: d.ddde+XX
            out[p] = digits[0]
            p += 1
            if last > 0:
                out[p] = 46
                p += 1
                for j in range(1, last + 1):
                    out[p] = digits[j]
                    p += 1
            out[p] = 101
            out[p + 1] = 45 if e < 0 else 43
            p += 2
            x = -e if e < 0 else e
            if x >= 100:
                out[p] = 48 + x // 100
                p += 1
            out[p] = 48 + (x // 10) % 10
            out[p + 1] = 48 + x % 10
            p += 2
        out[p] = 0
        p += 1
    return p


@njit(cache=True, nogil=True)
def _ints(values, out):
    """Each value in decimal followed by a NUL byte (21 bytes per value suffice; the caller
    keeps the smallest int64 away). Returns the bytes used."""
    p = 0
    tmp = np.empty(20, dtype=np.uint8)
    for i in range(values.shape[0]):
        v = values[i]
        if v < 0:
            out[p] = 45
            p += 1
            v = -v
        k = 0
        while True:
            tmp[k] = 48 + v % 10
            v //= 10
            k += 1
            if v == 0:
                break
        for j in range(k - 1, -1, -1):
            out[p] = tmp[j]
            p += 1
        out[p] = 0
        p += 1
    return p


@njit(cache=True, nogil=True)
def _interleave(buf, starts, n, out):
    """Rows from columns: column ``c`` is ``n`` NUL-ended fields from ``buf[starts[c]]``;
    row ``r`` is its fields joined by commas and ended by a newline. Returns the bytes
    used."""
    ncols = starts.shape[0]
    cur = starts.copy()
    p = 0
    for _ in range(n):
        for c in range(ncols):
            q = cur[c]
            while buf[q] != 0:
                out[p] = buf[q]
                p += 1
                q += 1
            cur[c] = q + 1
            out[p] = 44 if c < ncols - 1 else 10
            p += 1
    return p


def float_fields(values) -> bytes:
    """A float column as NUL-ended ``"%.10g"`` fields (NaN empty)."""
    v = np.ascontiguousarray(values, dtype=np.float64)
    out = np.empty(26 * v.size + 1, dtype=np.uint8)
    unsure = np.zeros(v.size, dtype=np.bool_)
    used = _g10(v, _POW10, out, unsure)
    if not unsure.any():
        return out[:used].tobytes()
    text = out[:used].tobytes().split(b"\0")[:-1]
    for i in np.flatnonzero(unsure).tolist():
        text[i] = ("%.10g" % float(v[i])).encode("ascii")
    return b"\0".join(text) + b"\0"


def int_fields(values) -> bytes | None:
    """An integer column as NUL-ended decimal fields; None for values beyond int64's
    range less its smallest value."""
    if values.dtype.kind == "u" and values.size and values.max() > np.iinfo(np.int64).max:
        return None
    v = np.ascontiguousarray(values, dtype=np.int64)
    if v.size and v.min() == np.iinfo(np.int64).min:
        return None
    out = np.empty(21 * v.size + 1, dtype=np.uint8)
    return out[:_ints(v, out)].tobytes()


def text_fields(texts) -> bytes | None:
    """Text fields (already quoted as CSV needs) as NUL-ended UTF-8; None when one holds a
    NUL character."""
    joined = "\0".join(texts) + "\0"
    if joined.count("\0") != len(texts):
        return None
    return joined.encode("utf-8")


def rows_text(columns, n) -> str:
    """CSV rows (commas, ``\\n`` line ends) from the NUL-ended field buffers of the
    columns, ``n`` rows each."""
    starts = np.cumsum([0] + [len(b) for b in columns[:-1]], dtype=np.int64)
    buf = np.frombuffer(b"".join(columns), dtype=np.uint8)
    out = np.empty(buf.size + 1, dtype=np.uint8)
    used = _interleave(buf, starts, n, out)
    return out[:used].tobytes().decode("utf-8")
