"""Reading a window of the grid out of a tile store: a tile with the 1-cell ring of its
neighbours, or any rectangle, assembled from the parts of the tiles it overlaps.

Only the overlapping part of each tile is copied; a store whose ``read`` takes ``mmap=True``
(the folder on disk) is read through a memory map, so a ring costs the pages of the border
rows and columns, not whole neighbour tiles.
"""

from __future__ import annotations

import functools
import inspect

import numpy as np

from .layout import TileLayout

__all__ = ["read_window", "ring_box", "ring_window", "has_layer", "reader"]


@functools.lru_cache(maxsize=None)
def _takes_mmap(kind) -> bool:
    try:
        return "mmap" in inspect.signature(kind.read).parameters
    except (TypeError, ValueError, AttributeError):
        return False


def reader(store):
    """``read(layer, ti, tj)`` of the store, through a memory map where it offers one."""
    if _takes_mmap(type(store)):
        return lambda layer, ti, tj: store.read(layer, ti, tj, mmap=True)
    return store.read


def read_window(layout: TileLayout, store, layer: str, r0: int, r1: int, c0: int, c1: int,
                dtype=None) -> np.ndarray:
    """Rows ``r0:r1`` and columns ``c0:c1`` of ``layer`` as one new array."""
    read = reader(store)
    out = None
    for ti in range(r0 // layout.tile_rows, (r1 - 1) // layout.tile_rows + 1):
        for tj in range(c0 // layout.tile_cols, (c1 - 1) // layout.tile_cols + 1):
            a = read(layer, ti, tj)
            tr0, tr1, tc0, tc1 = layout.window(ti, tj)
            if out is None:
                out = np.empty((r1 - r0, c1 - c0) + a.shape[2:], dtype=dtype or a.dtype)
            rs, re = max(r0, tr0), min(r1, tr1)
            cs, ce = max(c0, tc0), min(c1, tc1)
            out[rs - r0:re - r0, cs - c0:ce - c0] = a[rs - tr0:re - tr0, cs - tc0:ce - tc0]
    return out


def ring_box(layout: TileLayout, ti: int, tj: int):
    """The tile's window grown by one cell on each side that is not the grid edge:
    ``(r0, r1, c0, c1)`` in the grid and the tile's box ``(a0, a1, b0, b1)`` inside it."""
    r0, r1, c0, c1 = layout.window(ti, tj)
    w0, w1 = max(r0 - 1, 0), min(r1 + 1, layout.nrows)
    v0, v1 = max(c0 - 1, 0), min(c1 + 1, layout.ncols)
    return (w0, w1, v0, v1), (r0 - w0, r1 - w0, c0 - v0, c1 - v0)


def ring_window(layout: TileLayout, store, layer: str, ti: int, tj: int, dtype=None):
    """The tile with the 1-cell ring of its neighbours (see :func:`ring_box`)."""
    (w0, w1, v0, v1), _ = ring_box(layout, ti, tj)
    return read_window(layout, store, layer, w0, w1, v0, v1, dtype)


def has_layer(store, layer: str) -> bool:
    """Whether the store holds ``layer`` (judged by its first tile)."""
    return store.has(layer, 0, 0)
