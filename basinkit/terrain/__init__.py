"""The terrain room: :class:`Terrain` (elevation, validity, georeferencing) and its cell
geometry (true dx, dy, diagonals and cell areas; per row on geographic grids)."""

from .model import Terrain, terrain_from_array

__all__ = ["Terrain", "terrain_from_array"]
