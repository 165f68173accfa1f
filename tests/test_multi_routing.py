"""D∞ and MFD routing (basinkit.routing._multi) and contributing fractions (basinkit.routing.contributing).

External checks, named beside each test:
- tilted planes: the D∞ angle equals the plane's aspect exactly for any aspect, because the
  facet plane through three points of a plane is the plane itself (Tarboton 1997, WRR
  33:309-319); D8 equals the aspect for multiples of 45° (O'Callaghan & Mark 1984);
- on a geographic grid the expected angle comes from pyproj Geod distances (Karney 2013);
- the cone z = H(1 - r/R): specific catchment area a = r/2 (Tarboton 1997 used this test);
- accumulation and contributing fractions against an independent sparse linear solve of
  their defining equations (scipy; definition of accumulation, common practice, no source);
- conservation and topological-order properties with hypothesis on random fractal DEMs with
  nodata holes (CHECKS.md properties).
"""

import math

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from affine import Affine
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from basinkit import write_flow_folder
from basinkit import load_flow, route, terrain_from_array
from basinkit.routing._multi import accumulate_multi
from basinkit.routing.multi import dinf_azimuth, multi_receivers
from basinkit.routing.contributing import (contributing_area_m2, contributing_fraction,
                                           contributing_fractions)
from basinkit.errors import InputError, OutletError

from conftest import fractal_dem


def plane(aspect_deg, n=30, m=None, dx=10.0, dy=10.0, gradient=0.1):
    """z falling at ``gradient`` m/m toward azimuth ``aspect_deg`` (clockwise from north);
    x east = col·dx, y north = -row·dy. Offset so that values stay small (float32)."""
    m = m or n
    r, c = np.mgrid[0:n, 0:m].astype(float)
    a = math.radians(aspect_deg)
    z = -(math.sin(a) * c * dx - math.cos(a) * r * dy) * gradient
    return z - z.min()


def angle_diff(a, b):
    d = np.abs(np.asarray(a, float) - b) % 360.0
    return np.minimum(d, 360.0 - d)


# ---------------------------------------------------------------------- tilted planes
@pytest.mark.parametrize("aspect", [10.0, 33.0, 45.0, 77.0, 135.0, 200.0, 311.0, 359.0])
@pytest.mark.parametrize("cells", [(10.0, 10.0), (10.0, 25.0)])
def test_dinf_angle_equals_plane_aspect(aspect, cells):
    """Tarboton (1997): on a plane the facet plane is the plane, so the D∞ angle equals the
    aspect exactly, whatever the aspect; also on rectangular cells (dx != dy), where the
    aspect is measured on the ground. Tolerance 2e-3°: float32 elevations (the DEM dtype)
    round the drops by ~1e-6 relative."""
    dx, dy = cells
    z = plane(aspect, dx=dx, dy=dy)
    t = terrain_from_array(z, transform=Affine(dx, 0, 0, 0, -dy, z.shape[0] * dy))
    fm = route(t, method="dinf")
    az = fm.dinf_azimuth[1:-1, 1:-1]
    assert az.dtype == np.float32
    assert np.all((az >= 0) & (az < 360))
    assert angle_diff(az, aspect).max() < 2e-3
    # proportions: all flow to the two cells bounding the aspect, in the ratio of angles
    rec, frac, _ = fm.multi
    i = 15 * z.shape[1] + 15
    # the quadrant's diagonal lies delta degrees from the cardinal starting the quadrant
    q, off = divmod(aspect, 90.0)
    delta = math.degrees(math.atan2(dx, dy) if q % 2 == 0 else math.atan2(dy, dx))
    diag_share = off / delta if off < delta else (90.0 - off) / (90.0 - delta)
    assert frac[i].sum() == pytest.approx(1.0, abs=1e-6)
    assert frac[i].max() == pytest.approx(max(diag_share, 1 - diag_share), abs=1e-4)


@pytest.mark.parametrize("aspect", [0, 45, 90, 135, 180, 225, 270, 315])
def test_d8_direction_equals_aspect_for_multiples_of_45(aspect):
    """O'Callaghan & Mark (1984) steepest descent: on a plane whose aspect is a multiple of
    45° the D8 direction is the aspect (square cells), and D∞ agrees with all its flow to
    that one neighbour (Tarboton 1997), up to float32 rounding of the elevations."""
    z = plane(aspect)
    fm = route(terrain_from_array(z, cellsize=10), method="dinf")
    d8 = fm.direction_d8()[1:-1, 1:-1]
    assert np.all(d8 == aspect)
    assert angle_diff(fm.dinf_azimuth[1:-1, 1:-1], aspect).max() < 2e-3
    rec, frac, _ = fm.multi
    inner = (np.arange(z.size).reshape(z.shape)[1:-1, 1:-1]).ravel()
    top = np.argmax(frac[inner], axis=1)  # float32 drops may leave a crumb (< 1e-4) aside
    np.testing.assert_array_equal(rec[inner, top], fm.receiver[inner])
    assert frac[inner, top].min() > 1 - 1e-4


def test_dinf_angle_on_geographic_grid_uses_geodesic_spacing():
    """On a 0.001° grid at 60° N the ground cell is about half as wide as it is tall; a
    surface falling by 1 m per column eastward and 1 m per row southward therefore slopes
    toward azimuth atan2(1/dx, -1/dy) with dx, dy the geodesic spacings, taken here from
    pyproj Geod (Karney 2013) independently of basinkit's geometry."""
    from pyproj import Geod

    n = 24
    r, c = np.mgrid[0:n, 0:n].astype(float)
    z = 100.0 - c - r
    d = 0.001
    tr = Affine(d, 0, 10.0, 0, -d, 60.0)
    fm = route(terrain_from_array(z, transform=tr, crs="EPSG:4326"), method="dinf")
    geod = Geod(ellps="WGS84")
    for row in (3, 12, 20):
        lat = 60.0 - d * (row + 0.5)
        dx = geod.inv(10.0, lat, 10.0 + d, lat)[2]
        dy = geod.inv(10.0, lat, 10.0, lat - d)[2]
        expect = math.degrees(math.atan2(1.0 / dx, -1.0 / dy)) % 360
        assert 110 < expect < 125  # dx ≈ dy / 2: far from the 135° of square cells
        assert angle_diff(fm.dinf_azimuth[row, 2:-2], expect).max() < 2e-3
    # areas stay true on the ground: exits collect the ellipsoidal area of all cells, and
    # the contributing area at a corner exit equals its upstream area
    area = fm.upstream_area()
    rec = fm.multi[0]
    exits = rec[:, 0] < 0
    assert area.ravel()[exits].sum() == pytest.approx(fm.terrain.cell_area().sum(), rel=1e-9)
    o = z.size - 1
    assert contributing_area_m2(fm, o) == pytest.approx(area.ravel()[o], rel=1e-9)


def test_mfd_on_plane_and_exponent():
    """Freeman (1991): with exponent p the shares go as tan(β)^p·L; on a plane dipping south
    (square cells of width w) the S neighbour's share against SE is (tanβ_S / tanβ_SE)^p ·
    (0.5 w) / (0.354 w) with tanβ_SE = tanβ_S / √2 (Quinn et al. 1991 contour lengths)."""
    z = plane(180.0)
    for p in (1.0, 1.1, 4.0):
        fm = route(terrain_from_array(z, cellsize=10), method="mfd", mfd_exponent=p)
        rec, frac, _ = fm.multi
        i = 10 * z.shape[1] + 10
        got = dict(zip(rec[i][rec[i] >= 0].tolist(), frac[i][rec[i] >= 0].tolist()))
        s = i + z.shape[1]
        assert set(got) == {s - 1, s, s + 1}
        ratio = math.sqrt(2) ** p * 0.5 / (math.sqrt(2) / 4)
        assert got[s] / got[s + 1] == pytest.approx(ratio, rel=1e-5)
        assert got[s - 1] == pytest.approx(got[s + 1], rel=1e-6)
    with pytest.raises(InputError, match="exponent"):
        route(terrain_from_array(z, cellsize=10), method="mfd", mfd_exponent=-1)


# ---------------------------------------------------------------------- the cone
@pytest.mark.parametrize("method", ["dinf", "mfd"])
def test_cone_specific_catchment_area(method):
    """Cone z = H(1 - r/R) over the disc r <= R: divergent flow with specific catchment
    area a = r/2 (Tarboton 1997 used this test). a = upstream area / cell width.

    Tolerance (grid discretisation): flow lines on a grid are one cell apart along the
    axes but 1/√2 apart along the diagonals, and dispersion gathers flow onto the axis rays,
    so A/Δx is not exactly the area per unit contour width. Measured here: D∞ about 11 %
    low off the axes, MFD about 10 % high. So the median of a/(r/2) over 0.2R < r < 0.8R
    must lie within 15 % of 1 and 95 % of cells within 30 %; the least-squares slope of a
    against r within 15 % of 1/2 (a grows linearly with r) and the intercept small. The
    apex (a point) and the rim (truncated cells) are excluded.
    """
    n = 121
    R = 60.0
    r, c = np.mgrid[0:n, 0:n].astype(float)
    rad = np.hypot(r - n // 2, c - n // 2)
    z = 100.0 * (1 - rad / R)
    z[rad > R] = np.nan
    fm = route(terrain_from_array(z, cellsize=2.0), method=method)
    a = fm.accumulation(unit="m2") / 2.0
    sel = (rad > 0.2 * R) & (rad < 0.8 * R)
    rm = rad[sel] * 2.0  # metres
    ratio = a[sel] / (rm / 2)
    assert abs(np.median(ratio) - 1) < 0.15
    assert np.mean(np.abs(ratio - 1) < 0.30) > 0.95
    slope, icpt = np.polyfit(rm, a[sel], 1)
    assert slope == pytest.approx(0.5, rel=0.15)
    assert abs(icpt) < 0.1 * R
    # D8 concentrates flow on the rays instead: far worse on the same cone (Tarboton 1997)
    d8 = fm.accumulation(unit="m2", method="d8")[sel] / 2.0 / (rm / 2)
    assert np.mean(np.abs(d8 - 1) < 0.30) < np.mean(np.abs(ratio - 1) < 0.30) - 0.3


# ---------------------------------------------------------------------- properties
def _graph_checks(fm, rec, frac, order):
    """Receivers valid and downslope, shares sum to 1, order topological."""
    z = fm.terrain.elevation.ravel().astype(np.float64)
    valid = fm.terrain.valid.ravel()
    n = z.size
    used = rec >= 0
    has = used.any(axis=1)
    # nodata and D8 exits have no receivers; all other valid cells do
    assert not has[~valid].any()
    np.testing.assert_array_equal(has[valid], fm.receiver[valid] >= 0)
    # receivers packed to the front; positive shares summing to 1 (float32)
    assert np.all(used[:, :-1] | ~used[:, 1:])
    assert np.all(frac[used] > 0) and np.all(frac[~used] == 0)
    np.testing.assert_allclose(frac[has].astype(np.float64).sum(axis=1), 1.0, atol=1e-6)
    # receivers are valid and lower, or the D8 receiver of a flat cell (same level)
    src, slot = np.nonzero(used)
    dst = rec[src, slot]
    assert valid[dst].all()
    lower = z[dst] < z[src]
    flat = (dst == fm.receiver[src]) & (z[dst] == z[src])
    assert np.all(lower | flat)
    # order: every valid cell once, each before all its receivers
    assert np.array_equal(np.sort(order), np.flatnonzero(valid))
    pos = np.full(n, -1)
    pos[order] = np.arange(order.size)
    assert np.all(pos[src] < pos[dst])


def _reference_accumulation(rec, frac, weight):
    """Solve a = w + Pᵀ a (a cell's total is its own weight plus the shares of its donors)
    with a sparse direct solver: independent of the order and of accumulate_multi."""
    n = rec.shape[0]
    src, slot = np.nonzero(rec >= 0)
    p = frac[src, slot].astype(np.float64)
    p /= np.bincount(src, weights=p, minlength=n)[src]  # shares renormalised in float64
    P = sp.csr_matrix((p, (src, rec[src, slot])), shape=(n, n))
    return spla.spsolve((sp.identity(n, format="csc") - P.T).tocsc(), weight)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), n=st.integers(3, 28), m=st.integers(3, 28),
       holes=st.integers(0, 3), method=st.sampled_from(["dinf", "mfd"]),
       conditioning=st.sampled_from(["fill", "none"]), integer=st.booleans(),
       exponent=st.sampled_from([0.0, 1.0, 1.1, 8.0, 60.0]))
def test_conservation_and_order_on_random_dems(seed, n, m, holes, method, conditioning,
                                               integer, exponent):
    """CHECKS.md properties: accumulation at exits sums to the total weight (cells, area,
    random weights), shares sum to 1, the order is topological; and the accumulation equals
    an independent sparse solve of its defining equations. Random fractal DEMs with nodata
    holes; unfilled ones keep pits (exits inside the grid); integer DEMs have flats; MFD
    exponents from 0 (contour length only) to 60 (shares far below float32 range)."""
    z = fractal_dem(n, m, seed=seed, relief=50, holes=holes, integer=integer)
    if not np.isfinite(z).any():
        return
    fm = route(terrain_from_array(z, cellsize=5.0), method=method, conditioning=conditioning,
               mfd_exponent=exponent)
    rec, frac, order = fm.multi
    _graph_checks(fm, rec, frac, order)
    valid = fm.terrain.valid.ravel()
    exits = valid & (rec[:, 0] < 0)
    cells = fm.accumulation(unit="cells").ravel()
    assert cells[exits].sum() == pytest.approx(valid.sum(), rel=1e-12)
    area = fm.accumulation(unit="m2").ravel()
    assert area[exits].sum() == pytest.approx(25.0 * valid.sum(), rel=1e-12)
    w = np.random.default_rng(seed).uniform(0, 3, z.shape)
    acc = fm.accumulation(weights=w).ravel()
    wv = np.where(valid, w.ravel(), 0.0)
    assert acc[exits].sum() == pytest.approx(wv.sum(), rel=1e-12)
    assert np.all(acc[valid] >= wv[valid] - 1e-9)
    np.testing.assert_allclose(acc[valid], _reference_accumulation(rec, frac, wv)[valid],
                               rtol=1e-9, atol=1e-9)


def test_order_valid_on_flats_and_unrouted_model():
    """A terrace of flats (integer plateaus) after filling: the flat cells follow their D8
    receivers (Barnes, Lehman & Mulla 2014) and the order stays topological; the kernels
    also work without the flat mask (as after load_flow) and give the same result."""
    z = np.floor(fractal_dem(40, 36, seed=3, relief=6)).astype(np.float32)
    fm = route(terrain_from_array(z, cellsize=1), method="mfd")
    assert (fm.terrain.elevation[1:, :] == fm.terrain.elevation[:-1, :]).sum() > 200
    _graph_checks(fm, *fm.multi)
    again = multi_receivers(fm, "mfd", 1.1, None)
    for x, y in zip(fm.multi, again):
        np.testing.assert_array_equal(x, y)


def test_accumulate_multi_hand_example():
    """A split 1/4 : 3/4 and a merge, computed by hand (common practice, no source)."""
    rec = np.array([[1, 2], [3, -1], [3, -1], [-1, -1]], dtype=np.int32)
    frac = np.array([[0.25, 0.75], [1, 0], [1, 0], [0, 0]], dtype=np.float32)
    acc = accumulate_multi(rec, frac, np.array([0, 2, 1, 3], dtype=np.int32),
                           np.array([4.0, 1.0, 2.0, 0.5]))
    assert acc.tolist() == [4.0, 2.0, 5.0, 7.5]


# ---------------------------------------------------------------------- contributing
def _reference_fraction(rec, frac, outlet):
    """f_o = 1 and f_i = Σ p_ik f_rk elsewhere, solved as a sparse linear system."""
    n = rec.shape[0]
    src, slot = np.nonzero(rec >= 0)
    keep = src != outlet
    src, slot = src[keep], slot[keep]
    p = frac[src, slot].astype(np.float64)
    p /= np.bincount(src, weights=p, minlength=n)[src]
    P = sp.csr_matrix((p, (src, rec[src, slot])), shape=(n, n))
    b = np.zeros(n)
    b[outlet] = 1.0
    return spla.spsolve((sp.identity(n, format="csc") - P).tocsc(), b)


@pytest.mark.parametrize("method", ["dinf", "mfd"])
def test_contributing_fraction_sums_to_upstream_area(method):
    """Σ fraction × cell area equals the D∞/MFD upstream area at the outlet (both count each
    cell's area times the share of its flow through the outlet); fractions lie in [0, 1],
    match an independent sparse solve of f_i = Σ p_ik f_rk, and the batch function agrees."""
    z = fractal_dem(50, 44, seed=11, relief=120, holes=2)
    fm = route(terrain_from_array(z, cellsize=30.0), method=method)
    area = fm.upstream_area().ravel()
    rng = np.random.default_rng(5)
    valid = np.flatnonzero(fm.terrain.valid.ravel())
    big = valid[np.argsort(area[valid])[-5:]]
    outlets = np.concatenate([big, rng.choice(valid, 5, replace=False)])
    got = contributing_area_m2(fm, outlets)
    np.testing.assert_allclose(got, area[outlets], rtol=1e-9)
    np.testing.assert_allclose(contributing_area_m2(fm, outlets, from_fractions=False), got,
                               rtol=1e-9)
    stack = contributing_fractions(fm, outlets[:3])
    rec, frac, _ = fm.multi
    for q, o in enumerate(outlets[:3]):
        f = contributing_fraction(fm, int(o))
        assert f.dtype == np.float32
        np.testing.assert_array_equal(f, stack[q], strict=True)
        fv = f.ravel()[valid].astype(np.float64)
        assert fv.min() >= 0 and fv.max() <= 1 + 1e-6 and f.ravel()[o] == 1
        assert np.isnan(f[~fm.terrain.valid]).all()
        np.testing.assert_allclose(fv, _reference_fraction(rec, frac, int(o))[valid],
                                   atol=1e-6)
        assert np.nansum(f.astype(np.float64) * 900.0) == pytest.approx(area[o], rel=1e-6)
        if method == "mfd":
            assert ((fv > 0) & (fv < 1)).any()  # MFD really splits on this terrain


def test_contributing_fraction_on_plane():
    """A plane dipping south (aspect 180°): D∞ sends every cell straight down its column
    (Tarboton 1997), so the fraction is 1 on the column above the outlet and 0 elsewhere;
    at 200° it splits, and cells far enough upslope within the fan reach the outlet only in
    part (0 < f < 1) while the outlet's own column above it gets 1 only near it."""
    z = plane(180.0, n=20, m=15)
    fm = route(terrain_from_array(z, cellsize=10), method="dinf")
    o = 18 * 15 + 7
    f = contributing_fraction(fm, o)
    expect = np.zeros(z.shape, np.float32)
    expect[:19, 7] = 1
    np.testing.assert_array_equal(f, expect)
    assert contributing_area_m2(fm, o) == pytest.approx(19 * 100.0)
    d8 = contributing_fraction(fm, o, method="d8")
    np.testing.assert_array_equal(d8, fm.upstream_mask(o).astype(np.float32))
    fm2 = route(terrain_from_array(plane(200.0, n=20, m=15), cellsize=10), method="dinf")
    f2 = contributing_fraction(fm2, o)
    assert ((f2 > 0) & (f2 < 1)).any() and f2.max() == 1 and f2.min() >= 0
    assert f2[19].max() == 0  # nothing below the outlet's row drains up to it


def test_contributing_errors():
    """Outlets outside the grid or on nodata are refused with an OutletError that says what
    to do (project rule: user errors raise a BasinkitError subclass)."""
    z = plane(180.0, n=10, m=10)
    z[4, 4] = np.nan
    fm = route(terrain_from_array(z, cellsize=10), method="mfd")
    with pytest.raises(OutletError, match="outside the grid"):
        contributing_fraction(fm, 100)
    with pytest.raises(OutletError, match="nodata"):
        contributing_area_m2(fm, 44)
    with pytest.raises(InputError, match="unknown routing method"):
        contributing_fraction(fm, 5, method="d16")


# ---------------------------------------------------------------------- end to end
@pytest.mark.parametrize("method", ["dinf", "mfd"])
def test_route_save_load_round_trip(method, tmp_path):
    """route(..., method) end to end; the flow folder read back by load_flow (without the
    flat mask, which is not stored) gives the same receivers, order, accumulation and D∞
    azimuth as in memory, and the saved rasters read with rasterio (GDAL) equal them."""
    import rasterio

    z = fractal_dem(48, 40, seed=2, relief=80, holes=2, integer=True)  # flats after fill
    fm = route(terrain_from_array(z, cellsize=25.0), method=method, mfd_exponent=1.3)
    write_flow_folder(fm, tmp_path / "flow")
    back = load_flow(tmp_path / "flow")
    assert back.method == method
    for x, y in zip(fm.multi, back.multi):
        np.testing.assert_array_equal(x, y)
    for unit in ("cells", "m2"):
        np.testing.assert_array_equal(fm.accumulation(unit=unit),
                                      back.accumulation(unit=unit))
    with rasterio.open(tmp_path / "flow" / "upstream_area_m2.tif") as ds:
        np.testing.assert_array_equal(ds.read(1), fm.upstream_area())
    if method == "dinf":
        np.testing.assert_array_equal(back.dinf_azimuth, fm.dinf_azimuth)
        with rasterio.open(tmp_path / "flow" / "direction_dinf.tif") as ds:
            np.testing.assert_array_equal(ds.read(1), fm.dinf_azimuth)
        np.testing.assert_array_equal(dinf_azimuth(back), fm.dinf_azimuth)
    else:
        assert back.parameters["mfd_exponent"] == 1.3
        assert not (tmp_path / "flow" / "direction_dinf.tif").exists()


def test_other_method_on_a_model_keeps_its_own():
    """Asking a D∞ model for MFD (or D8) accumulation leaves its D∞ receivers in place:
    its contributing fractions still sum to the D∞ area (routing.py uses multi_for)."""
    z = fractal_dem(30, 30, seed=9, relief=60)
    fm = route(terrain_from_array(z, cellsize=10.0), method="dinf")
    dinf_area = fm.upstream_area().copy()
    mfd = fm.accumulation(unit="m2", method="mfd")
    assert fm.multi[0].shape[1] == 2
    o = int(np.nanargmax(dinf_area))
    assert contributing_area_m2(fm, o) == pytest.approx(dinf_area.ravel()[o], rel=1e-9)
    assert contributing_area_m2(fm, o, method="mfd") == pytest.approx(mfd.ravel()[o],
                                                                     rel=1e-9)
    assert not np.allclose(mfd, dinf_area)


def test_route_command_dinf(tmp_path, capsys):
    """``basinkit route --method dinf`` writes the D∞ azimuth raster next to the D8 one;
    read back with rasterio its interior equals the plane's aspect (Tarboton 1997)."""
    import rasterio

    from basinkit.cli.main import main

    z = plane(33.0, n=20, m=20).astype(np.float32)
    tr = Affine(10, 0, 500000, 0, -10, 5000000)
    with rasterio.open(tmp_path / "dem.tif", "w", driver="GTiff", width=20, height=20,
                       count=1, dtype="float32", transform=tr, crs="EPSG:32633") as ds:
        ds.write(z, 1)
    with pytest.raises(SystemExit) as exc:
        main(["route", str(tmp_path / "dem.tif"), "-o", str(tmp_path / "flow"),
              "--method", "dinf"])
    assert exc.value.code in (0, None), capsys.readouterr().err
    with rasterio.open(tmp_path / "flow" / "direction_dinf.tif") as ds:
        az = ds.read(1)
    assert angle_diff(az[1:-1, 1:-1], 33.0).max() < 2e-3


@pytest.mark.parametrize("module", ["basinkit.routing._multi", "basinkit.routing.multi",
                                    "basinkit.routing.contributing"])
def test_docstring_examples(module):
    """The Examples in the docstrings run and give what they show (hand-computed cases:
    a plane dipping south, a split of 1/4 : 3/4; common practice, no source)."""
    import doctest
    import importlib

    res = doctest.testmod(importlib.import_module(module))
    assert res.attempted > 0 and res.failed == 0


@pytest.mark.parametrize("method", ["dinf", "mfd"])
def test_real_dem_routes_and_conserves(method):
    """The real 3-arc-second Jacksboro fault DEM shipped in matplotlib's sample data
    (geographic; rows run north to south, its ymin/ymax are swapped in the file), a 160×160
    window: D∞/MFD routing is valid (receivers lower or the flat's D8 receiver, order
    topological), every valid cell is in the order, and the exits collect the ellipsoidal
    area of all cells, whose sum is checked against pyproj Geod polygon areas
    (Karney 2013)."""
    from matplotlib import cbook
    from pyproj import Geod

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as d:
        z = np.asarray(d["elevation"], dtype=np.float64)[100:260, 150:310]
        dx, dy = float(d["dx"]), float(d["dy"])
        west = float(d["xmin"]) + 150 * dx
        north = max(float(d["ymin"]), float(d["ymax"])) - 100 * dy
    tr = Affine(dx, 0, west, 0, -dy, north)
    fm = route(terrain_from_array(z, transform=tr, crs="EPSG:4326"), method=method)
    rec, frac, order = fm.multi
    _graph_checks(fm, rec, frac, order)
    area = fm.upstream_area().ravel()
    exits = fm.terrain.valid.ravel() & (rec[:, 0] < 0)
    south, east = north - 160 * dy, west + 160 * dx
    geo = abs(Geod(ellps="WGS84").polygon_area_perimeter(
        [west, east, east, west], [south, south, north, north])[0])
    assert area[exits].sum() == pytest.approx(geo, rel=1e-6)
    o = int(np.nanargmax(area))
    f = contributing_fraction(fm, o)
    assert np.nansum(f * fm.terrain.cell_area()) == pytest.approx(area[o], rel=1e-5)
