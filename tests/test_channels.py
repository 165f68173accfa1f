"""Channel network: channel cells, Strahler order, Shreve magnitude, segments and the
constant-drop test.

External checks:
- pysheds 0.5 ``Grid.stream_order`` (reference library) computed from our D8 directions and
  our channel mask.
- networkx (reference library): Strahler and Shreve orders recomputed on the segment graph.
- Perfect binary channel trees: Strahler order k at the outlet, Shreve magnitude 2^(k-1)
  (Strahler 1957; Shreve 1966: magnitude = number of sources).
- pyproj.Geod (Karney 2013): geodesic lengths of the segment lines on a geographic grid.
- Montgomery & Dietrich (1988): channel heads satisfy the slope–area criterion.
- Tarboton, Bras & Rodriguez-Iturbe (1991): the constant-drop test fails where the network
  extends onto hillslopes (thresholds well below the initiation area).
"""

import numpy as np
import pytest
from affine import Affine

from basinkit import write_flow_folder
from basinkit import InputError, route, terrain_from_array
from basinkit.routing._stack import build_stack
from basinkit.analysis.channels import constant_drop_test, extract_channels, threshold_range
from basinkit.routing.flow_model import FlowModel
from conftest import PYSHEDS_DIRMAP, fractal_dem, pysheds_fdir, pysheds_grid


# ------------------------------------------------------------------ helpers
def binary_tree_model(k, cellsize=10.0):
    """A FlowModel whose valid cells form a perfect binary channel tree of depth ``k``
    (2^(k-1) sources), drawn as a dendrogram: nodes of depth d sit on row 2 + 2d counted
    up from the outlet, at column (2j+1)·2^k / 2^(d+1); each child path runs down its own
    column, then along the parent's row to the cell next to the parent. Every other cell
    is nodata. Elevation = flow distance to the outlet, so drops and slopes are defined."""
    width = 2 ** k
    nrows = 2 + 2 * (k - 1) + 1
    ncols = width + 1
    rec = np.full(nrows * ncols, -2, dtype=np.int32)

    def cell(rb, x):  # rb counted up from the bottom row
        return (nrows - 1 - rb) * ncols + x

    def path(points):
        for a, b in zip(points[:-1], points[1:]):
            rec[a] = b

    root_x = width // 2
    trunk = [cell(rb, root_x) for rb in range(2, -1, -1)]
    path(trunk)
    rec[trunk[-1]] = -1
    for d in range(0, k - 1):  # parents of depth d
        for j in range(2 ** d):
            px = (2 * j + 1) * width // 2 ** (d + 1)
            prow = 2 + 2 * d
            off = width // 2 ** (d + 2)
            for sgn in (-1, 1):
                cx = px + sgn * off
                pts = [cell(rb, cx) for rb in range(prow + 2, prow - 1, -1)]
                pts += [cell(prow, x) for x in range(cx - sgn, px, -sgn)]
                # pts ends next to the parent (at the corner when off == 1)
                path(pts)
                rec[pts[-1]] = cell(prow, px)
    valid = (rec != -2).reshape(nrows, ncols)
    z = np.full((nrows, ncols), np.nan)
    z[valid] = 0.0
    t = terrain_from_array(z, cellsize=cellsize)
    stack = build_stack(rec)
    fm = FlowModel(t, rec, stack)
    down = fm.downstream_length().ravel()
    z = np.where(valid.ravel(), down, np.nan).reshape(nrows, ncols)
    t = terrain_from_array(z, cellsize=cellsize)
    return FlowModel(t, rec, stack), cell(0, root_x)


@pytest.fixture(scope="module")
def fractal_flow():
    z = fractal_dem(120, seed=11)
    return route(terrain_from_array(z, cellsize=30.0))


# ------------------------------------------------------------------ reference libraries
def test_strahler_matches_pysheds(fractal_flow):
    """Strahler order per cell equals pysheds 0.5 ``Grid.stream_order`` computed from our D8
    directions (PYSHEDS_DIRMAP) and our channel mask (reference library). pysheds drops the
    rim of the mask and raises the order only when all tributaries share the highest
    order, so cells on the rim and cells below confluences of three or more channels whose
    orders differ are left out of the comparison (Strahler 1957 counts two of the highest)."""
    from pysheds.view import Raster, ViewFinder

    fm = fractal_flow
    net = extract_channels(fm, 25 * 900.0)
    grid, _ = pysheds_grid(fm.terrain.elevation)
    fdir = pysheds_fdir(grid, fm.direction_d8())
    vf = ViewFinder(affine=grid.viewfinder.affine, shape=net.mask.shape,
                    nodata=np.bool_(False))
    ref = np.asarray(grid.stream_order(fdir, Raster(net.mask, viewfinder=vf),
                                       dirmap=PYSHEDS_DIRMAP))
    interior = np.zeros(net.mask.shape, bool)
    interior[1:-1, 1:-1] = True
    # cells at or below a confluence of >= 3 channels with mixed orders
    from basinkit.analysis import _channels

    s, _, ndon = _channels.stream_orders(fm.receiver, fm.stack, net.mask.ravel())
    rec = fm.receiver
    odd = np.zeros(rec.size, bool)
    ch = np.flatnonzero(net.mask.ravel())
    for i in ch:
        if ndon[i] >= 3:
            donors = ch[rec[ch] == i]
            if len(set(s[donors].tolist())) > 1:
                odd[i] = True
    down = odd.copy()  # propagate downstream: a backward pass over the stack
    for t in range(fm.stack.size - 1, -1, -1):
        i = fm.stack[t]
        if down[i] and rec[i] >= 0:
            down[rec[i]] = True
    cmp = interior & net.mask & ~down.reshape(net.mask.shape)
    assert net.mask.sum() > 300 and net.max_order() >= 3
    assert cmp.sum() > 0.8 * (interior & net.mask).sum()
    np.testing.assert_array_equal(net.strahler[cmp], ref[cmp])
    assert (ref[interior & ~net.mask] == 0).all()


def _networkx_orders(segments):
    """Strahler and Shreve orders of the segment graph with networkx (reference library)."""
    import networkx as nx

    g = nx.DiGraph()
    g.add_nodes_from(segments["segment_id"].tolist())
    for s, d in zip(segments["segment_id"], segments["downstream_id"]):
        if d > 0:
            g.add_edge(int(s), int(d))
    strahler, shreve = {}, {}
    for node in nx.topological_sort(g):  # sources first
        ups = list(g.predecessors(node))
        if not ups:
            strahler[node], shreve[node] = 1, 1
            continue
        orders = sorted((strahler[u] for u in ups), reverse=True)
        strahler[node] = orders[0] + 1 if len(orders) > 1 and orders[1] == orders[0] \
            else orders[0]
        shreve[node] = sum(shreve[u] for u in ups)
    return strahler, shreve, g


def test_orders_match_networkx_on_segment_graph(fractal_flow):
    """Segment Strahler/Shreve orders equal those networkx derives from the segment graph
    alone (Strahler 1957; Shreve 1966); the graph is a forest of in-trees."""
    import networkx as nx

    net = extract_channels(fractal_flow, 25 * 900.0)
    seg = net.segments
    strahler, shreve, g = _networkx_orders(seg)
    assert nx.is_directed_acyclic_graph(g)
    assert all(g.out_degree(n) <= 1 for n in g)
    got_s = dict(zip(seg["segment_id"].tolist(), seg["strahler_order"].tolist()))
    got_m = dict(zip(seg["segment_id"].tolist(), seg["shreve_magnitude"].tolist()))
    assert got_s == strahler
    assert got_m == shreve
    # segments end only at junctions: no segment has exactly one upstream segment
    assert all(g.in_degree(n) != 1 for n in g)


# ------------------------------------------------------------------ analytic trees
@pytest.mark.parametrize("k", [2, 3, 4, 5, 6])
def test_perfect_binary_tree(k):
    """Perfect binary channel tree of depth k: Strahler order k at the outlet and Shreve
    magnitude 2^(k-1) (Strahler 1957; Shreve 1966), 2^k - 1 segments, 2^(k-1) - 1
    junctions, 2^(k-j) segments of order j (closed form)."""
    fm, outlet = binary_tree_model(k)
    net = extract_channels(fm, 1.0)  # every cell of the tree is a channel cell
    assert net.mask.sum() == (fm.receiver != -2).sum()
    r, c = divmod(outlet, fm.ncols)
    assert net.strahler[r, c] == k
    assert net.shreve[r, c] == 2 ** (k - 1)
    seg = net.segments
    assert len(seg) == 2 ** k - 1
    assert len(net.junctions) == 2 ** (k - 1) - 1
    for j in range(1, k + 1):
        assert (seg["strahler_order"] == j).sum() == 2 ** (k - j)
    # streams equal segments here: no order-j segment continues an order-j stream
    assert seg["stream_id"].nunique() == len(seg)


def test_segment_lengths_drops_and_lines():
    """Segment length = sum of the D8 steps (cell-centre distances, closed form on a
    projected grid: 10 m and 10·√2 m) and equals the planar length of its line; the
    drop equals the elevation difference of its ends; the network is continuous (every
    downstream id exists)."""
    fm, _ = binary_tree_model(4)
    net = extract_channels(fm, 1.0)
    seg = net.segments
    np.testing.assert_allclose(seg.geometry.length, seg["length_m"], rtol=1e-12)
    np.testing.assert_allclose(seg["drop_m"], seg["top_elevation_m"] - seg["bottom_elevation_m"])
    # elevation = flow distance, so drop == length and slope == 1
    np.testing.assert_allclose(seg["drop_m"], seg["length_m"], rtol=1e-9)
    np.testing.assert_allclose(seg["mean_slope_m_per_m"], 1.0, rtol=1e-9)
    ids = set(seg["segment_id"])
    assert set(seg.loc[seg.downstream_id > 0, "downstream_id"]) <= ids
    assert (seg["sinuosity"].dropna() >= 1 - 1e-12).all()
    # total length: sum of all steps between channel cells (closed form for the layout)
    step = fm.receiver_distance()
    assert seg["length_m"].sum() == pytest.approx(step.sum())


def test_geographic_lengths_are_geodesic():
    """On a geographic grid the segment lengths equal the geodesic length of the line
    through the cell centres (pyproj.Geod.line_length, Karney 2013)."""
    from pyproj import Geod

    z = fractal_dem(60, seed=4)
    d = 1.0 / 1200  # 3 arc-seconds
    t = terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, 62.0), crs="EPSG:4326")
    fm = route(t)
    net = extract_channels(fm, 20 * float(t.geometry.area.mean()))
    geod = Geod(ellps="WGS84")
    seg = net.segments
    assert len(seg) > 10
    for line, length in zip(seg.geometry, seg["length_m"]):
        x, y = line.xy
        assert geod.line_length(x, y) == pytest.approx(length, rel=1e-9, abs=1e-6)
    # straight lengths agree with Geod.inv between the line ends
    ends = np.array([(ln.coords[0] + ln.coords[-1]) for ln in seg.geometry])
    _, _, dist = geod.inv(ends[:, 0], ends[:, 1], ends[:, 2], ends[:, 3])
    np.testing.assert_allclose(seg["straight_length_m"], dist, rtol=1e-9, atol=1e-6)


def test_upstream_areas_and_threshold(fractal_flow):
    """Channel cells are exactly the cells whose D8 upstream area reaches the threshold
    (the definition; O'Callaghan & Mark 1984), and segment tops have less area than
    bottoms."""
    fm = fractal_flow
    th = 40 * 900.0
    net = extract_channels(fm, th)
    area = fm.accumulation(unit="m2", method="d8")
    np.testing.assert_array_equal(net.mask, np.nan_to_num(area) >= th)
    seg = net.segments
    assert (seg["upstream_area_top_m2"] <= seg["upstream_area_bottom_m2"]).all()
    heads = seg[seg.shreve_magnitude == 1]
    assert (heads["upstream_area_top_m2"] >= th).all()
    # a head cell has no channel donor: all its donors have less than the threshold
    rec = fm.receiver
    top = (heads.top_row * fm.ncols + heads.top_col).to_numpy()
    donors_of_heads = np.isin(rec, top)
    assert (np.nan_to_num(area.ravel())[donors_of_heads] < th).all()
    assert (net.strahler[~net.mask] == 0).all() and (net.segment_id[~net.mask] == 0).all()


def test_slope_area_criterion(fractal_flow):
    """Channel heads satisfy A·S^α ≥ C (Montgomery & Dietrich 1988) and the area threshold;
    the criterion can only remove channel cells; the network stays continuous."""
    fm = fractal_flow
    th = 10 * 900.0
    base = extract_channels(fm, th)
    alpha, const = 2.0, 200.0
    net = extract_channels(fm, th, slope_area=(alpha, const))
    assert net.mask.sum() < base.mask.sum()
    assert not (net.mask & ~base.mask).any()
    z = fm.terrain.elevation.ravel().astype(float)
    step = fm.receiver_distance()
    area = fm.accumulation(unit="m2", method="d8").ravel()
    heads = (net.segments.top_row * fm.ncols + net.segments.top_col)[
        net.segments.shreve_magnitude == 1].to_numpy()
    r = fm.receiver[heads]
    s = (z[heads] - z[r]) / step[heads]
    assert (area[heads] * s ** alpha >= const).all()
    # continuity: receivers of channel cells are channel cells (or leave the grid)
    ch = np.flatnonzero(net.mask.ravel())
    rr = fm.receiver[ch]
    assert net.mask.ravel()[rr[rr >= 0]].all()


def test_split_at_outlets(fractal_flow):
    """A segment ends at every given outlet cell (common practice: catchment outlets
    bound segments), and lengths still add up to the unsplit network."""
    fm = fractal_flow
    th = 25 * 900.0
    net = extract_channels(fm, th)
    seg = net.segments
    long = seg.loc[seg.cell_count.idxmax()]
    r, c = int(long.top_row), int(long.top_col)
    i = r * fm.ncols + c
    mid = fm.receiver[fm.receiver[i]]
    split = extract_channels(fm, th, outlet_cells=[mid])
    s2 = split.segments
    assert len(s2) == len(seg) + 1
    mr, mc = divmod(int(mid), fm.ncols)
    assert ((s2.bottom_row == mr) & (s2.bottom_col == mc)).sum() == 1
    assert s2["length_m"].sum() == pytest.approx(seg["length_m"].sum())
    np.testing.assert_array_equal(split.strahler, net.strahler)


def test_bad_threshold_raises(fractal_flow):
    """Bad input raises InputError with a message (project rule)."""
    with pytest.raises(InputError, match="positive"):
        extract_channels(fractal_flow, -5)
    with pytest.raises(InputError, match="low < high"):
        threshold_range(5e5, 1e4)
    with pytest.raises(InputError, match="exponent"):
        extract_channels(fractal_flow, 1e4, slope_area=(-1, 5))


# ------------------------------------------------------------------ constant-drop test
def synthetic_initiation_dem(n, a0_cells, seed, cellsize=30.0, ks=50.0, theta=0.5):
    """A landscape with a known channel initiation area A0: on a random D8 tree (from a
    fractal surface) the slope is the stream-power steady state S = ks·A^-θ where A ≥ A0
    (Flint 1974; Whipple & Tucker 1999) and a convex hillslope S = ks·A0^-θ·(A/A0)^0.5
    below it (slope rising away from the divide, Gilbert 1909); elevations are integrated
    up the tree from the outlets. Synthetic construction: common practice (no source)."""
    z0 = fractal_dem(n, seed=seed)
    fm0 = route(terrain_from_array(z0, cellsize=cellsize))
    a = fm0.accumulation(unit="m2").ravel()
    a0 = a0_cells * cellsize ** 2
    s = np.where(a >= a0, ks * a ** -theta, ks * a0 ** -theta * (a / a0) ** 0.5)
    step = fm0.receiver_distance()
    z = np.zeros(a.size)
    rec = fm0.receiver
    for i in fm0.stack:
        if rec[i] >= 0:
            z[i] = z[rec[i]] + s[i] * step[i]
    return route(terrain_from_array(z.reshape(z0.shape), cellsize=cellsize)), a0


def test_constant_drop_test_finds_initiation_area():
    """Tarboton, Bras & Rodriguez-Iturbe (1991): thresholds that extend the network onto
    the hillslopes fail the constant-drop test (first-order streams drop too little);
    the smallest passing threshold lies near the initiation area A0 of the synthetic
    landscape. Tolerance: between A0/1.5 and 4·A0 (the t test has little power just
    above A0, where first-order streams still start on hillslope cells; value found for
    this construction, not from a publication)."""
    fm, a0 = synthetic_initiation_dem(200, 50, seed=5)
    res = constant_drop_test(fm, threshold_range(a0 / 10, a0 * 10, 15))
    tab = res.table
    assert res.chosen_min_area_m2 is not None
    assert a0 / 1.5 <= res.chosen_min_area_m2 <= 4 * a0
    low = tab[tab.min_area_m2 <= a0 / 3]
    assert len(low) >= 3 and (~low.passes).all() and (low.t_statistic < -2).all()
    # the chosen threshold is the smallest passing one and passes |t| < 2
    first = tab[tab.passes].iloc[0]
    assert first.min_area_m2 == res.chosen_min_area_m2 and abs(first.t_statistic) < 2
    assert (tab.first_order_streams.diff().dropna() <= 0).all()


def test_constant_drop_stream_drops_add_up():
    """Stream drops are sums over segment chains of one order (Strahler stream); on the
    binary tree (elevation = flow distance) each stream's drop equals its length, and the
    first-order mean drop is the mean leaf length (closed form)."""
    fm, _ = binary_tree_model(5)
    res = constant_drop_test(fm, [1.0])
    net = extract_channels(fm, 1.0)
    seg = net.segments
    first = seg[seg.strahler_order == 1]
    row = res.table.iloc[0]
    assert row.first_order_streams == 2 ** 4
    assert row.first_order_mean_drop_m == pytest.approx(first["length_m"].mean())
    assert row.higher_order_streams == 2 ** 4 - 1


# ------------------------------------------------------------------ command line
def _cli(argv, capsys):
    from basinkit.cli.main import main

    with pytest.raises(SystemExit) as exc:
        main([str(a) for a in argv])
    out = capsys.readouterr()
    return (exc.value.code or 0), out.err


@pytest.fixture(scope="module")
def flow_folder(tmp_path_factory):
    import rasterio

    d = tmp_path_factory.mktemp("chcli")
    z = fractal_dem(90, seed=6)
    with rasterio.open(d / "dem.tif", "w", driver="GTiff", width=90, height=90, count=1,
                       dtype="float32", crs="EPSG:32633",
                       transform=Affine(30, 0, 500000, 0, -30, 4000000)) as ds:
        ds.write(z, 1)
    from basinkit import read_dem

    write_flow_folder(route(read_dem(d / "dem.tif")), d / "flow")
    return d


def _no_nan(token):
    raise ValueError(f"{token} is not JSON (RFC 8259)")


def test_channels_command_outputs(flow_folder, capsys):
    """``basinkit channels`` writes the GeoPackage layers channels and junctions, the
    Strahler raster, the segment and constant-drop tables and provenance; everything read
    back with GDAL (rasterio, pyogrio) matches the library result; hashlib recomputes the
    DEM's SHA-256 (FIPS 180-4); a second run is byte-identical (project rule)."""
    import hashlib
    import json

    import pandas as pd
    import pyogrio
    import rasterio

    from basinkit import load_flow

    d = flow_folder
    out = d / "ch"
    code, err = _cli(["channels", d / "flow", "--choose-threshold", "0.01km2:0.5km2",
                      "--threshold-steps", "6", "-o", out], capsys)
    assert code == 0, err
    layers = {name for name, _ in pyogrio.list_layers(out / "channels.gpkg")}
    assert {"channels", "junctions"} <= layers
    meta = json.loads((out / "channels.json").read_text(), parse_constant=_no_nan)
    chosen = meta["constant_drop_test"]["chosen_min_area_m2"]
    assert meta["parameters"]["min_area_m2"] == chosen
    sha = hashlib.sha256((d / "dem.tif").read_bytes()).hexdigest()
    assert meta["inputs"]["dem"]["sha256"] == sha
    assert "field" in meta["cautions"]
    net = extract_channels(load_flow(d / "flow"), chosen)
    with rasterio.open(out / "strahler_order.tif") as ds:
        order = ds.read(1)
        assert ds.crs.to_epsg() == 32633
    np.testing.assert_array_equal(order, net.strahler)
    seg = pd.read_csv(out / "channel_segments.csv")
    assert len(seg) == len(net.segments)
    np.testing.assert_allclose(seg["length_m"], net.segments["length_m"])
    gp = pyogrio.read_dataframe(out / "channels.gpkg", layer="channels")
    np.testing.assert_allclose(gp.geometry.length, seg["length_m"])
    drop = pd.read_csv(out / "constant_drop_test.csv")
    assert len(drop) == 6 and "t_statistic" in drop
    names = ("channel_segments.csv", "channels.gpkg", "strahler_order.tif")
    first = {n: (out / n).read_bytes() for n in names}
    code, err = _cli(["channels", d / "flow", "--min-area", f"{chosen}m2", "-o", out,
                      "--overwrite"], capsys)
    assert code == 0, err
    for n in names:
        assert (out / n).read_bytes() == first[n], n


def test_channels_command_clean_failures(flow_folder, capsys):
    """User errors print one message without a traceback (project rule)."""
    d = flow_folder
    for argv, frag in ([["--min-area", "big"], "cannot read"],
                       [[], "--min-area"],
                       [["--min-area", "1ha", "--slope-area-exponent", "2"], "both"],
                       [["--choose-threshold", "5km2"], "LOW:HIGH"]):
        code, err = _cli(["channels", d / "flow", "-o", d / "bad", "--overwrite", *argv],
                         capsys)
        assert code != 0 and "Traceback" not in err and frag in err, err


def test_docstring_examples():
    """The Examples in basinkit.analysis.channels run as written (common practice)."""
    import doctest

    import basinkit.analysis.channels

    res = doctest.testmod(basinkit.analysis.channels)
    assert res.attempted > 0 and res.failed == 0
