"""Output folders for the report tests, built with the workflow as it stands, and an adapter
that adds the products of the contract (io/products.py) the job does not write yet, from the
outputs of the ``profile`` command and the job's own per-outlet files:

- ``profile.csv``, ``steepness.csv``, ``knickpoints.csv``: copied from ``basinkit profile``
  run on the job's flow folder with the job's settings;
- ``flow_paths.csv``: one row per outlet and kind (longest_flow_path, main_stem) from that
  command's ``summary.json``;
- ``hypsometry.csv``: the job's per-outlet hypsometric curves in one table with
  ``outlet_id``.

A product already in the folder (the job writes it) is left as it is.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

DEMO = Path(__file__).resolve().parents[1] / "demo_rasters"
_CACHE: dict = {}


def _cli(args):
    from basinkit.cli.main import main

    try:
        main(["-q", *args])
    except SystemExit as e:
        return e.code
    return 0


def add_missing_products(folder, outlets, snap_radius="30m", snap_to_channel="1ha",
                         min_area="2ha", min_order=1, concavity=0.45, id_column=None):
    """Write the contract's profile and hypsometry tables that ``folder`` lacks."""
    add_profile_tables(folder, outlets, snap_radius, snap_to_channel, min_area, min_order,
                       concavity, id_column)
    return add_hypsometry_table(folder)


def add_profile_tables(folder, outlets, snap_radius="30m", snap_to_channel="1ha",
                       min_area="2ha", min_order=1, concavity=0.45, id_column=None):
    """profile.csv, steepness.csv, knickpoints.csv and flow_paths.csv from the ``profile``
    command, when the folder lacks them."""
    folder = Path(folder)
    if not (folder / "profile.csv").is_file() or not (folder / "flow_paths.csv").is_file():
        tmp = Path(tempfile.mkdtemp(prefix="basinkit-profile-"))
        try:
            args = ["profile", str(folder / "flow"), "--outlets", str(outlets),
                    "--snap-radius", snap_radius, "--min-area", min_area,
                    "--min-order", str(min_order), "--concavity", str(concavity),
                    "-o", str(tmp / "p"), "--overwrite"]
            if snap_to_channel:
                args += ["--snap-to-channel", snap_to_channel]
            if id_column:
                args += ["--id-column", id_column]
            assert _cli(args) in (0, 1)
            for name in ("profile.csv", "steepness.csv", "knickpoints.csv"):
                if not (folder / name).is_file():
                    shutil.copyfile(tmp / "p" / name, folder / name)
            if not (folder / "flow_paths.csv").is_file():
                summary = json.loads((tmp / "p" / "summary.json").read_text())
                rows = []
                for s in summary["outlets"]:
                    for kind in ("longest_flow_path", "main_stem"):
                        rec = dict(s[kind])
                        rec["kind"] = kind
                        rows.append({"outlet_id": s["outlet_id"], **rec})
                pd.DataFrame(rows).to_csv(folder / "flow_paths.csv", index=False,
                                          float_format="%.10g")
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
    return folder


def add_hypsometry_table(folder):
    """hypsometry.csv from the job's per-outlet curves, when the folder lacks it."""
    folder = Path(folder)
    if not (folder / "hypsometry.csv").is_file() and (folder / "hypsometry").is_dir():
        cat = pd.read_csv(folder / "catchments.csv", dtype={"outlet_id": str, "file_id": str})
        frames = []
        for oid, fid in zip(cat["outlet_id"], cat["file_id"]):
            p = folder / "hypsometry" / f"hypsometry_{fid}.csv"
            if p.is_file():
                f = pd.read_csv(p)
                f.insert(0, "outlet_id", oid)
                frames.append(f)
        if frames:
            pd.concat(frames, ignore_index=True).to_csv(folder / "hypsometry.csv", index=False,
                                                        float_format="%.10g")
    return folder


def demo_folder():
    """The demo job's output folder (no report) with the contract's products added; built
    once per test session."""
    if "demo" not in _CACHE:
        from basinkit.workflow.jobs import demo_job_path, read_job, run_job

        base = Path(tempfile.mkdtemp(prefix="basinkit-report-demo-"))
        job = read_job(demo_job_path())
        job["outputs"]["report"] = False
        run_job(job, output=base / "out")
        add_missing_products(base / "out", DEMO / "outlets.csv")
        _CACHE["demo"] = base / "out"
    return _CACHE["demo"]


def jacksboro_geotiff(path):
    """matplotlib's real 3-arc-second DEM (jacksboro_fault_dem.npz) as a WGS 84 GeoTIFF.
    Its ymin/ymax are swapped in the file; rows run north to south."""
    import rasterio
    from affine import Affine
    from matplotlib import cbook

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as f:
        z = np.asarray(f["elevation"], dtype=np.float32)
        dx, dy = float(f["dx"]), float(f["dy"])
        west = float(f["xmin"])
        north = max(float(f["ymin"]), float(f["ymax"]))
    with rasterio.open(path, "w", driver="GTiff", width=z.shape[1], height=z.shape[0],
                       count=1, dtype="float32", crs="EPSG:4326",
                       transform=Affine(dx, 0, west, 0, -dy, north)) as ds:
        ds.write(z, 1)
    return Path(path)


def many_outlet_folder(n, base, profiles=False, seed=7):
    """A job on the Jacksboro DEM with ``n`` outlets on channel cells (upstream area at
    least 0.5 km², chosen at random with a fixed seed), no report; profiles only on
    request."""
    from basinkit.io.dem import read_dem
    from basinkit.routing.flow_model import route
    from basinkit.workflow.jobs import run_job

    base = Path(base)
    base.mkdir(parents=True, exist_ok=True)
    dem = jacksboro_geotiff(base / "jacksboro.tif")
    fm = route(read_dem(dem))
    area = np.asarray(fm.upstream_area()).ravel()
    cand = np.flatnonzero(area >= 5e5)
    cells = np.sort(np.random.default_rng(seed).choice(cand, size=n, replace=False))
    rows, cols = np.divmod(cells, fm.ncols)
    xs, ys = fm.terrain.xy_of(rows, cols)
    ids = [f"site-{k:04d}" for k in range(n)]
    pd.DataFrame({"id": ids, "x": xs, "y": ys}).to_csv(base / "outlets.csv", index=False,
                                                        float_format="%.10f")
    (base / "job.toml").write_text(
        '[job]\nname = "Many outlets on a real DEM"\n'
        '[inputs]\ndem = "jacksboro.tif"\noutlets = "outlets.csv"\n'
        '[outlets]\nsnap_radius_m = 0\n'
        '[channels]\nmin_area = "0.5km2"\nmin_order = 1\n'
        f'[profiles]\nenabled = {"true" if profiles else "false"}\n'
        '[outputs]\nrasters = true\nreport = false\n', encoding="utf-8")
    run_job(base / "job.toml", output=base / "out")
    if profiles:
        add_profile_tables(base / "out", base / "outlets.csv", snap_radius="0m",
                           snap_to_channel=None, min_area="0.5km2")
    add_hypsometry_table(base / "out")
    return base / "out", ids
