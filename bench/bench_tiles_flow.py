"""The tiled flow passes (basinkit.tiles) beside the in-memory path on the same grid.

Run by hand (not part of the tests):

    python bench/bench_tiles_flow.py --size 4096 --tile 1024 --outlets 1000

The parent routes a fractal DEM in memory (fixed seed, cached under bench/out/), writes its
D8 directions as tiles into a tile folder under bench/out/, and times the in-memory
equivalents: the stack/count/area sweep, the labels of the outlets (one pass over the
stack) and extract_channels without geometry. A child process then runs the tiled passes
on the folder alone (flow_accumulation, catchment_labels, channel_orders), so that its
peak memory (VmHWM) is that of the tiled path (of the client only, with a cluster);
``--scheduler`` gives a dask scheduler (default: threads here; ``synchronous``; or an
address), ``--local-cluster N`` starts a dask.distributed cluster of N worker processes. The parent checks the tiled
layers against the in-memory arrays. Figures go to stdout; copy them to bench/RESULTS.md
with the date and the machine's load.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_core import dem_path  # noqa: E402


def rss_mb():
    """Peak resident memory of this process, MB: VmHWM, which a new program starts afresh
    (ru_maxrss keeps the parent's peak across fork and exec on Linux)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def child(folder, cells_file, threshold, scheduler, workers):
    from basinkit.io.tile_folder import TileFolder
    from basinkit.tiles import catchment_labels, channel_orders, flow_accumulation

    store = TileFolder.open(folder)
    lay = store.layout
    row_area = np.load(Path(folder) / "row_area.npy")
    cells = np.load(cells_file)
    out = {"rss_start_mb": rss_mb()}
    t = time.perf_counter()
    flow_accumulation(lay, store, row_area, scheduler=scheduler, workers=workers)
    out["accumulation_s"] = time.perf_counter() - t
    t = time.perf_counter()
    res = catchment_labels(lay, store, cells, scheduler=scheduler, workers=workers)
    np.save(Path(folder) / "outlet_labels.npy", res.label)
    out["labels_s"] = time.perf_counter() - t
    t = time.perf_counter()
    channel_orders(lay, store, threshold, scheduler=scheduler, workers=workers)
    out["orders_s"] = time.perf_counter() - t
    from affine import Affine

    from basinkit.terrain.geometry import CellGeometry
    from basinkit.tiles import catchment_polygons, catchment_table, channel_segments

    g = np.load(Path(folder) / "geometry.npz")
    geometry = CellGeometry(g["dx"], g["dy_down"], g["diag_down"], g["area"], False)
    t = time.perf_counter()
    segs, _ = channel_segments(lay, store, threshold, geometry, outlet_cells=cells,
                               transform=Affine(10, 0, 0, 0, -10, lay.nrows * 10),
                               lines=True, scheduler=scheduler, workers=workers)
    out["segments_s"] = time.perf_counter() - t
    out["segments"] = len(segs)
    t = time.perf_counter()
    catchment_table(lay, store, res, row_area, scheduler=scheduler, workers=workers)
    out["table_s"] = time.perf_counter() - t
    t = time.perf_counter()
    catchment_polygons(lay, store, res, Affine(10, 0, 0, 0, -10, lay.nrows * 10),
                       scheduler=scheduler, workers=workers)
    out["polygons_s"] = time.perf_counter() - t
    out["rss_peak_mb"] = rss_mb()
    print(json.dumps(out))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=4096)
    ap.add_argument("--tile", type=int, default=1024)
    ap.add_argument("--outlets", type=int, default=1000)
    ap.add_argument("--threshold-cells", type=int, default=1000)
    ap.add_argument("--scheduler", default=None)
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--local-cluster", type=int, default=0, metavar="N",
                    help="run the tiled passes on a dask.distributed LocalCluster of N "
                         "worker processes (one thread each) started by the child")
    ap.add_argument("--child", nargs=3, metavar=("FOLDER", "CELLS", "THRESHOLD"))
    a = ap.parse_args()
    if a.child:
        if a.local_cluster:
            from distributed import LocalCluster

            with LocalCluster(n_workers=a.local_cluster, processes=True,
                              threads_per_worker=1, dashboard_address=None) as cluster:
                child(a.child[0], a.child[1], float(a.child[2]), cluster.scheduler_address,
                      None)
        else:
            child(a.child[0], a.child[1], float(a.child[2]), a.scheduler, a.workers)
        return

    from basinkit import route, terrain_from_array
    from basinkit.analysis.channels import extract_channels
    from basinkit.io.tile_folder import TileFolder
    from basinkit.routing import _stack
    from basinkit.tiles import TileLayout

    z = np.load(dem_path(a.size))
    terrain = terrain_from_array(z, cellsize=10)
    t = time.perf_counter()
    fm = route(terrain)
    t_route = time.perf_counter() - t
    area_row = terrain.geometry.area
    t = time.perf_counter()
    _stack.stack_count_area(fm.receiver, fm.ncols, area_row)
    t_sweep = time.perf_counter() - t
    rng = np.random.default_rng(0)
    cells = rng.choice(np.flatnonzero(terrain.valid.ravel()), a.outlets, replace=False)
    t = time.perf_counter()
    labels0 = fm.label_outlets(cells)
    t_labels = time.perf_counter() - t
    threshold = a.threshold_cells * 100.0
    t = time.perf_counter()
    net = extract_channels(fm, threshold, geometry=False)
    t_channels = time.perf_counter() - t
    from basinkit.analysis.catchments import delineate

    r, c = np.divmod(cells, fm.ncols)
    x, y = terrain.xy_of(r, c)
    t = time.perf_counter()
    delineate(fm, [(f"o{i}", a_, b_) for i, (a_, b_) in enumerate(zip(x, y))],
              snap_radius_m=0)
    t_delineate = time.perf_counter() - t
    t = time.perf_counter()
    net_split = extract_channels(fm, threshold, outlet_cells=cells, geometry=False)
    t_segments = time.perf_counter() - t

    folder = HERE / "out" / f"tiles_{a.size}_{a.tile}"
    shutil.rmtree(folder, ignore_errors=True)
    lay = TileLayout.square(a.size, a.size, a.tile)
    store = TileFolder(folder, lay)
    d = fm.direction_d8()
    for (ti, tj), part in lay.split(d).items():
        store.write("directions", ti, tj, part)
    np.save(folder / "row_area.npy", area_row)
    g = terrain.geometry
    np.savez(folder / "geometry.npz", dx=g.dx, dy_down=g.dy_down, diag_down=g.diag_down,
             area=g.area)
    cells_file = folder / "outlets.npy"
    np.save(cells_file, cells)
    cmd = [sys.executable, __file__, "--child", str(folder), str(cells_file), str(threshold)]
    if a.scheduler:
        cmd += ["--scheduler", a.scheduler]
    if a.workers:
        cmd += ["--workers", str(a.workers)]
    if a.local_cluster:
        cmd += ["--local-cluster", str(a.local_cluster)]
    res = json.loads(subprocess.run(cmd, check=True, capture_output=True,
                                    text=True).stdout.strip().splitlines()[-1])

    def grid(layer):
        return lay.join({k: store.read(layer, *k) for k in lay.tiles()})

    same = {
        "cell_count": bool(np.array_equal(grid("cell_count"), fm.accumulation())),
        "upstream_area_m2": bool(np.array_equal(grid("upstream_area_m2"),
                                                fm.accumulation(unit="m2"), equal_nan=True)),
        "strahler": bool(np.array_equal(grid("strahler_order"), net.strahler)),
        # label_outlets numbers the outlets in their order, the tiled path depth-first
        "labels": bool(np.array_equal(grid("catchment_labels"), np.concatenate(
            [[0], np.load(folder / "outlet_labels.npy")])[labels0])),
    }
    print(f"grid {a.size}² ({a.size * a.size / 1e6:.1f} M cells), tiles {a.tile}², "
          f"{a.outlets} outlets, channels from {a.threshold_cells} cells; "
          f"scheduler {f'LocalCluster of {a.local_cluster} processes' if a.local_cluster else a.scheduler or 'threads'}")
    print(f"in memory: route {t_route:.2f} s (fill, D8, sweep); sweep alone "
          f"{t_sweep:.2f} s; labels {t_labels:.2f} s; channels {t_channels:.2f} s; "
          f"delineate with table and polygons {t_delineate:.2f} s; channels split at "
          f"the outlets {t_segments:.2f} s ({len(net_split.segments)} segments)")
    print(f"tiled (child process): accumulation {res['accumulation_s']:.2f} s, labels "
          f"{res['labels_s']:.2f} s, orders {res['orders_s']:.2f} s, segments "
          f"{res['segments_s']:.2f} s ({res['segments']}, with lines and junctions), catchment table "
          f"{res['table_s']:.2f} s, polygons {res['polygons_s']:.2f} s; peak RSS "
          f"{res['rss_peak_mb']:.0f} MB (start {res['rss_start_mb']:.0f} MB)")
    print("equal to the in-memory path:", same)
    shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
