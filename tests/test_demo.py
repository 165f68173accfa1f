"""The bundled demo basin and the demo job, end to end; and the demo job against the same
steps run as commands.

External checks: the crossing's catchment is recomputed with pysheds 0.5 (a reference
library, test-only) from the D8 direction raster the job wrote, and must agree cell for cell;
input and output hashes in provenance.json are recomputed with hashlib (FIPS 180-4
SHA-256); GeoPackage layers are read back with pyogrio (GDAL) and rasters with rasterio;
the generator is re-run and must reproduce the committed files byte for byte (its fixed
seed). That a job and the commands with the same settings give the same products is the
products contract of the project (common practice, no source).
"""

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from basinkit.report import write_report
from basinkit.workflow.jobfile import demo_job_path, read_job
from basinkit.workflow.runner import run_job

DEMO = Path(__file__).resolve().parents[1] / "demo_rasters"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The demo job run twice: once as shipped but with the report's detailed sections cut
    to two outlets (to keep the test fast), once without the report (the tables and rasters
    must not depend on it)."""
    base = tmp_path_factory.mktemp("demo")
    job = read_job(demo_job_path())
    job["outputs"]["report_outlets"] = ["crossing", "tributary_1"]
    first = run_job(job, output=base / "run1", report=write_report)
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
                 "catchments.gpkg", "catchments.json", "subcatchment_labels.tif",
                 "channel_segments.csv", "channels.gpkg", "channels.json",
                 "strahler_order.tif", "profile.csv", "steepness.csv", "knickpoints.csv",
                 "flow_paths.csv", "profiles.gpkg", "profiles.json", "morphometry.csv",
                 "hypsometry.csv", "morphometry.json", "design_flows.csv",
                 "hydrographs.csv", "design_flows.gpkg", "design_flows.json",
                 "figures/crossing_design_hydrograph.png", "figures/crossing_long_profile.png",
                 "figures/crossing_hypsometry.png", "report.html", "provenance.json"):
        assert (folder / name).is_file(), name
    # figures only for the figure outlets ([outputs] report_outlets), no per-outlet tables
    figs = {p.name.split("_")[0] for p in (folder / "figures").iterdir()}
    assert figs == {"crossing", "tributary"}
    assert not (folder / "outlet_errors.csv").exists()  # no outlet failed
    assert res.exit_status == 0
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
    paths = pd.read_csv(f / "flow_paths.csv")
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
        # no timings in the files: they differ from run to run (the console has them)
        assert st["status"] == "done" and "seconds" not in st, name
    assert "seconds_total" not in prov
    # every file written is listed with its hash, and the hashes are those of the files
    on_disk = {str(p.relative_to(res.folder)) for p in res.folder.rglob("*") if p.is_file()}
    assert set(prov["files"]) == on_disk - {"provenance.json", ".basinkit-manifest.json"}
    for name, h in prov["files"].items():
        assert hashlib.sha256((res.folder / name).read_bytes()).hexdigest() == h, name
    assert prov["cell_size"]["x"] == 10.0 and prov["vertical_units"].startswith("m")
    assert prov["snapping"]["radius_m"] == 30.0
    assert prov["snapping"]["snap_to_channel_m2"] == 1e4
    assert "licensed professional" in prov["cautions"]


def test_two_runs_are_byte_identical(runs):
    """Deterministic outputs: every CSV table, GeoTIFF raster, GeoPackage and figure is
    byte-identical between two runs of the same job."""
    a, b = runs
    files = sorted(p.relative_to(a.folder) for p in a.folder.rglob("*")
                   if p.suffix in (".csv", ".tif", ".gpkg", ".png"))
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


def _commands_for_the_demo_job(out):
    """The demo job (demo_rasters/demo_job.toml) written as the equivalent commands."""
    o = ["--outlets", DEMO / "outlets.csv", "--snap-radius", "30m", "--snap-to-channel",
         "1ha"]
    return [
        ["route", DEMO / "upland_valley.tif", "--burn", DEMO / "culverts.geojson",
         "--burn-depth", "1m", "-o", out / "flow"],
        ["delineate", out / "flow", *o, "--labels-raster", "-o", out / "catchments"],
        ["channels", out / "flow", "--min-area", "2ha", "--min-order", "1", *o,
         "-o", out / "channels"],
        ["profile", out / "flow", *o, "--min-area", "2ha", "--min-order", "1",
         "--concavity", "0.45", "--reference-area", "1m2", "-o", out / "profiles"],
        ["morphometry", out / "flow", *o, "--min-area", "2ha", "-o", out / "morphometry"],
        ["design-flow", out / "flow", *o, "--idf-table", DEMO / "design_idf.csv",
         "--return-period", "100", "--rainfall-pattern", "nrcs_type_ii", "--curve-number",
         "74", "--runoff-coefficient", "0.35", "--tc-method", "tr55_velocity",
         "--sheet-flow-n", "0.24", "--channel-n", "0.045", "--hydraulic-radius", "0.5m",
         "--channel-threshold", "2ha", "-o", out / "design_flow"],
    ]


def test_demo_job_and_commands_give_the_same_products(runs, tmp_path):
    """The demo job and the same steps run as commands give the same products: the same
    file names (the job's folder holds each command's files, the flow folder in flow/,
    plus provenance.json), the same GeoPackage layers, columns and values, and tables,
    rasters and figures byte for byte (the products contract, io/products.py)."""
    import pyogrio
    import rasterio

    from basinkit.cli.main import main

    _, job = runs  # the demo job without the report: figures for the first 20 outlets
    for argv in _commands_for_the_demo_job(tmp_path):
        with pytest.raises(SystemExit) as e:
            main(["-q", *map(str, argv)])
        assert e.value.code == 0, argv
    made = {}
    for sub in ("flow", "catchments", "channels", "profiles", "morphometry", "design_flow"):
        for p in (tmp_path / sub).rglob("*"):
            if p.is_file():
                rel = p.relative_to(tmp_path / sub).as_posix()
                if rel != ".basinkit-manifest.json":  # each folder's own record
                    made["flow/" + rel if sub == "flow" else rel] = p
    in_job = {p.relative_to(job.folder).as_posix(): p for p in job.folder.rglob("*")
              if p.is_file()}
    assert set(in_job) - set(made) == {"provenance.json", ".basinkit-manifest.json"}
    assert set(made) <= set(in_job)
    assert len(made) > 80  # 6 products, 13 outlets' figures
    for name, p in sorted(made.items()):
        q = in_job[name]
        if name.endswith(".json"):
            a, b = json.loads(p.read_text()), json.loads(q.read_text())
            assert a["cautions"] == b["cautions"] and a.get("files") == b.get("files"), name
            continue
        if name.endswith(".gpkg"):
            layers = pyogrio.list_layers(p).tolist()
            assert layers == pyogrio.list_layers(q).tolist(), name
            for layer, _ in layers:
                pd.testing.assert_frame_equal(pyogrio.read_dataframe(p, layer=layer),
                                              pyogrio.read_dataframe(q, layer=layer))
        if name.endswith(".tif"):
            with rasterio.open(p) as a, rasterio.open(q) as b:
                assert np.array_equal(a.read(), b.read(), equal_nan=True), name
        assert p.read_bytes() == q.read_bytes(), name
    # the products that must be there, by the contract
    for name in ("catchments.gpkg", "channels.gpkg", "profiles.gpkg", "design_flows.gpkg"):
        assert name in made
    assert [n for n, _ in pyogrio.list_layers(made["design_flows.gpkg"])] == \
        ["flow_path_segments", "outlets"]
    assert [n for n, _ in pyogrio.list_layers(made["catchments.gpkg"])] == \
        ["outlets", "catchments", "subcatchments", "errors"]
    assert [n for n, _ in pyogrio.list_layers(made["channels.gpkg"])] == \
        ["channels", "junctions"]
    assert [n for n, _ in pyogrio.list_layers(made["profiles.gpkg"])] == \
        ["profiles", "knickpoints"]
    steep = pd.read_csv(made["steepness.csv"])
    assert {"outlet_id", "segment_id", "ksn_m_per_m"} <= set(steep.columns)
    # k_sn per channel segment: one row per (outlet, segment), never per whole profile
    assert not steep.duplicated(["outlet_id", "segment_id"]).any()
    seg = pd.read_csv(made["channel_segments.csv"])
    assert set(steep["segment_id"]) <= set(seg["segment_id"])
