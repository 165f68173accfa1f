"""What depression filling changed, summed by catchment label from tiles: the numbers behind
delineate's ``filled_volume_m3``, ``filled_cell_fraction`` and ``filled_depth_max_m``.

Layers read: the labels of :func:`basinkit.tiles.catchment_labels`, a filled surface, the
elevations as read, and ``directions`` (for nodata).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .accumulate import _check_layout
from .engine import Engine, open_store

__all__ = ["filled_by_label", "RAISED_M"]

#: a cell counts as raised when filling lifted it by more than this (m), as in memory
RAISED_M = 0.05


def _filled_task(spec, ti, tj, row_area, labels, filled, elevation, directions):
    store = open_store(spec)
    lab = np.asarray(store.read(labels, ti, tj)).astype(np.int64).ravel()
    valid = (np.asarray(store.read(directions, ti, tj)) != -32768).ravel()
    zf = np.asarray(store.read(filled, ti, tj), dtype=np.float64).ravel()
    z0 = np.asarray(store.read(elevation, ti, tj), dtype=np.float64).ravel()
    with np.errstate(invalid="ignore"):
        raised = np.where(valid, zf - z0, 0.0)
    raised = np.nan_to_num(np.maximum(raised, 0.0))
    w = lab.size // row_area.size
    area = np.repeat(row_area, w)
    keys, inv = np.unique(lab, return_inverse=True)
    vol = np.bincount(inv, weights=raised * area, minlength=keys.size)
    nraised = np.bincount(inv, weights=(raised > RAISED_M).astype(np.float64),
                          minlength=keys.size)
    ncells = np.bincount(inv, weights=valid.astype(np.float64), minlength=keys.size)
    deep = np.zeros(keys.size)
    np.maximum.at(deep, inv, raised)
    return keys, vol, nraised, ncells, deep


def filled_by_label(layout, store, catchments, row_area, *, filled: str = "filled",
                    elevation: str = "elevation", directions: str = "directions",
                    scheduler=None, workers: int | None = None):
    """Per sub-catchment label: the filled volume (m³), the cells raised by more than
    :data:`RAISED_M`, the valid cells and the deepest fill (m).

    Parameters
    ----------
    layout : TileLayout
    store : tile store
        Holding the labels (``catchments.layer``), ``filled``, ``elevation`` and
        ``directions``.
    catchments : TiledCatchments
    row_area : array of float (nrows,)
        Cell area of each row, m².
    scheduler, workers
        See :func:`basinkit.tiles.flow_accumulation`.

    Returns
    -------
    (vol, nraised, ncells, deep) : arrays of float (n + 1,), indexed by label
        As the in-memory delineate sums them over the whole grid; the volume is the same
        sum in another order (equal within rounding; see :func:`flow_accumulation`).
    """
    _check_layout(layout, store)
    row_area = np.ascontiguousarray(row_area, dtype=np.float64)
    if row_area.shape != (layout.nrows,):
        raise InputError(f"row_area needs one cell area per row ({layout.nrows}), got shape "
                         f"{row_area.shape}")
    n = catchments.subtree_size.size - 1
    out = [np.zeros(n + 1) for _ in range(4)]

    def rows(ti, tj):
        r0, r1, _, _ = layout.window(ti, tj)
        return row_area[r0:r1]

    with Engine(scheduler, workers) as eng:
        parts = eng.map(_filled_task, eng.spec(store),
                        [(ti, tj, (rows(ti, tj),)) for ti, tj in layout.tiles()],
                        shared=(catchments.layer, filled, elevation, directions))
    vol, nraised, ncells, deep = out
    for keys, v, r, c, d in parts:
        if keys.size and keys.max() > n:
            raise InputError(f"the {catchments.layer!r} layer holds labels the outlets do not "
                             "have; label the catchments again")
        vol[keys] += v
        nraised[keys] += r
        ncells[keys] += c
        deep[keys] = np.maximum(deep[keys], d)
    return vol, nraised, ncells, deep
