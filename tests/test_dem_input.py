"""Reading DEMs from raster files: formats, nodata, CRS, units, memory and base level.

Every raster is written here with rasterio (GDAL) and read back with ``read_dem``; the
expected values come from how the files were written, from the legal definitions of the
foot (international foot = 0.3048 m exactly, 1959 agreement; US survey foot = 1200/3937 m
exactly, US Metric Act of 1866 / Mendenhall Order 1893) and from shapely's point-in-polygon
test for base-level polygons.
"""

import numpy as np
import pytest
import rasterio
from affine import Affine

import basinkit.terrain.memory as terrain_mod
from basinkit import InputError, MemoryBudgetError, read_dem, route, terrain_from_array

UTM = "EPSG:32633"


def write_tif(path, data, transform=None, crs=UTM, nodata=None, dtype=None):
    """Write a (bands, rows, cols) or (rows, cols) array as a GeoTIFF."""
    data = np.asarray(data)
    if data.ndim == 2:
        data = data[None]
    count, nr, nc = data.shape
    if transform is None:
        transform = Affine(10, 0, 500000, 0, -10, 5000000)
    profile = dict(driver="GTiff", width=nc, height=nr, count=count,
                   dtype=dtype or data.dtype, transform=transform, nodata=nodata)
    if crs is not None:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(data.astype(dtype or data.dtype))
    return path


def slope(nr=12, nc=10):
    r, c = np.mgrid[0:nr, 0:nc]
    return (100.0 - 2.0 * r + 0.1 * c).astype(np.float32)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_dem(tmp_path / "nowhere.tif")


def test_folder_is_not_a_raster(tmp_path):
    with pytest.raises(InputError, match="folder"):
        read_dem(tmp_path)


def test_text_file_is_not_a_raster(tmp_path):
    p = tmp_path / "dem.tif"
    p.write_text("elevation,x,y\n1,2,3\n")
    with pytest.raises(InputError, match="not a raster"):
        read_dem(p)


def test_multiband_needs_band(tmp_path):
    z = slope()
    p = write_tif(tmp_path / "multi.tif", np.stack([z, z + 1000, z + 2000]))
    with pytest.raises(InputError, match="3 bands.*--band"):
        read_dem(p)
    t = read_dem(p, band=2)
    assert np.array_equal(t.elevation, z + 1000)
    assert t.source["band"] == 2
    with pytest.raises(InputError, match="band 4 does not exist"):
        read_dem(p, band=4)


def test_all_nodata_refused(tmp_path):
    p = write_tif(tmp_path / "empty.tif", np.full((5, 6), -9999, np.float32), nodata=-9999)
    with pytest.raises(InputError, match="no valid cells"):
        read_dem(p)
    p = write_tif(tmp_path / "nan.tif", np.full((5, 6), np.nan, np.float32), nodata=np.nan)
    with pytest.raises(InputError, match="no valid cells"):
        read_dem(p)


def test_nan_nodata(tmp_path):
    """NaN declared as nodata, and NaN without any declared nodata, are both missing."""
    z = slope()
    z[3:5, 2:4] = np.nan
    for nod in (np.nan, None):
        t = read_dem(write_tif(tmp_path / f"nan_{nod}.tif", z, nodata=nod))
        assert np.array_equal(t.valid, np.isfinite(z))
        assert np.isnan(t.elevation[~t.valid]).all()
        assert np.array_equal(t.elevation[t.valid], z[np.isfinite(z)])


@pytest.mark.parametrize("dtype,nodata", [("int16", -9999), ("uint16", 0), ("int32", -1)])
def test_integer_dem_with_nodata(tmp_path, dtype, nodata):
    z = np.round(slope() * 3).astype(dtype)
    z[0, 0] = nodata
    z[6, 4] = nodata
    t = read_dem(write_tif(tmp_path / "int.tif", z, nodata=nodata))
    assert t.elevation.dtype == np.float32
    assert not t.valid[0, 0] and not t.valid[6, 4] and t.valid.sum() == z.size - 2
    assert np.array_equal(t.elevation[t.valid], z[t.valid].astype(np.float32))
    fm = route(t)
    assert fm.accumulation()[fm.receiver.reshape(z.shape) == -1].sum() == z.size - 2


@pytest.mark.parametrize("shape", [(1, 1), (2, 2)])
def test_tiny_grids_route(tmp_path, shape):
    z = np.arange(np.prod(shape), dtype=np.float32).reshape(shape)
    t = read_dem(write_tif(tmp_path / "tiny.tif", z))
    fm = route(t)
    acc = fm.accumulation()
    # every cell is on the edge, hence an exit or draining into a lower edge cell
    assert acc[fm.receiver.reshape(shape) == -1].sum() == z.size
    assert fm.upstream_area().max() <= 100.0 * z.size


def test_no_crs_refused_unless_given(tmp_path):
    p = write_tif(tmp_path / "nocrs.tif", slope(), crs=None)
    with pytest.raises(InputError, match="no coordinate reference system.*--crs"):
        read_dem(p)
    t = read_dem(p, crs=UTM)
    assert t.crs.to_epsg() == 32633
    assert t.geometry.dx[0] == 10.0
    with pytest.raises(InputError, match="cannot understand the CRS"):
        read_dem(p, crs="EPSG:not-a-code")


def test_rows_south_to_north_are_flipped(tmp_path):
    """A raster stored with its first row in the south (positive pixel height) is turned
    north-up: the cell at a given map coordinate keeps its value."""
    z = slope()
    nr = z.shape[0]
    tr = Affine(10, 0, 500000, 0, 10, 4999880)  # row 0 is the southern row
    t = read_dem(write_tif(tmp_path / "southup.tif", z, transform=tr))
    assert t.transform.e < 0
    assert t.transform.f == pytest.approx(4999880 + 10 * nr)
    assert np.array_equal(t.elevation, z[::-1])
    # value at a map point agrees with the file
    x, y = 500035.0, 4999885.0  # in the file's row 0, column 3
    r, c = t.rowcol_of(x, y)
    assert t.elevation[r, c] == z[0, 3]
    # water still runs downhill: in the file elevation falls with the row index, i.e. to the
    # north, so D8 points north (azimuth 0)
    assert (route(t).direction_d8()[1:-1, 1:-1] == 0).all()


@pytest.mark.parametrize("epsg,metres_per_unit", [
    (2277, 1200 / 3937),  # NAD83 / Texas Central (ftUS): US survey foot, legal definition
    (2222, 0.3048),       # NAD83 / Arizona East (ft): international foot, 1959 agreement
])
def test_feet_give_metres(tmp_path, epsg, metres_per_unit):
    tr = Affine(30, 0, 2000000, 0, -20, 10000000)  # 30 ft by 20 ft cells
    t = read_dem(write_tif(tmp_path / "feet.tif", slope(), transform=tr,
                           crs=f"EPSG:{epsg}"))
    g = t.geometry
    assert not g.geographic
    np.testing.assert_allclose(g.dx, 30 * metres_per_unit, rtol=1e-12)
    np.testing.assert_allclose(g.dy_down, 20 * metres_per_unit, rtol=1e-12)
    np.testing.assert_allclose(g.diag_down, np.hypot(30, 20) * metres_per_unit, rtol=1e-12)
    np.testing.assert_allclose(g.area, 600 * metres_per_unit ** 2, rtol=1e-12)
    fm = route(t)
    np.testing.assert_allclose(np.nansum(fm.upstream_area()[fm.receiver.reshape(t.shape)
                                                            == -1]),
                               t.size * 600 * metres_per_unit ** 2, rtol=1e-12)


def test_memory_refusal_says_how_much(tmp_path, monkeypatch):
    p = write_tif(tmp_path / "big.tif", slope(40, 50))
    monkeypatch.setattr(terrain_mod, "available_memory_bytes", lambda: 1000)
    with pytest.raises(MemoryBudgetError) as exc:
        read_dem(p)
    msg = str(exc.value)
    need = 40 * 50 * terrain_mod.ROUTE_BYTES_PER_CELL
    assert "2,000 cells" in msg
    assert f"{need / 1024:.1f} KiB" in msg  # the amount needed, in a readable unit
    assert "available" in msg
    # routing an in-memory terrain checks too
    t = terrain_from_array(slope(40, 50))
    with pytest.raises(MemoryBudgetError):
        route(t)
    # and the check can be switched off for reading
    assert read_dem(p, check_ram=False).shape == (40, 50)


def test_memory_message_units():
    """Sizes are printed in a unit that makes them readable (common practice, no source)."""
    from basinkit.terrain.memory import format_bytes

    assert format_bytes(512) == "512 bytes"
    assert format_bytes(90000) == "87.9 KiB"
    assert format_bytes(45 * 4096 ** 2) == "720.0 MiB"
    assert format_bytes(45 * 16384 ** 2) == "11.2 GiB"


def test_sea_level_cells_are_exits(tmp_path):
    z = slope()  # 100 .. 78 from north to south
    t = read_dem(write_tif(tmp_path / "coast.tif", z), sea_level=82.0)
    assert np.array_equal(t.base_level, z <= 82.0)
    fm = route(t)
    rec = fm.receiver.reshape(z.shape)
    assert (rec[z <= 82.0] == -1).all()
    assert (fm.terrain.elevation[z <= 82.0] == z[z <= 82.0]).all()


def test_base_level_mask_raster(tmp_path):
    """A lake in the middle of a bowl: without base level the bowl fills; with the lake as
    base level its cells are exits and nothing is raised."""
    r, c = np.mgrid[0:15, 0:15]
    z = (np.hypot(r - 7, c - 7) * 2.0 + 10.0).astype(np.float32)  # bowl, lowest at centre
    lake = (np.hypot(r - 7, c - 7) <= 2).astype(np.uint8)
    dem = write_tif(tmp_path / "bowl.tif", z)
    mask = write_tif(tmp_path / "lake.tif", lake)
    t = read_dem(dem, base_level=mask)
    assert np.array_equal(t.base_level, lake.astype(bool))
    fm = route(t)
    assert fm.summary.cells_raised == 0
    assert (fm.receiver.reshape(z.shape)[lake.astype(bool)] == -1).all()
    assert route(read_dem(dem)).summary.cells_raised > 0  # without it the bowl fills
    # a mask on another grid is refused
    other = write_tif(tmp_path / "other.tif", lake[:10],
                      transform=Affine(10, 0, 500000, 0, -10, 5000000))
    with pytest.raises(InputError, match="not on the DEM's grid"):
        read_dem(dem, base_level=other)
    with pytest.raises(InputError, match="does not exist"):
        read_dem(dem, base_level=tmp_path / "no_lake.tif")


def test_base_level_polygon_geopackage(tmp_path):
    """Cells whose centre lies inside the reservoir polygon are exits (shapely's
    point-in-polygon test is the reference), also when the layer is in another CRS."""
    import geopandas as gpd
    import shapely
    from shapely.geometry import Polygon

    r, c = np.mgrid[0:15, 0:15]
    z = (np.hypot(r - 7, c - 7) * 2.0 + 10.0).astype(np.float32)
    dem = write_tif(tmp_path / "bowl.tif", z)
    poly = Polygon([(500032, 4999925), (500101, 4999921), (500088, 4999868),
                    (500041, 4999874)])
    p = tmp_path / "reservoir.gpkg"
    gpd.GeoDataFrame(geometry=[poly], crs=UTM).to_crs("EPSG:4326").to_file(p, driver="GPKG")
    t = read_dem(dem, base_level=p)
    xs, ys = t.xy_of(r, c)
    inside = shapely.contains_xy(poly, xs, ys)
    assert inside.sum() > 5
    assert np.array_equal(t.base_level, inside)
    fm = route(t)
    assert (fm.receiver.reshape(z.shape)[inside] == -1).all()


def test_rotated_grid_refused(tmp_path):
    tr = Affine(10, 2, 500000, 1, -10, 5000000)
    with pytest.raises(InputError, match="rotated"):
        read_dem(write_tif(tmp_path / "rot.tif", slope(), transform=tr))


def test_truncated_file_is_a_clear_error(tmp_path):
    """A GeoTIFF cut short (an interrupted copy) opens but cannot be read: InputError."""
    p = write_tif(tmp_path / "whole.tif", np.tile(slope(), (30, 30)))
    data = p.read_bytes()
    cut = tmp_path / "cut.tif"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match="damaged or truncated"):
        read_dem(cut)


def test_base_level_file_that_is_no_raster(tmp_path):
    dem = write_tif(tmp_path / "dem.tif", slope())
    junk = tmp_path / "lake.tif"
    junk.write_text("not a mask")
    with pytest.raises(InputError, match="cannot read the base-level file"):
        read_dem(dem, base_level=junk)
