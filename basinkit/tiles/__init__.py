"""The tiles room: the same algorithms as conditioning/ and routing/, run tile by tile so
that a grid larger than memory can be filled, routed and delineated (Barnes 2016, 2017).

The algorithms here take a :class:`TileLayout` and a tile store (any object with
``has``/``read``/``write``/``read_meta``/``write_meta``, see :class:`MemoryTiles`); they never
open files themselves. The store on disk, written atomically and resumable, is
:class:`basinkit.io.tile_folder.TileFolder`.
"""

from .layout import MemoryTiles, TileLayout

__all__ = ["MemoryTiles", "TileLayout"]
