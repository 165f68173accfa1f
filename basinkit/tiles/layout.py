"""How a grid is cut into tiles, and the in-memory tile store.

A grid of ``nrows`` × ``ncols`` cells is cut into tiles of ``tile_rows`` × ``tile_cols``
cells, row-major; the last row and column of tiles may be smaller (tiles need not divide the
grid). A tile is named by its tile row and column ``(ti, tj)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: neighbour offsets in the package's order N, NE, E, SE, S, SW, W, NW (azimuth 45·k)
DROW = (-1, -1, 0, 1, 1, 1, 0, -1)
DCOL = (0, 1, 1, 1, 0, -1, -1, -1)


@dataclass(frozen=True)
class TileLayout:
    """The cut of an ``nrows`` × ``ncols`` grid into tiles of ``tile_rows`` × ``tile_cols``."""

    nrows: int
    ncols: int
    tile_rows: int
    tile_cols: int

    def __post_init__(self):
        for name in ("nrows", "ncols", "tile_rows", "tile_cols"):
            if int(getattr(self, name)) < 1:
                raise ValueError(f"{name} must be at least 1, got {getattr(self, name)}")

    @classmethod
    def square(cls, nrows: int, ncols: int, tile: int) -> "TileLayout":
        """Tiles of ``tile`` × ``tile`` cells."""
        return cls(int(nrows), int(ncols), int(tile), int(tile))

    @property
    def n_tile_rows(self) -> int:
        return -(-self.nrows // self.tile_rows)

    @property
    def n_tile_cols(self) -> int:
        return -(-self.ncols // self.tile_cols)

    @property
    def shape(self) -> tuple[int, int]:
        """The grid's shape in cells."""
        return (self.nrows, self.ncols)

    def tiles(self) -> list[tuple[int, int]]:
        """Every tile, row-major."""
        return [(ti, tj) for ti in range(self.n_tile_rows) for tj in range(self.n_tile_cols)]

    def window(self, ti: int, tj: int) -> tuple[int, int, int, int]:
        """The tile's rows ``r0:r1`` and columns ``c0:c1`` in the grid."""
        if not (0 <= ti < self.n_tile_rows and 0 <= tj < self.n_tile_cols):
            raise IndexError(f"tile ({ti}, {tj}) is outside a {self.n_tile_rows}×{self.n_tile_cols} layout")
        r0 = ti * self.tile_rows
        c0 = tj * self.tile_cols
        return r0, min(r0 + self.tile_rows, self.nrows), c0, min(c0 + self.tile_cols, self.ncols)

    def tile_shape(self, ti: int, tj: int) -> tuple[int, int]:
        r0, r1, c0, c1 = self.window(ti, tj)
        return (r1 - r0, c1 - c0)

    def tile_of(self, r: int, c: int) -> tuple[int, int]:
        """The tile holding grid cell (r, c)."""
        return (int(r) // self.tile_rows, int(c) // self.tile_cols)

    def neighbours(self, ti: int, tj: int):
        """``(k, ti2, tj2)`` for each of the up to eight tiles around (ti, tj), k in the
        package's neighbour order."""
        for k in range(8):
            a, b = ti + DROW[k], tj + DCOL[k]
            if 0 <= a < self.n_tile_rows and 0 <= b < self.n_tile_cols:
                yield k, a, b

    def to_dict(self) -> dict:
        return {"nrows": self.nrows, "ncols": self.ncols,
                "tile_rows": self.tile_rows, "tile_cols": self.tile_cols}

    @classmethod
    def from_dict(cls, d: dict) -> "TileLayout":
        return cls(int(d["nrows"]), int(d["ncols"]), int(d["tile_rows"]), int(d["tile_cols"]))

    def split(self, grid: np.ndarray) -> dict[tuple[int, int], np.ndarray]:
        """A whole grid cut into copies of its tiles (for tests and small grids)."""
        if grid.shape[:2] != self.shape:
            raise ValueError(f"grid of shape {grid.shape} does not match the layout {self.shape}")
        out = {}
        for t in self.tiles():
            r0, r1, c0, c1 = self.window(*t)
            out[t] = np.array(grid[r0:r1, c0:c1])
        return out

    def join(self, tiles: dict[tuple[int, int], np.ndarray]) -> np.ndarray:
        """The tiles put back into one grid (for tests and small grids)."""
        first = tiles[(0, 0)]
        out = np.empty(self.shape + first.shape[2:], dtype=first.dtype)
        for t in self.tiles():
            r0, r1, c0, c1 = self.window(*t)
            out[r0:r1, c0:c1] = tiles[t]
        return out


class MemoryTiles:
    """A tile store in memory: layers of per-tile arrays plus small metadata objects.

    The algorithms in this room talk to a store only through these five methods, so the
    store on disk (:class:`basinkit.io.tile_folder.TileFolder`) can stand in for it.
    """

    def __init__(self, layout: TileLayout):
        self.layout = layout
        self._arrays: dict[tuple[str, int, int], np.ndarray] = {}
        self._meta: dict[str, object] = {}

    def has(self, layer: str, ti: int, tj: int) -> bool:
        return (layer, ti, tj) in self._arrays

    def read(self, layer: str, ti: int, tj: int) -> np.ndarray:
        try:
            return self._arrays[(layer, ti, tj)]
        except KeyError:
            raise KeyError(f"tile ({ti}, {tj}) of layer {layer!r} has not been written") from None

    def write(self, layer: str, ti: int, tj: int, array: np.ndarray) -> None:
        expected = self.layout.tile_shape(ti, tj)
        if array.shape[:2] != expected:
            raise ValueError(f"tile ({ti}, {tj}) of layer {layer!r} has shape {array.shape}, expected {expected}")
        self._arrays[(layer, ti, tj)] = np.array(array)

    def has_meta(self, name: str) -> bool:
        return name in self._meta

    def read_meta(self, name: str):
        return self._meta[name]

    def write_meta(self, name: str, obj) -> None:
        self._meta[name] = obj
