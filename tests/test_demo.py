"""The bundled demo basin and the demo job, end to end.

External checks: the crossing's catchment is recomputed with pysheds 0.5 (a reference
library, test-only) from the D8 direction raster the job wrote, and must agree cell for cell;
input hashes in provenance.json are recomputed with hashlib (FIPS 180-4 SHA-256); the
generator is re-run and must reproduce the committed files byte for byte (its fixed seed).
"""

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from basinkit.workflow.jobs import demo_job_path, read_job, run_job

DEMO = Path(__file__).resolve().parents[1] / "demo_rasters"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The demo job run twice: once as shipped but with the report's detailed sections cut
    to two outlets (to keep the test fast), once without the report (the tables and rasters
    must not depend on it)."""
    base = tmp_path_factory.mktemp("demo")
    job = read_job(demo_job_path())
    job["outputs"]["report_outlets"] = ["crossing", "tributary_1"]
    first = run_job(job, output=base / "run1")
    job = read_job(demo_job_path())
    job["outputs"]["report"] = False
    second = run_job(job, output=base / "run2")
    return first, second


def test_demo_data_small_projected_float32():
    """The demo data: ≤ 5 MB in all; the DEM float32, metres, projected CRS."""
    import rasterio

    total = sum(p.stat().st_size for p in DEMO.iterdir() if p.is_file())
    assert total <= 5 * 2**20
    with rasterio.open(DEMO / "upland_valley.tif") as ds:
        assert ds.dtypes[0] == "float32"
        assert ds.crs.is_projected and ds.crs.linear_units in ("metre", "meter")
        assert ds.width >= 200 and ds.height >= 200
        assert ds.compression is not None
    out = pd.read_csv(DEMO / "outlets.csv")
    assert list(out.columns) == ["id", "x", "y", "description"]
    assert "crossing" in set(out["id"]) and len(out) >= 13


def test_generator_reproduces_the_committed_files(tmp_path):
    """Deterministic seed: regenerating gives byte-identical files."""
    import importlib.util

    spec = importlib.util.spec_from_file_location("make_demo", DEMO / "make_demo.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    mod.main(tmp_path)
    for name in ("upland_valley.tif", "outlets.csv", "culverts.geojson", "road.geojson"):
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), name


def test_expected_outputs_exist(runs):
    res, _ = runs
    folder = res.folder
    for name in ("flow/direction_d8.tif", "flow/elevation_conditioned.tif",
                 "flow/upstream_area_m2.tif", "flow/flow.json", "catchments.csv",
                 "catchments.gpkg", "catchment_labels.tif", "channel_segments.csv",
                 "channels.gpkg", "strahler_order.tif", "morphometry.csv",
                 "profiles/flow_paths.csv", "profiles/longest_flow_path_crossing.csv",
                 "hypsometry/hypsometry_crossing.csv", "report.html", "provenance.json"):
        assert (folder / name).is_file(), name
    assert all(st["status"] == "done" for st in res.stages.values()), res.stages


def test_tables_name_their_units(runs):
    res, _ = runs
    f = res.folder
    morph = pd.read_csv(f / "morphometry.csv")
    for col in ("area_km2", "perimeter_m", "relief_m", "mean_slope_m_per_m",
                "longest_flow_path_m", "drainage_density_km_per_km2",
                "total_stream_length_m", "hypsometric_integral"):
        assert col in morph.columns, col
    cat = pd.read_csv(f / "catchments.csv")
    for col in ("area_m2", "area_km2", "area_ha", "snap_distance_m", "relief_m",
                "perimeter_m", "elevation_min_m"):
        assert col in cat.columns, col
    paths = pd.read_csv(f / "profiles" / "flow_paths.csv")
    for col in ("length_m", "slope_10_85_m_per_m", "average_slope_m_per_m"):
        assert col in paths.columns, col
    seg = pd.read_csv(f / "channel_segments.csv")
    for col in ("length_m", "strahler_order", "mean_slope_m_per_m", "drop_m"):
        assert col in seg.columns, col
    # one row per outlet of the demo, all delineated
    n = len(pd.read_csv(DEMO / "outlets.csv"))
    assert len(cat) == n and len(morph) == n
    assert (morph["error"].isna() | (morph["error"].astype(str) == "")).all()
    # SI: 1 km² = 100 ha = 1e6 m²
    np.testing.assert_allclose(cat["area_km2"] * 1e6, cat["area_m2"], rtol=1e-12)
    np.testing.assert_allclose(cat["area_ha"] * 1e4, cat["area_m2"], rtol=1e-12)


def test_crossing_catchment_agrees_with_pysheds(runs):
    """The crossing's catchment from pysheds (reference library) on our D8 directions:
    same cells, so same area (10 m cells: 100 m² each)."""
    import rasterio

    from conftest import PYSHEDS_DIRMAP, pysheds_fdir, pysheds_grid

    res, _ = runs
    cat = pd.read_csv(res.folder / "catchments.csv").set_index("outlet_id")
    row = cat.loc["crossing"]
    assert row["area_km2"] > 0
    with rasterio.open(res.folder / "flow" / "direction_d8.tif") as ds:
        d8 = ds.read(1)
    grid, _ = pysheds_grid(np.zeros(d8.shape))
    fdir = pysheds_fdir(grid, d8)
    ref = np.asarray(grid.catchment(x=int(row["col"]), y=int(row["row"]), fdir=fdir,
                                    dirmap=PYSHEDS_DIRMAP, xytype="index")).astype(bool)
    ours = res.catchments.catchment_mask("crossing")
    assert ours.sum() == ref.sum()
    assert np.array_equal(ours, ref)
    assert row["area_m2"] == pytest.approx(ref.sum() * 100.0, rel=1e-9)


def test_burned_culvert_drains_the_embankment(runs):
    """Without the culvert burned in, filling makes a pond metres deep behind the road
    embankment (8 m high in the demo); with it, the valley floor upstream of the culvert
    is hardly raised. Common practice (no source): embankments without their culverts act
    as dams in DEM hydrology."""
    from basinkit import read_dem, route

    res, _ = runs
    t = read_dem(DEMO / "upland_valley.tif")
    plain = route(t)
    burned = res.flow
    # the cells within 80 m upstream of the culvert inlet, along the stream (main stem of
    # the burned model from the crossing: its first 9 nodes, 10 m cells)
    from basinkit.analysis.profiles import main_stem

    cell = int(res.outlets.set_index("outlet_id").loc["crossing", "cell"])
    stem = main_stem(burned, cell).cells[:9]
    rows, cols = np.divmod(stem, t.shape[1])
    raised_plain = (plain.terrain.elevation - t.elevation)[rows, cols].max()
    raised_burned = (burned.terrain.elevation - t.elevation)[rows, cols].max()
    assert raised_plain > 3.0
    assert raised_burned < 0.5


def test_provenance(runs):
    import basinkit

    res, _ = runs
    prov = json.loads((res.folder / "provenance.json").read_text())
    assert prov["software"] == "basinkit" and prov["version"] == basinkit.__version__
    dem = prov["inputs"]["dem"]
    assert dem["sha256"] == hashlib.sha256(Path(dem["path"]).read_bytes()).hexdigest()
    assert prov["inputs"]["job_file"]["sha256"] == hashlib.sha256(
        demo_job_path().read_bytes()).hexdigest()
    assert prov["parameters"]["channels"]["min_area"] == 2e4
    assert prov["crs_epsg"] == 32633
    for name, st in prov["stages"].items():
        assert st["status"] == "done" and st["seconds"] >= 0, name
    # the recorded output hashes are those of the files
    for name, h in prov["outputs"].items():
        assert hashlib.sha256((res.folder / name).read_bytes()).hexdigest() == h, name
    assert "morphometry.csv" in prov["outputs"]


def test_two_runs_are_byte_identical(runs):
    """Deterministic outputs: every CSV table and GeoTIFF raster is byte-identical between
    two runs of the same job."""
    a, b = runs
    files = sorted(p.relative_to(a.folder) for p in a.folder.rglob("*")
                   if p.suffix in (".csv", ".tif"))
    assert len(files) > 20
    for rel in files:
        assert (b.folder / rel).read_bytes() == (a.folder / rel).read_bytes(), str(rel)


def test_demo_command(tmp_path, capsys):
    """``basinkit demo -o DIR`` refuses a non-empty folder without --overwrite (one message,
    exit 2), then runs with it."""
    from basinkit.cli.main import main

    out = tmp_path / "demo"
    out.mkdir()
    (out / "old.txt").write_text("x")
    with pytest.raises(SystemExit) as e:
        main(["-q", "demo", "-o", str(out)])
    assert e.value.code == 2
    assert "--overwrite" in capsys.readouterr().err
