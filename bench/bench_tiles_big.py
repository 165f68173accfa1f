"""A DEM larger than the in-memory route would take under the budget, generated window by
window, routed with ``basinkit route --max-memory`` and its channel network extracted with
``basinkit channels`` on the tiled flow folder (whole commands, each its own process).

Run by hand (not part of the tests):

    python bench/bench_tiles_big.py --size 16384 --max-memory 2GB --min-area 1km2

The DEM (bench/out/big_N.tif, 10 m cells, float32, tiled GeoTIFF) is a smooth large-scale
surface (a tilted plane with long sine waves) plus fractal detail generated in windows of
2048² (each window's detail seeded by its position; elevations rounded to 0.1 m, so flats
are many), never as one array. Wall time and peak resident memory (ru_maxrss read by the
parent with os.wait4) of each command are printed with its console output; copy them to
bench/RESULTS.md.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
OUT = HERE / "out"
WIN = 2048


def detail(n, seed, beta=1.4):
    rng = np.random.default_rng(seed)
    f = np.fft.fftfreq(n)
    k = np.hypot(f[:, None], f[None, :])
    k[0, 0] = 1.0
    spec = (rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) / k ** beta
    z = np.real(np.fft.ifft2(spec))
    return (z - z.mean()) / (z.std() or 1.0)


def make_dem(n):
    import rasterio
    from affine import Affine
    from rasterio.windows import Window

    OUT.mkdir(exist_ok=True)
    p = OUT / f"big_{n}.tif"
    if p.exists():
        return p
    tmp = p.with_suffix(".part.tif")
    with rasterio.open(tmp, "w", driver="GTiff", height=n, width=n, count=1,
                       dtype="float32", crs="EPSG:32633", nodata=None,
                       transform=Affine(10.0, 0, 500000.0, 0, -10.0, 5000000.0 + 10 * n),
                       tiled=True, blockxsize=256, blockysize=256, compress="zstd",
                       bigtiff="YES") as ds:
        for r0 in range(0, n, WIN):
            for c0 in range(0, n, WIN):
                h, w = min(WIN, n - r0), min(WIN, n - c0)
                rr, cc = np.mgrid[r0:r0 + h, c0:c0 + w].astype(np.float64)
                base = (2000.0 - 0.05 * (rr + cc)
                        + 80.0 * np.sin(rr / 1500.0) * np.cos(cc / 2300.0))
                z = base + 15.0 * detail(WIN, seed=r0 * n + c0)[:h, :w]
                ds.write(np.round(z, 1).astype(np.float32)[None], window=Window(c0, r0, w, h))
    os.replace(tmp, p)
    return p


def run(args):
    env = {**os.environ, "PYTHONPATH": str(HERE.parent)}
    t0 = time.perf_counter()
    p = subprocess.Popen([sys.executable, "-m", "basinkit.cli", *args], env=env,
                         stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    out = p.stdout.read()
    _, status, usage = os.wait4(p.pid, 0)
    code = os.waitstatus_to_exitcode(status)
    return time.perf_counter() - t0, usage.ru_maxrss / 1024, code, out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=16384)
    ap.add_argument("--max-memory", default="2GB")
    ap.add_argument("--min-area", default="1km2")
    a = ap.parse_args()
    t0 = time.perf_counter()
    dem = make_dem(a.size)
    print(f"DEM {dem} ({a.size}² cells) ready in {time.perf_counter() - t0:.1f} s", flush=True)
    flow, ch = OUT / f"big_flow_{a.size}", OUT / f"big_channels_{a.size}"
    for q in (flow, ch):
        shutil.rmtree(q, ignore_errors=True)
    for name, args in (("route", ["route", str(dem), "-o", str(flow), "--max-memory",
                                  a.max_memory]),
                       ("channels", ["channels", str(flow), "-o", str(ch), "--min-area",
                                     a.min_area])):
        wall, peak, code, out = run(args)
        print(out.split("caution:")[0], flush=True)
        print(f"| {a.size}² | {name} | {a.max_memory} | {wall:.1f} s | {peak:.0f} MB | exit "
              f"{code} |", flush=True)
        if code:
            break


if __name__ == "__main__":
    main()
