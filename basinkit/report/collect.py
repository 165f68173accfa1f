"""Gather what the report shows from an output folder: the outlets and their status, the
per-outlet values of every table, the DEM's facts, the snapping used, the cautions and the
warnings. Nothing here draws or writes HTML."""

from __future__ import annotations

import math

import numpy as np

from ..analysis.outlets import LONG_SNAP_CELLS, LONG_SNAP_FRACTION, sanitize_ids
from ..io.products import PRODUCT_FILES
from .checks import FILL_DEPTH_M, FILL_FRACTION, depression_stats

__all__ = ["CAUTIONS", "ReportData", "collect"]

#: The cautions every report states (the run's own cautions follow when they differ).
CAUTIONS = [
    "Catchment boundaries, flow paths, channels and every value derived from them are "
    "estimates from a DEM; their accuracy depends on the DEM's resolution, vertical accuracy "
    "and date.",
    "Culverts, storm sewers, diversions and other structures are not represented unless "
    "they were burned into the DEM; anything not burned in is treated as solid ground, so "
    "road and rail embankments act as dams.",
    "Verify catchment boundaries, outlet positions and flow paths in the field before "
    "relying on them.",
    "Follow the local drainage manual for design methods and parameters.",
    "For permits and design, defer to local codes, agency procedures and licensed "
    "professional practice.",
]



class ReportData:
    """Everything the report shows, read once from the folder."""

    def __init__(self):
        self.folder = None
        self.run = None                # io.products.RunFolder
        self.prov = {}                 # provenance.json (empty when missing)
        self.flow = {}                 # flow/flow.json (empty when missing)
        self.outlets = None            # DataFrame: one row per outlet, in input order
        self.ok_ids = []               # outlets with a catchment
        self.file_id = {}              # outlet id -> file_id (anchors)
        self.tables = {}               # "catchment"/"morphometry"/"path" -> {id: record}
        self.flags = {}                # outlet id -> list of (code, text): report's checks
        self.notes = {}                # outlet id -> recorded messages of the run
        self.job_notes = []            # warnings about the whole run
        self.dem = {}                  # facts about the DEM
        self.snapping = ""             # sentence on the snapping used
        self.cautions = list(CAUTIONS)
        self.present, self.absent = [], []  # (file, what writes it)
        self.sections = []             # outlet ids with full sections
        self.summary_mode = False
        self.section_note = ""
        self.lowered_cells = None      # (n, 2) x, y of cells lowered by conditioning
        self.design = {}               # outlet id -> rows of design_flows.csv
        self.design_meta = {}          # design_flows.json
        self.design_hydrographs = {}   # outlet id -> its rows of hydrographs.csv


def _records(frame, key="outlet_id"):
    if frame is None or key not in frame.columns:
        return {}
    frame = frame.drop_duplicates(subset=key, keep="first")
    return {str(r[key]): r for r in frame.to_dict("records")}


def _finite(v):
    try:
        return v is not None and math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _truthy(v):
    if isinstance(v, str):
        return v.strip().lower() in ("true", "1", "yes")
    try:
        return bool(v) and not (isinstance(v, float) and math.isnan(v))
    except (TypeError, ValueError):
        return False


def _outlets(d):
    """One row per outlet: id, file_id, status, error; from catchments.csv (with
    outlet_errors.csv), else from any per-outlet table."""
    import pandas as pd

    run = d.run
    cat = run.table("catchments")
    errs = run.table("outlet_errors")
    frames = []
    if cat is not None and "outlet_id" in cat.columns:
        f = cat.copy()
        if "status" not in f.columns:
            area = f["area_km2"] if "area_km2" in f.columns else pd.Series(np.nan, f.index)
            f["status"] = np.where(np.isfinite(area.astype(float)), "ok", "failed")
        f["error"] = (f["error"].astype(object).where(f["error"].notna(), "").astype(str)
                      if "error" in f.columns else "")
        frames.append(f)
    if errs is not None and "outlet_id" in errs.columns:
        reason = next((c for c in ("error", "reason") if c in errs.columns), None)
        known = set(frames[0]["outlet_id"]) if frames else set()
        e = errs[~errs["outlet_id"].isin(known)]
        frames.append(pd.DataFrame({"outlet_id": e["outlet_id"], "status": "failed",
                                    "error": e[reason].astype(str) if reason else ""}))
    if not frames:
        for key in ("morphometry", "flow_paths", "design_flows"):
            t = run.table(key, usecols=["outlet_id", "error", "status", "note"])
            if t is not None and "outlet_id" in t.columns:
                if "error" not in t.columns and "status" in t.columns:  # design_flows.csv
                    t["error"] = t["note"].where(t["status"] == "failed", "")
                t = t.drop_duplicates("outlet_id")
                err = (t["error"].astype(object).where(t["error"].notna(), "").astype(str)
                       if "error" in t.columns else "")
                frames.append(pd.DataFrame({"outlet_id": t["outlet_id"], "error": err}))
                frames[0]["status"] = np.where(frames[0]["error"] == "", "ok", "failed")
                break
    if not frames:
        return pd.DataFrame({"outlet_id": [], "status": [], "error": [], "file_id": []})
    out = pd.concat(frames, ignore_index=True)
    out["outlet_id"] = out["outlet_id"].astype(str)
    out["status"] = out["status"].astype(object).where(out["status"].notna(), "failed")
    out["status"] = out["status"].astype(str)
    out["error"] = out["error"].astype(object).where(out["error"].notna(), "").astype(str)
    # anchors: the file_id column the one sanitiser wrote; else that sanitiser here
    fid = out["file_id"] if "file_id" in out.columns else None
    if fid is None or fid.isna().any() or fid.astype(str).str.lower().duplicated().any():
        out["file_id"] = sanitize_ids(out["outlet_id"])
    out["file_id"] = out["file_id"].astype(str)
    return out


def _dem_facts(d):
    """Cell size, CRS, vertical units, grid and conditioning, from the products."""
    run, prov, flow = d.run, d.prov, d.flow
    facts = {}
    dem_in = (prov.get("inputs") or {}).get("dem") or (flow.get("inputs") or {}).get("dem")
    if isinstance(dem_in, dict) and dem_in.get("path"):
        facts["file"] = str(dem_in["path"]).replace("\\", "/").rsplit("/", 1)[-1]
        facts["sha256"] = dem_in.get("sha256", "")
    raster = run.elevation_raster()
    units = ""
    if raster is not None:
        try:
            tr, shape, crs, units = run.raster_info(raster)
        except Exception as exc:  # noqa: BLE001 - an unreadable raster is a note
            run._problem(raster.name, exc)
            raster = None
    if raster is not None:
        facts["raster"] = raster
        facts["transform"], facts["shape"], facts["crs"] = tr, shape, crs
        facts["geographic"] = bool(crs is not None and crs.is_geographic)
        facts["cell_size"] = (abs(tr.a), abs(tr.e))
        facts["extent"] = (tr.c, tr.c + shape[1] * tr.a, tr.f + shape[0] * tr.e, tr.f)
        facts["metres_per_unit"] = _metres_per_unit(crs, 0.5 * (facts["extent"][2]
                                                                + facts["extent"][3]))
    else:
        shape = prov.get("grid_shape") or flow.get("grid_shape")
        if shape:
            facts["shape"] = tuple(shape)
        if prov.get("crs") or flow.get("crs"):
            from pyproj import CRS

            try:
                facts["crs"] = CRS.from_user_input(prov.get("crs") or flow.get("crs"))
            except Exception:  # noqa: BLE001
                pass
    vu = None
    for src in (prov, flow):
        for k in ("vertical_units", "vertical_unit", "elevation_units"):
            if src.get(k):
                vu = (str(src[k]), "recorded by the run")
                break
        if vu:
            break
    if vu is None and units:
        vu = (units, "from the DEM file")
    facts["vertical_units"] = vu
    facts["conditioning"] = prov.get("conditioning") or flow.get("conditioning") or {}
    facts["routing"] = ((flow.get("parameters") or {}).get("method")
                        or ((prov.get("parameters") or {}).get("routing") or {}).get("method"))
    return facts


def _metres_per_unit(crs, lat):
    """Ground metres per map unit along x (at latitude ``lat`` on geographic grids)."""
    if crs is None:
        return 1.0
    if crs.is_geographic:
        from pyproj import Geod

        e = crs.ellipsoid
        f = 1.0 / e.inverse_flattening if e.inverse_flattening else 0.0
        _, _, dist = Geod(a=e.semi_major_metre, f=f).inv(0.0, lat, 1e-3, lat)
        return float(dist) / 1e-3
    for ax in crs.axis_info:
        if ax.unit_conversion_factor:
            return float(ax.unit_conversion_factor)
    return 1.0


def _snapping(d):
    """The snapping used, as a sentence, and the radius (m) for the far-snap check."""
    prov = d.prov
    rec = prov.get("snapping")
    params = (prov.get("parameters") or {}).get("outlets") or {}
    radius = params.get("snap_radius_m")
    min_area = params.get("snap_min_area", params.get("snap_to_channel_m2"))
    cat = d.tables["catchment"]
    if radius is None and cat:
        radii = {r.get("snap_radius_m") for r in cat.values() if _finite(r.get("snap_radius_m"))}
        radius = min(radii) if len(radii) == 1 else None
    if isinstance(rec, dict) and rec.get("radius_m") is not None:  # the steps' record
        radius = rec["radius_m"]
        min_area = rec.get("snap_to_channel_m2")
        rec = None
    if isinstance(rec, str) and rec:
        text = rec
    elif isinstance(rec, dict) and rec:
        text = "; ".join(f"{k.replace('_', ' ')}: {v}" for k, v in sorted(rec.items()))
    elif radius is None:
        text = "not recorded in this folder"
    elif float(radius) == 0:
        text = "none: every outlet stays on the cell it was given in"
    elif _finite(min_area) and float(min_area) > 0:
        text = (f"each outlet moved to the nearest cell draining at least "
                f"{_area_text(float(min_area))} within {float(radius):g} m")
    else:
        text = (f"each outlet moved to the cell of greatest upstream area within "
                f"{float(radius):g} m")
    return text, (float(radius) if _finite(radius) else None)


def _area_text(m2):
    return f"{m2 / 1e6:g} km²" if m2 >= 1e6 else f"{m2 / 1e4:g} ha" if m2 >= 1e4 \
        else f"{m2:g} m²"


def _flags(d, radius_m, fill):
    """The report's own checks per outlet: divide at the DEM edge, snapped far, filled
    depressions (fill: {id: (max depth m, raised fraction, volume m³)})."""
    cell_m = None
    if "cell_size" in d.dem:
        cell_m = d.dem["cell_size"][0] * d.dem.get("metres_per_unit", 1.0)
    cat = d.tables["catchment"]
    for oid in d.ok_ids:
        c = cat.get(oid, {})
        out = []
        if _truthy(c.get("touches_edge")):
            out.append(("edge", "The catchment divide reaches the edge of the DEM (or a "
                                "nodata hole): the catchment may continue beyond it and "
                                "its area be too small. Extend the DEM and run again."))
        dist = c.get("snap_distance_m")
        far = None
        if _finite(dist) and radius_m and cell_m:
            far = max(LONG_SNAP_FRACTION * radius_m, LONG_SNAP_CELLS * cell_m)
        sw = c.get("snap_warning")
        sw = sw if isinstance(sw, str) and sw.strip() else ""
        if (far is not None and float(dist) > far) or sw:
            text = f"The outlet was snapped {float(dist):,.0f} m from where it was given" \
                if _finite(dist) else "The snap of this outlet is doubtful"
            if sw:
                text += f" ({sw})"
            out.append(("snap", text + ". Check that it landed on the intended stream."))
        f = fill.get(oid)
        if f is not None:
            deep, frac, vol = f
            if deep >= FILL_DEPTH_M or frac >= FILL_FRACTION:
                out.append(("fill", f"Conditioning filled closed depressions in this "
                                    f"catchment up to {deep:.1f} m deep ({vol:,.0f} m³, "
                                    f"{100 * frac:.1f} % of its cells raised). If a "
                                    "depression really holds water (pond, sinkhole, "
                                    "quarry) or drains through a structure, the area behind "
                                    "it may not reach the outlet."))
        d.flags[oid] = out


def _notes(d):
    """Messages the run recorded: provenance warnings per outlet and for the run."""
    w = d.prov.get("warnings")
    if isinstance(w, dict):
        d.job_notes = [str(m) for m in w.get("job", []) or []]
        for oid, msgs in w.items():
            if oid != "job" and isinstance(msgs, list):
                d.notes[str(oid)] = list(dict.fromkeys(str(m) for m in msgs))
    elif isinstance(w, list):
        d.job_notes = [str(m) for m in w]
    for oid, r in zip(d.outlets["outlet_id"], d.outlets.to_dict("records")):
        if r["status"] != "ok" and r["error"]:
            d.notes.setdefault(oid, [])
            if r["error"] not in d.notes[oid]:
                d.notes[oid].insert(0, r["error"])


def _choose_sections(d, report_outlets, full_sections_max, summary_sections):
    ok = d.ok_ids
    d.summary_mode = len(ok) > full_sections_max
    named = [str(i) for i in report_outlets or ()]
    okset = set(ok)
    missing = [i for i in named if i not in okset]
    notes = []
    if missing:
        notes.append("report_outlets names outlets without a catchment in this folder: "
                     + ", ".join(missing[:20]) + (" …" if len(missing) > 20 else ""))
    if named:
        chosen = list(dict.fromkeys(i for i in named if i in okset))
        if len(chosen) > full_sections_max:
            notes.append(f"{len(chosen)} outlets were named for full sections; the first "
                         f"{full_sections_max} have them")
            chosen = chosen[:full_sections_max]
    elif d.summary_mode:
        chosen = ok[:summary_sections]
        notes.append(f"{len(ok):,} outlets: more than {full_sections_max}, so the report "
                     f"summarises them all and gives full sections to the first "
                     f"{len(chosen)} (name others with report_outlets)")
    else:
        chosen = list(ok)
    d.sections = chosen
    d.section_note = "; ".join(notes)


def collect(run, report_outlets=(), full_sections_max=50, summary_sections=10,
            progress=None):
    """Read everything the report shows from ``run`` (an io.products.RunFolder)."""
    d = ReportData()
    d.run, d.folder = run, run.folder
    d.prov = run.json("provenance") or {}
    d.flow = run.json("flow") or {}
    for key, (name, step) in PRODUCT_FILES.items():
        if key == "outlet_errors":
            continue
        (d.present if run.has(key) else d.absent).append((name, step))
    d.outlets = _outlets(d)
    d.file_id = dict(zip(d.outlets["outlet_id"], d.outlets["file_id"]))
    d.ok_ids = list(dict.fromkeys(d.outlets.loc[d.outlets["status"] == "ok", "outlet_id"]))
    paths = run.table("flow_paths")
    if paths is not None:
        kind = next((c for c in ("kind", "path_kind", "profile_kind") if c in paths.columns),
                    None)
        if kind is not None:
            paths = paths[paths[kind].astype(str) == "longest_flow_path"]
    d.tables = {"catchment": _records(run.table("catchments")),
                "morphometry": _records(run.table("morphometry")),
                "path": _records(paths)}
    d.dem = _dem_facts(d)
    d.snapping, radius = _snapping(d)
    extra = d.prov.get("cautions")
    if isinstance(extra, list):
        d.cautions += [str(c) for c in extra if str(c) not in d.cautions]
    _choose_sections(d, report_outlets, full_sections_max, summary_sections)
    from .design import collect_design

    collect_design(d)
    fill, d.lowered_cells = depression_stats(d, progress=progress)
    _flags(d, radius, fill)
    _notes(d)
    return d
