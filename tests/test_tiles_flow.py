"""The tiled flow passes (accumulation, catchment labels, table and polygons, channel
orders, segments and junctions) against the in-memory path.

Oracle: the in-memory path (shared/CHECKS.md, "Tiled and distributed paths"): the tiled
path equals route()'s cell counts and areas, delineate()'s labels, table and polygons and
extract_channels()' Strahler orders, Shreve magnitudes, segments, lines and junctions, for
any tile size, scheduler and number of workers. Areas are compared bit for bit where every
sum is exact (25 or 100 m² cells, integer elevations); on geographic grids, where per-row
areas make the sums depend on their order, within the rounding bound of a sum of positive
terms, 2·(count − 1)·2⁻⁵³ relative (Higham 2002, Accuracy and Stability of Numerical
Algorithms, section 4.2); segment lengths likewise. Also pysheds 0.5 ``Grid.accumulation``
on the same directions (reference library), as in test_routing.py, and a closed form (the
count along a single spiral path is its position on it).
"""

import numpy as np
import pytest
from affine import Affine
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from basinkit import route, terrain_from_array
from basinkit.analysis.catchments import delineate
from basinkit.analysis.channels import extract_channels
from basinkit.errors import InputError, OutletError
from basinkit.io.tile_folder import TileFolder
from basinkit.routing import _stack
from basinkit.routing._d8 import azimuth_to_receivers, receivers_to_azimuth
from basinkit.routing.flow_model import FlowModel
from basinkit.tiles import MemoryTiles, TileLayout
from basinkit.tiles.accumulate import flow_accumulation
from basinkit.tiles.channels import channel_orders
from basinkit.tiles.labels import catchment_labels
from basinkit.tiles.segments import channel_segments

from conftest import PYSHEDS_DIRMAP, fractal_dem, pysheds_fdir, pysheds_grid

EPS = 2.0 ** -53


def _directions(fm):
    return receivers_to_azimuth(fm.receiver, fm.ncols).reshape(fm.shape)


def _store(fm, layout, store=None):
    store = store if store is not None else MemoryTiles(layout)
    for (ti, tj), a in layout.split(_directions(fm)).items():
        store.write("directions", ti, tj, a)
    return store


def _grid(layout, store, layer):
    return layout.join({t: np.asarray(store.read(layer, *t)) for t in layout.tiles()})


def _nested_outlets(fm, n_paths, step, seed):
    """Outlets every ``step`` cells down ``n_paths`` random flow paths: nested catchments,
    several outlets per path (and a repeated cell)."""
    rng = np.random.default_rng(seed)
    valid = np.flatnonzero(fm.terrain.valid.ravel())
    cells = []
    for s in rng.choice(valid, min(n_paths, valid.size), replace=False):
        i, k = int(s), 0
        while i >= 0:
            if k % step == 0:
                cells.append(i)
            i = int(fm.receiver[i])
            k += 1
    cells = np.asarray(cells, dtype=np.int64)
    return np.concatenate([cells, cells[:1]])


def _delineate(fm, cells):
    r, c = np.divmod(np.asarray(cells), fm.ncols)
    xs, ys = fm.terrain.transform @ (c + 0.5, r + 0.5)
    return delineate(fm, [(f"o{i}", x, y) for i, (x, y) in enumerate(zip(xs, ys))],
                     snap_radius_m=0, polygons=False)


def _delineate_polygons(fm, cells):
    r, c = np.divmod(np.asarray(cells), fm.ncols)
    xs, ys = fm.terrain.transform @ (c + 0.5, r + 0.5)
    return delineate(fm, [(f"o{i}", x, y) for i, (x, y) in enumerate(zip(xs, ys))],
                     snap_radius_m=0).polygons


def _check_all(fm, layout, store=None, threshold=None, outlets=None, scheduler=None,
               exact_area=True):
    store = _store(fm, layout, store)
    flow_accumulation(layout, store, fm.terrain.geometry.area, scheduler=scheduler)
    count = _grid(layout, store, "cell_count")
    np.testing.assert_array_equal(count, fm.accumulation())
    area = _grid(layout, store, "upstream_area_m2")
    ref = fm.accumulation(unit="m2")
    if exact_area:
        np.testing.assert_array_equal(area, ref)
    else:
        v = fm.terrain.valid
        assert np.isnan(area[~v]).all()
        bound = 2 * np.maximum(count[v] - 1, 0) * EPS * ref[v]
        assert (np.abs(area[v] - ref[v]) <= bound).all()
    if outlets is not None:
        res = catchment_labels(layout, store, outlets, scheduler=scheduler)
        d = _delineate(fm, outlets)
        np.testing.assert_array_equal(_grid(layout, store, "catchment_labels"), d.labels)
        np.testing.assert_array_equal(res.label, d.table["label"].to_numpy())
        np.testing.assert_array_equal(res.subtree_size, d._subtree_size)
        ids = d.table.groupby("label", sort=False)["outlet_id"].agg(";".join).to_dict()
        down = {oid: (ids[int(res.downstream[lab])] if res.downstream[lab] else None)
                for oid, lab in zip(d.table["outlet_id"], d.table["label"])}
        assert down == d.downstream
    if threshold is not None:
        channel_orders(layout, store, threshold, scheduler=scheduler)
        net = extract_channels(fm, threshold, geometry=False)
        np.testing.assert_array_equal(_grid(layout, store, "strahler_order"), net.strahler)
        np.testing.assert_array_equal(_grid(layout, store, "shreve_magnitude"), net.shreve)
    return store


@pytest.fixture(scope="module")
def basin():
    """A fractal DEM with nodata holes, a sea (base level) and 100 m² cells."""
    z = fractal_dem(47, 61, seed=5, holes=4)
    fm = route(terrain_from_array(z, cellsize=10, sea_level=40.0))
    assert (fm.terrain.base_level & fm.terrain.valid).any()
    assert (~fm.terrain.valid).any()
    return fm


@pytest.mark.parametrize("tile_rows,tile_cols", [(2, 2), (3, 3), (2, 5), (7, 4), (16, 16),
                                                 (47, 61), (100, 100)])
def test_tiled_equals_in_memory(basin, tile_rows, tile_cols):
    """Oracle: the in-memory path, for tiles of 2-3 cells, tiles that do not divide the
    grid, one tile and a tile larger than the grid."""
    fm = basin
    layout = TileLayout(*fm.shape, tile_rows, tile_cols)
    net = extract_channels(fm, 600.0, geometry=False)
    assert net.max_order() >= 3  # confluences of equal orders cross tile edges
    _check_all(fm, layout, threshold=600.0, outlets=_nested_outlets(fm, 12, 4, seed=1),
               scheduler="synchronous")


def test_pysheds_accumulation_on_tiles(basin):
    """Reference library: pysheds 0.5 on the same directions; it leaves an exit cell's own
    count out (as in test_routing.py)."""
    fm = basin
    layout = TileLayout.square(*fm.shape, 6)
    store = _store(fm, layout)
    flow_accumulation(layout, store, fm.terrain.geometry.area, workers=2)
    ours = _grid(layout, store, "cell_count").astype(np.float64)
    d = _directions(fm)
    grid, _ = pysheds_grid(np.where(fm.terrain.valid, fm.terrain.elevation, np.nan))
    ref = np.asarray(grid.accumulation(pysheds_fdir(grid, d), dirmap=PYSHEDS_DIRMAP,
                                       nodata_out=np.nan), dtype=np.float64)
    v = fm.terrain.valid
    ref = np.where(d == -1, ref + 1, ref)
    np.testing.assert_array_equal(ours[v], ref[v])


def _spiral(nrows, ncols):
    """Directions of one flow path that spirals inwards from the top-left corner over the
    whole grid and stops in the middle (-1): it crosses every tile edge many times."""
    d = np.full((nrows, ncols), -1, dtype=np.int16)
    top, bottom, left, right = 0, nrows - 1, 0, ncols - 1
    path = []
    while top <= bottom and left <= right:
        path += [(top, c) for c in range(left, right + 1)]
        path += [(r, right) for r in range(top + 1, bottom + 1)]
        if top < bottom:
            path += [(bottom, c) for c in range(right - 1, left - 1, -1)]
        if left < right:
            path += [(r, left) for r in range(bottom - 1, top, -1)]
        top, bottom, left, right = top + 1, bottom - 1, left + 1, right - 1
    for (r, c), (r2, c2) in zip(path[:-1], path[1:]):
        k = {(-1, 0): 0, (0, 1): 2, (1, 0): 4, (0, -1): 6}[(r2 - r, c2 - c)]
        d[r, c] = 45 * k
    return d, path


def _model(directions, cellsize=10.0, nodata=None):
    """A FlowModel built from given directions (the in-memory oracle for hand-made flow)."""
    nr, nc = directions.shape
    z = np.zeros((nr, nc))
    if nodata is not None:
        z[nodata] = np.nan
    t = terrain_from_array(z, cellsize=cellsize)
    rec, bad = azimuth_to_receivers(directions.ravel(), nc, nr)
    assert bad == 0
    return FlowModel(t, rec, _stack.build_stack(rec))


@pytest.mark.parametrize("tile", [1, 2, 3, 5])
def test_spiral_path_crossing_tile_edges(tile):
    """One path through every cell: the cell count at the k-th cell of the path is k + 1
    (closed form), labels of outlets every 9 cells nest 30 deep, and every tile edge is
    crossed many times."""
    d, path = _spiral(17, 19)
    fm = _model(d)
    layout = TileLayout.square(17, 19, tile)
    cells = np.array([r * 19 + c for r, c in path[::9]])
    store = _check_all(fm, layout, threshold=150.0, outlets=cells)
    count = _grid(layout, store, "cell_count")
    assert [int(count[r, c]) for r, c in path] == list(range(1, len(path) + 1))
    assert int(_grid(layout, store, "strahler_order").max()) == 1


def test_geographic_areas_within_summation_rounding():
    """Per-row areas on a latitude-longitude grid: counts equal, areas within the rounding
    bound of sums of positive terms in another order (Higham 2002, section 4.2), orders
    equal with a threshold not within rounding of any cell's area."""
    z = fractal_dem(40, 36, seed=8, holes=2)
    d = 1.0 / 1200
    fm = route(terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, 47.0),
                                  crs="EPSG:4326"))
    assert np.unique(fm.terrain.geometry.area).size > 1
    a = np.sort(np.unique(fm.accumulation(unit="m2")[fm.terrain.valid]))
    k = int(np.searchsorted(a, 40 * a[0]))
    threshold = 0.5 * (a[k] + a[k + 1])
    areas = []
    for tile, scheduler in ((3, "synchronous"), (8, None), (3, None)):
        layout = TileLayout.square(*fm.shape, tile)
        store = _check_all(fm, layout, threshold=threshold, scheduler=scheduler,
                           outlets=_nested_outlets(fm, 6, 5, seed=2), exact_area=False)
        areas.append(_grid(layout, store, "upstream_area_m2"))
    # deterministic: the same tiles give the same bytes whatever the scheduler
    assert areas[0].tobytes() == areas[2].tobytes()
    # polygons densified to one vertex per cell as in memory: the same regions
    import shapely

    from basinkit.tiles.polygons import catchment_polygons

    outlets = _nested_outlets(fm, 6, 5, seed=2)
    res = catchment_labels(layout, store, outlets, layer="labels_again")
    full, _ = catchment_polygons(layout, store, res, fm.terrain.transform,
                                 crs=fm.terrain.crs)
    r, c = np.divmod(outlets, fm.ncols)
    xs, ys = fm.terrain.transform @ (c + 0.5, r + 0.5)
    ref = delineate(fm, [(f"o{i}", x, y) for i, (x, y) in enumerate(zip(xs, ys))],
                    snap_radius_m=0).polygons
    assert all(shapely.equals(a, b) for a, b in zip(full, ref))
    from basinkit.tiles.polygons import perimeters_m

    ref_perimeter = delineate(fm, [(f"o{i}", x, y) for i, (x, y) in enumerate(zip(xs, ys))],
                              snap_radius_m=0).table["perimeter_m"]
    np.testing.assert_allclose(perimeters_m(full, fm.terrain.crs), ref_perimeter,
                               rtol=1e-12)
    step = d * 1.0000001
    assert all(shapely.length(g) / step <= shapely.get_num_coordinates(g) for g in full)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(nrows=st.integers(1, 13), ncols=st.integers(1, 13), seed=st.integers(0, 10**6),
       tile_rows=st.integers(1, 6), tile_cols=st.integers(1, 6),
       levels=st.sampled_from([3, 50]), holes=st.floats(0.0, 0.3),
       sea=st.booleans())
def test_hypothesis_random_grids(nrows, ncols, seed, tile_rows, tile_cols, levels, holes,
                                 sea):
    """Random small grids (few elevation levels make flats), random nodata, a base level,
    random tile shapes: the in-memory path is the oracle."""
    rng = np.random.default_rng(seed)
    z = rng.integers(0, levels, size=(nrows, ncols)).astype(np.float64)
    z[rng.random((nrows, ncols)) < holes] = np.nan
    if np.isnan(z).all():
        z[0, 0] = 1.0
    fm = route(terrain_from_array(z, cellsize=5, sea_level=0.0 if sea else None))
    layout = TileLayout(nrows, ncols, tile_rows, tile_cols)
    valid = np.flatnonzero(fm.terrain.valid.ravel())
    outlets = rng.choice(valid, min(valid.size, int(rng.integers(1, 6))), replace=False)
    threshold = float(rng.choice([25.0, 50.0, 75.0]))
    store = _check_all(fm, layout, threshold=threshold, outlets=outlets,
                       scheduler="synchronous")
    _check_segments(fm, layout, store, threshold, outlets=outlets, lines=False)
    # the per-catchment table (integer elevations, 25 m² cells: every sum exact)
    from basinkit.tiles.tables import catchment_table

    for t, a in layout.split(np.where(fm.terrain.valid, fm.input_elevation, np.nan)).items():
        store.write("elevation", *t, a)
    res = catchment_labels(layout, store, outlets, layer="labels_for_table")
    d = _delineate(fm, outlets)
    tab = catchment_table(layout, store, res, fm.terrain.geometry.area,
                          outlet_ids=d.table["outlet_id"], elevation="elevation")
    for col in TABLE_COLUMNS:
        assert tab[col].fillna(-1).tolist() == d.table[col].fillna(-1).tolist(), col


TABLE_COLUMNS = ["label", "area_m2", "area_km2", "area_ha", "area_acres", "area_mi2",
                 "cell_count", "subcatchment_area_m2", "subcatchment_cell_count",
                 "upstream_outlet_count", "upstream_outlet_ids", "downstream_outlet_id",
                 "elevation_min_m", "elevation_max_m", "elevation_mean_m", "relief_m",
                 "touches_edge"]


@pytest.mark.parametrize("tile_rows,tile_cols", [(2, 3), (5, 5), (9, 16)])
def test_catchment_table_equals_delineate(tile_rows, tile_cols):
    """Oracle: delineate()'s table for the same outlets. Integer elevations and 100 m²
    cells make every sum exact, so the values are equal whatever the order of the sums;
    nodata holes inside tiles and across tile edges mark catchments touching nodata."""
    from basinkit.tiles.tables import catchment_table

    z = fractal_dem(38, 45, seed=11, holes=5, integer=True)
    fm = route(terrain_from_array(z, cellsize=10))
    layout = TileLayout(*fm.shape, tile_rows, tile_cols)
    store = _store(fm, layout)
    raw = np.where(fm.terrain.valid, fm.input_elevation, np.nan)
    for t, a in layout.split(raw).items():
        store.write("elevation", *t, a)
    outlets = _nested_outlets(fm, 14, 4, seed=6)
    res = catchment_labels(layout, store, outlets)
    d = _delineate(fm, outlets)
    tab = catchment_table(layout, store, res, fm.terrain.geometry.area,
                          outlet_ids=d.table["outlet_id"], outlet_cells=outlets,
                          elevation="elevation")
    assert tab["touches_edge"].any() and not tab["touches_edge"].all()
    assert (tab["upstream_outlet_count"] > 0).any()
    np.testing.assert_array_equal(tab["cell"], d.table["cell"])
    for col in TABLE_COLUMNS:
        assert tab[col].tolist() == d.table[col].tolist(), col


@pytest.mark.parametrize("tile_rows", [2, 9])
def test_table_nodata_across_a_tile_edge(tile_rows):
    """A catchment whose only nodata neighbour lies in the next tile touches nodata (its
    area may be truncated): a cone draining outwards, the outlet beside a nodata cell across
    the edge between tile columns 0 and 1. Oracle: delineate()'s table."""
    from basinkit.tiles.tables import catchment_table

    r, c = np.mgrid[0:9, 0:9]
    z = 100.0 - np.hypot(r - 4, c - 4.2) * 10
    z[4, 7] = np.nan
    fm = route(terrain_from_array(z, cellsize=10))
    outlets = np.array([4 * 9 + 6])
    d = _delineate(fm, outlets)
    assert bool(d.table["touches_edge"].iloc[0])
    assert (d.labels[:, 7:] == 0).all() and (d.labels[[0, -1], :] == 0).all()
    layout = TileLayout(9, 9, tile_rows, 7)
    store = _store(fm, layout)
    res = catchment_labels(layout, store, outlets)
    tab = catchment_table(layout, store, res, fm.terrain.geometry.area)
    assert tab["touches_edge"].tolist() == [True]
    assert tab["cell_count"].tolist() == d.table["cell_count"].tolist()


@pytest.mark.parametrize("tile_rows,tile_cols", [(2, 2), (3, 7), (6, 5)])
def test_catchment_polygons_equal_delineate(basin, tile_rows, tile_cols):
    """Oracle: delineate()'s polygons (full and sub-catchments, nested, some in pieces)
    for the same outlets: the same regions (shapely.equals) and the same areas."""
    import shapely

    from basinkit.tiles.polygons import catchment_polygons

    fm = basin
    layout = TileLayout(*fm.shape, tile_rows, tile_cols)
    store = _store(fm, layout)
    outlets = _nested_outlets(fm, 10, 4, seed=7)
    res = catchment_labels(layout, store, outlets)
    r, c = np.divmod(outlets, fm.ncols)
    xs, ys = fm.terrain.transform @ (c + 0.5, r + 0.5)
    d = delineate(fm, [(f"o{i}", x, y) for i, (x, y) in enumerate(zip(xs, ys))],
                  snap_radius_m=0)
    full, sub = catchment_polygons(layout, store, res, fm.terrain.transform,
                                   crs=fm.terrain.crs)
    assert len(full) == len(d.polygons) == outlets.size
    # regions in pieces (4-connected components) are among them
    assert any(g.geom_type == "MultiPolygon" for g in d.polygons + d.subcatchment_polygons)
    from basinkit.tiles.polygons import perimeters_m

    np.testing.assert_allclose(perimeters_m(full, fm.terrain.crs), d.table["perimeter_m"],
                               rtol=1e-12)
    for mine, ref in zip(full + sub, list(d.polygons) + list(d.subcatchment_polygons)):
        assert (mine is None) == (ref is None)
        if ref is not None:
            assert shapely.equals(mine, ref)
            assert shapely.area(mine) == pytest.approx(shapely.area(ref), rel=1e-12)


SEGMENT_EXACT = ["strahler_order", "shreve_magnitude", "cell_count", "top_row", "top_col",
                 "upstream_area_top_m2", "upstream_area_bottom_m2", "straight_length_m",
                 "drop_m", "top_elevation_m", "bottom_elevation_m"]


def _check_segments(fm, layout, store, threshold, outlets=None, geographic=False,
                    lines=True):
    """Oracle: extract_channels' segments, matched by bottom cell (the tiled ids follow
    another order): the same cells per segment, values equal, lengths within the rounding
    of sums of positive terms in another grouping (Higham 2002, section 4.2)."""
    from basinkit.tiles.segments import channel_segments

    for t, a in layout.split(fm.terrain.elevation).items():
        if not store.has("routed_elevation", *t):
            store.write("routed_elevation", *t, a)
    tab, junctions = channel_segments(layout, store, threshold, fm.terrain.geometry,
                                      outlet_cells=outlets, crs=fm.terrain.crs,
                                      transform=fm.terrain.transform,
                                      elevation="routed_elevation", lines=lines)
    net = extract_channels(fm, threshold, outlet_cells=outlets, geometry=lines)
    ref = net.segments
    assert len(tab) == len(ref)
    if len(ref) == 0:
        assert len(junctions) == 0
        assert (_grid(layout, store, "segment_id") == 0).all()
        return
    key = ["bottom_row", "bottom_col"]
    m = ref.merge(tab, on=key, suffixes=("_ref", ""), validate="one_to_one")
    assert len(m) == len(ref)
    for col in SEGMENT_EXACT:
        if geographic and col.startswith("upstream_area"):
            # sums of per-row areas in another order: within rounding, count <= the cells
            rtol = 2 * fm.terrain.size * EPS
            np.testing.assert_allclose(m[col], m[col + "_ref"], rtol=rtol, atol=0)
        else:
            np.testing.assert_array_equal(m[col], m[col + "_ref"], err_msg=col)
    bound = 2 * m["cell_count"] * EPS * m["length_m_ref"]
    assert (np.abs(m["length_m"] - m["length_m_ref"]) <= bound).all()
    # downstream segments and Strahler streams: the same, through the matching
    ours_of_ref = dict(zip(m["segment_id_ref"], m["segment_id"]))
    ours_of_ref[0] = 0
    assert [ours_of_ref[k] for k in m["downstream_id_ref"]] == m["downstream_id"].tolist()
    assert (m["downstream_id"] < m["segment_id"]).all()
    pairs = set(zip(m["stream_id_ref"], m["stream_id"]))
    assert len(pairs) == m["stream_id"].nunique() == m["stream_id_ref"].nunique()
    # lines through the cell centres: the same vertices
    if lines:
        import shapely

        mine = tab.set_index("segment_id").geometry
        theirs = ref.set_index("segment_id").geometry
        for a, b in zip(m["segment_id"], m["segment_id_ref"]):
            assert shapely.equals_exact(mine[a], theirs[b], tolerance=0.0)
    # junctions, matched by cell
    jm = net.junctions.merge(junctions, on=["row", "col"], suffixes=("_ref", ""),
                             validate="one_to_one")
    assert len(jm) == len(net.junctions) == len(junctions)
    for col in ["strahler_order", "shreve_magnitude", "tributary_count", "elevation_m"]:
        np.testing.assert_array_equal(jm[col], jm[col + "_ref"], err_msg=col)
    np.testing.assert_allclose(jm["upstream_area_m2"], jm["upstream_area_m2_ref"],
                               rtol=2 * fm.terrain.size * EPS if geographic else 0, atol=0)
    assert [ours_of_ref[k] for k in jm["segment_id_ref"]] == jm["segment_id"].tolist()
    # the segment of every cell
    grid = _grid(layout, store, "segment_id")
    lut = np.zeros(int(ref["segment_id"].max()) + 1, dtype=np.int64)
    lut[m["segment_id_ref"].to_numpy()] = m["segment_id"].to_numpy()
    np.testing.assert_array_equal(grid, lut[net.segment_id])


@pytest.mark.parametrize("tile_rows,tile_cols", [(2, 2), (3, 5), (8, 8), (47, 61)])
def test_channel_segments_equal_extract_channels(basin, tile_rows, tile_cols):
    fm = basin
    layout = TileLayout(*fm.shape, tile_rows, tile_cols)
    store = _store(fm, layout)
    flow_accumulation(layout, store, fm.terrain.geometry.area)
    channel_orders(layout, store, 600.0)
    outlets = _nested_outlets(fm, 5, 6, seed=9)
    _check_segments(fm, layout, store, 600.0, outlets=outlets)


def test_channel_segments_geographic():
    """Geographic grid: straight lengths geodesic as in memory (pyproj.Geod, Karney 2013)."""
    z = fractal_dem(40, 36, seed=8, holes=2)
    d = 1.0 / 1200
    fm = route(terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, 47.0),
                                  crs="EPSG:4326"))
    a = np.sort(np.unique(fm.accumulation(unit="m2")[fm.terrain.valid]))
    k = int(np.searchsorted(a, 20 * a[0]))
    threshold = 0.5 * (a[k] + a[k + 1])
    layout = TileLayout.square(*fm.shape, 4)
    store = _store(fm, layout)
    flow_accumulation(layout, store, fm.terrain.geometry.area)
    channel_orders(layout, store, threshold)
    _check_segments(fm, layout, store, threshold, geographic=True)


@pytest.mark.parametrize("geographic", [False, True])
def test_from_elevation_tiles_to_segments(geographic):
    """The whole tiled path from elevation tiles: fill and directions by tiles
    (tiles/route.py), then accumulation, labels, orders, segments, table and polygons,
    georeferenced from the store's metadata. Oracle: route() and the in-memory analyses
    on the same DEM."""
    import shapely

    from basinkit.tiles.polygons import catchment_polygons
    from basinkit.tiles.route import route_by_tiles, write_terrain
    from basinkit.tiles.tables import catchment_table

    z = fractal_dem(36, 41, seed=21, holes=3)
    if geographic:
        d = 1.0 / 1200
        t = terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, 47.0),
                               crs="EPSG:4326")
    else:
        t = terrain_from_array(z, cellsize=10, sea_level=60.0)
    fm = route(t)
    layout = TileLayout(*fm.shape, 7, 9)
    store = MemoryTiles(layout)
    write_terrain(layout, store, t)
    route_by_tiles(layout, store)
    np.testing.assert_array_equal(_grid(layout, store, "directions"), _directions(fm))
    flow_accumulation(layout, store)
    np.testing.assert_array_equal(_grid(layout, store, "cell_count"), fm.accumulation())
    area = fm.accumulation(unit="m2")
    if not geographic:
        np.testing.assert_array_equal(_grid(layout, store, "upstream_area_m2"), area)
    a = np.sort(np.unique(area[t.valid]))
    k = int(np.searchsorted(a, 15 * a[0]))
    threshold = 0.5 * (a[k] + a[k + 1])
    channel_orders(layout, store, threshold)
    net = extract_channels(fm, threshold, geometry=True)
    np.testing.assert_array_equal(_grid(layout, store, "strahler_order"), net.strahler)
    segs, junctions = channel_segments(layout, store, threshold, elevation="filled",
                                       lines=True)
    m = net.segments.merge(segs, on=["bottom_row", "bottom_col"], suffixes=("_ref", ""))
    assert len(m) == len(net.segments) == len(segs)
    for col in ["cell_count", "top_row", "top_col", "straight_length_m", "drop_m",
                "strahler_order"]:
        np.testing.assert_array_equal(m[col], m[col + "_ref"], err_msg=col)
    assert all(shapely.equals_exact(g, h, tolerance=0.0)
               for g, h in zip(m["geometry"], m["geometry_ref"]))
    assert len(junctions) == len(net.junctions)
    outlets = _nested_outlets(fm, 6, 5, seed=22)
    res = catchment_labels(layout, store, outlets)
    d = _delineate(fm, outlets)
    np.testing.assert_array_equal(_grid(layout, store, "catchment_labels"), d.labels)
    tab = catchment_table(layout, store, res, outlet_ids=d.table["outlet_id"])
    assert tab["cell_count"].tolist() == d.table["cell_count"].tolist()
    assert tab["touches_edge"].tolist() == d.table["touches_edge"].tolist()
    full, _ = catchment_polygons(layout, store, res)
    assert all(shapely.equals(g, h) for g, h in zip(full, _delineate_polygons(fm, outlets)))


@pytest.mark.parametrize("tile", [3, 8, 20])
def test_nodata_frame_around_the_grid(tile):
    """A DEM inside a frame of nodata (tile edges without a valid cell, or a single tile
    whose edge is all nodata). Oracle: the in-memory path."""
    z = fractal_dem(16, 14, seed=30)
    z[[0, -1], :] = np.nan
    z[:, [0, -1]] = np.nan
    fm = route(terrain_from_array(z, cellsize=10))
    valid = np.flatnonzero(fm.terrain.valid.ravel())
    store = _check_all(fm, TileLayout.square(16, 14, tile), threshold=300.0,
                       outlets=valid[::17])
    _check_segments(fm, TileLayout.square(16, 14, tile), store, 300.0, lines=False)


class _Crash(RuntimeError):
    pass


class _CrashingFolder(TileFolder):
    """A tile folder whose process 'dies' after a number of output tiles."""

    budget = None

    def write(self, layer, ti, tj, array):
        if layer != "directions" and self.budget is not None:
            if self.budget <= 0:
                raise _Crash("killed")
            type(self).budget -= 1
        super().write(layer, ti, tj, array)


def test_resume_after_a_killed_run(basin, tmp_path):
    """A run stopped half-way resumes: finished tiles are not computed again, and the
    result equals the in-memory path."""
    fm = basin
    layout = TileLayout.square(*fm.shape, 9)
    n = len(layout.tiles())
    store = _store(fm, layout, _CrashingFolder(tmp_path / "tiles", layout))
    _CrashingFolder.budget = 2 * 11  # two layers per tile: 11 tiles get through
    try:
        with pytest.raises(_Crash):
            flow_accumulation(layout, store, fm.terrain.geometry.area,
                              scheduler="synchronous")
    finally:
        _CrashingFolder.budget = None
    again = TileFolder.open(tmp_path / "tiles")
    s = flow_accumulation(layout, again, fm.terrain.geometry.area)
    assert s["computed"] == n - 11
    np.testing.assert_array_equal(_grid(layout, again, "cell_count"), fm.accumulation())
    # nothing half-written: no temporary files left beside the tiles
    assert not list((tmp_path / "tiles").rglob("*.tmp*"))
    # a finished run does nothing when started again
    assert flow_accumulation(layout, again, fm.terrain.geometry.area)["computed"] == 0


_KILLED_CHILD = """
import sys, time
import numpy as np
from basinkit.io.tile_folder import TileFolder
from basinkit.tiles.accumulate import flow_accumulation

class Slow(TileFolder):
    def write(self, layer, ti, tj, array):
        if layer == "cell_count":
            time.sleep(0.2)
        super().write(layer, ti, tj, array)

folder = sys.argv[1]
store = Slow.open(folder)
flow_accumulation(store.layout, store, np.load(folder + "/row_area.npy"),
                  scheduler="synchronous")
"""


def test_resume_after_sigkill(basin, tmp_path):
    """A process killed (SIGKILL) in the middle of the second pass: the tiles it finished
    stay, no tile is half-written, and a new run finishes the rest. Oracle: route()."""
    import os
    import signal
    import subprocess
    import sys
    import time

    fm = basin
    layout = TileLayout.square(*fm.shape, 12)
    folder = tmp_path / "tiles"
    _store(fm, layout, TileFolder(folder, layout))
    np.save(folder / "row_area.npy", fm.terrain.geometry.area)
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    proc = subprocess.Popen([sys.executable, "-c", _KILLED_CHILD, str(folder)], env=env)
    try:
        deadline = time.monotonic() + 60
        while len(list((folder / "cell_count").glob("*.npy"))) < 3:
            assert proc.poll() is None, "the run ended before it could be killed"
            assert time.monotonic() < deadline
            time.sleep(0.02)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    done = {p.name for p in (folder / "upstream_area_m2").glob("*.npy")}
    assert 0 < len(done) < len(layout.tiles())
    store = TileFolder.open(folder)
    s = flow_accumulation(layout, store, fm.terrain.geometry.area)
    assert s["computed"] <= len(layout.tiles()) - len(done)
    np.testing.assert_array_equal(_grid(layout, store, "cell_count"), fm.accumulation())
    np.testing.assert_array_equal(_grid(layout, store, "upstream_area_m2"),
                                  fm.accumulation(unit="m2"))


@pytest.mark.parametrize("step", ["labels", "orders", "segments"])
def test_labels_and_orders_resume(basin, tmp_path, step):
    """Labels and orders stopped half-way resume as well (pass-1 links kept in the store's
    metadata, finished tiles skipped); the oracle is the in-memory path."""
    fm = basin
    layout = TileLayout.square(*fm.shape, 8)
    n = len(layout.tiles())
    store = _store(fm, layout, _CrashingFolder(tmp_path / "tiles", layout))
    flow_accumulation(layout, store, fm.terrain.geometry.area)
    outlets = _nested_outlets(fm, 6, 5, seed=4)

    if step == "segments":
        channel_orders(layout, store, 600.0)
    written = []

    def run(s):
        if step == "labels":
            return catchment_labels(layout, s, outlets, scheduler="synchronous").computed
        if step == "orders":
            return channel_orders(layout, s, 600.0, scheduler="synchronous")["computed"]
        from basinkit.tiles.segments import channel_segments

        written.append(channel_segments(layout, s, 600.0, fm.terrain.geometry,
                                        transform=fm.terrain.transform, lines=True,
                                        scheduler="synchronous"))
        return sum(not s.has("segment_id", *t) for t in layout.tiles())

    _CrashingFolder.budget = 2 * 9 if step == "orders" else 9
    try:
        with pytest.raises(_Crash):
            run(store)
    finally:
        _CrashingFolder.budget = None
    again = TileFolder.open(tmp_path / "tiles")
    if step == "segments":
        assert sum(again.has("segment_id", *t) for t in layout.tiles()) == 9
        assert run(again) == 0
        tab, junctions = written[-1]
        net = extract_channels(fm, 600.0, geometry=True)
        assert len(tab) == len(net.segments) and len(junctions) == len(net.junctions)
        assert sorted(tab.geometry.length) == pytest.approx(sorted(net.segments.length),
                                                            rel=1e-12)
        return
    assert run(again) == n - 9
    if step == "labels":
        want = _delineate(fm, outlets).labels
        np.testing.assert_array_equal(_grid(layout, again, "catchment_labels"), want)
    else:
        want = extract_channels(fm, 600.0, geometry=False).strahler
        np.testing.assert_array_equal(_grid(layout, again, "strahler_order"), want)


def test_second_network_in_other_layers(basin):
    """Another threshold goes to other layers of the same store; the same layers refuse
    it. Oracle: extract_channels."""
    fm = basin
    layout = TileLayout.square(*fm.shape, 11)
    store = _store(fm, layout)
    flow_accumulation(layout, store, fm.terrain.geometry.area)
    channel_orders(layout, store, 600.0)
    with pytest.raises(InputError, match="other settings"):
        channel_orders(layout, store, 5000.0)
    channel_orders(layout, store, 5000.0, layers=("order_5000", "magnitude_5000"))
    net = extract_channels(fm, 5000.0, geometry=False)
    np.testing.assert_array_equal(_grid(layout, store, "order_5000"), net.strahler)
    np.testing.assert_array_equal(_grid(layout, store, "magnitude_5000"), net.shreve)


def test_refuses_other_settings_and_bad_input(basin):
    fm = basin
    layout = TileLayout.square(*fm.shape, 10)
    store = _store(fm, layout)
    flow_accumulation(layout, store, fm.terrain.geometry.area)
    with pytest.raises(InputError, match="other settings"):
        flow_accumulation(layout, store, fm.terrain.geometry.area * 2)
    with pytest.raises(InputError, match="one cell area per row"):
        flow_accumulation(layout, store, fm.terrain.geometry.area[:3])
    catchment_labels(layout, store, [5])
    with pytest.raises(InputError, match="other settings"):
        catchment_labels(layout, store, [6])
    catchment_labels(layout, store, [6], layer="labels_b")  # another layer: fine
    nodata = int(np.flatnonzero(~fm.terrain.valid.ravel())[0])
    with pytest.raises(OutletError, match="nodata"):
        catchment_labels(layout, store, [nodata], layer="labels_c")
    with pytest.raises(OutletError, match="outside the grid"):
        catchment_labels(layout, store, [fm.terrain.size], layer="labels_d")
    with pytest.raises(InputError, match="cannot be shared"):
        from basinkit.tiles.engine import store_spec

        store_spec(store, distributed=True)
    with pytest.raises(InputError, match="positive area"):
        channel_orders(layout, store, 0)
    with pytest.raises(InputError, match="no tile .* 'directions'"):
        flow_accumulation(layout, MemoryTiles(layout), fm.terrain.geometry.area)
    with pytest.raises(InputError, match="run flow_accumulation first"):
        channel_orders(layout, _store(fm, layout), 600.0)
    with pytest.raises(InputError, match="unknown scheduler"):
        flow_accumulation(layout, store, fm.terrain.geometry.area, scheduler=3)
    bad = MemoryTiles(layout)
    for t, a in layout.split(np.full(fm.shape, 7, dtype=np.int16)).items():
        bad.write("directions", *t, a)
    with pytest.raises(InputError, match="not D8 azimuths"):
        flow_accumulation(layout, bad, fm.terrain.geometry.area)


def test_unreachable_scheduler_is_one_line():
    """A scheduler address where none listens: a clear error, not a traceback."""
    dask = pytest.importorskip("dask")
    from basinkit.tiles.engine import Engine

    with dask.config.set({"distributed.comm.timeouts.connect": "1s"}):
        with pytest.raises(InputError, match="cannot reach a dask scheduler"):
            Engine("tcp://127.0.0.1:9")


def test_distributed_local_cluster(basin, tmp_path):
    """The same passes on a dask.distributed cluster of two worker processes, the store a
    tile folder the workers reopen: equal to the in-memory path."""
    distributed = pytest.importorskip("distributed")
    fm = basin
    layout = TileLayout(*fm.shape, 13, 17)
    store = _store(fm, layout, TileFolder(tmp_path / "tiles", layout))
    outlets = _nested_outlets(fm, 8, 6, seed=3)
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                  dashboard_address=None) as cluster:
        address = cluster.scheduler_address
        _check_all(fm, layout, store, threshold=600.0, outlets=outlets, scheduler=address)
        # the table, polygons and segments on the workers too
        import shapely

        from basinkit.tiles.polygons import catchment_polygons
        from basinkit.tiles.segments import channel_segments
        from basinkit.tiles.tables import catchment_table

        res = catchment_labels(layout, store, outlets, scheduler=address)
        d = _delineate(fm, outlets)
        tab = catchment_table(layout, store, res, fm.terrain.geometry.area,
                              outlet_ids=d.table["outlet_id"], scheduler=address)
        assert tab["area_m2"].tolist() == d.table["area_m2"].tolist()
        full, _ = catchment_polygons(layout, store, res, fm.terrain.transform,
                                     scheduler=address)
        ref = _delineate_polygons(fm, outlets)
        assert all(shapely.equals(a, b) for a, b in zip(full, ref))
        segs, junctions = channel_segments(layout, store, 600.0, fm.terrain.geometry,
                                           transform=fm.terrain.transform, lines=True,
                                           scheduler=address)
        net = extract_channels(fm, 600.0, geometry=True)
        assert len(segs) == len(net.segments) and len(junctions) == len(net.junctions)
        assert sorted(segs["cell_count"]) == sorted(net.segments["cell_count"])
