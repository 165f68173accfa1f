"""Shared look of basinkit's figures: our own palette and small helpers."""

from __future__ import annotations

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


def new_axes(ax, figsize, rect=None):
    """``(figure, axes)``: the given axes and its figure, or a new bare Figure (no pyplot,
    no GUI backend) with one axes (at ``rect`` in figure fractions, if given)."""
    if ax is not None:
        return ax.figure, ax
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, dpi=100)
    ax = fig.add_axes(rect) if rect is not None else fig.add_subplot(1, 1, 1)
    return fig, ax


def light_frame(ax):
    """Grid behind the data, no top or right spine."""
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    ax.grid(True, color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)

# Titles are placed with ``set_title(..., y=1.0)``: at the top of the axes plus the usual
# pad, as matplotlib would place them here (no ticks or offset text on top), without the
# automatic placement that lays out every tick label at each draw (costly on log axes).
