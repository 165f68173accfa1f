"""Channel steepness k_sn per segment (the slope of elevation against χ; Perron & Royden
2013, Whipple & Tucker 1999) and knickpoints by segmented regression of χ–elevation.

References
----------
Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile analysis.
Earth Surface Processes and Landforms 38:570-576.
Whipple, K. X., Tucker, G. E. (1999). Dynamics of the stream-power river incision model.
Journal of Geophysical Research 104(B8):17661-17674.
"""

from __future__ import annotations

import numpy as np

from . import _profiles
from ..errors import InputError
from .profiles import Profile

__all__ = ["steepness", "find_knickpoints"]


def steepness(nodes, by="segment_id", elevation="elevation_conditioned_m"):
    """Normalised steepness k_sn of each segment (or profile) as the slope of elevation
    against χ (Whipple & Tucker 1999; Perron & Royden 2013).

    Parameters
    ----------
    nodes : pandas.DataFrame
        As returned by :func:`channel_profiles` (columns ``cell``, ``downstream_cell``,
        ``chi_m``, the elevation column and ``by``).
    by : str
        Grouping column: ``"segment_id"`` (default) or ``"profile_id"``.
    elevation : str
        Elevation column (default the conditioned surface).

    Returns
    -------
    pandas.DataFrame
        One row per group: ``by``, ``outlet_id``, ``profile_id``/``segment_id`` (first
        node's), ``strahler_order`` (highest), ``ksn_m_per_m`` (least-squares slope of z on
        χ over the group's nodes and the node just downstream of it), ``ksn_stderr_m_per_m``,
        ``r2``, ``node_count``, ``chi_min_m``, ``chi_max_m``, ``elevation_min_m``,
        ``elevation_max_m``, ``concavity``, ``reference_area_m2``. Groups with fewer than
        two nodes get NaN.

    Notes
    -----
    With S = k_s·A^-θ, z = z_b + k_s·A0^-θ·χ, so dz/dχ = k_s·A0^-θ = k_sn. With A0 = 1 m²
    the value equals k_s in m^(2θ).

    References
    ----------
    Whipple, K. X., Tucker, G. E. (1999). Journal of Geophysical Research 104:17661-17674.
    Perron, J. T., Royden, L. (2013). Earth Surface Processes and Landforms 38:570-576.

    Examples
    --------
    See :func:`channel_profiles`; ``steepness(nodes, by="profile_id")`` gives one k_sn per
    profile instead of per segment.
    """
    import pandas as pd

    need = {"cell", "downstream_cell", "chi_m", elevation, by}
    miss = need - set(nodes.columns)
    if miss:
        raise InputError(f"the node table lacks the columns {sorted(miss)}; make it with "
                         "channel_profiles()")
    attrs = nodes.attrs
    nodes = _without_attrs(nodes)
    key = nodes[by].to_numpy()
    ok = key > 0
    x = nodes["chi_m"].to_numpy(dtype=float)
    y = nodes[elevation].to_numpy(dtype=float)
    # the node just downstream of each group's lowest node (a junction or the outlet)
    pos = pd.Index(nodes["cell"].to_numpy()).get_indexer(nodes["downstream_cell"].to_numpy())
    has = (pos >= 0) & ok
    has[has] = key[pos[has]] != key[has]
    gkeys = np.unique(key[ok])
    gi = np.searchsorted(gkeys, key)
    ai = np.concatenate([gi[ok], gi[has]])
    ax = np.concatenate([x[ok], x[pos[has]]])
    ay = np.concatenate([y[ok], y[pos[has]]])
    ng = gkeys.size
    cnt = np.bincount(ai, minlength=ng).astype(float)

    def s(w):
        return np.bincount(ai, weights=w, minlength=ng)

    with np.errstate(invalid="ignore", divide="ignore"):
        mx = s(ax) / cnt
        my = s(ay) / cnt
        dx = ax - mx[ai]
        dy = ay - my[ai]
        sxx, sxy, syy = s(dx * dx), s(dx * dy), s(dy * dy)
        slope = np.where((cnt >= 2) & (sxx > 0), sxy / sxx, np.nan)
        sse = np.maximum(syy - slope * sxy, 0.0)
        r2 = np.where(syy > 0, 1.0 - sse / syy, 1.0)
        stderr = np.where(cnt > 2, np.sqrt(sse / np.maximum(cnt - 2, 1) / sxx), np.nan)
    out = {by: gkeys}
    gok = gi[ok]
    _, first = np.unique(gok, return_index=True)  # first node of each group (table order)
    for col in ("outlet_id", "profile_id", "segment_id"):
        if col in nodes.columns and col != by:
            out[col] = nodes[col].to_numpy()[ok][first]
    if "strahler_order" in nodes.columns and ng:
        so = nodes["strahler_order"].to_numpy()[ok]
        o1 = np.argsort(gok, kind="stable")
        out["strahler_order"] = np.maximum.reduceat(so[o1], _starts(gok, ng))
    out["ksn_m_per_m"] = slope
    out["ksn_stderr_m_per_m"] = stderr
    out["r2"] = r2
    out["node_count"] = cnt.astype(np.int32)
    if ng:
        o2 = np.argsort(ai, kind="stable")
        st2 = _starts(ai, ng)
        xs, ys = ax[o2], ay[o2]
        out["chi_min_m"] = np.minimum.reduceat(xs, st2)
        out["chi_max_m"] = np.maximum.reduceat(xs, st2)
        out["elevation_min_m"] = np.minimum.reduceat(ys, st2)
        out["elevation_max_m"] = np.maximum.reduceat(ys, st2)
    else:
        for c in ("chi_min_m", "chi_max_m", "elevation_min_m", "elevation_max_m"):
            out[c] = np.zeros(0)
    out["concavity"] = attrs.get("concavity", np.nan)
    out["reference_area_m2"] = attrs.get("reference_area_m2", np.nan)
    out = pd.DataFrame(out)  # one frame at the end: column by column costs per column
    return out


def _without_attrs(frame):
    """``frame`` (a shallow copy) without ``attrs``: pandas deep-copies them into every
    column taken, which costs more than the work on a profile's few hundred nodes."""
    if frame.attrs:
        frame = frame.copy(deep=False)
        frame.attrs = {}
    return frame


def _starts(ai, ng):
    c = np.bincount(ai, minlength=ng)
    return np.concatenate([[0], np.cumsum(c)[:-1]]).astype(np.int64)


# ---------------------------------------------------------------------- knickpoints
def find_knickpoints(nodes, by="profile_id", elevation="elevation_conditioned_m",
                     min_nodes=5, vertical_precision_m=1.0, min_change=0.3,
                     min_relief_m=None, max_per_profile=20):
    """Knickpoints as breaks of slope in the χ–z profile (segmented regression).

    Parameters
    ----------
    nodes : pandas.DataFrame or Profile
        Channel nodes from :func:`channel_profiles` (grouped by ``by``) or a single
        :class:`Profile` (for example the main stem).
    by : str
        Grouping column of a node table.
    elevation : str
        Elevation column (default the conditioned surface).
    min_nodes : int
        Fewest nodes on each side of a break.
    vertical_precision_m : float
        Vertical precision of the DEM (m): residuals below it are not counted as misfit.
    min_change : float
        Smallest relative change of steepness, ``|k_above - k_below| / max(|k|)``.
    min_relief_m : float, optional
        Smallest elevation by which the reach above departs from the line below at its
        top end (default 3 × ``vertical_precision_m``).
    max_per_profile : int

    Returns
    -------
    pandas.DataFrame
        One row per knickpoint: the grouping column (when a table is given), ``outlet_id``,
        ``row``, ``col``, ``x``, ``y``, ``distance_from_outlet_m``, ``elevation_m``,
        ``chi_m``, ``upstream_area_m2``, ``ksn_below_m_per_m``, ``ksn_above_m_per_m``,
        ``ksn_change_ratio`` (above / below), ``step_m`` (offset between the two pieces at
        the break: the height of a vertical step), ``relief_m`` (magnitude: elevation of
        the reach's top above (+) or below (-) the extension of the line below the
        knickpoint), ``kind`` (``"steeper upstream"`` or ``"gentler upstream"`` for
        slope breaks, ``"vertical step up"``/``"vertical step down"`` for offsets without
        a change of steepness, placed at the top of the step) and, when the table
        has both elevations, ``in_filled_depression`` (the conditioned surface lies more
        than the vertical precision above the DEM there: the break may be the edge of a
        filled depression rather than of the channel).

    Notes
    -----
    Each profile, ordered by χ, is fitted by a two-piece line at every possible break
    (segmented regression, the pieces free to change slope and to be offset); the best
    break is kept when the Bayesian information criterion (Schwarz 1978) prefers it to a
    single line (residual variance floored at the square of the vertical precision) and
    the change of steepness (or the offset) and the relief exceed their thresholds. Each
    piece is searched again (binary segmentation). In χ–z a steady-state channel of uniform
    k_sn is one straight line (Perron & Royden 2013), so breaks mark slope-break and
    vertical-step knickpoints in the sense of Kirby & Whipple (2012).

    References
    ----------
    Perron, J. T., Royden, L. (2013). Earth Surface Processes and Landforms 38:570-576.
    Kirby, E., Whipple, K. X. (2012). Expression of active tectonics in erosional
    landscapes. Journal of Structural Geology 44:54-75.
    Schwarz, G. (1978). Estimating the dimension of a model. Annals of Statistics 6:461-464.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> from basinkit.analysis.profiles import main_stem
    >>> z = np.add.outer(np.arange(30.0, 0, -1), np.abs(np.arange(5.0) - 2))  # a V valley
    >>> z[:15] += 20  # a 20 m step in its upper half
    >>> fm = route(terrain_from_array(z, cellsize=10))
    >>> kp = find_knickpoints(main_stem(fm, 29 * 5 + 2, concavity=0.0))  # χ = distance
    >>> kp[["row", "kind"]].values.tolist(), round(float(kp["step_m"].iloc[0]))
    ([[14, 'vertical step up']], 20)
    """
    import pandas as pd

    if isinstance(nodes, Profile):
        df = nodes.to_frame()
        df["profile_id"] = 1
        df.attrs.update(concavity=nodes.concavity)
        by = "profile_id"
        single = True
    else:
        df = nodes
        single = False
    if int(min_nodes) < 2:
        raise InputError("min_nodes must be at least 2")
    prec = float(vertical_precision_m)
    if not prec > 0:
        raise InputError("the vertical precision must be positive (m)")
    relief = 3.0 * prec if min_relief_m is None else float(min_relief_m)
    cols = ["row", "col", "x", "y", "distance_from_outlet_m", elevation, "chi_m",
            "upstream_area_m2"]
    miss = set(cols + [by]) - set(df.columns)
    if miss:
        raise InputError(f"the node table lacks the columns {sorted(miss)}")
    out = []
    df = _without_attrs(df)
    key = df[by].to_numpy()
    order = np.lexsort((df["chi_m"].to_numpy(), key))
    ks = key[order]
    starts = np.flatnonzero(np.r_[True, ks[1:] != ks[:-1]])
    ends = np.r_[starts[1:], ks.size]
    chi_all = df["chi_m"].to_numpy(dtype=float)[order]
    z_all = df[elevation].to_numpy(dtype=float)[order]
    for s0, s1 in zip(starts, ends):
        if s1 - s0 < 2 * int(min_nodes) + 1:
            continue
        xs = np.ascontiguousarray(chi_all[s0:s1])
        ys = np.ascontiguousarray(z_all[s0:s1])
        if not (np.isfinite(xs).all() and np.isfinite(ys).all()):
            continue
        k, kb, ka, kd, kr = _profiles.knickpoints_one(xs, ys, int(min_nodes), prec * prec,
                                                      float(min_change), relief,
                                                      int(max_per_profile))
        for j in range(k.size):
            ref = max(abs(kb[j]), abs(ka[j]))
            is_step = abs(kd[j]) >= relief and not (ref > 0 and
                                                   abs(ka[j] - kb[j]) >= min_change * ref)
            # a vertical step is placed at its top (the first node of the upper piece)
            node = s0 + k[j] + (1 if is_step and k[j] + 1 < s1 - s0 else 0)
            out.append((order[node], kb[j], ka[j], kr[j], kd[j], is_step))
    cols_out = ([] if single else [by]) + (["outlet_id"] if "outlet_id" in df.columns
                                           else []) + cols
    both = {"elevation_m", "elevation_conditioned_m"} <= set(df.columns)
    if not out:
        res = {c: pd.Series(dtype=float) for c in cols_out}
        for c in ("ksn_below_m_per_m", "ksn_above_m_per_m", "ksn_change_ratio", "step_m",
                  "relief_m"):
            res[c] = pd.Series(dtype=float)
        res["kind"] = pd.Series(dtype=object)
        if both:
            res["in_filled_depression"] = pd.Series(dtype=bool)
        return pd.DataFrame(res).rename(columns={elevation: "elevation_m"})
    idx = np.array([o[0] for o in out])
    # the frame is made once at the end (column by column, pandas costs per column)
    res = {c: df[c].to_numpy()[idx] for c in cols_out}
    kb = np.array([o[1] for o in out])
    ka = np.array([o[2] for o in out])
    res["ksn_below_m_per_m"] = kb
    res["ksn_above_m_per_m"] = ka
    with np.errstate(divide="ignore", invalid="ignore"):
        res["ksn_change_ratio"] = ka / kb
    step = np.array([o[4] for o in out])
    res["step_m"] = step
    res["relief_m"] = np.array([o[3] for o in out])
    steps = np.array([o[5] for o in out], dtype=bool)
    res["kind"] = np.where(steps, np.where(step > 0, "vertical step up",
                                           "vertical step down"),
                           np.where(ka > kb, "steeper upstream", "gentler upstream"))
    if both:
        raised = (df["elevation_conditioned_m"].to_numpy(float)[idx]
                  - df["elevation_m"].to_numpy(float)[idx])
        res["in_filled_depression"] = raised > prec
    res = pd.DataFrame(res)
    return res.rename(columns={elevation: "elevation_m"})


# ---------------------------------------------------------------------- regressions
