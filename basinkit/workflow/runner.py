"""The job runner: the steps of :mod:`basinkit.workflow.steps` in order, with the settings of
a job file, into one output folder, plus ``provenance.json`` and the report.

The folder holds every step's products exactly as the commands write them (the flow
folder in ``flow/``): the runner calls the same step functions with the same settings, and
its later steps read the flow folder back as the commands do.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

from .jobfile import JobSpec, read_job
from .job_records import (job_provenance, job_warnings, outlet_rows, record_peak_memory,
                          report_peak_memory)
from .progress import StageTimer, as_reporter

__all__ = ["JobResult", "run_job"]


@dataclass
class JobResult:
    """What a job run produced.

    Attributes
    ----------
    folder : Path
        The output folder.
    files : dict
        ``{name relative to the folder: Path}`` of every file written.
    stages : dict
        ``{stage: {"status": "done" | "skipped" | "failed", "seconds": float, "note": str}}``
        (provenance.json records status and note only: timings differ from run to run and
        the folder's files do not; they go to the console and ``--log-json``).
    seconds_total : float
        Wall time of the run.
    peak_memory_bytes, peak_worker_memory_bytes : int or None
        Peak resident memory of this process, and the largest peak of its worker processes
        (0: none were forked), when the run ended (:func:`basinkit._processes.peak_memory`;
        over the life of the process, so a Python session's earlier work counts), taken
        just before provenance.json is written. On the console, in ``--log-json`` and in
        provenance.json's ``resources`` section, the one part of the folder that differs
        between reruns.
    flow : FlowModel
        The model as read back from ``flow/``.
    outlets : pandas.DataFrame or None
        One row per outlet given (catchments.csv with ``cell`` = -1 for failed outlets).
    catchments : Delineation or None
        Its polygons are released before the profiles (read back from catchments.gpkg by
        its ``catchment_polygon`` and frames).
    network : ChannelNetwork or None
    morphometry : pandas.DataFrame or None
        morphometry.csv.
    curves : dict
        Hypsometric curves by outlet id.
    profiles : dict
        Per outlet id, its flow paths and channel tables.
    failures : pandas.DataFrame
        Every outlet that failed: ``outlet_id, source, stage, reason``.
    warnings : dict
        ``{outlet id or "job": [message, ...]}``.
    provenance : dict
    """

    folder: Path
    files: dict = field(default_factory=dict)
    stages: dict = field(default_factory=dict)
    seconds_total: float = 0.0
    peak_memory_bytes: int | None = None
    peak_worker_memory_bytes: int | None = None
    flow: object = None
    terrain: object = None
    outlets: object = None
    catchments: object = None
    network: object = None
    morphometry: object = None
    curves: dict = field(default_factory=dict)
    profiles: dict = field(default_factory=dict)
    failures: object = None
    warnings: dict = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)
    job: JobSpec | None = None

    @property
    def exit_status(self) -> int:
        """0 when every outlet went through, 1 when some failed (DESIGN.md, the output
        contract)."""
        return 1 if self.failures is not None and len(self.failures) else 0


def settings_of(job: JobSpec) -> dict:
    """The step settings a job file stands for (the same objects the commands build from
    their options)."""
    from .outlets import OutletSpec
    from .steps import (CatchmentSettings, ChannelSettings, DesignFlowStepSettings,
                        FlowSettings, MorphometrySettings, ProfileSettings)

    ins, cond, rt = job["inputs"], job["conditioning"], job["routing"]
    oc, ch, pr, outs = job["outlets"], job["channels"], job["profiles"], job["outputs"]
    figure_outlets = tuple(outs["report_outlets"])
    return {
        "flow": FlowSettings(
            dem=ins["dem"], band=ins["band"], crs=ins["crs"], sea_level_m=ins["sea_level_m"],
            base_level=ins["base_level"], replace_crs=ins["replace_crs"],
            cell_size=ins["cell_size"],
            origin=None if ins["origin"] is None else tuple(ins["origin"]),
            elevation_range_m=tuple(ins["elevation_range_m"]),
            implausible_elevations=ins["implausible_elevations"], conditioning=cond["method"],
            epsilon=cond["epsilon"], max_breach_depth_m=cond["max_breach_depth_m"],
            max_breach_length_m=cond["max_breach_length"],
            burn_lines=list(ins["burn_lines"]), burn_depth_m=cond["burn_depth_m"],
            method=rt["method"], mfd_exponent=rt["mfd_exponent"],
            copy_input=ins["copy_input"]),
        "outlets": OutletSpec(file=ins["outlets"], crs=oc["crs"], id_column=oc["id_column"],
                              snap_radius_m=oc["snap_radius_m"],
                              snap_to_channel_m2=oc["snap_min_area"]),
        "catchments": CatchmentSettings(labels_raster=outs["rasters"],
                                        workers=job["job"]["workers"]),
        "channels": ChannelSettings(min_area_m2=ch["min_area"], min_order=ch["min_order"]),
        "profiles": ProfileSettings(
            min_order=ch["min_order"],
            concavity=None if pr["fit_concavity"] else pr["concavity"],
            fit_concavity=pr["fit_concavity"], reference_area_m2=pr["reference_area"],
            slope_window_m=pr["slope_window"], slope_drop_m=pr["slope_drop"],
            vertical_precision_m=pr["vertical_precision"], figures=outs["figures"],
            figure_outlets=figure_outlets, workers=job["job"]["workers"]),
        "morphometry": MorphometrySettings(min_area_m2=ch["min_area"],
                                           figures=outs["figures"],
                                           figure_outlets=figure_outlets),
        "design_flow": DesignFlowStepSettings.from_job(job["design_flow"], outs["figures"],
                                                       figure_outlets),
    }


def run_job(job, output=None, overwrite: bool = False, console=None,
            report=None) -> JobResult:
    """Run a job: flow folder → catchments → channels → morphometry → design flows →
    profiles → report.

    Parameters
    ----------
    job : JobSpec, str or Path
        A validated job or the path of a TOML job file.
    output : str or Path, optional
        Output folder; overrides ``[outputs] folder``.
    overwrite : bool
        Allow a folder that holds files. The run is written beside the folder and swapped
        in when complete; of the old folder's files only those the earlier run recorded
        (its manifest) and that are unchanged go, anything else is kept and named.
    console : reporter, optional
        Where progress goes (see :mod:`basinkit.workflow.progress`); silent by default.
    report : callable, optional
        The report writer, e.g. :func:`basinkit.write_report` (the report room comes after
        the workflow room, so the runner is given it; ``basinkit run`` gives it). It is
        called with the output folder, after provenance.json is written, when
        ``[outputs] report`` is true; without it the report stage is skipped with a note.

    Returns
    -------
    JobResult
        ``exit_status`` is 1 when some outlets failed (listed in ``failures``, in
        outlet_errors.csv and in the tables' ``error`` columns), else 0.

    Raises
    ------
    BasinkitError
        A bad job file, DEM, outlet file or output folder (found before anything is
        written), or a stage that cannot run with the given settings.

    Notes
    -----
    Outputs (see the products contract): ``flow/``; catchments.csv, catchments.gpkg,
    catchments.json, outlet_errors.csv (when an outlet failed), subcatchment_labels.tif
    (``rasters``); channel_segments.csv, channels.gpkg, strahler_order.tif, channels.json;
    profile.csv, steepness.csv, knickpoints.csv, flow_paths.csv, profiles.gpkg,
    profiles.json; morphometry.csv, hypsometry.csv, morphometry.json; figures/ for the
    figure outlets; report.html and provenance.json. Tables and rasters are deterministic.

    Examples
    --------
    >>> from basinkit.workflow.runner import run_job
    >>> from basinkit.workflow.jobfile import demo_job_path
    >>> res = run_job(demo_job_path(), output="demo-out", overwrite=True)  # doctest: +SKIP
    >>> res.exit_status  # doctest: +SKIP
    0
    """
    from .output import OutputFolder

    rep = as_reporter(console)
    if not isinstance(job, JobSpec):
        job = read_job(job)
    folder = Path(output) if output is not None else job["outputs"]["folder"]
    # written into a staging folder beside it (out.open()), swapped in at the end
    out = OutputFolder(folder, overwrite, reporter=rep).check()
    import gc

    # the libraries' objects, alive for the whole run, are frozen after the read stage
    # (``_run``): out of the run's garbage collections, which walk them all otherwise;
    # not when the caller froze objects of its own
    freeze = gc.get_freeze_count() == 0
    try:
        return _run(job, out, rep, report, freeze)
    except BaseException:
        out.abort()  # the staging folder goes; the folder stays as the earlier run left it
        raise
    finally:
        from .warmup import stop_compile_ahead

        stop_compile_ahead()
        if freeze:
            gc.unfreeze()


def _later_stages(job, spec, raw) -> list:
    """The stages of :data:`.warmup.LATER_KERNELS` whose kernels ``job`` will call:
    many outlets (more than ``WINDOW_MAX_CATCHMENTS``) are measured all at once, a few
    each on its window (:func:`basinkit.analysis.morphometry.morphometry_table`)."""
    if not spec:
        return ["flow", "channels"]
    from ..analysis.morphometry import WINDOW_MAX_CATCHMENTS

    stages = ["flow", "channels", "catchments"]
    stages += [s for s in ("profiles", "morphometry") if job[s]["enabled"]]
    if job["morphometry"]["enabled"] and len(raw) > WINDOW_MAX_CATCHMENTS:
        stages.append("nested_morphometry")
    return stages


class _StageTimer(StageTimer):
    """The stage timer, telling the compile-ahead process (if any) each stage the job comes
    to (:func:`basinkit.workflow.warmup.stage_begins`)."""

    def __call__(self, name):
        from .warmup import stage_begins

        stage_begins(name)
        return super().__call__(name)


def _run(job, out, rep, report, freeze=False):
    """The stages of :func:`run_job`, written into ``out`` (checked, not yet open);
    ``freeze``: the objects alive after the read stage left out of the garbage
    collections (``gc.freeze``; the caller unfreezes)."""
    import gc

    import pandas as pd

    from ..io.flow_folder import load_flow
    from .steps import (catchments_step, channels_step, flow_step, morphometry_step,
                        profiles_step)
    from .steps.flow import read_burn_lines, read_terrain
    from .warmup import compile_ahead

    res = JobResult(folder=out.root, job=job)
    timer = _StageTimer(rep)
    res.stages = timer.stages
    t_start = time.perf_counter()
    st = settings_of(job)
    spec = st["outlets"]
    # everything a user can get wrong is read before anything is written
    from .tiled_job import run_tiled, tiled_plan

    plan = tiled_plan(job, st["flow"])
    if plan is not None and plan.tiled:
        return run_tiled(job, out, rep, plan, res, timer, st, _hashes(job))
    if plan is not None:
        rep.info(f"routing in memory: {plan.reason}")
    if job["routing"].get("scheduler"):
        rep.warn("[routing] scheduler applies to a DEM routed by tiles (max_memory or "
                 "tile_size); this one is routed in memory")
    with timer("read"):
        raw = read_errors = None
        if spec:  # first: how many outlets decides which kernels the job will need
            raw, read_errors = spec.read()
        # a new machine: the later stages' kernels compile in a second process meanwhile
        compile_ahead(_later_stages(job, spec, raw))
        inputs = _hashes(job)
        terrain = read_terrain(st["flow"])
        burn = read_burn_lines(st["flow"], terrain.crs)
        design = _design_flow_inputs(job, st, terrain, inputs)
    if freeze:
        gc.freeze()
    out.open()
    res.terrain = terrain
    with timer("flow"):
        flow_step(out.sub("flow"), st["flow"], terrain=terrain, burn=burn, reporter=rep)
        del terrain
        fm = load_flow(out.folder / "flow")  # as the commands read it
        fm.parameters["flow_folder"] = "flow"  # in the output folder (not the staging's)
    res.flow = fm
    placed = cres = None
    failures = []
    if spec:
        with timer("catchments"):
            from .outlets import place_outlets

            placed = place_outlets(fm, spec, raw, read_errors, reporter=rep)
            cres = catchments_step(out, fm, placed, st["catchments"], reporter=rep,
                                   parameters={"outlets": spec.parameters()})
        res.catchments = cres.delineation
        failures.append(placed.errors.assign(stage="outlets"))
    else:
        timer.skip("catchments", "no outlets file in [inputs]; catchments, profiles and "
                                 "morphometry need outlets")
    with timer("channels"):
        chres = channels_step(out, fm, st["channels"],
                              outlet_cells=None if placed is None else placed.cells,
                              reporter=rep)
    res.network = chres.network
    if placed is None:
        timer.skip("morphometry", "no outlets")
        timer.skip("profiles", "no outlets")
    else:
        # the stages that read the catchment polygons first, then the profiles without
        # them: a batch of nested catchments holds about 24 bytes per vertex in them
        if job["morphometry"]["enabled"]:
            with timer("morphometry"):
                mres = morphometry_step(out, fm, placed, network=chres.network,
                                        delineation=cres.delineation,
                                        settings=st["morphometry"], reporter=rep)
            res.morphometry = mres.table
            res.curves = mres.curves
            m = mres.table.iloc[:len(placed.table)]
            m = m[m["error"] != ""]
            failures.append(pd.DataFrame({"outlet_id": m["outlet_id"], "source": m["source"],
                                          "reason": m["error"], "stage": "morphometry"}))
        else:
            timer.skip("morphometry",
                       "turned off in the job file ([morphometry] enabled = false)")
        if design is not None:
            from .steps import design_flow_step

            with timer("design_flow"):
                dres = design_flow_step(out, fm, placed, st["design_flow"], hydro=design,
                                        delineation=cres.delineation, reporter=rep)
            failures.append(dres.failures.assign(stage="design_flow"))
        cres.delineation.release_polygons(out.destination / "catchments.gpkg")
        if job["profiles"]["enabled"]:
            with timer("profiles"):
                pres = profiles_step(out, fm, placed, chres.network, st["profiles"],
                                     reporter=rep)
            res.profiles = pres.paths
            failures.append(pres.failures.assign(stage="profiles"))
            fm.release("profiles")  # nothing after needs the donor tables
        else:
            timer.skip("profiles", "turned off in the job file ([profiles] enabled = false)")
    cols = ["outlet_id", "source", "stage", "reason"]
    parts = [f[cols] for f in failures if len(f)]
    res.failures = (pd.concat(parts, ignore_index=True) if parts
                    else pd.DataFrame(columns=cols))
    res.outlets = outlet_rows(cres)
    res.warnings = job_warnings(job, fm, cres, res.profiles)
    res.provenance = job_provenance(job, fm, inputs, placed, res)
    res.provenance["files"] = out.hashes()
    out.json("provenance.json", res.provenance)
    if job["outputs"]["report"] and report is None:
        timer.skip("report", "no report writer given (basinkit run writes the report; from "
                             "Python pass report=basinkit.write_report)")
    elif job["outputs"]["report"]:
        _report(job, out, res, timer, rep, report)
    res.seconds_total = round(time.perf_counter() - t_start, 3)
    res.provenance["stages"] = timer.record()
    res.provenance["files"] = {k: v for k, v in out.hashes().items()
                               if k != "provenance.json"}
    record_peak_memory(res)
    out.json("provenance.json", res.provenance)
    out.commit(rep)  # the earlier run's files go, the user's are kept (and named)
    res.files = out.files
    if len(res.failures):
        rep.warn(f"{len(res.failures)} outlet failure(s): see outlet_errors.csv and the "
                 "error columns of the tables")
    rep.info(f"wrote {out.folder} ({res.seconds_total:.1f} s)")
    report_peak_memory(res, rep)
    return res


def _design_flow_inputs(job, st, terrain, inputs):
    """The design-flow settings of ``[design_flow]`` with their files read and checked (in
    the read stage, before anything is written); None when the section is off."""
    if not job["design_flow"]["enabled"]:
        return None
    if not job["inputs"]["outlets"]:
        from ..errors import JobFileError

        raise JobFileError("[design_flow] needs outlets: give [inputs] outlets")
    inputs.update(st["design_flow"].inputs())
    return st["design_flow"].build(terrain)


def _report(job, out, res, timer, rep, write_report):
    """The report stage: ``write_report`` (the report room's, handed in by the caller) reads
    the output folder."""

    known = set() if res.outlets is None else set(res.outlets["outlet_id"].astype(str))
    unknown = [i for i in job["outputs"]["report_outlets"] if i not in known]
    if unknown:
        msg = ("[outputs] report_outlets names outlets that are not in the outlet file: "
               + ", ".join(unknown))
        res.warnings.setdefault("job", []).append(msg)
        rep.warn(msg)
    with timer("report"):  # built only from the files the steps wrote (report room)
        write_report(out.folder, out.path("report.html"),
                     report_outlets=tuple(job["outputs"]["report_outlets"]),
                     progress=rep.progress)
        out.adopt("report.html")


def _hashes(job):
    from ..io.hashing import file_sha256

    ins = job["inputs"]
    out = {}
    for key in ("dem", "outlets", "base_level"):
        if ins[key] is not None:
            out[key] = {"path": str(ins[key]), "sha256": file_sha256(ins[key])}
    for i, p in enumerate(ins["burn_lines"]):
        out[f"burn_lines_{i + 1}"] = {"path": str(p), "sha256": file_sha256(p)}
    if job.path is not None:
        out["job_file"] = {"path": str(job.path), "sha256": file_sha256(job.path)}
    return out
