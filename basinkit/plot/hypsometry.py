"""The hypsometric curve of a catchment: relative height h/H against the relative area
above it a/A.

References
----------
Strahler, A. N. (1952). Hypsometric (area-altitude) analysis of erosional topography.
Geological Society of America Bulletin 63:1117-1142.
"""

from __future__ import annotations

import numpy as np

from . import _style as S

__all__ = ["plot_hypsometric_curve"]


def plot_hypsometric_curve(curve, ax=None, *, integral=None, label=None, title=None):
    """Plot one hypsometric curve with the straight line of integral 0.5 for reference.

    Parameters
    ----------
    curve : pandas.DataFrame or mapping
        Columns ``relative_area_above`` and ``relative_height`` (each 0 to 1), e.g. the rows
        of one outlet in ``hypsometry.csv``.
    ax : matplotlib Axes, optional
        Draw into this axes; default: a new figure.
    integral : float, optional
        The hypsometric integral, quoted in the legend.
    label : str, optional
        Name of the curve in the legend (e.g. the outlet id).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import pandas as pd
    >>> c = pd.DataFrame({"relative_height": [0, 0.5, 1], "relative_area_above": [1, .3, 0]})
    >>> fig = plot_hypsometric_curve(c, integral=0.4, label="a")
    >>> fig.axes[0].get_xlabel()
    'relative area above, a/A (–)'
    """
    fig, ax = S.new_axes(ax, (5.4, 3.5), [0.13, 0.15, 0.83, 0.75],
                          kind="hypsometric_curve")
    a = np.asarray(curve["relative_area_above"], dtype=float)
    h = np.asarray(curve["relative_height"], dtype=float)
    text = label or "catchment"
    if integral is not None and np.isfinite(integral):
        text = f"{text}: integral {integral:.3f}"
    ax.fill_between(a, h, color=S.ACCENT, alpha=0.18, lw=0)
    ax.plot(a, h, color=S.ACCENT, lw=2, label=text)
    ax.plot([0, 1], [1, 0], color=S.MUTED, lw=1, ls=":", label="integral 0.5")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_xlabel("relative area above, a/A (–)")
    ax.set_ylabel("relative height, h/H (–)")
    ax.set_title(title or "Hypsometric curve", y=1.0)
    ax.legend(frameon=False, fontsize=8, loc="upper right")
    S.light_frame(ax)
    return fig
