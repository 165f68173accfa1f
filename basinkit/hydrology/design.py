"""Design flows at every outlet: time of concentration by several methods side by side,
curve-number runoff, the Rational-method peak and the NRCS unit-hydrograph design
hydrograph, each catchment (nested ones too) with its own values.

:func:`design_flows` takes a FlowModel, a :class:`~basinkit.analysis.catchments.Delineation`
and :class:`DesignFlowSettings`, and returns :class:`DesignFlows`: one table row per
outlet and method, the hydrographs, the velocity-method segments (with their geometry)
and the outlets that failed with the reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ..analysis.profiles import longest_flow_path
from ..errors import InputError
from . import concentration as tcm
from . import hydrograph as hg
from .catchment_values import catchment_sums, check_grid, label_ranges, mean_land_slope, \
    value_distributions
from .rainfall import Hyetograph, IDFDurationError, IDFTable
from .runoff import CurveNumbers, check_curve_numbers, check_runoff_coefficients
from .tables import (ACRE_M2, CFS_PER_CMS, M3_PER_ACRE_FT, MM_PER_IN, PEAK_RATE_FACTOR_US)

__all__ = ["DesignFlowSettings", "DesignFlows", "design_flows", "CAUTIONS", "PEAK_RANGES",
           "TC_CHOICES"]

CAUTIONS = (
    "Design flows here are planning-level estimates from a DEM-derived catchment and flow "
    "path: culverts, storm sewers and diversions are not represented unless burned into the "
    "DEM. Each method is valid only within its stated range of applicability; results "
    "outside it are flagged. Land cover (curve numbers, runoff coefficients, Manning's n), "
    "design rainfall and the choice of method must follow the local agency's drainage "
    "manual. Verify in the field; design is the work of a licensed professional.")

PEAK_RANGES = {
    "rational": ("Rational method: small catchments, commonly under about 80 ha (200 acres; "
                 "manuals differ), rainfall of uniform intensity over a duration equal to "
                 "Tc; durations under 5 min are raised to 5 min (common practice)"),
    "nrcs_unit_hydrograph": (
        "NRCS dimensionless unit hydrograph (NEH 630 ch. 16) with curve-number runoff (NEH "
        "630 ch. 10): Tc 0.1-10 h and CN 40-98 as in TR-55's procedures; curve-number "
        "runoff is less accurate below 0.5 in (13 mm) of runoff (TR-55 ch. 2) (ranges value "
        "from memory); large catchments are commonly split into sub-areas and routed"),
}
TC_CHOICES = tcm.TC_METHODS + ("shortest", "longest", "mean")
HYDROGRAPH_COLUMNS = ["outlet_id", "time_h", "time_min", "rainfall_in_step_mm",
                      "rainfall_in_step_in", "excess_in_step_mm", "excess_in_step_in",
                      "direct_runoff_m3_per_s", "base_flow_m3_per_s", "discharge_m3_per_s",
                      "discharge_cfs"]
SEGMENT_COLUMNS = ["outlet_id", "segment", "flow_regime", "start_distance_from_head_m",
                   "end_distance_from_head_m", "length_m", "length_ft", "drop_m",
                   "slope_m_per_m", "slope_raised", "velocity_m_per_s", "velocity_ft_per_s",
                   "travel_time_min", "travel_time_h", "cumulative_time_h",
                   "hydraulic_radius_m", "manning_n", "upstream_area_m2"]


@dataclass
class DesignFlowSettings:
    """Every input of a design-flow run (validated on creation; bad input raises one clear
    InputError before anything is computed).

    Attributes
    ----------
    storm : Hyetograph
        The design storm (:func:`~basinkit.hydrology.rainfall.design_storm`,
        :func:`~basinkit.hydrology.rainfall.storm_from_idf` or
        :func:`~basinkit.hydrology.rainfall.user_hyetograph`).
    curve_number : float or ndarray
        Uniform ARC II curve number, or a grid on the DEM's grid (NaN: no value).
    cn_weighting : {"area_weighted_cn", "runoff_per_cell"}
    ia_ratio : {0.2, 0.05}
    convert_cn_for_ia_ratio : bool
        With 0.05: convert the curve numbers (Hawkins et al. 2009) or only change Ia.
    antecedent_runoff_condition : {"I", "II", "III"}
    runoff_coefficient : float or ndarray, optional
        The Rational method's C (uniform or a grid, area-weighted); without it no
        Rational peak.
    idf : IDFTable, optional
        Gives the Rational intensity at duration Tc (and P₂ if the velocity method needs
        it and has none).
    return_period_yr : float, optional
        Return period looked up in ``idf`` (default: the storm's).
    tc_method : str
        The Tc behind the peaks: ``tr55_velocity``, ``kirpich``, ``nrcs_lag``, or
        ``shortest``/``longest``/``mean`` of those computed.
    velocity : VelocityMethodInputs
    peak_rate_factor : float
        US customary (484 standard; 0.208 in SI is reported beside).
    time_step_min : float, optional
        Convolution step (default: from Tc, ≈ 0.2 Tp, NEH 630 ch. 16).
    base_flow_m3_per_s : float
    rational_min_duration_min : float
    """

    storm: Hyetograph
    curve_number: object = None
    cn_weighting: str = "area_weighted_cn"
    ia_ratio: float = 0.2
    convert_cn_for_ia_ratio: bool = True
    antecedent_runoff_condition: str = "II"
    runoff_coefficient: object = None
    idf: IDFTable | None = None
    return_period_yr: float | None = None
    tc_method: str = "tr55_velocity"
    velocity: tcm.VelocityMethodInputs = field(default_factory=tcm.VelocityMethodInputs)
    peak_rate_factor: float = PEAK_RATE_FACTOR_US
    time_step_min: float | None = None
    base_flow_m3_per_s: float = 0.0
    rational_min_duration_min: float = 5.0
    p2_24h_from_idf: bool = field(default=False, init=False)

    def __post_init__(self):
        if not isinstance(self.storm, Hyetograph):
            raise InputError("give a design storm (a depth with its unit and a pattern, an "
                             "IDF table, or a hyetograph)")
        if self.curve_number is None:
            raise InputError("give a curve number (uniform, a raster or polygons with a CN "
                             "field)")
        if np.ndim(self.curve_number) == 0:
            self.curve_number = float(check_curve_numbers(float(self.curve_number)))
            if not np.isfinite(self.curve_number):
                raise InputError("the curve number must be a number between 30 and 100")
        else:
            self.curve_number = check_curve_numbers(self.curve_number, "curve number in the "
                                                    "raster")
        if self.runoff_coefficient is not None:
            if np.ndim(self.runoff_coefficient) == 0:
                self.runoff_coefficient = float(
                    check_runoff_coefficients(float(self.runoff_coefficient)))
            else:
                self.runoff_coefficient = check_runoff_coefficients(
                    self.runoff_coefficient, "runoff coefficient C in the raster")
        CurveNumbers.uniform(80.0, weighting=self.cn_weighting, ia_ratio=self.ia_ratio,
                             arc=self.antecedent_runoff_condition)  # validates the settings
        if self.tc_method not in TC_CHOICES:
            raise InputError(f"unknown time-of-concentration method {self.tc_method!r}; use "
                             f"one of {', '.join(TC_CHOICES)}")
        hg._check_prf(self.peak_rate_factor)
        for name in ("base_flow_m3_per_s", "rational_min_duration_min"):
            v = float(getattr(self, name))
            if not (np.isfinite(v) and v >= 0):
                raise InputError(f"{name.replace('_', ' ')} must be zero or positive")
            setattr(self, name, v)
        if self.time_step_min is not None and not float(self.time_step_min) > 0:
            raise InputError("the time step must be a positive number of minutes")
        if self.return_period_yr is None:
            self.return_period_yr = self.storm.description.get("return_period_yr")
        if self.idf is not None and self.return_period_yr is not None:
            self.idf.durations_h(self.return_period_yr)  # the return period must exist
        if self.velocity.p2_24h_mm is None and self.idf is not None:
            try:
                p2 = self.idf.depth_mm(24.0, 2.0)
            except InputError:
                p2 = None
            if p2 is not None:  # a copy: the caller's inputs stay as given
                self.velocity = replace(self.velocity, p2_24h_mm=p2)
                self.p2_24h_from_idf = True

    def describe(self) -> dict:
        """Every input used, as plain values (for tables, JSON and reports)."""
        cn = self.curve_number
        c = self.runoff_coefficient
        d = {**self.storm.summary(),
             "curve_number": cn if isinstance(cn, float) else "raster/polygons",
             "curve_number_weighting": self.cn_weighting,
             "initial_abstraction_ratio": self.ia_ratio,
             "convert_cn_for_ia_ratio": self.convert_cn_for_ia_ratio,
             "antecedent_runoff_condition": self.antecedent_runoff_condition,
             "runoff_coefficient": (c if c is None or isinstance(c, float)
                                    else "raster/polygons"),
             "idf_table": self.idf.source if self.idf is not None else None,
             "return_period_yr": self.return_period_yr,
             "tc_method": self.tc_method, "peak_rate_factor_us": self.peak_rate_factor,
             "time_step_min": self.time_step_min,
             "base_flow_m3_per_s": self.base_flow_m3_per_s,
             "rational_min_duration_min": self.rational_min_duration_min,
             "velocity_method": self.velocity.to_dict(),
             "p2_24h_from_idf": self.p2_24h_from_idf}
        return d


@dataclass
class DesignFlows:
    """Result of :func:`design_flows`.

    Attributes
    ----------
    table : DataFrame
        One row per outlet and method (``method_kind`` time_of_concentration or
        peak_discharge): SI columns with US customary ones beside (``_cfs``, ``_in``,
        ``_acre_ft``, ``_acres``), ``status`` ok/not_computed, ``note``, the method's
        ``range_of_applicability`` and ``outside_range`` with the reasons in
        ``range_flags``, and the spread of Tc across methods on every row.
    hydrographs : DataFrame
        ``outlet_id, time_h, time_min, rainfall_in_step_mm, excess_in_step_mm,
        direct_runoff_m3_per_s, base_flow_m3_per_s, discharge_m3_per_s, discharge_cfs``;
        the rainfall columns hold the depth falling in the step that starts at ``time_h``.
    segments : DataFrame
        Velocity-method segments, head to outlet (columns SEGMENT_COLUMNS).
    segment_geometry : list of shapely LineStrings (DEM CRS), aligned with ``segments``.
    errors : DataFrame
        ``outlet_id, reason`` of outlets that could not be computed.
    inputs : dict
    warnings : list of str
    cautions : str
    """

    table: pd.DataFrame
    hydrographs: pd.DataFrame
    segments: pd.DataFrame
    segment_geometry: list
    errors: pd.DataFrame
    inputs: dict
    crs: object = None
    warnings: list = field(default_factory=list)
    cautions: str = CAUTIONS

    def segments_frame(self):
        """Segments as a GeoDataFrame of lines in the DEM's CRS."""
        import geopandas as gpd

        crs = self.crs.to_wkt() if hasattr(self.crs, "to_wkt") else self.crs
        return gpd.GeoDataFrame(self.segments.copy(), geometry=self.segment_geometry,
                                crs=crs)

    def outlet(self, outlet_id):
        """(rows of the table, hydrograph) of one outlet."""
        oid = str(outlet_id)
        return (self.table[self.table["outlet_id"] == oid],
                self.hydrographs[self.hydrographs["outlet_id"] == oid])


# ---------------------------------------------------------------------- per outlet
def _area_cols(area_m2):
    return {"area_m2": area_m2, "area_km2": area_m2 / 1e6, "area_ha": area_m2 / 1e4,
            "area_acres": area_m2 / ACRE_M2}


def _tc_rows(profile, area_m2, mean_slope, cn: CurveNumbers, s: DesignFlowSettings,
             channel):
    L = profile.length_m
    S = profile.average_slope()
    area_ha = area_m2 / 1e4
    rows, segs = [], []
    # Kirpich
    r = {"method": "kirpich", "path_length_m": L, "slope_used_m_per_m": S}
    if L > 0 and S > 0:
        r["tc_min"] = float(tcm.kirpich_tc_min(L, S))
        flags = []
        if not 0.5 <= area_ha <= 45.0:
            flags.append(f"area {area_ha:.3g} ha outside 0.5-45 ha")
        if not 0.03 <= S <= 0.10:
            flags.append(f"path slope {100 * S:.3g} % outside 3-10 %")
        r["range_flags"] = flags
    else:
        r["note"] = "not computed: the flow path has no length or no fall"
    rows.append(r)
    # NRCS watershed lag
    cnc = cn.composite_cn
    r = {"method": "nrcs_lag", "path_length_m": L, "slope_used_m_per_m": mean_slope,
         "curve_number_used": cnc}
    if L > 0 and np.isfinite(mean_slope) and mean_slope > 0:
        lag = float(tcm.nrcs_lag_h(L, mean_slope, cnc))
        r["tc_min"] = lag / 0.6 * 60.0
        flags = []
        if not 50.0 <= cnc <= 95.0:
            flags.append(f"CN {cnc:.3g} outside 50-95")
        if not 0.5 <= 100 * mean_slope <= 64.0:
            flags.append(f"mean land slope {100 * mean_slope:.3g} % outside 0.5-64 %")
        if area_m2 / ACRE_M2 > 2000.0:
            flags.append(f"area {area_m2 / ACRE_M2:.4g} acres above 2,000 acres")
        r["range_flags"] = flags
    else:
        r["note"] = "not computed: the catchment has no length or no mean slope"
    rows.append(r)
    # TR-55 velocity method
    r = {"method": "tr55_velocity", "path_length_m": L}
    try:
        segs = tcm.velocity_method_segments(profile, s.velocity, channel)
    except InputError as e:
        r["note"] = f"not computed: {e}"
        segs = []
    if segs:
        tt = sum(x["travel_time_h"] for x in segs)
        r["tc_min"] = tt * 60.0
        r["slope_used_m_per_m"] = sum(x["drop_m"] for x in segs) / L
        flags = []
        nraised = sum(x["slope_raised"] for x in segs)
        if nraised:
            flags.append(f"{nraised} segment(s) flatter than {s.velocity.min_slope_m_per_m:g}"
                         " m/m were given that slope")
        if s.velocity.sheet_flow_max_length_m > 30.48:
            flags.append("sheet flow allowed beyond 100 ft (30 m), the NEH 630 limit")
        if not 0.1 <= tt <= 10.0:
            flags.append(f"Tc {tt:.3g} h outside 0.1-10 h")
        r["range_flags"] = flags
        r["sheet_flow_length_m"] = sum(x["length_m"] for x in segs
                                       if x["flow_regime"] == "sheet")
        r["shallow_flow_length_m"] = sum(x["length_m"] for x in segs
                                         if x["flow_regime"] == "shallow_concentrated")
        r["channel_flow_length_m"] = sum(x["length_m"] for x in segs
                                         if x["flow_regime"] == "channel")
    rows.append(r)
    for r in rows:
        r["method_kind"] = "time_of_concentration"
        r["range_of_applicability"] = tcm.TC_RANGES[r["method"]]
        if "tc_min" in r:
            r["tc_h"] = r["tc_min"] / 60.0
            r["status"] = "ok"
        else:
            r["status"] = "not_computed"
    return rows, segs


def _chosen_tc(rows, method):
    got = {r["method"]: r["tc_min"] for r in rows if "tc_min" in r}
    if not got:
        raise InputError("no time of concentration could be computed: "
                         + "; ".join(r.get("note", "") for r in rows))
    if method in tcm.TC_METHODS:
        if method not in got:
            note = next(r.get("note", "") for r in rows if r["method"] == method)
            raise InputError(f"the peaks use the {method} time of concentration, which was "
                             f"{note}; supply those inputs or choose another tc_method")
        return got[method] / 60.0, method
    v = np.array(list(got.values()))
    tc = {"shortest": v.min(), "longest": v.max(), "mean": v.mean()}[method]
    return float(tc) / 60.0, f"{method} of " + ", ".join(got)


def _hydrograph(area_m2, tc_h, cn: CurveNumbers, s: DesignFlowSettings):
    storm = s.storm
    dt = hg.choose_time_step_h(tc_h, s.time_step_min)
    rain = storm.increments(dt)
    cum_rain = np.concatenate([[0.0], np.cumsum(rain)])
    cum_ex = cn.runoff_mm(cum_rain)
    excess = np.diff(cum_ex)
    uh, info = hg.unit_hydrograph(area_m2, tc_h, dt, s.peak_rate_factor)
    q = hg.convolve_excess(excess, uh)
    n = q.size
    t = np.arange(n) * dt
    peak = q.max() if n else 0.0
    if peak > 0:  # drop the trailing tail below 1e-6 of the peak once the storm is over
        last = max(int(np.nonzero(q > 1e-6 * peak)[0][-1]) + 2, rain.size + 1)
        q, t, n = q[:last], t[:last], min(last, n)
    summ = hg.summarise_hydrograph(t, q, rain, excess, dt, s.base_flow_m3_per_s)
    frame = {  # plain arrays; one DataFrame for all outlets is built at the end
        "time_h": t, "time_min": t * 60.0,
        "rainfall_in_step_mm": np.pad(rain, (0, max(n - rain.size, 0)))[:n],
        "excess_in_step_mm": np.pad(excess, (0, max(n - excess.size, 0)))[:n],
        "direct_runoff_m3_per_s": q,
        "base_flow_m3_per_s": np.full(n, s.base_flow_m3_per_s),
        "discharge_m3_per_s": q + s.base_flow_m3_per_s}
    frame["discharge_cfs"] = frame["discharge_m3_per_s"] * CFS_PER_CMS
    frame["rainfall_in_step_in"] = frame["rainfall_in_step_mm"] / MM_PER_IN
    frame["excess_in_step_in"] = frame["excess_in_step_mm"] / MM_PER_IN
    depth = float(cum_ex[-1])
    vol_expected = depth * 1e-3 * area_m2
    summ.update(info)
    summ["time_step_min"] = dt * 60.0
    summ["runoff_depth_mm"] = depth
    summ["mass_balance_error_fraction"] = ((summ["hydrograph_volume_m3"] - vol_expected)
                                           / vol_expected if vol_expected > 0 else 0.0)
    return frame, summ


def _peak_rows(area_m2, tc_h, tc_label, cn: CurveNumbers, c_mean, s, hyd_summary):
    area_ha = area_m2 / 1e4
    rows = []
    # Rational
    r = {"method": "rational", "tc_method_used": tc_label, "tc_h": tc_h,
         "tc_min": tc_h * 60.0}
    dur_min = max(tc_h * 60.0, s.rational_min_duration_min)
    if c_mean is None:
        r["note"] = "not computed: give a runoff coefficient C"
    elif s.idf is None or s.return_period_yr is None:
        r["note"] = ("not computed: the Rational method needs an IDF table and a return "
                     "period (the intensity for a duration equal to Tc)")
    else:
        i = s.idf.intensity_mm_per_h(dur_min / 60.0, s.return_period_yr)
        qpk = hg.rational_peak_m3_per_s(c_mean, i, area_m2)
        r.update(runoff_coefficient=c_mean, rainfall_intensity_mm_per_h=i,
                 rainfall_intensity_in_per_h=i / MM_PER_IN, rainfall_duration_used_min=dur_min,
                 peak_discharge_m3_per_s=qpk, direct_runoff_peak_m3_per_s=qpk)
        flags = []
        if area_ha > hg.RATIONAL_MAX_AREA_HA:
            flags.append(f"area {area_ha:.3g} ha above about 80 ha")
        if tc_h * 60.0 < s.rational_min_duration_min:
            flags.append(f"Tc {tc_h * 60:.2g} min below {s.rational_min_duration_min:g} min: "
                         f"the intensity for {s.rational_min_duration_min:g} min was used")
        r["range_flags"] = flags
    rows.append(r)
    # NRCS unit hydrograph
    h = hyd_summary
    r = {"method": "nrcs_unit_hydrograph", "tc_method_used": tc_label, "tc_h": tc_h,
         "tc_min": tc_h * 60.0, **{k: h[k] for k in (
             "peak_discharge_m3_per_s", "direct_runoff_peak_m3_per_s", "time_to_peak_h",
             "lag_h", "lag_excess_centroid_to_peak_h", "centroid_lag_h", "rain_centroid_h",
             "excess_centroid_h", "time_step_min", "hydrograph_volume_m3",
             "mass_balance_error_fraction", "unit_hydrograph_volume_ratio")},
         "unit_hydrograph_time_to_peak_h": h["time_to_peak_uh_h"],
         "peak_rate_factor_us": h["peak_rate_factor_us"],
         "peak_rate_factor_si": h["peak_rate_factor_si"],
         "base_flow_m3_per_s": s.base_flow_m3_per_s}
    flags = []
    if not 0.1 <= tc_h <= 10.0:
        flags.append(f"Tc {tc_h:.3g} h outside 0.1-10 h")
    lo, hi = cn.cn_range
    if lo < 40.0 or hi > 98.0:
        flags.append(f"curve numbers {lo:g}-{hi:g} reach outside 40-98")
    if h["runoff_depth_mm"] < 12.7:
        flags.append(f"runoff {h['runoff_depth_mm']:.3g} mm below 0.5 in (13 mm)")
    r["range_flags"] = flags
    rows.append(r)
    for r in rows:
        r["method_kind"] = "peak_discharge"
        r["range_of_applicability"] = PEAK_RANGES[r["method"]]
        r["status"] = "ok" if "peak_discharge_m3_per_s" in r else "not_computed"
    return rows


def _segment_geometry(profile, segs):
    from shapely.geometry import LineString

    d = np.asarray(profile.distance_m, dtype=np.float64)
    L = float(d[-1])
    sx = (L - d)[::-1]
    x, y = np.asarray(profile.x)[::-1], np.asarray(profile.y)[::-1]
    out = []
    for sg in segs:
        a, b = sg["start_distance_from_head_m"], sg["end_distance_from_head_m"]
        inner = (sx > a) & (sx < b)
        xs = np.concatenate([[np.interp(a, sx, x)], x[inner], [np.interp(b, sx, x)]])
        ys = np.concatenate([[np.interp(a, sx, y)], y[inner], [np.interp(b, sx, y)]])
        out.append(LineString(np.column_stack([xs, ys])))
    return out


def _one_outlet(fm, network, cell, area_m2, mean_slope, cn, c_mean, s, oid):
    profile = longest_flow_path(fm, cell, network)
    if profile.length_m <= 0:
        raise InputError("the catchment is a single cell: no flow path to measure")
    channel = None
    if network is not None:
        channel = np.asarray(network.mask).ravel()[profile.cells]
    tc_rows, segs = _tc_rows(profile, area_m2, mean_slope, cn, s, channel)
    tc_h, label = _chosen_tc(tc_rows, s.tc_method)
    frame, hsum = _hydrograph(area_m2, tc_h, cn, s)
    peak_rows = _peak_rows(area_m2, tc_h, label, cn, c_mean, s, hsum)
    depth = hsum["runoff_depth_mm"]
    common = {"outlet_id": oid, **_area_cols(area_m2),
              **{k: v for k, v in s.storm.summary().items()},
              "return_period_yr": s.return_period_yr,
              **cn.describe(),
              "runoff_depth_mm": depth, "runoff_depth_in": depth / MM_PER_IN,
              "runoff_volume_m3": depth * 1e-3 * area_m2,
              "runoff_volume_acre_ft": depth * 1e-3 * area_m2 / M3_PER_ACRE_FT,
              "mean_land_slope_m_per_m": mean_slope}
    tcs = [r["tc_min"] for r in tc_rows if "tc_min" in r]
    common.update(tc_shortest_min=min(tcs), tc_longest_min=max(tcs),
                  tc_spread_ratio=max(tcs) / min(tcs) if min(tcs) > 0 else np.nan,
                  tc_methods_computed=len(tcs))
    rows = [{**common, **r} for r in tc_rows + peak_rows]
    geoms = _segment_geometry(profile, segs) if segs else []
    cum = 0.0
    for k, sg in enumerate(segs, start=1):
        cum += sg["travel_time_h"]
        sg.update(outlet_id=oid, segment=k, length_ft=sg["length_m"] / 0.3048,
                  velocity_ft_per_s=sg["velocity_m_per_s"] / 0.3048,
                  travel_time_min=sg["travel_time_h"] * 60.0, cumulative_time_h=cum)
    seg = segs
    return rows, frame, seg, geoms


# ---------------------------------------------------------------------- all outlets
_LEAD = ["outlet_id", "file_id", "method", "method_kind", "status", "note", "tc_min", "tc_h",
         "tc_method_used", "peak_discharge_m3_per_s", "peak_discharge_cfs",
         "direct_runoff_peak_m3_per_s", "base_flow_m3_per_s", "time_to_peak_h", "lag_h",
         "runoff_depth_mm", "runoff_depth_in", "runoff_volume_m3", "runoff_volume_acre_ft",
         "area_m2", "area_km2", "area_ha", "area_acres", "outside_range", "range_flags",
         "range_of_applicability"]


def _finish_table(rows, file_ids):
    t = pd.DataFrame(rows)
    if t.empty:
        return pd.DataFrame(columns=_LEAD)
    t["file_id"] = t["outlet_id"].map(file_ids)
    if "peak_discharge_m3_per_s" not in t:
        t["peak_discharge_m3_per_s"] = np.nan
    t["peak_discharge_cfs"] = t["peak_discharge_m3_per_s"] * CFS_PER_CMS
    if "range_flags" not in t:
        t["range_flags"] = None
    flags = t["range_flags"].apply(lambda v: v if isinstance(v, list) else [])
    t["outside_range"] = flags.apply(bool)
    t["range_flags"] = flags.apply("; ".join)
    t["note"] = t["note"].fillna("") if "note" in t else ""
    for c in _LEAD:
        if c not in t:
            t[c] = np.nan
    return t[_LEAD + [c for c in t.columns if c not in _LEAD]]


def design_flows(fm, delineation, settings: DesignFlowSettings, network=None,
                 outlet_ids=None, mean_slopes=None, progress=None) -> DesignFlows:
    """Design flows at every outlet of a delineation (each nested catchment on its own).

    Parameters
    ----------
    fm : FlowModel
    delineation : Delineation
        From :func:`basinkit.analysis.catchments.delineate` on ``fm``.
    settings : DesignFlowSettings
    network : ChannelNetwork, optional
        Marks the channel part of each flow path (else the velocity inputs' channel
        threshold does).
    outlet_ids : list of str, optional
        Only these outlets (default: all).
    mean_slopes : dict, optional
        outlet_id → mean land slope (m/m), e.g. from the morphometry table; default: Horn
        slope of the DEM averaged over each catchment.

    Returns
    -------
    DesignFlows

    Notes
    -----
    Per outlet: the longest D8 flow path (Hack 1957) gives L and the path slope; the
    catchment's area, area-weighted curve numbers and C and mean land slope come from
    one pass over the label grid. Tc by Kirpich, the NRCS lag and the TR-55 velocity
    method side by side; the chosen Tc sets the Rational duration and the unit
    hydrograph. An outlet whose values cannot be computed goes to ``errors`` with the
    reason; the others carry on.
    """
    t = delineation.table
    if outlet_ids is not None:
        want = {str(x) for x in outlet_ids}
        unknown = want - set(t["outlet_id"].astype(str))
        if unknown:
            raise InputError("no delineated outlet has the id "
                             + ", ".join(sorted(map(repr, unknown))))
    if not isinstance(settings.curve_number, float):
        check_grid(settings.curve_number, fm.shape, "curve-number")
    if settings.runoff_coefficient is not None and not isinstance(
            settings.runoff_coefficient, float):
        check_grid(settings.runoff_coefficient, fm.shape, "runoff-coefficient")
    if network is not None and np.asarray(network.mask).shape != fm.shape:
        raise InputError("the channel network is not on the flow model's grid")
    n = len(t)
    ids = t["outlet_id"].astype(str).tolist()
    file_ids = dict(zip(ids, t["file_id"] if "file_id" in t else ids))
    areas = t["area_m2"].to_numpy(float)
    cells = t["cell"].to_numpy(np.int64)
    if mean_slopes is None:
        slopes = mean_land_slope(fm, delineation)
    else:
        slopes = np.array([float(mean_slopes.get(i, np.nan)) for i in ids])
    cn_kw = dict(weighting=settings.cn_weighting, ia_ratio=settings.ia_ratio,
                 convert_for_ia_ratio=settings.convert_cn_for_ia_ratio,
                 arc=settings.antecedent_runoff_condition)
    if isinstance(settings.curve_number, float):
        cn_dists = [((np.array([settings.curve_number]), np.array([1.0]), 0.0))] * n
    else:
        cn_dists = value_distributions(fm, delineation, settings.curve_number,
                                       "curve-number", quantum=0.1)
    c = settings.runoff_coefficient
    if c is None:
        c_means = [None] * n
        c_missing = np.zeros(n)
    elif isinstance(c, float):
        c_means = [c] * n
        c_missing = np.zeros(n)
    else:
        lo, hi = label_ranges(delineation)
        a = np.broadcast_to(fm.terrain.geometry.area[:, None], fm.shape)
        ok = np.isfinite(c) & fm.terrain.valid
        num = catchment_sums(delineation.labels, np.where(ok, c * a, 0.0), lo, hi)
        den = catchment_sums(delineation.labels, np.where(ok, a, 0.0), lo, hi)
        with np.errstate(invalid="ignore", divide="ignore"):
            c_means = list(num / den)
        c_missing = 1.0 - den / areas
    rows, hyds, segs, geoms, errs, warns = [], [], [], [], [], []
    it = range(n)
    if progress is not None:
        it = progress(it, total=n, desc="design flows")
    for i in it:
        oid = ids[i]
        if outlet_ids is not None and oid not in want:
            continue
        try:
            vals, w, miss = cn_dists[i]
            if miss > 1e-9:
                raise InputError(f"the curve numbers leave {100 * miss:.3g} % of the "
                                 "catchment without a value; cover the whole catchment")
            if c_missing[i] > 1e-9:
                raise InputError(f"the runoff coefficients leave {100 * c_missing[i]:.3g} % "
                                 "of the catchment without a value; cover the whole "
                                 "catchment")
            cn = CurveNumbers(vals, w, **cn_kw)
            r, h, sg, g = _one_outlet(fm, network, int(cells[i]), float(areas[i]),
                                      float(slopes[i]), cn, c_means[i], settings, oid)
        except IDFDurationError as e:  # the table, not the outlet: stop with one line
            raise IDFDurationError(f"{e} (needed at outlet {oid!r}: the Rational method's "
                                   "intensity for a duration equal to Tc)") from None
        except InputError as e:
            errs.append({"outlet_id": oid, "reason": str(e)})
            warns.append(f"outlet {oid!r}: {e}")
            continue
        rows += r
        hyds.append((oid, h))
        segs += sg
        geoms += g
        for x in r:
            if x.get("range_flags"):
                warns.append(f"outlet {oid!r}, {x['method']}: outside its range of "
                             f"applicability ({'; '.join(x['range_flags'])})")
    table = _finish_table(rows, file_ids)
    hyd = pd.DataFrame({"outlet_id": np.repeat(
        np.array([h[0] for h in hyds], dtype=object), [h[1]["time_h"].size for h in hyds])})
    for c in HYDROGRAPH_COLUMNS[1:]:
        hyd[c] = (np.concatenate([h[1][c] for h in hyds]) if hyds
                  else np.zeros(0, dtype=np.float64))
    seg = pd.DataFrame(segs, columns=SEGMENT_COLUMNS)
    errors = pd.DataFrame(errs, columns=["outlet_id", "reason"])
    inputs = settings.describe()
    inputs["ranges_of_applicability"] = {**tcm.TC_RANGES, **PEAK_RANGES}
    return DesignFlows(table, hyd, seg, geoms, errors, inputs, fm.terrain.crs, warns)

