"""The routing kernels on large grids: SIMD D8 receivers and the stack swept in bands.

- D8 receivers against a plain NumPy implementation of the definition (O'Callaghan & Mark
  1984: steepest drop / distance, ties to the first of N, NE, ..., NW), on integer DEMs
  (ties and flats), nodata holes and per-row distances.
- The banded sweep against the one-band sweep it replaces (kept below as the reference,
  the sequential Kahn-order sweep): equal cell counts, areas equal to float64 rounding,
  the same set of cells; the stack is a topological order (every cell after its receiver:
  Braun & Willett 2013, the definition of the stack).
- Cell counts against pysheds 0.5 ``Grid.accumulation`` on the same directions, and
  upstream areas against its weighted accumulation (reference library).
- Serial and parallel versions: identical results (determinism; common practice, no
  source).
"""

import numpy as np
import pytest
from numba import njit

from basinkit import route, terrain_from_array
from basinkit.routing import _d8, _stack
from basinkit.conditioning.fill import exit_cells, fill_depressions

from conftest import PYSHEDS_DIRMAP, fractal_dem, pysheds_fdir, pysheds_grid


@njit(cache=True)
def reference_sweep(rec, ncols, row_area):
    """The previous sequential sweep (one band), kept as the reference."""
    n = rec.shape[0]
    pending = np.zeros(n, dtype=np.uint8)
    nvalid = 0
    for i in range(n):
        r = rec[i]
        if r >= 0:
            pending[r] += 1
        if r != -2:
            nvalid += 1
    count = np.zeros(n, dtype=np.int32)
    area = np.zeros(n, dtype=np.float64)
    stack = np.empty(nvalid, dtype=np.int32)
    pos = nvalid
    for i in range(n):
        if pending[i] != 0 or rec[i] == -2 or count[i] != 0:
            continue
        j = i
        while True:
            count[j] += 1
            area[j] += row_area[j // ncols]
            pos -= 1
            stack[pos] = j
            r = rec[j]
            if r < 0:
                break
            count[r] += count[j]
            area[r] += area[j]
            pending[r] -= 1
            if pending[r] != 0:
                break
            j = r
    return stack[pos:].copy(), count, area


def random_forest(nr, nc, seed, nodata=0.1, exits=0.02):
    """Random D8 receivers without cycles: each cell drains to a random lower neighbour
    of a random surface (or is an exit), with nodata cells and scattered exits; paths
    wander, so they cross band boundaries back and forth."""
    rng = np.random.default_rng(seed)
    z = rng.permutation(nr * nc).astype(np.float64).reshape(nr, nc)
    valid = rng.random((nr, nc)) >= nodata
    rec = np.full(nr * nc, -2, dtype=np.int32)
    for r in range(nr):
        for c in range(nc):
            if not valid[r, c]:
                continue
            i = r * nc + c
            lower = [(r + dr) * nc + c + dc for dr, dc in zip(_d8.DROW, _d8.DCOL)
                     if 0 <= r + dr < nr and 0 <= c + dc < nc and valid[r + dr, c + dc]
                     and z[r + dr, c + dc] < z[r, c]]
            rec[i] = -1 if not lower or rng.random() < exits else rng.choice(lower)
    return rec


def check_stack(rec, stack):
    """Each valid cell once, and after its receiver (Braun & Willett 2013)."""
    valid = np.flatnonzero(rec != -2)
    assert np.array_equal(np.sort(stack), valid)
    pos = np.full(rec.size, -1)
    pos[stack] = np.arange(stack.size)
    has = rec[stack] >= 0
    assert (pos[rec[stack[has]]] < pos[stack[has]]).all()


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("nbands", [2, 3, 8])
def test_banded_sweep_equals_one_band_sweep(seed, nbands):
    nr, nc = 61, 47
    rec = random_forest(nr, nc, seed)
    row_area = 90.0 + np.random.default_rng(seed).random(nr)  # geographic-like rows
    ref_stack, ref_count, ref_area = reference_sweep(rec, nc, row_area)
    out = [_stack.sweep_in_bands(rec, nc, row_area, nbands, parallel=p) for p in (False, True)]
    stack, count, area = out[0]
    for a, b in zip(out[0], out[1]):
        assert np.array_equal(a, b)  # serial and parallel versions: identical
    check_stack(rec, stack)
    assert np.array_equal(count, ref_count)
    np.testing.assert_allclose(area, ref_area, rtol=1e-13, atol=0)
    # one band is the reference sweep itself, bit for bit
    s1, c1, a1 = _stack.sweep_in_bands(rec, nc, row_area, 1)
    assert np.array_equal(s1, ref_stack) and np.array_equal(c1, ref_count)
    assert np.array_equal(a1, ref_area)
    # equal cell areas: exact (sums of integers)
    _, _, a_eq = _stack.sweep_in_bands(rec, nc, np.full(nr, 100.0), nbands)
    assert np.array_equal(a_eq, 100.0 * ref_count)
    # equal cell areas whose sums round (0.1 is no short binary fraction): summed as
    # before, bit for bit on one band
    tenth = np.full(nr, 0.1)
    _, _, ref_tenth = reference_sweep(rec, nc, tenth)
    assert np.array_equal(_stack.sweep_in_bands(rec, nc, tenth, 1)[2], ref_tenth)
    np.testing.assert_allclose(_stack.sweep_in_bands(rec, nc, tenth, nbands)[2], ref_tenth,
                               rtol=1e-13, atol=0)


def test_sums_exact_follows_the_float64_significand():
    """IEEE 754 binary64 has a 53-bit significand: k·a is exact for every k <= n when
    a = m·2^e (m odd) and n·m < 2^53."""
    assert _stack._sums_exact(100.0, 10**9)          # m = 25
    assert _stack._sums_exact(0.375, 10**12)         # 3·2^-3
    assert not _stack._sums_exact(0.1, 10)           # m has 53 bits
    assert not _stack._sums_exact(2.0 ** 52 + 1, 2)  # m = 2^52 + 1: 2m >= 2^53
    assert _stack._sums_exact(2.0 ** 52 + 1, 1)
    assert not _stack._sums_exact(float("nan"), 1)


def test_banded_sweep_on_a_routed_dem_matches_pysheds():
    """Filled fractal DEM with nodata and flats, swept in 6 bands: counts equal pysheds'
    accumulation on our directions, areas its accumulation weighted by cell area."""
    z = fractal_dem(130, 110, seed=4, holes=4, integer=True)
    fm = route(terrain_from_array(z))
    nr, nc = z.shape
    row_area = 1.0 + 0.25 * np.cos(np.linspace(0, 1, nr))
    stack, count, area = _stack.sweep_in_bands(fm.receiver, nc, row_area, 6, parallel=True)
    check_stack(fm.receiver, stack)
    d = fm.direction_d8()
    grid, _ = pysheds_grid(z)
    fdir = pysheds_fdir(grid, d)
    v = fm.terrain.valid
    inner = v & (d != -1)  # pysheds leaves an exit cell's own count out
    ref = np.asarray(grid.accumulation(fdir, dirmap=PYSHEDS_DIRMAP, nodata_out=np.nan))
    assert np.array_equal(count.reshape(nr, nc)[inner], ref[inner].astype(np.int64))
    from pysheds.view import Raster, ViewFinder

    w = Raster(np.where(v, row_area[:, None], 0.0),
               viewfinder=ViewFinder(affine=grid.viewfinder.affine, shape=z.shape,
                                     nodata=np.float64(np.nan)))
    ref_w = np.asarray(grid.accumulation(fdir, weights=w, dirmap=PYSHEDS_DIRMAP,
                                         nodata_out=np.nan))
    np.testing.assert_allclose(area.reshape(nr, nc)[inner], ref_w[inner], rtol=1e-12)


def test_banded_sweep_leaves_out_cycles_like_the_reference():
    """A receiver cycle across a band boundary (a damaged direction raster) and the cells
    draining into it: the same cells as the reference are left out."""
    nr, nc = 20, 10
    rec = random_forest(nr, nc, 5, nodata=0.0, exits=0.0)
    a, b = 9 * nc + 4, 10 * nc + 4  # rows 9 and 10: the boundary of 2 bands
    rec[a], rec[b] = b, a
    ref_stack, ref_count, _ = reference_sweep(rec, nc, np.ones(nr))
    stack, count, _ = _stack.sweep_in_bands(rec, nc, np.ones(nr), 2)
    assert ref_stack.size < nr * nc
    assert np.array_equal(np.sort(stack), np.sort(ref_stack))
    assert np.array_equal(count, ref_count)


def test_receivers_that_are_not_neighbours_fall_back_to_one_band():
    """Far receivers (not D8 neighbours) cannot be listed per band edge: the sweep falls
    back to one band and still gives the reference result."""
    nr, nc = 16, 4
    n = nr * nc
    rec = np.full(n, -1, dtype=np.int32)
    rec[: n // 2] = np.arange(n // 2, n)  # every cell of the top half to the bottom half
    ref = reference_sweep(rec, nc, np.ones(nr))
    out = _stack.sweep_in_bands(rec, nc, np.ones(nr), 4)
    for a, b in zip(out, ref):
        assert np.array_equal(a, b)


def test_sweep_bands_for_large_grids_only():
    assert _stack.sweep_bands_for(100, 100) == 1
    assert _stack.sweep_bands_for(1024, 1024) == _stack.SWEEP_BANDS > 1


def reference_d8(z, valid, seeds, base_level, dist):
    """D8 from the definition, in NumPy: slope = (z - z_neighbour) / distance, computed as
    the kernel's float32 drop over float64 distance; receiver = first neighbour of the
    greatest positive slope in the order N, NE, E, SE, S, SW, W, NW."""
    nr, nc = z.shape
    pad = np.pad(z, 1, constant_values=np.nan)
    slopes = np.empty((8, nr, nc))
    for k, (dr, dc) in enumerate(zip(_d8.DROW, _d8.DCOL)):
        zn = pad[1 + dr:1 + dr + nr, 1 + dc:1 + dc + nc]
        with np.errstate(invalid="ignore"):
            slopes[k] = (z - zn).astype(np.float32) / dist[:, k][:, None]
    slopes = np.where(slopes > 0, slopes, 0.0)  # NaN and not lower: no slope
    k = np.argmax(slopes, axis=0)  # argmax takes the first of equal maxima
    has = slopes.max(axis=0) > 0
    rows, cols = np.indices((nr, nc))
    target = (rows + _d8.DROW[k]) * nc + cols + _d8.DCOL[k]
    rec = np.where(has, target, np.where(seeds, -1, _d8.NO_FLOW))
    rec = np.where(base_level, -1, rec)
    rec = np.where(valid, rec, -2)
    return rec.ravel(), int((rec == _d8.NO_FLOW).sum())


@pytest.mark.parametrize("seed", [0, 3])
def test_d8_receivers_match_the_definition(seed):
    z = fractal_dem(90, 70, seed=seed, holes=3, integer=True)  # ties and flats
    t = terrain_from_array(z)
    f = fill_depressions(t)
    zc = f.elevation
    rng = np.random.default_rng(seed)
    base = rng.random(zc.shape) < 0.01
    seeds = exit_cells(f)
    # per-row distances (as on a geographic grid): N/S, E/W and diagonals differ by row
    nr = zc.shape[0]
    dx = 30.0 * np.cos(np.linspace(0.2, 0.9, nr))
    dy = np.full(nr, 30.0)
    diag = np.hypot(dx, dy)
    dist = np.stack([dy, np.r_[diag[0], diag[:-1]], dx, diag, dy, diag, dx,
                     np.r_[diag[0], diag[:-1]]], axis=1)
    ref, nref = reference_d8(zc, f.valid, seeds, base, dist)
    for kernel in (_d8.d8_receivers.serial, _d8.d8_receivers.parallel):
        rec, nflat = kernel(zc, f.valid, seeds, base, dist)
        assert np.array_equal(rec, ref) and nflat == nref > 0
