"""Figures of basin morphometry: the hypsometric curve. Each function takes ``ax=None`` (a
new figure when None) and returns the figure."""

from __future__ import annotations

import numpy as np

__all__ = ["plot_hypsometric_curve"]


def plot_hypsometric_curve(curve, ax=None, label="catchment", integral=None):
    """The hypsometric curve (Strahler 1952): relative height h/H against the relative area
    above a/A, with the integral in the legend and the straight line of integral 0.5 for
    reference.

    Parameters
    ----------
    curve : pandas.DataFrame
        Columns ``relative_area_above`` and ``relative_height`` (as from
        :func:`basinkit.analysis.morphometry.hypsometric_curve`).
    ax : matplotlib Axes, optional
    label : str
    integral : float, optional
        The hypsometric integral, shown in the legend.

    Returns
    -------
    matplotlib.figure.Figure

    References
    ----------
    Strahler, A. N. (1952). Hypsometric (area-altitude) analysis of erosional topography.
    Geological Society of America Bulletin 63:1117-1142.
    """
    if ax is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(5, 4.5), dpi=100)
        ax = fig.add_subplot(1, 1, 1)
        fig.subplots_adjust(left=0.13, right=0.96, bottom=0.12, top=0.92)
    text = label + (f" (integral {integral:.3f})" if integral is not None
                    and np.isfinite(integral) else "")
    ax.plot(curve["relative_area_above"], curve["relative_height"], lw=2, label=text)
    ax.plot([0, 1], [1, 0], ls=":", lw=1, color="0.5", label="integral 0.5 (reference)")
    ax.set_xlabel("relative area above, a/A (–)")
    ax.set_ylabel("relative height, h/H (–)")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_title("Hypsometric curve")
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)
    return ax.figure
