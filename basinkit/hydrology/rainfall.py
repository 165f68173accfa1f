"""Design rainfall: always the user's own — a design depth for a duration, or an
intensity–duration–frequency (IDF) table — spread in time by a temporal pattern (the NRCS
24-hour type I, IA, II or III distribution, a user hyetograph, or a uniform block).

basinkit ships no rainfall for any real place: the depths and IDF tables come from the
local agency's drainage manual or the user's own analysis.

References
----------
USDA Soil Conservation Service (1986). Urban Hydrology for Small Watersheds, TR-55,
appendix B (24-hour rainfall distributions).
Chow, V. T., Maidment, D. R., Mays, L. W. (1988). Applied Hydrology, McGraw-Hill, §14.2
(IDF relationships; interpolation between tabulated durations on log–log axes is common
practice).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..units import parse_depth, parse_duration
from .tables import MM_PER_IN, NRCS_24H_DISTRIBUTIONS, NRCS_24H_TIME_H, NRCS_PATTERNS

__all__ = ["Hyetograph", "IDFTable", "IDFDurationError", "design_storm", "storm_from_idf",
           "user_hyetograph", "PATTERNS"]


class IDFDurationError(InputError):
    """The IDF table does not cover a duration that is needed (a table-wide input
    problem: design flows stop with it rather than fail outlet by outlet)."""

PATTERNS = NRCS_PATTERNS + ("uniform",)
_PATTERN_ALIASES = {"type_i": "nrcs_type_i", "type_ia": "nrcs_type_ia",
                    "type_ii": "nrcs_type_ii", "type_iii": "nrcs_type_iii",
                    "i": "nrcs_type_i", "ia": "nrcs_type_ia", "ii": "nrcs_type_ii",
                    "iii": "nrcs_type_iii", "block": "uniform"}


def _depth_mm(depth, depth_mm):
    if depth_mm is not None:
        v = float(depth_mm)
        if not (np.isfinite(v) and v > 0):
            raise InputError(f"the rainfall depth must be a positive number of mm, got "
                             f"{depth_mm!r}")
        return v
    if depth is None:
        raise InputError("give the design rainfall depth with its unit, e.g. '110mm' or "
                         "'4.3in'")
    v = parse_depth(depth)
    if v <= 0:
        raise InputError(f"the rainfall depth must be positive, got {depth!r}")
    return v


def _duration_h(duration, duration_h):
    if duration_h is not None:
        v = float(duration_h)
    elif duration is None:
        raise InputError("give the storm duration with its unit, e.g. '24h' or '90min'")
    else:
        v = parse_duration(duration, "the storm duration")
    if not (np.isfinite(v) and v > 0):
        raise InputError(f"the storm duration must be positive, got {duration!r}")
    return v


def _pattern_name(pattern):
    p = str(pattern).strip().lower().replace("-", "_").replace(" ", "_")
    p = _PATTERN_ALIASES.get(p, p)
    if p not in PATTERNS:
        raise InputError(f"unknown rainfall pattern {pattern!r}; use one of "
                         f"{', '.join(PATTERNS)} or a hyetograph table")
    return p


@dataclass(frozen=True)
class Hyetograph:
    """A storm as cumulative depth against time from its start.

    Attributes
    ----------
    time_h : ndarray
        Hours from the start of the storm, increasing, starting at 0.
    cumulative_mm : ndarray
        Cumulative rainfall depth (mm) at those times, non-decreasing, starting at 0.
    pattern : str
        ``nrcs_type_i``, ``nrcs_type_ia``, ``nrcs_type_ii``, ``nrcs_type_iii``,
        ``uniform`` or ``user``.
    description : dict
        Every input that made the storm (for tables and reports).
    """

    time_h: np.ndarray
    cumulative_mm: np.ndarray
    pattern: str
    description: dict = field(default_factory=dict)

    @property
    def depth_mm(self) -> float:
        return float(self.cumulative_mm[-1])

    @property
    def duration_h(self) -> float:
        return float(self.time_h[-1])

    def cumulative_at(self, t_h):
        """Cumulative depth (mm) at times ``t_h`` (linear between tabulated points; the
        full depth after the end)."""
        return np.interp(np.asarray(t_h, dtype=float), self.time_h, self.cumulative_mm,
                         left=0.0, right=self.depth_mm)

    def increments(self, step_h: float):
        """Depth (mm) falling in each step [kΔ, (k+1)Δ) until the end of the storm."""
        n = max(1, int(np.ceil(self.duration_h / step_h - 1e-9)))
        c = self.cumulative_at(np.arange(n + 1) * step_h)
        return np.diff(c)

    def max_intensity_mm_per_h(self, window_h: float) -> float:
        """Greatest mean intensity (mm/h) over any window of the given length."""
        t = np.unique(np.concatenate([self.time_h, self.time_h - window_h]))
        t = t[(t >= 0) & (t <= max(self.duration_h - window_h, 0.0))]
        if t.size == 0:
            t = np.array([0.0])
        d = self.cumulative_at(t + window_h) - self.cumulative_at(t)
        return float(d.max() / window_h)

    def summary(self) -> dict:
        return {"rainfall_pattern": self.pattern, "rainfall_depth_mm": self.depth_mm,
                "rainfall_depth_in": self.depth_mm / MM_PER_IN,
                "rainfall_duration_h": self.duration_h, **self.description}


def design_storm(depth=None, duration="24h", pattern="nrcs_type_ii", *, depth_mm=None,
                 duration_h=None, return_period_yr=None) -> Hyetograph:
    """A design storm from a depth, a duration and a temporal pattern.

    Parameters
    ----------
    depth : str
        Design depth with its unit (``"110mm"``, ``"4.3in"``); or give ``depth_mm``.
    duration : str
        Storm duration with its unit (``"24h"``); or give ``duration_h``. The NRCS
        distributions are 24-hour storms.
    pattern : str
        ``nrcs_type_i``, ``nrcs_type_ia``, ``nrcs_type_ii``, ``nrcs_type_iii`` (the
        published 24-hour distributions, TR-55 1986 appendix B) or ``uniform`` (a block
        of constant intensity).
    return_period_yr : float, optional
        Recorded with the storm (for the tables).

    Raises
    ------
    InputError
        Depth or duration without a unit, an unknown pattern, or an NRCS pattern with a
        duration other than 24 h.

    Examples
    --------
    >>> s = design_storm("100mm", "24h", "nrcs_type_ii")
    >>> round(float(s.cumulative_at(12.0)), 1)      # 0.663 of the depth by hour 12
    66.3
    """
    p = _pattern_name(pattern)
    d = _depth_mm(depth, depth_mm)
    dur = _duration_h(duration, duration_h)
    if p in NRCS_PATTERNS:
        if abs(dur - 24.0) > 1e-9:
            raise InputError(f"the NRCS {p[5:].replace('_', ' ')} distribution is a 24-hour "
                             f"storm; give a 24h duration (got {dur:g} h) or use a uniform "
                             "block or your own hyetograph")
        t = NRCS_24H_TIME_H.astype(float)
        c = NRCS_24H_DISTRIBUTIONS[p] * d
    else:
        t = np.array([0.0, dur])
        c = np.array([0.0, d])
    desc = {"rainfall_source": "design depth"}
    if return_period_yr is not None:
        desc["return_period_yr"] = float(return_period_yr)
    return Hyetograph(t, c, p, desc)


def user_hyetograph(time_h, values, kind="cumulative_mm", depth=None, *,
                    depth_mm=None) -> Hyetograph:
    """A storm from a user's hyetograph table.

    Parameters
    ----------
    time_h : array
        Hours from the start of the storm, increasing. For ``cumulative_*`` the first
        time is the start of the storm (where the cumulative value is usually 0); for
        ``incremental_mm`` each time is the END of the interval whose depth is given.
    values : array
        ``kind="cumulative_mm"``: cumulative depth (mm); ``"incremental_mm"``: depth in
        each interval (mm); ``"cumulative_fraction"``: cumulative fraction 0…1 of the
        design depth (then give ``depth``).
    depth : str, optional
        Design depth with its unit, scaling a ``cumulative_fraction`` pattern.
    """
    t = np.asarray(time_h, dtype=float).ravel()
    v = np.asarray(values, dtype=float).ravel()
    if t.size != v.size or t.size < 1:
        raise InputError("the hyetograph needs a time and a depth on every row")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(v))):
        raise InputError("the hyetograph holds empty or non-numeric times or depths")
    if kind == "incremental_mm":
        if np.any(v < 0):
            raise InputError("the hyetograph holds negative rainfall depths")
        if t[0] <= 0:
            raise InputError("an incremental hyetograph gives the END time of each "
                             "interval; the first time must be positive")
        t = np.concatenate([[0.0], t])
        v = np.concatenate([[0.0], np.cumsum(v)])
    elif kind in ("cumulative_mm", "cumulative_fraction"):
        if t[0] > 0:  # the storm starts at 0 with nothing fallen
            t = np.concatenate([[0.0], t])
            v = np.concatenate([[0.0], v])
    else:
        raise InputError(f"unknown hyetograph kind {kind!r}")
    if t[0] < 0 or np.any(np.diff(t) <= 0):
        raise InputError("the hyetograph's times must start at 0 or later and increase "
                         "from row to row")
    if np.any(np.diff(v) < 0):
        raise InputError("the hyetograph's cumulative depth falls from one row to the "
                         "next; give cumulative depths that never decrease (or incremental "
                         "depths in a column named for them)")
    if v[0] != 0:
        raise InputError("a cumulative hyetograph must start at 0 at the start of the storm")
    desc = {"rainfall_source": "user hyetograph"}
    if kind == "cumulative_fraction":
        if abs(v[-1] - 1.0) > 1e-3:
            raise InputError(f"a cumulative-fraction hyetograph must end at 1, got "
                             f"{v[-1]:g}")
        v = v / v[-1] * _depth_mm(depth, depth_mm)
    elif depth is not None or depth_mm is not None:
        raise InputError("the hyetograph gives its own depths; leave the design depth out "
                         "or give the hyetograph as cumulative fractions")
    if v[-1] <= 0:
        raise InputError("the hyetograph holds no rainfall")
    return Hyetograph(t, v, "user", desc)


# ---------------------------------------------------------------------- IDF tables
_DUR_UNITS = {"min": 1.0 / 60.0, "minutes": 1.0 / 60.0, "h": 1.0, "hr": 1.0, "hours": 1.0}
_INT_UNITS = {"mm_per_h": 1.0, "mm_per_hr": 1.0, "mm_h": 1.0, "mm_hr": 1.0,
              "in_per_h": MM_PER_IN, "in_per_hr": MM_PER_IN, "in_h": MM_PER_IN,
              "in_hr": MM_PER_IN}
_DEP_UNITS = {"mm": 1.0, "in": MM_PER_IN, "inches": MM_PER_IN}


def _match(columns, stem, units):
    """(column, factor) for the column ``<stem>_<unit>``; an InputError for a column
    ``<stem>`` without a known unit; None when absent."""
    found = None
    for c in columns:
        n = re.sub(r"[^a-z0-9]+", "_", str(c).strip().lower()).strip("_")
        if n == stem or n.startswith(stem + "_"):
            unit = n[len(stem) + 1:]
            if unit in units:
                found = (c, units[unit])
            elif stem != "return_period":
                u = list(units)
                raise InputError(f"the IDF table's column {c!r} has no unit (or an unknown "
                                 f"one); name it e.g. {stem}_{u[0]} or {stem}_{u[-2]}")
            else:
                found = (c, 1.0)
    return found


class IDFTable:
    """An intensity–duration–frequency table: rainfall intensity (or depth) for durations
    and return periods, interpolated on log–log axes between tabulated durations.

    Build it with :meth:`from_frame` from a long table with one row per (duration, return
    period): a duration column with its unit (``duration_min`` or ``duration_h``), a
    ``return_period_yr`` column, and either ``intensity_mm_per_h`` / ``intensity_in_per_h``
    or ``depth_mm`` / ``depth_in``.

    Raises
    ------
    InputError
        Missing columns or units, non-positive values, a duplicated duration, intensity
        rising with duration or depth falling with it within a return period, or
        intensity falling as the return period grows.
    """

    def __init__(self, duration_h, return_period_yr, intensity_mm_per_h, source="table"):
        d = np.asarray(duration_h, dtype=float)
        rp = np.asarray(return_period_yr, dtype=float)
        i = np.asarray(intensity_mm_per_h, dtype=float)
        if not (d.size and d.size == rp.size == i.size):
            raise InputError("the IDF table is empty or its columns differ in length")
        if not (np.all(np.isfinite(d)) and np.all(np.isfinite(rp))
                and np.all(np.isfinite(i))):
            raise InputError("the IDF table holds empty or non-numeric cells")
        if np.any(d <= 0) or np.any(rp <= 0) or np.any(i <= 0):
            raise InputError("the IDF table's durations, return periods and intensities "
                             "must all be positive")
        self.source = source
        self._curves = {}
        for T in np.unique(rp):
            sel = rp == T
            order = np.argsort(d[sel], kind="stable")
            dd, ii = d[sel][order], i[sel][order]
            if np.any(np.diff(dd) == 0):
                raise InputError(f"the IDF table gives the duration {dd[np.diff(dd) == 0][0] * 60:g}"
                                 f" min twice for the {T:g}-year return period")
            if np.any(np.diff(ii) > 0):
                k = int(np.nonzero(np.diff(ii) > 0)[0][0])
                raise InputError(f"the IDF table is not monotonic: for the {T:g}-year return "
                                 f"period the intensity rises from {ii[k]:g} to {ii[k + 1]:g} "
                                 f"mm/h between {dd[k] * 60:g} and {dd[k + 1] * 60:g} min; "
                                 "intensity must fall as duration grows")
            if np.any(np.diff(ii * dd) < 0):
                k = int(np.nonzero(np.diff(ii * dd) < 0)[0][0])
                raise InputError(f"the IDF table is not monotonic: for the {T:g}-year return "
                                 f"period the depth falls between {dd[k] * 60:g} and "
                                 f"{dd[k + 1] * 60:g} min; depth must grow with duration")
            self._curves[float(T)] = (dd, ii)
        periods = sorted(self._curves)
        for a, b in zip(periods[:-1], periods[1:]):
            da, ia = self._curves[a]
            db, ib = self._curves[b]
            common, xa, xb = np.intersect1d(da, db, return_indices=True)
            bad = ib[xb] < ia[xa]
            if np.any(bad):
                raise InputError(f"the IDF table is not monotonic: at {common[bad][0] * 60:g} "
                                 f"min the {b:g}-year intensity is below the {a:g}-year one")

    @classmethod
    def from_frame(cls, frame, source="table"):
        """From a pandas DataFrame in the long layout described in the class docstring."""
        cols = list(frame.columns)
        dur = _match(cols, "duration", _DUR_UNITS)
        rp = _match(cols, "return_period", {"yr": 1.0, "years": 1.0, "year": 1.0})
        inten = _match(cols, "intensity", _INT_UNITS)
        dep = _match(cols, "depth", _DEP_UNITS)
        if dur is None or rp is None or (inten is None and dep is None):
            raise InputError("the IDF table needs the columns duration_min (or duration_h), "
                             "return_period_yr and intensity_mm_per_h (or intensity_in_per_h,"
                             f" depth_mm, depth_in); it has {', '.join(map(str, cols))}")
        if inten is not None and dep is not None:
            raise InputError("the IDF table has both an intensity and a depth column; keep "
                             "one")
        import pandas as pd

        def num(col):
            v = pd.to_numeric(frame[col], errors="coerce").to_numpy(float)
            if np.any(~np.isfinite(v)):
                raise InputError(f"the IDF table's column {col!r} holds empty or "
                                 "non-numeric cells")
            return v

        d_h = num(dur[0]) * dur[1]
        if inten is not None:
            i = num(inten[0]) * inten[1]
        else:
            i = num(dep[0]) * dep[1] / np.where(d_h > 0, d_h, np.nan)
        return cls(d_h, num(rp[0]), i, source=source)

    @property
    def return_periods(self):
        return sorted(self._curves)

    def durations_h(self, return_period_yr):
        return self._curve(return_period_yr)[0].copy()

    def _curve(self, return_period_yr):
        T = float(return_period_yr)
        for k in self._curves:
            if abs(k - T) <= 1e-9 * max(1.0, T):
                return self._curves[k]
        raise InputError(f"the IDF table has no {T:g}-year return period; it has "
                         + ", ".join(f"{k:g}" for k in self._curves) + " (years)")

    def intensity_mm_per_h(self, duration_h, return_period_yr) -> float:
        """Intensity (mm/h) for a duration, interpolated linearly in log(intensity) against
        log(duration) between the tabulated durations; outside them an InputError."""
        d, i = self._curve(return_period_yr)
        x = float(duration_h)
        lo, hi = d[0], d[-1]
        tol = 1e-9 * hi
        if not (lo - tol <= x <= hi + tol):
            raise IDFDurationError(f"the IDF table lacks the needed duration {x * 60:.1f} min for "
                             f"the {float(return_period_yr):g}-year return period: it covers "
                             f"{lo * 60:g}-{hi * 60:g} min; add rows for that duration")
        if d.size == 1:
            return float(i[0])
        return float(np.exp(np.interp(np.log(min(max(x, lo), hi)), np.log(d), np.log(i))))

    def depth_mm(self, duration_h, return_period_yr) -> float:
        """Depth (mm) for a duration: intensity × duration."""
        return self.intensity_mm_per_h(duration_h, return_period_yr) * float(duration_h)


def storm_from_idf(idf: IDFTable, return_period_yr, duration="24h",
                   pattern="nrcs_type_ii", *, duration_h=None) -> Hyetograph:
    """A design storm whose depth is the IDF table's depth for the duration and return
    period, spread by ``pattern`` (see :func:`design_storm`)."""
    dur = _duration_h(duration, duration_h)
    depth = idf.depth_mm(dur, return_period_yr)
    s = design_storm(pattern=pattern, depth_mm=depth, duration_h=dur,
                     return_period_yr=return_period_yr)
    s.description["rainfall_source"] = "IDF table"
    return s
