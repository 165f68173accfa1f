"""Distributions of a descriptor over many catchments: histograms with the median marked."""

from __future__ import annotations

import numpy as np

from . import _style as S

__all__ = ["plot_histogram", "histogram_bins"]


def histogram_bins(values, bins=30, log=False):
    """Bin edges for ``values`` (finite ones; positive ones when ``log``): ``bins`` equal
    steps of the value or of its logarithm. None when nothing can be binned.

    >>> histogram_bins([1, 10, 100], bins=2, log=True).round(6).tolist()
    [1.0, 10.0, 100.0]
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & ((v > 0) if log else True)]
    if v.size == 0:
        return None
    lo, hi = float(v.min()), float(v.max())
    if log:
        lo, hi = np.log10(lo), np.log10(hi)
    if hi <= lo:
        pad = 0.5 if lo == 0 else abs(lo) * 0.05
        lo, hi = lo - pad, hi + pad
    edges = np.linspace(lo, hi, int(bins) + 1)
    return 10.0 ** edges if log else edges


def plot_histogram(values, ax=None, *, bins=None, log=False, xlabel=None, title=None):
    """Histogram of a per-catchment value, its median marked with a dashed line.

    Parameters
    ----------
    values : array_like
        One value per catchment; NaN (and, with ``log``, values ≤ 0) are left out and
        counted in the title, beside the median (also drawn as a dashed line).
    ax : matplotlib Axes, optional
        Draw into this axes; default: a new figure.
    bins : int, optional
        Number of equal bins (equal in the logarithm with ``log``); default about twice the
        square root of the number of values, 5 to 30.
    log : bool
        Logarithmic value axis (areas spanning several orders of magnitude).
    xlabel, title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = S.new_axes(ax, (3.6, 2.6))
    v = np.asarray(values, dtype=float)
    ok = np.isfinite(v) & ((v > 0) if log else True)
    if bins is None:  # about two bins per square root of the count, 5 to 30
        bins = int(np.clip(2 * np.sqrt(max(int(ok.sum()), 1)), 5, 30))
    edges = histogram_bins(v, bins, log)
    t = [title] if title else []
    if edges is not None:
        ax.hist(v[ok], bins=edges, color=S.ACCENT, alpha=0.75, edgecolor="white",
                linewidth=0.4)
        med = float(np.median(v[ok]))
        ax.axvline(med, color=S.INK, lw=1.2, ls="--")
        t.append(f"median {med:.3g}")
    else:
        ax.text(0.5, 0.5, "no values", transform=ax.transAxes, ha="center", va="center",
                color=S.MUTED)
    if log:
        from matplotlib.ticker import LogFormatterSciNotation, NullFormatter

        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(LogFormatterSciNotation(labelOnlyBase=True))
        ax.xaxis.set_minor_formatter(NullFormatter())
    left_out = int((~ok).sum())
    if left_out:
        t.append(f"{left_out} without a value")
    ax.set_title(", ".join(t), fontsize=8.5, y=1.0)
    if xlabel:
        ax.set_xlabel(xlabel, fontsize=8)
    ax.set_ylabel("catchments", fontsize=8)
    ax.tick_params(labelsize=7)
    S.light_frame(ax)
    return fig
