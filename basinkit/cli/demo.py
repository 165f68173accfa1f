"""``basinkit demo``: the whole job on the bundled demo basin."""

import click

from .options import overwrite_option


@click.command("demo")
@click.option("-o", "--output", type=click.Path(), default="basinkit-demo-output",
              show_default=True, help="Output folder.")
@overwrite_option
@click.pass_obj
def command(console, output, overwrite):
    """Run the whole job on the bundled demo basin: a fictional upland valley with a
    proposed road crossing (DEM, culvert line, 13 outlets). Writes flow rasters,
    catchments, channels, profiles, morphometry, report.html and provenance.json.

    Example: basinkit demo -o basinkit-demo-output --overwrite
    """
    from ..workflow.jobs import demo_job_path, read_job, run_job
    from .run_job import _print_summary

    path = demo_job_path()
    console.info(f"demo job: {path}")
    res = run_job(read_job(path), output=output, overwrite=overwrite, console=console)
    _print_summary(console, res)
    if "report.html" in res.files:
        console.info(f"open {res.files['report.html']} in a browser")
