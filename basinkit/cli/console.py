"""The console of the command line: messages, progress and failures for people or logs.

It is the reporter the workflow steps talk to (see :mod:`basinkit.workflow.progress`):

- on a terminal, a progress bar per long stage (tqdm);
- in a log (stderr not a terminal), a line when a stage starts and ends and, in long
  stages, a line about every ten seconds (``BASINKIT_PROGRESS_SECONDS`` changes that);
- with ``--log-json``, one JSON object per line: ``time``, ``level``, ``message`` and, for
  progress, ``stage``, ``done`` and ``total``; for a failed outlet ``event`` =
  ``"outlet_failed"``, ``stage``, ``outlet_id``, ``source`` and ``reason``;
- with ``--quiet``, nothing but errors.
"""

from __future__ import annotations

import contextlib
import json
import os
import sys
import time

import click

from .._processes import return_freed_memory

__all__ = ["Console", "PROGRESS_SECONDS", "FAILURES_SHOWN"]

PROGRESS_SECONDS = 10.0  # a progress line about this often in logs
FAILURES_SHOWN = 20      # failed outlets listed one by one on a terminal or in a log


class Console:
    """Messages for people (stderr) or JSON log lines (``--log-json``); silent with
    ``--quiet`` except for errors."""

    def __init__(self, quiet=False, log_json=False, debug=False, interval=None,
                 isatty=None):
        self.quiet = quiet
        self.log_json = log_json
        self.debug = debug
        if interval is None:
            try:
                interval = float(os.environ.get("BASINKIT_PROGRESS_SECONDS",
                                                PROGRESS_SECONDS))
            except ValueError:
                interval = PROGRESS_SECONDS
        self.interval = interval
        self._isatty = isatty
        self._cautions_shown = False
        self.failures = 0

    # ------------------------------------------------------------------ messages
    @property
    def isatty(self) -> bool:
        if self._isatty is not None:
            return self._isatty
        try:
            return sys.stderr.isatty()
        except (AttributeError, ValueError):
            return False

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

    def cautions(self, text):
        """The cautions, once per command (not with ``--quiet``)."""
        if self._cautions_shown:
            return
        self._cautions_shown = True
        if self.log_json:
            self._json("info", f"caution: {text}", {"event": "cautions"})
        elif not self.quiet:
            click.echo(f"caution: {text}", err=True)

    def outlet_failed(self, outlet_id, reason, stage, source=""):
        """One failed outlet: every one as a JSON record; the first
        :data:`FAILURES_SHOWN` as lines for people."""
        self.failures += 1
        if self.log_json:
            self._json("warning", f"outlet {outlet_id!r} failed in {stage}: {reason}",
                       {"event": "outlet_failed", "stage": stage,
                        "outlet_id": str(outlet_id), "source": source, "reason": reason})
            return
        if self.quiet:
            return
        if self.failures <= FAILURES_SHOWN:
            where = f" ({source})" if source else ""
            click.secho(f"failed: outlet {outlet_id!r}{where}: {reason}", err=True,
                        fg="yellow")
        elif self.failures == FAILURES_SHOWN + 1:
            click.secho("failed: more outlets failed; every one is listed in "
                        "outlet_errors.csv or the error column of the tables", err=True,
                        fg="yellow")

    # ------------------------------------------------------------------ progress
    @contextlib.contextmanager
    def stage(self, name):
        """A line when a stage starts and when it ends (with its time)."""
        t0 = time.perf_counter()
        if self.log_json:
            self._json("info", f"{name} ...", {"event": "stage_start", "stage": name})
        elif not self.quiet:
            click.echo(f"{name} ...", err=True)
        yield
        s = time.perf_counter() - t0
        return_freed_memory()  # the stage's garbage does not stay resident
        if self.log_json:
            self._json("info", f"{name} done ({s:.1f} s)",
                       {"event": "stage_done", "stage": name, "seconds": round(s, 3)})
        elif not self.quiet:
            click.echo(f"{name} done ({s:.1f} s)", err=True)

    def progress(self, iterable=None, total=None, desc=""):
        """Wrap an iterable of work items: a bar on a terminal, a line about every
        ``interval`` seconds in a log, JSON records with ``--log-json``."""
        if total is None:
            try:
                total = len(iterable)
            except TypeError:
                total = None
        if self.quiet:
            return iterable
        if self.log_json or not self.isatty:
            return self._lines(iterable, total, desc)
        from tqdm.auto import tqdm

        return tqdm(iterable, total=total, desc=desc, file=sys.stderr, leave=False,
                    mininterval=0.5)

    def _lines(self, iterable, total, desc):
        last = time.monotonic()
        done = 0
        shown = None  # the count of the last line written
        for item in iterable:
            yield item
            done += 1
            now = time.monotonic()
            if now - last >= self.interval:
                self._progress_line(desc, done, total)
                last = now
                shown = done
        if shown != done and (shown is not None or self.log_json):
            self._progress_line(desc, done, total)  # the end, once

    def _progress_line(self, desc, done, total):
        of = f"/{total}" if total is not None else ""
        msg = f"  {desc}: {done}{of}"
        if self.log_json:
            self._json("info", msg.strip(), {"event": "progress", "stage": desc,
                                             "done": done, "total": total})
        else:
            click.echo(msg, err=True)
