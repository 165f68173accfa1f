"""Whole-command benchmark: what a user times, start-up, reading and writing included.

Run by hand (not part of the tests):

    python bench/bench_commands.py route --sizes 2048 4096 --runs 3
    python bench/bench_commands.py startup --runs 5        # warm --help and warm demo
    python bench/bench_commands.py cold-demo --runs 3      # demo with an empty kernel cache
    python bench/bench_commands.py inproc --sizes 4096     # route() alone, in process

``route`` runs ``basinkit route DEM -o FOLDER`` and a pysheds script doing the same work
(``fill_pits``, ``fill_depressions``, ``resolve_flats``, ``flowdir``, ``accumulation``, then
writing the direction and accumulation rasters) in turn, each in a fresh process: basinkit,
pysheds, basinkit, pysheds, ... The figure is the median wall time of the runs, and the
ratio is taken pair by pair (so a drift of the machine's speed moves both). It also times
``read_dem`` and ``route()`` inside one process (kernels loaded beforehand) so that the
share of the command spent outside the algorithms (start-up, reading, writing) shows.

A whole job beside pysheds routing and a loop of ``catchment`` + ``polygonize`` is
``bench_batch_scale.py job``.

The DEM is the fractal surface of ``bench_core.py`` (same seed), written once as a tiled
DEFLATE GeoTIFF (EPSG:32633, 10 m cells) under bench/out/, which git ignores.

``cold-demo`` points ``NUMBA_CACHE_DIR`` at a new empty folder for every run, so each run
compiles every kernel it uses, as on a new machine. ``startup`` times ``basinkit --help``
and ``basinkit demo`` with the cache warm (one run first that is not counted).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
OUT = HERE / "out"
sys.path.insert(0, str(HERE))


def dem_tif(n) -> Path:
    """The bench_core fractal DEM of n x n cells as a GeoTIFF (cached)."""
    OUT.mkdir(exist_ok=True)
    p = OUT / f"fractal_{n}.tif"
    if not p.exists():
        import rasterio
        from affine import Affine

        from bench_core import dem_path

        z = np.load(dem_path(n)).astype(np.float32)
        tmp = p.with_suffix(".part.tif")
        with rasterio.open(tmp, "w", driver="GTiff", height=n, width=n, count=1,
                           dtype="float32", crs="EPSG:32633", nodata=np.nan,
                           transform=Affine(10, 0, 500000, 0, -10, 5000000 + n * 10),
                           tiled=True, blockxsize=256, blockysize=256,
                           compress="deflate", predictor=3) as ds:
            ds.write(z, 1)
        os.replace(tmp, p)
    return p


def env_with_package(root=ROOT, **extra):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(root) + os.pathsep + env.get("PYTHONPATH", "")
    env.update(extra)
    return env


#: CPU seconds (user + system) of every timed child, in order: on a shared machine they
#: move less than wall times
CPU_SECONDS: list = []


def timed(cmd, env=None):
    """Run ``cmd``; return (wall seconds, peak resident MB, exit status). Its CPU seconds
    go to :data:`CPU_SECONDS`."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE)
    _, status, ru = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    err = proc.stderr.read().decode(errors="replace")
    proc.stderr.close()
    proc.returncode = os.waitstatus_to_exitcode(status)
    CPU_SECONDS.append(ru.ru_utime + ru.ru_stime)
    if proc.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(map(str, cmd))} failed ({proc.returncode}):\n{err}")
    return wall, ru.ru_maxrss / 1024.0, proc.returncode


def basinkit_cmd(*args):
    # -P: the current folder not first on sys.path (``-m`` puts it before PYTHONPATH, so
    # run from a checkout every version timed would import that checkout's basinkit)
    return [sys.executable, "-P", "-m", "basinkit.cli", "--quiet", *map(str, args)]


# ---------------------------------------------------------------- the pysheds script
def pysheds_route(dem):
    """pysheds reads the DEM, conditions it (``fill_pits``, ``fill_depressions``,
    ``resolve_flats``), routes it (``flowdir``) and accumulates; returns (grid, dem array,
    directions, accumulation)."""
    if not hasattr(np, "in1d"):
        np.in1d = np.isin  # pysheds 0.5 still calls the function NumPy 2.4 removed
    from pysheds.grid import Grid

    grid = Grid.from_raster(str(dem))
    z = grid.read_raster(str(dem))
    z = grid.fill_pits(z)
    z = grid.fill_depressions(z)
    z = grid.resolve_flats(z)
    fdir = grid.flowdir(z)
    return grid, z, fdir, grid.accumulation(fdir)


def pysheds_script(dem, out):
    """The pysheds equivalent of ``basinkit route``: condition, route, accumulate, write."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    grid, _, fdir, acc = pysheds_route(dem)
    grid.to_raster(fdir, str(out / "fdir.tif"))
    grid.to_raster(acc, str(out / "acc.tif"))


def inproc(n):
    """Seconds of read_dem and route() in one process, kernels loaded first."""
    t0 = time.perf_counter()
    from basinkit import read_dem, route, terrain_from_array

    t_import = time.perf_counter() - t0
    from bench_core import fractal

    t0 = time.perf_counter()
    route(terrain_from_array(fractal(64), cellsize=10))
    t_kernels = time.perf_counter() - t0
    t0 = time.perf_counter()
    terrain = read_dem(dem_tif(n))
    t_read = time.perf_counter() - t0
    t0 = time.perf_counter()
    fm = route(terrain)
    fm.accumulation()
    fm.upstream_area()
    t_route = time.perf_counter() - t0
    return {"import_s": t_import, "kernel_load_s": t_kernels, "read_s": t_read,
            "route_s": t_route}


def run_inproc(n):
    cmd = [sys.executable, str(Path(__file__).resolve()), "_inproc", str(n)]
    res = subprocess.run(cmd, env=env_with_package(), capture_output=True, text=True,
                         check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


# ---------------------------------------------------------------- the comparisons
def bench_route(sizes, runs, before=None):
    """``before``: another checkout of basinkit (an earlier commit), timed in the same
    rounds (before, basinkit, pysheds, before, ...)."""
    rows = []
    for n in sizes:
        dem = dem_tif(n)
        tmp = Path(tempfile.mkdtemp(prefix="bench_commands_"))
        try:
            bk = basinkit_cmd("route", dem, "-o", tmp / "flow", "--overwrite")
            ps = [sys.executable, str(Path(__file__).resolve()), "_pysheds", str(dem),
                  str(tmp / "pysheds")]
            timed(bk, env_with_package())  # warm the file cache and the kernel cache
            a, b, mem_a, mem_b, old = [], [], [], [], []
            cpu = {"after": [], "pysheds": [], "before": []}
            loads = []
            if before is not None:
                bk_old = basinkit_cmd("route", dem, "-o", tmp / "flow_before", "--overwrite")
                timed(bk_old, env_with_package(before))
            for _ in range(runs):
                if before is not None:
                    old.append(timed(bk_old, env_with_package(before))[0])
                    cpu["before"].append(CPU_SECONDS[-1])
                    print(f"  {n}²: before {old[-1]:.2f} s ({CPU_SECONDS[-1]:.2f} s CPU)",
                          flush=True)
                wa, ma, _ = timed(bk, env_with_package())
                ca = CPU_SECONDS[-1]
                wb, mb, _ = timed(ps, env_with_package())
                cb = CPU_SECONDS[-1]
                a.append(wa), b.append(wb), mem_a.append(ma), mem_b.append(mb)
                cpu["after"].append(ca), cpu["pysheds"].append(cb)
                loads.append(os.getloadavg()[0])
                print(f"  {n}²: basinkit {wa:.2f} s ({ca:.2f} s CPU), pysheds {wb:.2f} s "
                      f"({cb:.2f} s CPU), load {os.getloadavg()[0]:.1f}", flush=True)
            size_mb = sum(f.stat().st_size for f in (tmp / "flow").iterdir()) / 1e6
            ip = [run_inproc(n) for _ in range(max(1, runs // 2))]
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        route_s = statistics.median(r["route_s"] for r in ip)
        med_a = statistics.median(a)
        row = {"size": n, "basinkit_s": a, "pysheds_s": b,
               "basinkit_median_s": med_a, "pysheds_median_s": statistics.median(b),
               "ratio_median": statistics.median(y / x for x, y in zip(a, b)),
               "basinkit_peak_mb": max(mem_a), "pysheds_peak_mb": max(mem_b),
               "flow_folder_mb": size_mb, "inproc": ip, "route_s": route_s,
               "outside_route_share": 1 - route_s / med_a, "before_s": old,
               "cpu_s": cpu, "load": loads}
        rows.append(row)
        print(f"{n}²: basinkit {med_a:.2f} s (median of {runs}), pysheds "
              f"{row['pysheds_median_s']:.2f} s, ratio {row['ratio_median']:.2f}×; "
              f"route() in process {route_s:.2f} s, read_dem "
              f"{statistics.median(r['read_s'] for r in ip):.2f} s; start-up, reading and "
              f"writing {100 * row['outside_route_share']:.0f} % of the command; flow "
              f"folder {size_mb:.0f} MB; peak {row['basinkit_peak_mb']:.0f} MB vs "
              f"{row['pysheds_peak_mb']:.0f} MB", flush=True)
        print(f"{n}²: CPU seconds, median: basinkit {statistics.median(cpu['after']):.2f}, "
              f"pysheds {statistics.median(cpu['pysheds']):.2f}, ratio "
              f"{statistics.median(cpu['pysheds']) / statistics.median(cpu['after']):.2f}×"
              + (f", before {statistics.median(cpu['before']):.2f}" if old else "")
              + f"; load {min(loads):.1f}-{max(loads):.1f}", flush=True)
        if old:
            print(f"{n}²: before {statistics.median(old):.2f} s (median), ratio pysheds / "
                  f"before {statistics.median(y / x for x, y in zip(old, b)):.2f}×",
                  flush=True)
    return rows


def _versions(before):
    """(label, PYTHONPATH root) of the checkouts timed in turn."""
    return [("after", ROOT)] + ([("before", Path(before))] if before is not None else [])


def bench_startup(runs, before=None):
    tmp = Path(tempfile.mkdtemp(prefix="bench_commands_"))
    try:
        out = {}
        for name, args in (("help", ("--help",)),
                           ("demo", ("demo", "-o", tmp / "demo", "--overwrite"))):
            cmd = basinkit_cmd(*args)
            t = {label: [] for label, _ in _versions(before)}
            cpu = {label: [] for label, _ in _versions(before)}
            for label, root in _versions(before):
                timed(cmd, env_with_package(root))  # not counted: fills the cache
            for _ in range(runs):
                for label, root in _versions(before):  # in turn
                    t[label].append(timed(cmd, env_with_package(root))[0])
                    cpu[label].append(CPU_SECONDS[-1])
            out[name] = t
            for label in t:
                print(f"warm {name} ({label}): median {statistics.median(t[label]):.2f} s "
                      f"(min {min(t[label]):.2f}, max {max(t[label]):.2f}, {runs} runs; "
                      f"CPU median {statistics.median(cpu[label]):.2f} s; load "
                      f"{os.getloadavg()[0]:.1f})", flush=True)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return out


def bench_cold_demo(runs, before=None):
    tmp = Path(tempfile.mkdtemp(prefix="bench_commands_"))
    try:
        t = {label: [] for label, _ in _versions(before)}
        for i in range(runs):
            for label, root in _versions(before):  # in turn
                cache = tmp / f"cache-{label}-{i}"
                cache.mkdir()
                w, mb, _ = timed(basinkit_cmd("demo", "-o", tmp / "demo", "--overwrite"),
                                 env_with_package(root, NUMBA_CACHE_DIR=str(cache)))
                t[label].append(w)
                print(f"  cold demo run {i + 1} ({label}): {w:.1f} s ({CPU_SECONDS[-1]:.1f} "
                      f"s CPU, peak {mb:.0f} MB, load {os.getloadavg()[0]:.1f})", flush=True)
        for label in t:
            print(f"cold demo ({label}): median {statistics.median(t[label]):.1f} s (min "
                  f"{min(t[label]):.1f}, max {max(t[label]):.1f}, {runs} runs)", flush=True)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return t


def main():
    if len(sys.argv) > 1 and sys.argv[1] == "_pysheds":
        return pysheds_script(sys.argv[2], sys.argv[3])
    if len(sys.argv) > 1 and sys.argv[1] == "_inproc":
        print(json.dumps(inproc(int(sys.argv[2]))))
        return None
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", choices=["route", "startup", "cold-demo", "inproc"])
    ap.add_argument("--sizes", type=int, nargs="+", default=[2048, 4096])
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--before", type=Path,
                    help="route, startup, cold-demo: also time this other checkout of "
                         "basinkit (e.g. a 'git worktree' of an earlier commit) in the same "
                         "rounds")
    ap.add_argument("--json", type=Path, help="also write the figures to this file")
    a = ap.parse_args()
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, load average "
          f"{os.getloadavg()[0]:.2f}, {os.cpu_count()} cores", flush=True)
    if a.what == "route":
        res = bench_route(a.sizes, a.runs, a.before)
    elif a.what == "startup":
        res = bench_startup(a.runs, a.before)
    elif a.what == "cold-demo":
        res = bench_cold_demo(a.runs, a.before)
    else:
        res = {n: run_inproc(n) for n in a.sizes}
        print(json.dumps(res, indent=1))
    if a.json:
        a.json.write_text(json.dumps(res, indent=1))
    return None


if __name__ == "__main__":
    main()
