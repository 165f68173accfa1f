"""Figures of many outlets drawn in forked workers (matplotlib draws on one core; each
figure takes a tenth of a second or more), written in the order given. The workers are
those of :func:`~basinkit.workflow.parallel.map_outlets`: they end with this process, even
when it is killed (:mod:`basinkit._processes`)."""

from __future__ import annotations

__all__ = ["draw_pngs", "FIGURE_FORK_MIN_ITEMS"]

#: Figures drawn in this process below this many (a pool costs more than it saves).
FIGURE_FORK_MIN_ITEMS = 4


def _draw(job):
    import warnings

    from ...plot.png import plot_png

    name, plot, args, kwargs = job
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # empty legends: the figure says it
        return name, plot_png(plot, *args, **kwargs)  # on the figure kept for its kind


def draw_pngs(jobs, workers=2):
    """``[(name, PNG bytes)]`` of ``jobs`` = ``[(name, plot function, args, kwargs)]``;
    the plot functions are module-level (sent to the workers by name) and return a
    figure. The bytes do not depend on ``workers``."""
    from ..parallel import map_outlets

    return list(map_outlets(_draw, jobs, workers=workers,
                            min_items=FIGURE_FORK_MIN_ITEMS))
