"""Geographic (longitude/latitude) grids: true areas and lengths, and a real DEM end to end.

External checks:
- pyproj ``Geod`` polygon areas (Karney 2013, J. Geodesy 87:43-55) of latitude-longitude
  cells, with the parallel edges densified (a parallel is not a geodesic, so a cell's
  polygon must follow it closely): relative error <= 1e-6.
- The real 3-arc-second DEM shipped with matplotlib (``jacksboro_fault_dem.npz``; its
  ``ymin``/``ymax`` are swapped in the file, rows run north to south) routes end to end.
"""

import numpy as np
import pytest
import rasterio
from affine import Affine
from pyproj import Geod

from basinkit import read_dem, route, terrain_from_array
from basinkit.terrain.geometry import cell_geometry


def geod_cell_area(geod, lon0, lat_n, dlon, dlat, m=400):
    """Area (m²) of the lat/lon cell with north-west corner (lon0, lat_n), as a Geod
    polygon whose parallel edges are densified into m geodesic pieces."""
    lons = np.linspace(lon0, lon0 + dlon, m + 1)
    lat_s = lat_n - dlat
    ring_lon = np.concatenate([lons, lons[::-1]])
    ring_lat = np.concatenate([np.full(m + 1, lat_n), np.full(m + 1, lat_s)])
    area, _ = geod.polygon_area_perimeter(ring_lon, ring_lat)
    return abs(area)


@pytest.mark.parametrize("crs,ellps", [("EPSG:4326", "WGS84"), ("EPSG:4269", "GRS80")])
@pytest.mark.parametrize("top,dlat,dlon,nrows", [
    (36.7329, 1 / 1200, 1 / 1200, 4),   # 3 arc-second cells (the Jacksboro DEM)
    (0.5, 1.0, 1.0, 1),                  # 1 degree on the equator
    (46.0, 1.0, 1.0, 3),                 # 1 degree at mid latitudes
    (-58.0, 0.25, 0.5, 4),               # southern hemisphere, rectangular cells
    (89.9, 0.1, 1.0, 2),                 # next to the pole
])
def test_cell_area_matches_geod_polygon(crs, ellps, top, dlat, dlon, nrows):
    """The ellipsoidal area of latitude-longitude cells (3″ to 1°, equator to pole, both
    hemispheres, WGS 84 and GRS 80) equals the pyproj Geod polygon area of the cell with
    its parallel edges densified (Karney 2013) to 1e-6."""
    from pyproj import CRS

    geod = Geod(ellps=ellps)
    tr = Affine(dlon, 0, 10.0, 0, -dlat, top)
    g = cell_geometry(tr, (nrows, 3), CRS.from_user_input(crs))
    assert g.geographic
    for r in range(nrows):
        ref = geod_cell_area(geod, 10.0, top - r * dlat, dlon, dlat)
        assert abs(g.area[r] / ref - 1) <= 1e-6, (r, g.area[r], ref)


def test_cell_area_on_a_sphere_closed_form():
    """On a sphere of radius R a cell spans R²·Δλ·(sin φ_n - sin φ_s) (Archimedes' hat-box
    theorem, closed form); the 1° cells of the whole globe add up to 4πR²."""
    from pyproj import CRS

    R = 6371000.0
    sphere = CRS.from_proj4(f"+proj=longlat +R={R} +no_defs")
    g = cell_geometry(Affine(1.0, 0, -180, 0, -1.0, 90), (180, 360), sphere)
    lat_n = np.radians(90 - np.arange(180))
    ref = R * R * np.radians(1.0) * (np.sin(lat_n) - np.sin(lat_n - np.radians(1.0)))
    np.testing.assert_allclose(g.area, ref, rtol=1e-12)
    np.testing.assert_allclose(g.area.sum() * 360, 4 * np.pi * R * R, rtol=1e-12)


def test_neighbour_distances_are_geodesics():
    """dx, dy and the diagonal between cell centres equal Geod.inv distances (Karney 2013)
    and shrink with latitude as cos(latitude) for dx (closed form on the sphere, here only
    as a sanity bound)."""
    from pyproj import CRS

    geod = Geod(ellps="WGS84")
    d = 1 / 1200
    tr = Affine(d, 0, -84.4, 0, -d, 61.0)
    g = cell_geometry(tr, (5, 4), CRS.from_epsg(4326))
    lat = 61.0 - d * (np.arange(5) + 0.5)
    _, _, dx = geod.inv(np.zeros(5), lat, np.full(5, d), lat)
    _, _, dy = geod.inv(np.zeros(5), lat, np.zeros(5), lat - d)
    np.testing.assert_allclose(g.dx, dx, rtol=1e-9)
    np.testing.assert_allclose(g.dy_down[:-1], dy[:-1], rtol=1e-9)
    assert 0.45 < g.dx[0] / g.dy_down[0] < 0.5  # cos 61° = 0.485 (ellipsoid: close)


def test_d8_uses_true_distances_on_lat_lon_grid():
    """At 60 N a 3" cell is ~46 m wide and ~93 m tall. A surface falling 1 m per column to
    the east and 1 m per row to the south is steepest to the east (1/46 > 2/104 > 1/93);
    treating degrees as equal lengths would pick the diagonal (closed form)."""
    d = 1 / 1200
    r, c = np.mgrid[0:12, 0:12]
    z = 500.0 - c - r
    t = terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, 60.005), crs="EPSG:4326")
    assert (route(t).direction_d8()[1:-1, 1:-1] == 90).all()


def jacksboro():
    """The Jacksboro fault DEM: elevation (m) and its north-up transform (the file's
    ymin/ymax are swapped; rows run north to south)."""
    from matplotlib import cbook

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as d:
        z = np.asarray(d["elevation"])
        dx, dy = float(d["dx"]), float(d["dy"])
        west = float(d["xmin"])
        north = max(float(d["ymin"]), float(d["ymax"]))
        south = min(float(d["ymin"]), float(d["ymax"]))
        east = float(d["xmax"])
    assert z.shape == (344, 403)
    assert abs((north - south) / dy - z.shape[0]) < 1e-6  # edges, not centres
    assert abs((east - west) / dx - z.shape[1]) < 1e-6
    return z, Affine(dx, 0, west, 0, -dy, north), (west, south, east, north)


@pytest.fixture(scope="module")
def jacksboro_flow(tmp_path_factory):
    z, tr, bounds = jacksboro()
    p = tmp_path_factory.mktemp("jacksboro") / "jacksboro.tif"
    with rasterio.open(p, "w", driver="GTiff", width=z.shape[1], height=z.shape[0],
                       count=1, dtype=z.dtype, transform=tr, crs="EPSG:4326") as ds:
        ds.write(z, 1)
    t = read_dem(p)
    return z, bounds, t, route(t)


def test_jacksboro_routes_to_exits(jacksboro_flow):
    """Every valid cell reaches an exit and accumulation at the exits sums to the number of
    valid cells (conservation; common practice, no source)."""
    z, _, t, fm = jacksboro_flow
    assert t.geometry.geographic
    assert np.array_equal(t.elevation, z.astype(np.float32))
    nvalid = int(t.valid.sum())
    assert fm.stack.size == nvalid
    rec = fm.receiver
    # independent walk: follow receivers from every cell, downhill or level, to an exit
    zc = fm.terrain.elevation.ravel()
    steps = 0
    cur = np.flatnonzero(t.valid.ravel())
    while cur.size:
        nxt = rec[cur]
        assert (nxt >= -1).all()
        moving = nxt >= 0
        assert (zc[nxt[moving]] <= zc[cur[moving]]).all()
        cur = nxt[moving]
        steps += 1
        assert steps <= rec.size, "a receiver cycle"
    acc = fm.accumulation()
    exits = (rec == -1).reshape(t.shape)
    assert acc[exits].sum() == nvalid
    # real relief: the filled surface drains to many exits and one big river
    assert acc.max() > 0.05 * nvalid


def test_jacksboro_areas_are_true(jacksboro_flow):
    """Upstream area summed over exits equals the sum of the cell areas, which equals the
    Geod area of the DEM's bounding quadrangle (Karney 2013; parallels densified)."""
    _, (west, south, east, north), t, fm = jacksboro_flow
    area = fm.upstream_area()
    exits = (fm.receiver == -1).reshape(t.shape)
    total = float(t.cell_area().sum())
    np.testing.assert_allclose(np.nansum(area[exits]), total, rtol=1e-9)
    ref = geod_cell_area(Geod(ellps="WGS84"), west, north, east - west, north - south,
                         m=4000)
    assert abs(total / ref - 1) <= 1e-6
    # a 3" cell near 36.6 N is about 74 m by 93 m
    assert 6500 < t.geometry.area.mean() < 7300
