"""The design-storm figure: hyetograph on top (rainfall and the part that runs off), design
hydrograph below with the peak, the lag and the recession marked and the base flow shaded.

Like every function in :mod:`basinkit.plot` it takes axes or makes a bare Figure (no
pyplot, no backend chosen) and returns the figure.
"""

from __future__ import annotations

import numpy as np

from ._style import kept_figure

__all__ = ["plot_design_hydrograph", "flood_window", "COLOURS"]

COLOURS = {"rain": "#9ab7d3", "excess": "#2f5d8a", "flow": "#23395b", "direct": "#5b7fa6",
           "base": "#d9cfa8", "peak": "#b5533c", "lag": "#3c6e71", "recession": "#8a6d3b"}


def _style(ax):
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    ax.grid(True, color="#e6e6e6", linewidth=0.6)
    ax.set_axisbelow(True)


def _axes(ax):
    """(figure, rain axes, flow axes) from None, a pair of axes or one axes."""
    if ax is None:
        def make():
            from matplotlib.figure import Figure

            fig = Figure(figsize=(8.0, 5.6), dpi=120)
            gs = fig.add_gridspec(2, 1, height_ratios=(1, 2.6), hspace=0.08)
            flow = fig.add_subplot(gs[1])
            fig.add_subplot(gs[0], sharex=flow)
            return fig

        fig = kept_figure(("design_hydrograph",), make)  # (keeping_figures: a kept one)
        flow, rain = fig.axes
        return fig, rain, flow, "new"
    if isinstance(ax, (tuple, list)):
        rain, flow = ax
        return flow.figure, rain, flow, "pair"
    rain = ax.twinx()  # one axes: the hyetograph hangs from the top on its own scale
    return ax.figure, rain, ax, "twin"


def _value(summary, key, default):
    if summary is None:
        return default
    try:
        v = summary[key]
    except (KeyError, IndexError, TypeError):
        return default
    v = float(v)
    return v if np.isfinite(v) else default


def plot_design_hydrograph(hydrograph, summary=None, ax=None, title=None, xlim_h=None):
    """Hyetograph and design hydrograph of one outlet.

    Parameters
    ----------
    hydrograph : pandas.DataFrame
        One outlet's rows of :attr:`basinkit.hydrology.design.DesignFlows.hydrographs`
        (``time_h, rainfall_in_step_mm, excess_in_step_mm, direct_runoff_m3_per_s,
        base_flow_m3_per_s, discharge_m3_per_s``).
    summary : mapping, optional
        The outlet's ``nrcs_unit_hydrograph`` row of the design-flow table (peak, lag,
        rain centroid); computed from ``hydrograph`` when absent.
    ax : matplotlib Axes or (Axes, Axes), optional
        None: a new figure with the hyetograph above the hydrograph; a pair: (hyetograph
        axes, hydrograph axes); one Axes: the hydrograph on it and the hyetograph hanging
        from the top on a twin axis.
    title : str, optional
    xlim_h : (float, float) or "all", optional
        Time window to show. Default: the flood itself -- from the rain centroid or the
        rise of the hydrograph (5 % of the peak above base flow), whichever is earlier, to
        the end of the recession (5 % again), with a margin; on a small catchment under a
        24-hour storm the whole storm would squeeze the hydrograph into a spike. The figure
        then says what part of the storm it shows. ``"all"``: the whole storm.

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, rain_ax, ax, layout = _axes(ax)
    t = hydrograph["time_h"].to_numpy(float)
    q = hydrograph["discharge_m3_per_s"].to_numpy(float)
    base = hydrograph["base_flow_m3_per_s"].to_numpy(float)
    rain = hydrograph["rainfall_in_step_mm"].to_numpy(float)
    excess = hydrograph["excess_in_step_mm"].to_numpy(float)
    step = float(t[1] - t[0]) if t.size > 1 else 1.0
    # ---- hyetograph (depth in each step, drawn over the step)
    # one filled step outline each (a bar per step would be thousands of patches; a
    # polygon collection, not a step patch, whose limits matplotlib walks segment by segment)
    edges = np.append(t, t[-1] + step) if t.size else np.array([0.0, step])
    for depth, colour, label in ((rain, COLOURS["rain"], "rainfall"),
                                 (excess, COLOURS["excess"], "excess (runs off)")):
        rain_ax.fill_between(edges, np.append(depth, depth[-1:]) if depth.size else [0, 0],
                             step="post", color=colour, label=label, linewidth=0)
    # hangs from the top (over the upper third of a shared axes)
    rain_ax.set_ylim(max(rain.max(), 1e-9) * (3.0 if layout == "twin" else 1.15), 0)
    rain_ax.set_ylabel(f"rain per {step * 60:.3g} min (mm)")
    rain_ax.legend(frameon=False, fontsize=8,
                   loc="center right" if layout == "twin" else "lower right")
    # ---- hydrograph
    k = int(np.argmax(q))
    qpk = _value(summary, "peak_discharge_m3_per_s", float(q[k]))
    tpk = _value(summary, "time_to_peak_h", float(t[k]))
    ax.fill_between(t, 0, base, color=COLOURS["base"], alpha=0.8, linewidth=0,
                    label=f"base flow ({base.max():.3g} m³/s)" if base.max() > 0
                    else "base flow (none)")
    ax.plot(t[:k + 1], q[:k + 1], color=COLOURS["flow"], lw=1.8, label="design hydrograph")
    ax.plot(t[k:], q[k:], color=COLOURS["recession"], lw=1.8, label="recession limb")
    ax.plot([tpk], [qpk], marker="o", color=COLOURS["peak"], ms=7, ls="none")
    ax.annotate(f"peak {qpk:.3g} m³/s\nat {tpk:.2f} h", (tpk, qpk), xytext=(12, -4),
                textcoords="offset points", fontsize=8, color=COLOURS["peak"], va="top",
                bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.85))
    # lag: from the rainfall centroid to the peak
    mids = t + step / 2
    c_rain = _value(summary, "rain_centroid_h",
                    float(np.sum(rain * mids) / rain.sum()) if rain.sum() > 0 else np.nan)
    if np.isfinite(c_rain):
        y = 0.55 * qpk
        ax.annotate("", xy=(tpk, y), xytext=(c_rain, y),
                    arrowprops=dict(arrowstyle="<->", color=COLOURS["lag"], lw=1.2))
        ax.axvline(c_rain, color=COLOURS["lag"], lw=0.8, ls=":")
        ax.annotate(f"lag {tpk - c_rain:.2f} h\n(rain centroid to peak)", (max(c_rain, tpk), y),
                    xytext=(8, 0), textcoords="offset points", color=COLOURS["lag"],
                    fontsize=8, ha="left", va="center",
                    bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.85))
        rain_ax.axvline(c_rain, color=COLOURS["lag"], lw=0.8, ls=":")
    ax.set_ylim(0, qpk * 1.15 if qpk > 0 else 1.0)
    ax.set_xlabel("time from the start of the storm (h)")
    ax.set_ylabel("discharge (m³/s)")
    ax.legend(frameon=False, fontsize=8, loc="upper right")
    full = (0.0, float(t[-1] + step)) if t.size else (0.0, step)
    window = full if xlim_h == "all" else (xlim_h if xlim_h is not None else
                                           flood_window(t, q - base, c_rain, step))
    ax.set_xlim(*window)
    if tuple(window) != full and xlim_h is None:
        ax.text(0.01, 0.98, f"shown: {window[0]:.1f}–{window[1]:.1f} h of a storm and "
                f"hydrograph lasting {full[1]:.1f} h", transform=ax.transAxes, fontsize=7,
                color="#666666", va="top", ha="left")
    if layout == "new":
        rain_ax.tick_params(labelbottom=False)
        fig.text(0.01, 0.005, "Planning-level estimate: follow the local drainage manual; "
                 "design is the work of a licensed professional.", fontsize=6.5,
                 color="#666666", ha="left", va="bottom")
    for a in (ax, rain_ax):
        _style(a)
    (ax if layout == "twin" else rain_ax).set_title(title or "design storm and hydrograph",
                                                    fontsize=10, y=1.0)
    return fig


def flood_window(t, direct, rain_centroid=np.nan, step=1.0, fraction=0.05):
    """The time window of a flood: from the rain centroid or the first time the direct
    runoff exceeds ``fraction`` of its peak, whichever is earlier, to the last time it
    does, widened by a fifth on each side and clipped to the record.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(0, 24, 0.1)
    >>> q = np.exp(-((t - 12.5) / 0.5) ** 2)
    >>> lo, hi = flood_window(t, q, rain_centroid=12.0, step=0.1)
    >>> bool(10.5 < lo < 11.5 and 13.5 < hi < 14.5)
    True
    """
    t = np.asarray(t, float)
    direct = np.asarray(direct, float)
    end = float(t[-1] + step) if t.size else step
    if not t.size or not np.nanmax(direct) > 0:
        return 0.0, end
    above = np.flatnonzero(direct >= fraction * np.nanmax(direct))
    lo, hi = float(t[above[0]]), float(t[above[-1]] + step)
    if np.isfinite(rain_centroid):
        lo = min(lo, float(rain_centroid))
    pad = 0.2 * (hi - lo)
    return max(0.0, lo - pad), min(end, hi + pad)
