"""Figures of profiles: the longitudinal profile, χ–elevation and slope–area. Each function
takes ``ax=None`` (a new figure when None) and returns the figure."""

from __future__ import annotations

import numpy as np

from ..analysis.profile_fits import _log_bins
from ..analysis.profiles import Profile
from ._style import new_axes

__all__ = ["plot_long_profile", "plot_chi", "plot_slope_area", "knickpoints_on",
           "COLOURS"]

COLOURS = {"conditioned": "#23395b", "raw": "#8ea8c3", "base": "#b5533c",
           "knick": "#d1495b", "tributary": "#9bb1a8", "main": "#23395b",
           "fit": "#e09f3e", "bins": "#3c6e71"}


#: Axes of a new figure, in figure fractions (left, bottom, width, height): fixed margins
#: that fit the labels of these plots, instead of a layout pass that draws the figure twice
#: (a third to a half of the drawing time).
AXES_RECT = (0.095, 0.12, 0.875, 0.79)


def _axes(ax, kind, figsize=(7.5, 4.5)):
    # a bare Figure (no pyplot): no GUI backend is touched, saving uses Agg
    return new_axes(ax, figsize, AXES_RECT, kind=kind)


_SUPERSCRIPT = str.maketrans("0123456789-.", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻·")


def _sup(value, fmt="g"):
    """``value`` as superscript text, e.g. -0.5 → ⁻⁰·⁵."""
    return format(value, fmt).translate(_SUPERSCRIPT)


def _power_of_ten(value, pos=None):
    """Tick label of a log axis: 10⁵, 10⁻²; other values as they are."""
    if not value > 0:
        return ""
    e = np.log10(value)
    if abs(e - round(e)) > 1e-9:
        return f"{value:g}"
    return "10" + _sup(int(round(e)), "d")


def _style(ax):
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    ax.grid(True, color="#e6e6e6", linewidth=0.6)
    ax.set_axisbelow(True)


def knickpoints_on(profile, knickpoints, decimals=6):
    """The knickpoints that lie on ``profile`` (same cell centre, compared to ``decimals``
    places), with ``distance_from_outlet_m`` replaced by the distance along that profile.

    Knickpoints are found on the channel profiles; a flow path shares their cells where it
    follows a channel, so this puts them on e.g. the longest flow path's long profile.

    Parameters
    ----------
    profile : Profile
        With ``x``, ``y`` and ``distance_m`` (one value per node).
    knickpoints : pandas.DataFrame or None
        With columns ``x``, ``y`` (e.g. from :func:`find_knickpoints` or knickpoints.csv).
    decimals : int

    Returns
    -------
    pandas.DataFrame or None
        None when there are none on the profile (or no coordinates to match).

    Examples
    --------
    >>> import pandas as pd
    >>> from types import SimpleNamespace
    >>> p = SimpleNamespace(x=np.array([0., 10, 20]), y=np.array([5., 5, 5]),
    ...                     distance_m=np.array([0., 10, 20]))
    >>> k = pd.DataFrame({"x": [20., 40], "y": [5., 5], "elevation_m": [3., 4],
    ...                   "distance_from_outlet_m": [700., 900]})
    >>> knickpoints_on(p, k)["distance_from_outlet_m"].tolist()
    [20.0]
    """
    if knickpoints is None or not len(knickpoints):
        return None
    px, py = getattr(profile, "x", None), getattr(profile, "y", None)
    if px is None or py is None or not {"x", "y"} <= set(knickpoints.columns):
        return None
    pos = {(round(float(x), decimals), round(float(y), decimals)): float(d)
           for x, y, d in zip(px, py, profile.distance_m)}
    keys = [(round(float(x), decimals), round(float(y), decimals))
            for x, y in zip(knickpoints["x"], knickpoints["y"])]
    hit = np.array([k in pos for k in keys], bool)
    if not hit.any():
        return None
    on = knickpoints[hit].copy()
    on["distance_from_outlet_m"] = [pos[k] for k, h in zip(keys, hit) if h]
    return on


def plot_long_profile(profile, ax=None, knickpoints=None, title=None):
    """Long profile: elevation against distance from the outlet, raw and conditioned DEM,
    base level marked.

    Parameters
    ----------
    profile : Profile
        E.g. from :func:`longest_flow_path` or :func:`main_stem`.
    ax : matplotlib Axes, optional
    knickpoints : pandas.DataFrame, optional
        From :func:`find_knickpoints` (columns ``distance_from_outlet_m``, ``elevation_m``).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _axes(ax, "long_profile")
    d = profile.distance_m
    km = profile.length_m >= 5000
    dd = d / 1000.0 if km else d
    ax.plot(dd, profile.elevation_m, color=COLOURS["raw"], lw=1.0, label="DEM as read")
    ax.plot(dd, profile.elevation_conditioned_m, color=COLOURS["conditioned"], lw=1.6,
            label="conditioned DEM")
    zb = float(profile.elevation_conditioned_m[0])
    ax.axhline(zb, color=COLOURS["base"], lw=0.9, ls="--",
               label=f"base level at outlet ({zb:.1f} m)")
    ax.plot([0], [zb], marker="v", color=COLOURS["base"], ms=7, ls="none")
    if knickpoints is not None and len(knickpoints):
        kd = knickpoints["distance_from_outlet_m"].to_numpy()
        ax.plot(kd / 1000.0 if km else kd, knickpoints["elevation_m"], ls="none",
                marker="o", mfc="white", mec=COLOURS["knick"], mew=1.6, ms=7,
                label="knickpoint")
    ax.set_xlabel("distance from outlet (km)" if km else "distance from outlet (m)")
    ax.set_ylabel("elevation (m)")
    ax.set_xlim(left=0)
    ax.set_title(title or profile.kind.replace("_", " "), y=1.0)
    ax.legend(frameon=False, loc="upper left", fontsize=8)
    _style(ax)
    return fig


def plot_chi(nodes, ax=None, knickpoints=None, steepness_table=None,
             elevation="elevation_conditioned_m", title=None):
    """χ–elevation plot: tributaries in a light colour, the main stem dark.

    Parameters
    ----------
    nodes : pandas.DataFrame or Profile
        From :func:`channel_profiles` (uses ``is_main_stem``) or a single Profile.
    ax : matplotlib Axes, optional
    knickpoints : pandas.DataFrame, optional
    steepness_table : pandas.DataFrame, optional
        Unused columns aside, its median ``ksn_m_per_m`` is quoted in the legend.
    elevation : str
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _axes(ax, "chi")
    if isinstance(nodes, Profile):
        ax.plot(nodes.chi_m, nodes.elevation_conditioned_m, color=COLOURS["main"], lw=1.6,
                label="profile")
        theta = nodes.concavity
    else:
        theta = nodes.attrs.get("concavity", np.nan)
        trib = nodes[~nodes["is_main_stem"]]
        if len(trib):
            # one line of markers (not a scatter: no per-point colour or size to keep)
            ax.plot(trib["chi_m"].to_numpy(float), trib[elevation].to_numpy(float),
                    ls="none", marker="o", ms=1.7, mew=0, color=COLOURS["tributary"])
            ax.plot([], [], ls="none", marker="o", ms=4, color=COLOURS["tributary"],
                    label="tributaries")
        ms = nodes[nodes["is_main_stem"]].sort_values("chi_m")
        for _, g in ms.groupby("outlet_id"):
            ax.plot(g["chi_m"], g[elevation], color=COLOURS["main"], lw=1.6,
                    label="main stem" if _ == ms["outlet_id"].iloc[0] else None)
    if knickpoints is not None and len(knickpoints):
        ax.plot(knickpoints["chi_m"], knickpoints["elevation_m"], ls="none", marker="o",
                mfc="white", mec=COLOURS["knick"], mew=1.6, ms=7, label="knickpoint")
    if steepness_table is not None and len(steepness_table):
        med = float(np.nanmedian(steepness_table["ksn_m_per_m"]))
        ax.plot([], [], " ", label=f"median k_sn {med:.3g}")
    ax.set_xlabel(f"χ (m), θ = {theta:.2f}")
    ax.set_ylabel("elevation (m)")
    ax.set_xlim(left=0)
    ax.set_title(title or "χ–elevation", y=1.0)
    ax.legend(frameon=False, loc="upper left", fontsize=8)
    _style(ax)
    return fig


def plot_slope_area(area_m2, slope_m_per_m, fit=None, ax=None, bins=20, title=None):
    """Slope–area plot on log axes with log-bin medians and the fitted power law.

    Parameters
    ----------
    area_m2, slope_m_per_m : array_like
    fit : SlopeAreaFit, optional
        Drawn as a line with its parameters in the legend.
    ax : matplotlib Axes, optional
    bins : int
        Number of log-area bins for the medians (0: none).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = _axes(ax, "slope_area")
    a = np.asarray(area_m2, dtype=float)
    s = np.asarray(slope_m_per_m, dtype=float)
    ok = np.isfinite(a) & np.isfinite(s) & (a > 0) & (s > 0)
    a, s = a[ok], s[ok]
    if a.size:
        ax.plot(a, s, ls="none", marker="o", ms=1.7, mew=0, color=COLOURS["tributary"])
        ax.plot([], [], ls="none", marker="o", ms=4, color=COLOURS["tributary"],
                label="channel nodes")
        if bins:
            ba, bs = _log_bins(a, s, bins)
            if ba.size:
                ax.plot(ba, bs, ls="none", marker="s", ms=5, color=COLOURS["bins"],
                        label="median per area bin")
    if fit is not None and a.size:
        xa = np.logspace(np.log10(a.min()), np.log10(a.max()), 50)
        lo, hi = fit.concavity_ci
        ax.plot(xa, fit.predict(xa), color=COLOURS["fit"], lw=2,
                label=(f"fit S = {fit.steepness_index:.3g} A{_sup(-fit.concavity, '.3f')}, "
                       f"θ {lo:.2f} to {hi:.2f} ({100 * fit.confidence:.0f} %)"))
    ax.set_xscale("log")
    ax.set_yscale("log")
    from matplotlib.ticker import FuncFormatter, NullFormatter

    # powers of ten as plain text with superscripts (no math typesetting per label)
    ax.xaxis.set_major_formatter(FuncFormatter(_power_of_ten))
    ax.yaxis.set_major_formatter(FuncFormatter(_power_of_ten))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.yaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("upstream area (m²)")
    ax.set_ylabel("channel slope (m/m)")
    ax.set_title(title or "slope–area", y=1.0)
    ax.legend(frameon=False, loc="lower left", fontsize=8)
    _style(ax)
    return fig
