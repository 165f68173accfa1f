"""The ``basinkit condition`` and ``basinkit route`` commands, run through
``basinkit.cli.main`` on small GeoTIFFs.

External checks: the input's SHA-256 is recomputed with Python's hashlib (FIPS 180-4); the
georeferencing of every output is read back with rasterio (GDAL); the conditioned surface
equals scikit-image reconstruction by erosion (Vincent 1993; Soille 2004); the burned
culvert and breached dam follow the closed-form constructions of
tests/test_conditioning_extras.py (Lindsay 2016 for breaching).
"""

import hashlib
import json

import numpy as np
import pytest
import rasterio
from affine import Affine
from shapely.geometry import LineString

from basinkit import write_flow_folder
import basinkit
from basinkit import load_flow, read_dem, route
from basinkit.cli.main import main

from test_conditioning_extras import dam_valley, embankment_valley

TR = Affine(10, 0, 500000, 0, -10, 5000000)
UTM = "EPSG:32633"
# the DEM as read is referenced by path and SHA-256 in flow.json, copied only with
# --copy-input (README, the flow folder)
FLOW_FILES = {"elevation_conditioned.tif", "direction_d8.tif",
              "accumulation_cells.tif", "upstream_area_m2.tif", "flow.json"}


def write_tif(path, data, transform=TR, crs=UTM, nodata=None):
    data = np.asarray(data, dtype=np.float32)
    if data.ndim == 2:
        data = data[None]
    profile = dict(driver="GTiff", width=data.shape[2], height=data.shape[1],
                   count=data.shape[0], dtype="float32", transform=transform, nodata=nodata)
    if crs is not None:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(data)
    return path


def run(argv, capsys):
    """Run the CLI; return (exit code, stdout, stderr)."""
    with pytest.raises(SystemExit) as exc:
        main([str(a) for a in argv])
    out = capsys.readouterr()
    code = exc.value.code
    return (0 if code is None else code), out.out, out.err


def assert_clean_failure(code, err, fragment):
    assert code != 0
    assert "Traceback" not in err
    errors = [ln for ln in err.splitlines() if ln.startswith("error:")]
    assert len(errors) == 1, err
    assert fragment in errors[0], errors[0]


def sha256(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture
def fractal_tif(tmp_path):
    from conftest import fractal_dem

    z = fractal_dem(60, 50, seed=7, relief=200, holes=2)
    return write_tif(tmp_path / "dem.tif", z, nodata=np.nan), z


def test_route_writes_flow_folder(tmp_path, capsys, fractal_tif):
    dem, z = fractal_tif
    out = tmp_path / "flow"
    code, _, err = run(["route", dem, "-o", out], capsys)
    assert code == 0, err
    assert "wrote flow folder" in err
    # nothing temporary left over: the products and the manifest of the run's files
    assert {p.name for p in out.iterdir()} == FLOW_FILES | {".basinkit-manifest.json"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dem.tif", "flow"]
    for name in FLOW_FILES - {"flow.json"}:
        with rasterio.open(out / name) as ds:
            assert ds.transform == TR
            assert ds.crs.to_epsg() == 32633
            assert (ds.height, ds.width) == z.shape
    meta = json.loads((out / "flow.json").read_text())
    assert meta["version"] == basinkit.__version__
    assert meta["parameters"]["method"] == "d8"
    assert meta["parameters"]["conditioning"] == "fill"
    assert meta["inputs"]["dem"]["sha256"] == sha256(dem)
    assert meta["crs_epsg"] == 32633
    assert meta["grid_shape"] == [60, 50]
    with rasterio.open(out / "direction_d8.tif") as ds:
        d8 = ds.read(1)
    assert set(np.unique(d8).tolist()) <= {-32768, -1, 0, 45, 90, 135, 180, 225, 270, 315}
    assert (d8[np.isnan(z)] == -32768).all()


def test_load_flow_round_trips(tmp_path, capsys, fractal_tif):
    dem, z = fractal_tif
    out = tmp_path / "flow"
    assert run(["route", dem, "-o", out], capsys)[0] == 0
    fm = load_flow(out)
    ref = route(read_dem(dem))
    assert np.array_equal(fm.receiver, ref.receiver)
    assert np.array_equal(fm.accumulation(), ref.accumulation())
    np.testing.assert_array_equal(fm.upstream_area(), ref.upstream_area())
    assert np.array_equal(fm.terrain.elevation, ref.terrain.elevation, equal_nan=True)
    with rasterio.open(out / "accumulation_cells.tif") as ds:
        cells = ds.read(1)
    v = ~np.isnan(z)
    assert np.array_equal(cells[v], ref.accumulation()[v])


def test_condition_writes_dem_and_summary(tmp_path, capsys, fractal_tif):
    from test_conditioning_extras import no_depressions

    dem, z = fractal_tif
    out = tmp_path / "filled.tif"
    code, _, err = run(["condition", dem, "-o", out], capsys)
    assert code == 0, err
    assert "cells raised" in err
    with rasterio.open(out) as ds:
        f = ds.read(1)
        assert ds.transform == TR and ds.crs.to_epsg() == 32633
    assert no_depressions(f)  # scikit-image reconstruction leaves it unchanged
    v = ~np.isnan(z)
    assert (f[v] >= z[v]).all()
    meta = json.loads(out.with_suffix(".json").read_text())
    assert meta["inputs"]["dem"]["sha256"] == sha256(dem)
    assert meta["summary"]["cells_raised"] == int((f[v] > z[v]).sum())
    assert meta["grid_shape"] == [60, 50] and meta["version"] == basinkit.__version__
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dem.tif", "filled.json",
                                                          "filled.tif"]


def test_existing_output_refused_unless_overwrite(tmp_path, capsys, fractal_tif):
    dem, _ = fractal_tif
    out = tmp_path / "filled.tif"
    out.write_text("keep me")
    code, _, err = run(["condition", dem, "-o", out], capsys)
    assert_clean_failure(code, err, "already exists")
    assert out.read_text() == "keep me"
    assert not out.with_suffix(".json").exists()
    assert run(["condition", dem, "-o", out, "--overwrite"], capsys)[0] == 0
    with rasterio.open(out) as ds:
        assert ds.count == 1
    flow = tmp_path / "flow"
    assert run(["route", dem, "-o", flow], capsys)[0] == 0
    before = (flow / "flow.json").read_text()
    code, _, err = run(["route", dem, "-o", flow], capsys)
    assert_clean_failure(code, err, "already holds files")
    assert (flow / "flow.json").read_text() == before
    assert run(["route", dem, "-o", flow, "--overwrite"], capsys)[0] == 0


def _bad_inputs(tmp):
    """(name, argv builder, message fragment) for inputs that must fail cleanly."""
    z = dam_valley()
    good = write_tif(tmp / "good.tif", z)
    text = tmp / "text.tif"
    text.write_text("x,y,z\n")
    multi = write_tif(tmp / "multi.tif", np.stack([z, z]))
    empty = write_tif(tmp / "empty.tif", np.full((4, 4), -9999.0), nodata=-9999)
    nocrs = write_tif(tmp / "nocrs.tif", z, crs=None)
    big = write_tif(tmp / "whole.tif", np.tile(z, (10, 10)))
    cut = tmp / "cut.tif"
    cut.write_bytes(big.read_bytes()[: big.stat().st_size // 2])
    return [
        ("missing", [tmp / "none.tif"], "does not exist"),
        ("text", [text], "not a raster"),
        ("multiband", [multi], "--band"),
        ("band out of range", [multi, "--band", "3"], "band 3 does not exist"),
        ("all nodata", [empty], "no valid cells"),
        ("no crs", [nocrs], "no coordinate reference system"),
        ("bad crs", [nocrs, "--crs", "EPSG:nonsense"], "cannot understand the CRS"),
        ("truncated", [cut], "damaged or truncated"),
        ("missing burn", [good, "--burn", tmp / "culverts.gpkg"], "does not exist"),
        ("bad breach length", [good, "--method", "breach", "--max-breach-length", "far"],
         "--max-breach-length"),
        ("missing base level", [good, "--base-level", tmp / "lake.tif"], "does not exist"),
    ]


@pytest.mark.parametrize("command", ["condition", "route"])
def test_bad_inputs_fail_cleanly(tmp_path, capsys, command):
    """Each bad input: exit code != 0, one error line, no traceback, no output written
    (common practice for command-line tools, no source)."""
    for name, args, fragment in _bad_inputs(tmp_path):
        out = tmp_path / f"out_{command}_{name.replace(' ', '_')}"
        target = out.with_suffix(".tif") if command == "condition" else out
        argv = [command, *args, "-o", target]
        if command == "route" and "--method" in argv:  # route calls it --condition
            argv[argv.index("--method")] = "--condition"
        code, _, err = run(argv, capsys)
        assert_clean_failure(code, err, fragment)
        assert not target.exists(), name
        assert not target.with_suffix(".json").exists(), name
        assert not [p for p in tmp_path.iterdir() if ".part" in p.name], name


def test_band_and_crs_options(tmp_path, capsys):
    z = dam_valley()
    multi = write_tif(tmp_path / "multi.tif", np.stack([z + 500, z]), crs=None)
    out = tmp_path / "flow"
    code, _, err = run(["route", multi, "--band", "2", "--crs", "EPSG:32633", "--copy-input",
                        "-o", out], capsys)
    assert code == 0, err
    with rasterio.open(out / "elevation_input.tif") as ds:
        assert np.array_equal(ds.read(1), z.astype(np.float32))
        assert ds.crs.to_epsg() == 32633
    meta = json.loads((out / "flow.json").read_text())
    assert meta["inputs"]["dem"]["band"] == 2 and meta["crs_epsg"] == 32633


def test_sea_level_and_base_level_options(tmp_path, capsys):
    z = dam_valley()
    dem = write_tif(tmp_path / "dem.tif", z)
    out = tmp_path / "coast"
    assert run(["route", dem, "--sea-level", "3", "-o", out], capsys)[0] == 0
    with rasterio.open(out / "direction_d8.tif") as ds:
        d8 = ds.read(1)
    assert (d8[z <= 3] == -1).all()
    assert json.loads((out / "flow.json").read_text())["parameters"]["sea_level"] == 3.0
    # a pond mask raster behind the dam makes the pond an exit: nothing is filled
    pond = np.zeros(z.shape, np.float32)
    pond[14, 10] = 1
    mask = write_tif(tmp_path / "pond.tif", pond)
    out2 = tmp_path / "lake"
    code, _, err = run(["route", dem, "--base-level", mask, "-o", out2], capsys)
    assert code == 0, err
    meta = json.loads((out2 / "flow.json").read_text())
    assert meta["conditioning"]["cells_raised"] == 0 and meta["base_level"] is True
    out3 = tmp_path / "plain"
    assert run(["route", dem, "-o", out3], capsys)[0] == 0
    assert json.loads((out3 / "flow.json").read_text())["conditioning"]["cells_raised"] > 0


def test_burn_option(tmp_path, capsys):
    """A culvert GeoPackage burned from the command line drains the whole valley to the
    outlet (closed-form construction, see test_conditioning_extras)."""
    import geopandas as gpd

    z, t, culvert = embankment_valley()
    tr = Affine(10, 0, 0, 0, -10, 10 * z.shape[0])
    dem = write_tif(tmp_path / "road.tif", z, transform=tr)
    lines = tmp_path / "culverts.gpkg"
    gpd.GeoDataFrame(geometry=[culvert], crs=UTM).to_file(lines, driver="GPKG")
    out = tmp_path / "flow"
    code, _, err = run(["route", dem, "--burn", lines, "--burn-depth", "3", "-o", out],
                       capsys)
    assert code == 0, err
    assert "7 burned" in err
    with rasterio.open(out / "accumulation_cells.tif") as ds:
        acc = ds.read(1)
    assert acc[-1, z.shape[1] // 2] == z.size
    meta = json.loads((out / "flow.json").read_text())
    assert meta["conditioning"]["burned_cells"] == 7
    assert meta["parameters"]["burn_depth"] == 3.0
    # without the culvert the outlet gets about half the valley
    out2 = tmp_path / "flow_noburn"
    assert run(["route", dem, "-o", out2], capsys)[0] == 0
    with rasterio.open(out2 / "accumulation_cells.tif") as ds:
        assert ds.read(1)[-1, z.shape[1] // 2] < 0.6 * z.size
    # the condition command burns too
    cond = tmp_path / "burned.tif"
    assert run(["condition", dem, "--burn", lines, "--burn-depth", "3", "-o", cond],
               capsys)[0] == 0
    assert json.loads(cond.with_suffix(".json").read_text())["summary"]["burned_cells"] == 7


def test_breach_method_option(tmp_path, capsys):
    """Lindsay (2016): breaching cuts the one dam cell; a 3 m depth limit leaves the 3.5 m
    dam and fills the pond instead."""
    z = dam_valley()
    dem = write_tif(tmp_path / "dam.tif", z)
    out = tmp_path / "breached.tif"
    code, _, err = run(["condition", dem, "--method", "breach", "-o", out], capsys)
    assert code == 0, err
    with rasterio.open(out) as ds:
        b = ds.read(1)
    assert np.argwhere(b != z.astype(np.float32)).tolist() == [[15, 10]]
    out2 = tmp_path / "limited.tif"
    assert run(["condition", dem, "--method", "breach", "--max-breach-depth", "3",
                "-o", out2], capsys)[0] == 0
    s = json.loads(out2.with_suffix(".json").read_text())["summary"]
    assert s["cells_lowered"] == 0 and s["cells_raised"] > 10
    out3 = tmp_path / "short.tif"
    assert run(["condition", dem, "--method", "breach", "--max-breach-length", "0.01km",
                "-o", out3], capsys)[0] == 0
    s3 = json.loads(out3.with_suffix(".json").read_text())
    assert s3["summary"]["cells_lowered"] == 0  # 10 m < 20 m needed from pit to below dam
    assert s3["parameters"]["max_breach_length_m"] == 10.0
    flow = tmp_path / "flow"
    assert run(["route", dem, "--condition", "breach", "-o", flow], capsys)[0] == 0
    with rasterio.open(flow / "accumulation_cells.tif") as ds:
        assert ds.read(1)[-1, 10] == z.size


def test_load_flow_refuses_looping_directions_and_exits_into_nodata(tmp_path):
    """A direction raster edited by hand: a two-cell loop is refused with a clear message;
    a direction into nodata is read as an exit (common practice, no source)."""
    import numpy as np
    import rasterio
    import pytest

    from basinkit import InputError, load_flow, route, terrain_from_array
    from basinkit.io.flow_folder import FILES

    z = np.add.outer(np.arange(6.0, 0, -1), np.zeros(5))
    z[0, 0] = np.nan
    write_flow_folder(route(terrain_from_array(z, cellsize=10)), tmp_path / "flow")
    path = tmp_path / "flow" / FILES["d8"]
    with rasterio.open(path) as ds:
        d = ds.read(1)
        prof = ds.profile
    d[1, 0] = 0  # north, into the nodata cell (0, 0)
    with rasterio.open(path, "w", **prof) as ds:
        ds.write(d, 1)
    fm = load_flow(tmp_path / "flow")
    assert fm.receiver[1 * 5 + 0] == -1
    d[2, 2], d[3, 2] = 180, 0  # (2,2) -> (3,2) -> (2,2)
    with rasterio.open(path, "w", **prof) as ds:
        ds.write(d, 1)
    with pytest.raises(InputError, match="loop"):
        load_flow(tmp_path / "flow")


def test_only_a_process_of_its_own_freezes_the_collector_at_exit(monkeypatch):
    """Common practice (no source): main() called with arguments (a host program, the
    tests) leaves the garbage collector as it is; without arguments (the ``basinkit``
    process) it freezes it just before exiting, so the interpreter's exit skips the
    collector's walks."""
    import importlib
    import sys

    cli_main = importlib.import_module("basinkit.cli.main")

    calls = []
    monkeypatch.setattr(cli_main, "_skip_exit_collections", lambda: calls.append(1))
    with pytest.raises(SystemExit):
        cli_main.main(["--help"])
    assert calls == []
    monkeypatch.setattr(sys, "argv", ["basinkit", "--help"])
    with pytest.raises(SystemExit):
        cli_main.main()
    assert calls == [1]
