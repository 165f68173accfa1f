"""Compiling a job's later kernels in a second process (``workflow/warmup.py``).

- The kernel list names kernels that exist, with argument types that the demo job gives
  them: after the job, numba's dispatcher of each kernel holds the listed signature
  (numba records the signatures a dispatcher compiled or loaded). Common practice (no
  source): a list that does not match the calls would compile kernels nobody calls.
- A kernel compiled in another process is in the on-disk cache afterwards, and this
  process then loads it instead of compiling it (numba's cache: its index is read again
  for every new signature; numba's documentation, "Cache sharing" and "Notes on
  caching").
- With every listed kernel in the cache, no process starts; nor when turned off
  (``BASINKIT_COMPILE_AHEAD=0``) or when no core is free (load average; common practice,
  no source). Stopping it ends it at once (SIGTERM, signal(7)).
- The demo's products are the same, byte for byte, whether the kernels were compiled
  ahead or not (DESIGN.md, the output contract: deterministic outputs). The kernels are
  the same code either way; the test runs the demo job with an empty cache (the other
  process at work) and with a filled one (no other process).
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd

from basinkit.workflow import warmup

REPO = Path(__file__).resolve().parents[1]


def test_argument_types_notation():
    from numba.core import types

    got = warmup.argument_types("i4[:] f8[:,:]r u4 b1[:,:,:] f4")
    assert got == (types.Array(types.int32, 1, "C"),
                   types.Array(types.float64, 2, "C", readonly=True), types.uint32,
                   types.Array(types.boolean, 3, "C"), types.float32)


def test_later_kernels_keep_the_stage_order():
    got = warmup.later_kernels({"morphometry", "flow"})
    assert got == warmup.LATER_KERNELS["flow"] + warmup.LATER_KERNELS["morphometry"]
    assert warmup.later_kernels(()) == []


def test_the_demo_job_calls_every_listed_kernel_with_the_listed_types(tmp_path,
                                                                     monkeypatch):
    """With its catchments measured all at once (as a job of many outlets measures
    them), the demo job calls every kernel of the list."""
    import basinkit.analysis.morphometry as morph
    from basinkit.workflow.jobfile import demo_job_path, read_job
    from basinkit.workflow.runner import run_job

    monkeypatch.setattr(morph, "WINDOW_MAX_CATCHMENTS", 0)
    run_job(read_job(demo_job_path()), output=tmp_path / "demo")
    unused = []
    for stage, entries in warmup.LATER_KERNELS.items():
        for module, name, text in entries:
            kernel = warmup._kernel(module, name)
            if warmup.argument_types(text) not in kernel.signatures:
                unused.append((stage, name, text, kernel.signatures))
    assert not unused, unused


def test_a_few_outlets_compile_no_kernel_of_the_nested_measures():
    """The demo's 13 outlets are measured each on its window: the process compiling
    ahead leaves out the kernels that measure many nested catchments at once."""
    from basinkit.analysis.morphometry import WINDOW_MAX_CATCHMENTS
    from basinkit.workflow.jobfile import demo_job_path, read_job
    from basinkit.workflow.runner import _later_stages, settings_of

    job = read_job(demo_job_path())
    spec = settings_of(job)["outlets"]
    raw, _ = spec.read()
    assert len(raw) <= WINDOW_MAX_CATCHMENTS
    assert "nested_morphometry" not in _later_stages(job, spec, raw)
    many = pd.concat([raw] * (WINDOW_MAX_CATCHMENTS // len(raw) + 1), ignore_index=True)
    assert "nested_morphometry" in _later_stages(job, spec, many)
    job["morphometry"]["enabled"] = False
    assert "nested_morphometry" not in _later_stages(job, spec, many)


def _run(code, cache, **env):
    env = {**os.environ, "PYTHONPATH": str(REPO), "NUMBA_CACHE_DIR": str(cache), **env}
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], env=env,
                          capture_output=True, text=True, check=True).stdout


def test_a_kernel_compiled_ahead_is_loaded_not_compiled(tmp_path):
    cache = tmp_path / "cache"
    entry = warmup.LATER_KERNELS["catchments"][1]  # remap: small, quick to compile
    compiled = _run(f"""
        from basinkit.workflow import warmup
        e = {entry!r}
        print(warmup.missing_kernels([e]) == [e], warmup._looks_cached(e))
        proc = warmup.compile_ahead(["catchments"], when_busy=True)
        proc.join()
        print(proc.exitcode)
        print(warmup.missing_kernels([e]) == [], warmup._looks_cached(e))
        """, cache).split()
    # the file names _looks_cached expects are those numba wrote
    assert compiled == ["True", "False", "0", "True", "True"]
    # a new process: the kernel comes from the cache (numba counts hits and misses)
    loaded = _run(f"""
        import numpy as np
        from basinkit.workflow import warmup
        k = warmup._kernel(*{entry[:2]!r})
        k(np.zeros(4, np.int32), np.arange(4, dtype=np.int32))
        print(sum(k.stats.cache_hits.values()), sum(k.stats.cache_misses.values()))
        print(warmup.compile_ahead(["catchments"], when_busy=True) is None)
        """, cache).split()
    assert loaded == ["1", "0", "True"]  # all in the cache now: no process starts


def test_stop_ends_the_process_at_once(tmp_path):
    """SIGTERM ends it where it is (signal(7): the default action of SIGTERM)."""
    out = _run("""
        import time
        from basinkit.workflow import warmup
        proc = warmup.compile_ahead(["morphometry", "profiles"], when_busy=True)
        time.sleep(0.5)
        warmup.stop_compile_ahead()
        print(proc.is_alive(), proc.exitcode)
        """, tmp_path / "cache").split()
    assert out == ["False", "-15"]


def test_the_two_processes_meet_and_compile_each_kernel_once(tmp_path):
    """The job coming to a stage compiles the listed kernels of that stage and the
    earlier ones that the other process has not taken, from the first, and waits for
    one the other is compiling; the other stops where it meets the job's. Every kernel
    is compiled once, by one of the two: the job's a run from the first, the other's a
    run from the last (common practice, no source: one process compiles a kernel, never
    two at once)."""
    out = _run("""
        import time
        from basinkit.workflow import warmup
        entries = warmup.later_kernels(warmup.LATER_KERNELS)
        proc = warmup.compile_ahead(list(warmup.LATER_KERNELS), when_busy=True)
        time.sleep(1.0)
        warmup.stage_begins("flow")
        warmup.stage_begins("design_flow")  # after them all: the rest compiled here
        proc.join(60)
        print(proc.exitcode, len(warmup.missing_kernels(entries)))
        print("".join(str(v) for v in warmup._AHEAD[-1].state))
        """, tmp_path / "cache").split()
    code, missing, states = out
    assert (code, missing) == ("0", "0")
    here, there = states.count("3"), states.count("2")
    assert here + there == len(states)
    assert states == "3" * here + "2" * there
    assert here >= len(warmup.LATER_KERNELS["flow"])


def test_no_process_when_turned_off_or_without_a_free_core(monkeypatch, tmp_path):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path))  # empty: every kernel missing
    monkeypatch.setenv(warmup.COMPILE_AHEAD_ENV, "0")
    assert warmup.compile_ahead(["catchments"], when_busy=True) is None
    monkeypatch.delenv(warmup.COMPILE_AHEAD_ENV)
    monkeypatch.setattr(os, "getloadavg", lambda: (1.7, 0.5, 0.5))
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    assert not warmup._core_free()
    assert warmup.compile_ahead(["catchments"]) is None
    monkeypatch.setattr(os, "getloadavg", lambda: (1.2, 2.5, 2.5))
    assert warmup._core_free()
    monkeypatch.setattr(os, "cpu_count", lambda: 1)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.0, 0.0, 0.0))
    assert not warmup._core_free()  # one core: nothing to share


def _hashes(folder):
    folder = Path(folder)
    # provenance.json's "resources" (peak memory) differ between runs, and so its hash in
    # the manifest
    skip = {"provenance.json", ".basinkit-manifest.json"}
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file() and p.name not in skip}


def test_products_are_the_same_with_an_empty_cache(tmp_path):
    """A job without outlets (flow and channels) on the demo DEM with an empty kernel cache
    (the channel kernels compiled ahead in a second process while route's compile here,
    even on a busy machine) and again with the cache it filled (no second process)."""
    dem = REPO / "demo_rasters" / "upland_valley.tif"
    job = tmp_path / "job.toml"
    job.write_text(textwrap.dedent(f"""
        [inputs]
        dem = {str(dem)!r}
        [channels]
        min_area = "2ha"
        [outputs]
        report = false
        figures = false
        """))
    cache = tmp_path / "cache"
    for name in ("cold", "warm"):
        subprocess.run([sys.executable, "-m", "basinkit.cli", "--quiet", "run", str(job),
                        "-o", str(tmp_path / name)], check=True, stdout=subprocess.DEVNULL,
                       env={**os.environ, "PYTHONPATH": str(REPO),
                            "NUMBA_CACHE_DIR": str(cache), "BASINKIT_COMPILE_AHEAD": "1"})
    cold, warm = _hashes(tmp_path / "cold"), _hashes(tmp_path / "warm")
    assert "channel_segments.csv" in cold and "flow/direction_d8.tif" in cold
    assert cold == warm
