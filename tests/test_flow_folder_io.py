"""The flow folder's files: codec, the DEM referenced instead of copied, byte-identical runs.

Sources: the GDAL GTiff driver documentation (COMPRESS=ZSTD/DEFLATE, ZSTD_LEVEL, PREDICTOR,
NUM_THREADS; a codec GDAL lacks is ignored with a warning), read back with rasterio (a
reference library); the output contract in DESIGN.md (byte-identical reruns, one clear
line for a bad input).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import rasterio
from affine import Affine

from basinkit import load_flow, read_dem, route, write_flow_folder
from basinkit.errors import InputError
from basinkit.io import writers
from basinkit.io.flow_folder import FILES, FlowFolderWriter

TR = Affine(10, 0, 500000, 0, -10, 5000000)


def write_dem(path, z):
    with rasterio.open(path, "w", driver="GTiff", height=z.shape[0], width=z.shape[1],
                       count=1, dtype="float32", crs="EPSG:32633", transform=TR,
                       nodata=np.nan) as ds:
        ds.write(z.astype(np.float32), 1)
    return path


@pytest.fixture
def dem300(tmp_path, fractal):
    # more than one 256-cell tile each way, so that tiles compress in GDAL's threads
    z = fractal(300, 280, seed=3, holes=2)
    return write_dem(tmp_path / "dem.tif", z), z


def digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_products_are_tiled_zstd_and_read_back_exactly(tmp_path, dem300):
    """GDAL GTiff driver: ZSTD with 256 x 256 tiles; the floating-point predictor on the
    float32 band only. Values read back unchanged (the codecs are lossless)."""
    dem, z = dem300
    fm = route(read_dem(dem))
    out = write_flow_folder(fm, tmp_path / "flow")
    meta = json.loads((out / FILES["meta"]).read_text())
    assert meta["raster_codec"] == "zstd"
    for key, pred in (("conditioned", 3), ("d8", 1), ("cells", 1), ("area", 1)):
        with rasterio.open(out / FILES[key]) as ds:
            assert ds.profile["compress"].lower() == "zstd", key
            assert ds.profile["tiled"] and ds.block_shapes[0] == (256, 256), key
            assert int(ds.tags(ns="IMAGE_STRUCTURE").get("PREDICTOR", 1)) == pred, key
            a = ds.read(1)
    with rasterio.open(out / FILES["conditioned"]) as ds:
        np.testing.assert_array_equal(ds.read(1), fm.terrain.elevation)
    with rasterio.open(out / FILES["area"]) as ds:
        np.testing.assert_array_equal(ds.read(1), fm.upstream_area())
    assert a.shape == z.shape


def test_without_zstd_the_rasters_are_deflate(tmp_path, dem300, monkeypatch):
    """A GDAL built without ZSTD (simulated: the probe says no) writes DEFLATE, which every
    GDAL reads, says so in flow.json, and the values are the same."""
    dem, _ = dem300
    fm = route(read_dem(dem))
    monkeypatch.setitem(writers._CODEC_SUPPORT, "zstd", False)
    assert writers.raster_codec() == "deflate"
    out = write_flow_folder(fm, tmp_path / "flow")
    assert json.loads((out / FILES["meta"]).read_text())["raster_codec"] == "deflate"
    for key in ("conditioned", "d8", "cells", "area"):
        with rasterio.open(out / FILES[key]) as ds:
            assert ds.profile["compress"].lower() == "deflate", key
    with rasterio.open(out / FILES["d8"]) as ds:
        np.testing.assert_array_equal(ds.read(1), fm.direction_d8())


def test_the_codec_probe_says_no_to_a_codec_gdal_lacks():
    """GDAL ignores an unknown COMPRESS value (GTiff driver documentation): the probe must
    see that the file came out uncompressed. DEFLATE is in every GDAL build."""
    assert writers.codec_available("deflate")
    assert not writers.codec_available("no-such-codec")


def test_two_runs_give_byte_identical_rasters(tmp_path, dem300):
    """Output contract: the same input gives the same bytes, threaded compression
    included."""
    dem, _ = dem300
    a = write_flow_folder(route(read_dem(dem)), tmp_path / "a")
    b = write_flow_folder(route(read_dem(dem)), tmp_path / "b")
    for key in ("conditioned", "d8", "cells", "area"):
        assert digest(a / FILES[key]) == digest(b / FILES[key]), key


def test_folder_written_while_routing_has_the_bytes_of_the_one_written_after(tmp_path,
                                                                            dem300):
    """Output contract (byte-identical products): the layers written in the background
    thread while route() runs (FlowFolderWriter) are the bytes write_flow_folder writes
    from the finished model, flow.json included. Closed form for the hand-over: route()
    hands over the conditioned elevations and the final receivers, once each."""
    dem, _ = dem300
    terrain = read_dem(dem)
    seen = []
    with FlowFolderWriter(tmp_path / "during", overwrite=False) as w:
        w.georeference(terrain)

        def ready(name, grid):
            seen.append((name, grid))
            w.ready(name, grid)

        fm = route(terrain, ready=ready)
        during = w.finish(fm)
    assert [n for n, _ in seen] == ["conditioned", "receivers"]
    np.testing.assert_array_equal(seen[0][1], fm.terrain.elevation)
    np.testing.assert_array_equal(seen[1][1], fm.receiver)
    after = write_flow_folder(route(read_dem(dem)), tmp_path / "after")
    for key in ("conditioned", "d8", "cells", "area", "meta"):
        assert digest(during / FILES[key]) == digest(after / FILES[key]), key


def test_a_failed_background_write_raises_and_the_thread_stops(tmp_path, dem300,
                                                               monkeypatch):
    """Common practice (no source): an error of the writing thread is raised by finish(),
    not lost, and leaving the block waits for the thread."""
    from basinkit.io import flow_folder

    dem, _ = dem300
    terrain = read_dem(dem)

    def broken(path, *args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(flow_folder, "_write_layer", broken)
    with pytest.raises(OSError, match="No space left"):
        with FlowFolderWriter(tmp_path / "flow") as w:
            w.georeference(terrain)
            w.finish(route(terrain, ready=w.ready))
    assert w._pool is None


def test_the_dem_is_referenced_and_read_back_from_its_file(tmp_path, dem300):
    """No copy of the DEM by default: flow.json names it with its SHA-256 (hashlib, the
    standard library), and load_flow reads the DEM as route read it."""
    dem, z = dem300
    fm = route(read_dem(dem))
    out = write_flow_folder(fm, tmp_path / "flow")
    assert not (out / FILES["input"]).exists()
    rec = json.loads((out / FILES["meta"]).read_text())["input_elevation"]
    assert rec == {"stored": "reference", "path": str(dem.resolve()),
                   "sha256": digest(dem), "band": 1}
    back = load_flow(out)
    np.testing.assert_array_equal(back.input_elevation, z.astype(np.float32))
    np.testing.assert_array_equal(back.input_elevation, fm.input_elevation)


def test_copy_input_keeps_the_dem_in_the_folder(tmp_path, dem300):
    """copy_input=True (route --copy-input) writes elevation_input.tif; the folder then
    reads without the original file."""
    dem, z = dem300
    out = write_flow_folder(route(read_dem(dem)), tmp_path / "flow", copy_input=True)
    rec = json.loads((out / FILES["meta"]).read_text())["input_elevation"]
    assert rec == {"stored": "copy", "file": FILES["input"]}
    dem.unlink()
    np.testing.assert_array_equal(load_flow(out).input_elevation, z.astype(np.float32))


def test_an_array_dem_is_always_copied(tmp_path, fractal):
    """A Terrain built from an array has no file to name: the copy is written."""
    from basinkit import terrain_from_array

    z = fractal(40, seed=5)
    out = write_flow_folder(route(terrain_from_array(z, cellsize=10)), tmp_path / "flow")
    assert (out / FILES["input"]).exists()
    np.testing.assert_array_equal(load_flow(out).input_elevation, z)


def test_a_changed_or_missing_dem_is_refused_with_what_to_do(tmp_path, dem300):
    """Output contract: a bad input is one clear line (InputError) saying what to do."""
    dem, z = dem300
    out = write_flow_folder(route(read_dem(dem)), tmp_path / "flow")
    write_dem(dem, z + 1)
    with pytest.raises(InputError, match="changed since.*--copy-input"):
        load_flow(out)
    dem.unlink()
    with pytest.raises(InputError, match="no longer there.*--copy-input"):
        load_flow(out)


def test_cli_delineate_on_a_folder_whose_dem_changed_exits_2(tmp_path, dem300, capsys):
    """The commands map that InputError to exit status 2, one line, no traceback."""
    from basinkit.cli.main import main

    def run(*argv):
        with pytest.raises(SystemExit) as exc:
            main([str(a) for a in argv])
        return exc.value.code or 0, capsys.readouterr().err

    dem, z = dem300
    flow = tmp_path / "flow"
    assert run("route", dem, "-o", flow)[0] == 0
    write_dem(dem, z[::-1].copy())
    x, y = TR @ (150.5, 140.5)
    code, err = run("delineate", flow, "--outlet", f"{x},{y}", "-o", tmp_path / "out")
    assert code == 2
    assert "changed since" in err and "Traceback" not in err


def test_csv_floats_are_the_bytes_pandas_writes(tmp_path):
    """write_csv formats floats itself (faster) but writes the bytes of pandas'
    ``to_csv(float_format="%.10g")`` (the reference library): float32 and float64, NaN
    empty, infinities, huge and tiny values, integers and text untouched."""
    import pandas as pd

    from basinkit.io.writers import write_csv

    rng = np.random.default_rng(7)
    n = 500
    df = pd.DataFrame({"f32": rng.normal(size=n).astype(np.float32),
                       "f64": rng.normal(size=n) * 10.0 ** rng.integers(-12, 12, n),
                       "count": np.arange(n), "name": [f"o{i}" for i in range(n)]})
    df.loc[3, "f32"] = np.nan
    df.loc[4, "f64"] = -np.inf
    df.loc[5, "f64"] = 0.1 + 0.2
    df["flag"] = np.arange(n) % 3 == 0
    df["note"] = [None if i % 7 == 0 else ("a, \"b\"" if i % 5 == 0 else "") for i in range(n)]
    df["mixed"] = [np.nan if i % 4 == 0 else f"w{i}" for i in range(n)]
    df["i32"] = np.arange(n, dtype=np.int32) - 250
    write_csv(tmp_path / "t.csv", df)
    want = df.to_csv(index=False, float_format="%.10g", lineterminator="\n")
    assert (tmp_path / "t.csv").read_bytes() == want.encode()
    for one in (df[["note"]], df[["f64"]], df.iloc[:0], df[["mixed"]].assign(x=df["f32"])):
        write_csv(tmp_path / "u.csv", one)
        want = one.to_csv(index=False, float_format="%.10g", lineterminator="\n")
        assert (tmp_path / "u.csv").read_bytes() == want.encode()


def test_streamed_table_is_written_like_the_others(tmp_path):
    """A table written piece by piece (CsvStream) has the bytes of write_csv for the same
    rows, the same file permissions (the user's umask, not a temporary file's 0600), and
    leaves nothing behind when discarded (common practice, no source)."""
    import pandas as pd

    from basinkit.io.writers import CsvStream, csv_rows, write_csv

    df = pd.DataFrame({"outlet_id": ["a", "b", "c"], "x": [1.5, np.nan, 3.25],
                       "n": [1, 2, 3]})
    cols = list(df.columns)
    table = CsvStream(tmp_path / "s.csv", cols)
    table.write_text(csv_rows(df.iloc[:2], cols))
    table.write_text(csv_rows(df.iloc[2:][["n", "outlet_id"]], cols))  # x left empty
    table.close()
    write_csv(tmp_path / "w.csv", df.assign(x=[1.5, np.nan, np.nan]))
    assert (tmp_path / "s.csv").read_bytes() == (tmp_path / "w.csv").read_bytes()
    assert (tmp_path / "s.csv").stat().st_mode == (tmp_path / "w.csv").stat().st_mode
    gone = CsvStream(tmp_path / "g.csv", cols)
    gone.write_text(csv_rows(df, cols))
    gone.discard()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.csv", "w.csv"]


def test_csv_numbers_across_magnitudes_are_the_bytes_pandas_writes(tmp_path):
    """The compiled formatting of numbers (io/_csv_text.py) against pandas'
    ``to_csv(float_format="%.10g")`` (the reference library, C99 ``%g``): values across
    the whole double range, powers of ten and their neighbours (where the exponent turns),
    ten-digit half-way points (rounded half to even by the C library), values that round up
    to the next power of ten, subnormals, signed zeros, the int64 and uint64 extremes, and
    text with commas, quotes, newlines, non-ASCII letters and a NUL character."""
    import pandas as pd

    from basinkit.io.writers import write_csv

    rng = np.random.default_rng(11)
    p10 = 10.0 ** np.arange(-30, 31)
    special = [0.0, -0.0, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308,
               9999999999.5, 9999999999.49, 999999999.5, 12345678905.0, 0.99999999995,
               9.9999999995e-5, 1e-4, 1e-5, 99999.999995, 0.1 + 0.2, 2.5, 1e16, 1e300, 1e-300]
    n = 40_000
    f = np.concatenate([rng.normal(size=n) * 10.0 ** rng.uniform(-320, 308, n),
                        np.round(rng.uniform(-1e4, 1e4, n), 3),
                        (np.arange(n) + 0.5) * 10.0 ** rng.integers(-12, 3, n),
                        # near ten-digit half-way points, where the rounding is decided
                        (rng.integers(10**9, 10**10, n) + 0.5
                         + rng.normal(size=n) * 10.0 ** rng.uniform(-9, -3, n))
                        * 10.0 ** (rng.integers(-40, 40, n) - 9.0),
                        p10, np.nextafter(p10, 0), np.nextafter(p10, np.inf), special])
    df = pd.DataFrame({"f": f, "f32": np.clip(f, -3e38, 3e38).astype(np.float32),
                       "i": rng.integers(-2**62, 2**62, f.size),
                       "t": [("é,\"x\"\n" if i % 9 == 0 else f"o{i}") for i in range(f.size)]})
    df.loc[0, "i"] = np.iinfo(np.int64).max
    write_csv(tmp_path / "a.csv", df)
    want = df.to_csv(index=False, float_format="%.10g", lineterminator="\n")
    assert (tmp_path / "a.csv").read_bytes() == want.encode()
    # columns the kernels leave to Python: the table is written value by value
    for odd in (pd.DataFrame({"u": np.array([0, 2**64 - 1], dtype=np.uint64), "x": [1.0, 2.0]}),
                pd.DataFrame({"i": [np.iinfo(np.int64).min, 0], "x": [1e-5, 2.0]}),
                pd.DataFrame({"t": ["a\0b", "c"], "x": [1.0, 2.0]})):
        write_csv(tmp_path / "b.csv", odd)
        want = odd.to_csv(index=False, float_format="%.10g", lineterminator="\n")
        assert (tmp_path / "b.csv").read_bytes() == want.encode()
    # a kind neither handles (dates): the rows are pandas', the fast columns' text the same
    dated = df.iloc[:3000].assign(when=pd.Timestamp("2026-01-02") + pd.to_timedelta(
        np.arange(3000), unit="h"))
    write_csv(tmp_path / "c.csv", dated)
    want = dated.to_csv(index=False, float_format="%.10g", lineterminator="\n")
    assert (tmp_path / "c.csv").read_bytes() == want.encode()
