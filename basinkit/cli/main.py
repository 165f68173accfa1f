"""The ``basinkit`` command line: parse options, call the workflow steps, print.

Each subcommand lives in its own module under ``basinkit/cli/`` and is loaded only when
it is called, so that ``basinkit --help`` starts quickly.

Exit status (DESIGN.md, the output contract), the same for every command and ``run``:
0 all done; 1 done, but some outlets failed (listed); 2 bad input or usage, nothing
written; 3 an internal error (a bug: the traceback only with ``--debug``). An interrupted
command, 130 after ``Ctrl-C`` (``SIGINT``) and 143 after ``SIGTERM`` (128 + the signal's
number, the shells' convention), has stopped its workers and left its outputs as they
were (the run's staging folder removed). The global options ``--quiet``, ``--debug`` and
``--log-json`` go before or after the subcommand.
"""

from __future__ import annotations

import importlib
import os
import signal
import sys
import threading
import traceback

import click

from .. import __version__
from ..errors import BasinkitError
from .console import Console

# the options of the group that may also be written after the subcommand
GLOBAL_FLAGS = ("--quiet", "-q", "--debug", "--log-json")


def hoist_global_options(args):
    """Move the global flags to the front, wherever they were written (up to ``--``)."""
    args = [str(a) for a in args]
    front, rest = [], []
    for i, a in enumerate(args):
        if a == "--":
            rest.extend(args[i:])
            break
        (front if a in GLOBAL_FLAGS else rest).append(a)
    return front + rest


# subcommand name -> module under basinkit.cli defining ``command``
SUBCOMMANDS = {
    "condition": "condition",
    "route": "route",
    "delineate": "delineate",
    "channels": "channels",
    "profile": "profile",
    "morphometry": "morphometry",
    "design-flow": "design_flow",
    "run": "run_job",
    "demo": "demo",
    "report": "report",
}


class LazyGroup(click.Group):
    def parse_args(self, ctx, args):
        return super().parse_args(ctx, hoist_global_options(args))

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

    --quiet, --log-json and --debug may also follow the subcommand. Exit status: 0 all
    done; 1 done, but some outlets failed (listed); 2 bad input or usage, nothing written;
    3 an internal error (a bug; please report it); 130 interrupted (Ctrl-C), 143 stopped
    by SIGTERM, the outputs left as they were.
    """
    ctx.obj = Console(quiet=quiet, log_json=log_json, debug=debug)


#: Exit statuses of an interrupted command: 128 + the signal's number.
EXIT_INTERRUPTED = 128 + signal.SIGINT    # 130, Ctrl-C
EXIT_TERMINATED = 128 + signal.SIGTERM    # 143, SIGTERM (``kill``, a batch system, ...)


class Terminated(KeyboardInterrupt):
    """``SIGTERM`` turned into an interrupt by :func:`main`, so that it takes the way of
    ``Ctrl-C``: the pools stop their workers, the output transaction aborts."""


_HANDLER_PID = []  # the process that installed the handler


def _raise_terminated(signum, frame):
    if _HANDLER_PID and os.getpid() != _HANDLER_PID[-1]:
        # a process forked from this one that kept the handler: it just ends
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        os.kill(os.getpid(), signal.SIGTERM)
        return
    # once: a second SIGTERM while the interrupt unwinds does not break the clean-up
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    raise Terminated()


def _catch_sigterm():
    """Install the ``SIGTERM`` handler (main thread only); returns the one it replaced."""
    if threading.current_thread() is not threading.main_thread():
        return None
    try:
        _HANDLER_PID.append(os.getpid())
        return signal.signal(signal.SIGTERM, _raise_terminated)
    except (ValueError, OSError):  # no signals here (an embedded interpreter)
        return None


def _interrupted(console, exc) -> int:
    """The line and the exit status of an interrupted command."""
    term = isinstance(exc, Terminated)
    msg = (("terminated (SIGTERM)" if term else "interrupted")
           + "; the outputs were left as they were")
    if console.log_json:
        console.error(msg, kind="Terminated" if term else "Interrupted")
    else:
        click.echo(msg, err=True)
    return EXIT_TERMINATED if term else EXIT_INTERRUPTED


def main(argv=None):
    """Entry point: runs a command and exits with the status of the output contract; a
    user error prints one line (no traceback), a bug one line asking for a report;
    ``SIGTERM`` is handled as ``Ctrl-C`` (exit status 143, 130 for ``Ctrl-C``)."""
    args = hoist_global_options(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in args
    console = Console(quiet="--quiet" in args or "-q" in args, log_json="--log-json" in args,
                      debug=debug)
    previous = _catch_sigterm()
    try:
        rv = cli.main(args=args, prog_name="basinkit", standalone_mode=False)
        _settle_outputs(True, console)  # an output opened without ``with``: swap it in
        code = rv if isinstance(rv, int) else 0
    except click.exceptions.Abort as exc:  # click's form of KeyboardInterrupt
        if isinstance(exc.__cause__, KeyboardInterrupt):
            code = _interrupted(console, exc.__cause__)
        else:
            click.echo("aborted", err=True)
            code = EXIT_INTERRUPTED
    except click.exceptions.Exit as exc:
        code = exc.exit_code
    except click.ClickException as exc:  # usage: unknown option, bad value, ...
        if console.log_json:
            console.error(exc.format_message(), kind=type(exc).__name__)
        else:
            exc.show()
        code = 2
    except BasinkitError as exc:
        if debug:
            traceback.print_exc()
        console.error(str(exc), kind=type(exc).__name__)
        code = exc.exit_code
    except OSError as exc:  # the environment (permissions, full disk, long names, ...)
        from ..errors import os_error_message

        if debug:
            traceback.print_exc()
        console.error(os_error_message(exc, doing="read or write"), kind="OutputError")
        code = 2
    except KeyboardInterrupt as exc:
        code = _interrupted(console, exc)
    except MemoryError:
        if debug:
            traceback.print_exc()
        console.error("out of memory; clip the DEM to the area of interest or coarsen it")
        code = 3
    except Exception as exc:  # noqa: BLE001 - anything else is a bug
        if debug:
            traceback.print_exc()
        if _is_gdal_io_error(exc):  # GDAL's report of a full disk, a damaged file, ...
            from ..errors import os_error_message

            console.error(os_error_message(exc, doing="read or write"), kind="OutputError")
            code = 2
        else:
            console.error(f"internal error ({type(exc).__name__}: {exc}); this is a bug in "
                          "basinkit, please report it with the command you ran"
                          + ("" if debug else " (run it again with --debug to see the "
                                               "traceback)"), kind="InternalError")
            code = 3
    finally:
        _settle_outputs(False)  # after an error: drop the staging folders, release locks
        if previous is not None:  # main() called again in one process (the tests)
            signal.signal(signal.SIGTERM, previous)
            _HANDLER_PID.pop()
    if argv is None:  # the process ends here (not a call from Python)
        _skip_exit_collections()
    sys.exit(code)


def _skip_exit_collections():
    """Leave the objects alive now out of the garbage collections of the interpreter's
    exit (``gc.freeze``). The outputs are committed and their files closed; the exit still
    runs the ``atexit`` handlers, flushes the streams and returns the status. What it
    skips: the full collections it runs while it clears the modules, each walking the
    ~250 000 objects that numba, pandas, scipy and matplotlib keep (0.5-0.6 s of a warm
    ``basinkit demo``), to free memory the system takes back anyway."""
    import gc

    sys.stdout.flush()
    sys.stderr.flush()
    gc.freeze()


def _settle_outputs(ok, console=None):
    """Commit (or, after an error, abort) output folders a command left open."""
    mod = sys.modules.get("basinkit.workflow.output")
    if mod is not None:
        mod.settle_open_folders(ok, console)
    tx = sys.modules.get("basinkit.io.transaction")
    if tx is not None and not ok:
        tx.abort_all()


def _is_gdal_io_error(exc) -> bool:
    """rasterio's or pyogrio's report of a file that cannot be read or written."""
    mod = type(exc).__module__ or ""
    return mod.startswith(("rasterio", "pyogrio")) and (
        "IOError" in type(exc).__name__ or "FileIO" in type(exc).__name__
        or "DataSource" in type(exc).__name__)


if __name__ == "__main__":
    main()
