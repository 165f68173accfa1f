"""The conditioning room: Priority-Flood filling and flats, least-cost breaching and line
burning, so that every cell drains to an exit. Numba kernels live in the private modules."""

from .condition import condition
from .fill import ConditionSummary, exit_cells, fill_depressions

__all__ = ["condition", "fill_depressions", "ConditionSummary", "exit_cells"]
