"""The ``basinkit`` command line: small wrappers over the library.

Each subcommand lives in its own module under ``basinkit/cli/`` and is loaded only when
it is called, so that ``basinkit --help`` starts quickly.
"""

from __future__ import annotations

import importlib
import json
import sys
import time

import click

from .. import __version__
from ..errors import BasinkitError

# subcommand name -> module under basinkit.cli defining ``command``
SUBCOMMANDS = {
    "condition": "condition",
    "route": "route",
    "delineate": "delineate",
    "channels": "channels",
    "profile": "profile",
    "morphometry": "morphometry",
    "run": "run_job",
    "demo": "demo",
    "report": "report",
}


class LazyGroup(click.Group):
    def list_commands(self, ctx):
        return [name for name, mod in SUBCOMMANDS.items() if _module(mod) is not None]

    def get_command(self, ctx, name):
        mod = SUBCOMMANDS.get(name)
        m = _module(mod) if mod else None
        return getattr(m, "command", None) if m else None


def _module(name):
    try:
        return importlib.import_module(f"basinkit.cli.{name}")
    except ModuleNotFoundError as exc:
        if exc.name == f"basinkit.cli.{name}":
            return None
        raise


class Console:
    """Messages for people (stderr) or JSON log lines (``--log-json``); silent with
    ``--quiet`` except for errors."""

    def __init__(self, quiet=False, log_json=False, debug=False):
        self.quiet = quiet
        self.log_json = log_json
        self.debug = debug

    def info(self, msg, **fields):
        if self.log_json:
            self._json("info", msg, fields)
        elif not self.quiet:
            click.echo(msg, err=True)

    def warn(self, msg, **fields):
        if self.log_json:
            self._json("warning", msg, fields)
        elif not self.quiet:
            click.secho(f"warning: {msg}", err=True, fg="yellow")

    def error(self, msg, **fields):
        if self.log_json:
            self._json("error", msg, fields)
        else:
            click.secho(f"error: {msg}", err=True, fg="red")

    def _json(self, level, msg, fields):
        rec = {"time": round(time.time(), 3), "level": level, "message": msg, **fields}
        click.echo(json.dumps(rec, default=str), err=True)

    def progress(self, iterable=None, total=None, desc=""):
        """A progress bar on stderr (hidden when quiet or logging JSON)."""
        from tqdm.auto import tqdm

        # no bars in logs (stderr not a terminal), under --quiet or --log-json
        hidden = self.quiet or self.log_json or not sys.stderr.isatty()
        return tqdm(iterable, total=total, desc=desc, disable=hidden,
                    file=sys.stderr, leave=False, mininterval=0.5)


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"],
                                              "max_content_width": 100})
@click.version_option(__version__, prog_name="basinkit")
@click.option("--quiet", "-q", is_flag=True, help="Print nothing but errors.")
@click.option("--log-json", is_flag=True, help="Write progress and warnings as JSON lines "
              "on stderr (for scripts).")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
@click.pass_context
def cli(ctx, quiet, log_json, debug):
    """basinkit: catchments, channel networks, longitudinal profiles and basin morphometry
    from a DEM.

    Typical job: basinkit route dem.tif -o flow/ ; basinkit delineate flow/ --outlet X,Y -o
    out/ . Or the whole job from a job file: basinkit run job.toml . Try basinkit demo .
    """
    ctx.obj = Console(quiet=quiet, log_json=log_json, debug=debug)


def main(argv=None):
    """Entry point: user errors print one message and exit non-zero, no traceback."""
    args = argv if argv is not None else sys.argv[1:]
    debug = "--debug" in args
    console = Console(quiet="--quiet" in args or "-q" in args, log_json="--log-json" in args)
    try:
        rv = cli.main(args=argv, prog_name="basinkit", standalone_mode=False)
        sys.exit(rv if isinstance(rv, int) else 0)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(130)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except BasinkitError as exc:
        if debug:
            raise
        console.error(str(exc), kind=type(exc).__name__)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        sys.exit(130)
    except MemoryError:
        console.error("out of memory; clip the DEM to the area of interest or coarsen it")
        sys.exit(3)


if __name__ == "__main__":
    main()
