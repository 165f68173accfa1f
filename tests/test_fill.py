"""Depression filling against an external reference.

Reference: scikit-image ``morphology.reconstruction(seed, mask, method="erosion")``,
morphological reconstruction by erosion (Vincent 1993, IEEE Trans. Image Processing 2:176;
Soille 2004, Morphological Image Analysis, sec. 6.3.7 "fillhole"), which yields exactly the
depression-filled surface when seeded with the DEM on the border and +inf inside.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from basinkit import fill_depressions, terrain_from_array
from basinkit.conditioning.fill import exit_cells

from conftest import fractal_dem


def reference_fill(z, outlets=None):
    """Filled surface by reconstruction by erosion (scikit-image; Vincent 1993); nodata
    cells, and the cells of ``outlets`` (base level) if given, act as outlets."""
    from skimage.morphology import reconstruction

    valid = np.isfinite(z)
    big = float(np.nanmax(z)) + 10.0
    work = np.where(valid, z, -1e6).astype(np.float64)  # nodata: a very low outlet
    seed = np.full(z.shape, big)
    border = np.zeros(z.shape, bool)
    border[0, :] = border[-1, :] = border[:, 0] = border[:, -1] = True
    seed[border] = work[border]
    seed[~valid] = work[~valid]
    if outlets is not None:
        seed[outlets] = work[outlets]
    filled = reconstruction(seed, work, method="erosion")
    return np.where(valid, filled, np.nan)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("holes", [0, 4])
def test_fill_equals_reconstruction(seed, holes):
    """Priority-Flood (Barnes, Lehman & Mulla 2014) gives exactly the surface of
    reconstruction by erosion (scikit-image; Vincent 1993), with and without nodata holes,
    float32 in and out with no epsilon."""
    z = fractal_dem(96, 80, seed=seed, holes=holes)
    ours = fill_depressions(terrain_from_array(z)).elevation
    ref = reference_fill(z)
    np.testing.assert_array_equal(np.isnan(ours), np.isnan(ref))
    v = np.isfinite(ref)
    # exact: no epsilon, float32 in and out
    assert np.array_equal(ours[v], ref[v].astype(np.float32))


@pytest.mark.parametrize("seed", range(3))
def test_fill_integer_dem(seed):
    """An int32 DEM (many equal elevations) fills to the scikit-image reconstruction by
    erosion (Vincent 1993), read as float32."""
    z = fractal_dem(64, seed=seed, relief=60, integer=True)
    ours = fill_depressions(terrain_from_array(z.astype(np.int32))).elevation
    assert np.array_equal(ours, reference_fill(z).astype(np.float32))


def test_fill_simple_pit():
    """A single pit rises to its lowest rim (common practice, no source)."""
    z = np.array([[5, 5, 5, 5], [5, 1, 2, 5], [5, 5, 3, 5], [5, 5, 5, 5]], float)
    f = fill_depressions(terrain_from_array(z)).elevation
    assert f[1, 1] == 5 and f[1, 2] == 5 and f[2, 2] == 5


def test_epsilon_fill_drains_strictly():
    """Priority-Flood+ε (Barnes et al. 2014): every non-exit cell has a lower neighbour."""
    z = fractal_dem(64, seed=3)
    t = terrain_from_array(z)
    f = fill_depressions(t, epsilon=1e-3).elevation
    ex = exit_cells(t)
    nr, nc = z.shape
    for r in range(1, nr - 1):
        for c in range(1, nc - 1):
            if ex[r, c]:
                continue
            nb = f[r - 1:r + 2, c - 1:c + 2]
            assert (nb < f[r, c]).any()
    assert (f >= z).all()


@settings(max_examples=60, deadline=None)
@given(arrays(np.float32, st.tuples(st.integers(1, 12), st.integers(1, 12)),
              elements=st.floats(-50, 50, width=32)))
def test_fill_properties(z):
    """Hypothesis: filled >= original; no interior cell lower than all its neighbours
    (definition of a depression-free surface; common practice, no source)."""
    t = terrain_from_array(z)
    f = fill_depressions(t).elevation
    assert (f >= z).all()
    ex = exit_cells(t)
    nr, nc = z.shape
    for r in range(nr):
        for c in range(nc):
            if ex[r, c]:
                continue
            nb = f[max(r - 1, 0):r + 2, max(c - 1, 0):c + 2]
            assert (nb <= f[r, c]).sum() >= 2  # itself and at least one not higher
    np.testing.assert_array_equal(f, reference_fill(z).astype(np.float32))


# --- the tiled, parallel fill (Barnes 2016) must give the same exact surface ---------------

@pytest.mark.parametrize("tile", [2, 3, 7, 16, 45])
@pytest.mark.parametrize("seed,holes", [(0, 0), (1, 4), (2, 6)])
def test_tiled_fill_equals_reconstruction(tile, seed, holes):
    """Tiles of any size, with depressions and nodata holes across tile borders, against
    reconstruction by erosion (scikit-image; Vincent 1993)."""
    from basinkit.conditioning._tiled_fill import fill_exact_tiled

    z = fractal_dem(90, 77, seed=seed, holes=holes)
    t = terrain_from_array(z)
    ours = np.ascontiguousarray(t.elevation, dtype=np.float32).copy()
    fill_exact_tiled(ours, t.valid, exit_cells(t), tile=tile, workers=2)
    ref = reference_fill(z)
    v = np.isfinite(ref)
    assert np.array_equal(ours[v], ref[v].astype(np.float32))


@pytest.mark.parametrize("seed", range(3))
def test_tiled_fill_integer_dem_and_base_level(seed):
    """Integer DEM (many equal elevations) with a lake as base level: the tiled (Barnes
    2016) and whole-grid fills both equal reconstruction by erosion seeded on the edge and
    on the lake (scikit-image; Vincent 1993), and the lake cells stay as they were."""
    from basinkit.conditioning._fill import fill_exact
    from basinkit.conditioning._tiled_fill import fill_exact_tiled

    z = fractal_dem(70, 64, seed=seed, relief=40, integer=True)
    lake = np.zeros(z.shape, bool)
    lake[30:38, 20:31] = True
    t = terrain_from_array(z, base_level=lake)
    a = np.ascontiguousarray(t.elevation, dtype=np.float32).copy()
    b = a.copy()
    fill_exact(a, t.valid, exit_cells(t))
    fill_exact_tiled(b, t.valid, exit_cells(t), tile=9, workers=1)
    ref = reference_fill(z, outlets=lake).astype(np.float32)
    assert np.array_equal(a, ref) and np.array_equal(b, ref)
    assert np.array_equal(b[lake], z[lake])
    assert (b[t.valid] > z[t.valid]).any()
    assert not np.array_equal(ref, reference_fill(z).astype(np.float32))  # the lake matters


@settings(max_examples=80, deadline=None)
@given(arrays(np.float32, st.tuples(st.integers(1, 20), st.integers(1, 20)),
              elements=st.floats(-50, 50, width=32)),
       st.integers(2, 6))
def test_tiled_fill_properties(z, tile):
    """Hypothesis: the tiled fill (Barnes 2016) equals reconstruction by erosion
    (scikit-image; Vincent 1993) on any small grid and tiling."""
    from basinkit.conditioning._tiled_fill import fill_exact_tiled

    t = terrain_from_array(z)
    ours = np.ascontiguousarray(t.elevation, dtype=np.float32).copy()
    fill_exact_tiled(ours, t.valid, exit_cells(t), tile=tile, workers=2)
    np.testing.assert_array_equal(ours, reference_fill(z).astype(np.float32))


def test_tiled_fill_large_grid_uses_tiles():
    """fill_depressions on a grid larger than one tile (1100 x 600 cells: the tiled,
    parallel path of Barnes 2016) equals reconstruction by erosion (scikit-image;
    Vincent 1993)."""
    z = fractal_dem(1100, 600, seed=5, holes=3)
    t = terrain_from_array(z)
    ref = reference_fill(z)
    assert np.array_equal(fill_depressions(t).elevation[t.valid],
                          ref[t.valid].astype(np.float32))


def test_tiled_fill_grows_its_edge_table(monkeypatch):
    """A tile with more label edges than its first table holds is flooded again with a
    larger table; the surface is unchanged (checked against reconstruction by erosion,
    scikit-image; Vincent 1993)."""
    from basinkit.conditioning import _tiled_fill

    monkeypatch.setattr(_tiled_fill, "FIRST_EDGE_TABLE", 4)
    z = fractal_dem(60, 60, seed=7, holes=2)
    t = terrain_from_array(z)
    ours = np.ascontiguousarray(t.elevation, dtype=np.float32).copy()
    _tiled_fill.fill_exact_tiled(ours, t.valid, exit_cells(t), tile=25, workers=2)
    ref = reference_fill(z)
    v = np.isfinite(ref)
    assert np.array_equal(ours[v], ref[v].astype(np.float32))
