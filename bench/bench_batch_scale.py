"""Batch-scale benchmark: a whole job with many outlets on the fractal DEM, against pysheds
routing followed by a loop of catchment + polygonize per outlet; and the per-outlet stages
(polygons, morphometry, profiles) timed in process for 10 000 outlets.

Run by hand (not part of the tests):

    python bench/bench_batch_scale.py job --size 2048 --outlets 1000 --runs 3
    python bench/bench_batch_scale.py stages --size 4096 --outlets 10000
    python bench/bench_batch_scale.py stages --size 4096 --outlets 10000 --only delineate
    python bench/bench_batch_scale.py job --size 4096 --outlets 10000 --runs 1 --no-pysheds

``job`` writes the fractal DEM of ``bench_core.py`` as a GeoTIFF (10 m cells, EPSG:32633,
cached under bench/out/), an outlet CSV of N random channel cells (upstream area at least
the channel threshold, fixed seed, so many outlets are nested) and a job file running every
stage: route, catchments with polygons and the label raster, channels, profiles,
morphometry and the report (figures for the default first 20 outlets). It then runs, in
turn and each in a fresh process, ``basinkit run JOB`` and a pysheds 0.5 script doing
``fill_pits``, ``fill_depressions``, ``resolve_flats``, ``flowdir``, ``accumulation`` and, for
every outlet, ``catchment`` + ``polygonize``: basinkit, pysheds, basinkit, ... The figures
are wall times of the whole processes (start-up, reading, writing included), the ratio is
taken pair by pair, and the stage seconds come from the job's --log-json records.

``stages`` times, in one process with the kernels loaded, route() and then the functions
the steps call: ``delineate`` with polygons (the polygons alone = with minus without),
``extract_channels``, ``morphometry_table`` and the per-outlet profile work of the profile
step (``profiles_step`` into a scratch folder, figures off).
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
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

from _stages import stage_seconds  # noqa: E402 - bench/ is on the path now

CELL = 10.0
CHANNEL_M2 = 1e5  # 1 000 cells of 100 m²


def outlet_cells(fm, n, seed=3):
    """N random channel cells (upstream area ≥ CHANNEL_M2), sorted, fixed seed."""
    area = np.asarray(fm.upstream_area()).ravel()
    pool = np.flatnonzero(np.isfinite(area) & (area >= CHANNEL_M2))
    rng = np.random.default_rng(seed)
    return np.sort(rng.choice(pool, min(n, pool.size), replace=False))


def build_job(folder, size, n):
    """DEM (linked), outlets.csv and job.toml in ``folder``; returns the job path."""
    from bench_commands import dem_tif

    from basinkit import read_dem, route

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    dem = dem_tif(size)
    fm = route(read_dem(dem))
    cells = outlet_cells(fm, n)
    x, y = fm.terrain.xy_of(cells // fm.ncols, cells % fm.ncols)
    lines = ["id,x,y"] + [f"o{i:05d},{a:.3f},{b:.3f}" for i, (a, b) in enumerate(zip(x, y))]
    (folder / "outlets.csv").write_text("\n".join(lines) + "\n")
    (folder / "job.toml").write_text(
        '[job]\nname = "batch-scale benchmark"\nworkers = 2\n'
        f'[inputs]\ndem = "{dem}"\noutlets = "outlets.csv"\n'
        '[outlets]\nsnap_radius_m = 0\n'
        f'[channels]\nmin_area = {CHANNEL_M2}\nmin_order = 1\n'
        '[outputs]\nreport = true\n', encoding="utf-8")
    return folder / "job.toml", dem, cells


def pysheds_job(dem, cells_file):
    """pysheds routing (as ``bench_commands.pysheds_route``), then catchment + polygonize
    for every outlet (one process)."""
    from bench_commands import pysheds_route

    t0 = time.perf_counter()
    cells = np.load(cells_file)
    grid, z, fdir, _ = pysheds_route(dem)
    t_route = time.perf_counter() - t0
    nc = z.shape[1]
    npoly = 0
    for c in cells:
        catch = grid.catchment(x=int(c % nc), y=int(c // nc), fdir=fdir, xytype="index")
        npoly += sum(1 for _ in grid.polygonize(catch.astype(np.uint8), mask=catch))
    print(json.dumps({"route_s": t_route, "total_s": time.perf_counter() - t0,
                      "polygons": npoly}))


def timed_process(cmd, env):
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    _, status, ru = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    out = proc.stdout.read().decode()
    err = proc.stderr.read().decode(errors="replace")
    code = os.waitstatus_to_exitcode(status)
    if code not in (0, 1) or "Traceback" in err:
        raise SystemExit(f"{' '.join(map(str, cmd))} failed ({code}):\n{err[-3000:]}")
    return wall, ru.ru_maxrss / 1024.0, out, err


def env():
    e = dict(os.environ)
    e["PYTHONPATH"] = str(ROOT) + os.pathsep + e.get("PYTHONPATH", "")
    return e


def bench_job(size, n, runs, pysheds=True):
    tmp = Path(tempfile.mkdtemp(prefix="bench_batch_scale_"))
    try:
        job, dem, cells = build_job(tmp / "in", size, n)
        np.save(tmp / "cells.npy", cells)
        bk = [sys.executable, "-m", "basinkit.cli", "--log-json", "run", str(job), "-o",
              str(tmp / "run"), "--overwrite"]
        ps = [sys.executable, str(Path(__file__).resolve()), "_pysheds", str(dem),
              str(tmp / "cells.npy")]
        a, b, stages = [], [], []
        for i in range(runs):
            print(f"  run {i + 1}: load average {os.getloadavg()[0]:.2f}", flush=True)
            w, mem, _, log = timed_process(bk, env())
            st = stage_seconds(log)
            stages.append(st)
            a.append(w)
            print(f"    basinkit run: {w:.1f} s wall, peak {mem:.0f} MB; stages "
                  + ", ".join(f"{k} {v:.1f}" for k, v in st.items()), flush=True)
            if pysheds:
                w2, mem2, out, _ = timed_process(ps, env())
                r = json.loads(out.strip().splitlines()[-1])
                b.append(w2)
                print(f"    pysheds: {w2:.1f} s wall (routing {r['route_s']:.1f} s, "
                      f"{len(cells)} catchments + polygonize "
                      f"{r['total_s'] - r['route_s']:.1f} s), peak {mem2:.0f} MB; "
                      f"ratio {w2 / w:.2f}x", flush=True)
        print(f"{size}², {len(cells)} outlets: basinkit median {statistics.median(a):.1f} s"
              + (f", pysheds median {statistics.median(b):.1f} s, ratio (pairwise median) "
                 f"{statistics.median(y / x for x, y in zip(a, b)):.2f}x" if b else ""))
        files = list((tmp / "run").rglob("*"))
        print(f"  output: {sum(1 for f in files if f.is_file())} files, "
              f"{sum(f.stat().st_size for f in files if f.is_file()) / 2**20:.0f} MB")
        return {"basinkit_s": a, "pysheds_s": b, "stages": stages}
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def bench_stages(size, n, profile=None, only=None):
    from bench_core import dem_path

    from basinkit import route, terrain_from_array
    from basinkit.analysis.catchments import delineate
    from basinkit.workflow.steps.channels import build_network
    from basinkit.analysis.morphometry import morphometry_table

    z = np.load(dem_path(size))
    t = terrain_from_array(z, cellsize=CELL, crs="EPSG:32633")
    t0 = time.perf_counter()
    fm = route(t)
    print(f"route() {time.perf_counter() - t0:.2f} s", flush=True)
    cells = outlet_cells(fm, n)
    x, y = t.xy_of(cells // fm.ncols, cells % fm.ncols)
    pts = [(f"o{i:05d}", a, b) for i, (a, b) in enumerate(zip(x, y))]
    delineate(fm, pts[:5], snap_radius_m=0)  # kernels loaded
    res = {}

    def step(name, f, *a, **k):
        if only and not any(name.startswith(o) for o in only):
            return None
        if profile == name:
            import cProfile
            import pstats

            pr = cProfile.Profile()
            pr.enable()
        t0 = time.perf_counter()
        r = f(*a, **k)
        res[name] = time.perf_counter() - t0
        if profile == name:
            pr.disable()
            pstats.Stats(pr).sort_stats("cumulative").print_stats(30)
        print(f"  {name}: {res[name]:.2f} s", flush=True)
        return r

    d0 = delineate(fm, pts, snap_radius_m=0, polygons=False)
    step("delineate, no polygons", delineate, fm, pts, snap_radius_m=0, polygons=False)
    d = step("delineate with polygons", delineate, fm, pts, snap_radius_m=0, polygons=True)
    if d is not None:
        res["polygons"] = res["delineate with polygons"] - res["delineate, no polygons"]
        print(f"  polygons: {res['polygons']:.2f} s ({len(d.table)} outlets, "
              f"{int((d.table['upstream_outlet_count'] > 0).sum())} with outlets upstream)")
    tab = d0.table
    net = build_network(fm, CHANNEL_M2, None, tab["cell"].to_numpy(np.int64))
    step("channels (with geometry, split at the outlets)", build_network, fm,
         CHANNEL_M2, None, tab["cell"].to_numpy(np.int64))
    nested = bool((tab["upstream_outlet_count"] > 0).any())
    ids = np.arange(1, len(tab) + 1) if nested else tab["label"].to_numpy(np.int64)
    step("morphometry", morphometry_table, fm, d0.labels, tab["cell"].to_numpy(np.int64),
         polygons=d.polygons if (nested and d is not None) else None,
         ids=ids, network=net, return_curves=True,
         label_ranges=d0.label_ranges() if nested else None)
    step("profiles (step, files written, 2 workers)", _profiles_step, fm, d0, net, pts)
    return res


def _profiles_step(fm, d, net, pts):
    import pandas as pd

    from basinkit.workflow.outlets import PlacedOutlets
    from basinkit.workflow.output import OutputFolder
    from basinkit.workflow.steps import ProfileSettings
    from basinkit.workflow.steps.profiles import profiles_step

    tmp = Path(tempfile.mkdtemp(prefix="bench_profiles_"))
    try:
        placed = PlacedOutlets(d.table, pd.DataFrame(columns=["outlet_id", "source",
                                                              "x_given", "y_given",
                                                              "reason"]), len(d.table))
        out = OutputFolder(tmp / "out").open()
        profiles_step(out, fm, placed, network=net,
                      settings=ProfileSettings(figures=False, min_order=1))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def main():
    if len(sys.argv) > 1 and sys.argv[1] == "_pysheds":
        return pysheds_job(sys.argv[2], sys.argv[3])
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", choices=["job", "stages"])
    ap.add_argument("--size", type=int, default=2048)
    ap.add_argument("--outlets", type=int, default=1000)
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--no-pysheds", action="store_true")
    ap.add_argument("--profile", help="cProfile one stage of `stages` (its name)")
    ap.add_argument("--only", nargs="+", help="stages to time (name prefixes: delineate "
                    "channels morphometry profiles)")
    a = ap.parse_args()
    print(f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, load average "
          f"{os.getloadavg()[0]:.2f}, {os.cpu_count()} cores", flush=True)
    if a.what == "job":
        bench_job(a.size, a.outlets, a.runs, not a.no_pysheds)
    else:
        bench_stages(a.size, a.outlets, a.profile, a.only)


if __name__ == "__main__":
    main()
