"""Shared look of basinkit's figures: our own palette and small helpers."""

from __future__ import annotations

import threading
from contextlib import contextmanager

INK = "#1c2b36"
ACCENT = "#1f6f78"
DIVIDE = "#e07b24"
GIVEN = "#111111"
SNAPPED = "#c0392b"
BURNED = "#7a3db8"
MUTED = "#8c8c8c"
GRID = "#e6e6e6"
#: Channel colours by Strahler order, light (order 1) to dark.
ORDER_COLOURS = ["#7ccdf0", "#3fa9e0", "#1f82c8", "#1d5cae", "#1b3d8f", "#16246b",
                 "#0f1450", "#0b0633"]
#: Elevation tint under the hillshade, low to high.
TERRAIN_TINT = ["#5f8f6a", "#c9c08a", "#b08a64", "#efe9e0"]


def new_axes(ax, figsize, rect=None, kind=None):
    """``(figure, axes)``: the given axes and its figure, or a new bare Figure (no pyplot,
    no GUI backend) with one axes (at ``rect`` in figure fractions, if given); inside
    :func:`keeping_figures`, the figure of ``kind`` kept from its last drawing, cleared
    (:func:`kept_figure`)."""
    if ax is not None:
        return ax.figure, ax

    def make():
        from matplotlib.figure import Figure

        fig = Figure(figsize=figsize, dpi=100)
        if rect is not None:
            fig.add_axes(rect)
        else:
            fig.add_subplot(1, 1, 1)
        return fig

    fig = kept_figure((kind, tuple(figsize), None if rect is None else tuple(rect)), make)
    return fig, fig.axes[0]


# ---------------------------------------------------------------- kept figures
# Most of the time of drawing one of these figures goes to making it: the axes, and the
# tick objects matplotlib creates for every tick at the first drawing (each with its lines,
# label and marker styles; dozens on a log axis). A job draws the same few kinds of figure
# for many outlets, so inside ``keeping_figures()`` a plot function called without ``ax``
# draws on the figure of its kind kept from the last drawing in this thread, with every
# data artist, legend, text and limit of that drawing taken away: the ticks are made once.
# What a figure shows depends only on the plot call (tests/test_plot.py draws every kind
# fresh and after other data and compares the PNG bytes).

_KEPT = threading.local()


@contextmanager
def keeping_figures():
    """Within the block, plot functions called without ``ax`` reuse the figure kept for
    their kind (made on first use). The caller must be done with a figure (drawn it)
    before the next plot of the same kind: that one clears and reuses it."""
    depth = getattr(_KEPT, "depth", 0)
    _KEPT.depth = depth + 1
    try:
        yield
    finally:
        _KEPT.depth = depth


def kept_figure(key, make):
    """``make()``, or inside :func:`keeping_figures` the figure kept under ``key`` (a
    hashable naming the kind and layout) cleared by :func:`clear_figure`, made by
    ``make()`` the first time. ``key`` None: always ``make()``."""
    if key is None or key[0] is None or not getattr(_KEPT, "depth", 0):
        return make()
    figures = getattr(_KEPT, "figures", None)
    if figures is None:
        figures = _KEPT.figures = {}
    fig = figures.get(key)
    if fig is None:
        fig = figures[key] = make()
    else:
        clear_figure(fig)
    return fig


def release_kept_figure(fig):
    """Clear ``fig`` (:func:`clear_figure`) if it is one of this thread's kept figures, so
    that a kept figure holds no data (a map's relief image) between drawings."""
    if any(fig is f for f in getattr(_KEPT, "figures", {}).values()):
        clear_figure(fig)


def forget_kept_figures():
    """Drop the figures kept in this thread (the next ones are made anew)."""
    _KEPT.figures = {}


def clear_figure(fig):
    """Take away what a plot function drew on ``fig`` and leave its axes as new ones
    (scales, locators and formatters, limits, autoscaling, colour cycle, title, axis
    labels), keeping the axes and their tick objects. What a plot function sets on the
    axes besides (spines, grid, tick parameters) it must set the same way at every call."""
    from matplotlib.transforms import Bbox

    for ax in fig.axes:
        for c in list(ax.containers):
            c.remove()
        for a in (*ax.lines, *ax.collections, *ax.patches, *ax.texts, *ax.images,
                  *ax.artists, *ax.tables):
            a.remove()
        if ax.legend_ is not None:
            ax.legend_.remove()
        ax.title.set_text("")  # (the plot functions draw no left or right titles)
        ax.xaxis.label.set_text("")
        ax.yaxis.label.set_text("")
        # linear scales with their default locators and formatters, as on a new axes (a
        # log scale set again by the plot then autoscales as on a new axes)
        ax.set_xscale("linear")
        ax.set_yscale("linear")
        ax.relim()  # no data limits
        ax.viewLim.set_points(Bbox.unit().get_points())  # a new axes' (0, 1) limits
        # autoscaling on, as on a new axes, but not asked for: an axes that gets no data
        # keeps the (0, 1) limits, where an autoscale would make them ±0.05
        ax.set_autoscale_on(True)
        ax.set_prop_cycle(None)
    for a in (*fig.texts, *fig.legends, *fig.artists, *fig.patches, *fig.lines,
              *fig.images):
        a.remove()


def light_frame(ax):
    """Grid behind the data, no top or right spine."""
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    ax.grid(True, color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)

# Titles are placed with ``set_title(..., y=1.0)``: at the top of the axes plus the usual
# pad, as matplotlib would place them here (no ticks or offset text on top), without the
# automatic placement that lays out every tick label at each draw (costly on log axes).
