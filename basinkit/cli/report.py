"""``basinkit report``: write (again) the HTML report of an output folder."""

import click

from .options import overwrite_option


@click.command("report")
@click.argument("run_folder", type=click.Path())
@click.option("-o", "--output", type=click.Path(), default=None,
              help="Report file to write (default: RUN_FOLDER/report.html).")
@click.option("--outlet", "outlets", multiple=True,
              help="Give this outlet a full section (repeat for several; default: every "
                   "outlet up to --full-sections-max, else the first few).")
@click.option("--full-sections-max", type=click.IntRange(min=0), default=50,
              show_default=True,
              help="Up to this many outlets each get a full section; above it the report "
                   "summarises them (table, overview, distributions).")
@overwrite_option
@click.pass_obj
def command(console, run_folder, output, outlets, full_sections_max, overwrite):
    """Write the HTML report of an output folder of 'basinkit run', 'basinkit demo' or the
    commands, from the files in it (nothing is computed again).

    Example: basinkit report basinkit-demo-output --outlet crossing -o crossing.html
    """
    from pathlib import Path

    from ..errors import InputError
    from ..io.writers import check_output
    from ..report import write_report

    folder = Path(run_folder)
    if not folder.is_dir():
        raise InputError(f"{str(folder)!r} is not a folder; give the output folder of "
                         "'basinkit run', 'basinkit demo' or a command")
    out = check_output(output or folder / "report.html", overwrite or output is None)
    kw = dict(report_outlets=list(outlets), full_sections_max=full_sections_max,
              progress=getattr(console, "progress", None))
    if out.resolve().parent == folder.resolve():
        # a file of the run folder: written under its lock and recorded in its manifest
        from ..io.transaction import rewrite_in_folder

        with rewrite_in_folder(folder, out.name) as path:
            write_report(folder, path, **kw)
    else:
        write_report(folder, out, **kw)
    console.info(f"wrote {out}")
