"""Channel network and morphometry benchmark, basinkit beside pysheds in the same run.

Run by hand (not part of the tests):

    python bench/bench_channels.py            # 4096 x 4096
    python bench/bench_channels.py --size 1024

What is timed (same fractal DEM, same D8 directions, same channel mask, same machine):
- basinkit: ``extract_channels`` with a 1000-cell threshold: channel mask, Strahler order,
  Shreve magnitude, segments with their table and line geometries, junctions
  (also without geometries);
- pysheds 0.5: ``Grid.stream_order`` + ``Grid.extract_river_network`` from our directions
  and our channel mask;
- basinkit: ``morphometry_table`` for 1 000 catchments (label grid from
  ``FlowModel.label_outlets``) with the network measures.

Routing itself is not timed here (see bench_core.py). Each step runs once after a warm-up
on a small grid (numba compilation is not counted).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))


from bench_core import dem_path, fractal  # noqa: E402  (the same surface and cache)


def timed(f, *a, **k):
    t = time.perf_counter()
    r = f(*a, **k)
    return r, time.perf_counter() - t


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=4096)
    ap.add_argument("--threshold-cells", type=int, default=1000)
    ap.add_argument("--catchments", type=int, default=1000)
    ap.add_argument("--cellsize", type=float, default=10.0)
    ap.add_argument("--no-pysheds", action="store_true")
    args = ap.parse_args()

    from basinkit import route, terrain_from_array
    from basinkit.analysis.channels import extract_channels
    from basinkit.analysis.morphometry import morphometry_table

    n = args.size
    cs = args.cellsize
    # warm-up (numba compilation) on a small grid
    w = route(terrain_from_array(fractal(128, seed=1), cellsize=cs))
    wn = extract_channels(w, 20 * cs * cs)
    morphometry_table(w, w.label_outlets([int(np.argmax(w.accumulation()))]),
                      [int(np.argmax(w.accumulation()))], network=wn)

    z = np.load(dem_path(n))
    fm, t_route = timed(route, terrain_from_array(z, cellsize=cs))
    print(f"grid {n} x {n}, cell {cs} m; route (not part of the comparison) {t_route:.2f} s")
    th = args.threshold_cells * cs * cs
    fm.accumulation(unit="m2", method="d8")  # the flow model's own product, cached
    net, t_net = timed(extract_channels, fm, th)
    _, t_net_ng = timed(extract_channels, fm, th, geometry=False)
    print(f"basinkit extract_channels ({args.threshold_cells} cells): {t_net:.3f} s with "
          f"geometries, {t_net_ng:.3f} s table only; {len(net.segments):,} segments, "
          f"{len(net.junctions):,} junctions, highest order {net.max_order()}")

    if not args.no_pysheds:
        if not hasattr(np, "in1d"):  # pysheds 0.5 still calls np.in1d (removed in NumPy 2.4)
            np.in1d = np.isin
        from affine import Affine
        from pysheds.grid import Grid
        from pysheds.view import Raster, ViewFinder

        dirmap = tuple(1000 + 45 * k for k in range(8))
        vf = ViewFinder(affine=Affine(cs, 0, 0, 0, -cs, n * cs), shape=z.shape,
                        nodata=np.int64(0))
        grid = Grid(viewfinder=vf)
        d = fm.direction_d8().astype(np.int64)
        fdir = Raster(np.where(d >= 0, d + 1000, 0), viewfinder=vf)
        vfm = ViewFinder(affine=vf.affine, shape=z.shape, nodata=np.bool_(False))
        mask = Raster(net.mask.copy(), viewfinder=vfm)
        small = Raster(net.mask[:64, :64].copy(), viewfinder=ViewFinder(
            affine=vf.affine, shape=(64, 64), nodata=np.bool_(False)))
        sg = Grid(viewfinder=small.viewfinder)
        sf = Raster(np.asarray(fdir)[:64, :64].copy(), viewfinder=ViewFinder(
            affine=vf.affine, shape=(64, 64), nodata=np.int64(0)))
        sg.stream_order(sf, small, dirmap=dirmap)  # warm-up
        _, t_so = timed(grid.stream_order, fdir, mask, dirmap=dirmap)
        _, t_rn = timed(grid.extract_river_network, fdir, mask, dirmap=dirmap)
        tp = t_so + t_rn
        print(f"pysheds stream_order {t_so:.3f} s + extract_river_network {t_rn:.3f} s = "
              f"{tp:.3f} s")
        print(f"ratio pysheds / basinkit (with geometries): {tp / t_net:.1f}x")

    acc = fm.accumulation().ravel()
    rng = np.random.default_rng(0)
    cand = np.flatnonzero((acc >= 100) & (acc <= 20000))
    k = min(args.catchments, cand.size)
    outlets = np.sort(rng.choice(cand, k, replace=False))
    labels, t_lab = timed(fm.label_outlets, outlets)
    net_split = extract_channels(fm, th, outlet_cells=outlets, geometry=False)
    table, t_m = timed(morphometry_table, fm, labels, outlets, network=net_split)
    bad = int((table["error"] != "").sum())
    print(f"morphometry_table for {k} catchments (label grid; labelling {t_lab:.3f} s "
          f"not included): {t_m:.3f} s ({1e3 * t_m / k:.2f} ms each, {bad} failures); "
          f"mean catchment {table['cell_count'].mean():.0f} cells")


if __name__ == "__main__":
    main()
