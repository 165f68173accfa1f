"""Depression filling and D8 directions by tiles (basinkit.tiles.fill, .directions) and the
DEM read by windows into a tile store (basinkit.io.tile_source).

Oracle: CHECKS.md, "Tiled and distributed paths": the tiled path equals the in-memory path
(``route(terrain, conditioning="fill")``) cell for cell -- filled elevations, receivers,
int16 directions and the count of cells without an outlet -- for any tile size, tiles of
one or a few cells and tiles that do not divide the grid included. The filled surface is
also checked against scikit-image's reconstruction by erosion (Vincent 1993, IEEE Trans.
Image Processing 2:176-201; Soille 2004, Morphological Image Analysis, ch. 6), which is the
depression-filled surface.
"""

import numpy as np
import pytest
from affine import Affine
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from basinkit import route, terrain_from_array
from basinkit.errors import InputError
from basinkit.io.dem import read_dem
from basinkit.io.tile_folder import TileFolder
from basinkit.io.tile_source import dem_into_tiles
from basinkit.tiles import MemoryTiles, TileLayout
from basinkit.tiles.directions import directions_by_tiles
from basinkit.tiles.route import grid_distances, route_by_tiles, write_terrain


def joined(store, layer):
    lay = store.layout
    return lay.join({t: np.asarray(store.read(layer, *t)) for t in lay.tiles()})


def by_tiles(terrain, tr, tc, store=None, engine=None):
    lay = TileLayout(terrain.shape[0], terrain.shape[1], tr, tc)
    store = store if store is not None else MemoryTiles(lay)
    write_terrain(lay, store, terrain)
    summary = route_by_tiles(lay, store, engine=engine)
    return store, summary


def assert_same_as_route(terrain, tr, tc, store=None, engine=None):
    fm = route(terrain, conditioning="fill")
    store, summary = by_tiles(terrain, tr, tc, store, engine)
    filled = joined(store, "filled")
    assert filled.dtype == np.float32
    assert np.array_equal(filled, fm.terrain.elevation, equal_nan=True)
    rec = joined(store, "receivers")
    assert rec.dtype == np.int64
    assert np.array_equal(rec.ravel(), fm.receiver.astype(np.int64))
    d = joined(store, "directions")
    assert d.dtype == np.int16
    assert np.array_equal(d, fm.direction_d8())
    assert summary["directions"]["cells_without_outlet"] == \
        fm.parameters.get("cells_without_outlet", 0)
    return summary


def crafted_grid():
    """A 23 × 19 grid, constructed so that tiles of 2 to 8 cells are crossed by: a closed
    depression (filled into a flat of 72 cells draining through one notch), a plateau flat
    that covers whole tiles, two flats at one elevation that share their outlet cell, a
    nodata hole, and base-level cells in a corner."""
    nr, nc = 23, 19
    r, c = np.mgrid[0:nr, 0:nc]
    z = 40.0 + r + 0.5 * c  # slopes down to the north-west corner
    z[3:13, 3:14] = 60.0  # rim of the depression
    z[4:12, 4:13] = 20.0  # its floor, below everything around: filled to the notch
    z[3, 8] = 45.0  # the notch on the northern rim
    z[14:21, 2:17] = 70.0  # a plateau flat spanning several tiles
    z[13, 9] = 69.0  # ... whose only outlet is this cell
    z[13, 8] = z[13, 10] = 75.0
    z[0:3, 14:19] = 30.0  # two flats of 30 separated by a wall, sharing the cell (2, 16)
    z[0:2, 16] = 31.0
    z[3, 16] = 29.0  # the shared cell drains south
    z[2, 16] = 30.0
    z[3, 15] = z[3, 17] = z[3, 14] = z[3, 18] = 32.0
    z[16:18, 5:8] = np.nan  # a nodata hole inside the plateau
    z[21:23, 17:19] = np.nan
    base = np.zeros((nr, nc), dtype=bool)
    base[20:23, 0:2] = True
    return z, base


@pytest.mark.parametrize("tr,tc", [(2, 2), (3, 3), (2, 5), (4, 7), (5, 5), (8, 6), (1, 3),
                                   (23, 19), (30, 30)])
def test_crafted_grid_equals_route(tr, tc):
    z, base = crafted_grid()
    terrain = terrain_from_array(z, cellsize=10.0, base_level=base)
    summary = assert_same_as_route(terrain, tr, tc)
    if tr * tc <= 25:  # the filled depression and the plateau cross tile borders
        assert summary["directions"]["crossing_flats"] >= 2


def test_crafted_grid_fill_equals_reconstruction():
    """Reconstruction by erosion (scikit-image) from the exits (grid edge, cells next to
    nodata, base level) is the depression-filled surface."""
    from skimage.morphology import reconstruction

    z, base = crafted_grid()
    terrain = terrain_from_array(z, cellsize=10.0, base_level=base)
    valid = terrain.valid
    mask = np.where(valid, terrain.elevation, -1e6).astype(np.float64)
    seed = np.full(mask.shape, 1e6)
    edge = np.zeros(mask.shape, dtype=bool)
    edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = True
    exits = ~valid | edge | base
    seed[exits] = mask[exits]
    expected = reconstruction(seed, mask, method="erosion")
    store, _ = by_tiles(terrain, 3, 4)
    got = joined(store, "filled")
    assert np.allclose(got[valid], expected[valid], rtol=0, atol=1e-4)
    assert (got[valid] > terrain.elevation[valid]).sum() >= 72  # the depression was filled


def test_geographic_grid_uses_the_distances_per_row():
    """On a longitude/latitude grid the neighbour distances change from row to row; the
    tiled path takes them from the store's metadata (``grid_distances``)."""
    rng = np.random.default_rng(7)
    z = rng.integers(0, 4, (17, 13)).astype(float)
    terrain = terrain_from_array(z, transform=Affine(0.01, 0, 10.0, 0, -0.01, 60.0),
                                 crs="EPSG:4326")
    lay = TileLayout(17, 13, 4, 3)
    store = MemoryTiles(lay)
    write_terrain(lay, store, terrain)
    assert np.array_equal(grid_distances(lay, store), terrain.geometry.neighbour_distances())
    assert_same_as_route(terrain, 4, 3)


def test_unconditioned_surface_counts_cells_without_outlet():
    """Routing the surface as it is (``surface="elevation"``): pits and closed flats get -1
    and are counted as ``route(conditioning="none")`` counts them."""
    rng = np.random.default_rng(3)
    z = rng.integers(0, 3, (14, 15)).astype(float)
    z[5:9, 5:9] = 0.0
    z[4, 4:10] = z[9, 4:10] = 5.0
    z[4:10, 4] = z[4:10, 9] = 5.0  # a closed flat of 16 cells crossing tile borders
    terrain = terrain_from_array(z)
    fm = route(terrain, conditioning="none")
    lay = TileLayout(14, 15, 3, 4)
    store = MemoryTiles(lay)
    write_terrain(lay, store, terrain)
    s = directions_by_tiles(lay, store, terrain.geometry.neighbour_distances(),
                            surface="elevation")
    assert np.array_equal(joined(store, "receivers").ravel(), fm.receiver)
    assert s["cells_without_outlet"] == fm.parameters["cells_without_outlet"] >= 16


def test_tile_folder_on_disk_gives_the_same(tmp_path):
    z, base = crafted_grid()
    terrain = terrain_from_array(z, cellsize=10.0, base_level=base)
    lay = TileLayout(23, 19, 4, 5)
    assert_same_as_route(terrain, 4, 5, TileFolder(tmp_path / "work", lay))
    assert (tmp_path / "work" / "directions" / "0_0.npy").exists()


@pytest.mark.parametrize("scheduler", ["threads", "synchronous"])
def test_tiles_as_dask_tasks_give_the_same(tmp_path, scheduler):
    """The per-tile steps of the fill and the directions as Dask tasks (two threads, or
    one after the other) give route()'s result, in memory and in a folder on disk."""
    from basinkit.tiles.engine import Engine

    z, base = crafted_grid()
    terrain = terrain_from_array(z, cellsize=10.0, base_level=base)
    with Engine(scheduler, workers=2) as engine:
        summary = assert_same_as_route(terrain, 3, 4, engine=engine)
        assert summary["directions"]["crossing_flats"] >= 2
        assert_same_as_route(terrain, 4, 5, TileFolder(tmp_path / "w", TileLayout(23, 19, 4, 5)),
                             engine=engine)


@st.composite
def small_grids(draw):
    nr = draw(st.integers(1, 12))
    nc = draw(st.integers(1, 12))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    z = rng.integers(0, draw(st.integers(2, 5)), (nr, nc)).astype(float)
    z[rng.random((nr, nc)) < draw(st.sampled_from([0.0, 0.1, 0.3]))] = np.nan
    if np.isnan(z).all():
        z[0, 0] = 1.0
    base = rng.random((nr, nc)) < 0.05 if draw(st.booleans()) else None
    tr = draw(st.integers(1, 6))
    tc = draw(st.integers(1, 6))
    return z, base, tr, tc


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_grids())
def test_random_grids_equal_route(case):
    """Integer elevations make flats (and flats across tile borders) frequent."""
    z, base, tr, tc = case
    assert_same_as_route(terrain_from_array(z, base_level=base), tr, tc)


# --- reading a DEM by windows -----------------------------------------------------------

def _write_tif(path, z, transform, nodata=-9999.0, crs="EPSG:32633"):
    import rasterio

    with rasterio.open(path, "w", driver="GTiff", height=z.shape[0], width=z.shape[1],
                       count=1, dtype="float32", crs=crs, transform=transform,
                       nodata=nodata) as ds:
        ds.write(np.where(np.isnan(z), nodata, z).astype(np.float32), 1)


def _dem(nr=21, nc=26):
    z, _ = crafted_grid()
    big = np.full((nr, nc), 80.0)
    big[:23, :19] = z[:nr, :nc] if nr <= 23 else z
    rng = np.random.default_rng(5)
    big += rng.integers(0, 3, big.shape)
    return big


def test_dem_read_by_windows_equals_read_dem(tmp_path):
    z = _dem()
    t = Affine(5.0, 0, 1000.0, 0, -5.0, 2000.0)
    _write_tif(tmp_path / "dem.tif", z, t)
    whole = read_dem(tmp_path / "dem.tif", sea_level=42.0)
    store = dem_into_tiles(tmp_path / "dem.tif", tile=4, folder=tmp_path / "work",
                           sea_level=42.0)
    assert store.layout.shape == whole.shape and store.layout.tile_rows == 4
    assert np.array_equal(joined(store, "elevation"), whole.elevation, equal_nan=True)
    assert np.array_equal(joined(store, "valid"), whole.valid)
    assert np.array_equal(joined(store, "base_level"), whole.base_level)
    assert Affine(*store.read_meta("transform")) == whole.transform
    route_by_tiles(store.layout, store)
    fm = route(whole)
    assert np.array_equal(joined(store, "directions"), fm.direction_d8())
    assert np.array_equal(joined(store, "filled"), fm.terrain.elevation, equal_nan=True)


def test_south_up_file_is_flipped(tmp_path):
    z = _dem(9, 7)
    _write_tif(tmp_path / "up.tif", z[::-1].copy(), Affine(5.0, 0, 0.0, 0, 5.0, 0.0))
    whole = read_dem(tmp_path / "up.tif")
    store = dem_into_tiles(tmp_path / "up.tif", tile=3)
    assert np.array_equal(joined(store, "elevation"), whole.elevation, equal_nan=True)
    assert Affine(*store.read_meta("transform")) == whole.transform


def test_folder_of_tiles_is_one_mosaic(tmp_path):
    z = _dem()
    t = Affine(5.0, 0, 1000.0, 0, -5.0, 2000.0)
    _write_tif(tmp_path / "dem.tif", z, t)
    parts = tmp_path / "parts"
    parts.mkdir()
    for i, (r0, r1) in enumerate(((0, 8), (8, 21))):
        for j, (c0, c1) in enumerate(((0, 11), (11, 26))):
            _write_tif(parts / f"p{i}{j}.tif", z[r0:r1, c0:c1],
                       t @ Affine.translation(c0, r0))
    whole = read_dem(tmp_path / "dem.tif")
    store = dem_into_tiles(parts, tile=5)
    assert np.array_equal(joined(store, "elevation"), whole.elevation, equal_nan=True)
    assert np.array_equal(joined(store, "valid"), whole.valid)
    assert Affine(*store.read_meta("transform")) == whole.transform
    assert store.read_meta("source")["files"] == ["p00.tif", "p01.tif", "p10.tif", "p11.tif"]


def test_bad_tile_sources_are_refused(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="holds no GeoTIFF"):
        dem_into_tiles(tmp_path / "empty")
    with pytest.raises(InputError, match="does not exist"):
        dem_into_tiles(tmp_path / "missing.tif")
    parts = tmp_path / "parts"
    parts.mkdir()
    z = _dem(6, 6)
    _write_tif(parts / "a.tif", z, Affine(5.0, 0, 0.0, 0, -5.0, 100.0))
    _write_tif(parts / "b.tif", z, Affine(5.0, 0, 32.5, 0, -5.0, 100.0))  # half a cell off
    with pytest.raises(InputError, match="not aligned"):
        dem_into_tiles(parts)
    (parts / "b.tif").unlink()
    _write_tif(parts / "b.tif", z, Affine(5.0, 0, 30.0, 0, -5.0, 100.0), crs="EPSG:32634")
    with pytest.raises(InputError, match="different CRSs"):
        dem_into_tiles(parts)


def test_vrt_mosaic_is_read_by_windows(tmp_path):
    """A VRT over two GeoTIFF halves reads as the whole DEM (GDAL's VRT format, written by
    hand here: two simple sources placed side by side)."""
    z = _dem()
    t = Affine(5.0, 0, 1000.0, 0, -5.0, 2000.0)
    _write_tif(tmp_path / "dem.tif", z, t)
    _write_tif(tmp_path / "west.tif", z[:, :13], t)
    _write_tif(tmp_path / "east.tif", z[:, 13:], t @ Affine.translation(13, 0))
    nr, nc = z.shape

    def source(name, c0, w):
        return (f"<SimpleSource><SourceFilename relativeToVRT=\"1\">{name}</SourceFilename>"
                f"<SourceBand>1</SourceBand><SrcRect xOff=\"0\" yOff=\"0\" xSize=\"{w}\" "
                f"ySize=\"{nr}\"/><DstRect xOff=\"{c0}\" yOff=\"0\" xSize=\"{w}\" "
                f"ySize=\"{nr}\"/></SimpleSource>")

    import rasterio

    with rasterio.open(tmp_path / "dem.tif") as ds:
        wkt = ds.crs.to_wkt()
    (tmp_path / "mosaic.vrt").write_text(
        f"<VRTDataset rasterXSize=\"{nc}\" rasterYSize=\"{nr}\"><SRS>{wkt}</SRS>"
        f"<GeoTransform>{t.c}, {t.a}, 0, {t.f}, 0, {t.e}</GeoTransform>"
        f"<VRTRasterBand dataType=\"Float32\" band=\"1\"><NoDataValue>-9999</NoDataValue>"
        f"{source('west.tif', 0, 13)}{source('east.tif', 13, nc - 13)}"
        f"</VRTRasterBand></VRTDataset>")
    whole = read_dem(tmp_path / "dem.tif")
    store = dem_into_tiles(tmp_path / "mosaic.vrt", tile=6)
    assert np.array_equal(joined(store, "elevation"), whole.elevation, equal_nan=True)
    assert np.array_equal(joined(store, "valid"), whole.valid)


def test_grid_above_one_threaded_fill_tile():
    """Above 512 × 512 cells the in-memory fill itself runs by tiles in threads; the
    out-of-core path still matches it (and route()'s directions) cell for cell."""
    rng = np.random.default_rng(11)
    r, c = np.mgrid[0:530, 0:520]
    z = np.round(20 * np.sin(r / 37.0) * np.cos(c / 23.0) + rng.normal(0, 2, r.shape))
    z[rng.random(z.shape) < 0.001] = np.nan
    summary = assert_same_as_route(terrain_from_array(z, cellsize=10.0), 128, 200)
    assert summary["directions"]["crossing_flats"] > 100


def test_tile_folder_reused_without_sea_level_ignores_old_base_level(tmp_path):
    """A working folder read again without ``sea_level`` keeps the old ``base_level`` tiles
    on disk, but they are no longer used (meta ``base_level`` says so)."""
    z = _dem(12, 10)
    _write_tif(tmp_path / "dem.tif", z, Affine(5.0, 0, 0.0, 0, -5.0, 100.0))
    dem_into_tiles(tmp_path / "dem.tif", tile=4, folder=tmp_path / "w", sea_level=45.0)
    store = dem_into_tiles(tmp_path / "dem.tif", tile=4, folder=tmp_path / "w")
    route_by_tiles(store.layout, store)
    fm = route(read_dem(tmp_path / "dem.tif"))
    assert np.array_equal(joined(store, "directions"), fm.direction_d8())
    with pytest.raises(InputError, match="another layout"):
        dem_into_tiles(tmp_path / "dem.tif", tile=5, folder=tmp_path / "w")


def test_resume_goes_on_from_a_killed_run(tmp_path, monkeypatch):
    """A run killed after the fill and half of the D8 tiles: resuming does not flood any
    tile again and gives route()'s directions."""
    from basinkit.tiles import directions as dirs
    from basinkit.tiles import fill as tfill

    z, base = crafted_grid()
    terrain = terrain_from_array(z, cellsize=10.0, base_level=base)
    lay = TileLayout(23, 19, 5, 4)
    store = TileFolder(tmp_path / "w", lay)
    write_terrain(lay, store, terrain)
    tfill.fill_by_tiles(lay, store)
    dist = terrain.geometry.neighbour_distances()
    for ti, tj in lay.tiles()[:7]:
        dirs.d8_one_tile(lay, store, ti, tj, dist)

    def must_not_run(*args):
        raise AssertionError("a finished tile was flooded again")

    monkeypatch.setattr(tfill, "flood_one_tile", must_not_run)
    summary = route_by_tiles(lay, TileFolder.open(tmp_path / "w"), resume=True)
    fm = route(terrain)
    assert np.array_equal(joined(store, "directions"), fm.direction_d8())
    assert summary["directions"]["flat_cells"] == np.count_nonzero(
        joined(store, "d8_raw") == -3)


def test_base_level_polygons_and_mask_raster_by_windows(tmp_path):
    """Base level from a polygon layer (rasterized window by window) and from a mask raster
    on the DEM's grid give read_dem's mask; the directions then equal route()'s."""
    import geopandas as gpd
    import rasterio
    from shapely.geometry import box

    z = _dem()
    t = Affine(5.0, 0, 1000.0, 0, -5.0, 2000.0)
    _write_tif(tmp_path / "dem.tif", z, t)
    lake = gpd.GeoDataFrame(geometry=[box(1012.0, 1930.0, 1061.0, 1968.0)], crs="EPSG:32633")
    lake.to_file(tmp_path / "lake.gpkg")
    whole = read_dem(tmp_path / "dem.tif", base_level=tmp_path / "lake.gpkg")
    assert whole.base_level.sum() > 20
    store = dem_into_tiles(tmp_path / "dem.tif", tile=4, base_level=tmp_path / "lake.gpkg")
    assert np.array_equal(joined(store, "base_level"), whole.base_level)
    route_by_tiles(store.layout, store)
    assert np.array_equal(joined(store, "directions"), route(whole).direction_d8())
    with rasterio.open(tmp_path / "mask.tif", "w", driver="GTiff", height=z.shape[0],
                       width=z.shape[1], count=1, dtype="uint8", crs="EPSG:32633",
                       transform=t) as ds:
        ds.write(whole.base_level.astype(np.uint8), 1)
    store = dem_into_tiles(tmp_path / "dem.tif", tile=5, base_level=tmp_path / "mask.tif")
    assert np.array_equal(joined(store, "base_level"), whole.base_level)
    assert len(store.read_meta("source")["sha256"][0]) == 64
    with pytest.raises(InputError, match="does not exist"):
        dem_into_tiles(tmp_path / "dem.tif", base_level=tmp_path / "nowhere.gpkg")
