"""Catchment benchmark: labels for many outlets in one pass, polygons and table for many
catchments, and pysheds' per-outlet ``catchment`` on a sample of the same outlets.

Run by hand (not part of the tests):

    python bench/bench_catchments.py --size 4096
    python bench/bench_catchments.py --size 1024 --outlets 10000 --catchments 1000

The DEM is the spectral-synthesis fractal surface of bench_core.py (fixed seed, cached
under bench/out/). Outlets are random cells (fixed seed) with at least 50 cells upstream,
so many are nested. Figures go to stdout; copy them to bench/RESULTS.md.

Timed (same DEM, same process, same run):
- labels: ``FlowModel.label_outlets`` for N outlets (one forward pass over the stack), and
  the whole label step of ``delineate`` (labels, outlet tree, depth-first relabelling);
- table: ``delineate(..., polygons=False)`` for N outlets (snapping, tree, per-catchment
  table);
- polygons + table: ``delineate(..., polygons=True)`` for M outlets, with 1 and 2
  threads for the validity check (the tracing is one pass in this process);
- pysheds 0.5 ``Grid.catchment`` per outlet on a sample, extrapolated to N outlets; its
  masks are checked against ours on the sample.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent

if not hasattr(np, "in1d"):  # pysheds 0.5 still calls np.in1d (removed in NumPy 2.4)
    np.in1d = np.isin


def load_dem(n):
    """The cached fractal DEM of bench_core.py (same surface, same file)."""
    from bench_core import dem_path

    return np.load(dem_path(n))


def timed(f, *a, **k):
    t = time.perf_counter()
    r = f(*a, **k)
    return r, time.perf_counter() - t


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--size", type=int, default=4096)
    ap.add_argument("--outlets", type=int, default=10000)
    ap.add_argument("--catchments", type=int, default=1000)
    ap.add_argument("--pysheds-sample", type=int, default=20)
    ap.add_argument("--cellsize", type=float, default=10.0)
    args = ap.parse_args(argv)

    from basinkit import route, terrain_from_array
    from basinkit.analysis.catchments import _outlet_tree, delineate

    n = args.size
    z = load_dem(n)
    t = terrain_from_array(z, cellsize=args.cellsize, crs="EPSG:32633")
    fm, t_route = timed(route, t)
    print(f"grid {n} x {n}, route (fill + D8 + stack) {t_route:.2f} s, "
          f"{os.cpu_count()} CPUs")
    count = fm.accumulation().ravel()
    rng = np.random.default_rng(1)
    pool = np.flatnonzero(count >= 50)
    cells = np.sort(rng.choice(pool, min(args.outlets, pool.size), replace=False))
    nc = fm.ncols
    x, y = t.xy_of(cells // nc, cells % nc)
    pts = [(f"o{i}", a, b) for i, (a, b) in enumerate(zip(x, y))]

    # warm up the compiled kernels on a small call
    fm.label_outlets(cells[:10])
    _outlet_tree(fm, cells[:10])
    delineate(fm, pts[:5], snap_radius_m=0)

    _, t_lab = timed(fm.label_outlets, cells)
    (labels, _, size, _), t_tree = timed(_outlet_tree, fm, cells)
    nested = int((size[1:] > 1).sum())
    print(f"labels, {cells.size} outlets: one stack pass {t_lab:.3f} s; with outlet tree "
          f"and depth-first relabelling {t_tree:.3f} s ({nested} outlets have outlets "
          "upstream)")
    d, t_table = timed(delineate, fm, pts, snap_radius_m=0, polygons=False)
    print(f"delineate without polygons, {len(d.table)} outlets (locate, table): "
          f"{t_table:.2f} s")
    m = min(args.catchments, len(pts))
    sel = rng.choice(len(pts), m, replace=False)
    for w in (1, 2):
        d2, t_poly = timed(delineate, fm, [pts[i] for i in np.sort(sel)], snap_radius_m=0,
                           polygons=True, workers=w)
        print(f"delineate with polygons and table, {len(d2.table)} catchments, "
              f"workers={w}: {t_poly:.2f} s")

    try:
        from pysheds.grid import Grid
        from pysheds.view import Raster, ViewFinder
    except ImportError:
        print("pysheds not installed: no comparison")
        return 0
    from affine import Affine

    zp = np.pad(fm.terrain.elevation, 1)
    vf = ViewFinder(affine=Affine(1, 0, 0, 0, -1, zp.shape[0]), shape=zp.shape,
                    nodata=np.float64(np.nan))
    grid = Grid(viewfinder=vf)
    dirs = np.pad(fm.direction_d8().astype(np.int64), 1, constant_values=-1)
    fvf = ViewFinder(affine=vf.affine, shape=zp.shape, nodata=np.int64(0))
    fdir = Raster(np.where(dirs >= 0, dirs + 1000, 0), viewfinder=fvf)
    dirmap = tuple(1000 + 45 * k for k in range(8))
    sample = rng.choice(len(d.table), min(args.pysheds_sample, len(d.table)), replace=False)
    c0 = int(d.table["cell"][sample[0]])
    grid.catchment(x=c0 % nc + 1, y=c0 // nc + 1, fdir=fdir, dirmap=dirmap,
                   xytype="index")  # warm-up (compilation)
    t0 = time.perf_counter()
    masks = []
    for j in sample:
        c = int(d.table["cell"][j])
        masks.append(np.asarray(grid.catchment(x=c % nc + 1, y=c // nc + 1, fdir=fdir,
                                               dirmap=dirmap, xytype="index")))
    per = (time.perf_counter() - t0) / len(sample)
    same = sum(np.array_equal(mk[1:-1, 1:-1] != 0, d.catchment_mask(d.table["outlet_id"][j]))
               for mk, j in zip(masks, sample))
    total = per * cells.size
    print(f"pysheds catchment: {per * 1e3:.1f} ms per outlet ({len(sample)} sampled, "
          f"{same}/{len(sample)} masks identical to ours), extrapolated {total:.1f} s for "
          f"{cells.size} outlets")
    print(f"ratio pysheds / basinkit labels: {total / t_tree:.0f}x (tree included), "
          f"{total / t_lab:.0f}x (stack pass only)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
