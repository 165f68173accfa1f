"""A job whose DEM is routed by tiles (``[routing] max_memory`` or ``tile_size``): the flow
folder by tiles, then the catchments and the channel network by tiles on it; the
stages that need the grid in memory (profiles, morphometry, design flows, the report) are
skipped with a note. Called by :func:`basinkit.workflow.runner.run_job`."""

from __future__ import annotations

import shutil
import time

__all__ = ["tiled_plan", "run_tiled"]


def tiled_plan(job, flow_settings):
    """The route plan of a job (:func:`basinkit.tiles.plan.plan_route`), or None when the
    job sets neither ``max_memory`` nor ``tile_size``."""
    import os

    from ..tiles.plan import plan_route
    from .steps.tiled_flow import check_tiled_settings, grid_shape_of

    rt = job["routing"]
    if rt.get("max_memory") is None and rt.get("tile_size") is None:
        return None
    if rt.get("tile_size") is not None and not 1 <= int(rt["tile_size"]) <= 16000:
        from ..errors import JobFileError

        raise JobFileError(f"[routing] tile_size must be between 1 and 16000 cells, got "
                           f"{rt['tile_size']}")
    nrows, ncols = grid_shape_of(flow_settings)
    plan = plan_route(nrows, ncols, rt.get("max_memory"), tile_size=rt.get("tile_size"),
                      workers=os.cpu_count() or 1)
    if plan.tiled:
        check_tiled_settings(flow_settings)
    return plan


def run_tiled(job, out, rep, plan, res, timer, st, inputs):
    """The stages of a job routed by tiles, written into ``out`` (checked, not open)."""
    from ..io.tiled_flow_folder import gdal_cache_env
    from .steps.tiled_flow import work_folder_for

    t_start = time.perf_counter()
    scheduler = job["routing"].get("scheduler")
    spec = st["outlets"]
    raw = read_errors = None
    with timer("read"):
        if spec:
            raw, read_errors = spec.read()
        if job["design_flow"]["enabled"]:
            rep.warn("[design_flow] needs the grid in memory: skipped on a DEM routed by "
                     "tiles")
    rep.info(plan.reason[0].upper() + plan.reason[1:])
    work = work_folder_for(out.root)  # beside the output, never inside it
    out.open()
    with gdal_cache_env():
        return _stages(job, out, rep, plan, res, timer, st, inputs, work, scheduler, spec,
                       raw, read_errors, t_start)


def _stages(job, out, rep, plan, res, timer, st, inputs, work, scheduler, spec, raw,
            read_errors, t_start):
    import pandas as pd

    from ..io.tiled_flow_folder import TiledFlowFolder
    from .outlets import place_outlets
    from .job_records import (job_provenance, job_warnings, outlet_rows, record_peak_memory,
                              report_peak_memory)
    from .steps.tiled_flow import tiled_flow_step
    from .steps.tiled_steps import tiled_catchments_step, tiled_channels_step

    with timer("flow"):
        tiled_flow_step(out.sub("flow"), st["flow"], plan.tile, scheduler=scheduler,
                        work=work, reporter=rep)
        flow = TiledFlowFolder(out.folder / "flow")
        fm = flow.windowed_model()
        fm.parameters["flow_folder"] = "flow"
    res.flow = fm
    placed = cres = None
    failures = []
    if spec:
        with timer("catchments"):
            placed = place_outlets(fm, spec, raw, read_errors, reporter=rep)
            cres = tiled_catchments_step(out, fm, placed, st["catchments"], reporter=rep,
                                         parameters={"outlets": spec.parameters()},
                                         scheduler=scheduler)
        res.catchments = cres.delineation
        failures.append(placed.errors.assign(stage="outlets"))
    else:
        timer.skip("catchments", "no outlets file in [inputs]")
    with timer("channels"):
        tiled_channels_step(out, fm, st["channels"],
                            outlet_cells=None if placed is None else placed.cells,
                            reporter=rep, scheduler=scheduler)
    why = "needs the grid in memory; the DEM was routed by tiles"
    for stage in ("profiles", "morphometry"):
        timer.skip(stage, why)
    if job["design_flow"]["enabled"]:
        timer.skip("design_flow", why)
    cols = ["outlet_id", "source", "stage", "reason"]
    parts = [f[cols] for f in failures if len(f)]
    res.failures = (pd.concat(parts, ignore_index=True) if parts
                    else pd.DataFrame(columns=cols))
    res.outlets = outlet_rows(cres)
    res.warnings = job_warnings(job, fm, cres, {})
    res.provenance = job_provenance(job, fm, inputs, placed, res)
    if job["outputs"]["report"]:
        timer.skip("report", why)
    res.seconds_total = round(time.perf_counter() - t_start, 3)
    res.provenance["stages"] = timer.record()
    res.provenance["files"] = out.hashes()
    record_peak_memory(res)
    out.json("provenance.json", res.provenance)
    out.commit(rep)
    shutil.rmtree(work, ignore_errors=True)
    res.files = out.files
    if len(res.failures):
        rep.warn(f"{len(res.failures)} outlet failure(s): see outlet_errors.csv and the "
                 "error columns of the tables")
    rep.info(f"wrote {out.folder} ({res.seconds_total:.1f} s)")
    report_peak_memory(res, rep)
    return res
