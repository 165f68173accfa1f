"""Every module's docstring examples run as written.

The modules are found with ``pkgutil.walk_packages`` over the whole package, so a new module's
examples are collected without being listed here. ``basinkit.cli.__main__`` is left out: it
runs the command line when imported. The examples are documentation; each one states its
own check (a closed form, a hand-worked small grid, or the real DEM shipped with matplotlib,
``jacksboro_fault_dem.npz``) in the docstring it belongs to. Examples that write files or
take long are marked ``# doctest: +SKIP`` where they stand (the demo job in
``workflow/jobs.py`` and ``report/html.py``); the rest run in a temporary folder.
"""

import doctest
import importlib
import pkgutil

import pytest

import basinkit

SKIP_MODULES = {"basinkit.cli.__main__"}  # importing it runs the command line

MODULES = sorted(m.name for m in pkgutil.walk_packages(basinkit.__path__, "basinkit.")
                 if m.name not in SKIP_MODULES)


def _run_examples(name):
    """(attempted, failed, report) of the docstring examples of module ``name``."""
    mod = importlib.import_module(name)
    runner = doctest.DocTestRunner(verbose=False)
    report = []
    for test in doctest.DocTestFinder().find(mod):
        runner.run(test, out=report.append)
    res = runner.summarize(verbose=False)
    return res.attempted, res.failed, "".join(report)


@pytest.mark.parametrize("name", MODULES)
def test_module_examples_run_as_written(name, tmp_path, monkeypatch):
    """The module imports and each of its examples prints what its docstring shows (the
    source of each value is named beside the example; common practice, no source, for
    running them: the standard library's doctest)."""
    monkeypatch.chdir(tmp_path)  # an example that writes a file writes it here
    _, failed, report = _run_examples(name)
    assert failed == 0, report


def test_examples_are_collected_from_every_room():
    """The walk finds the modules of every sub-package that has examples, and the examples
    there are attempted, not silently skipped (common practice, no source: a guard on the
    collection above)."""
    rooms = {"basinkit.analysis", "basinkit.conditioning", "basinkit.routing"}
    attempted = {}
    for name in MODULES:
        room = name.rsplit(".", 1)[0] if name.count(".") >= 2 else name
        if room in rooms:
            attempted[room] = attempted.get(room, 0) + _examples_in(name)
    assert set(attempted) == rooms
    for room, n in attempted.items():
        assert n >= 10, (room, n)
    assert "basinkit.analysis.profiles" in MODULES
    assert _examples_in("basinkit.analysis.profiles") >= 20


def _examples_in(name):
    mod = importlib.import_module(name)
    return sum(len([e for e in t.examples if not e.options.get(doctest.SKIP)])
               for t in doctest.DocTestFinder().find(mod))
