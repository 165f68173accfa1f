"""Loading the kernels in a background thread while the DEM is read.

- Inside ``parallel_versions`` a small grid takes the parallel kernels and the banded
  sweep, and route gives the same model as outside it (determinism: serial and parallel
  versions agree; common practice, no source); the switch holds for its thread only.
- The warm-up of a small grid loads the serial versions, that of a grid above
  PARALLEL_MIN_CELLS the parallel ones (numba's dispatcher records the signatures it
  holds).
- A flow folder written after a warm-up equals one written without (byte for byte: the
  output contract in DESIGN.md).
"""

from __future__ import annotations

import threading

import numpy as np

from basinkit import _jit, route, terrain_from_array
from basinkit.routing import _d8, _stack
from basinkit.workflow.warmup import start_warmup, warm_route_kernels


def test_parallel_versions_switch_this_thread_only():
    seen = {}
    with _jit.parallel_versions():
        seen["here"] = _jit.wants_parallel(10)
        t = threading.Thread(target=lambda: seen.update(other=_jit.wants_parallel(10)))
        t.start()
        t.join()
        assert _stack.sweep_bands_for(100, 100) == _stack.SWEEP_BANDS
    assert seen == {"here": True, "other": False}
    assert not _jit.wants_parallel(10)
    assert _jit.wants_parallel(_jit.PARALLEL_MIN_CELLS)
    assert _stack.sweep_bands_for(100, 100) == 1


def test_route_is_the_same_with_the_parallel_versions(fractal):
    z = fractal(120, 90, seed=11, holes=2, integer=True)
    a = route(terrain_from_array(z, cellsize=10))
    with _jit.parallel_versions():
        b = route(terrain_from_array(z, cellsize=10))
    np.testing.assert_array_equal(a.receiver, b.receiver)
    np.testing.assert_array_equal(a.accumulation(), b.accumulation())
    np.testing.assert_array_equal(a.upstream_area(), b.upstream_area())
    # any order with every cell after its receiver is a stack (Braun & Willett 2013)
    pos = np.empty(a.receiver.size, np.int64)
    pos[b.stack] = np.arange(b.stack.size)
    r = b.receiver[b.stack]
    assert (pos[r[r >= 0]] < pos[b.stack[r >= 0]]).all()


def test_warmup_loads_the_versions_a_grid_will_use():
    warm_route_kernels(100 * 100)
    assert _d8._d8_into.serial.signatures and _d8.resolve_flats.serial.signatures
    start_warmup(_jit.PARALLEL_MIN_CELLS).join()
    assert _d8._d8_into.parallel.signatures and _d8.resolve_flats.parallel.signatures
    assert _stack._sweep_bands.parallel.signatures


def _signatures():
    from numba.core.registry import CPUDispatcher

    from basinkit.conditioning import _fill, _tiled_fill

    out = {}
    for m in (_d8, _stack, _fill, _tiled_fill):
        for name, v in vars(m).items():
            for f in (v, getattr(v, "serial", None), getattr(v, "parallel", None)):
                if isinstance(f, CPUDispatcher):
                    out[(m.__name__, f.__name__)] = len(f.signatures)
    return out


def test_after_the_warmup_routing_a_tiled_grid_loads_no_other_kernel(fractal):
    """The warm-up fills its small surface by small tiles and routes it: a grid the fill
    takes by tiles (more than 512 x 512 cells) then calls no kernel, and no argument
    types, that the warm-up did not load (numba's dispatcher records the signatures it
    holds; common practice, no source)."""
    warm_route_kernels(600 * 600)
    before = _signatures()
    fm = route(terrain_from_array(fractal(600, 600, seed=5), cellsize=10))
    fm.direction_d8()
    fm.upstream_area()
    after = _signatures()
    assert {k: v for k, v in after.items() if before.get(k) != v} == {}


def test_flow_folder_is_the_same_after_a_warmup(tmp_path, fractal):
    import hashlib

    from basinkit import write_flow_folder

    z = fractal(80, seed=4)
    a = write_flow_folder(route(terrain_from_array(z, cellsize=10)), tmp_path / "a")
    w = start_warmup(_jit.PARALLEL_MIN_CELLS).join()
    assert w.error is None
    b = write_flow_folder(route(terrain_from_array(z, cellsize=10)), tmp_path / "b")
    for f in ("direction_d8.tif", "accumulation_cells.tif", "upstream_area_m2.tif"):
        assert (hashlib.sha256((a / f).read_bytes()).digest()
                == hashlib.sha256((b / f).read_bytes()).digest()), f


def test_import_and_help_load_no_kernels():
    """`import basinkit` and `basinkit --help` load neither numba nor rasterio (module
    __getattr__, PEP 562), so that the CLI starts quickly; a public name still resolves."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    root = str(Path(__file__).resolve().parents[1])
    code = ("import sys, basinkit\nfrom basinkit.cli.main import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(sorted(k for k in ('numba', 'rasterio', 'pyproj') if k in sys.modules))\n"
            "basinkit.route\nprint('numba' in sys.modules)\n")
    env = {**os.environ, "PYTHONPATH": root}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=env, check=True).stdout.splitlines()
    assert out[-2:] == ["[]", "True"], out
    assert any("route" in line for line in out)
