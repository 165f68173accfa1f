"""Least-cost breaching and line burning.

External checks:
- Lindsay (2016), Hydrological Processes 30:846-857: breaching a depression through a narrow
  dam alters far fewer cells than filling it; breach depth and length limits are honoured
  and what cannot be breached is filled.
- scikit-image ``morphology.reconstruction(..., method="erosion")`` (Vincent 1993; Soille
  2004): a surface without depressions is left unchanged by reconstruction by erosion.
- Burning a culvert through an embankment: D8 accumulation (O'Callaghan & Mark 1984) at the
  valley outlet must count the whole valley, which follows from the construction (closed
  form: every cell of the grid slopes to the outlet once the embankment is cut).
"""

import numpy as np
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from shapely.geometry import LineString, Polygon

from basinkit import InputError, condition, fill_depressions, route, terrain_from_array
from basinkit.conditioning.breach import breach_depressions
from basinkit.conditioning.burn import burn_lines, line_cell_paths
from basinkit.io.lines import read_lines

from conftest import fractal_dem


def no_depressions(z):
    """True when reconstruction by erosion (scikit-image; Soille 2004) leaves ``z`` as it
    is, i.e. the surface holds no depression. Nodata cells act as outlets."""
    from skimage.morphology import reconstruction

    valid = np.isfinite(z)
    work = np.where(valid, z, -1e6).astype(np.float64)
    seed = np.full(z.shape, float(np.nanmax(z)) + 10.0)
    border = np.zeros(z.shape, bool)
    border[0, :] = border[-1, :] = border[:, 0] = border[:, -1] = True
    seed[border | ~valid] = work[border | ~valid]
    rec = reconstruction(seed, work, method="erosion")
    return np.array_equal(rec[valid], work[valid])


def walk_to_exit(fm):
    """Independent check that every valid cell reaches an exit by following its receivers
    over non-increasing elevation (at most N steps, so cycles are caught)."""
    rec = fm.receiver
    z = fm.terrain.elevation.ravel()
    n = rec.size
    for i in np.flatnonzero(fm.terrain.valid.ravel()):
        j = i
        for _ in range(n + 1):
            r = rec[j]
            if r == -1:
                break
            assert r >= 0, f"cell {i} reaches invalid receiver code {r}"
            assert z[r] <= z[j], f"cell {j} drains uphill"
            j = r
        else:
            raise AssertionError(f"cell {i} never reaches an exit")


def dam_valley(dam_rows=(15,), crest=11.0, nrows=30, ncols=21):
    """A valley falling 0.5 m per row to the south edge, walls rising 1 m per column, with a
    dam (crest ``crest`` m) across the given rows; the pond behind it spills over the dam."""
    r, c = np.mgrid[0:nrows, 0:ncols]
    z = 0.5 * (nrows - 1 - r) + 1.0 * np.abs(c - ncols // 2)
    for row in dam_rows:
        z[row] = np.maximum(z[row], crest)
    return z


def test_breach_cuts_narrow_dam_instead_of_filling():
    """Lindsay (2016): breaching changes fewer cells than filling (here 1 cut cell against
    a whole pond raised) and the result drains."""
    z = dam_valley()
    t = terrain_from_array(z, cellsize=10)
    b = breach_depressions(t).elevation
    assert (b <= z).all()  # breaching only lowers
    changed = np.argwhere(b != z.astype(np.float32))
    assert changed.tolist() == [[15, 10]]  # the dam cell in the valley axis
    assert b[15, 10] == np.float32(z[14, 10])  # lowered to the pit's level (7.5 m)
    filled = fill_depressions(t).elevation
    n_fill = int((filled != z.astype(np.float32)).sum())
    assert n_fill > 10 * len(changed)
    cond, summary = condition(t, method="breach")
    assert summary.cells_raised == 0 and summary.cells_lowered == 1
    assert summary.max_cut_depth_m == pytest.approx(11.0 - 7.5)
    assert summary.cut_volume_m3 == pytest.approx(3.5 * 100.0)
    fm = route(t, conditioning="breach")
    walk_to_exit(fm)
    assert fm.accumulation()[-1, 10] == z.size  # the whole valley reaches the outlet


def test_max_depth_honoured_then_filled():
    """A dam 3.5 m above the pit is not cut with a 3 m limit (Lindsay 2016: constrained
    breaching); condition(method='breach') then fills, giving the Priority-Flood result."""
    z = dam_valley()
    t = terrain_from_array(z, cellsize=10)
    b = breach_depressions(t, max_depth=3.0).elevation
    assert np.array_equal(b, z.astype(np.float32))
    cond, summary = condition(t, method="breach", max_breach_depth=3.0)
    assert np.array_equal(cond.elevation, fill_depressions(t).elevation)
    assert summary.cells_lowered == 0 and summary.cells_raised > 10
    # at the limit itself the cut is allowed, and never deeper than the limit
    b = breach_depressions(t, max_depth=3.5).elevation
    assert (z - b).max() == pytest.approx(3.5)


def test_max_length_uses_true_cell_distances():
    """A dam 4 rows thick needs a 5-step channel from the pit (row 14) to the first lower
    cell (row 19). With 10 m wide, 20 m tall cells that is 100 m on the ground: refused at
    90 m, cut at 100 m (geometry from the transform; closed form)."""
    z = dam_valley(dam_rows=(15, 16, 17, 18))
    nr, nc = z.shape
    t = terrain_from_array(z, transform=Affine(10, 0, 0, 0, -20, 20 * nr))
    assert np.array_equal(breach_depressions(t, max_length=90).elevation,
                          z.astype(np.float32))
    b = breach_depressions(t, max_length=100).elevation
    cut = np.argwhere(b < z.astype(np.float32))
    assert cut.tolist() == [[15, 10], [16, 10], [17, 10], [18, 10]]
    # the same grid with 10 m square cells: 50 m is enough
    t10 = terrain_from_array(z, cellsize=10)
    assert (breach_depressions(t10, max_length=50).elevation < z).sum() == 4
    assert (breach_depressions(t10, max_length=49).elevation < z).sum() == 0


def test_bad_limits_refused():
    t = terrain_from_array(dam_valley())
    with pytest.raises(InputError, match="depth"):
        breach_depressions(t, max_depth=-1)
    with pytest.raises(InputError, match="length"):
        breach_depressions(t, max_length="far")


@pytest.mark.parametrize("seed,integer", [(0, False), (1, False), (2, False), (3, True)])
def test_breach_changes_fewer_cells_than_fill_on_fractal_dems(seed, integer):
    """Lindsay (2016) reports that breaching (then filling what is left) alters far fewer
    cells than filling alone; on fractal surfaces likewise (also integer ones, full of
    flats). The result holds no depression (scikit-image reconstruction) and breaching is
    deterministic."""
    z = fractal_dem(120, 100, seed=seed, holes=2, integer=integer)
    t = terrain_from_array(z)
    cond, summary = condition(t, method="breach")
    filled = fill_depressions(t).elevation
    v = t.valid
    n_breach = int((cond.elevation[v] != z[v]).sum())
    n_fill = int((filled[v] != z[v]).sum())
    assert 0 < n_breach < n_fill
    assert summary.cells_lowered > 0
    assert no_depressions(cond.elevation)
    again = breach_depressions(t).elevation
    assert np.array_equal(again, breach_depressions(t).elevation, equal_nan=True)


_ELEMENTS = st.one_of(st.floats(0, 30, width=32), st.just(np.float32(np.nan)))
_FLATS = st.one_of(st.integers(0, 4).map(np.float32), st.just(np.float32(np.nan)))  # many ties


@settings(max_examples=80, deadline=None)
@given(st.one_of(arrays(np.float32, st.tuples(st.integers(1, 14), st.integers(1, 14)),
                        elements=_ELEMENTS),
                 arrays(np.float32, st.tuples(st.integers(1, 14), st.integers(1, 14)),
                        elements=_FLATS)),
       st.sampled_from([None, 0.0, 0.5, 5.0]), st.sampled_from([None, 1.0, 1.5, 10.0]))
def test_breach_then_fill_every_cell_drains(z, depth, length):
    """Property (common practice, no source): breaching never raises a cell; after
    breach + fill no depression remains (scikit-image reconstruction) and every valid cell
    reaches an exit over non-increasing elevation."""
    if not np.isfinite(z).any():
        return
    t = terrain_from_array(z)
    b = breach_depressions(t, max_depth=depth, max_length=length).elevation
    v = t.valid
    assert (b[v] <= z[v]).all()
    assert np.isnan(b[~v]).all()
    fm = route(t, conditioning="breach", max_breach_depth=depth, max_breach_length=length)
    assert no_depressions(fm.terrain.elevation)
    walk_to_exit(fm)
    acc = fm.accumulation().ravel()
    assert acc[fm.receiver == -1].sum() == v.sum()


# ---------------------------------------------------------------- burning

def embankment_valley(nrows=40, ncols=21, cell=10.0):
    """A valley falling 0.5 m per row to the south, walls rising 2 m per column, crossed at
    row 20 by a level road embankment higher than anything in its row. Behind the road the
    pond spills out of the side edges, so the upper valley does not reach the outlet."""
    r, c = np.mgrid[0:nrows, 0:ncols]
    z = 0.5 * (nrows - 1 - r) + 2.0 * np.abs(c - ncols // 2)
    z[20] = z[20].max() + 2.0
    t = terrain_from_array(z, cellsize=cell)
    x = (ncols // 2 + 0.5) * cell
    culvert = LineString([(x, t.transform.f - 17.5 * cell), (x, t.transform.f - 23.5 * cell)])
    return z, t, culvert


def test_burned_culvert_drains_the_whole_valley():
    """Without the culvert the outlet (bottom centre) drains only the valley below the road;
    with it burned, D8 accumulation there counts every cell of the valley."""
    z, t, culvert = embankment_valley()
    outlet = (z.shape[0] - 1, z.shape[1] // 2)
    before = route(t).accumulation()[outlet]
    assert before < 0.6 * z.size
    fm = route(t, burn=[culvert], burn_depth=3.0)
    assert fm.accumulation()[outlet] == z.size
    walk_to_exit(fm)
    s = fm.summary
    assert s.burned_cells == 7  # rows 17..23 of the valley axis
    lowered = int((fm.terrain.elevation < z.astype(np.float32)).sum())
    assert s.cells_lowered == lowered and lowered >= 1
    assert fm.terrain.elevation[20, 10] < z[19, 10]  # the road is cut below the pond
    assert any("7 burned" in line for line in s.lines())
    assert s.to_dict()["burned_cells"] == 7


def test_burn_path_is_non_increasing_downstream():
    """Along a burned line the elevation never rises in the downhill direction (the lower
    end is downstream), whichever way the line was drawn (common practice, no source)."""
    z, t, culvert = embankment_valley()
    for line in (culvert, LineString(culvert.coords[::-1])):
        burned, n = burn_lines(t, [line], 3.0)
        assert n == 7
        prof = burned.elevation[17:24, 10]
        assert (np.diff(prof) <= 0).all()
        assert prof[0] == np.float32(z[17, 10] - 3.0)
        off = np.ones(z.shape, bool)
        off[17:24, 10] = False
        assert np.array_equal(burned.elevation[off], t.elevation[off])


def test_burn_diagonal_line_gives_8_connected_path():
    """A diagonal line becomes a path of cells each touching the previous one (8-connected,
    closed form: the cells a straight line passes through)."""
    t = terrain_from_array(np.zeros((30, 30)), cellsize=2)
    path = line_cell_paths(t, [LineString([(1.3, 58.7), (47.9, 21.1)])])[0]
    r, c = np.divmod(path, 30)
    assert (np.abs(np.diff(r)) <= 1).all() and (np.abs(np.diff(c)) <= 1).all()
    assert len(set(path.tolist())) == path.size
    assert (r[0], c[0]) == (0, 0) and (r[-1], c[-1]) == (19, 23)


def test_burn_from_reprojected_geopackage(tmp_path):
    """A line layer in WGS 84 is reprojected to the DEM's UTM CRS (pyproj) and burns the
    same cells as the line given in the DEM's CRS."""
    import geopandas as gpd
    from affine import Affine

    nr, nc = 40, 21
    r, c = np.mgrid[0:nr, 0:nc]
    z = 0.5 * (nr - 1 - r) + 2.0 * np.abs(c - 10)
    z[20] = z[20].max() + 2.0
    x0, y0 = 500000.0, 5000000.0  # UTM 33N, near 45 N 15 E
    t = terrain_from_array(z, transform=Affine(10, 0, x0, 0, -10, y0), crs="EPSG:32633")
    line = LineString([(x0 + 105, y0 - 175), (x0 + 105, y0 - 235)])
    gdf = gpd.GeoDataFrame(geometry=[line], crs="EPSG:32633").to_crs("EPSG:4326")
    path = tmp_path / "culverts.gpkg"
    gdf.to_file(path, driver="GPKG")
    from_file, n_file = burn_lines(t, read_lines(path, t.crs), 3.0)
    direct, n_direct = burn_lines(t, [line], 3.0)
    assert n_file == n_direct == 7
    assert np.array_equal(from_file.elevation, direct.elevation)


def test_burn_bad_inputs(tmp_path):
    import geopandas as gpd

    z, t, culvert = embankment_valley()
    with pytest.raises(InputError, match="does not exist"):
        read_lines(tmp_path / "nothing.gpkg", t.crs)
    poly = tmp_path / "ponds.geojson"
    gpd.GeoDataFrame(geometry=[Polygon([(0, 0), (50, 0), (50, 50)])],
                     crs="EPSG:32633").to_file(poly, driver="GeoJSON")
    with pytest.raises(InputError, match="no lines"):
        read_lines(poly, t.crs)
    with pytest.raises(InputError, match="none of the burn lines"):
        burn_lines(t, [LineString([(-500, -500), (-400, -300)])], 2.0)
    with pytest.raises(InputError, match="burn depth"):
        burn_lines(t, [culvert], -1.0)
    text = tmp_path / "notes.gpkg"
    text.write_text("not a geopackage")
    with pytest.raises(InputError, match="cannot read"):
        read_lines(text, t.crs)
    with pytest.raises(InputError, match="not a file name"):  # algorithms take no paths
        burn_lines(t, poly, 2.0)


@pytest.mark.parametrize("module", ["basinkit.conditioning.breach", "basinkit.conditioning.burn"])
def test_docstring_examples(module):
    """The Examples sections run as written (hand-worked small grids; no source)."""
    import doctest
    import importlib

    res = doctest.testmod(importlib.import_module(module))
    assert res.attempted > 0 and res.failed == 0
