"""The batch paths of the morphometry table (label ranges of a delineation, slope and aspect
of the whole grid computed once, hypsometry without a sort) give the same numbers, bit for
bit, as the reference path of one full-grid mask per catchment measured in its own window.

Reference: the per-mask path of ``morphometry_table`` itself (a batch is a loop: common
practice, no source), on a fractal DEM with nodata holes and on the real 3-arc-second DEM
shipped with matplotlib (``jacksboro_fault_dem.npz``)."""

import numpy as np
import pandas as pd
import pytest
from affine import Affine

from basinkit import route, terrain_from_array
from basinkit.analysis.catchments import delineate
from basinkit.analysis.channels import extract_channels
from basinkit.analysis.morphometry import _hypsometry, morphometry_table

from conftest import fractal_dem


def _jacksboro():
    from matplotlib import cbook

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as d:
        z = np.asarray(d["elevation"], dtype=np.float32)
        dx, dy = float(d["dx"]), float(d["dy"])
        west = float(d["xmin"])
        north = max(float(d["ymin"]), float(d["ymax"]))  # swapped in the file
    return terrain_from_array(z, transform=Affine(dx, 0, west, 0, -dy, north),
                              crs="EPSG:4326")


def _fractal():
    return terrain_from_array(fractal_dem(150, 170, seed=4, holes=3), cellsize=10.0,
                              crs="EPSG:32633")


@pytest.mark.parametrize("path", ["nested", "windows"])
@pytest.mark.parametrize("make", [_fractal, _jacksboro], ids=["fractal", "jacksboro"])
def test_label_ranges_equal_one_mask_per_catchment(make, path, monkeypatch):
    """Both ways of measuring label ranges: all at once on the cells listed by label
    (many catchments), or each on its window (few: WINDOW_MAX_CATCHMENTS)."""
    import basinkit.analysis.morphometry as morph

    if path == "nested":
        monkeypatch.setattr(morph, "WINDOW_MAX_CATCHMENTS", 0)
    else:
        monkeypatch.setattr(morph, "WINDOW_MAX_CELLS", 10**12)

        def not_this_way(*a, **k):
            raise AssertionError("measured all at once, not window by window")

        monkeypatch.setattr(morph, "_range_rows", not_this_way)
    t = make()
    fm = route(t)
    area = np.asarray(fm.upstream_area()).ravel()
    thr = np.nanpercentile(area, 97)
    net = extract_channels(fm, thr)
    rng = np.random.default_rng(2)
    cells = np.sort(rng.choice(np.flatnonzero(np.isfinite(area) & (area >= thr)), 60,
                               replace=False))
    x, y = t.xy_of(cells // fm.ncols, cells % fm.ncols)
    d = delineate(fm, [(f"o{i}", a, b) for i, (a, b) in enumerate(zip(x, y))],
                  snap_radius_m=0, polygons=True)
    tab = d.table
    assert (tab["upstream_outlet_count"] > 0).sum() >= 10  # nested: ranges, full-grid slope
    ids = np.arange(1, len(tab) + 1)
    oc = tab["cell"].to_numpy(np.int64)
    masks = [d.catchment_mask(o) for o in tab["outlet_id"]]
    ref, rc = morphometry_table(fm, masks, oc, ids=ids, network=net, return_curves=True)
    # the cells of a label range come label by label, not row by row: sums over them may
    # differ in the last bits (summation order; on the geographic grid the hypsometric
    # curve's running sums of unequal cell areas too), everything else is the same
    # the delineation's own polygons (traced along the label edges, not by GDAL) have the
    # same corners up to rounding in the last bits of the coordinates (1e-9 of a geodesic
    # perimeter on the geographic grid)
    for polygons, rtol in ((None, 1e-12), (d.polygons, 1e-8)):
        fast, fc = morphometry_table(fm, d.labels, oc, ids=ids, network=net,
                                     return_curves=True, label_ranges=d.label_ranges(),
                                     polygons=polygons)
        assert (fast["error"] == "").all()
        pd.testing.assert_frame_equal(fast, ref, check_exact=False, rtol=rtol, atol=0)
        if path == "windows" and polygons is None:  # the same windows, the same sums
            pd.testing.assert_frame_equal(fast, ref, check_exact=True)
        for i in ids:
            pd.testing.assert_frame_equal(fc[i], rc[i], check_exact=False, rtol=1e-12, atol=0)
        if make is _fractal:  # equal whole-number cell areas: curves and order statistics
            for i in ids:     # (counted and selected over the label ranges) bit for bit
                pd.testing.assert_frame_equal(fc[i], rc[i], check_exact=True)
            exact = ["cell_count", "area_m2", "min_elevation_m", "max_elevation_m",
                     "hypsometric_integral", "median_slope_m_per_m", "slope_p10_m_per_m",
                     "slope_p90_m_per_m", "max_slope_m_per_m", "longest_flow_path_m",
                     "flat_fraction", "channel_cells", "stream_count", "max_strahler_order",
                     "bifurcation_ratio", "area_ratio"]  # (lengths: summed in another order)
            exact += [c for c in ref.columns if c.startswith(("aspect_", "stream_count_"))]
            pd.testing.assert_frame_equal(fast[exact], ref[exact], check_exact=True)


def _hyps_sorted(z, w, levels=101):
    """The sort-based hypsometry (running sums of the areas sorted by elevation)."""
    h = np.linspace(0.0, 1.0, levels)
    zmin, zmax = z.min(), z.max()
    order = np.argsort(z, kind="stable")
    zs = z[order]
    above = np.concatenate([np.cumsum(w[order][::-1])[::-1], [0.0]])
    elev = zmin + h * (zmax - zmin)
    idx = np.searchsorted(zs, elev, side="left")
    idx[-1] = np.searchsorted(zs, zmax, side="left")
    return h, above[idx], elev


@pytest.mark.parametrize("seed", range(5))
def test_hypsometry_by_counting_equals_the_sorted_sums(seed):
    """Equal whole-number cell areas: counting cells against the levels gives the running
    sums of the sorted areas exactly (closed form: the sums of equal integers are exact)."""
    rng = np.random.default_rng(seed)
    z = np.round(rng.gamma(2.0, 50.0, 5000), seed).astype(np.float64)  # ties included
    z[:7] = z.max()
    w = np.full(z.size, 100.0)
    for got, want in zip(_hypsometry(z, w), _hyps_sorted(z, w)):
        np.testing.assert_array_equal(got, want)
    w2 = np.full(z.size, 0.3)  # not whole numbers: the sorted sums are used
    for got, want in zip(_hypsometry(z, w2), _hyps_sorted(z, w2)):
        np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("seed", range(6))
def test_wavelet_matrix_counts_and_kth_equal_numpy_sort(seed):
    """Order statistics over slices (wavelet matrix on dense ranks) against numpy's sort of
    each slice (reference library: numpy.sort, numpy.count_nonzero); ties, NaNs and -0.0
    included."""
    from basinkit.analysis._order_stats import WaveletMatrix, dense_ranks

    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 4000))
    v = np.round(rng.normal(size=n), seed % 4).astype(np.float32 if seed % 2 else np.float64)
    if seed % 3 == 0:
        v[rng.random(n) < 0.1] = np.nan
    v[: min(5, n)] = -0.0
    ranks, distinct = dense_ranks(v)
    finite = ~np.isnan(v)
    np.testing.assert_array_equal(distinct[ranks][finite], v[finite])
    wm = WaveletMatrix(v)
    s = rng.integers(0, n, 80)
    e = np.minimum(n, s + rng.integers(0, n + 1, 80))
    thr = rng.normal(size=(80, 6))
    thr[:, 0] = 0.0
    thr[:, 1] = np.where(finite[s], v[s], 1.0)
    k = rng.integers(-1, n + 1, (80, 4))
    got_c = wm.counts_below(s, e, thr)
    got_k = wm.kth_values(s, e, k)
    for i in range(80):
        seg = v[s[i]:e[i]].astype(np.float64)
        for j in range(thr.shape[1]):
            assert got_c[i, j] == np.count_nonzero(seg < thr[i, j])
        srt = np.sort(seg)  # NaNs last, as the ranks
        for j in range(k.shape[1]):
            if 0 <= k[i, j] < seg.size:
                np.testing.assert_array_equal(got_k[i, j], srt[k[i, j]])
            else:
                assert np.isnan(got_k[i, j])


def test_label_sums_over_ranges_equal_direct_sums():
    """Per-label sums combined over label ranges against direct numpy sums over the cells
    of each range (reference library: numpy; the compensated sums agree to rounding)."""
    from basinkit.analysis import _label_sums as ls
    from basinkit.analysis._catchments import cells_by_label

    rng = np.random.default_rng(5)
    nr, nc, nlab = 40, 50, 12
    lab = rng.integers(0, nlab, nr * nc).astype(np.int32)
    valid = rng.random(nr * nc) > 0.05
    z = rng.normal(100, 20, nr * nc).astype(np.float32)
    z[rng.random(nr * nc) < 0.03] = np.nan
    slope = rng.gamma(2.0, 0.1, nr * nc)
    slope[rng.random(nr * nc) < 0.05] = np.nan
    aspect = rng.uniform(0, 360, nr * nc)
    aspect[rng.random(nr * nc) < 0.1] = np.nan
    dl = rng.uniform(0, 1000, nr * nc)
    row_area = rng.uniform(90, 110, nr)
    order, starts = cells_by_label(lab, valid, nlab)
    lo = np.array([1, 3, 5, 1, 11])
    hi = np.array([11, 3, 9, 1, 11])
    tot, cnt, ext, mom = ls.range_sums(lo, hi, *ls.label_sums(order, starts, nc, row_area, z,
                                                             slope, aspect, dl))
    for i in range(lo.size):
        cells = np.flatnonzero(valid & (lab >= lo[i]) & (lab <= hi[i]))
        a = row_area[cells // nc]
        zc = z[cells].astype(np.float64)
        okz = np.isfinite(zc)
        sc = slope[cells]
        oks = np.isfinite(sc)
        assert tot[i, ls.AREA] == pytest.approx(a.sum(), rel=1e-14)
        assert tot[i, ls.ZA] == pytest.approx(np.sum(zc[okz] * a[okz]), rel=1e-14)
        assert tot[i, ls.ZW] == pytest.approx(a[okz].sum(), rel=1e-14)
        assert tot[i, ls.GW] == pytest.approx(a[oks].sum(), rel=1e-14)
        assert tot[i, ls.SA] == pytest.approx(np.sum(sc[oks] * a[oks]), rel=1e-14)
        asp = aspect[cells][oks]
        flat = ~np.isfinite(asp)
        assert tot[i, ls.FLAT] == pytest.approx(a[oks][flat].sum(), rel=1e-14)
        sector = np.floor(((asp[~flat] + 22.5) % 360.0) / 45.0).astype(int)
        np.testing.assert_allclose(tot[i, 6:14],
                                   np.bincount(sector, weights=a[oks][~flat], minlength=8),
                                   rtol=1e-14)
        assert list(cnt[i]) == [okz.sum(), oks.sum()]
        assert list(ext[i]) == [zc[okz].min(), zc[okz].max(), dl[cells].max()]
        assert mom[i, 0] == pytest.approx(sc[oks].mean(), rel=1e-13)
        assert np.sqrt(mom[i, 1] / oks.sum()) == pytest.approx(np.std(sc[oks]), rel=1e-13)


def test_pairwise_sum_equals_numpy_sum():
    """The network kernel's total length is numpy's pairwise sum, bit for bit (reference
    library: numpy.sum), for lengths around the block sizes and long arrays."""
    from basinkit.analysis._nested_network import pairwise_sum

    rng = np.random.default_rng(7)
    for n in [*range(0, 140), 255, 256, 257, 1000, 4097, 100_003]:
        a = rng.normal(size=n) * 10 ** rng.uniform(-3, 5, n)
        assert pairwise_sum(a, 0, n) == np.sum(a)
        b = np.where(rng.random(n) < 0.5, 10.0, 14.142135623730951)
        assert pairwise_sum(np.concatenate([[1.0], b]), 1, n) == np.sum(b)


def test_outline_measures_of_many_equal_one_at_a_time():
    """The outlines measured as arrays of polygons (in threads, the simplification by 0
    skipped where every corner turns) give the numbers of the one-polygon path bit for
    bit (reference: that path, i.e. GEOS through shapely one geometry at a time), for the
    delineation's polygons and for shapes with straight corners, holes and several
    parts."""
    from shapely.geometry import MultiPolygon, Polygon

    from basinkit.analysis._shape_batch import outline_measures
    from basinkit.analysis.morphometry import _Context, _outline

    t = _fractal()
    fm = route(t)
    area = np.asarray(fm.upstream_area()).ravel()
    cells = np.sort(np.random.default_rng(3).choice(
        np.flatnonzero(np.isfinite(area) & (area >= np.nanpercentile(area, 95))), 30,
        replace=False))
    x, y = t.xy_of(cells // fm.ncols, cells % fm.ncols)
    d = delineate(fm, [(f"o{i}", a, b) for i, (a, b) in enumerate(zip(x, y))],
                  snap_radius_m=0, polygons=True)
    x0, y0 = float(x[0]), float(y[0])
    odd = [Polygon([(x0, y0), (x0 + 10, y0), (x0 + 20, y0), (x0 + 20, y0 + 20),
                    (x0, y0 + 20)]),
           Polygon([(x0, y0), (x0 + 40, y0), (x0 + 40, y0 + 40), (x0, y0 + 40)],
                   [[(x0 + 10, y0 + 10), (x0 + 20, y0 + 10), (x0 + 30, y0 + 10),
                     (x0 + 30, y0 + 30), (x0 + 10, y0 + 30)]]),
           MultiPolygon([Polygon([(x0, y0), (x0 + 10, y0), (x0 + 10, y0 + 10),
                                  (x0, y0 + 10)]),
                         Polygon([(x0 + 20, y0), (x0 + 30, y0), (x0 + 40, y0),
                                  (x0 + 40, y0 + 10), (x0 + 20, y0 + 10)])])]
    polys = list(d.polygons) + odd
    ox = np.r_[x, [x0] * len(odd)]
    oy = np.r_[y, [y0] * len(odd)]
    got = outline_measures(polys, ox, oy, 10.0, 1.0)
    ctx = _Context(fm, None)
    for i, p in enumerate(polys):
        assert (got[0][i], got[1][i], got[2][i]) == _outline(ctx, p, ox[i], oy[i])
