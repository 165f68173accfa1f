"""Fits along profiles: the best concavity θ (collinearity of tributaries in χ–elevation,
Perron & Royden 2013), slope–area (Flint 1974) and Hack's law (Hack 1957).

References
----------
Hack, J. T. (1957). Studies of longitudinal stream profiles in Virginia and Maryland. USGS
Professional Paper 294-B.
Flint, J. J. (1974). Stream gradient as a function of order, magnitude, and discharge.
Water Resources Research 10:969-973.
Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile analysis.
Earth Surface Processes and Landforms 38:570-576.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _profiles
from ..errors import InputError, OutletError
from .profiles import (_area_flat, _build_tree, _check_a0, _check_cell, _check_theta,
                       _donor_lists, _outlet_arrays, _upstream_length_flat)

__all__ = ["ConcavityFit", "SlopeAreaFit", "HackFit", "fit_concavity", "slope_area_fit",
           "hack_law_fit"]


@dataclass
class ConcavityFit:
    """Best-fit concavity θ from the collinearity of tributaries with the main stem.

    Attributes
    ----------
    concavity : float
        θ of least misfit (refined between grid values by a parabola).
    spread : float
        Standard deviation of θ over bootstrap resamples of the tributaries.
    low, high : float
        16th and 84th percentiles of the bootstrap θ.
    thetas, misfit_m : ndarray
        The θ grid and the RMS elevation misfit (m) of tributary nodes about the main
        stem's χ–z curve at each θ.
    tributary_count, node_count : int
    reference_area_m2 : float
    at_grid_edge : bool
        The least misfit, or the bootstrap 16–84 % range, reaches the first or last θ
        tried: the misfit has no clear interior minimum and the fit is not reliable.
    """

    concavity: float
    spread: float
    low: float
    high: float
    thetas: np.ndarray
    misfit_m: np.ndarray
    tributary_count: int
    node_count: int
    reference_area_m2: float
    at_grid_edge: bool = False

    def to_dict(self) -> dict:
        return {"concavity": self.concavity, "at_grid_edge": self.at_grid_edge,
                "concavity_spread": self.spread,
                "concavity_p16": self.low, "concavity_p84": self.high,
                "tributary_count": self.tributary_count, "node_count": self.node_count,
                "reference_area_m2": self.reference_area_m2,
                "misfit_min_m": float(np.nanmin(self.misfit_m))}


def fit_concavity(fm, network, outlet_cell, min_order=1, thetas=None, reference_area_m2=1.0,
                  elevation="conditioned", n_bootstrap=200, seed=0) -> ConcavityFit:
    """Best-fit concavity θ: the value that makes tributaries most collinear with the main
    stem in χ–z space (Perron & Royden 2013).

    Parameters
    ----------
    fm : FlowModel
    network : ChannelNetwork
    outlet_cell : int
        The catchment's outlet.
    min_order : int
        Lowest Strahler order of the channels used (default 1: all).
    thetas : array of float, optional
        θ values tried (default 0.05, 0.06, ..., 1.00).
    reference_area_m2 : float
        A0 (does not change the best θ).
    elevation : {"conditioned", "raw"}
    n_bootstrap : int
        Bootstrap resamples of the tributaries for the spread (0: none).
    seed : int
        Seed of the bootstrap (deterministic output).

    Returns
    -------
    ConcavityFit

    Notes
    -----
    For every θ, χ is computed from the outlet; the main stem (from the outlet along the
    donor of greatest area) gives a χ–z curve, and each tributary node within the main
    stem's χ range is compared with that curve at its own χ (linear interpolation). The
    misfit is the RMS of these elevation differences; at steady state with uniform
    erodibility all channels fall on one line in χ–z at the true θ. The spread comes from
    resampling whole tributaries with replacement (``n_bootstrap`` times) and taking the θ
    of least misfit of each resample.

    References
    ----------
    Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile
    analysis. Earth Surface Processes and Landforms 38:570-576.
    Mudd, S. M., et al. (2018). Evaluation of methods to determine concavity in bedrock
    rivers. Earth Surface Dynamics 6:505-523.
    """
    c = _check_cell(fm, outlet_cell)
    a0 = _check_a0(reference_area_m2)
    th = (np.round(np.arange(0.05, 1.0001, 0.01), 10) if thetas is None
          else np.asarray(thetas, dtype=float).ravel())
    if th.size < 3 or not np.all(np.diff(th) > 0):
        raise InputError("give at least three increasing θ values to try")
    for v in th:
        _check_theta(v)
    t = _build_tree(fm, network, c, min_order)
    if t.cells.size == 0:
        raise OutletError("the outlet is not on a channel of the requested order; move it "
                          "onto the channel or lower the channel threshold")
    z = t.zc if elevation == "conditioned" else t.zr
    main_id = t.profile[t.lrec < 0][0]
    ms = t.profile == main_id
    trib = ~ms
    if not trib.any():
        raise InputError("the catchment has no tributaries on the channel network; lower the "
                         "channel threshold (--min-area) or the minimum order to fit θ")
    groups, gidx = np.unique(t.profile[trib], return_inverse=True)
    ng = groups.size
    sse = np.zeros((th.size, ng))
    cnt = np.zeros((th.size, ng))
    zt = z[trib]
    logr = np.log(t.area / a0)
    ms_idx = np.flatnonzero(ms)
    for i, theta in enumerate(th):
        chi = _profiles.chi_local(t.lrec, t.step, logr, theta)
        xm = chi[ms_idx]
        zm = z[ms_idx]
        ct = chi[trib]
        inside = ct <= xm[-1]
        res = np.where(inside, zt - np.interp(ct, xm, zm), 0.0)
        sse[i] = np.bincount(gidx, weights=res * res, minlength=ng)
        cnt[i] = np.bincount(gidx, weights=inside.astype(float), minlength=ng)
    tot_n = cnt.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mis = np.where(tot_n > 0, sse.sum(axis=1) / tot_n, np.nan)
    if not np.isfinite(mis).any():
        raise InputError("no tributary node lies within the main stem's χ range; the "
                         "catchment is too small to fit θ")
    best = _refine_min(th, mis)
    imin = int(np.nanargmin(mis))
    edge = imin == 0 or imin == th.size - 1
    boots = np.zeros(0)
    if n_bootstrap and ng > 1:
        rng = np.random.default_rng(seed)
        w = rng.multinomial(ng, np.full(ng, 1.0 / ng), size=int(n_bootstrap)).astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            m = (w @ sse.T) / (w @ cnt.T)
        m = np.where(np.isfinite(m), m, np.inf)
        boots = th[np.argmin(m, axis=1)]
    if boots.size:
        spread, lo, hi = (float(np.std(boots)), float(np.percentile(boots, 16)),
                          float(np.percentile(boots, 84)))
        edge = edge or lo <= th[0] or hi >= th[-1]
    else:
        spread, lo, hi = float("nan"), float("nan"), float("nan")
    return ConcavityFit(concavity=float(best), spread=spread, low=lo, high=hi, thetas=th,
                        misfit_m=np.sqrt(mis), tributary_count=int(ng),
                        node_count=int(t.cells.size), reference_area_m2=a0,
                        at_grid_edge=bool(edge))


def _refine_min(x, y):
    yy = np.where(np.isfinite(y), y, np.inf)
    i = int(np.argmin(yy))
    if 0 < i < x.size - 1 and np.isfinite(yy[i - 1]) and np.isfinite(yy[i + 1]):
        y0, y1, y2 = yy[i - 1], yy[i], yy[i + 1]
        den = y0 - 2 * y1 + y2
        if den > 0:
            h = (x[i + 1] - x[i - 1]) / 2.0
            off = 0.5 * (y0 - y2) / den * h
            return float(np.clip(x[i] + off, x[i - 1], x[i + 1]))
    return float(x[i])


# ---------------------------------------------------------------------- steepness


@dataclass
class SlopeAreaFit:
    """S = k_s·A^-θ fitted in log space (Flint 1974).

    Attributes
    ----------
    steepness_index : float
        k_s (m^(2θ)).
    concavity : float
        θ.
    steepness_index_ci, concavity_ci : tuple of float
        Confidence intervals at ``confidence``.
    r2 : float
    point_count : int
    confidence : float
    binned : bool
        Whether the fit used log-bin medians rather than all points.
    """

    steepness_index: float
    concavity: float
    steepness_index_ci: tuple
    concavity_ci: tuple
    r2: float
    point_count: int
    confidence: float
    binned: bool

    def predict(self, area_m2):
        return self.steepness_index * np.asarray(area_m2, dtype=float) ** -self.concavity

    def to_dict(self) -> dict:
        return {"steepness_index_m2theta": self.steepness_index,
                "steepness_index_ci_low": self.steepness_index_ci[0],
                "steepness_index_ci_high": self.steepness_index_ci[1],
                "concavity": self.concavity, "concavity_ci_low": self.concavity_ci[0],
                "concavity_ci_high": self.concavity_ci[1], "r2": self.r2,
                "point_count": self.point_count, "confidence": self.confidence,
                "binned": self.binned}


@dataclass(frozen=True)
class _LineFit:
    slope: float
    intercept: float
    rvalue: float
    stderr: float
    intercept_stderr: float


def _line_fit(x, y) -> _LineFit:
    """Least-squares line y = intercept + slope·x with the standard errors of both and
    Pearson's r: the textbook formulas, in the order scipy.stats.linregress (1.17)
    evaluates them, so the results carry the same bits without importing scipy.stats (3 s
    of start-up in every process that fits). Needs three points or more over a range of
    x (the callers check)."""
    n = x.size
    xmean = np.mean(x, None)
    ymean = np.mean(y, None)
    ssxm, ssxym, _, ssym = np.cov(x, y, bias=1).flat
    if ssxm == 0.0 or ssym == 0.0:
        r = np.nan if ssxym == 0 else 0.0
    else:
        r = min(max(ssxym / np.sqrt(ssxm * ssym), -1.0), 1.0)
    slope = ssxym / ssxm
    stderr = np.sqrt((1 - r ** 2) * ssym / ssxm / (n - 2))
    return _LineFit(slope, ymean - slope * xmean, r, stderr,
                    stderr * np.sqrt(ssxm + xmean ** 2))


def _loglog_fit(x, y, confidence):
    from scipy.special import stdtrit  # scipy.stats.t.ppf's own kernel

    lx, ly = np.log10(x), np.log10(y)
    if np.ptp(lx) == 0:
        raise InputError("a log–log fit needs points over a range of areas; all of these "
                         "have the same upstream area")
    return _line_fit(lx, ly), stdtrit(lx.size - 2, 0.5 + confidence / 2.0)


def _log_bins(area, slope, bins):
    la = np.log10(area)
    edges = np.linspace(la.min(), la.max(), int(bins) + 1)
    which = np.clip(np.digitize(la, edges) - 1, 0, int(bins) - 1)
    xa, ys = [], []
    for b in range(int(bins)):
        m = which == b
        if m.sum() >= 3:
            xa.append(10 ** np.median(la[m]))
            ys.append(10 ** np.median(np.log10(slope[m])))
    return np.array(xa), np.array(ys)


def slope_area_fit(area_m2, slope_m_per_m, confidence=0.95, bins=None) -> SlopeAreaFit:
    """Slope–area regression S = k_s·A^-θ (Flint 1974) by least squares in log space.

    Parameters
    ----------
    area_m2, slope_m_per_m : array_like
        Upstream areas and local channel slopes; pairs with S ≤ 0, A ≤ 0 or NaN are left
        out.
    confidence : float
        Level of the confidence intervals (default 0.95; Student t on the regression's
        standard errors).
    bins : int, optional
        Fit the medians of log S in this many equal bins of log A (with at least three
        points) instead of all points.

    Returns
    -------
    SlopeAreaFit

    References
    ----------
    Flint, J. J. (1974). Stream gradient as a function of order, magnitude, and discharge.
    Water Resources Research 10:969-973.
    Montgomery, D. R., Dietrich, W. E. (1988). Where do channels begin? Nature 336:232-234.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.logspace(4, 8, 50)
    >>> f = slope_area_fit(a, 30.0 * a ** -0.5)
    >>> round(f.concavity, 6), round(f.steepness_index, 6)
    (0.5, 30.0)
    """
    a = np.asarray(area_m2, dtype=float).ravel()
    s = np.asarray(slope_m_per_m, dtype=float).ravel()
    if a.shape != s.shape:
        raise InputError("give one slope per area")
    if not 0 < confidence < 1:
        raise InputError("the confidence level must lie between 0 and 1")
    ok = np.isfinite(a) & np.isfinite(s) & (a > 0) & (s > 0)
    a, s = a[ok], s[ok]
    if bins is not None and a.size:
        a, s = _log_bins(a, s, bins)
    if a.size < 3 or np.ptp(np.log10(a)) == 0:
        raise InputError(f"a slope–area fit needs at least three points with positive slope "
                         f"over a range of areas; got {a.size}")
    fit, tc = _loglog_fit(a, s, confidence)
    theta = -fit.slope
    # a fit over a short range of areas can give an intercept beyond float range (a very
    # steep concavity): the index and its bounds are then infinite, not a warning per fit
    with np.errstate(over="ignore"):
        ks = np.power(10.0, [fit.intercept, fit.intercept - tc * fit.intercept_stderr,
                             fit.intercept + tc * fit.intercept_stderr])
    return SlopeAreaFit(
        steepness_index=float(ks[0]), concavity=float(theta),
        steepness_index_ci=(float(ks[1]), float(ks[2])),
        concavity_ci=(float(theta - tc * fit.stderr), float(theta + tc * fit.stderr)),
        r2=float(fit.rvalue ** 2), point_count=int(a.size), confidence=float(confidence),
        binned=bins is not None)


@dataclass
class HackFit:
    """Hack's law L = c·A^h (Hack 1957) fitted in log space.

    Attributes
    ----------
    coefficient : float
        c, for L in metres and A in square metres.
    exponent : float
        h (Hack 1957 found about 0.6).
    coefficient_ci, exponent_ci : tuple of float
    r2 : float
    point_count : int
    confidence : float
    """

    coefficient: float
    exponent: float
    coefficient_ci: tuple
    exponent_ci: tuple
    r2: float
    point_count: int
    confidence: float

    def to_dict(self) -> dict:
        return {"hack_coefficient": self.coefficient, "hack_exponent": self.exponent,
                "hack_exponent_ci_low": self.exponent_ci[0],
                "hack_exponent_ci_high": self.exponent_ci[1],
                "hack_coefficient_ci_low": self.coefficient_ci[0],
                "hack_coefficient_ci_high": self.coefficient_ci[1], "r2": self.r2,
                "point_count": self.point_count, "confidence": self.confidence}


def hack_law_fit(fm, network, outlet_cell=None, confidence=0.95) -> HackFit:
    """Hack's law L = c·A^h fitted across a channel network (Hack 1957).

    Parameters
    ----------
    fm : FlowModel
    network : ChannelNetwork
    outlet_cell : int or array of int, optional
        Keep only segments upstream of these outlets (default: the whole network).
    confidence : float
        Level of the confidence intervals.

    Returns
    -------
    HackFit

    Notes
    -----
    One point per channel segment, at its lowest cell: L is the longest flow-path length
    upstream of that cell (``fm.upstream_length()``, metres on the ground) and A its D8
    upstream area (m²). The fit is least squares of log L on log A.

    References
    ----------
    Hack, J. T. (1957). Studies of longitudinal stream profiles in Virginia and Maryland.
    USGS Professional Paper 294-B.

    Examples
    --------
    The real 3-arc-second DEM shipped with matplotlib (geographic; its ``ymin`` and
    ``ymax`` are swapped in the file, the rows run north to south), channels from 1 km²:

    >>> from affine import Affine
    >>> from matplotlib import cbook
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.channels import extract_channels
    >>> d = cbook.get_sample_data("jacksboro_fault_dem.npz")
    >>> north = max(float(d["ymin"]), float(d["ymax"]))
    >>> tr = Affine(float(d["dx"]), 0, float(d["xmin"]), 0, -float(d["dy"]), north)
    >>> fm = route(terrain_from_array(d["elevation"], transform=tr, crs="EPSG:4326"))
    >>> fit = hack_law_fit(fm, extract_channels(fm, 1e6, geometry=False))
    >>> round(fit.exponent, 2)  # Hack (1957) reported about 0.6
    0.54
    """
    if network is None:
        raise InputError("Hack's law needs a channel network (extract_channels)")
    seg = network.segments
    nc = fm.ncols
    bottom = (seg["bottom_row"].to_numpy(np.int64) * nc + seg["bottom_col"].to_numpy(np.int64))
    if outlet_cell is not None:
        cells_o, _ = _outlet_arrays(fm, outlet_cell, None)
        offsets, donors = _donor_lists(fm)
        mask = np.ascontiguousarray(network.mask, dtype=bool).ravel().view(np.uint8)
        cells, _, _ = _profiles.upstream_cells(offsets, donors, cells_o, mask, 1,
                                               np.sort(cells_o))
        bottom = bottom[np.isin(bottom, cells)]
    L = _upstream_length_flat(fm)[bottom]
    A = _area_flat(fm)[bottom]
    ok = (L > 0) & (A > 0) & np.isfinite(A)
    if ok.sum() < 3:
        raise InputError("Hack's law needs at least three channel segments; lower the "
                         "channel threshold")
    fit, tc = _loglog_fit(A[ok], L[ok], confidence)
    return HackFit(coefficient=float(10 ** fit.intercept), exponent=float(fit.slope),
                   coefficient_ci=(float(10 ** (fit.intercept - tc * fit.intercept_stderr)),
                                   float(10 ** (fit.intercept + tc * fit.intercept_stderr))),
                   exponent_ci=(float(fit.slope - tc * fit.stderr),
                                float(fit.slope + tc * fit.stderr)),
                   r2=float(fit.rvalue ** 2), point_count=int(ok.sum()),
                   confidence=float(confidence))


# ---------------------------------------------------------------------- figures
