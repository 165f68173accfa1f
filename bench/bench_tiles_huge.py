"""The billion-cell benchmark of issue 14: a synthetic DEM of up to 32 768 x 32 768 cells made
tile by tile, routed with ``basinkit route --max-memory`` and its channel network ordered
with ``basinkit channels``, as a user would run them.

Run by hand (never in the tests); the data goes outside the repository:

    python bench/bench_tiles_huge.py generate --size 8192 --root /work/scratch/huge
    python bench/bench_tiles_huge.py run --size 8192 --root /work/scratch/huge
    python bench/bench_tiles_huge.py compare --size 8192 --root /work/scratch/huge
    python bench/bench_tiles_huge.py cluster --size 8192 --workers 2 --root /work/scratch/huge

``generate`` writes ``ROOT/dem_N/`` (a folder of 4096² GeoTIFF tiles, DEFLATE, 256² blocks,
EPSG:32633, 10 m cells), never holding more than one tile. The terrain is a function of the
global cell coordinates only, so it is continuous across tiles: a tilt towards the south edge,
meandering north–south valleys, an egg-crate of basins, three octaves of value noise and
per-cell noise from a hash of the global (row, column), rounded to 0.1 m (flats).

``run`` times ``basinkit --log-json route DEM -o FLOW --max-memory 3GB`` and then
``basinkit --log-json channels FLOW -o CHANNELS --min-area 1km2``, each under
``/usr/bin/time -v`` (maximum resident size of the process), while a sampler adds up the
resident memory of the whole process tree every second (psutil) and the bytes of the
working tile folder and outputs every 10 s.

``compare`` routes the same DEM in memory (through a VRT of the tile folder) and compares
the flow folders' rasters cell for cell, reading both by windows.

``cluster`` routes on a dask.distributed LocalCluster of 1 or 2 worker processes started
here (``--scheduler tcp://...``), sampling the client's and the workers' memory.

Figures go to stdout (one JSON line per stage at the end); copy them to bench/RESULTS.md.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _stages import stage_seconds  # noqa: E402

CELL = 10.0
X0, Y0 = 500_000.0, 5_400_000.0
CRS = "EPSG:32633"
GEN_TILE = 4096
PY = "/work/venv/bin/python" if Path("/work/venv/bin/python").exists() else sys.executable


# --- terrain -------------------------------------------------------------------------------

def _kernels():
    from numba import njit, prange

    @njit(inline="always")
    def mix(ix, iy, seed):
        # splitmix64 of the packed global coordinates: a uniform value in [0, 1)
        h = (np.uint64(ix) * np.uint64(0x9E3779B97F4A7C15)) ^ \
            (np.uint64(iy) * np.uint64(0xC2B2AE3D27D4EB4F)) ^ np.uint64(seed)
        h = (h ^ (h >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        h = (h ^ (h >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        h = h ^ (h >> np.uint64(31))
        return np.float64(h >> np.uint64(11)) * (1.0 / 9007199254740992.0)

    @njit(inline="always")
    def value_noise(r, c, spacing, seed):
        fy = r / spacing
        fx = c / spacing
        iy = int(math.floor(fy))
        ix = int(math.floor(fx))
        ty = fy - iy
        tx = fx - ix
        ty = ty * ty * (3.0 - 2.0 * ty)
        tx = tx * tx * (3.0 - 2.0 * tx)
        a = mix(ix, iy, seed)
        b = mix(ix + 1, iy, seed)
        d = mix(ix, iy + 1, seed)
        e = mix(ix + 1, iy + 1, seed)
        top = a + (b - a) * tx
        bot = d + (e - d) * tx
        return 2.0 * (top + (bot - top) * ty) - 1.0

    @njit(parallel=True)
    def terrain(r0, c0, h, w):
        out = np.empty((h, w), dtype=np.float32)
        two_pi = 2.0 * math.pi
        for i in prange(h):
            r = r0 + i
            y = r * 10.0
            for j in range(w):
                c = c0 + j
                x = c * 10.0
                z = 1500.0 - 0.004 * y                        # tilt to the south edge
                z += 120.0 * math.sin(two_pi * x / 24000.0     # meandering N-S valleys
                                      + 1.5 * math.sin(two_pi * y / 90000.0))
                z += 12.0 * math.sin(two_pi * x / 5100.0) * math.sin(two_pi * y / 7300.0)
                z += 20.0 * value_noise(r, c, 256.0, 11)
                z += 3.0 * value_noise(r, c, 32.0, 23)
                z += 0.5 * value_noise(r, c, 4.0, 37)
                z += 0.2 * (2.0 * mix(c, r, 53) - 1.0)       # per-cell noise: pits
                out[i, j] = np.float32(math.floor(z * 10.0 + 0.5) / 10.0)  # 0.1 m steps
        return out

    return terrain


def generate(size: int, root: Path) -> dict:
    """Write ``root/dem_SIZE/`` tile by tile; returns the timing and bytes."""
    import rasterio
    from rasterio.transform import from_origin

    terrain = _kernels()
    folder = root / f"dem_{size}"
    tmp = root / f".dem_{size}.part"
    shutil.rmtree(tmp, ignore_errors=True)
    tmp.mkdir(parents=True)
    tile = min(GEN_TILE, size)
    n = size // tile
    t0 = time.perf_counter()
    t_compute = 0.0
    for ti in range(n):
        for tj in range(n):
            r0, c0 = ti * tile, tj * tile
            a = time.perf_counter()
            z = terrain(r0, c0, tile, tile)
            t_compute += time.perf_counter() - a
            tr = from_origin(X0 + c0 * CELL, Y0 - r0 * CELL, CELL, CELL)
            with rasterio.open(tmp / f"dem_{ti:02d}_{tj:02d}.tif", "w", driver="GTiff",
                               width=tile, height=tile, count=1, dtype="float32", crs=CRS,
                               transform=tr, nodata=-9999.0, tiled=True, blockxsize=256,
                               blockysize=256, compress="deflate", predictor=3) as ds:
                ds.write(z, 1)
            del z
    shutil.rmtree(folder, ignore_errors=True)
    os.replace(tmp, folder)
    wall = time.perf_counter() - t0
    nbytes = sum(f.stat().st_size for f in folder.iterdir())
    return {"stage": "generate", "size": size, "tiles": n * n, "tile": tile,
            "seconds": round(wall, 1), "compute_seconds": round(t_compute, 1),
            "bytes": nbytes}


def write_vrt(size: int, root: Path) -> Path:
    """A VRT mosaic of the tile folder (the in-memory route reads one raster file)."""
    folder = root / f"dem_{size}"
    tile = min(GEN_TILE, size)
    parts = []
    for f in sorted(folder.glob("dem_*.tif")):
        ti, tj = (int(v) for v in f.stem.split("_")[1:])
        parts.append(
            f'<ComplexSource><SourceFilename relativeToVRT="0">{f}</SourceFilename>'
            f'<SourceBand>1</SourceBand><SrcRect xOff="0" yOff="0" xSize="{tile}" '
            f'ySize="{tile}"/><DstRect xOff="{tj * tile}" yOff="{ti * tile}" '
            f'xSize="{tile}" ySize="{tile}"/><NODATA>-9999</NODATA></ComplexSource>')
    from rasterio.crs import CRS as RCRS

    wkt = RCRS.from_string(CRS).to_wkt().replace("&", "&amp;").replace("<", "&lt;")
    xml = (f'<VRTDataset rasterXSize="{size}" rasterYSize="{size}"><SRS>{wkt}</SRS>'
           f'<GeoTransform>{X0}, {CELL}, 0, {Y0}, 0, {-CELL}</GeoTransform>'
           f'<VRTRasterBand dataType="Float32" band="1"><NoDataValue>-9999</NoDataValue>'
           + "".join(parts) + "</VRTRasterBand></VRTDataset>")
    p = root / f"dem_{size}.vrt"
    p.write_text(xml)
    return p


# --- measuring a command -------------------------------------------------------------------

def _tree_rss(proc) -> tuple[int, int]:
    """(sum of RSS over the process and its descendants, count of processes)."""
    import psutil

    total, n = 0, 0
    try:
        procs = [proc] + proc.children(recursive=True)
    except psutil.Error:
        return 0, 0
    for p in procs:
        try:
            total += p.memory_info().rss
            n += 1
        except psutil.Error:
            pass
    return total, n


def _folder_bytes(paths) -> int:
    total = 0
    for p in paths:
        if not p.exists():
            continue
        for dirpath, _, files in os.walk(p):
            for f in files:
                try:
                    total += os.stat(os.path.join(dirpath, f)).st_size
                except OSError:
                    pass
    return total


class Sampler(threading.Thread):
    """RSS of a process tree each second (plus extra trees, e.g. a cluster's workers) and
    the bytes of some folders every 10 s."""

    def __init__(self, pid, folders=(), extra_pids=()):
        super().__init__(daemon=True)
        import psutil

        self.proc = psutil.Process(pid)
        self.extra = [psutil.Process(p) for p in extra_pids]
        self.folders = [Path(f) for f in folders]
        self.stop = threading.Event()
        self.peak_tree = self.peak_extra = self.peak_both = 0
        self.peak_procs = 0
        self.peak_disk = 0
        self.min_free = shutil.disk_usage("/work").free

    def run(self):
        k = 0
        while not self.stop.is_set():
            rss, n = _tree_rss(self.proc)
            ex = sum(_tree_rss(p)[0] for p in self.extra)
            self.peak_tree = max(self.peak_tree, rss)
            self.peak_extra = max(self.peak_extra, ex)
            self.peak_both = max(self.peak_both, rss + ex)
            self.peak_procs = max(self.peak_procs, n)
            if k % 10 == 0:
                self.peak_disk = max(self.peak_disk, _folder_bytes(self.folders))
                self.min_free = min(self.min_free, shutil.disk_usage("/work").free)
            k += 1
            self.stop.wait(1.0)


def timed(args, folders=(), extra_pids=(), label="") -> dict:
    """Run ``python -m basinkit.cli --log-json ARGS`` under /usr/bin/time -v."""
    env = {**os.environ, "PYTHONPATH": str(HERE.parent)}
    tfile = Path(f"/tmp/bench_huge_time_{os.getpid()}.txt")
    errfile = Path(f"/tmp/bench_huge_err_{os.getpid()}.txt")
    cmd = ["/usr/bin/time", "-v", "-o", str(tfile), PY, "-m", "basinkit.cli", "--log-json",
           *args]
    print("$ " + " ".join(cmd[4:]), flush=True)
    load0 = os.getloadavg()
    t0 = time.perf_counter()
    with open(errfile, "w") as err:
        p = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=err, text=True)
        s = Sampler(p.pid, folders, extra_pids)
        s.start()
        out = p.stdout.read()
        rc = p.wait()
    wall = time.perf_counter() - t0
    s.stop.set()
    s.join()
    log = errfile.read_text()
    tv = tfile.read_text() if tfile.exists() else ""
    maxrss, cpu = 0, 0.0
    for line in tv.splitlines():
        if "Maximum resident set size" in line:
            maxrss = int(line.split(":")[1]) * 1024
        elif "User time (seconds)" in line or "System time (seconds)" in line:
            cpu += float(line.split(":")[1])
    if rc != 0:
        print(out, log[-4000:], tv, sep="\n")
        raise SystemExit(f"{label} failed with status {rc}")
    info = []
    for x in log.splitlines():
        rec = json.loads(x) if x.startswith("{") else {}
        if rec.get("level") in ("info", "warning") and rec.get("event") is None:
            info.append(rec.get("message"))
    return {"stage": label, "wall_s": round(wall, 1), "cpu_s": round(cpu, 1),
            "max_rss_MB": round(maxrss / 2**20),
            "tree_peak_MB": round(s.peak_tree / 2**20), "procs": s.peak_procs,
            "extra_peak_MB": round(s.peak_extra / 2**20),
            "both_peak_MB": round(s.peak_both / 2**20),
            "disk_peak_GB": round(s.peak_disk / 1e9, 2),
            "min_free_GB": round(s.min_free / 1e9, 1),
            "stages": stage_seconds(log), "load_start": [round(v, 2) for v in load0],
            "load_end": [round(v, 2) for v in os.getloadavg()], "messages": info}


def route_and_channels(size, root, max_memory, *, scheduler=None, extra_pids=(), tag="",
                       channels=True):
    dem = root / f"dem_{size}"
    flow = root / f"flow_{size}{tag}"
    work = root / f".flow_{size}{tag}.tiles"
    ch = root / f"channels_{size}{tag}"
    for p in (flow, work) + ((ch,) if channels else ()):
        shutil.rmtree(p, ignore_errors=True)
    args = ["route", str(dem), "-o", str(flow), "--max-memory", max_memory]
    if scheduler:
        args += ["--scheduler", scheduler]
    res = [timed(args, folders=[flow, work], extra_pids=extra_pids, label=f"route {size}²{tag}")]
    res[-1]["flow_GB"] = round(_folder_bytes([flow]) / 1e9, 2)
    meta = json.loads((flow / "flow.json").read_text())
    tiled = meta.get("tiled", {})
    res[-1]["tile"] = tiled.get("tile_rows")
    res[-1]["crossing_flats"] = tiled.get("directions", {}).get("crossing_flats")
    if channels:
        args = ["channels", str(flow), "-o", str(ch), "--min-area", "1km2"]
        if scheduler:
            args += ["--scheduler", scheduler]
        res.append(timed(args, folders=[ch], extra_pids=extra_pids, label=f"channels {size}²{tag}"))
        res[-1]["channels_GB"] = round(_folder_bytes([ch]) / 1e9, 3)
    return res


# --- equality with the in-memory route -----------------------------------------------------

RASTERS = ["elevation_conditioned.tif", "direction_d8.tif", "accumulation_cells.tif",
           "upstream_area_m2.tif"]


def compare(size, root) -> dict:
    import rasterio
    from rasterio.windows import Window

    vrt = write_vrt(size, root)
    mem = root / f"flow_{size}_memory"
    shutil.rmtree(mem, ignore_errors=True)
    r = timed(["route", str(vrt), "-o", str(mem)], folders=[mem], label=f"route {size}² in memory")
    til = root / f"flow_{size}"
    same = {}
    step = 2048
    for name in RASTERS:
        ok = True
        with rasterio.open(mem / name) as x, rasterio.open(til / name) as y:
            if (x.height, x.width) != (y.height, y.width):
                ok = False
            for r0 in range(0, x.height, step):
                for c0 in range(0, x.width, step):
                    w = Window(c0, r0, min(step, x.width - c0), min(step, x.height - r0))
                    u, v = x.read(1, window=w), y.read(1, window=w)
                    if u.dtype != v.dtype and u.dtype.kind in "iu" and v.dtype.kind in "iu":
                        u, v = u.astype(np.int64), v.astype(np.int64)
                    if not np.array_equal(u, v, equal_nan=u.dtype.kind == "f"):
                        ok = False
        same[name] = ok
    r["equal"] = same
    shutil.rmtree(mem, ignore_errors=True)
    return r


# --- LocalCluster ----------------------------------------------------------------------------

def cluster(size, root, workers, max_memory, channels=True):
    from dask.distributed import LocalCluster

    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None, memory_limit=0) as lc:
        import psutil

        pids = [c.pid for c in psutil.Process().children(recursive=False)]
        res = route_and_channels(size, root, max_memory, scheduler=lc.scheduler_address,
                                 extra_pids=pids, tag=f"_cluster{workers}", channels=channels)
    return res


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("what", choices=["generate", "run", "compare", "cluster"])
    ap.add_argument("--size", type=int, default=8192)
    ap.add_argument("--root", type=Path, default=Path("/work/scratch/huge"))
    ap.add_argument("--max-memory", default="3GB")
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--no-channels", action="store_true")
    a = ap.parse_args()
    a.root.mkdir(parents=True, exist_ok=True)
    if a.what == "generate":
        res = [generate(a.size, a.root)]
    elif a.what == "run":
        res = route_and_channels(a.size, a.root, a.max_memory, channels=not a.no_channels)
    elif a.what == "compare":
        res = [compare(a.size, a.root)]
    else:
        res = cluster(a.size, a.root, a.workers, a.max_memory, channels=not a.no_channels)
    for r in res:
        print(json.dumps(r), flush=True)


if __name__ == "__main__":
    main()
