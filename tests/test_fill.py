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
from basinkit.conditioning import exit_cells

from conftest import fractal_dem


def reference_fill(z):
    """Filled surface by reconstruction by erosion; nodata cells act as outlets."""
    from skimage.morphology import reconstruction

    valid = np.isfinite(z)
    big = float(np.nanmax(z)) + 10.0
    work = np.where(valid, z, -1e6).astype(np.float64)  # nodata: a very low outlet
    seed = np.full(z.shape, big)
    border = np.zeros(z.shape, bool)
    border[0, :] = border[-1, :] = border[:, 0] = border[:, -1] = True
    seed[border] = work[border]
    seed[~valid] = work[~valid]
    filled = reconstruction(seed, work, method="erosion")
    return np.where(valid, filled, np.nan)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("holes", [0, 4])
def test_fill_equals_reconstruction(seed, holes):
    z = fractal_dem(96, 80, seed=seed, holes=holes)
    ours = fill_depressions(terrain_from_array(z)).elevation
    ref = reference_fill(z)
    np.testing.assert_array_equal(np.isnan(ours), np.isnan(ref))
    v = np.isfinite(ref)
    # exact: no epsilon, float32 in and out
    assert np.array_equal(ours[v], ref[v].astype(np.float32))


@pytest.mark.parametrize("seed", range(3))
def test_fill_integer_dem(seed):
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
