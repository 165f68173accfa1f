"""How the steps tell the outside world what they are doing.

A step takes a *reporter*: any object with some of the methods of :class:`Reporter`
(``info``, ``warn``, ``stage``, ``progress``, ``outlet_failed``, ``cautions``). The command
line passes its console (a bar on a terminal, a line per stage and every ten seconds in a
log, JSON records with ``--log-json``); the Python API passes nothing and gets
:class:`Reporter` itself, which is silent. :func:`as_reporter` fills in the methods a given
object lacks, so a plain object with ``info`` and ``warn`` works too.
"""

from __future__ import annotations

import contextlib
import time

from .._processes import return_freed_memory

__all__ = ["Reporter", "as_reporter", "StageTimer"]


class Reporter:
    """The silent reporter, and the interface the steps call.

    Methods
    -------
    info(msg, **fields), warn(msg, **fields)
        A message for people (``fields`` go into JSON records).
    stage(name)
        Context manager around one stage of work (a line when it starts and ends).
    progress(iterable, total=None, desc="")
        Wraps an iterable of work items; yields them unchanged.
    outlet_failed(outlet_id, reason, stage, source="")
        One outlet could not be processed in ``stage``; the batch carries on.
    cautions(text)
        The cautions, shown once per command.
    """

    def info(self, msg, **fields):
        pass

    def warn(self, msg, **fields):
        pass

    @contextlib.contextmanager
    def stage(self, name):
        yield

    def progress(self, iterable=None, total=None, desc=""):
        return iterable

    def outlet_failed(self, outlet_id, reason, stage, source=""):
        pass

    def cautions(self, text):
        pass


class _Adapter(Reporter):
    """A partial reporter (e.g. an object with only ``info`` and ``warn``) completed with
    the silent defaults."""

    def __init__(self, obj):
        self._obj = obj

    def __getattribute__(self, name):
        if not name.startswith("_"):
            obj = object.__getattribute__(self, "_obj")
            if hasattr(obj, name):
                return getattr(obj, name)
        return object.__getattribute__(self, name)


def as_reporter(obj=None) -> Reporter:
    """A reporter for ``obj``: the silent :class:`Reporter` for None, ``obj`` itself when it
    has every method, else ``obj`` completed with silent defaults."""
    if obj is None:
        return Reporter()
    if all(hasattr(obj, m) for m in ("info", "warn", "stage", "progress", "outlet_failed",
                                     "cautions")):
        return obj
    return _Adapter(obj)


class StageTimer:
    """Times the stages of a run (for the caller) and records status and notes (for
    provenance.json, see :meth:`record`)."""

    def __init__(self, reporter):
        self.reporter = reporter
        self.stages: dict = {}

    @contextlib.contextmanager
    def __call__(self, name):
        rec = {"status": "running", "seconds": 0.0, "note": ""}
        self.stages[name] = rec
        t0 = time.perf_counter()
        try:
            with self.reporter.stage(name):
                yield rec
        except BaseException as exc:
            rec["status"] = "failed"
            rec["note"] = str(exc)
            raise
        finally:
            rec["seconds"] = round(time.perf_counter() - t0, 3)
            return_freed_memory()  # the stage's garbage does not stay resident
        if rec["status"] == "running":
            rec["status"] = "done"

    def record(self) -> dict:
        """``{stage: {"status", "note"}}`` for provenance.json: no timings, which differ
        from run to run (the console and ``--log-json`` give them)."""
        return {k: {"status": v["status"], "note": v["note"]} for k, v in self.stages.items()}

    def skip(self, name, note):
        """Record a stage that did not run, with the reason."""
        self.stages[name] = {"status": "skipped", "seconds": 0.0, "note": note}
        self.reporter.warn(f"{name} skipped: {note}", stage=name)
