"""What a job records beside its products, shared by the runner and the job routed by
tiles: the outlets' rows, the warnings, provenance.json's contents and the peak memory
reported at the end."""

from __future__ import annotations

__all__ = ["outlet_rows", "job_warnings", "job_provenance", "record_peak_memory",
           "report_peak_memory"]


def outlet_rows(cres):
    """One row per outlet given (catchments.csv with ``cell`` = -1 for failed outlets)."""
    if cres is None:
        return None
    t = cres.table.copy()
    for c in ("cell", "row", "col"):
        if c in t.columns:
            t[c] = t[c].fillna(-1).astype("int64")
    snap = cres.delineation.table.set_index("file_id")["snap_warning"] \
        if "snap_warning" in cres.delineation.table else None
    if snap is not None:
        t["snap_warning"] = t["file_id"].map(snap).fillna("").astype(str)
    if "description" not in t.columns:
        t["description"] = ""
    t["description"] = t["description"].fillna("").astype(str)
    t["error"] = t["error"].fillna("").astype(str)
    return t


def job_warnings(job, fm, cres, profiles):
    """``{"job": [...], outlet_id: [...]}``: the job's warnings and each outlet's."""
    w = {"job": []}
    crs = fm.terrain.crs
    if crs is not None and crs.is_geographic:
        w["job"].append("The DEM is in geographic coordinates: cells are not square and "
                        "shrink towards the poles; areas and lengths were computed on the "
                        "ellipsoid, but slopes are less reliable than on a projected grid. "
                        "Consider reprojecting to a local projected CRS.")
    if not job["inputs"]["burn_lines"]:
        w["job"].append("No culverts, storm sewers or diversions were burned in: road and "
                        "rail embankments act as dams and the catchments above them may be "
                        "wrong.")
    if fm.parameters.get("cells_without_outlet"):
        w["job"].append(f"{fm.parameters['cells_without_outlet']:,} cells have no outlet "
                        "after routing (unconditioned depressions).")
    cond = (getattr(fm, "meta", None) or {}).get("conditioning") or {}
    if cond.get("depressions", 0) >= 100:
        w["job"].append(f"Conditioning filled {cond['depressions']:,} closed depressions "
                        f"({cond.get('filled_volume_m3', 0):,.0f} m³). Most are usually "
                        "noise, but real ponds, sinkholes and quarries may hold water that "
                        "never reaches the outlets.")
    if cres is not None:
        for r in cres.table.itertuples():
            msgs = [m for m in (str(r.error or ""), str(r.warning or "")) if m and m != "nan"]
            if r.status == "ok":
                msgs += (profiles.get(str(r.outlet_id), {}).get("warnings") or [])
                w[str(r.outlet_id)] = w.get(str(r.outlet_id), []) + msgs
            elif str(r.outlet_id) not in w:
                w[str(r.outlet_id)] = msgs
    return w


def job_provenance(job, fm, inputs, placed, res):
    from .. import __version__
    from .cautions import CAUTION_TEXT
    from .steps._common import grid_facts

    crs = fm.terrain.crs
    prov = {
        "software": "basinkit", "version": __version__,
        "job": {"name": job["job"]["name"], "description": job["job"]["description"],
                "file": str(job.path) if job.path else None},
        "parameters": job.parameters(), "inputs": inputs,
        "crs": crs.to_wkt() if crs is not None else None,
        "crs_epsg": crs.to_epsg() if crs is not None else None,
        **grid_facts(fm),
        "conditioning": (getattr(fm, "meta", None) or {}).get("conditioning"),
        "snapping": None if placed is None else placed.snapping,
        "outlets": None if placed is None else {
            "given": placed.given, "placed": int(len(placed.table)),
            "failed": int(len(res.failures))},
        "failures": res.failures.astype(str).to_dict(orient="records")[:10000],
        "stages": {k: {"status": v["status"], "note": v["note"]}
                   for k, v in res.stages.items()},
        "warnings": res.warnings,
        "cautions": CAUTION_TEXT,
    }
    return prov


def record_peak_memory(res):
    """The peak memory of the run so far into ``res`` and into ``res.provenance`` (section
    ``resources``: the one part of provenance.json that differs between reruns; the
    rasters, tables, figures and report stay byte-identical)."""
    from .._processes import peak_memory

    peak = peak_memory()
    res.peak_memory_bytes = peak["peak_memory_bytes"]
    res.peak_worker_memory_bytes = peak["peak_worker_memory_bytes"]
    res.provenance["resources"] = {
        **peak, "note": "peak resident memory of the run's process and of its largest "
                        "worker process (getrusage); it differs from run to run"}
    return peak


def report_peak_memory(res, rep):
    """The peak memory recorded by :func:`record_peak_memory`, on the console and as the
    ``--log-json`` record ``peak_memory``."""
    from ..terrain.memory import format_bytes

    if res.peak_memory_bytes is None:
        return
    msg = f"peak memory {format_bytes(res.peak_memory_bytes)}"
    if res.peak_worker_memory_bytes:
        msg += f", largest worker {format_bytes(res.peak_worker_memory_bytes)}"
    rep.info(msg, event="peak_memory", peak_memory_bytes=res.peak_memory_bytes,
             peak_worker_memory_bytes=res.peak_worker_memory_bytes)
