"""``basinkit report``: write (again) the HTML report of a job run."""

import click

from .options import overwrite_option


@click.command("report")
@click.argument("run_folder", type=click.Path())
@click.option("-o", "--output", type=click.Path(), default=None,
              help="Report file to write (default: RUN_FOLDER/report.html).")
@click.option("--outlet", "outlets", multiple=True,
              help="Put only this outlet in the report (repeat for several; default: all).")
@overwrite_option
@click.pass_obj
def command(console, run_folder, output, outlets, overwrite):
    """Write the HTML report of an earlier 'basinkit run' or 'basinkit demo' output folder,
    for all outlets or the chosen ones.

    The job recorded in RUN_FOLDER/provenance.json is run again in a temporary folder
    (results are deterministic, so the figures are those of the original run; the inputs
    must still exist and have the same SHA-256) and only report.html is kept.

    Example: basinkit report basinkit-demo-output --outlet crossing -o crossing.html
    """
    import json
    import shutil
    import tempfile
    from pathlib import Path

    from ..errors import InputError
    from ..workflow.jobs import job_from_dict, run_job
    from ..io.hashing import file_sha256
    from ..io.writers import atomic_path, check_output

    folder = Path(run_folder)
    prov_path = folder / "provenance.json"
    if not prov_path.exists():
        raise InputError(f"{str(folder)!r} holds no provenance.json; give the output folder "
                         "of 'basinkit run' or 'basinkit demo'")
    try:
        prov = json.loads(prov_path.read_text(encoding="utf-8"))
        params = prov["parameters"]
    except (json.JSONDecodeError, KeyError) as exc:
        raise InputError(f"{str(prov_path)!r} is damaged ({exc}); run the job again") from None
    out = check_output(output or folder / "report.html", overwrite or output is None)
    for key, rec in prov.get("inputs", {}).items():
        p = Path(rec["path"])
        if key == "job_file":
            continue
        if not p.exists():
            raise InputError(f"the input {key} ({str(p)!r}) of the recorded run no longer "
                             "exists")
        if file_sha256(p) != rec["sha256"]:
            raise InputError(f"the input {key} ({str(p)!r}) changed since the run (SHA-256 "
                             "differs); run the job again instead")
    params = dict(params)
    params["outputs"] = {**params.get("outputs", {}), "report": True, "rasters": False}
    params["outputs"].pop("folder", None)
    if outlets:
        params["outputs"]["report_outlets"] = list(outlets)
    job_file = (prov.get("job") or {}).get("file")
    job = job_from_dict(params, base=Path(job_file).parent if job_file else folder)
    tmp = Path(tempfile.mkdtemp(prefix="basinkit-report-"))
    try:
        res = run_job(job, output=tmp / "run", console=console)
        if "report.html" not in res.files:
            raise InputError("the report could not be written: "
                             f"{res.stages.get('report', {}).get('note', 'unknown reason')}")
        with atomic_path(out) as part:
            shutil.copyfile(res.files["report.html"], part)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    console.info(f"wrote {out}")
