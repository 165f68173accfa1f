"""``basinkit route --max-memory`` routing by tiles, the tiled flow folder, resuming a
stopped run, and ``delineate`` / ``channels`` on a tiled flow folder.

The oracle is the in-memory path (CHECKS.md, "Tiled and distributed paths"): every raster
the tiled route writes equals cell for cell the one ``basinkit route`` writes in memory on
the same DEM, and the catchments and Strahler orders computed by tiles equal those of
``delineate`` and ``channels`` on the in-memory flow folder. Cells of 10 m (100 m²) make
every area sum exact, so areas are compared bit for bit (see ``flow_accumulation``).
The GeoTIFF structure (tiling, overviews) is read back with rasterio (GDAL).
"""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio

from conftest import fractal_dem
from test_cli_core import TR, assert_clean_failure, run, write_tif

RASTERS = ["elevation_conditioned.tif", "direction_d8.tif", "accumulation_cells.tif",
           "upstream_area_m2.tif"]


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    """A 70 x 90 DEM with integer elevations (flats that cross tile borders), nodata holes
    and depressions, and its flow folder routed in memory (the oracle)."""
    from basinkit.workflow.steps.tiled_flow import route_dem

    d = tmp_path_factory.mktemp("tiles_cli")
    z = fractal_dem(70, 90, seed=5, relief=60, holes=3, integer=True)
    dem = write_tif(d / "dem.tif", z, nodata=np.nan)
    res = route_dem(dem, d / "flow_mem")
    assert not res["tiled"]
    return d, dem


def read(path):
    with rasterio.open(path) as ds:
        return ds.read(1), ds.profile, ds.overviews(1), ds.block_shapes


def assert_same_rasters(a, b):
    for name in RASTERS:
        x, px, _, _ = read(a / name)
        y, py, ov, blocks = read(b / name)
        assert x.dtype == y.dtype and px["nodata"] == py["nodata"] or \
            (np.isnan(px["nodata"]) and np.isnan(py["nodata"])), name
        assert px["transform"] == py["transform"] and px["crs"] == py["crs"], name
        assert np.array_equal(x, y, equal_nan=x.dtype.kind == "f"), name
        assert py["tiled"] and blocks == [(256, 256)], name
        assert ov == [2], name  # 90 columns: one level down to about 64 cells


@pytest.mark.parametrize("extra", [[], ["--tile-size", "16"]], ids=["planned", "tile16"])
def test_route_by_tiles_equals_in_memory(case, capsys, extra):
    d, dem = case
    out = d / f"flow_tiles_{len(extra)}"
    code, stdout, err = run(["route", dem, "-o", out, "--max-memory", "1MB", *extra], capsys)
    assert code == 0, err
    text = stdout + err
    assert "by tiles" in text and "peak memory" in text
    assert_same_rasters(d / "flow_mem", out)
    meta = json.loads((out / "flow.json").read_text())
    tile = 16 if extra else 256
    assert meta["tiled"]["tile_rows"] == tile and meta["parameters"]["route"] == "by tiles"
    mem = json.loads((d / "flow_mem" / "flow.json").read_text())
    for k in ("cells_raised", "max_fill_depth_m", "filled_volume_m3"):
        assert meta["conditioning"][k] == pytest.approx(mem["conditioning"][k], rel=1e-12)
    assert meta["inputs"]["dem"]["sha256"] == mem["inputs"]["dem"]["sha256"]
    assert meta["input_elevation"] == mem["input_elevation"]
    assert not (d / f".{out.name}.tiles").exists()  # the working tiles are removed
    # the in-memory reader takes a tiled folder as it is (same files, same encodings)
    from basinkit import load_flow

    assert load_flow(out).shape == (70, 90)


def test_route_within_budget_stays_in_memory(case, capsys):
    d, dem = case
    code, stdout, err = run(["route", dem, "-o", d / "flow_big", "--max-memory", "20GB"],
                            capsys)
    assert code == 0, err
    assert "routing in memory" in stdout + err
    assert "tiled" not in json.loads((d / "flow_big" / "flow.json").read_text())


def test_killed_run_resumes(case, capsys, monkeypatch):
    """A run stopped after three tiles of the last routing pass leaves the working tiles
    and no flow folder; the same command then goes on without filling any tile again."""
    import basinkit.tiles.directions as D
    import basinkit.tiles.fill as F

    d, dem = case
    out = d / "flow_resumed"
    args = ["route", dem, "-o", out, "--max-memory", "1MB", "--tile-size", "16"]
    real_finish, real_flood = D.finish_one_tile, F.flood_one_tile
    calls = {"finish": 0, "flood": 0}

    def stop_after_three(*a, **k):
        calls["finish"] += 1
        if calls["finish"] > 3:
            raise KeyboardInterrupt
        return real_finish(*a, **k)

    monkeypatch.setattr(D, "finish_one_tile", stop_after_three)
    code, _, _ = run(args, capsys)
    assert code == 130
    assert not out.exists()
    assert (d / ".flow_resumed.tiles" / "run.json").is_file()

    def counted(name, real):
        def f(*a, **k):
            calls[name] += 1
            return real(*a, **k)
        return f

    calls.update(finish=0, flood=0)
    monkeypatch.setattr(D, "finish_one_tile", counted("finish", real_finish))
    monkeypatch.setattr(F, "flood_one_tile", counted("flood", real_flood))
    code, stdout, err = run(args, capsys)
    assert code == 0, err
    assert "resuming" in stdout + err
    n_tiles = 5 * 6  # 70 x 90 cells in tiles of 16
    assert calls == {"flood": 0, "finish": n_tiles - 3}
    assert_same_rasters(d / "flow_mem", out)
    assert not (d / ".flow_resumed.tiles").exists()


def test_changed_dem_starts_the_tiles_again(case, capsys, tmp_path):
    d, _ = case
    z = fractal_dem(40, 30, seed=2, relief=50)
    dem = write_tif(tmp_path / "dem.tif", z)
    work = tmp_path / ".flow.tiles"
    work.mkdir()
    (work / "run.json").write_text(json.dumps({"software": "basinkit", "dem": "other"}))
    code, stdout, err = run(["route", dem, "-o", tmp_path / "flow", "--tile-size", "8"],
                            capsys)
    assert code == 0, err
    assert "starting them again" in stdout + err
    mem = tmp_path / "flow_mem"
    assert run(["route", dem, "-o", mem], capsys)[0] == 0
    assert_same_rasters(mem, tmp_path / "flow")


def outlet_args(flow_dir, k=6, seed=0):
    """``--outlet`` options at ``k`` cells of large upstream area (some nested)."""
    a, _, _, _ = read(flow_dir / "upstream_area_m2.tif")
    order = np.argsort(np.nan_to_num(a, nan=-1).ravel(), kind="stable")[::-1]
    cells = order[np.random.default_rng(seed).choice(200, size=k, replace=False)]
    args = []
    for i, c in enumerate(cells):
        r, col = divmod(int(c), a.shape[1])
        x, y = TR @ (col + 0.5, r + 0.5)
        args += ["--outlet", f"o{i}={x},{y}"]
    return args


def test_delineate_on_tiled_folder_equals_in_memory(case, capsys):
    d, dem = case
    tiled = d / "flow_tiled_d"
    assert run(["route", dem, "-o", tiled, "--tile-size", "16"], capsys)[0] == 0
    outs = outlet_args(d / "flow_mem") + ["--snap-radius", "0", "--labels-raster"]
    code, _, err = run(["delineate", d / "flow_mem", "-o", d / "del_mem", *outs], capsys)
    assert code == 0, err
    code, stdout, err = run(["delineate", tiled, "-o", d / "del_tiles", *outs], capsys)
    assert code == 0, err
    assert "by tiles" in stdout + err
    a = pd.read_csv(d / "del_mem" / "catchments.csv")
    b = pd.read_csv(d / "del_tiles" / "catchments.csv")
    assert list(a.columns) == list(b.columns)
    for c in ("area_m2", "cell_count", "subcatchment_area_m2", "upstream_outlet_ids",
              "downstream_outlet_id", "elevation_min_m", "elevation_max_m", "touches_edge",
              "label", "cell_count"):
        pd.testing.assert_series_equal(a[c], b[c])
    assert b[["elevation_mean_m", "filled_volume_m3", "perimeter_m"]].notna().all().all()
    assert (b["filled_volume_m3"] > 0).any() and b["upstream_outlet_count"].max() > 0
    for c in ("elevation_mean_m", "perimeter_m", "filled_volume_m3", "filled_cell_fraction",
              "filled_depth_max_m"):  # sums taken in another order
        np.testing.assert_allclose(a[c], b[c], rtol=1e-12)
    la, _, _, _ = read(d / "del_mem" / "subcatchment_labels.tif")
    lb, _, ov, _ = read(d / "del_tiles" / "subcatchment_labels.tif")
    assert np.array_equal(la, lb) and ov == [2]


def test_channels_on_tiled_folder(case, capsys):
    """The channel network by tiles: the order raster equal cell for cell, the segments
    and junctions equal value for value (segments matched by their end cells: the tiled
    ids follow another order), split at outlets as in memory."""
    d, dem = case
    tiled = d / "flow_tiled_c"
    assert run(["route", dem, "-o", tiled, "--tile-size", "16"], capsys)[0] == 0
    opts = ["--min-area", "0.5ha", "--min-order", "2",
            *outlet_args(d / "flow_mem", k=4, seed=2), "--snap-radius", "0"]
    assert run(["channels", d / "flow_mem", "-o", d / "ch_mem", *opts], capsys)[0] == 0
    code, stdout, err = run(["channels", tiled, "-o", d / "ch_tiles", *opts], capsys)
    assert code == 0, err
    assert "channels by tiles" in stdout + err
    a, pa, _, _ = read(d / "ch_mem" / "strahler_order.tif")
    b, pb, _, _ = read(d / "ch_tiles" / "strahler_order.tif")
    assert np.array_equal(a, b) and pa["nodata"] == pb["nodata"] and b.max() >= 2
    key = ["top_row", "top_col", "bottom_row", "bottom_col"]
    sa = pd.read_csv(d / "ch_mem" / "channel_segments.csv")
    sb = pd.read_csv(d / "ch_tiles" / "channel_segments.csv")
    assert list(sa.columns) == list(sb.columns) and len(sa) == len(sb) > 10
    sa, sb = (f.sort_values(key).reset_index(drop=True) for f in (sa, sb))
    ids = ["segment_id", "downstream_id", "stream_id"]
    pd.testing.assert_frame_equal(sa.drop(columns=ids), sb.drop(columns=ids), rtol=1e-12)
    ja = gpd.read_file(d / "ch_mem" / "channels.gpkg", layer="junctions")
    jb = gpd.read_file(d / "ch_tiles" / "channels.gpkg", layer="junctions")
    cols = ["strahler_order", "shreve_magnitude", "tributary_count", "row", "col"]
    ja, jb = (f[cols].sort_values(["row", "col"]).reset_index(drop=True) for f in (ja, jb))
    pd.testing.assert_frame_equal(ja, jb)
    code, _, err = run(["channels", tiled, "-o", d / "ch_bad", "--choose-threshold",
                        "0.1ha:1ha"], capsys)
    assert code == 2
    assert_clean_failure(code, err, "--min-area only")


@pytest.mark.parametrize("args, fragment", [
    (["--max-memory", "3XB"], "cannot read --max-memory '3XB'"),
    (["--max-memory", "512"], "cannot read --max-memory '512'"),
    (["--max-memory", "-2GB"], "must be a positive size"),
    (["--tile-size", "0"], "--tile-size must be between 1 and 16000"),
    (["--tile-size", "16", "--method", "mfd"], "routing by tiles offers D8"),
    (["--tile-size", "16", "--condition", "breach"], "routing by tiles offers D8"),
])
def test_bad_tiling_options(case, capsys, args, fragment):
    d, dem = case
    out = d / "flow_bad"
    code, _, err = run(["route", dem, "-o", out, *args], capsys)
    assert code == 2
    assert_clean_failure(code, err, fragment)
    assert not out.exists() and not (d / ".flow_bad.tiles").exists()


def test_foreign_folder_in_the_way_is_kept(case, capsys, tmp_path):
    d, dem = case
    (tmp_path / ".flow.tiles").mkdir()
    (tmp_path / ".flow.tiles" / "mine.txt").write_text("user data")
    code, _, err = run(["route", dem, "-o", tmp_path / "flow", "--tile-size", "16"], capsys)
    assert_clean_failure(code, err, "not made by basinkit")
    assert code == 2 and (tmp_path / ".flow.tiles" / "mine.txt").read_text() == "user data"


def test_plan_and_sizes():
    """The plan's arithmetic (closed form from the constants of basinkit.tiles.plan) and
    the size parser (SI and IEC prefixes)."""
    from basinkit.terrain.memory import ROUTE_BYTES_PER_CELL
    from basinkit.tiles.plan import GDAL_CACHE_MB, TILE_BYTES_PER_CELL, plan_route
    from basinkit.units import parse_memory

    assert parse_memory("2GB") == 2 * 10**9 and parse_memory("256MiB") == 256 * 2**20
    assert parse_memory("1.5 gib") == 3 * 2**29
    base = 100 * 2**20
    p = plan_route(10_000, 10_000, 10**9, workers=2, baseline=base)
    assert p.in_memory_bytes == base + 10**8 * ROUTE_BYTES_PER_CELL and p.tiled
    side = int(np.sqrt((10**9 - base - GDAL_CACHE_MB * 2**20) / (2 * TILE_BYTES_PER_CELL)))
    assert p.tile == side - side % 256 and p.tiled_bytes <= 10**9
    assert not plan_route(100, 100, 10**9, baseline=base).tiled
    assert plan_route(100, 100, None, tile_size=7).tile == 7


def test_job_routed_by_tiles(case, capsys, tmp_path):
    """A job with [routing] tile_size: the flow folder by tiles, catchments equal to the
    same job in memory, the stages that need the grid in memory skipped and recorded."""
    d, dem = case
    a, _, _, _ = read(d / "flow_mem" / "upstream_area_m2.tif")
    r, c = np.unravel_index(int(np.nanargmax(a)), a.shape)
    x, y = TR @ (c + 0.5, r + 0.5)
    (tmp_path / "outlets.csv").write_text(f"id,x,y\nlow,{x},{y}\n")
    body = (f'[inputs]\ndem = "{dem}"\noutlets = "outlets.csv"\n'
            '[outlets]\nsnap_radius_m = 0\n[channels]\nmin_area = "0.5ha"\n'
            '[outputs]\nreport = false\nfigures = false\n')
    (tmp_path / "mem.toml").write_text(body)
    (tmp_path / "tiles.toml").write_text(
        body + '[routing]\nmax_memory = "1MB"\ntile_size = 16\n')
    code, _, err = run(["run", tmp_path / "mem.toml", "-o", tmp_path / "job_mem"], capsys)
    assert code == 0, err
    code, stdout, err = run(["run", tmp_path / "tiles.toml", "-o", tmp_path / "job_tiles"],
                            capsys)
    assert code == 0, err
    assert "needs the grid in memory" in stdout + err
    assert_same_rasters(tmp_path / "job_mem" / "flow", tmp_path / "job_tiles" / "flow")
    m = pd.read_csv(tmp_path / "job_mem" / "catchments.csv")
    t = pd.read_csv(tmp_path / "job_tiles" / "catchments.csv")
    assert m["area_m2"].tolist() == t["area_m2"].tolist()
    prov = json.loads((tmp_path / "job_tiles" / "provenance.json").read_text())
    assert prov["stages"]["profiles"]["status"] == "skipped"
    assert not (tmp_path / ".job_tiles.tiles").exists()
    a, _, _, _ = read(tmp_path / "job_mem" / "strahler_order.tif")
    b, _, _, _ = read(tmp_path / "job_tiles" / "strahler_order.tif")
    assert np.array_equal(a, b)
    (tmp_path / "bad.toml").write_text(body + '[routing]\nmax_memory = "3XB"\n')
    code, _, err = run(["run", tmp_path / "bad.toml", "-o", tmp_path / "job_bad"], capsys)
    assert_clean_failure(code, err, "[routing] max_memory")
    assert code == 2 and not (tmp_path / "job_bad").exists()


def test_scheduler_on_a_local_cluster(case, capsys):
    """--scheduler: the tile tasks of route and delineate on a dask.distributed
    LocalCluster of two worker processes give the in-memory results."""
    distributed = pytest.importorskip("distributed")
    d, dem = case
    out = d / "flow_cluster"
    outs = outlet_args(d / "flow_mem", k=3, seed=1) + ["--snap-radius", "0"]
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                  dashboard_address=None) as cluster:
        addr = cluster.scheduler_address
        code, _, err = run(["route", dem, "-o", out, "--tile-size", "32", "--scheduler",
                            addr], capsys)
        assert code == 0, err
        code, _, err = run(["delineate", out, "-o", d / "del_cluster", "--scheduler", addr,
                            *outs], capsys)
        assert code == 0, err
        ran = set(cluster.scheduler.task_prefixes)  # the tasks did run on the cluster
        assert {"accumulate_task", "labels_task", "pieces_task", "filled_task"} <= ran, ran
    assert_same_rasters(d / "flow_mem", out)
    code, _, err = run(["delineate", d / "flow_mem", "-o", d / "del_cluster_mem", *outs],
                       capsys)
    assert code == 0, err
    a = pd.read_csv(d / "del_cluster_mem" / "catchments.csv")
    b = pd.read_csv(d / "del_cluster" / "catchments.csv")
    assert a["area_m2"].tolist() == b["area_m2"].tolist()


def test_in_memory_commands_refuse_a_tiled_folder_too_big(case, capsys, monkeypatch):
    """profile/morphometry load a tiled flow folder whole: refused in one line when the
    machine has not the memory (here made to report 1000 bytes available)."""
    import basinkit.terrain.memory as M

    d, dem = case
    tiled = d / "flow_tiled_m"
    assert run(["route", dem, "-o", tiled, "--tile-size", "32"], capsys)[0] == 0
    monkeypatch.setattr(M, "available_memory_bytes", lambda: 1000)
    code, _, err = run(["morphometry", tiled, "-o", d / "morph", "--min-area", "1ha",
                        *outlet_args(d / "flow_mem", k=1)], capsys)
    assert code == 2
    assert_clean_failure(code, err, "only delineate and channels work by tiles")


def test_same_bytes_whatever_the_tile_size(case, capsys):
    """The rasters are written block by block in row order, so the tiling does not show in
    the files (DESIGN.md: the same input gives byte-identical rasters)."""
    d, dem = case
    for t in ("16", "40"):
        assert run(["route", dem, "-o", d / f"flow_bytes_{t}", "--tile-size", t],
                   capsys)[0] == 0
    for name in RASTERS:
        assert (d / "flow_bytes_16" / name).read_bytes() == \
            (d / "flow_bytes_40" / name).read_bytes(), name


@pytest.mark.parametrize("crs, extra", [
    ("EPSG:32633", ["--sea-level", "12"]),
    ("EPSG:4326", []),
], ids=["sea-level", "geographic"])
def test_base_level_and_geographic_grids(tmp_path, capsys, crs, extra):
    """Base level from --sea-level, and a geographic grid (per-row cell sizes and areas):
    directions, counts and filled elevations equal the in-memory route; on the geographic
    grid the areas are the same sums in another order (equal within rounding, see
    flow_accumulation)."""
    from affine import Affine

    z = fractal_dem(50, 45, seed=11, relief=40, holes=2, integer=True)
    tr = Affine(0.001, 0, 14.0, 0, -0.001, 47.0) if crs == "EPSG:4326" else TR
    dem = write_tif(tmp_path / "dem.tif", z, transform=tr, crs=crs, nodata=np.nan)
    mem, til = tmp_path / "mem", tmp_path / "tiles"
    assert run(["route", dem, "-o", mem, *extra], capsys)[0] == 0
    code, _, err = run(["route", dem, "-o", til, "--tile-size", "12", *extra], capsys)
    assert code == 0, err
    for name in RASTERS[:3]:
        assert np.array_equal(read(mem / name)[0], read(til / name)[0],
                              equal_nan=name.startswith("elevation")), name
    a, b = read(mem / "upstream_area_m2.tif")[0], read(til / "upstream_area_m2.tif")[0]
    np.testing.assert_allclose(b, a, rtol=1e-12)
    if extra:
        assert json.loads((til / "flow.json").read_text())["base_level"] is True


def test_dem_moved_or_copied(case, capsys, tmp_path):
    """The elevation columns need the DEM as read: from --copy-input's copy, or, when the
    referenced DEM is gone, left empty with a warning (the other columns as before)."""
    import shutil

    d, dem = case
    moved = tmp_path / "moved.tif"
    shutil.copy(dem, moved)
    outs = outlet_args(d / "flow_mem", k=2, seed=4) + ["--snap-radius", "0"]
    assert run(["route", moved, "-o", tmp_path / "ref", "--tile-size", "32"], capsys)[0] == 0
    assert run(["route", moved, "-o", tmp_path / "cp", "--tile-size", "32",
                "--copy-input"], capsys)[0] == 0
    moved.unlink()
    a, b, _, _ = read(tmp_path / "cp" / "elevation_input.tif")
    assert np.array_equal(a, read(dem)[0], equal_nan=True) and b["tiled"]
    code, stdout, err = run(["delineate", tmp_path / "ref", "-o", tmp_path / "d1", *outs],
                            capsys)
    assert code == 0, err
    assert "cannot be read by windows" in stdout + err
    code, _, err = run(["delineate", tmp_path / "cp", "-o", tmp_path / "d2", *outs], capsys)
    assert code == 0, err
    t1 = pd.read_csv(tmp_path / "d1" / "catchments.csv")
    t2 = pd.read_csv(tmp_path / "d2" / "catchments.csv")
    assert t1["elevation_mean_m"].isna().all() and t2["elevation_mean_m"].notna().all()
    assert t1["area_m2"].tolist() == t2["area_m2"].tolist()
