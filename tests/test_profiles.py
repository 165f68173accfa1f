"""Profiles, χ, k_sn, knickpoints, slope–area and Hack's law against external references.

- Steady-state stream-power landscape built here on a real routed D8 tree:
  S = k_s·A^-θ integrates to z = z_b + k_s·A0^-θ·χ (Perron & Royden 2013, ESPL 38:570-576),
  so z against χ is a straight line of slope k_sn (Whipple & Tucker 1999).
- Tilted planes: longest-flow-path length, 10–85 slope and windowed slope have closed forms.
- The 3″ Jacksboro DEM shipped with matplotlib (open data): geodesic lengths of paths
  against pyproj.Geod (Karney 2013, J. Geodesy 87:43-55).
- Regressions against scipy/numpy reference fits and values from the literature.
"""

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hst

from basinkit import write_flow_folder
from basinkit import route, terrain_from_array
from basinkit.analysis import profiles as P
from basinkit.analysis.steepness import find_knickpoints, steepness
from basinkit.analysis.profile_fits import fit_concavity, hack_law_fit, slope_area_fit
from basinkit.plot.profiles import plot_chi, plot_long_profile, plot_slope_area
from basinkit.analysis.channels import extract_channels
from basinkit.errors import InputError, OutletError
from basinkit.routing.flow_model import FlowModel

from conftest import fractal_dem

KS = 50.0        # steepness index of the synthetic landscape, m^(2θ)
THETA = 0.45


def steady_state(fm, ks=KS, theta=THETA, ks_above=None, above_mask=None):
    """A FlowModel on the same D8 tree whose elevation obeys S = ks·A^-θ exactly on every
    reach (the reach from a cell to its receiver carries the cell's upstream area), built by
    integrating from base level upstream over the stack (Perron & Royden 2013, eq. for
    steady state). Optionally ``ks_above`` inside ``above_mask`` (a slope-break knickpoint).
    """
    rec, stack = fm.receiver, fm.stack
    area = fm.d8_upstream_area_flat()
    step = fm.receiver_distance()
    k = np.full(rec.size, ks, dtype=float)
    if above_mask is not None:
        k[above_mask.ravel()] = ks_above
    z = np.zeros(rec.size)
    for i in stack:  # downstream before upstream
        r = rec[i]
        if r >= 0:
            z[i] = z[r] + k[i] * area[i] ** -theta * step[i]
    z = np.where(fm.terrain.valid.ravel(), z, np.nan).reshape(fm.shape)
    return FlowModel(fm.terrain.with_elevation(z), rec, stack)


@pytest.fixture(scope="module")
def base_model():
    return route(terrain_from_array(fractal_dem(120, seed=3), cellsize=30))


@pytest.fixture(scope="module")
def landscape(base_model):
    syn = steady_state(base_model)
    outlet = int(np.nanargmax(syn.d8_upstream_area_flat()))
    net = extract_channels(syn, 1e5, outlet_cells=[outlet], geometry=False)
    return syn, net, outlet


# ---------------------------------------------------------------------- χ and k_sn
@pytest.mark.parametrize("a0", [1.0, 1e6])
def test_ksn_recovered_on_steady_state_landscape(landscape, a0):
    """k_sn = k_s·A0^-θ per segment within 2 % (Perron & Royden 2013; Whipple & Tucker
    1999), for the default A0 = 1 m² and for A0 = 1 km²."""
    syn, net, outlet = landscape
    nodes = P.channel_profiles(syn, net, outlet, min_order=1, concavity=THETA,
                               reference_area_m2=a0)
    st = steepness(nodes)
    assert len(st) == int((net.segments["segment_id"].isin(nodes["segment_id"])).sum())
    expected = KS * a0 ** -THETA
    ok = st["node_count"] >= 2
    assert ok.sum() >= 10
    np.testing.assert_allclose(st.loc[ok, "ksn_m_per_m"], expected, rtol=0.02)
    # per profile too, and the local S·(A/A0)^θ near the same value on straight reaches
    sp = steepness(nodes, by="profile_id")
    np.testing.assert_allclose(sp.loc[sp["node_count"] >= 2, "ksn_m_per_m"], expected,
                               rtol=0.02)


def test_chi_line_through_base_level(landscape):
    """z = z_b + k_s·A0^-θ·χ at every cell of the catchment (closed form, Perron & Royden
    2013), with χ from the grid transform; channel_profiles gives the same χ."""
    syn, net, outlet = landscape
    chi = P.chi_transform(syn, outlet, concavity=THETA)
    m = np.isfinite(chi)
    assert m.sum() == syn.upstream_mask(outlet).sum()
    z = syn.terrain.elevation
    zb = z.ravel()[outlet]
    np.testing.assert_allclose(z[m], zb + KS * chi[m], rtol=1e-9, atol=1e-9)
    nodes = P.channel_profiles(syn, net, outlet, min_order=1)
    np.testing.assert_allclose(nodes["chi_m"], chi.ravel()[nodes["cell"]], rtol=1e-12)


def test_chi_single_column_closed_form():
    """A 1-cell-wide channel of n unit cells: A = j m² on the reach below cell j, so
    χ at the top = Σ_{j=1}^{n-1} j^-θ (closed form: the discrete integral of Perron &
    Royden 2013 with A0 = 1 m²)."""
    n = 12
    z = np.add.outer(np.arange(n, 0, -1.0), np.zeros(1))
    fm = route(terrain_from_array(z, cellsize=1))
    chi = P.chi_transform(fm, concavity=0.5)[:, 0]
    ref = np.cumsum((np.arange(1, n) ** -0.5)[::-1])[::-1]
    np.testing.assert_allclose(chi[:-1], ref, rtol=1e-12)
    assert chi[-1] == 0.0


@pytest.mark.parametrize("theta", [0.35, 0.6])
def test_concavity_recovered(base_model, theta):
    """Best-fit θ from tributary collinearity within 0.02 of the θ the landscape was built
    with (Perron & Royden 2013), also with 0.3 m of noise on the DEM."""
    syn = steady_state(base_model, theta=theta)
    outlet = int(np.nanargmax(syn.d8_upstream_area_flat()))
    net = extract_channels(syn, 1e5, outlet_cells=[outlet], geometry=False)
    fit = fit_concavity(syn, net, outlet, n_bootstrap=50)
    assert fit.tributary_count >= 5
    assert abs(fit.concavity - theta) <= 0.02
    assert not fit.at_grid_edge
    rng = np.random.default_rng(7)
    noisy = FlowModel(syn.terrain, syn.receiver, syn.stack,
                      input_elevation=syn.terrain.elevation + rng.normal(0, 0.3, syn.shape))
    fit2 = fit_concavity(noisy, net, outlet, elevation="raw", n_bootstrap=50)
    assert abs(fit2.concavity - theta) <= 0.02
    assert fit2.spread > 0 and fit2.low <= theta + 0.02 and fit2.high >= theta - 0.02


# ---------------------------------------------------------------------- knickpoints
def _knick_setup(base_model, fraction=0.4):
    plain = steady_state(base_model)
    outlet = int(np.nanargmax(plain.d8_upstream_area_flat()))
    ms = P.main_stem(plain, outlet)
    j = int(np.searchsorted(ms.distance_m, fraction * ms.length_m))
    cell = int(ms.cells[j])
    # the reach from `cell` down to its receiver and everything above is twice as steep:
    # the χ–z line breaks at the receiver, node j - 1 of the main stem
    knick = steady_state(base_model, ks_above=2 * KS,
                         above_mask=base_model.upstream_mask(cell))
    return plain, knick, outlet, ms, j


def test_knickpoint_found_within_two_cells(base_model):
    """A slope-break knickpoint (k_sn doubles upstream) inserted at a known distance is
    found within two cells, once, with the right k_sn on both sides (closed form)."""
    _, knick, outlet, ms, j = _knick_setup(base_model)
    true_d = ms.distance_m[j - 1]
    cell_size = 30 * np.sqrt(2)
    prof = P.main_stem(knick, outlet)
    kp = find_knickpoints(prof)
    assert len(kp) == 1
    assert abs(kp["distance_from_outlet_m"].iloc[0] - true_d) <= 2 * cell_size
    assert kp["ksn_below_m_per_m"].iloc[0] == pytest.approx(KS, rel=0.02)
    assert kp["ksn_above_m_per_m"].iloc[0] == pytest.approx(2 * KS, rel=0.02)
    assert kp["kind"].iloc[0] == "steeper upstream"
    # in the channel network: found on the main-stem profile, within two cells
    net = extract_channels(knick, 1e5, outlet_cells=[outlet], geometry=False)
    nodes = P.channel_profiles(knick, net, outlet, min_order=1)
    kn = find_knickpoints(nodes)
    main_id = nodes.loc[nodes["is_main_stem"], "profile_id"].iloc[0]
    on_main = kn[kn["profile_id"] == main_id]
    assert len(on_main) == 1
    assert abs(on_main["distance_from_outlet_m"].iloc[0] - true_d) <= 2 * cell_size


def test_vertical_step_found_within_two_cells(base_model):
    """A 30 m vertical step (everything above one main-stem cell raised) is found within two
    cells of its top, as a step of 30 m without a change of k_sn (closed form)."""
    plain, _, outlet, ms, j = _knick_setup(base_model)
    up = base_model.upstream_mask(int(ms.cells[j]))
    z = plain.terrain.elevation + np.where(up, 30.0, 0.0)
    stepped = FlowModel(plain.terrain.with_elevation(z), plain.receiver, plain.stack)
    kp = find_knickpoints(P.main_stem(stepped, outlet))
    assert len(kp) == 1
    assert abs(kp["distance_from_outlet_m"].iloc[0] - ms.distance_m[j]) <= 2 * 30 * np.sqrt(2)
    assert kp["kind"].iloc[0] == "vertical step up"
    assert kp["step_m"].iloc[0] == pytest.approx(30.0, rel=0.02)
    assert kp["ksn_above_m_per_m"].iloc[0] == pytest.approx(KS, rel=0.02)


def test_no_knickpoint_without_one(base_model):
    """A steady-state profile of uniform k_sn, exact and with 0.5 m of noise, yields no
    knickpoint (its χ–z plot is one straight line: Perron & Royden 2013)."""
    plain, _, outlet, _, _ = _knick_setup(base_model)
    assert len(find_knickpoints(P.main_stem(plain, outlet))) == 0
    net = extract_channels(plain, 1e5, outlet_cells=[outlet], geometry=False)
    assert len(find_knickpoints(P.channel_profiles(plain, net, outlet, min_order=1))) == 0
    rng = np.random.default_rng(3)
    noisy = FlowModel(plain.terrain, plain.receiver, plain.stack,
                      input_elevation=plain.terrain.elevation + rng.normal(0, 0.5, plain.shape))
    kp = find_knickpoints(P.main_stem(noisy, outlet), elevation="elevation_m",
                            vertical_precision_m=1.0)
    assert len(kp) == 0


# ---------------------------------------------------------------------- paths on planes
def _plane(nr, nc, dx, dy, slope_y=0.0, slope_x=0.0):
    from affine import Affine

    r, c = np.mgrid[0:nr, 0:nc]
    z = 500.0 - slope_y * r * dy - slope_x * c * dx
    return terrain_from_array(z, transform=Affine(dx, 0, 0, 0, -dy, nr * dy))


def test_longest_path_on_tilted_plane():
    """South-dipping plane with 10 m x 7 m cells: the longest path to a bottom-row cell runs
    straight up its column, (nr - 1)·dy long; a plane dipping along the diagonal of square
    cells: (n - 1)·√2·d to the corner (closed form)."""
    fm = route(_plane(40, 15, 10.0, 7.0, slope_y=0.05))
    outlet = 39 * 15 + 7
    lp = P.longest_flow_path(fm, outlet)
    assert lp.length_m == pytest.approx(39 * 7.0, rel=1e-12)
    assert (lp.col == 7).all() and lp.row[0] == 39 and lp.row[-1] == 0
    n, d = 30, 5.0
    r, c = np.mgrid[0:n, 0:n]
    fm2 = route(terrain_from_array(100.0 - 0.1 * d * (r + c), cellsize=d))
    lp2 = P.longest_flow_path(fm2, n * n - 1)
    assert lp2.length_m == pytest.approx((n - 1) * np.sqrt(2) * d, rel=1e-12)
    assert lp2.length_m >= P.main_stem(fm2, n * n - 1).length_m


def test_10_85_and_window_slopes_on_a_plane():
    """On a plane of slope s the 10–85 slope (common practice in US design hydrology; value
    from memory: (z85 - z10) / 0.75 L), the average slope and the local slope over a
    distance window or a vertical interval all equal s (closed form)."""
    s = 0.037
    fm = route(_plane(60, 9, 12.0, 12.0, slope_y=s))
    outlet = 59 * 9 + 4
    for kw in ({"slope_window_m": 20.0}, {"slope_window_m": 100.0}, {"slope_drop_m": 2.0}):
        lp = P.longest_flow_path(fm, outlet, **kw)
        assert lp.slope_10_85() == pytest.approx(s, rel=1e-5)
        assert lp.average_slope() == pytest.approx(s, rel=1e-5)
        np.testing.assert_allclose(lp.slope_m_per_m, s, rtol=1e-4)
    summ = lp.summary()
    assert summ["slope_10_85_m_per_m"] == pytest.approx(s, rel=1e-5)
    assert summ["length_m"] == pytest.approx(59 * 12.0)
    # every column of the plane is a channel: windowed slopes on the network equal s too
    net = extract_channels(fm, 5 * 144.0, geometry=False)
    for kw in ({"slope_window_m": 50.0}, {"slope_drop_m": 3.0}):
        nodes = P.channel_profiles(fm, net, min_order=1, **kw)
        assert len(nodes) > 300
        np.testing.assert_allclose(nodes["slope_m_per_m"], s, rtol=1e-4)


# ---------------------------------------------------------------------- real DEM
@pytest.fixture(scope="module")
def jacksboro():
    from affine import Affine
    from matplotlib import cbook

    d = cbook.get_sample_data("jacksboro_fault_dem.npz")
    z = np.asarray(d["elevation"], dtype=float)
    north = max(float(d["ymin"]), float(d["ymax"]))  # ymin/ymax are swapped in the file
    tr = Affine(float(d["dx"]), 0, float(d["xmin"]), 0, -float(d["dy"]), north)
    fm = route(terrain_from_array(z, transform=tr, crs="EPSG:4326"))
    outlet = int(np.nanargmax(fm.d8_upstream_area_flat()))
    return fm, outlet


def test_jacksboro_paths_geodesic(jacksboro):
    """On the real 3″ DEM (matplotlib sample data) the longest flow path is at least as long
    as the main stem, and both lengths agree with pyproj Geod (Karney 2013) summed along
    their vertices."""
    from pyproj import Geod

    fm, outlet = jacksboro
    lp = P.longest_flow_path(fm, outlet)
    ms = P.main_stem(fm, outlet)
    assert lp.length_m >= ms.length_m > 10_000
    g = Geod(ellps="WGS84")
    assert g.line_length(lp.x, lp.y) == pytest.approx(lp.length_m, rel=1e-9)
    assert g.line_length(ms.x, ms.y) == pytest.approx(ms.length_m, rel=1e-9)
    # the longest path is as long as the longest upstream path recorded at the outlet
    assert lp.length_m == pytest.approx(fm.upstream_length().ravel()[outlet], rel=1e-12)
    # it drains to the outlet: every vertex's receiver is the previous vertex
    np.testing.assert_array_equal(fm.receiver[lp.cells[1:]], lp.cells[:-1])
    # raw elevations come from the DEM as read, conditioned ones from the filled surface
    np.testing.assert_array_equal(lp.elevation_m, fm.input_elevation.ravel()[lp.cells])
    assert (lp.elevation_conditioned_m >= lp.elevation_m - 1e-3).all()
    assert (np.diff(lp.elevation_conditioned_m) >= 0).all()  # filled: never rises downstream


@settings(max_examples=8, deadline=None)
@given(seed=hst.integers(0, 10_000), theta=hst.floats(0.1, 0.9))
def test_chi_and_distance_properties(seed, theta):
    """On any routed fractal DEM, χ and the distance from the outlet grow upstream by
    exactly one reach each: χ(i) = χ(r) + step·(A0/A_i)^θ, d(i) = d(r) + step (definition,
    Perron & Royden 2013)."""
    fm = route(terrain_from_array(fractal_dem(40, seed=seed), cellsize=25))
    outlet = int(np.nanargmax(fm.d8_upstream_area_flat()))
    net = extract_channels(fm, 20 * 625.0, geometry=False)
    nodes = P.channel_profiles(fm, net, outlet, min_order=1, concavity=theta)
    by_cell = nodes.set_index("cell")
    inner = nodes[nodes["downstream_cell"] >= 0]
    down = by_cell.loc[inner["downstream_cell"]]
    step = fm.receiver_distance()[inner["cell"]]
    np.testing.assert_allclose(inner["distance_from_outlet_m"].to_numpy(),
                               down["distance_from_outlet_m"].to_numpy() + step, rtol=1e-12)
    np.testing.assert_allclose(inner["chi_m"].to_numpy(), down["chi_m"].to_numpy()
                               + step * inner["upstream_area_m2"].to_numpy() ** -theta,
                               rtol=1e-10)


def test_jacksboro_hack_exponent(jacksboro):
    """Hack's law on a real network: h near Hack's (1957) 0.6; 0.45-0.75 covers the values
    reported since (value from memory). The fit equals numpy.polyfit on log L, log A."""
    fm, outlet = jacksboro
    net = extract_channels(fm, 1e6, geometry=False)
    h = hack_law_fit(fm, net)
    assert 0.45 < h.exponent < 0.75
    assert h.exponent_ci[0] < h.exponent < h.exponent_ci[1]
    seg = net.segments
    cells = seg["bottom_row"].to_numpy() * fm.ncols + seg["bottom_col"].to_numpy()
    L = fm.upstream_length().ravel()[cells]
    A = fm.d8_upstream_area_flat()[cells]
    ok = L > 0
    b, a = np.polyfit(np.log10(A[ok]), np.log10(L[ok]), 1)
    assert h.exponent == pytest.approx(b, rel=1e-9)
    assert h.coefficient == pytest.approx(10 ** a, rel=1e-9)


# ---------------------------------------------------------------------- slope–area
def test_slope_area_recovers_stream_power(landscape):
    """Exact reach slopes of the steady-state landscape give θ and k_s back (Flint 1974);
    with multiplicative noise the confidence intervals match scipy.stats.linregress with
    Student t and contain the true values."""
    from scipy import stats

    syn, net, outlet = landscape
    rec = syn.receiver
    cells = np.flatnonzero(net.mask.ravel() & (rec >= 0))
    z = syn.terrain.elevation.ravel()
    S = (z[cells] - z[rec[cells]]) / syn.receiver_distance()[cells]
    A = syn.d8_upstream_area_flat()[cells]
    f = slope_area_fit(A, S)
    assert f.concavity == pytest.approx(THETA, abs=1e-9)
    assert f.steepness_index == pytest.approx(KS, rel=1e-9)
    rng = np.random.default_rng(5)
    Sn = S * np.exp(rng.normal(0, 0.3, S.size))
    f2 = slope_area_fit(A, Sn, confidence=0.95)
    ref = stats.linregress(np.log10(A), np.log10(Sn))
    t = stats.t.ppf(0.975, A.size - 2)
    assert f2.concavity_ci[1] - f2.concavity == pytest.approx(t * ref.stderr, rel=1e-9)
    assert f2.concavity_ci[0] < THETA < f2.concavity_ci[1]
    assert f2.steepness_index_ci[0] < KS < f2.steepness_index_ci[1]
    fb = slope_area_fit(A, S, bins=8)
    assert fb.binned and fb.concavity == pytest.approx(THETA, abs=0.02)


def test_line_fit_matches_scipy_linregress_bit_for_bit():
    """The fits' least-squares line (written out to spare every worker the import of
    scipy.stats) gives scipy.stats.linregress's slope, intercept, r and standard errors
    to the last bit, and scipy.special.stdtrit gives scipy.stats.t.ppf's quantile
    (reference library: scipy 1.17), over random samples of 3 to 2 000 points, perfect
    and anti-correlated lines included."""
    from scipy import stats
    from scipy.special import stdtrit

    from basinkit.analysis.profile_fits import _line_fit

    rng = np.random.default_rng(11)
    for k in range(300):
        n = int(rng.integers(3, 2000))
        x = rng.normal(4.0, 1.5, n)
        y = {0: 2.0 - 0.45 * x, 1: 0.3 + 1.2 * x}.get(k % 7, rng.normal(size=n) - 0.5 * x)
        ref, got = stats.linregress(x, y), _line_fit(x, y)
        for name in ("slope", "intercept", "rvalue", "stderr", "intercept_stderr"):
            assert getattr(got, name) == getattr(ref, name), (k, name)
        for c in (0.8, 0.9, 0.95, 0.99):
            assert stdtrit(n - 2, 0.5 + c / 2.0) == stats.t.ppf(0.5 + c / 2.0, n - 2)


def test_hack_law_on_one_area_is_a_clear_error():
    """A log–log fit over points that all have one upstream area has no slope: a one-line
    InputError (common practice, no source)."""
    from basinkit.analysis.profile_fits import _loglog_fit
    from basinkit.errors import InputError

    with pytest.raises(InputError, match="same upstream area"):
        _loglog_fit(np.full(5, 1e4), np.arange(1.0, 6.0), 0.95)


# ---------------------------------------------------------------------- tables, errors
def test_channel_profile_table(landscape):
    """Node table: units in the column names, every channel cell of order ≥ k once, the
    main stem first, distances increasing upstream along each profile, Strahler orders from
    the network (common practice, no source)."""
    syn, net, outlet = landscape
    nodes = P.channel_profiles(syn, net, outlet, min_order=2)
    for c in ("distance_from_outlet_m", "elevation_m", "elevation_conditioned_m",
              "upstream_area_m2", "slope_m_per_m", "chi_m", "strahler_order", "x", "y"):
        assert c in nodes.columns
    inside = syn.upstream_mask(outlet).ravel()
    want = np.flatnonzero((net.strahler.ravel() >= 2) & inside)
    assert sorted(nodes["cell"]) == sorted(want)
    assert (nodes["strahler_order"] >= 2).all()
    assert nodes["profile_id"].iloc[0] == 1 and nodes["is_main_stem"].iloc[0]
    for _, g in nodes.groupby("profile_id"):
        assert (np.diff(g["distance_from_outlet_m"].to_numpy()) > 0).all()
        assert (np.diff(g["upstream_area_m2"].to_numpy()) < 0).all()
    assert nodes["distance_from_outlet_m"].iloc[0] == 0.0
    # the main stem follows the greatest area: same cells as main_stem() up to the channel head
    ms = P.main_stem(syn, outlet)
    main_cells = nodes.loc[nodes["is_main_stem"], "cell"].to_numpy()
    np.testing.assert_array_equal(main_cells, ms.cells[:main_cells.size])
    # nested outlets: each node belongs to the nearest outlet downstream, as labelled by the
    # flow model's own one-pass labelling (a different code path)
    inner = int(main_cells[main_cells.size // 2])
    both = P.channel_profiles(syn, net, [outlet, inner], min_order=2, outlet_ids=[1, 2])
    lab = syn.label_outlets([outlet, inner], [1, 2]).ravel()
    np.testing.assert_array_equal(both["outlet_id"].to_numpy(), lab[both["cell"]])
    assert len(both) == len(nodes)
    assert both.loc[both["cell"] == inner, "distance_from_outlet_m"].item() == 0.0


def test_bad_input_raises(landscape):
    """An outlet that is no cell, a negative concavity, a zero reference area, order 0,
    too few points for a fit, a negative window: each refused with a BasinkitError (our
    output contract, DESIGN.md: bad input is one clear message)."""
    syn, net, outlet = landscape
    with pytest.raises(OutletError):
        P.longest_flow_path(syn, -5)
    with pytest.raises(InputError):
        P.chi_transform(syn, outlet, concavity=-1)
    with pytest.raises(InputError):
        P.chi_transform(syn, outlet, reference_area_m2=0)
    with pytest.raises(InputError):
        P.channel_profiles(syn, net, outlet, min_order=0)
    with pytest.raises(InputError):
        slope_area_fit([1, 2], [0.1, 0.2])
    with pytest.raises(InputError):
        P.main_stem(syn, outlet, slope_window_m=-3)


def test_plots_have_labels(landscape):
    """The long profile, χ–elevation and slope–area figures label both axes with units and
    carry a legend (common practice, no source: a figure without units cannot be read)."""
    syn, net, outlet = landscape
    ms = P.main_stem(syn, outlet)
    nodes = P.channel_profiles(syn, net, outlet, min_order=1)
    for fig in (plot_long_profile(ms), plot_chi(nodes),
                plot_slope_area(nodes["upstream_area_m2"], nodes["slope_m_per_m"],
                                  fit=slope_area_fit(nodes["upstream_area_m2"],
                                                       nodes["slope_m_per_m"]))):
        ax = fig.axes[0]
        assert "(m" in ax.get_xlabel() and "(m" in ax.get_ylabel()
        assert ax.get_legend() is not None and ax.get_legend().get_texts()


# ---------------------------------------------------------------------- command line
def test_profile_command(tmp_path, base_model):
    """End to end: basinkit profile writes the CSV, the GeoPackage layers, the figures and a
    summary with provenance and cautions; a bad outlet is recorded, the others carry on and
    the exit status is 1; the same run twice gives byte-identical tables (our output
    contract, DESIGN.md); GeoPackage layers read back with geopandas (GDAL)."""
    import geopandas as gpd
    from click.testing import CliRunner

    from basinkit.cli.main import cli

    write_flow_folder(base_model, tmp_path / "flow")
    outlet = int(np.nanargmax(base_model.d8_upstream_area_flat()))
    x, y = base_model.terrain.xy_of(outlet // base_model.ncols, outlet % base_model.ncols)
    pts = tmp_path / "outlets.csv"
    pd.DataFrame({"id": ["main", "offgrid"], "x": [float(x), -1e6],
                  "y": [float(y), -1e6]}).to_csv(pts, index=False)
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["--quiet", "profile", str(tmp_path / "flow"), "--outlets",
                                 str(pts), "--min-area", "0.1km2", "--min-order", "1",
                                 "--slope-window", "90m", "-o", str(out)],
                            standalone_mode=False)
    assert r.exception is None, r.output
    assert r.return_value == 1  # basinkit's entry point exits 1: one outlet failed
    table = pd.read_csv(out / "profile.csv")
    assert {"distance_from_outlet_m", "elevation_m", "chi_m", "upstream_area_m2",
            "profile_kind"} <= set(table.columns)
    assert set(table["profile_kind"]) == {"channel", "main_stem", "longest_flow_path"}
    layers = gpd.list_layers(out / "profiles.gpkg")["name"].tolist()
    assert {"profiles", "knickpoints"} <= set(layers)
    prof = gpd.read_file(out / "profiles.gpkg", layer="profiles")
    assert {"ksn_m_per_m", "concavity"} <= set(prof.columns)
    from PIL import Image

    for f in ("main_long_profile.png", "main_chi_elevation.png", "main_slope_area.png",
              "main_longest_flow_path.png"):
        # a real drawing (PNG specification, decoded by Pillow): 7.5 × 4.5 in at 100 dpi,
        # palette PNGs of some kilobytes, not a blank canvas
        im = Image.open(out / "figures" / f)
        im.load()
        assert im.format == "PNG" and im.size == (750, 450)
        assert (out / "figures" / f).stat().st_size > 5_000
        assert np.asarray(im.convert("L")).std() > 5
    meta = json.loads((out / "profiles.json").read_text())
    assert meta["software"] == "basinkit" and meta["cautions"]
    errors = pd.read_csv(out / "flow_paths.csv")
    assert set(errors["outlet_id"]) == {"main"}  # the off-grid outlet was never placed
    assert errors.set_index("kind").loc["longest_flow_path", "length_m"] > 0
    # deterministic: the same job gives byte-identical tables (DESIGN.md)
    out_b = tmp_path / "out_b"
    CliRunner().invoke(cli, ["--quiet", "profile", str(tmp_path / "flow"), "--outlets",
                             str(pts), "--min-area", "0.1km2", "--min-order", "1",
                             "--slope-window", "90m", "-o", str(out_b)], standalone_mode=False)
    for f in ("profile.csv", "steepness.csv", "knickpoints.csv", "profiles.gpkg"):
        assert (out / f).read_bytes() == (out_b / f).read_bytes()
    # the tables streamed as the outlets come hold the columns of the analysis functions
    # (outlet first), and the GeoPackage the same rows: every segment of steepness.csv and
    # two flow paths per outlet, every knickpoint
    steep, knick = pd.read_csv(out / "steepness.csv"), pd.read_csv(out / "knickpoints.csv")
    nodes = P.channel_profiles(base_model, extract_channels(base_model, 1e5,
                                                            geometry=False), outlet,
                               min_order=1, slope_window_m=90)
    nodes["outlet_id"] = "main"
    want = list(steepness(nodes).columns)
    assert list(steep.columns) == ["outlet_id"] + [c for c in want if c != "outlet_id"]
    want = list(find_knickpoints(nodes).columns)
    assert list(knick.columns) == ["outlet_id"] + [c for c in want if c != "outlet_id"]
    assert len(steep) > 0
    assert len(prof) == len(steep) + 2
    assert len(gpd.read_file(out / "profiles.gpkg", layer="knickpoints")) == len(knick)
    # user errors: no outlet; both a fixed and a fitted concavity
    r2 = CliRunner().invoke(cli, ["profile", str(tmp_path / "flow"), "-o", str(out)])
    assert r2.exit_code != 0 and isinstance(r2.exception, InputError)
    r3 = CliRunner().invoke(cli, ["profile", str(tmp_path / "flow"), "--outlet", f"{x},{y}",
                                  "--concavity", "0.5", "--fit-concavity", "-o",
                                  str(tmp_path / "o3")])
    assert isinstance(r3.exception, InputError) and "not both" in str(r3.exception)


def test_released_tables_are_made_again():
    """FlowModel.release frees the profiles' donor tables between steps; a later path is
    then the same (closed form: a plane sloping south, the path runs down one column)."""
    z = np.add.outer(np.arange(30.0, 0, -1), np.zeros(7))
    fm = route(terrain_from_array(z, cellsize=10))
    outlet = 29 * 7 + 3
    first = P.longest_flow_path(fm, outlet)
    assert fm.release("profiles") > 0
    assert fm.release("profiles") == 0
    again = P.longest_flow_path(fm, outlet)
    assert np.array_equal(first.cells, again.cells)
    assert again.length_m == pytest.approx(290.0)  # 29 steps of 10 m
