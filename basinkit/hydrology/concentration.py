"""Time of concentration by several published methods, side by side.

- Kirpich (1940): tc [min] = 0.0195·L^0.77·S^−0.385, L the longest flow path (m) and S its
  mean slope, head-to-outlet drop over length (m/m).
- NRCS watershed lag (NEH 630 ch. 15, eq. 15-4): lag [h] = ℓ^0.8·(S + 1)^0.7 / (1900·Y^0.5)
  with ℓ the flow length (ft), S the retention (in) from the curve number and Y the mean
  land slope of the catchment (%); Tc = lag / 0.6 (eq. 15-3).
- TR-55 velocity method (TR-55 1986 ch. 3; NEH 630 ch. 15) along the longest flow path:
  sheet flow over the first metres from the head (at most 30 m = 100 ft by default, NEH
  630 ch. 15; the 1986 TR-55 allowed 300 ft) by the kinematic-wave solution
  Tt [h] = 0.007·(n·L)^0.8 / (P₂^0.5·s^0.4) (L ft, P₂ the 2-year 24-hour rainfall in
  inches, TR-55 eq. 3-3); shallow concentrated flow at V = 16.1345·√s (unpaved) or
  20.3282·√s (paved) ft/s (TR-55 appendix F, eq. F-1 and F-2); channel flow, where the
  path is a channel by the channel threshold, at Manning's V = r^(2/3)·s^(1/2)/n (SI; TR-55
  eq. 3-4 is its US form with 1.49), with a given hydraulic radius r or one from a
  width–depth relation of upstream area (rectangular bankfull section). Tc is the sum of
  the segments' travel times Tt = L/V.

References
----------
Kirpich, Z. P. (1940). Time of concentration of small agricultural watersheds. Civil
Engineering 10(6):362.
USDA SCS (1986). Urban Hydrology for Small Watersheds, TR-55, ch. 3 and appendix F.
USDA NRCS (2010). National Engineering Handbook Part 630 Hydrology, ch. 15 Time of
concentration.
Manning, R. (1891). On the flow of water in open channels and pipes. Transactions of the
Institution of Civil Engineers of Ireland 20:161-207.
Leopold, L. B., Maddock, T. (1953). The hydraulic geometry of stream channels and some
physiographic implications. USGS Professional Paper 252 (width and depth as powers).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ..errors import InputError
from .tables import M_PER_FT, MM_PER_IN

__all__ = ["kirpich_tc_min", "nrcs_lag_h", "sheet_flow_time_h", "shallow_flow_velocity_m_per_s",
           "manning_velocity_m_per_s", "VelocityMethodInputs", "velocity_method_segments",
           "TC_METHODS", "TC_RANGES"]

TC_METHODS = ("kirpich", "nrcs_lag", "tr55_velocity")

#: Range of applicability of each method as published (the ranges are stated in every
#: table; a catchment outside them is flagged, not refused).
TC_RANGES = {
    "kirpich": ("Kirpich (1940): from 7 small rural Tennessee watersheds with defined "
                "channels, slopes 3-10 % and areas about 0.5-45 ha (1.2-112 acres) "
                "(ranges as commonly quoted; value from memory)"),
    "nrcs_lag": ("NRCS watershed lag (NEH 630 ch. 15): curve numbers 50-95, mean land "
                 "slope 0.5-64 %, catchments up to about 2,000 acres (8 km²) (value from "
                 "memory); mainly rural catchments"),
    "tr55_velocity": ("TR-55 velocity method (TR-55 1986 ch. 3; NEH 630 ch. 15): sheet "
                      "flow at most 100 ft (30 m), then shallow concentrated flow, then "
                      "channel flow at bankfull; TR-55 procedures for Tc of 0.1-10 h"),
}
_SHALLOW_FT_PER_S = {"unpaved": 16.1345, "paved": 20.3282}


def kirpich_tc_min(length_m, slope_m_per_m):
    """Kirpich (1940): tc (min) = 0.0195·L^0.77·S^−0.385 (L in m, S in m/m).

    >>> round(float(kirpich_tc_min(1000.0, 0.01)), 1)
    23.4
    """
    L = np.asarray(length_m, dtype=np.float64)
    S = np.asarray(slope_m_per_m, dtype=np.float64)
    return 0.0195 * L ** 0.77 * S ** -0.385


def nrcs_lag_h(length_m, mean_slope_m_per_m, curve_number):
    """NRCS watershed lag (h), NEH 630 ch. 15 eq. 15-4:
    lag = ℓ^0.8·(S + 1)^0.7 / (1900·Y^0.5), ℓ in ft, S = 1000/CN − 10 in, Y in percent.
    Tc = lag / 0.6."""
    ell = np.asarray(length_m, dtype=np.float64) / M_PER_FT
    s = 1000.0 / np.asarray(curve_number, dtype=np.float64) - 10.0
    y = 100.0 * np.asarray(mean_slope_m_per_m, dtype=np.float64)
    return ell ** 0.8 * (s + 1.0) ** 0.7 / (1900.0 * np.sqrt(y))


def sheet_flow_time_h(manning_n, length_m, p2_24h_mm, slope_m_per_m):
    """Sheet-flow travel time (h) by the kinematic-wave solution (TR-55 eq. 3-3):
    Tt = 0.007·(n·L)^0.8 / (P₂^0.5·s^0.4) with L in ft and P₂ in inches."""
    L = np.asarray(length_m, dtype=np.float64) / M_PER_FT
    p2 = np.asarray(p2_24h_mm, dtype=np.float64) / MM_PER_IN
    s = np.asarray(slope_m_per_m, dtype=np.float64)
    return 0.007 * (manning_n * L) ** 0.8 / (np.sqrt(p2) * s ** 0.4)


def shallow_flow_velocity_m_per_s(slope_m_per_m, surface="unpaved"):
    """Shallow concentrated flow velocity (m/s): 16.1345·√s (unpaved) or 20.3282·√s
    (paved) ft/s (TR-55 appendix F, eq. F-1 and F-2)."""
    try:
        k = _SHALLOW_FT_PER_S[surface]
    except KeyError:
        raise InputError(f"the shallow-flow surface must be paved or unpaved, got "
                         f"{surface!r}") from None
    return k * np.sqrt(np.asarray(slope_m_per_m, dtype=np.float64)) * M_PER_FT


def manning_velocity_m_per_s(manning_n, hydraulic_radius_m, slope_m_per_m):
    """Manning's equation in SI: V = r^(2/3)·s^(1/2)/n (m/s)."""
    r = np.asarray(hydraulic_radius_m, dtype=np.float64)
    return r ** (2.0 / 3.0) * np.sqrt(np.asarray(slope_m_per_m, dtype=np.float64)) / manning_n


@dataclass
class VelocityMethodInputs:
    """Inputs of the TR-55 velocity method (land cover values follow the local manual;
    TR-55 table 3-1 lists sheet-flow n, e.g. 0.011 smooth surfaces, 0.15 short grass,
    0.24 dense grass, 0.40 light woods).

    Attributes
    ----------
    sheet_flow_n : float
        Manning's n for sheet flow (TR-55 table 3-1).
    p2_24h_mm : float
        The 2-year 24-hour rainfall depth (mm), the user's.
    channel_n : float, optional
        Manning's n of the channel (needed when the path reaches a channel).
    hydraulic_radius_m : float, optional
        Bankfull hydraulic radius of the channel, the same everywhere; or
    width_coefficient, width_exponent, depth_coefficient, depth_exponent : float, optional
        Bankfull width w = a·A^b and depth d = c·A^f (m, with A the upstream area in km²;
        Leopold & Maddock 1953 style regional relations), giving r = w·d/(w + 2d).
    channel_threshold_m2 : float, optional
        Upstream area from which the path is a channel (basinkit's channel threshold).
    sheet_flow_max_length_m : float
        Longest sheet flow (default 30 m = 100 ft, NEH 630 ch. 15; TR-55 1986: 300 ft).
    shallow_surface : {"unpaved", "paved"}
    reach_length_m : float
        Shallow and channel flow are split into reaches of at most this length, each with
        its own slope (default 500 m).
    min_slope_m_per_m : float
        Slopes below this (flats of the conditioned DEM) are raised to it and flagged
        (default 0.0005; common practice, no source).
    """

    sheet_flow_n: float | None = None
    p2_24h_mm: float | None = None
    channel_n: float | None = None
    hydraulic_radius_m: float | None = None
    width_coefficient: float | None = None
    width_exponent: float | None = None
    depth_coefficient: float | None = None
    depth_exponent: float | None = None
    channel_threshold_m2: float | None = None
    sheet_flow_max_length_m: float = 30.0
    shallow_surface: str = "unpaved"
    reach_length_m: float = 500.0
    min_slope_m_per_m: float = 0.0005

    def __post_init__(self):
        def pos(name, lo=0.0, hi=None):
            v = getattr(self, name)
            if v is None:
                return
            v = float(v)
            if not (np.isfinite(v) and v > lo and (hi is None or v <= hi)):
                raise InputError(f"{name.replace('_', ' ')} must be a positive number"
                                 + (f" up to {hi:g}" if hi else "") + f", got {v!r}")
            setattr(self, name, v)

        for n in ("sheet_flow_n", "channel_n"):
            pos(n, hi=1.0)
        for n in ("p2_24h_mm", "hydraulic_radius_m", "width_coefficient",
                  "depth_coefficient", "channel_threshold_m2", "sheet_flow_max_length_m",
                  "reach_length_m", "min_slope_m_per_m"):
            pos(n)
        for n in ("width_exponent", "depth_exponent"):
            v = getattr(self, n)
            if v is not None:
                setattr(self, n, float(v))
        shallow_flow_velocity_m_per_s(0.01, self.shallow_surface)
        wd = [self.width_coefficient, self.width_exponent, self.depth_coefficient,
              self.depth_exponent]
        if any(v is not None for v in wd) and any(v is None for v in wd):
            raise InputError("a width-depth relation needs all four of width coefficient "
                             "and exponent, depth coefficient and exponent")
        if self.hydraulic_radius_m is not None and wd[0] is not None:
            raise InputError("give the channel's hydraulic radius or a width-depth "
                             "relation, not both")

    def missing(self, needs_channel: bool) -> list:
        """Names of inputs still needed for a path that does (not) reach a channel."""
        m = []
        if self.sheet_flow_n is None:
            m.append("the sheet-flow Manning's n")
        if self.p2_24h_mm is None:
            m.append("the 2-year 24-hour rainfall")
        if needs_channel:
            if self.channel_n is None:
                m.append("the channel Manning's n")
            if self.hydraulic_radius_m is None and self.width_coefficient is None:
                m.append("the channel hydraulic radius (or a width-depth relation)")
        return m

    def hydraulic_radius(self, area_m2):
        if self.hydraulic_radius_m is not None:
            return np.full(np.shape(area_m2), self.hydraulic_radius_m)
        a = np.asarray(area_m2, dtype=np.float64) / 1e6
        w = self.width_coefficient * a ** self.width_exponent
        d = self.depth_coefficient * a ** self.depth_exponent
        return w * d / (w + 2.0 * d)

    def to_dict(self) -> dict:
        return asdict(self)


def _reaches(s0, s1, max_len):
    n = max(1, int(np.ceil((s1 - s0) / max_len - 1e-9)))
    e = np.linspace(s0, s1, n + 1)
    return list(zip(e[:-1], e[1:]))


def velocity_method_segments(profile, inputs: VelocityMethodInputs, channel=None):
    """Segments of the TR-55 velocity method along a longest flow path, head to outlet.

    Parameters
    ----------
    profile : Profile
        From :func:`basinkit.analysis.profiles.longest_flow_path` (nodes from the outlet
        upstream, ``distance_m``, ``elevation_conditioned_m``, ``upstream_area_m2``).
    inputs : VelocityMethodInputs
    channel : ndarray of bool, optional
        Which nodes lie on a channel (e.g. a channel network's mask at the path's cells);
        default: nodes whose upstream area reaches ``inputs.channel_threshold_m2``.

    Returns
    -------
    list of dict
        One per segment from the head down: ``flow_regime`` (sheet, shallow_concentrated,
        channel), ``start_distance_from_head_m``, ``end_distance_from_head_m``,
        ``length_m``, ``drop_m``, ``slope_m_per_m``, ``slope_raised`` (the minimum slope
        was used), ``velocity_m_per_s``, ``travel_time_h``, ``hydraulic_radius_m``,
        ``manning_n``, ``upstream_area_m2`` (at the segment's middle) and
        ``start_node``/``end_node`` (node indices of the profile).

    Raises
    ------
    InputError
        When an input the path needs is missing (the message lists them).
    """
    d = np.asarray(profile.distance_m, dtype=np.float64)
    L = float(d[-1]) if d.size else 0.0
    if L <= 0:
        raise InputError("the flow path has no length (the outlet is its own head)")
    z = np.asarray(profile.elevation_conditioned_m, dtype=np.float64)
    area = np.asarray(profile.upstream_area_m2, dtype=np.float64)
    s_node = L - d  # distance from the head, decreasing with the node index
    if channel is None and inputs.channel_threshold_m2 is not None:
        channel = area >= inputs.channel_threshold_m2
    if channel is None:
        missing = inputs.missing(needs_channel=True)
        missing.append("the channel threshold (upstream area from which the path is a "
                       "channel) or a channel network")
        raise InputError("the velocity method needs " + ", ".join(missing))
    channel = np.asarray(channel, dtype=bool)
    # the channel starts at the channel node nearest the head
    idx = np.nonzero(channel)[0]
    s_chan = float(s_node[idx.max()]) if idx.size else L
    missing = inputs.missing(needs_channel=s_chan < L)
    if missing:
        raise InputError("the velocity method needs " + ", ".join(missing))
    s_sheet = min(inputs.sheet_flow_max_length_m, s_chan, L)
    # node positions from the head, increasing
    sx, zx, ax = s_node[::-1], z[::-1], area[::-1]

    def zat(s):
        return float(np.interp(s, sx, zx))

    def area_at(s):
        return float(ax[min(np.searchsorted(sx, s), ax.size - 1)])

    def node_at(s):
        k = int(np.clip(np.searchsorted(sx, s - 1e-9), 0, sx.size - 1))
        return int(sx.size - 1 - k)

    parts = []
    if s_sheet > 0:
        parts.append(("sheet", 0.0, s_sheet))
    if s_chan > s_sheet:
        parts += [("shallow_concentrated", a, b)
                  for a, b in _reaches(s_sheet, s_chan, inputs.reach_length_m)]
    if L > s_chan:
        parts += [("channel", a, b) for a, b in _reaches(max(s_chan, s_sheet), L,
                                                         inputs.reach_length_m)]
    out = []
    for regime, a, b in parts:
        length = b - a
        drop = zat(a) - zat(b)
        slope = drop / length
        raised = slope < inputs.min_slope_m_per_m
        s = max(slope, inputs.min_slope_m_per_m)
        amid = area_at(0.5 * (a + b))
        r = n = np.nan
        if regime == "sheet":
            tt = float(sheet_flow_time_h(inputs.sheet_flow_n, length, inputs.p2_24h_mm, s))
            v = length / (tt * 3600.0)
            n = inputs.sheet_flow_n
        elif regime == "shallow_concentrated":
            v = float(shallow_flow_velocity_m_per_s(s, inputs.shallow_surface))
            tt = length / v / 3600.0
        else:
            r = float(inputs.hydraulic_radius(amid))
            n = inputs.channel_n
            v = float(manning_velocity_m_per_s(n, r, s))
            tt = length / v / 3600.0
        out.append({"flow_regime": regime, "start_distance_from_head_m": a,
                    "end_distance_from_head_m": b, "length_m": length, "drop_m": drop,
                    "slope_m_per_m": s, "slope_raised": bool(raised),
                    "velocity_m_per_s": v, "travel_time_h": tt,
                    "hydraulic_radius_m": r, "manning_n": n, "upstream_area_m2": amid,
                    "start_node": node_at(a), "end_node": node_at(b)})
    return out
