"""``basinkit route --max-memory`` (route by tiles, whole command) beside ``basinkit route``
in memory, on the fractal DEM of bench_core.py.

Run by hand (not part of the tests):

    python bench/bench_tiles_cli.py --size 4096 --max-memory 256MB

Each command runs in its own process; its wall time and peak resident memory (the
process's ru_maxrss, read by the parent with os.wait4) are printed, and the four rasters of
the two flow folders are compared cell for cell. Figures go to stdout; copy them to
bench/RESULTS.md.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_tiles_fill import OUT, dem_tif  # noqa: E402

RASTERS = ["elevation_conditioned.tif", "direction_d8.tif", "accumulation_cells.tif",
           "upstream_area_m2.tif"]


def run(args):
    env = {**os.environ, "PYTHONPATH": str(HERE.parent)}
    t0 = time.perf_counter()
    p = subprocess.Popen([sys.executable, "-m", "basinkit.cli", *args], env=env,
                         stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    out = p.stdout.read()
    _, status, usage = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t0
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"failed: {' '.join(args)}\n{out}")
    return wall, usage.ru_maxrss / 1024, out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=4096)
    ap.add_argument("--max-memory", default="256MB")
    ap.add_argument("--tile-size", type=int, default=None)
    a = ap.parse_args()
    dem = dem_tif(a.size)
    mem, til = OUT / f"cli_mem_{a.size}", OUT / f"cli_tiles_{a.size}"
    for p in (mem, til):
        shutil.rmtree(p, ignore_errors=True)
    extra = ["--tile-size", str(a.tile_size)] if a.tile_size else []
    w1, m1, _ = run(["route", str(dem), "-o", str(mem), "-q"])
    w2, m2, out = run(["route", str(dem), "-o", str(til), "--max-memory", a.max_memory,
                       *extra])
    print(out)
    import rasterio

    same = True
    for name in RASTERS:
        with rasterio.open(mem / name) as x, rasterio.open(til / name) as y:
            u, v = x.read(1), y.read(1)
            same &= bool(np.array_equal(u, v, equal_nan=u.dtype.kind == "f"))
    print(f"| {a.size}² | {a.max_memory} | {w1:.1f} s | {m1:.0f} MB | {w2:.1f} s | {m2:.0f} MB "
          f"| {same} |")


if __name__ == "__main__":
    main()
