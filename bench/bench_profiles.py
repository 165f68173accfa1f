"""Profiles benchmark: channel profiles, χ and k_sn for every channel of Strahler order ≥ 2.

Run by hand (not part of the tests):

    python bench/bench_profiles.py --size 4096
    python bench/bench_profiles.py --size 1024 --min-area-cells 100

The DEM is the spectral-synthesis fractal surface of bench_core.py (fixed seed, cached under
bench/out/), 30 m cells. Routing and channel extraction are timed but are not part of the
profile budget; the budget covers :func:`basinkit.analysis.profiles.channel_profiles` (Hack-style
profile decomposition, distance from base level, χ, windowed slope, the node table) and
:func:`basinkit.analysis.profiles.steepness` (k_sn per segment). Every grid exit is base level.
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=4096, help="grid size (cells per side)")
    ap.add_argument("--cell", type=float, default=30.0, help="cell size (m)")
    ap.add_argument("--min-area-cells", type=float, default=100.0,
                    help="channel threshold in cells")
    ap.add_argument("--min-order", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args(argv)

    from bench_core import dem_path

    from basinkit import route, terrain_from_array
    from basinkit.analysis import profiles as P
    from basinkit.analysis.steepness import find_knickpoints, steepness
    from basinkit.analysis.channels import extract_channels

    # warm-up: numba kernels (cached on disk) on a tiny grid
    zz = np.add.outer(np.arange(20.0, 0, -1), np.abs(np.arange(15.0) - 7))
    fm0 = route(terrain_from_array(zz, cellsize=10))
    n0 = extract_channels(fm0, 300, geometry=False)
    steepness(P.channel_profiles(fm0, n0, min_order=1))

    z = np.load(dem_path(a.size))
    t = time.perf_counter()
    fm = route(terrain_from_array(z, cellsize=a.cell), conditioning="fill")
    t_route = time.perf_counter() - t
    t = time.perf_counter()
    net = extract_channels(fm, a.min_area_cells * a.cell ** 2, geometry=False)
    t_chan = time.perf_counter() - t
    times = []
    for _ in range(a.repeat):
        t = time.perf_counter()
        nodes = P.channel_profiles(fm, net, min_order=a.min_order)
        t1 = time.perf_counter()
        st = steepness(nodes)
        t2 = time.perf_counter()
        times.append((t1 - t, t2 - t1))
    best = min(times, key=lambda p: p[0] + p[1])
    t = time.perf_counter()
    kp = find_knickpoints(nodes)
    t_knick = time.perf_counter() - t
    res = {
        "size": a.size, "cells": int(z.size), "route_s": round(t_route, 3),
        "channels_s": round(t_chan, 3), "channel_nodes": int(len(nodes)),
        "profiles": int(nodes["profile_id"].nunique()), "segments": int(len(st)),
        "channel_profiles_s": round(best[0], 3), "steepness_s": round(best[1], 3),
        "profiles_chi_ksn_s": round(best[0] + best[1], 3),
        "knickpoints_s": round(t_knick, 3), "knickpoints": int(len(kp)),
        "peak_rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1),
    }
    print(json.dumps(res, indent=2))
    return res


if __name__ == "__main__":
    main()
