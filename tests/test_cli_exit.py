"""The end of a ``basinkit`` process: the objects alive are left out of the interpreter's
exit collections (``gc.freeze``), and the exit still runs the ``atexit`` handlers, flushes
the streams and returns the status of the output contract (DESIGN.md); a call of
``main`` from Python freezes nothing."""

import gc
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

_SCRIPT = """
import atexit, gc, sys
atexit.register(lambda: print("atexit ran, frozen", gc.get_freeze_count() > 0, flush=True))
from basinkit.cli.main import main
sys.argv = ["basinkit"] + sys.argv[1:]
print("before main", flush=False)
main()
"""


def _run(*args):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-c", _SCRIPT, *args], capture_output=True,
                          text=True, env=env, timeout=300)


def test_exit_runs_atexit_and_keeps_the_status():
    """Exit status 0 for ``--version`` and 2 for a usage error (DESIGN.md's output
    contract); the atexit handler runs after the freeze; output written before is
    flushed (common practice, no source)."""
    ok = _run("--version")
    assert ok.returncode == 0, ok.stderr
    assert "before main" in ok.stdout
    assert "atexit ran, frozen True" in ok.stdout
    bad = _run("route", "--no-such-option")
    assert bad.returncode == 2
    assert "atexit ran, frozen True" in bad.stdout


def test_main_called_from_python_freezes_nothing():
    """``main(argv)`` (the tests, a notebook) leaves the garbage collector as it was."""
    from basinkit.cli.main import main

    before = gc.get_freeze_count()
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    assert gc.get_freeze_count() == before
