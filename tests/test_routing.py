"""D8 routing, stack and accumulation against external references.

- pysheds 0.5 ``Grid.accumulation`` run on *our* D8 directions (reference library):
  cell-for-cell agreement; pysheds leaves an exit cell's own count out.
- Analytic tilted planes: D8 direction equals the plane's aspect and accumulation along a
  column equals the row count (closed form).
- Hypothesis properties: every valid cell drains to an exit; accumulation at the exits sums
  to the number of valid cells (conservation; common practice, no source).
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from basinkit import route, terrain_from_array

from conftest import PYSHEDS_DIRMAP, fractal_dem, pysheds_fdir, pysheds_grid


def _exits(fm):
    return np.flatnonzero(fm.receiver == -1)


@pytest.mark.parametrize("seed,holes", [(0, 0), (1, 0), (2, 3), (3, 5)])
def test_accumulation_matches_pysheds(seed, holes):
    z = fractal_dem(120, 100, seed=seed, holes=holes)
    fm = route(terrain_from_array(z))
    ours = fm.accumulation().astype(np.float64)
    d = fm.direction_d8()
    grid, _ = pysheds_grid(z)
    fdir = pysheds_fdir(grid, d)
    ref = np.asarray(grid.accumulation(fdir, dirmap=PYSHEDS_DIRMAP, nodata_out=np.nan),
                     dtype=np.float64)
    v = fm.terrain.valid
    # pysheds counts upstream cells only at exits (no own cell where direction is 'none')
    exit_mask = d == -1
    ref_adj = np.where(exit_mask, ref + 1, ref)
    np.testing.assert_array_equal(ours[v & ~exit_mask], ref_adj[v & ~exit_mask])
    np.testing.assert_array_equal(ours[v & exit_mask], ref_adj[v & exit_mask])


@pytest.mark.parametrize("aspect,code", [((1, 0), 180), ((-1, 0), 0), ((0, 1), 90),
                                         ((0, -1), 270)])
def test_tilted_plane_direction_equals_aspect(aspect, code):
    """Plane z = a·row + b·col (rows run south): water flows down the gradient."""
    a, b = aspect
    r, c = np.mgrid[0:20, 0:15]
    z = 100.0 - (a * r + b * c) * 0.5
    fm = route(terrain_from_array(z, cellsize=10))
    d = fm.direction_d8()
    inner = d[1:-1, 1:-1]
    assert (inner == code).all()


def test_tilted_plane_accumulation_is_row_count():
    """South-dipping plane: accumulation in row r (0-based) is r + 1 (closed form)."""
    r, c = np.mgrid[0:30, 0:12]
    z = 300.0 - r * 1.0
    fm = route(terrain_from_array(z, cellsize=5))
    acc = fm.accumulation()
    for col in range(1, 11):
        assert acc[:, col].tolist() == list(range(1, 31))
    area = fm.upstream_area()
    np.testing.assert_allclose(area[:, 3], 25.0 * np.arange(1, 31))


def test_diagonal_plane_uses_true_distance():
    """On a plane dipping to the SE with equal drops per row and column the steepest
    descent is the diagonal only if dz_diag/diag > dz/dx: drop 2 over 14.14 vs 1 over 10."""
    r, c = np.mgrid[0:10, 0:10]
    fm = route(terrain_from_array(100.0 - r - c, cellsize=10))
    assert (fm.direction_d8()[1:-1, 1:-1] == 135).all()
    # with rectangular cells 10 x 100 the E-W drop over 100 m loses to the N-S one
    from affine import Affine

    t = terrain_from_array(100.0 - r - c, transform=Affine(100, 0, 0, 0, -10, 100))
    assert (route(t).direction_d8()[1:-1, 1:-1] == 180).all()


def test_flats_drain_toward_outlet_without_changing_elevation():
    """A closed flat basin with one low notch: every flat cell gets a path to the notch
    (Barnes, Lehman & Mulla 2014b: no cell left without a receiver)."""
    z = np.full((12, 12), 10.0)
    z[0, :] = z[-1, :] = z[:, 0] = z[:, -1] = 20.0
    z[11, 6] = 5.0  # the notch on the south edge
    fm = route(terrain_from_array(z))
    assert np.array_equal(fm.terrain.elevation, z.astype(np.float32))
    acc = fm.accumulation()
    # rim cells drain inward (they have lower neighbours), so the whole grid reaches the notch
    assert acc[11, 6] == 144
    # every interior cell has a receiver
    inner = fm.receiver.reshape(12, 12)[1:-1, 1:-1]
    assert (inner >= 0).all()


@settings(max_examples=50, deadline=None)
@given(arrays(np.float32, st.tuples(st.integers(1, 14), st.integers(1, 14)),
              elements=st.one_of(st.floats(0, 30, width=32), st.just(np.float32(np.nan)))))
def test_properties_drain_and_conserve(z):
    if not np.isfinite(z).any():
        return
    fm = route(terrain_from_array(z))
    v = fm.terrain.valid.ravel()
    # every valid cell is in the stack, so it reaches an exit
    assert fm.stack.size == v.sum()
    assert set(fm.stack.tolist()) == set(np.flatnonzero(v).tolist())
    acc = fm.accumulation().ravel()
    assert acc[_exits(fm)].sum() == v.sum()
    area = fm.upstream_area().ravel()
    np.testing.assert_allclose(area[_exits(fm)].sum(), v.sum() * 1.0)


def test_sea_level_cells_are_exits():
    z = fractal_dem(50, seed=4, relief=100)
    fm = route(terrain_from_array(z, sea_level=30.0))
    sea = fm.terrain.base_level.ravel()
    assert sea.any()
    assert (fm.receiver[sea] == -1).all()
    # no land cell is raised above its level by flooding from the sea
    assert (fm.terrain.elevation[fm.terrain.base_level] <= 30.0).all()


@pytest.mark.parametrize("shape", [(1, 1), (2, 2), (1, 5), (3, 1)])
def test_tiny_grids(shape):
    z = np.arange(np.prod(shape), dtype=float).reshape(shape)
    fm = route(terrain_from_array(z))
    assert fm.accumulation().sum() >= z.size
    assert (fm.receiver.reshape(shape) >= -1).all()


def test_two_flats_sharing_one_outlet_cell_both_drain():
    """Two flats that touch the same outlet cell from two sides: every flat cell must get a
    receiver (Barnes, Lehman & Mulla 2014b label flats by flooding equal elevations, so the
    shared outlet joins them). Grid from a case found in review."""
    z = np.full((7, 7), 10.0)
    for r, c in [(0, 1), (1, 1), (1, 2), (1, 4), (2, 3)]:
        z[r, c] = 5.0
    for k, v in enumerate([4.0, 3.0, 2.0, 1.0]):
        z[3 + k, 3] = v
    fm = route(terrain_from_array(z), conditioning="none")
    assert "cells_without_outlet" not in fm.parameters
    rec = fm.receiver.reshape(7, 7)
    # every interior cell drains somewhere and reaches an exit
    assert (rec[1:-1, 1:-1] >= 0).all()
    assert fm.stack.size == 49


def test_parallel_and_serial_kernels_agree():
    """Large grids run the parallel versions of the kernels, small ones the serial: both
    must give identical receivers, flat masks and exit cells (determinism; common
    practice, no source)."""
    from basinkit.routing import _d8
    from basinkit.conditioning import _fill
    from basinkit.conditioning.fill import fill_depressions

    z = fractal_dem(150, 130, seed=7, holes=3, integer=True)  # integer: many flats
    t = terrain_from_array(z)
    f = fill_depressions(t).elevation
    bl = np.zeros(t.shape, bool)
    s1 = _fill.seed_mask.serial(t.valid, bl)
    assert np.array_equal(s1, _fill.seed_mask.parallel(t.valid, bl))
    dist = t.geometry.neighbour_distances()
    r1, n1 = _d8.d8_receivers.serial(f, t.valid, s1, bl, dist)
    r2, n2 = _d8.d8_receivers.parallel(f, t.valid, s1, bl, dist)
    assert n1 == n2 > 0 and np.array_equal(r1, r2)
    m1, u1 = _d8.resolve_flats.serial(f, t.valid, r1, dist)
    m2, u2 = _d8.resolve_flats.parallel(f, t.valid, r2, dist)
    assert u1 == u2 == 0
    assert np.array_equal(m1, m2) and np.array_equal(r1, r2)


def test_model_hands_out_read_only_arrays():
    """The FlowModel owns its derived arrays: writing into what it hands out is refused, and
    later results keep the closed-form answer of a tilted plane (accumulation down a column
    of a plane sloping south is the row count; closed form)."""
    rows, cols = 12, 5
    z = np.add.outer(np.arange(rows, 0, -1, dtype=float), np.zeros(cols))
    fm = route(terrain_from_array(z, cellsize=10.0), conditioning="none")
    for a in (fm.upstream_area(), fm.accumulation(), fm.accumulation(unit="m2"),
              fm.receiver_distance(), fm.d8_upstream_area_flat()):
        with pytest.raises(ValueError):
            a[...] = 0
    expect = np.add.outer(np.arange(1, rows + 1), np.zeros(cols, dtype=int))
    np.testing.assert_array_equal(fm.accumulation(), expect)
    np.testing.assert_allclose(fm.upstream_area(), expect * 100.0)
    # a weighted accumulation is the caller's own array
    w = fm.accumulation(weights=np.ones((rows, cols)))
    w[...] = 0
    np.testing.assert_array_equal(fm.accumulation(), expect)
