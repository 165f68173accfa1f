"""Outlets: reading, reprojection, snapping, bad outlets and safe ids.

External checks:
- UTM definition (value from memory of the projection's definition: false easting
  500 000 m on the central meridian, northing 0 on the equator in the northern zones):
  lon 15°, lat 0° is (500000, 0) in EPSG:32633;
- pyproj Geod distances (Karney 2013) for snapping on geographic grids;
- brute-force search over all cells for the snap target (independent of the vectorised
  window search);
- properties (hypothesis): snapping never moves farther than the radius; sanitised ids
  are unique and stay inside their folder (common practice, no source).
"""

import os
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
from affine import Affine
from conftest import fractal_dem
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import Geod
from shapely.geometry import LineString, Point

from basinkit import route, terrain_from_array
from basinkit.errors import InputError
from basinkit.analysis.outlets import (locate_outlets, outlets_from_points,
                                       outlets_from_text, prepare_outlets, sanitize_ids,
                                       snap_outlets)
from basinkit.io.outlets import read_outlet_file


@pytest.fixture(scope="module")
def flow():
    # a UTM zone 33N grid with its south-west corner at (499500, 0): 10 m cells
    z = fractal_dem(80, seed=6, holes=1)
    t = terrain_from_array(z, transform=Affine(10, 0, 499500, 0, -10, 800), crs="EPSG:32633")
    return route(t)


def test_outlets_from_text():
    """Our own text form of an outlet, ``[id=]x,y`` or ``x y``: ids default to outlet_N by
    position; rows that are not two numbers go to the errors table with a reason and the
    rest are read (the format is ours; our output contract, DESIGN.md: bad items are
    recorded, the rest go on)."""
    raw, err = outlets_from_text(["100,200", "gauge A=3.5, 7", "1 2", "x,y", "1,2,3",
                                  "bad=,"])
    assert raw["outlet_id"].tolist() == ["outlet_1", "gauge A", "outlet_3"]
    assert raw[["x_given", "y_given"]].to_numpy().tolist() == [[100, 200], [3.5, 7],
                                                              [1, 2]]
    assert err["outlet_id"].tolist() == ["outlet_4", "outlet_5", "bad"]
    assert err["reason"].str.len().min() > 10


def test_csv_xy_and_lonlat(tmp_path, flow):
    """x/y columns are in the DEM CRS by default; lon/lat columns default to EPSG:4326
    (the latitude-longitude convention of GeoJSON, RFC 7946). lon 15°, lat 0° is
    (500000, 0) in UTM 33N (the projection's definition: false easting 500 000 m on the
    central meridian 15° E, northing 0 on the equator; value from memory), and 0.003° of
    latitude is about 332 m (a degree of the meridian near the equator is ~110.6 km, times
    the scale factor 0.9996; value from memory), so the point falls in column 50 (x
    500000..500010) about 332 m north. A row with a non-number or a missing value goes to
    the errors table (our output contract, DESIGN.md)."""
    p = tmp_path / "pts.csv"
    p.write_text("Name,X,Y\nA,500005,405\nB,499995,795\n")
    raw, err = read_outlet_file(p)
    assert raw["outlet_id"].tolist() == ["A", "B"] and not len(err)
    loc, err = locate_outlets(flow.terrain, raw)
    assert loc["col_given"].tolist() == [50, 49]
    assert loc["row_given"].tolist() == [39, 0]
    q = tmp_path / "ll.csv"
    q.write_text("site,lat,lon\nS1,0.003,15.00000001\nS2,abc,15\nS3,,15\n")
    raw, err = read_outlet_file(q)
    assert raw["given_crs"].tolist() == ["EPSG:4326"]
    assert err["outlet_id"].tolist() == ["S2", "S3"]
    assert "abc" in err["reason"][0] and "missing" in err["reason"][1]
    loc, _ = locate_outlets(flow.terrain, raw)
    assert abs(loc["x"][0] - 500000.0) < 0.01
    assert 330 < loc["y"][0] < 335
    assert loc["col_given"][0] == 50


def test_vector_points_in_their_own_crs(tmp_path, flow):
    """GeoJSON (EPSG:4326 by RFC 7946) and GeoPackage points in Web Mercator land on the
    same cells as the same places given in UTM (pyproj round trip)."""
    utm = gpd.GeoSeries([Point(500005, 505), Point(499755, 155)], crs=32633)
    g = gpd.GeoDataFrame({"id": ["a", "b"]}, geometry=utm.to_crs(4326))
    g.to_file(tmp_path / "p.geojson", driver="GeoJSON")
    m = gpd.GeoDataFrame({"name": ["a", "b", "line"]},
                         geometry=list(utm.to_crs(3857)) + [LineString([(0, 0), (1, 1)])],
                         crs=3857)
    m.to_file(tmp_path / "p.gpkg", driver="GPKG")
    ref, _ = locate_outlets(flow.terrain, outlets_from_points([500005, 499755], [505, 155]))
    for name in ("p.geojson", "p.gpkg"):
        raw, err = read_outlet_file(tmp_path / name)
        loc, _ = locate_outlets(flow.terrain, raw)
        assert loc["outlet_id"].tolist() == ["a", "b"]
        assert loc["cell_given"].tolist() == ref["cell_given"].tolist()
        np.testing.assert_allclose(loc["x"], [500005, 499755], atol=1e-4)
    raw, err = read_outlet_file(tmp_path / "p.gpkg")
    assert err["outlet_id"].tolist() == ["line"] and "point" in err["reason"][0]


def test_missing_file_and_columns(tmp_path):
    """A missing outlet file, or one without x and y columns: InputError saying what is
    wrong (our output contract, DESIGN.md: bad input is one clear message)."""
    with pytest.raises(InputError):
        read_outlet_file(tmp_path / "none.csv")
    p = tmp_path / "bad.csv"
    p.write_text("a,b\n1,2\n")
    with pytest.raises(InputError, match="x and y"):
        read_outlet_file(p)


def test_bad_outlets_to_errors(flow):
    """Outside the grid, on nodata, NaN, duplicate id: errors with reasons; the rest go on
    (common practice, no source)."""
    t = flow.terrain
    hole = np.argwhere(~t.valid)[0]
    hx, hy = t.xy_of(hole[0], hole[1])
    raw = outlets_from_points([499605, 1e7, hx, np.nan, 499805, 499905],
                              [105, 105, hy, 5, 305, 405],
                              ids=["ok", "far", "hole", "nan", "ok", "ok3"])
    loc, err = locate_outlets(t, raw)
    assert loc["outlet_id"].tolist() == ["ok", "ok3"]
    why = dict(zip(err["source"], err["reason"]))
    assert "outside" in why["points 2"] and "nodata" in why["points 3"]
    assert "NaN" in why["points 4"] and "duplicate" in why["points 5"]


def brute_force_snap(fm, x, y, radius, min_area=None):
    """Independent reference: look at every cell of the grid."""
    t = fm.terrain
    nr, nc = t.shape
    rr, cc = np.mgrid[0:nr, 0:nc]
    xc, yc = t.xy_of(rr.ravel(), cc.ravel())
    d = np.hypot(xc - x, yc - y)
    own = t.rowcol_of(x, y)
    own = int(own[0]) * nc + int(own[1])
    area = fm.d8_upstream_area_flat()
    ok = t.valid.ravel() & (d <= radius)
    ok[own] = True
    if min_area is None:
        best = area[ok].max()
        cand = np.flatnonzero(ok & (area == best))
    else:
        cand = np.flatnonzero(ok & (area >= min_area))
        if not cand.size:
            return None
    return int(cand[np.argmin(d[cand])])


@settings(max_examples=40, deadline=None)
@given(st.floats(499500, 500300), st.floats(0, 800), st.floats(0, 80))
def test_snap_never_farther_than_radius(flow, x, y, radius):
    """Hypothesis: the snapped cell's centre is within the radius (or the cell holds the
    point), and it is the cell a brute-force search over every cell of the grid picks
    (written above, independent of the windowed search: greatest upstream area, then
    nearest; the rule is common practice, no source)."""
    raw = outlets_from_points([x], [y])
    loc, err = locate_outlets(flow.terrain, raw)
    if not len(loc):
        return
    s, e = snap_outlets(flow, loc, radius_m=radius)
    assert not len(e)
    own = s["cell"][0] == s["cell_given"][0]
    assert s["snap_distance_m"][0] <= radius + 1e-9 or own
    assert s["cell"][0] == brute_force_snap(flow, x, y, radius)
    assert s["upstream_area_m2"][0] >= s["upstream_area_given_cell_m2"][0]


def test_snap_to_channel_nearest_cell(flow):
    """Channel mode: the nearest cell with upstream area >= the threshold, as a brute-force
    search over every cell finds it (independent reference written above; the rule is
    common practice, no source); outlets with none within reach go to the errors table."""
    rng = np.random.default_rng(2)
    xs = rng.uniform(499500, 500300, 60)
    ys = rng.uniform(0, 800, 60)
    loc, _ = locate_outlets(flow.terrain, outlets_from_points(xs, ys))
    s, e = snap_outlets(flow, loc, radius_m=60, channel_area_m2=5000)
    assert len(s) + len(e) == len(loc)
    for r in s.itertuples():
        assert r.cell == brute_force_snap(flow, r.x, r.y, 60, 5000)
        assert r.upstream_area_m2 >= 5000
    for r in e.itertuples():
        assert brute_force_snap(flow, r.x_given, r.y_given, 60, 5000) is None
        assert "no channel cell" in r.reason


def test_snap_warnings_and_shared_cells(flow):
    """A long snap and a tenfold area jump are flagged; two outlets that land on one cell
    are both kept (they share its catchment), each with a note naming the other (common
    practice, no source)."""
    area = flow.d8_upstream_area_flat().reshape(flow.shape)
    r, c = np.unravel_index(np.nanargmax(np.where(flow.terrain.valid, area, -1)),
                            flow.shape)
    x, y = flow.terrain.xy_of(r, c)
    t = flow.terrain
    for dx, dy in [(60, 0), (-60, 0), (0, 60), (0, -60)]:
        rr, cc = t.rowcol_of(x + dx, y + dy)
        if 0 <= rr < t.shape[0] and 0 <= cc < t.shape[1] and t.valid[rr, cc]:
            break
    loc, _ = locate_outlets(t, outlets_from_points(
        [x + dx, x + dx + np.sign(dx)], [y + dy, y + dy + np.sign(dy)], ids=["p", "q"]))
    assert len(loc) == 2
    s, e = snap_outlets(flow, loc, radius_m=80)
    # the grid's greatest upstream area is 60 m away: both snap onto it
    assert s["cell"][0] == r * flow.ncols + c
    assert s["outlet_id"].tolist() == ["p", "q"] and not len(e)
    assert s["cell"][1] == s["cell"][0]
    assert "shares its cell with outlet 'q'" in s["snap_warning"][0]
    assert "shares its cell with outlet 'p'" in s["snap_warning"][1]
    # 60 m > max(half of 80 m, 5 cells of 10 m)
    assert "long snap" in s["snap_warning"][0]
    jump = area[r, c] >= 10 * s["upstream_area_given_cell_m2"][0]
    assert jump == ("another branch" in s["snap_warning"][0])
    assert jump  # the grid's main exit against a cell 6 cells off it


def test_snap_geographic_uses_geodesic_distance():
    """On a 3″ grid at 60° N cells are ~46 m wide and ~93 m tall. The reported snap
    distance equals the geodesic distance from the point to the snapped cell centre
    (pyproj Geod, Karney 2013) and never exceeds the radius."""
    d = 1 / 1200
    z = fractal_dem(60, seed=9)
    t = terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, 60.05), crs="EPSG:4326")
    fm = route(t)
    geod = Geod(ellps="WGS84")
    rng = np.random.default_rng(3)
    xs = rng.uniform(10.005, 10.045, 30)
    ys = rng.uniform(60.005, 60.045, 30)
    loc, _ = locate_outlets(t, outlets_from_points(xs, ys))
    s, _ = snap_outlets(fm, loc, radius_m=150)
    _, _, dist = geod.inv(s["x"], s["y"], s["x_snapped"], s["y_snapped"])
    np.testing.assert_allclose(s["snap_distance_m"], dist, rtol=1e-9)
    assert ((s["snap_distance_m"] <= 150) | (s["cell"] == s["cell_given"])).all()
    # 150 m reach at most 2 rows (93 m) and 4 columns (46 m) away from the given cell
    assert (np.abs(s["row"] - s["row_given"]) <= 2).all()
    assert (np.abs(s["col"] - s["col_given"]) <= 4).all()


def test_sanitize_ids_examples():
    """Ids become safe file names: no path parts, no leading dots, reserved device names
    (con) prefixed, empty ids named, clashes (also by case) numbered (common practice, no
    source: what every file system accepts)."""
    ids = ["../etc/passwd", "a b", "A_B", "", "..", "con", "x/../../y", "ok.tif", "a b"]
    out = sanitize_ids(ids)
    # "A_B" is already clean and keeps its name; "a b" cleans to the same name and gets a
    # hash suffix, as do the second "a b" and the two ids that clean to "outlet"
    assert out[:3] == ["etc_passwd", out[1], "A_B"] and out[1].startswith("a_b_")
    assert out[3].startswith("outlet") and out[4].startswith("outlet_") and out[3] != out[4]
    assert out[5] == "_con" and out[8].startswith("a_b_") and out[8] != out[1]
    assert len({o.lower() for o in out}) == len(out)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.text(min_size=0, max_size=30), min_size=1, max_size=20))
def test_sanitize_ids_safe_and_unique(ids):
    """Hypothesis, any text: sanitised ids are unique without regard to case, at most 90
    characters, and stay inside their folder by os.path.normpath (common practice, no
    source)."""
    out = sanitize_ids(ids)
    assert len(out) == len(ids)
    assert len({o.lower() for o in out}) == len(out)
    base = Path("/tmp/outdir")
    for o in out:
        assert o and "/" not in o and "\\" not in o and not o.startswith(".")
        assert ".." not in o and len(o) <= 64
        assert os.path.normpath(base / o).startswith(str(base) + os.sep)


def test_prepare_outlets_accepts_arrays(flow):
    """An (n, 2) array of x, y works like a table: ids outlet_1.., no snapping at radius 0,
    so each outlet stays on its own cell, less than half a 10 m cell's diagonal from the
    point (closed form: 5·√2 < 8 m)."""
    s, e = prepare_outlets(flow, np.array([[499605.0, 105.0], [500005, 505]]),
                           radius_m=0)
    assert s["outlet_id"].tolist() == ["outlet_1", "outlet_2"]
    assert (s["cell"] == s["cell_given"]).all() and (s["snap_distance_m"] < 8).all()
    assert s["file_id"].tolist() == ["outlet_1", "outlet_2"]


def test_huge_snap_radius_refused(flow, monkeypatch):
    """A radius of thousands of cells would need a window of ~1e8 candidates per outlet:
    refused with a message naming a workable radius (common practice, no source). The
    limit is lowered here so that a small grid shows it."""
    import basinkit.analysis.outlets as mod

    monkeypatch.setattr(mod, "MAX_WINDOW_CELLS", 1000)
    loc, _ = locate_outlets(flow.terrain, outlets_from_points([500005], [405]))
    with pytest.raises(InputError, match="snap radius"):
        snap_outlets(flow, loc, radius_m=300)
    s, _ = snap_outlets(flow, loc, radius_m=100)  # 11 x 11 cells each side: fine
    assert len(s) == 1


def test_snap_across_a_confluence_is_flagged():
    """A point on a stream just above a confluence, snapped by greatest area within a radius
    that reaches the junction, doubles its catchment: that must be flagged (common practice,
    no source: the snapped catchment is not the one asked for)."""
    import numpy as np

    from basinkit import route, terrain_from_array
    from basinkit.analysis.outlets import prepare_outlets

    # two parallel valleys (columns 5 and 7) joining at row 30, draining south
    nr, nc = 40, 13
    r, c = np.mgrid[0:nr, 0:nc]
    z = 200.0 - r * 1.0 + np.minimum(np.abs(c - 5), np.abs(c - 7)) * 3.0
    below = r >= 30
    z[below] = 200.0 - r[below] * 1.0 + np.abs(c[below] - 6) * 3.0
    fm = route(terrain_from_array(z, cellsize=10))
    t = fm.terrain
    x, y = t.xy_of(28, 5)  # on the western stream, two cells above the junction
    snapped, errors = prepare_outlets(fm, [("a", float(x), float(y))], radius_m=40)
    row = snapped.iloc[0]
    assert row["upstream_area_m2"] > 1.5 * row["upstream_area_given_cell_m2"]
    assert "confluence" in row["snap_warning"]
