"""Core engine benchmark: conditioning, D8 routing and accumulation, basinkit beside pysheds.

Run by hand (not part of the tests):

    python bench/bench_core.py --sizes 1024 2048 4096

Every (tool, size) runs in a child process of its own so that its peak memory (ru_maxrss)
is its own; ``--repeat R`` runs each R times (on a shared machine) and keeps the best time of
every stage. The DEM is a spectral-synthesis fractal surface (fixed seed), cached under
bench/out/. Figures go to stdout; copy them to bench/RESULTS.md.

What is compared (same DEM, same machine, same run):
- conditioning: basinkit fill + flat resolution vs pysheds fill_pits + fill_depressions +
  resolve_flats;
- routing: basinkit D8 receivers + stack + accumulation (cells and m², one sweep:
  ``stack_count_area``) vs pysheds flowdir + accumulation.

``route()`` is also run on its own (public API, with both accumulations) for its peak memory
and for the time per cell across sizes.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
OUT = HERE / "out"


def fractal(n, seed=0, beta=1.6, relief=1000.0):
    rng = np.random.default_rng(seed)
    f = np.fft.fftfreq(n)
    k = np.sqrt(f[:, None] ** 2 + f[None, :] ** 2)
    k[0, 0] = 1.0
    spec = (rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) / k ** beta
    z = np.real(np.fft.ifft2(spec))
    return ((z - z.min()) / np.ptp(z) * relief).astype(np.float32)


def dem_path(n):
    OUT.mkdir(exist_ok=True)
    p = OUT / f"fractal_{n}.npy"
    if not p.exists():
        np.save(p, fractal(n))
    return p


def rss_mb():
    """Peak resident memory of this process so far, MB."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def current_rss_mb():
    """Resident memory now, MB (Linux /proc)."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024.0
    return rss_mb()


def warm_tiled_fill():
    """Load the kernels of the tiled fill (used above one 512² tile) on a small grid."""
    from basinkit.conditioning import _fill
    from basinkit.conditioning import _tiled_fill

    z = fractal(32)
    valid = np.ones(z.shape, bool)
    seeds = _fill.seed_mask(valid, np.zeros(z.shape, bool))
    _tiled_fill.fill_exact_tiled(z.astype(np.float32), valid, seeds, tile=8)


def warm_parallel_routing():
    """Load the parallel versions of the routing kernels (large grids) here, outside the
    timed stages, like the serial versions on the tiny grid."""
    from basinkit.routing import _d8, _stack

    z = fractal(32)
    valid = np.ones(z.shape, bool)
    none = np.zeros(z.shape, bool)
    rec, _ = _d8.d8_receivers.parallel(z, valid, none, none, np.ones((32, 8)))
    _stack.sweep_in_bands(rec, 32, np.ones(32), 2, parallel=True)


def child_basinkit(n):
    from basinkit.routing import _d8, _stack
    from basinkit.conditioning.fill import exit_cells, fill_depressions
    from basinkit.routing.flow_model import flow_from_conditioned
    from basinkit.terrain.model import terrain_from_array

    # compile (cached on disk after the first run) on a tiny grid, timed separately
    t = time.perf_counter()
    tiny = terrain_from_array(fractal(32), cellsize=10.0)
    fm = flow_from_conditioned(fill_depressions(tiny), "d8", {})
    fm.accumulation()
    fm.upstream_area()
    _stack.stack_count_area(fm.receiver, 32, tiny.geometry.area)
    warm_tiled_fill()
    warm_parallel_routing()
    compile_s = time.perf_counter() - t
    base = current_rss_mb()
    z = np.load(dem_path(n))
    terrain = terrain_from_array(z, cellsize=10.0)
    del z
    t0 = time.perf_counter()
    filled = fill_depressions(terrain)
    t1 = time.perf_counter()
    # flat resolution is part of conditioning in the comparison (pysheds resolve_flats)
    zc = filled.elevation
    dist = filled.geometry.neighbour_distances()
    seeds = exit_cells(filled)
    rec, nflat = _d8.d8_receivers(zc, filled.valid, seeds, np.zeros(zc.shape, bool), dist)
    del seeds
    t2 = time.perf_counter()
    if nflat:
        _d8.resolve_flats(zc, filled.valid, rec, dist)
    t3 = time.perf_counter()
    # stack, cell count and upstream area (m²) in one sweep
    stack, cells, area = _stack.stack_count_area(rec, zc.shape[1], filled.geometry.area)
    t4 = time.perf_counter()
    del cells, area, stack, rec, zc, filled
    return {"compile_s": compile_s, "fill_s": t1 - t0, "d8_s": t2 - t1, "flats_s": t3 - t2,
            "stack_accumulation_s": t4 - t3,
            "conditioning_s": (t1 - t0) + (t3 - t2),
            "routing_s": (t2 - t1) + (t4 - t3),
            "peak_mb": rss_mb(), "base_mb": base, "flat_cells": int(nflat)}


def child_route(n):
    """Only the public route() + both accumulations: its peak memory per cell."""
    from basinkit.routing.flow_model import route
    from basinkit.terrain.model import terrain_from_array

    tiny = route(terrain_from_array(fractal(32), cellsize=10.0))
    tiny.upstream_area()
    warm_tiled_fill()
    warm_parallel_routing()
    base = current_rss_mb()
    terrain = terrain_from_array(np.load(dem_path(n)), cellsize=10.0)
    t0 = time.perf_counter()
    fm = route(terrain)
    fm.accumulation()
    fm.upstream_area()
    t1 = time.perf_counter()
    return {"route_total_s": t1 - t0, "peak_mb": rss_mb(), "base_mb": base}


def child_pysheds(n):
    if not hasattr(np, "in1d"):
        np.in1d = np.isin  # pysheds 0.5 still calls the function NumPy 2.4 removed
    from affine import Affine
    from pysheds.grid import Grid
    from pysheds.view import Raster, ViewFinder

    def run(z):
        vf = ViewFinder(affine=Affine(10, 0, 0, 0, -10, z.shape[0] * 10), shape=z.shape,
                        nodata=np.float64(np.nan))
        grid = Grid(viewfinder=vf)
        dem = Raster(z.astype(np.float64), viewfinder=vf)
        t0 = time.perf_counter()
        a = grid.fill_pits(dem)
        a = grid.fill_depressions(a)
        a = grid.resolve_flats(a)
        t1 = time.perf_counter()
        fdir = grid.flowdir(a)
        grid.accumulation(fdir)
        t2 = time.perf_counter()
        return t1 - t0, t2 - t1

    t = time.perf_counter()
    run(fractal(32))
    compile_s = time.perf_counter() - t
    base = current_rss_mb()
    z = np.load(dem_path(n)).astype(np.float64)
    cond, routing = run(z)
    return {"compile_s": compile_s, "conditioning_s": cond, "routing_s": routing,
            "peak_mb": rss_mb(), "base_mb": base}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096])
    ap.add_argument("--tools", nargs="+", default=["basinkit", "route", "pysheds"])
    ap.add_argument("--repeat", type=int, default=1,
                    help="runs per tool and size (each in a fresh process); the best time "
                         "of each stage is reported")
    ap.add_argument("--child", nargs=2, metavar=("TOOL", "N"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        tool, n = args.child[0], int(args.child[1])
        res = {"basinkit": child_basinkit, "route": child_route,
               "pysheds": child_pysheds}[tool](n)
        print(json.dumps(res))
        return
    print(f"machine: {os.cpu_count()} cores; numpy {np.__version__}; best of "
          f"{args.repeat} run(s) per tool and size")
    rows = {}
    for n in args.sizes:
        dem_path(n)
        for tool in args.tools:
            runs = []
            for _ in range(args.repeat):
                out = subprocess.run([sys.executable, __file__, "--child", tool, str(n)],
                                     capture_output=True, text=True)
                if out.returncode != 0:
                    print(f"{tool} {n}: failed\n{out.stderr[-2000:]}")
                    break
                runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
            if not runs:
                continue
            # shared machine: the best time of the repeats for every stage, the largest
            # memory per cell
            r = {k: min(x[k] for x in runs) for k in runs[0]}
            per_cell = max((x["peak_mb"] - x["base_mb"]) * 2**20 / (n * n) for x in runs)
            r["bytes_per_cell"] = per_cell
            rows[(tool, n)] = r
            if tool == "route":
                print(f"route()    {n:5d}²: {r['route_total_s']:6.2f} s for fill, flats, D8, "
                      f"stack, cells and m² accumulation; peak {per_cell:5.1f} bytes/cell "
                      "(input DEM included)", flush=True)
                continue
            extra = ""
            if tool == "basinkit":
                extra = (f" [fill {r['fill_s']:.2f} flats {r['flats_s']:.2f} d8 "
                         f"{r['d8_s']:.2f} stack+acc {r['stack_accumulation_s']:.2f}]")
            print(f"{tool:9s} {n:5d}²: conditioning {r['conditioning_s']:7.2f} s  routing "
                  f"{r['routing_s']:6.2f} s  peak {r['peak_mb']:7.0f} MB "
                  f"({per_cell:5.1f} B/cell)  compile {r['compile_s']:.1f} s{extra}",
                  flush=True)
        b, p = rows.get(("basinkit", n)), rows.get(("pysheds", n))
        if b and p:
            print(f"   ratio pysheds/basinkit at {n}²: conditioning "
                  f"{p['conditioning_s'] / b['conditioning_s']:.1f}x, routing "
                  f"{p['routing_s'] / b['routing_s']:.1f}x", flush=True)
    sizes = [n for n in args.sizes if ("route", n) in rows]
    if len(sizes) >= 2:
        lo, hi = min(sizes), max(sizes)
        per = lambda n: rows[("route", n)]["route_total_s"] / (n * n)  # noqa: E731
        print(f"time per cell {hi}² / {lo}² (route total): {per(hi) / per(lo):.2f}")


if __name__ == "__main__":
    main()
