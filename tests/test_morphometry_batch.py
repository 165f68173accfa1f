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


@pytest.mark.parametrize("make", [_fractal, _jacksboro], ids=["fractal", "jacksboro"])
def test_label_ranges_equal_one_mask_per_catchment(make):
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
        for i in ids:
            pd.testing.assert_frame_equal(fc[i], rc[i], check_exact=False, rtol=1e-12, atol=0)


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
