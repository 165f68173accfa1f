"""Batch benchmark: a job of 2 000 outlets on matplotlib's real 3-arc-second DEM.

Run by hand (not part of the tests):

    python bench/bench_batch_job.py                  # 2 000 outlets, report off
    python bench/bench_batch_job.py --outlets 500 --report

The DEM is ``matplotlib.cbook.get_sample_data("jacksboro_fault_dem.npz")`` (344 × 403
cells of 3″, elevations in metres; its ``ymin``/``ymax`` are swapped in the file and the
rows run north to south), written as a GeoTIFF in EPSG:4326. The outlet table holds, among
the good outlets, the rows a real batch throws at a program:

- a repeated id (the second row of an id must fail, naming its line);
- two ids that clean to one file name (``a/b`` and ``a b``) and a 300-character id (each
  gets a file name of its own);
- two distinct ids on one cell (both get the catchment, with a note);
- a point off the grid and a row whose coordinate cannot be read (both fail).

The job runs through the command line (``basinkit run``) in a child process; the script
checks the exit status (1: some outlets failed), that stderr holds no traceback, that only
the bad rows failed and that every good outlet's results are present and distinct, then
prints the seconds per stage from provenance.json.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

from _stages import stage_seconds  # noqa: E402 - bench/ is on the path now

LONG_ID = "long-" + "x" * 295  # 300 characters
BAD_ROWS = ("repeated", "off_grid", "unreadable")


def write_jacksboro_tif(path):
    """The sample DEM as a GeoTIFF (EPSG:4326, north-up)."""
    from affine import Affine
    from matplotlib import cbook

    from basinkit.io.writers import write_geotiff

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as f:
        z = np.asarray(f["elevation"], dtype=np.float32)
        dx, dy = float(f["dx"]), float(f["dy"])
        west = float(f["xmin"])
        north = max(float(f["ymin"]), float(f["ymax"]))  # swapped in the file
    write_geotiff(path, z, Affine(dx, 0, west, 0, -dy, north), "EPSG:4326")
    return path


def build_batch(folder, n=2000, seed=7, min_area_m2=0.5e6):
    """Write ``dem.tif``, ``outlets.csv`` (``n`` rows) and ``job.toml`` into ``folder``.

    Good outlets sit on cell centres of distinct channel cells (D8 upstream area at least
    ``min_area_m2``), so they snap onto themselves. Returns a dict describing the rows:
    ``good`` (ids expected to succeed), ``bad`` ({id: line}) and the special ids.
    """
    from basinkit import read_dem, route

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    dem = write_jacksboro_tif(folder / "dem.tif")
    fm = route(read_dem(dem))
    area = np.asarray(fm.d8_upstream_area_flat())
    cand = np.flatnonzero(np.isfinite(area) & (area >= min_area_m2))
    rng = np.random.default_rng(seed)
    n_good = n - 1 - len(BAD_ROWS) + 1  # the shared cell's twin reuses a cell
    cells = rng.choice(cand, size=n_good - 1, replace=False)
    x, y = fm.terrain.xy_of(cells // fm.ncols, cells % fm.ncols)
    ids = [f"o{i:04d}" for i in range(len(cells))]
    ids[0], ids[1], ids[2] = "a/b", "a b", LONG_ID
    rows = [(i, f"{a:.10f}", f"{b:.10f}") for i, a, b in zip(ids, x, y)]
    rows.append(("twin_of_o0003", rows[3][1], rows[3][2]))  # a second id on one cell
    rows.insert(10, (ids[5], rows[7][1], rows[7][2]))  # repeats o0005's id
    rows.insert(20, ("off_grid", "10.0", "10.0"))
    rows.insert(30, ("unreadable", "-84.2", "north"))
    lines = ["id,x,y"] + [",".join(r) for r in rows]
    (folder / "outlets.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    bad = {}
    for k, r in enumerate(rows, start=2):
        if r[0] in ("off_grid", "unreadable"):
            bad[r[0]] = k
    bad_repeat_line = 10 + 2  # the inserted row is at index 10: line 12
    (folder / "job.toml").write_text(
        '[job]\nname = "batch on the Jacksboro sample DEM"\n'
        '[inputs]\ndem = "dem.tif"\noutlets = "outlets.csv"\n'
        '[outlets]\nsnap_radius_m = 150\nsnap_min_area = "0.5km2"\n'
        '[channels]\nmin_area = "0.5km2"\nmin_order = 1\n'
        '[outputs]\nreport = false\n', encoding="utf-8")
    good = [r[0] for k, r in enumerate(rows) if r[0] not in ("off_grid", "unreadable")
            and k != 10]
    return {"good": good, "bad": bad, "repeat": (ids[5], bad_repeat_line),
            "rows": len(rows), "twin": ("o0003", "twin_of_o0003")}


def check_outputs(out, info):
    """Assert the batch rules on a finished run; returns the catchments table."""
    import pandas as pd

    cat = pd.read_csv(out / "catchments.csv", dtype={"outlet_id": str},
                      keep_default_na=False)
    assert len(cat) == info["rows"], (len(cat), info["rows"])
    failed = cat[cat["status"] == "failed"]
    rid, rline = info["repeat"]
    got = sorted(zip(failed["outlet_id"], failed["source"]))
    want = sorted([(rid, f"outlets.csv line {rline}")]
                  + [(k, f"outlets.csv line {v}") for k, v in info["bad"].items()])
    assert got == want, got
    ok = cat[cat["status"] == "ok"]
    assert sorted(ok["outlet_id"]) == sorted(info["good"])
    assert ok["file_id"].str.lower().is_unique and (ok["file_id"].str.len() <= 64).all()
    a, b = info["twin"]
    ta, tb = ok.set_index("outlet_id").loc[[a, b]].itertuples()
    assert ta.area_m2 == tb.area_m2 and "shares its cell" in tb.warning
    morph = pd.read_csv(out / "morphometry.csv", dtype={"outlet_id": str},
                        keep_default_na=False)
    good_m = morph[morph["error"] == ""]
    assert sorted(good_m["outlet_id"]) == sorted(info["good"])
    paths = pd.read_csv(out / "flow_paths.csv", dtype={"outlet_id": str},
                        keep_default_na=False)
    assert (paths["error"] == "").all()
    assert sorted(paths.loc[paths["kind"] == "longest_flow_path", "outlet_id"]) == \
        sorted(info["good"])
    figs = sorted(p.name for p in (out / "figures").iterdir())
    assert len(figs) == len(set(figs)) == 20 * 5
    return cat


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--outlets", type=int, default=2000)
    ap.add_argument("--folder", type=Path, default=HERE / "out" / "batch")
    ap.add_argument("--report", action="store_true", help="also write the report")
    ap.add_argument("--workers", type=int, default=2, help="[job] workers")
    a = ap.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    info = build_batch(a.folder / "inputs", a.outlets)
    job = a.folder / "inputs" / "job.toml"
    if a.report:
        job.write_text(job.read_text().replace("report = false", "report = true"))
    job.write_text(job.read_text().replace("[inputs]", f"workers = {a.workers}\n[inputs]"))
    out = a.folder / "run"
    t0 = time.perf_counter()
    p = subprocess.run([sys.executable, "-m", "basinkit.cli", "--log-json", "run", str(job),
                        "-o", str(out), "--overwrite"], capture_output=True, text=True,
                       env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
    wall = time.perf_counter() - t0
    assert p.returncode == 1, (p.returncode, p.stderr[-3000:])
    assert "Traceback" not in p.stderr
    check_outputs(out, info)
    prov = json.loads((out / "provenance.json").read_text())
    print(f"outlets: {info['rows']} rows, {len(info['good'])} good; exit status "
          f"{p.returncode}; failures {prov['outlets']['failed']}")
    order = ["read", "flow", "catchments", "channels", "profiles", "morphometry", "report"]
    secs = stage_seconds(p.stderr)  # the --log-json records (the folder holds no timings)
    for name in sorted(prov["stages"], key=lambda k: order.index(k) if k in order else 99):
        st = prov["stages"][name]
        print(f"  {name:12s} {st['status']:8s} {secs.get(name, 0.0):7.2f} s")
    print(f"  stages {sum(secs.values()):.2f} s; wall clock of the command {wall:.2f} s "
          "(process start and imports included)")
    size = sum(q.stat().st_size for q in out.rglob("*") if q.is_file())
    print(f"  output folder: {sum(1 for q in out.rglob('*') if q.is_file())} files, "
          f"{size / 2**20:.1f} MB"
          + (f"; report.html {(out / 'report.html').stat().st_size / 2**20:.1f} MB"
             if (out / "report.html").exists() else ""))


if __name__ == "__main__":
    main()
