"""``basinkit run``: the whole job from a TOML job file."""

import click

from .options import finish, overwrite_option, report_writer


@click.command("run")
@click.argument("job_file", type=click.Path())
@click.option("-o", "--output", type=click.Path(), default=None,
              help="Output folder (default: [outputs] folder of the job file, relative to "
                   "the job file).")
@overwrite_option
@click.option("--check", is_flag=True,
              help="Only read and check the job file, then print the job with every default "
                   "filled in.")
@click.pass_obj
def command(console, job_file, output, overwrite, check):
    """Run a job file: the flow folder, catchments, channels, profiles, morphometry and the
    HTML report, with provenance.json (parameters, input hashes, files). The output
    folder holds the same files the commands write (the flow folder in flow/). Prints the
    stage times and the peak memory at the end. Exits with status 1 when some outlets
    failed (listed in outlet_errors.csv and the tables' error columns); 130 (Ctrl-C) or
    143 (SIGTERM) when stopped, the output folder left as it was.

    Example: basinkit run demo_rasters/demo_job.toml -o results/ --overwrite

    A job file is TOML with the tables [job], [inputs] (dem, outlets, burn_lines),
    [conditioning], [routing], [outlets] (snap_radius_m, snap_min_area), [channels]
    (min_area, min_order), [profiles] (concavity, reference_area), [morphometry],
    [design_flow] (the options of basinkit design-flow with underscores) and [outputs]
    (folder, rasters, figures, report, report_outlets). Areas take m2, ha or
    km2 ("2ha"); paths are relative to the job file.
    """
    from ..workflow.jobfile import read_job
    from ..workflow.runner import run_job

    job = read_job(job_file)
    if check:
        import json

        click.echo(json.dumps(job.parameters(), indent=2, sort_keys=True, default=str))
        return 0
    res = run_job(job, output=output, overwrite=overwrite, console=console,
                  report=report_writer())
    print_summary(console, res)
    return finish(console, res.exit_status)


def print_summary(console, res):
    """Stages that did not run, the outlets (up to 20) and where the outputs are."""
    for k, v in res.stages.items():
        if v["status"] != "done":
            console.warn(f"stage {k} {v['status']}: {v['note']}")
    if res.outlets is not None:
        ok = res.outlets[res.outlets["status"] == "ok"]
        if len(ok) <= 20:
            for r in ok.itertuples():
                console.info(f"  {r.outlet_id}: {r.area_km2:.3f} km2")
        else:
            console.info(f"  {len(ok)} outlets delineated")
    if res.failures is not None and len(res.failures):
        console.info(f"{len(res.failures)} outlet failure(s): see outlet_errors.csv and the "
                     "error columns of the tables")
    console.info(f"outputs in {res.folder}")
    if "design_flow" in res.stages:  # the design-flow cautions come first (shown once)
        from ..workflow.steps.design_flow import design_flow_cautions

        console.cautions(design_flow_cautions())
