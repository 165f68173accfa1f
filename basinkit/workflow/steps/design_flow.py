"""The design-flow step (``basinkit design-flow`` and the ``[design_flow]`` section of a job
file): time of concentration by several methods, curve-number and Rational runoff and the
NRCS unit-hydrograph design hydrograph at every placed outlet (nested ones each on their
own catchment), from :func:`basinkit.hydrology.design.design_flows`.

Writes design_flows.csv (one row per outlet and method, SI with US customary columns
beside), hydrographs.csv, design_flows.gpkg (layers ``flow_path_segments`` with each
segment's travel time, and ``outlets`` with the peaks), design_flows.json (every input
used, the ranges of applicability, the flags, the cautions) and, for the figure outlets,
``figures/<file_id>_design_hydrograph.png``.

The command and the job runner fill the same :class:`DesignFlowStepSettings`; every
input file is read and every value checked by :meth:`DesignFlowStepSettings.build`
before anything is written.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, fields
from pathlib import Path

import numpy as np

from ...errors import InputError
from ..progress import as_reporter
from ._common import CAUTION_TEXT, layer_metadata, step_record

__all__ = ["DesignFlowStepSettings", "DesignFlowResult", "design_flow_step",
           "compute_design_flows", "write_design_flows", "DESIGN_FLOW_SCHEMA",
           "design_flow_cautions", "SHORT_CAUTION"]

#: One line written on every row of design_flows.csv.
SHORT_CAUTION = ("planning-level estimate; follow the local agency's drainage manual; design "
                 "is the work of a licensed professional")

_S = dict
#: The ``[design_flow]`` section of a job file (see :mod:`basinkit.workflow.jobfile`); each
#: key is the command's option of the same name with dashes (``rainfall_depth`` is
#: ``--rainfall-depth``).
DESIGN_FLOW_SCHEMA = {
    "enabled": _S(kind="bool", default=None,
                  help="Compute design flows (default: true when the section is given)."),
    "rainfall_depth": _S(kind="depth", default=None,
                         help="Design rainfall depth with its unit ('110mm', '4.3in')."),
    "storm_duration": _S(kind="duration", default="24h",
                         help="Storm duration with its unit (NRCS patterns: 24h)."),
    "rainfall_pattern": _S(kind="choice:nrcs_type_i|nrcs_type_ia|nrcs_type_ii|"
                                "nrcs_type_iii|uniform", default="nrcs_type_ii",
                           help="Temporal pattern of the design depth."),
    "return_period_yr": _S(kind="float", default=None,
                           help="Return period (years): recorded, and looked up in the IDF "
                                "table."),
    "idf_table": _S(kind="path", default=None,
                    help="IDF CSV (duration_min, return_period_yr, intensity_mm_per_h or "
                         "depth_mm; in/h or in also): the Rational intensity at Tc, and "
                         "the depth when rainfall_depth is not given."),
    "hyetograph": _S(kind="path", default=None,
                     help="Your own storm as a CSV (time_min and cumulative_depth_mm, "
                          "depth_mm or cumulative_fraction)."),
    "curve_number": _S(kind="float", default=None, help="Uniform curve number (30-100)."),
    "curve_number_file": _S(kind="path", default=None,
                            help="Curve numbers: a raster on the DEM's grid or a polygon "
                                 "layer (with curve_number_field)."),
    "curve_number_field": _S(kind="str", default=None,
                             help="Field of the polygon layer holding the curve number."),
    "runoff_coefficient": _S(kind="float", default=None,
                             help="Uniform Rational C (0-1); without C no Rational peak."),
    "runoff_coefficient_file": _S(kind="path", default=None,
                                  help="Rational C as a raster on the DEM's grid or a "
                                       "polygon layer."),
    "runoff_coefficient_field": _S(kind="str", default=None,
                                   help="Field of the polygon layer holding C."),
    "cn_weighting": _S(kind="choice:area_weighted_cn|runoff_per_cell",
                       default="area_weighted_cn",
                       help="Runoff from the area-weighted CN, or per cell and summed."),
    "ia_ratio": _S(kind="float", default=0.2, help="Initial abstraction ratio Ia/S (0.2 or "
                                                   "0.05)."),
    "antecedent_condition": _S(kind="choice:I|II|III", default="II",
                               help="Antecedent runoff condition of the curve numbers."),
    "tc_method": _S(kind="choice:tr55_velocity|kirpich|nrcs_lag|shortest|longest|mean",
                    default="tr55_velocity",
                    help="Tc behind the peaks (the others are reported beside)."),
    "sheet_flow_n": _S(kind="float", default=None,
                       help="Manning's n for sheet flow (TR-55 table 3-1)."),
    "p2_24h": _S(kind="depth", default=None,
                 help="2-year 24-hour rainfall with its unit, for sheet flow (else from the "
                      "IDF table)."),
    "sheet_flow_max_length": _S(kind="length", default=30.0,
                                help="Longest sheet flow (default 30 m = 100 ft)."),
    "shallow_surface": _S(kind="choice:unpaved|paved", default="unpaved",
                          help="Surface of shallow concentrated flow."),
    "channel_n": _S(kind="float", default=None, help="Manning's n of the channels."),
    "hydraulic_radius": _S(kind="length", default=None,
                           help="Bankfull hydraulic radius of the channels."),
    "bankfull_width": _S(kind="pair", default=None,
                         help="Instead of hydraulic_radius: bankfull width a·A^b in m "
                              "(A upstream area in km²), as [a, b]; with bankfull_depth."),
    "bankfull_depth": _S(kind="pair", default=None,
                         help="Bankfull depth c·A^f in m (A in km²), as [c, f]; with "
                              "bankfull_width."),
    "channel_threshold": _S(kind="area", default=None,
                            help="Upstream area from which a flow path is a channel."),
    "peak_rate_factor": _S(kind="float", default=484.0,
                           help="Unit-hydrograph peak rate factor, US units (484)."),
    "time_step_min": _S(kind="float", default=None,
                        help="Convolution step in minutes (default from Tc)."),
    "base_flow_m3_per_s": _S(kind="float", default=0.0,
                             help="Constant base flow added to the hydrograph."),
}


def _bankfull(width, depth, hydraulic_radius) -> dict:
    """The width-depth relation as :class:`VelocityMethodInputs` fields (both or neither,
    and not with a hydraulic radius)."""
    if width is None and depth is None:
        return {}
    if width is None or depth is None:
        raise InputError("give the bankfull width and depth relations together "
                         "(--bankfull-width A,B and --bankfull-depth C,F)")
    if hydraulic_radius is not None:
        raise InputError("give either a hydraulic radius or the bankfull width and depth "
                         "relations, not both")
    (a, b), (c, f) = width, depth
    return {"width_coefficient": a, "width_exponent": b, "depth_coefficient": c,
            "depth_exponent": f}


def design_flow_cautions() -> str:
    """The design-flow cautions followed by the general ones."""
    from ...hydrology.design import CAUTIONS

    return CAUTIONS + " " + CAUTION_TEXT


@dataclass
class DesignFlowStepSettings:
    """Settings of the design-flow step, as given (strings with units, paths); filled by
    ``basinkit design-flow`` from its options and by the job runner from
    ``[design_flow]``. :meth:`build` reads the files and checks every value.

    Attributes are the keys of :data:`DESIGN_FLOW_SCHEMA` (less ``enabled``), plus
    ``figures`` and ``figure_outlets`` (as in the other steps).
    """

    rainfall_depth: str | None = None
    storm_duration: str = "24h"
    rainfall_pattern: str = "nrcs_type_ii"
    return_period_yr: float | None = None
    idf_table: object = None
    hyetograph: object = None
    curve_number: float | None = None
    curve_number_file: object = None
    curve_number_field: str | None = None
    runoff_coefficient: float | None = None
    runoff_coefficient_file: object = None
    runoff_coefficient_field: str | None = None
    cn_weighting: str = "area_weighted_cn"
    ia_ratio: float = 0.2
    antecedent_condition: str = "II"
    tc_method: str = "tr55_velocity"
    sheet_flow_n: float | None = None
    p2_24h: str | None = None
    sheet_flow_max_length: float = 30.0
    shallow_surface: str = "unpaved"
    channel_n: float | None = None
    hydraulic_radius: float | None = None
    bankfull_width: tuple | None = None
    bankfull_depth: tuple | None = None
    channel_threshold: float | None = None
    peak_rate_factor: float = 484.0
    time_step_min: float | None = None
    base_flow_m3_per_s: float = 0.0
    figures: bool = True
    figure_outlets: tuple = field(default_factory=tuple)

    @classmethod
    def from_job(cls, section: dict, figures=True, figure_outlets=()):
        """From a job file's validated ``[design_flow]`` section."""
        kw = {f.name: section[f.name] for f in fields(cls) if f.name in section}
        return cls(**kw, figures=figures, figure_outlets=tuple(figure_outlets))

    # ------------------------------------------------------------------ reading
    def _files(self):
        return {k: getattr(self, k) for k in ("idf_table", "hyetograph", "curve_number_file",
                                              "runoff_coefficient_file")
                if getattr(self, k) is not None}

    def inputs(self) -> dict:
        """The input files with their SHA-256 (for provenance)."""
        from ...io.hashing import file_sha256

        return {f"design_flow_{k}": {"path": str(p), "sha256": file_sha256(p)}
                for k, p in self._files().items() if Path(p).is_file()}

    def parameters(self) -> dict:
        d = asdict(self)
        d["figure_outlets"] = list(self.figure_outlets)
        return {k: (str(v) if isinstance(v, Path) else v) for k, v in d.items()}

    def build(self, terrain):
        """The :class:`~basinkit.hydrology.design.DesignFlowSettings` these stand for: read
        the rainfall tables and land-cover layers (on ``terrain``'s grid) and check every
        value. Raises one InputError saying what is wrong and what to do."""
        from ...hydrology.concentration import VelocityMethodInputs
        from ...hydrology.design import DesignFlowSettings
        from ...hydrology.rainfall import design_storm, storm_from_idf
        from ...io.landcover import read_land_values
        from ...io.rainfall import read_hyetograph, read_idf_table
        from ...units import parse_depth

        if self.curve_number is not None and self.curve_number_file is not None:
            raise InputError("give the curve number as a number (--curve-number) or a file "
                             "(--curve-number-file), not both")
        if self.runoff_coefficient is not None and self.runoff_coefficient_file is not None:
            raise InputError("give the runoff coefficient as a number (--runoff-coefficient) "
                             "or a file (--runoff-coefficient-file), not both")
        if self.curve_number is None and self.curve_number_file is None:
            raise InputError("design flows need a curve number: --curve-number 75 (uniform) "
                             "or --curve-number-file (a raster on the DEM's grid, or polygons "
                             "with --curve-number-field)")
        idf = read_idf_table(self.idf_table) if self.idf_table is not None else None
        rp = self.return_period_yr
        if self.hyetograph is not None:
            storm = read_hyetograph(self.hyetograph, depth=self.rainfall_depth)
            if rp is not None:
                storm.description["return_period_yr"] = float(rp)
        elif self.rainfall_depth is not None:
            storm = design_storm(self.rainfall_depth, self.storm_duration,
                                 self.rainfall_pattern, return_period_yr=rp)
        elif idf is not None:
            if rp is None:
                raise InputError("a storm from the IDF table needs its return period "
                                 "(--return-period, e.g. 100)")
            storm = storm_from_idf(idf, rp, self.storm_duration, self.rainfall_pattern)
        else:
            raise InputError("design flows need the design rainfall: --rainfall-depth with "
                             "its unit (e.g. 110mm), --idf-table with --return-period, or "
                             "--hyetograph")
        if self.curve_number_file is not None:
            cn = read_land_values(self.curve_number_file, terrain,
                                  field=self.curve_number_field, what="curve number")
        else:
            cn = self.curve_number
        if self.runoff_coefficient_file is not None:
            c = read_land_values(self.runoff_coefficient_file, terrain,
                                 field=self.runoff_coefficient_field,
                                 what="runoff coefficient")
        else:
            c = self.runoff_coefficient
        vel = VelocityMethodInputs(
            sheet_flow_n=self.sheet_flow_n,
            p2_24h_mm=(parse_depth(self.p2_24h, "the 2-year 24-hour rainfall (--p2-24h)")
                       if self.p2_24h is not None else None),
            channel_n=self.channel_n, hydraulic_radius_m=self.hydraulic_radius,
            **_bankfull(self.bankfull_width, self.bankfull_depth, self.hydraulic_radius),
            channel_threshold_m2=self.channel_threshold,
            sheet_flow_max_length_m=self.sheet_flow_max_length,
            shallow_surface=self.shallow_surface)
        return DesignFlowSettings(
            storm=storm, curve_number=cn, cn_weighting=self.cn_weighting,
            ia_ratio=self.ia_ratio, antecedent_runoff_condition=self.antecedent_condition,
            runoff_coefficient=c, idf=idf, return_period_yr=rp, tc_method=self.tc_method,
            velocity=vel, peak_rate_factor=self.peak_rate_factor,
            time_step_min=self.time_step_min, base_flow_m3_per_s=self.base_flow_m3_per_s)


@dataclass
class DesignFlowResult:
    """What the design-flow step computed.

    Attributes
    ----------
    flows : basinkit.hydrology.design.DesignFlows
    table : pandas.DataFrame
        design_flows.csv (the flows' table plus a row per outlet that failed).
    failures : pandas.DataFrame
        ``outlet_id, source, reason`` of the outlets whose design flows could not be
        computed (outlets that could not be placed are in ``placed.errors``).
    """

    flows: object
    table: object
    failures: object
    hydro: object = None
    delineation: object = None

    @property
    def failed(self) -> int:
        return int(len(self.failures))


def compute_design_flows(fm, placed, settings: DesignFlowStepSettings, hydro=None,
                         delineation=None, reporter=None) -> DesignFlowResult:
    """Compute the design flows of every placed outlet (nothing written).

    Parameters
    ----------
    fm : FlowModel
    placed : PlacedOutlets
    settings : DesignFlowStepSettings
    hydro : DesignFlowSettings, optional
        ``settings.build(fm.terrain)`` when not given.
    delineation : Delineation, optional
        The placed outlets' catchments (else delineated here, without polygons).

    Raises
    ------
    InputError
        A problem with the inputs as a whole (e.g. an IDF table lacking a needed
        duration); an outlet-specific problem is recorded in ``failures`` instead.
    """
    import pandas as pd

    from ...analysis.catchments import delineate
    from ...hydrology.design import design_flows

    rep = as_reporter(reporter)
    if hydro is None:
        hydro = settings.build(fm.terrain)
    if delineation is None:
        delineation = delineate(fm, placed.table, polygons=False)
    flows = design_flows(fm, delineation, hydro, progress=rep.progress)
    src = dict(zip(placed.table["outlet_id"].astype(str), placed.table["source"].astype(str)))
    fails = pd.DataFrame({"outlet_id": flows.errors["outlet_id"].astype(str),
                          "source": flows.errors["outlet_id"].astype(str).map(src).fillna(""),
                          "reason": flows.errors["reason"].astype(str)})
    table = flows.table.copy()
    table["caution"] = SHORT_CAUTION
    fid = dict(zip(delineation.table["outlet_id"].astype(str), delineation.table["file_id"]))
    extra = [pd.DataFrame({"outlet_id": fails["outlet_id"],
                           "file_id": fails["outlet_id"].map(fid), "status": "failed",
                           "note": fails["reason"], "caution": SHORT_CAUTION})]
    e = placed.errors
    if len(e):
        extra.append(pd.DataFrame({"outlet_id": e["outlet_id"].astype(str), "status": "failed",
                                   "note": e["reason"].astype(str), "caution": SHORT_CAUTION}))
    extra = [x for x in extra if len(x)]
    if extra:
        table = pd.concat([table, *extra], ignore_index=True)
    for r in fails.itertuples(index=False):
        rep.outlet_failed(r.outlet_id, r.reason, "design_flow", source=r.source)
    return DesignFlowResult(flows, table, fails, hydro, delineation)


def _outlets_layer(fm, delineation, flows):
    import geopandas as gpd
    import pandas as pd

    t = delineation.table
    ok = set(flows.table["outlet_id"].astype(str))
    t = t[t["outlet_id"].astype(str).isin(ok)]
    rows = []
    tab = flows.table
    for r in t.itertuples(index=False):
        oid = str(r.outlet_id)
        g = tab[tab["outlet_id"] == oid].set_index("method")
        rec = {"outlet_id": oid, "file_id": str(r.file_id), "area_km2": float(r.area_m2) / 1e6}
        for m in ("kirpich", "nrcs_lag", "tr55_velocity"):
            rec[f"tc_{m}_min"] = float(g.at[m, "tc_min"]) if m in g.index else np.nan
        for m in ("rational", "nrcs_unit_hydrograph"):
            q = float(g.at[m, "peak_discharge_m3_per_s"]) if m in g.index else np.nan
            rec[f"peak_{m}_m3_per_s"] = q
            rec[f"peak_{m}_cfs"] = q / 0.3048 ** 3
        uh = g.loc["nrcs_unit_hydrograph"] if "nrcs_unit_hydrograph" in g.index else None
        rec["runoff_depth_mm"] = float(uh["runoff_depth_mm"]) if uh is not None else np.nan
        rec["outside_range"] = bool(g["outside_range"].astype(bool).any())
        rec["caution"] = SHORT_CAUTION
        rows.append(rec)
    frame = pd.DataFrame(rows, columns=None if rows else ["outlet_id"])
    crs = fm.terrain.crs.to_wkt() if fm.terrain.crs is not None else None
    xy = t.set_index(t["outlet_id"].astype(str))
    geom = gpd.points_from_xy([float(xy.at[o, "x_snapped"]) for o in frame["outlet_id"]],
                              [float(xy.at[o, "y_snapped"]) for o in frame["outlet_id"]])
    return gpd.GeoDataFrame(frame, geometry=geom, crs=crs)


def write_design_flows(out, fm, placed, result: DesignFlowResult,
                       settings: DesignFlowStepSettings, reporter=None,
                       parameters: dict | None = None, inputs: dict | None = None):
    """Write what :func:`compute_design_flows` computed: design_flows.csv,
    hydrographs.csv, design_flows.gpkg, design_flows.json and the figures."""
    from ...plot.hydrograph import plot_design_hydrograph
    from ._figures import draw_pngs

    rep = as_reporter(reporter)
    flows = result.flows
    files = ["design_flows.csv", "hydrographs.csv", "design_flows.gpkg", "design_flows.json"]
    out.csv("design_flows.csv", result.table)
    out.csv("hydrographs.csv", flows.hydrographs)
    seg = flows.segments_frame()
    out.gpkg("design_flows.gpkg",
             {"flow_path_segments": seg,
              "outlets": _outlets_layer(fm, result.delineation, flows)},
             metadata={**layer_metadata(), "cautions": design_flow_cautions()},
             geometry_types={"flow_path_segments": "LineString", "outlets": "Point"})
    if settings.figures:
        rows, _ = placed.figure_rows(settings.figure_outlets)
        done = set(flows.table["outlet_id"].astype(str))
        jobs = []
        for k in rows:
            oid = str(placed.table["outlet_id"].iloc[k])
            if oid not in done:
                continue
            fid = str(placed.table["file_id"].iloc[k])
            tab, h = flows.outlet(oid)
            row = tab.set_index("method").loc["nrcs_unit_hydrograph"]
            jobs.append((f"figures/{fid}_design_hydrograph.png", plot_design_hydrograph,
                         (h, row), {"title": f"outlet {oid}: design storm and hydrograph"}))
        for name, png in draw_pngs(jobs):
            out.data(name, png)
            files.append(name)
    t = flows.table
    flagged = t[t["outside_range"].astype(bool)]
    applicability = [{"outlet_id": str(r.outlet_id), "method": str(r.method),
                      "outside_range": True, "flags": str(r.range_flags)}
                     for r in flagged.itertuples(index=False)]
    params = {**settings.parameters(), **(parameters or {}), "snapping": placed.snapping}
    meta = step_record(fm, params, {**settings.inputs(), **(inputs or {})}, files=files,
                       snapping=placed.snapping,
                       design_flow_inputs=_plain(flows.inputs),
                       ranges_of_applicability=flows.inputs.get("ranges_of_applicability"),
                       outside_range=applicability[:10000],
                       outlets_computed=int(t["outlet_id"].nunique()),
                       outlets_failed=int(result.failed),
                       failures=result.failures.to_dict(orient="records")[:10000],
                       warnings=list(flows.warnings)[:1000],
                       units=("SI first (m3/s, mm, m3, km2, ha) with US customary columns "
                              "beside (_cfs, _in, _acre_ft, _acres)"))
    meta["cautions"] = design_flow_cautions()
    meta["design_flow_cautions"] = flows.cautions
    out.json("design_flows.json", meta)
    _tell(rep, flows, result)
    return files


def design_flow_step(out, fm, placed, settings: DesignFlowStepSettings, hydro=None,
                     delineation=None, reporter=None, parameters: dict | None = None,
                     inputs: dict | None = None) -> DesignFlowResult:
    """Compute the design flows of the placed outlets and write them (see
    :func:`compute_design_flows` and :func:`write_design_flows`)."""
    res = compute_design_flows(fm, placed, settings, hydro=hydro, delineation=delineation,
                               reporter=reporter)
    write_design_flows(out, fm, placed, res, settings, reporter=reporter,
                       parameters=parameters, inputs=inputs)
    return res


def _plain(obj):
    """JSON-ready copy (NumPy scalars as Python numbers)."""
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, Path):
        return str(obj)
    return obj


def _tell(rep, flows, result, shown=20):
    """A line per outlet (the first ``shown``): Tc and peaks, with the range flags."""
    t = flows.table
    ids = list(dict.fromkeys(t["outlet_id"].astype(str)))
    for oid in ids[:shown]:
        g = t[t["outlet_id"] == oid].set_index("method")
        bits = [f"{float(g['area_km2'].iloc[0]):.4g} km2"]
        uh = g.loc["nrcs_unit_hydrograph"]
        bits.append(f"Tc {float(uh['tc_min']):.0f} min ({uh['tc_method_used']})")
        for m, label in (("nrcs_unit_hydrograph", "unit hydrograph"),
                         ("rational", "Rational")):
            r = g.loc[m]
            if r["status"] == "ok":
                q = float(r["peak_discharge_m3_per_s"])
                cfs = q / 0.3048 ** 3
                bits.append(f"{label} peak {q:.3g} m3/s ("
                            + (f"{cfs:,.0f}" if cfs >= 100 else f"{cfs:.3g}") + " cfs)"
                            + (" [outside its range]" if bool(r["outside_range"]) else ""))
            else:
                why = str(r["note"]) if isinstance(r["note"], str) else ""
                bits.append(f"{label} " + (why.split(" (")[0] if why else "not computed"))
        rep.info(f"  {oid}: " + ", ".join(bits))
    if len(ids) > shown:
        rep.info(f"  ... and {len(ids) - shown} more outlets (see design_flows.csv)")
    n_flag = int(t.groupby("outlet_id")["outside_range"].any().sum()) if len(t) else 0
    rep.info(f"design flows for {len(ids)} outlet(s)"
             + (f"; {result.failed} could not be computed" if result.failed else "")
             + (f"; {n_flag} outside a method's range of applicability (range_flags in "
                "design_flows.csv)" if n_flag else ""))
