"""``basinkit run``: the whole job from a TOML job file."""

import click

from .options import overwrite_option


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
    """Run a job file: condition, route, delineate, channels, profiles, morphometry and the
    HTML report, with provenance.json (parameters, input hashes, timings).

    Example: basinkit run demo_rasters/demo_job.toml -o results/ --overwrite

    A job file is TOML with the tables [job], [inputs] (dem, outlets, burn_lines),
    [conditioning], [routing], [outlets] (snap_radius_m, snap_min_area), [channels]
    (min_area, min_order), [profiles] (concavity, reference_area), [morphometry] and
    [outputs] (folder, rasters, report). Areas take m2, ha or km2 ("2ha"); paths are
    relative to the job file.
    """
    from ..workflow.jobs import read_job, run_job

    job = read_job(job_file)
    if check:
        import json

        click.echo(json.dumps(job.parameters(), indent=2, sort_keys=True, default=str))
        return
    res = run_job(job, output=output, overwrite=overwrite, console=console)
    _print_summary(console, res)


def _print_summary(console, res):
    skipped = [k for k, v in res.stages.items() if v["status"] != "done"]
    for k in skipped:
        console.warn(f"stage {k} {res.stages[k]['status']}: {res.stages[k]['note']}")
    if res.outlets is not None:
        ok = res.outlets[res.outlets["cell"] >= 0]
        for r in ok.itertuples():
            console.info(f"  {r.outlet_id}: {r.area_km2:.3f} km2")
    n = sum(len(v) for k, v in res.warnings.items() if k != "job")
    if n:
        console.info(f"{n} warning(s) about individual outlets: see report.html")
    console.info(f"outputs in {res.folder}")
