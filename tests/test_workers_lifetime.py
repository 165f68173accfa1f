"""Worker processes end with the run that forked them; an interrupted run stops them and
keeps the output contract; the run reports its peak memory.

Sources: prctl(2) ``PR_SET_PDEATHSIG`` (the kernel signals a child when its parent dies)
and getrusage(2) (``ru_maxrss``: the largest resident set, in kibibytes on Linux; never
below the current resident set, which psutil reads from /proc) from the Linux manual
pages; exit status 128 + the signal's number for a command ended by a signal, the shells'
convention (bash(1), "EXIT STATUS"). The rest is common practice (no source): a killed or
interrupted command leaves no process behind and its previous results as they were.

The jobs here are small (a 120 × 60 valley, eight outlets with figures, ``workers = 2``)
so that forked workers draw figures for a few seconds; the tests wait for them with
generous timeouts and assert no speed.
"""

import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

psutil = pytest.importorskip("psutil")

REPO = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(REPO)}
WAIT = 120.0  # seconds: generous on a loaded 2-core machine; no assertion about speed


@pytest.fixture(scope="module")
def valley(tmp_path_factory):
    """A V-shaped valley (120 × 60 cells of 10 m) with eight outlets along its stream, and
    two job files: ``job.toml`` (figures, report, two workers) and ``quick.toml`` (no
    figures)."""
    from affine import Affine

    from basinkit.io.writers import write_geotiff

    d = tmp_path_factory.mktemp("valley")
    nr, nc = 120, 60
    rows = np.arange(nr)[:, None]
    cols = np.arange(nc)[None, :]
    z = 100.0 + 0.5 * (nr - 1 - rows) + 0.8 * np.abs(cols - nc // 2)
    t = Affine(10.0, 0, 500000.0, 0, -10.0, 5000600.0)
    write_geotiff(d / "dem.tif", z.astype(np.float32), t, "EPSG:32633", nodata=float("nan"))
    lines = ["id,x,y"] + [f"o{i},{500000.0 + 30.5 * 10},{5000600.0 - (r + 0.5) * 10}"
                          for i, r in enumerate(range(20, 116, 12))]
    (d / "outlets.csv").write_text("\n".join(lines) + "\n")
    job = textwrap.dedent("""
        [job]
        name = "valley"
        workers = 2
        [inputs]
        dem = "dem.tif"
        outlets = "outlets.csv"
        [outlets]
        snap_radius_m = 20
        snap_min_area = "0.1ha"
        [channels]
        min_area = "0.5ha"
        [outputs]
        report = true
        figures = {figures}
        """)
    (d / "job.toml").write_text(job.format(figures="true"))
    (d / "quick.toml").write_text(job.format(figures="false"))
    return d


def _files(folder):
    """``{relative name: SHA-256}`` of every file under ``folder``."""
    folder = Path(folder)
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _beside(folder):
    """Staging folders, locks and old copies beside ``folder`` (``.NAME.*``)."""
    folder = Path(folder)
    return sorted(p.name for p in folder.parent.iterdir()
                  if p.name.startswith(f".{folder.name}."))


def _start(job, out, *extra):
    """``basinkit run`` in a new process group; its stderr goes to ``p.log`` (a file, not a
    pipe: an orphaned worker would keep a pipe open and a read of it waiting)."""
    log = Path(str(out) + ".stderr.txt")
    with open(log, "w") as f:
        p = subprocess.Popen([sys.executable, "-m", "basinkit.cli", "run", str(job),
                              "-o", str(out), *extra], env=ENV, stdout=subprocess.DEVNULL,
                             stderr=f, text=True, start_new_session=True)
    p.log = log
    return p


def _alive(proc):
    try:
        return proc.is_running() and proc.status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def _wait_for_workers(p):
    """The worker processes of the run ``p``, once at least one exists."""
    parent = psutil.Process(p.pid)
    deadline = time.monotonic() + WAIT
    while time.monotonic() < deadline:
        assert p.poll() is None, "the run ended before its workers were seen:\n" + \
            p.log.read_text()
        try:
            kids = [k for k in parent.children(recursive=True) if _alive(k)]
        except psutil.NoSuchProcess:
            kids = []
        if kids:
            return kids
        time.sleep(0.02)
    raise AssertionError("no worker process appeared")


def _wait_gone(procs):
    """The processes still alive after waiting up to :data:`WAIT` seconds."""
    deadline = time.monotonic() + WAIT
    while time.monotonic() < deadline:
        left = [k for k in procs if _alive(k)]
        if not left:
            return []
        time.sleep(0.05)
    return left


def _kill_all(p, procs):
    """Never leave a process of a test behind, whatever happened."""
    for k in procs:
        try:
            k.kill()
        except psutil.Error:
            pass
    if p.poll() is None:
        p.kill()
    p.wait()


def test_sigkill_of_the_run_ends_its_workers(valley, tmp_path):
    """``SIGKILL`` of ``basinkit run`` (no handler sees it) while its forked workers draw
    figures: the workers end too (prctl(2), PR_SET_PDEATHSIG) instead of being left as
    orphans."""
    p = _start(valley / "job.toml", tmp_path / "out")
    workers = []
    try:
        workers = _wait_for_workers(p)
        os.kill(p.pid, signal.SIGKILL)  # the parent only, not its process group
        assert p.wait(WAIT) == -signal.SIGKILL
        left = _wait_gone(workers)
        assert left == [], f"orphaned workers: {[k.pid for k in left]}"
    finally:
        _kill_all(p, workers)


def test_sigterm_stops_the_run_and_keeps_the_earlier_output(valley, tmp_path):
    """``SIGTERM`` to a ``run --overwrite`` while its workers run: exit status 143 (128 +
    15) with one line and no traceback, no worker left, no staging folder or lock beside
    the output, and the earlier run's folder unchanged file for file."""
    out = tmp_path / "out"
    r = subprocess.run([sys.executable, "-m", "basinkit.cli", "run",
                        str(valley / "quick.toml"), "-o", str(out)], env=ENV,
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    before = _files(out)
    assert "provenance.json" in before and "report.html" in before
    p = _start(valley / "job.toml", out, "--overwrite")
    workers = []
    try:
        workers = _wait_for_workers(p)
        os.kill(p.pid, signal.SIGTERM)
        code = p.wait(WAIT)
        err = p.log.read_text()
        assert code == 143, err
        assert "terminated (SIGTERM)" in err and "Traceback" not in err, err
        assert _wait_gone(workers) == []
        assert _files(out) == before
        assert _beside(out) == []
    finally:
        _kill_all(p, workers)


def test_ctrl_c_on_the_process_group_stops_the_run(valley, tmp_path):
    """``SIGINT`` to the run's whole process group, as Ctrl-C on a terminal sends it: the
    workers leave it to the parent (no traceback from each of them), the run exits with
    130 (128 + 2) and leaves neither a worker nor an output folder or staging folder."""
    out = tmp_path / "fresh"
    p = _start(valley / "job.toml", out)
    workers = []
    try:
        workers = _wait_for_workers(p)
        os.killpg(p.pid, signal.SIGINT)
        code = p.wait(WAIT)
        err = p.log.read_text()
        assert code == 130, err
        assert "interrupted" in err and "Traceback" not in err, err
        assert _wait_gone(workers) == []
        assert not out.exists()
        assert _beside(out) == []
    finally:
        _kill_all(p, workers)


def test_peak_memory_on_the_console_and_in_provenance(valley, tmp_path):
    """A finished run gives its peak memory and its largest worker's in the ``--log-json``
    record ``peak_memory`` (bytes), on the console and in provenance.json's ``resources``
    (the other files are byte-identical between runs). The peak is at least the memory the
    process holds at any moment (getrusage(2)), checked in process against psutil."""
    from basinkit._processes import peak_memory

    r = subprocess.run([sys.executable, "-m", "basinkit.cli", "--log-json", "run",
                        str(valley / "quick.toml"), "-o", str(tmp_path / "a")], env=ENV,
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    recs = [json.loads(ln) for ln in r.stderr.splitlines() if ln.startswith("{")]
    peak = [x for x in recs if x.get("event") == "peak_memory"]
    assert len(peak) == 1, r.stderr
    # a run of a 7 200-cell grid imports numpy, numba, GDAL and matplotlib: well over
    # 50 MiB, and its report sections were drawn in forked workers (8 outlets, 2 workers)
    assert peak[0]["peak_memory_bytes"] > 50 * 2**20
    assert peak[0]["peak_worker_memory_bytes"] > 0
    assert "peak memory" in peak[0]["message"]
    res = json.loads((tmp_path / "a" / "provenance.json").read_text())["resources"]
    assert res["peak_memory_bytes"] == peak[0]["peak_memory_bytes"]
    assert res["peak_worker_memory_bytes"] == peak[0]["peak_worker_memory_bytes"]
    r = subprocess.run([sys.executable, "-m", "basinkit.cli", "run",
                        str(valley / "quick.toml"), "-o", str(tmp_path / "b")], env=ENV,
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0 and "peak memory " in r.stderr, r.stderr
    assert _files(tmp_path / "a").keys() == _files(tmp_path / "b").keys()
    # the kernel's RSS counters are cached per thread and folded in batches (64 pages at
    # a time per CPU, mm/memory.c SPLIT_RSS_COUNTING), so the high-water mark read by
    # getrusage may trail the current RSS read by psutil by up to a few hundred KiB
    now = psutil.Process().memory_info().rss
    assert peak_memory()["peak_memory_bytes"] >= now - 2 * 2**20


# A process whose workers are busy for ten minutes (an item that takes long): they print
# their pids and sleep. mp.Pool's workers end by themselves once the parent is gone and
# they ask for more work, so only a busy worker shows whether it is ended at once.
_SCRIPT = """
import os, sys, time

PARENT = os.getpid()


def busy(item):
    if os.getpid() != PARENT:  # map_outlets does the first item in the parent
        os.write(1, f"{os.getpid()}\\n".encode())  # one write: lines do not mix
        time.sleep(600)
    return item, ""


class Figures:
    def preload(self):
        pass


if __name__ == "__main__":
    how = sys.argv[1]
    if how == "no-prctl":  # as where prctl(2) is not available
        import basinkit._processes as P
        P._parent_death_signal = lambda sig: False
    if how == "report":
        from basinkit.report import build
        build._section_job = busy
        build._sections(None, Figures(), ["a", "b", "c", "d"], workers=2, progress=None)
    else:
        from basinkit.workflow.parallel import map_outlets
        list(map_outlets(busy, range(100), workers=2, min_items=2))
"""


@pytest.mark.parametrize("how", ["map_outlets", "report", "no-prctl"])
def test_busy_workers_end_when_their_parent_is_killed(tmp_path, how):
    """``SIGKILL`` of a process whose forked workers are in the middle of a long item: the
    workers end too (``map_outlets``, the report's sections; by the parent check where
    ``prctl`` is not available: an orphan is adopted by another process, so
    ``os.getppid()`` changes), long before their item would be done."""
    script = tmp_path / "pool.py"
    script.write_text(_SCRIPT)
    p = subprocess.Popen([sys.executable, str(script), how], env=ENV,
                         stdout=subprocess.PIPE, text=True, start_new_session=True)
    workers = []
    try:
        for _ in range(2):
            workers.append(psutil.Process(int(p.stdout.readline())))
        assert all(_alive(k) for k in workers)
        os.kill(p.pid, signal.SIGKILL)
        p.wait(WAIT)
        left = _wait_gone(workers)
        assert left == [], f"orphaned workers: {[k.pid for k in left]}"
    finally:
        _kill_all(p, workers)


_STARTED = {}


def _sleepy_section(oid):
    (_STARTED["folder"] / oid).write_text("started")
    time.sleep(20)
    return oid, ""


class _Figures:
    def preload(self):
        pass


def test_an_interrupt_stops_the_report_workers_at_once(monkeypatch, tmp_path):
    """An interrupt while the report's sections are drawn in forked workers stops them
    and cancels the sections not started (leaving ``concurrent.futures``' ``with`` block
    would wait for every one), and the interrupt goes on to the caller."""
    from basinkit.report import build

    me = psutil.Process()
    before = {k.pid for k in me.children(recursive=True)}
    monkeypatch.setattr(build, "_section_job", _sleepy_section)
    monkeypatch.setitem(_STARTED, "folder", tmp_path)
    seen = []

    def progress(it, total=None, desc=""):
        deadline = time.monotonic() + WAIT
        while time.monotonic() < deadline and not seen:
            seen.extend(k for k in me.children(recursive=True) if k.pid not in before)
            time.sleep(0.02)
        raise KeyboardInterrupt

    try:
        with pytest.raises(KeyboardInterrupt):
            build._sections(None, _Figures(), ["a", "b", "c", "d", "e", "f"], workers=2,
                            progress=progress)
        assert seen, "no worker was forked"
        assert [k for k in seen if _alive(k)] == []  # reaped before the interrupt went on
        # two workers: at most two sections began; the others were cancelled
        assert len(list(tmp_path.iterdir())) <= 2
    finally:
        for k in seen:
            try:
                k.kill()
            except psutil.Error:
                pass


def test_freed_memory_goes_back_to_the_system():
    """Many small arrays freed, with a few kept among them, leave the C allocator's heap
    holey: glibc keeps the freed pages resident until ``malloc_trim(0)`` hands them back
    (malloc_trim(3); blocks under the 128 KiB mmap threshold come from the heap,
    mallopt(3)). return_freed_memory gives back most of them (on glibc; elsewhere it
    does nothing)."""
    import ctypes.util

    libc = ctypes.util.find_library("c") or ""
    if not sys.platform.startswith("linux") or "musl" in libc:
        pytest.skip("malloc_trim is glibc's")
    script = textwrap.dedent("""
        import sys
        import numpy as np
        import psutil
        sys.path.insert(0, %r)
        from basinkit._processes import return_freed_memory
        blocks = [np.ones(6000) for _ in range(40000)]  # 48 kB each: from the heap
        keep = blocks[::200]
        del blocks
        before = psutil.Process().memory_info().rss
        ok = return_freed_memory()
        after = psutil.Process().memory_info().rss
        print(int(ok), before, after, len(keep))
    """ % str(Path(__file__).resolve().parents[1]))
    r = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 0, r.stderr
    ok, before, after, _ = map(int, r.stdout.split())
    assert ok == 1
    # 40 000 × 48 kB = 1.9 GB allocated, all but 200 blocks freed
    assert before - after > 500e6, (before, after)
