"""Basin morphometry: shape, relief, hypsometry, slope and network descriptors.

External checks (source beside each test): analytic shapes and surfaces with closed-form
answers (circle, cone, bowl, inclined plane, parallel valleys, perfect binary trees), Horn
(1981) slopes of planes, pyproj.Geod (Karney 2013) areas on a geographic grid, and the
real 3-arc-second DEM shipped with matplotlib (``jacksboro_fault_dem.npz``).
"""

import json

import numpy as np
import pytest
from affine import Affine

from basinkit import write_flow_folder
from basinkit import route, terrain_from_array
from basinkit.analysis.channels import extract_channels
from basinkit.errors import InputError
from basinkit.analysis.morphometry import (basin_morphometry, hypsometric_curve,
                                           morphometry_table)
from conftest import fractal_dem
from test_channels import binary_tree_model


def circular_basin(radius, cellsize=10.0):
    """A disc of radius R (cells) tangent to the northern grid edge; inside, elevation is
    the distance to the outlet cell at the top of the disc, outside it falls away from
    the disc. Returns (flow model, disc mask, outlet cell)."""
    n = 2 * radius + 5
    yy, xx = np.mgrid[:n, :n] + 0.5
    cx = n / 2
    r = np.hypot(yy - radius, xx - cx)
    disc = r <= radius
    z = np.where(disc, np.hypot(yy - 0.5, xx - cx), 1000.0 - (r - radius))
    fm = route(terrain_from_array(z, cellsize=cellsize))
    return fm, disc, int(cx)


# ------------------------------------------------------------------ shape
def test_circle_elongation_and_circularity():
    """A circular basin with its outlet on the rim: elongation ratio 2√(A/π)/L = 1
    (Schumm 1956; L = diameter), circularity 4πA/P² = 1 (Miller 1953), compactness
    P/(2√(πA)) = 1 (Gravelius 1914), form factor A/L² = π/4 (Horton 1932). Tolerance
    0.05: raster discretisation of a circle of radius 40 cells (the farthest cell centre
    lies half a cell inside the rim; the perimeter of the staircase is smoothed by one
    cell)."""
    fm, disc, outlet = circular_basin(40)
    m = basin_morphometry(fm, disc, outlet)
    assert m["elongation_ratio"] == pytest.approx(1.0, abs=0.05)
    assert m["circularity_ratio"] == pytest.approx(1.0, abs=0.05)
    assert m["compactness_coefficient"] == pytest.approx(1.0, abs=0.05)
    assert m["form_factor"] == pytest.approx(np.pi / 4, abs=0.05)
    # the cell-edge perimeter of a digital disc is 4/π times the circle's (staircase)
    assert m["perimeter_cell_edges_m"] == pytest.approx(8 * 40 * 10.0, rel=0.03)
    assert m["area_m2"] == pytest.approx(np.pi * 400.0 ** 2, rel=0.01)
    # the disc drains to its outlet: the longest flow path is at least the diameter
    assert m["longest_flow_path_m"] >= 0.95 * 800.0


def test_longest_flow_path_matches_upstream_length():
    """For a full upstream mask the longest flow path is the greatest distance along the D8
    flow paths from any cell of the catchment to the outlet (Hack 1957 main-stream length),
    computed here by walking every cell's path with steps of 25 m and 25·√2 m (closed
    form on a square grid); FlowModel.upstream_length() gives the same at the outlet."""
    z = fractal_dem(80, seed=2)
    fm = route(terrain_from_array(z, cellsize=25.0))
    acc = fm.accumulation().ravel()
    outlet = int(np.argmax(acc))
    mask = fm.upstream_mask(outlet)
    m = basin_morphometry(fm, mask, outlet)
    rec, nc = fm.receiver, fm.ncols
    longest = 0.0
    for i in np.flatnonzero(mask.ravel()):
        length, j = 0.0, int(i)
        while j != outlet:
            r = int(rec[j])
            length += 25.0 * (np.sqrt(2) if (r // nc != j // nc and r % nc != j % nc) else 1)
            j = r
        longest = max(longest, length)
    assert m["longest_flow_path_m"] == pytest.approx(longest, rel=1e-12)
    assert fm.upstream_length().ravel()[outlet] == pytest.approx(longest, rel=1e-12)
    # a path is never shorter than the straight line between its ends (triangle inequality)
    assert m["longest_flow_path_m"] >= m["basin_length_straight_m"] * 0.99


# ------------------------------------------------------------------ hypsometry
def _disc_surface(kind, radius=60, cellsize=10.0, height=100.0):
    n = 2 * radius + 1
    yy, xx = np.mgrid[:n, :n]
    r = np.hypot(yy - radius, xx - radius)
    rel = r / radius
    z = {"cone": height * (1 - rel), "bowl": height * rel}[kind]
    z = np.where(r <= radius, z, np.nan)
    return terrain_from_array(z, cellsize=cellsize), np.isfinite(z), radius * n + radius


@pytest.mark.parametrize("kind,expected", [("cone", 1 / 3), ("bowl", 2 / 3)])
def test_hypsometric_integral_cone_and_bowl(kind, expected):
    """Cone z = H(1 − r/R) over the disc: area above relative height h is (1 − h)², so the
    hypsometric integral is 1/3; the bowl z = H·r/R gives 2/3 (closed form; Strahler
    1952). The elevation–relief ratio (Pike & Wilson 1971) equals the integral.
    Tolerance 0.01: raster discretisation of the disc (R = 60 cells)."""
    t, mask, centre = _disc_surface(kind)
    fm = route(t, conditioning="none")
    m, curve = basin_morphometry(fm, mask, centre, return_curve=True)
    assert m["hypsometric_integral"] == pytest.approx(expected, abs=0.01)
    assert m["elevation_relief_ratio"] == pytest.approx(expected, abs=0.01)
    h = curve["relative_height"].to_numpy()
    ref = (1 - h) ** 2 if kind == "cone" else 1 - h ** 2
    np.testing.assert_allclose(curve["relative_area_above"], ref, atol=0.03)


def test_hypsometric_integral_inclined_plane():
    """An inclined plane over a rectangle: area above relative height h is 1 − h, integral
    1/2 (closed form; Strahler 1952). Tolerance 0.01 (100 rows of discrete heights)."""
    z = np.add.outer(np.arange(100.0, 0, -1), np.zeros(40)) * 2.0
    fm = route(terrain_from_array(z, cellsize=10.0))
    mask = np.ones(z.shape, bool)
    m = basin_morphometry(fm, mask, 99 * 40 + 20)
    assert m["hypsometric_integral"] == pytest.approx(0.5, abs=0.01)
    assert m["relief_m"] == pytest.approx(198.0)
    assert m["melton_ruggedness"] == pytest.approx(198.0 / np.sqrt(100 * 40 * 100.0))
    curve = hypsometric_curve([0.0, 1.0, 2.0, 3.0])
    assert curve["relative_area_above"].iloc[0] == 1.0
    assert curve["relative_area_above"].iloc[-1] == pytest.approx(0.25)


# ------------------------------------------------------------------ slope and aspect
def test_horn_slope_and_aspect_of_planes():
    """Horn's (1981) finite difference is exact for a plane: slope = |∇z| and aspect = the
    downslope azimuth (closed form), also with unequal dx and dy."""
    from basinkit.analysis._channels import horn_slope_aspect

    a, b = 0.3, -0.4  # dz/dx (east), dz/dy (north)
    dx, dy = 10.0, 25.0
    r, c = np.mgrid[:30, :30]
    z = a * c * dx - b * r * dy  # rows run south
    s, asp = horn_slope_aspect(z.astype(float), np.full(30, dx), np.full(30, dy),
                               np.full(30, dy))
    assert np.allclose(s[1:-1, 1:-1], 0.5)
    expected = np.degrees(np.arctan2(-a, -b)) % 360
    assert np.allclose(asp[1:-1, 1:-1], expected)
    # through basin_morphometry: a plane facing south has every cell in the S sector
    # (interior mask: on the grid edge the missing neighbours take the centre's value)
    zz = np.add.outer(np.arange(40.0, 0, -1), np.zeros(30)) * 1.5
    fm = route(terrain_from_array(zz, cellsize=10.0))
    inner = np.zeros(zz.shape, bool)
    inner[1:-1, 1:-1] = True
    m = basin_morphometry(fm, inner, 38 * 30 + 15)
    assert m["mean_slope_m_per_m"] == pytest.approx(0.15, rel=1e-6)
    assert m["aspect_s_fraction"] == pytest.approx(1.0)
    assert m["mean_slope_deg"] == pytest.approx(np.degrees(np.arctan(0.15)))


# ------------------------------------------------------------------ network
@pytest.mark.parametrize("k", [3, 4, 5, 6])
def test_binary_tree_bifurcation_ratio(k):
    """Perfect binary tree of depth k: N_j = 2^(k−j) streams of order j, so the regression
    of log N on order gives R_b = 2 exactly (Horton 1945; Strahler 1957; closed form)."""
    fm, outlet = binary_tree_model(k)
    net = extract_channels(fm, 1.0)
    mask = fm.receiver.reshape(fm.shape) != -2
    m = basin_morphometry(fm, mask, outlet, network=net)
    assert m["max_strahler_order"] == k
    assert m["bifurcation_ratio"] == pytest.approx(2.0, abs=1e-12)
    for j in range(1, k + 1):
        assert m[f"stream_count_order_{j}"] == 2 ** (k - j)
    assert m["stream_count"] == 2 ** k - 1
    # total length: every step between two cells of the catchment (the outlet's leaves)
    assert m["total_stream_length_m"] == pytest.approx(fm.receiver_distance().sum())


def test_parallel_valleys_drainage_density():
    """Parallel valleys with spacing s: one channel per valley, so D_d = ΣL/A ≈ 1/s
    (Horton 1945; closed form for this geometry). Tolerance 5 %: each channel starts
    about two cells below the divide and its last step leaves the grid, so ΣL is short of
    the full valley length by ~3 cells of 120."""
    s_cells, nvalley, length, cs = 20, 4, 120, 10.0
    r, c = np.mgrid[:length, :nvalley * s_cells]
    x = c - s_cells / 2
    z = 0.05 * cs * (length - r) + 20.0 * (1 - np.cos(2 * np.pi * x / s_cells))
    fm = route(terrain_from_array(z, cellsize=cs))
    net = extract_channels(fm, 2 * s_cells * cs * cs)
    assert net.segments.shape[0] == nvalley  # one unbranched channel per valley
    mask = np.ones(z.shape, bool)
    outlet = (length - 1) * z.shape[1] + s_cells // 2
    m = basin_morphometry(fm, mask, outlet, network=net)
    s_km = s_cells * cs / 1000
    assert m["drainage_density_km_per_km2"] == pytest.approx(1 / s_km, rel=0.05)
    assert m["channel_maintenance_km2_per_km"] == pytest.approx(s_km, rel=0.05)
    assert m["overland_flow_length_m"] == pytest.approx(s_cells * cs / 2, rel=0.05)
    assert m["stream_frequency_per_km2"] == pytest.approx(nvalley / m["area_km2"])


def test_jacksboro_bifurcation_ratio():
    """The real 3″ DEM (matplotlib sample data ``jacksboro_fault_dem.npz``, geographic;
    its ymin/ymax are swapped, rows run north to south) runs, and its largest catchment
    has a bifurcation ratio within 3–5, the usual range for natural networks (Strahler
    1957; value from memory). Its area equals the geodesic area of its boundary polygon
    (pyproj.Geod, Karney 2013) to 0.1 % (polygon edges are geodesics, cell edges follow
    parallels)."""
    from matplotlib import cbook

    from basinkit.analysis.polygons import ground_area_perimeter, mask_to_polygon

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as d:
        z = np.asarray(d["elevation"], dtype=np.float32)
        dx, dy = float(d["dx"]), float(d["dy"])
        west = float(d["xmin"])
        north = max(float(d["ymin"]), float(d["ymax"]))
    fm = route(terrain_from_array(z, transform=Affine(dx, 0, west, 0, -dy, north),
                                  crs="EPSG:4326"))
    net = extract_channels(fm, 0.25e6)
    outlet = int(np.nanargmax(fm.accumulation(unit="m2").ravel()))
    mask = fm.upstream_mask(outlet)
    m = basin_morphometry(fm, mask, outlet, network=net)
    assert m["area_km2"] > 100
    assert 3.0 <= m["bifurcation_ratio"] <= 5.0
    assert m["max_strahler_order"] >= 4
    area, _ = ground_area_perimeter(mask_to_polygon(mask, fm.terrain.transform),
                                    fm.terrain.crs)
    assert m["area_m2"] == pytest.approx(area, rel=1e-3)
    for key in ("length_ratio", "area_ratio", "drainage_density_km_per_km2",
                "hypsometric_integral", "mean_slope_m_per_m"):
        assert np.isfinite(m[key])


# ------------------------------------------------------------------ batch
def test_table_agrees_with_single_and_records_failures():
    """The batch over a label grid gives the same values as one catchment at a time
    (common practice: a batch is a loop), and a bad item is recorded, not fatal
    (project rule)."""
    z = fractal_dem(100, seed=8)
    fm = route(terrain_from_array(z, cellsize=30.0))
    net = extract_channels(fm, 30 * 900.0)
    acc = fm.accumulation().ravel()
    rng = np.random.default_rng(1)
    outlets = rng.choice(np.flatnonzero((acc > 40) & (acc < 800)), 6, replace=False)
    labels = fm.label_outlets(outlets)
    tab = morphometry_table(fm, labels, np.append(outlets, outlets[0]),
                            ids=np.arange(1, 8), network=net)
    assert len(tab) == 7
    assert "no cells" in tab.loc[6, "error"]
    for i, oc in enumerate(outlets):
        mask = labels == i + 1
        one = basin_morphometry(fm, mask, oc, network=net)
        row = tab.iloc[i]
        assert row["error"] == ""
        for key in ("area_km2", "perimeter_m", "hypsometric_integral", "relief_m",
                    "mean_slope_m_per_m", "drainage_density_km_per_km2",
                    "longest_flow_path_m"):
            assert row[key] == pytest.approx(one[key], nan_ok=True)
    # masks given one by one; an outlet outside its mask is an error of that row only
    masks = [labels == 1, labels == 2]
    t2 = morphometry_table(fm, masks, [outlets[0], outlets[0]], ids=[1, 2])
    assert t2.loc[0, "error"] == "" and "not inside" in t2.loc[1, "error"]
    with pytest.raises(InputError):
        basin_morphometry(fm, np.zeros(fm.shape, bool), outlets[0])


def test_every_column_names_its_unit():
    """Every key names its unit or is a dimensionless ratio/count (project rule)."""
    z = fractal_dem(60, seed=3)
    fm = route(terrain_from_array(z, cellsize=30.0))
    net = extract_channels(fm, 20 * 900.0)
    outlet = int(np.argmax(fm.accumulation().ravel()))
    m = basin_morphometry(fm, fm.upstream_mask(outlet), outlet, network=net)
    units = ("_m", "_m2", "_km2", "_km", "_m_per_m", "_deg", "_per_km2", "_km_per_km2",
             "_km2_per_km", "_fraction")
    dimensionless = {"outlet_row", "outlet_col", "cell_count", "elongation_ratio",
                     "circularity_ratio", "form_factor", "compactness_coefficient",
                     "relief_ratio", "melton_ruggedness", "hypsometric_integral",
                     "elevation_relief_ratio", "channel_cells", "stream_count",
                     "max_strahler_order", "bifurcation_ratio", "length_ratio",
                     "area_ratio", "outlet_x", "outlet_y"}
    for k in m:
        assert k in dimensionless or k.endswith(units) or k.startswith("stream_count_order"), k


def test_hypsometric_outputs():
    """The curve's columns, and the figure drawn twice gives the same PNG bytes
    (deterministic outputs: project rule; PNG read back by matplotlib, common practice)."""
    import io

    import matplotlib.image as mpimg

    from basinkit.plot.hypsometry import plot_hypsometric_curve
    from basinkit.workflow.output import png_bytes

    t, mask, centre = _disc_surface("cone", radius=20)
    fm = route(t, conditioning="none")
    m, curve = basin_morphometry(fm, mask, centre, return_curve=True)
    assert {"relative_height", "relative_area_above", "elevation_m",
            "area_above_m2"} <= set(curve.columns)
    pngs = [png_bytes(plot_hypsometric_curve(curve, integral=m["hypsometric_integral"],
                                             label="cone")) for _ in range(2)]
    assert pngs[0] == pngs[1]
    img = mpimg.imread(io.BytesIO(pngs[0]), format="png")
    assert img.shape[0] > 100 and img.shape[1] > 100
    json.dumps({k: v for k, v in m.items()}, default=float)



# ------------------------------------------------------------------ command line
def test_morphometry_command(tmp_path, capsys):
    """``basinkit morphometry``: CSV and JSON with provenance and cautions, one table of
    hypsometric curves and a PNG per figure outlet; a nested outlet gets its full catchment,
    equal to the library's ``fm.upstream_mask`` area (and to the delineation's area); an
    outlet off the grid is recorded in the error column while the others carry on, and the
    exit status is 1 (project rules)."""
    import pandas as pd
    import rasterio

    from basinkit import load_flow, read_dem
    from basinkit.cli.main import main

    z = fractal_dem(80, seed=12)
    with rasterio.open(tmp_path / "dem.tif", "w", driver="GTiff", width=80, height=80,
                       count=1, dtype="float32", crs="EPSG:32633",
                       transform=Affine(30, 0, 500000, 0, -30, 4000000)) as ds:
        ds.write(z, 1)
    write_flow_folder(route(read_dem(tmp_path / "dem.tif")), tmp_path / "flow")
    fm = load_flow(tmp_path / "flow")
    acc = fm.accumulation().ravel()
    low = int(np.argmax(acc))
    up = int(fm.stack[np.flatnonzero(acc[fm.stack] > 30)[5]])  # a cell upstream
    assert fm.upstream_mask(low).ravel()[up]
    pts = []
    for name, cell in (("low", low), ("up", up)):
        r, c = divmod(cell, fm.ncols)
        x, y = fm.terrain.xy_of(r, c)
        pts.append(f"{name}={x},{y}")
    out = tmp_path / "m"
    with pytest.raises(SystemExit) as exc:
        main(["morphometry", str(tmp_path / "flow"), "--outlet", pts[0], "--outlet", pts[1],
              "--outlet", "off=1,2", "--snap-radius", "0m", "--min-area", "0.02km2",
              "-o", str(out)])
    err = capsys.readouterr().err
    assert exc.value.code == 1, err  # one outlet failed
    tab = pd.read_csv(out / "morphometry.csv", keep_default_na=False, na_values=[""])
    assert list(tab["outlet_id"]) == ["low", "up", "off"]
    for oid, cell in (("low", low), ("up", up)):
        row = tab[tab.outlet_id == oid].iloc[0]
        area = fm.terrain.geometry.area[0] * fm.upstream_mask(cell).sum()
        assert row["area_m2"] == pytest.approx(area)
        assert (out / "figures" / f"{row['file_id']}_hypsometry.png").exists()
    hyps = pd.read_csv(out / "hypsometry.csv")
    assert sorted(set(hyps["outlet_id"])) == ["low", "up"]
    assert "outside" in tab[tab.outlet_id == "off"].iloc[0]["error"]
    meta = json.loads((out / "morphometry.json").read_text(),  # strict JSON (RFC 8259)
                      parse_constant=lambda t: (_ for _ in ()).throw(ValueError(t)))
    assert meta["nested_outlets"] is True
    assert "licensed professional" in meta["cautions"]
    assert meta["parameters"]["min_area_m2"] == pytest.approx(2e4)
    assert meta["outlets_measured"] == 2 and meta["outlets_failed"] == 1


def test_horn_slope_on_geographic_grid_uses_true_cell_sizes():
    """On a 3″ geographic grid at 60° N a surface rising 0.1 m per metre eastwards on the
    ground has slope 0.1 everywhere (closed form; the east-west cell width, half the
    north-south one at 60°, comes from pyproj.Geod, Karney 2013). A naive slope from
    degree spacing or equal dx, dy would be off by a factor of about 2."""
    from pyproj import Geod

    d = 1.0 / 1200
    n = 40
    lat_top = 60.0 + n * d / 2
    geod = Geod(ellps="WGS84")
    lats = lat_top - d * (np.arange(n) + 0.5)
    _, _, dx = geod.inv(np.zeros(n), lats, np.full(n, d), lats)
    z = 0.1 * np.arange(n)[None, :] * dx[:, None]  # per-row true east distance
    t = terrain_from_array(z, transform=Affine(d, 0, 10.0, 0, -d, lat_top), crs="EPSG:4326")
    fm = route(t, conditioning="none")
    inner = np.zeros(z.shape, bool)
    inner[1:-1, 1:-1] = True
    m = basin_morphometry(fm, inner, 20 * n + 1)
    assert m["mean_slope_m_per_m"] == pytest.approx(0.1, rel=2e-3)
    assert m["slope_p90_m_per_m"] == pytest.approx(0.1, rel=2e-3)
    assert m["aspect_w_fraction"] == pytest.approx(1.0)
