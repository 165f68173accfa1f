"""``basinkit demo``: the whole job on the bundled demo basin."""

import click

from .options import finish, overwrite_option, report_writer


@click.command("demo")
@click.option("-o", "--output", type=click.Path(), default="basinkit-demo-output",
              show_default=True, help="Output folder.")
@overwrite_option
@click.pass_obj
def command(console, output, overwrite):
    """Run the whole job on the bundled demo basin: a fictional upland valley with a
    proposed road crossing (DEM, culvert line, 13 outlets). Writes the flow folder,
    catchments, channels, profiles, morphometry, report.html and provenance.json.

    Example: basinkit demo -o basinkit-demo-output --overwrite
    """
    from ..workflow.jobfile import demo_job_path, read_job
    from ..workflow.runner import run_job
    from .run_job import print_summary

    path = demo_job_path()
    console.info(f"demo job: {path}")
    res = run_job(read_job(path), output=output, overwrite=overwrite, console=console,
                  report=report_writer())
    print_summary(console, res)
    if "report.html" in res.files:
        console.info(f"open {res.files['report.html']} in a browser")
    return finish(console, res.exit_status)
