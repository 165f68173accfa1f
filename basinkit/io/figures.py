"""Figures as files: PNG, SVG or PDF at a chosen resolution, byte for byte the same on every
run (no dates, no random ids in the file)."""

from __future__ import annotations

import io
from pathlib import Path

from ..errors import InputError

__all__ = ["FIGURE_FORMATS", "figure_bytes", "save_figure"]

#: Formats a figure can be written in, with the metadata keys that would hold a date (set
#: to None so that nothing changes from one run to the next).
FIGURE_FORMATS = {
    "png": {"Software": None},
    "svg": {"Date": None},
    "pdf": {"CreationDate": None, "ModDate": None},
}


def _format(fmt, path=None):
    if fmt is None and path is not None:
        fmt = Path(path).suffix.lstrip(".")
    fmt = (fmt or "png").lower()
    if fmt not in FIGURE_FORMATS:
        raise InputError(f"cannot write a figure as {fmt!r}; choose one of "
                         + ", ".join(FIGURE_FORMATS))
    return fmt


def figure_bytes(fig, format="png", dpi=150) -> bytes:  # noqa: A002 - matplotlib's name
    """A matplotlib Figure encoded as PNG, SVG or PDF.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        Any figure (a bare ``Figure`` needs no pyplot and no GUI backend).
    format : {"png", "svg", "pdf"}
    dpi : float
        Resolution: pixels per inch of the PNG (its size is the figure size times ``dpi``);
        for SVG and PDF the resolution of rasterised parts.

    Returns
    -------
    bytes
        The same bytes for the same figure on every call: dates are left out and SVG ids
        are derived from a fixed salt.

    Raises
    ------
    InputError
        Unknown format or a resolution that is not positive.
    """
    import matplotlib

    fmt = _format(format)
    if not (isinstance(dpi, (int, float)) and dpi > 0):
        raise InputError(f"the figure resolution must be a positive number of dots per "
                         f"inch, not {dpi!r}")
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.hashsalt": "basinkit", "pdf.compression": 6}):
        fig.savefig(buf, format=fmt, dpi=dpi, metadata=dict(FIGURE_FORMATS[fmt]))
    return buf.getvalue()


def save_figure(fig, path, format=None, dpi=150) -> Path:  # noqa: A002
    """Write a figure to ``path`` (temporary file, then rename); the format comes from
    ``format`` or the file's suffix (.png, .svg, .pdf). See :func:`figure_bytes`."""
    from .writers import atomic_path

    data = figure_bytes(fig, _format(format, path), dpi)
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(data)
    return Path(path)
