"""Choosing between the in-memory route and the route by tiles under a memory budget, and
the tile size that keeps the tiled path inside it.

Figures used (bench/RESULTS.md, "Fill and D8 directions by tiles" and "Tiled flow passes";
measured on the project's bench machine, process peak minus the process before any grid
was read):

- the in-memory route needs :data:`~basinkit.terrain.memory.ROUTE_BYTES_PER_CELL` bytes per
  cell of the grid at its peak, on top of what the process already holds (its imports and
  compiled kernels, about 200 MB);
- the tiled passes hold about :data:`TILE_BYTES_PER_CELL` bytes per cell of a tile (the tile
  with its ring, its local receivers and stack, its accumulation) in each worker thread, plus
  the border graphs on the client.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..terrain.memory import ROUTE_BYTES_PER_CELL, format_bytes

__all__ = ["TILE_BYTES_PER_CELL", "MIN_TILE", "DEFAULT_TILE", "GDAL_CACHE_MB", "PROGRAM_BYTES",
           "RoutePlan", "plan_route",
           "process_memory_bytes"]

#: working bytes per cell of a tile in one worker (bench/RESULTS.md: about 110-150 bytes per
#: tile cell above the imports at 512² and 1024² tiles; rounded up)
TILE_BYTES_PER_CELL = 160
#: smallest tile side chosen by the plan (a user may ask for smaller with ``tile_size``)
MIN_TILE = 256
#: tile side when no budget forces a smaller one; a multiple of the GeoTIFF block (256)
DEFAULT_TILE = 2048
_BLOCK = 256
#: GDAL's block cache while reading and writing by windows (MB; GDAL's default, 5 % of the
#: machine's memory, would otherwise fill with the blocks of every raster read or written)
GDAL_CACHE_MB = 64
#: what the process holds once the tiled path's libraries and compiled kernels are loaded
#: (bench/RESULTS.md: about 215 MB before any grid is read); the plan counts at least this
PROGRAM_BYTES = 220 * 2**20


def process_memory_bytes() -> int:
    """Resident memory of this process now (VmRSS), 0 where unknown."""
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


@dataclass(frozen=True)
class RoutePlan:
    """How ``basinkit route`` runs under a memory budget.

    Attributes
    ----------
    tiled : bool
        Route by tiles (True) or in memory.
    tile : int
        Tile side in cells (meaningful when ``tiled``).
    in_memory_bytes : int
        Estimated peak of the in-memory route (grid plus what the process holds).
    tiled_bytes : int
        Estimated peak of the tiled route with ``tile`` and ``workers``.
    budget : int or None
        The budget (bytes), None when none was given.
    reason : str
        One sentence for the console.
    """

    tiled: bool
    tile: int
    in_memory_bytes: int
    tiled_bytes: int
    budget: int | None
    reason: str


def plan_route(nrows: int, ncols: int, budget: int | None = None, *,
               tile_size: int | None = None, workers: int = 2,
               baseline: int | None = None) -> RoutePlan:
    """Choose the in-memory route or the route by tiles, and the tile side.

    Parameters
    ----------
    nrows, ncols : int
        The grid.
    budget : int, optional
        Bytes the process may use at its peak (``--max-memory``). Without one the grid is
        routed in memory unless ``tile_size`` is given.
    tile_size : int, optional
        Tile side asked for (``--tile-size``): routes by tiles with it, whatever the budget.
    workers : int
        Tiles worked on at once (threads of the local engine).
    baseline : int, optional
        What the process holds already (default: its resident memory now).

    Returns
    -------
    RoutePlan

    Examples
    --------
    >>> p = plan_route(40_000, 40_000, 2 * 10**9, baseline=200 * 2**20)
    >>> p.tiled, p.tile
    (True, 2048)
    >>> plan_route(1000, 1000, 2 * 10**9, baseline=200 * 2**20).tiled
    False
    """
    base = max(process_memory_bytes(), PROGRAM_BYTES) if baseline is None else int(baseline)
    cells = int(nrows) * int(ncols)
    in_mem = base + cells * ROUTE_BYTES_PER_CELL
    workers = max(1, int(workers))

    def tiled_need(t):
        return base + GDAL_CACHE_MB * 2**20 + workers * t * t * TILE_BYTES_PER_CELL

    if tile_size is not None:
        t = int(tile_size)
        return RoutePlan(True, t, in_mem, tiled_need(t), budget,
                         f"routing by tiles of {t} x {t} cells (--tile-size)")
    if budget is None or in_mem <= budget:
        why = ("the grid fits in memory" if budget is None else
               f"the in-memory route needs about {format_bytes(in_mem)}, within "
               f"--max-memory {format_bytes(budget)}")
        return RoutePlan(False, 0, in_mem, 0, budget, why)
    room = budget - base - GDAL_CACHE_MB * 2**20
    side = int(math.isqrt(max(room, 0) // (workers * TILE_BYTES_PER_CELL))) if room > 0 else 0
    side = min(side, DEFAULT_TILE, max(nrows, ncols))
    if side >= _BLOCK:
        side -= side % _BLOCK  # tiles on whole GeoTIFF blocks: windows written block by block
    side = max(side, MIN_TILE)
    reason = (f"the in-memory route would need about {format_bytes(in_mem)}, more than "
              f"--max-memory {format_bytes(budget)}: routing by tiles of {side} x {side} "
              f"cells (about {format_bytes(tiled_need(side))} at the peak with {workers} "
              "worker" + ("s" if workers != 1 else "") + ")")
    if tiled_need(side) > budget:
        reason += (f"; even the smallest tiles need more than the budget (this process "
                   f"already holds {format_bytes(base)})")
    return RoutePlan(True, side, in_mem, tiled_need(side), budget, reason)
