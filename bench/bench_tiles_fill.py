"""Fill and D8 directions by tiles (out of core) beside the in-memory ``route()``.

Run by hand (not part of the tests):

    python bench/bench_tiles_fill.py --sizes 2048 4096 --tile 512

For each size, one child process reads the DEM (a GeoTIFF of the fractal surface of
bench_core.py, cached under bench/out/) with ``read_dem`` and runs ``route()``; another
reads it window by window into a tile folder on disk (``dem_into_tiles``) and runs
``route_by_tiles`` there, stage by stage. Each child reports its time per stage and its
peak resident memory; the tiled directions are then compared with the in-memory ones cell
for cell. Figures go to stdout; copy them to bench/RESULTS.md.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
OUT = HERE / "out"
sys.path.insert(0, str(HERE.parent))


def dem_tif(n):
    from affine import Affine
    import rasterio

    from bench_core import fractal

    OUT.mkdir(exist_ok=True)
    p = OUT / f"fractal_{n}.tif"
    if not p.exists():
        z = fractal(n)
        with rasterio.open(p, "w", driver="GTiff", height=n, width=n, count=1,
                           dtype="float32", crs="EPSG:32633",
                           transform=Affine(10.0, 0, 500000.0, 0, -10.0, 5000000.0 + 10 * n),
                           tiled=True, blockxsize=256, blockysize=256) as ds:
            ds.write(z, 1)
    return p


def peak_mb():
    """Peak resident memory of this process, MB (VmHWM: unlike ru_maxrss it does not
    carry the parent's peak across fork and exec)."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    raise RuntimeError("no VmHWM in /proc/self/status")


def child_memory(n):
    from basinkit.io.dem import read_dem
    from basinkit.routing.flow_model import route

    route(read_dem(dem_tif(256)))  # compile the kernels first
    base = peak_mb()
    t0 = time.perf_counter()
    fm = route(read_dem(dem_tif(n)))
    t1 = time.perf_counter()
    np.save(OUT / f"directions_{n}.npy", fm.direction_d8())
    return {"route_s": t1 - t0, "peak_mb": peak_mb(), "before_mb": base}


def child_tiles(n, tile):
    from basinkit.io.tile_source import dem_into_tiles
    from basinkit.tiles import directions as d
    from basinkit.tiles.fill import fill_by_tiles
    from basinkit.tiles.route import grid_distances, route_by_tiles

    work = OUT / f"tiles_{n}_{tile}"
    shutil.rmtree(work, ignore_errors=True)
    warm = dem_into_tiles(dem_tif(256), tile=64)  # compile the kernels first
    route_by_tiles(warm.layout, warm)
    del warm
    base = peak_mb()
    times = {}
    t = time.perf_counter()
    store = dem_into_tiles(dem_tif(n), tile=tile, folder=work)
    times["read_s"] = time.perf_counter() - t
    lay = store.layout
    t = time.perf_counter()
    fill = fill_by_tiles(lay, store)
    times["fill_s"] = time.perf_counter() - t
    dist = grid_distances(lay, store)
    t = time.perf_counter()
    dirs = d.directions_by_tiles(lay, store, dist)
    times["directions_s"] = time.perf_counter() - t
    expected = np.load(OUT / f"directions_{n}.npy", mmap_mode="r")
    equal = all(np.array_equal(store.read("directions", ti, tj),
                               expected[slice(*lay.window(ti, tj)[:2]),
                                        slice(*lay.window(ti, tj)[2:])])
                for ti, tj in lay.tiles())
    size = sum(f.stat().st_size for f in work.rglob("*") if f.is_file())
    shutil.rmtree(work, ignore_errors=True)
    return {**times, "peak_mb": peak_mb(), "before_mb": base, "equal": equal,
            "folder_mb": size / 2**20, "tiles": fill["tiles"],
            "graph_nodes": fill["graph_nodes"], "crossing_flats": dirs["crossing_flats"],
            "flat_cells": dirs["flat_cells"]}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="+", default=[2048])
    ap.add_argument("--tile", type=int, default=512)
    ap.add_argument("--child", nargs="+")
    a = ap.parse_args()
    if a.child:
        kind, n = a.child[0], int(a.child[1])
        res = child_memory(n) if kind == "memory" else child_tiles(n, int(a.child[2]))
        print(json.dumps(res))
        return
    print("| size | tile | route() s | route() peak MB | read by windows s | fill by tiles s "
          "| directions by tiles s | tiled peak MB | tile folder MB | crossing flats | equal |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for n in a.sizes:
        dem_tif(n)
        runs = {}
        for kind, extra in (("memory", []), ("tiles", [str(a.tile)])):
            out = subprocess.run([sys.executable, __file__, "--child", kind, str(n), *extra],
                                 capture_output=True, text=True, check=True)
            runs[kind] = json.loads(out.stdout.strip().splitlines()[-1])
        m, t = runs["memory"], runs["tiles"]
        print(f"| {n}² | {a.tile}² | {m['route_s']:.2f} | {m['peak_mb']:.0f} | "
              f"{t['read_s']:.2f} | {t['fill_s']:.2f} | {t['directions_s']:.2f} | "
              f"{t['peak_mb']:.0f} | {t['folder_mb']:.0f} | {t['crossing_flats']} | "
              f"{t['equal']} |")


if __name__ == "__main__":
    main()
