"""Design-flow benchmark: time of concentration, runoff and the design hydrograph for many
(nested) outlets in one call.

Run by hand (not part of the tests):

    python bench/bench_design_flows.py --size 1024 --outlets 1000

The DEM is the fractal surface of bench_core.py (fixed seed, cached under bench/out/).
Outlets are random cells (fixed seed) with at least 2 000 cells upstream, so many are
nested. A CN raster of four values (random per 16-cell block) exercises the per-catchment
value sums. Timed: ``design_flows`` with a uniform CN and with the CN raster
(``runoff_per_cell``), the 24-hour NRCS type II storm and all three Tc methods; figures
go to stdout, copy them to bench/RESULTS.md.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--size", type=int, default=1024)
    ap.add_argument("--outlets", type=int, default=1000)
    ap.add_argument("--cellsize", type=float, default=10.0)
    args = ap.parse_args(argv)

    from bench_core import dem_path

    from basinkit import delineate, route, terrain_from_array
    from basinkit.hydrology.concentration import VelocityMethodInputs
    from basinkit.hydrology.design import DesignFlowSettings, design_flows
    from basinkit.hydrology.rainfall import design_storm

    z = np.load(dem_path(args.size))
    fm = route(terrain_from_array(z, cellsize=args.cellsize, crs="EPSG:32633"))
    count = fm.accumulation().ravel()
    rng = np.random.default_rng(1)
    pool = np.flatnonzero(count >= 2000)
    cells = np.sort(rng.choice(pool, min(args.outlets, pool.size), replace=False))
    x, y = fm.terrain.xy_of(cells // fm.ncols, cells % fm.ncols)
    d = delineate(fm, [(f"o{i}", a, b) for i, (a, b) in enumerate(zip(x, y))],
                  snap_radius_m=0, polygons=False)
    nested = int((d.table["upstream_outlet_count"] > 0).sum())
    print(f"grid {args.size} x {args.size}, {len(d.table)} outlets ({nested} with outlets "
          f"upstream), {os.cpu_count()} CPUs")
    vel = VelocityMethodInputs(sheet_flow_n=0.24, p2_24h_mm=60.0, channel_n=0.05,
                               hydraulic_radius_m=0.8, channel_threshold_m2=2e5)
    storm = design_storm("150mm", "24h", "nrcs_type_ii")
    blocks = rng.choice([55.0, 70.0, 80.0, 92.0], size=(args.size // 16 + 1,) * 2)
    cn_grid = np.kron(blocks, np.ones((16, 16)))[:args.size, :args.size]
    design_flows(fm, d, DesignFlowSettings(storm=storm, curve_number=75.0, velocity=vel),
                 outlet_ids=["o0"])  # warm-up
    for label, cn, mode in (("uniform CN", 75.0, "area_weighted_cn"),
                            ("CN raster, runoff per cell", cn_grid, "runoff_per_cell")):
        s = DesignFlowSettings(storm=storm, curve_number=cn, cn_weighting=mode, velocity=vel)
        t0 = time.perf_counter()
        res = design_flows(fm, d, s)
        dt = time.perf_counter() - t0
        print(f"{label}: {dt:.2f} s for {len(d.table)} outlets ({1e3 * dt / len(d.table):.1f}"
              f" ms each); {len(res.hydrographs)} hydrograph rows, {len(res.segments)} "
              f"segments, {len(res.errors)} errors")
    return 0


if __name__ == "__main__":
    sys.exit(main())
