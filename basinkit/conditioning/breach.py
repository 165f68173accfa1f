"""Least-cost breaching of depressions (Lindsay 2016)."""

from __future__ import annotations

import math

import numpy as np

from . import _breach
from .fill import exit_cells
from ..errors import InputError
from ..terrain.model import Terrain

__all__ = ["breach_depressions"]


def _limit(value, what):
    if value is None:
        return math.inf
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number of metres, got {value!r}") from None
    if not v >= 0:
        raise InputError(f"{what} must be zero or positive, got {value!r}")
    return v


def breach_depressions(terrain: Terrain, max_depth: float | None = None,
                       max_length: float | None = None) -> Terrain:
    """Drain depressions by cutting channels through their rims instead of filling them.

    Every pit (a cell, or a set of connected equal-elevation cells, that is not an exit and
    has no lower neighbour) is drained along the least-cost path to the nearest cell that is
    lower than the pit, an exit (grid edge, next to nodata, base level) or on a channel cut
    earlier. The cost of a path is the sum of the heights above the pit of the cells it
    crosses, i.e. the depth of cut summed along the channel (Lindsay 2016). The cells of the
    path are lowered to the pit's elevation, so that the elevation along the channel never
    rises from the pit to its end; the channel is flat at the pit's level and drained by the
    flat resolution of :func:`basinkit.route`. Pits are handled from the lowest to the
    highest.

    Parameters
    ----------
    terrain : Terrain
    max_depth : float, optional
        Deepest cut allowed (m): cells more than this above the pit are never cut.
    max_length : float, optional
        Longest channel allowed (m): the distance on the ground between cell centres along
        the path from the pit to the cell it reaches (true distances from
        ``terrain.geometry``, also on geographic grids).

    Returns
    -------
    Terrain
        A copy with the breached elevation. Pits that cannot be breached within the limits
        are left as they are; :func:`basinkit.condition` (``method="breach"``) fills them
        afterwards.

    Notes
    -----
    Deterministic: ties in cost go to the shorter path, then to the lower cell index. The
    length limit is applied to the least-cost path as the search grows, so a pit may be
    left unbreached although some costlier path within the length exists. Each search
    costs O(m log m) for the m cells it visits; the limits bound m.

    References
    ----------
    Lindsay, J. B. (2016). Efficient hybrid breaching-filling sink removal methods for flow
    path enforcement in digital elevation models. Hydrological Processes 30:846-857.

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array
    >>> from basinkit.conditioning.breach import breach_depressions
    >>> z = np.array([[9, 9, 9, 9, 9],
    ...               [9, 8, 8, 8, 9],
    ...               [9, 8, 2, 5, 1],
    ...               [9, 8, 8, 8, 9],
    ...               [9, 9, 9, 9, 9]], dtype=float)
    >>> breach_depressions(terrain_from_array(z)).elevation[2].tolist()
    [9.0, 8.0, 2.0, 2.0, 1.0]
    """
    depth = _limit(max_depth, "the maximum breach depth")
    length = _limit(max_length, "the maximum breach length")
    z = terrain.elevation.astype(np.float32, copy=True)
    exits = exit_cells(terrain)
    dist = np.ascontiguousarray(terrain.geometry.neighbour_distances(), dtype=np.float64)
    _breach.breach(z, terrain.valid, exits, dist, depth, length)
    return terrain.with_elevation(z)
