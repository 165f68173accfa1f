"""A figure as compact PNG bytes: drawn once with Agg, reduced to a palette of at most 256
colours (these plots and maps hold far fewer distinct colours than that, so the loss is
not visible), written without a date so that the same figure gives the same bytes.

The palette PNG is about a third of the bytes of a full-colour one and is faster to
compress; the steps write their figures with it and the report embeds those files.

:func:`plot_png` draws a plot function's figure on the figure kept for its kind
(:func:`basinkit.plot._style.keeping_figures`): a job draws the same kinds for many
outlets, and making the axes and their ticks is most of a drawing's time."""

from __future__ import annotations

import io

__all__ = ["figure_png", "plot_png", "FIGURE_DPI"]

#: Resolution of the figures the steps write and the report embeds.
FIGURE_DPI = 100


def figure_png(fig, dpi: int = FIGURE_DPI, colours: int = 256,
               method: str = "octree", cached_text: bool = True) -> bytes:
    """PNG bytes of a matplotlib figure, with a palette of ``colours`` colours (0: full
    colour) and ``dpi`` recorded in the file.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    dpi : int
        Pixels per inch (a 7.5 × 4.5 inch figure at 100 dpi is 750 × 450 pixels).
    colours : int
        Size of the adaptive palette (at most 256); 0 keeps full colour (RGB).
    method : {"octree", "mediancut"}
        How the palette is chosen: ``octree`` (fast; keeps the colours of small markers
        over a shaded relief) or ``mediancut`` (slower; merges rare colours into common
        ones).
    cached_text : bool
        Draw text through the per-process font, layout and glyph caches
        (:mod:`basinkit.plot._agg_text`: the same pixels, faster); false: matplotlib's own
        Agg canvas.

    Returns
    -------
    bytes

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> fig = Figure(figsize=(2, 1))
    >>> _ = fig.add_subplot().plot([0, 1], [1, 0])
    >>> figure_png(fig, dpi=50)[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
    True
    """
    from PIL import Image

    from ._agg_text import agg_canvas

    if not 0 <= int(colours) <= 256:
        raise ValueError("colours must be 0 to 256")
    fig.set_dpi(dpi)
    # a kept figure keeps its canvas (and the canvas its renderer, cleared at each draw)
    canvas = agg_canvas(fig, cached_text)
    canvas.draw()
    w, h = canvas.get_width_height(physical=True)
    # RGB from the RGBA buffer in one pass of Pillow (not a strided numpy copy)
    im = Image.frombuffer("RGBA", (w, h), canvas.buffer_rgba(), "raw", "RGBA", 0,
                          1).convert("RGB")
    if colours:
        how = {"octree": Image.Quantize.FASTOCTREE,
               "mediancut": Image.Quantize.MEDIANCUT}[method]
        im = im.quantize(colors=int(colours), method=how, dither=Image.Dither.NONE)
    buf = io.BytesIO()
    im.save(buf, format="PNG", compress_level=6, dpi=(dpi, dpi))
    return buf.getvalue()


def plot_png(plot, *args, dpi: int = FIGURE_DPI, colours: int = 256, **kwargs) -> bytes:
    """PNG bytes (:func:`figure_png`) of ``plot(*args, **kwargs)``, a function of
    :mod:`basinkit.plot` called without ``ax``, drawn on the figure kept for its kind in
    this thread: the same bytes as on a new figure, whatever was drawn before.

    Examples
    --------
    >>> import pandas as pd
    >>> from basinkit.plot.hypsometry import plot_hypsometric_curve
    >>> c = pd.DataFrame({"relative_height": [0, 0.5, 1], "relative_area_above": [1, .3, 0]})
    >>> plot_png(plot_hypsometric_curve, c, label="a") == figure_png(
    ...     plot_hypsometric_curve(c, label="a"))
    True
    """
    from ._style import keeping_figures, release_kept_figure

    with keeping_figures():
        fig = plot(*args, **kwargs)
        try:
            return figure_png(fig, dpi=dpi, colours=colours)
        finally:
            release_kept_figure(fig)  # nothing of this plot's data kept until the next
