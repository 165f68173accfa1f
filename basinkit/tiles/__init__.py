"""The tiles room: the same algorithms as conditioning/ and routing/, run tile by tile so
that a grid larger than memory can be filled, routed and delineated (Barnes 2016, 2017).

The algorithms here take a :class:`TileLayout` and a tile store (any object with
``has``/``read``/``write``/``read_meta``/``write_meta``, see :class:`MemoryTiles`); they never
open files themselves. The store on disk, written atomically and resumable, is
:class:`basinkit.io.tile_folder.TileFolder`.
"""

from .layout import MemoryTiles, TileLayout

# the flow passes load numba kernels: imported on first use
_LAZY = {
    "flow_accumulation": ".accumulate",
    "catchment_labels": ".labels",
    "TiledCatchments": ".labels",
    "channel_orders": ".channels",
    "catchment_table": ".tables",
    "catchment_polygons": ".polygons",
    "channel_segments": ".segments",
    "Engine": ".engine",
}

__all__ = ["MemoryTiles", "TileLayout", *_LAZY]


def __getattr__(name):
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
