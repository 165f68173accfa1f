"""basinkit: watershed delineation and basin morphometry from DEMs.

The data path runs one way: read a DEM (:func:`read_dem`) into a :class:`Terrain`,
condition it (:func:`condition`), route flow (:func:`route`) into a :class:`FlowModel`, then
derive catchments, channels, profiles and morphometry from that model.
"""

__version__ = "0.1.0"

from .conditioning import ConditionSummary, condition, fill_depressions  # noqa: E402
from .errors import BasinkitError, InputError, MemoryBudgetError, OutputExistsError  # noqa
from .routing import FlowModel, load_flow, route  # noqa: E402
from .terrain import Terrain, read_dem, terrain_from_array  # noqa: E402

__all__ = [
    "__version__", "Terrain", "read_dem", "terrain_from_array", "condition",
    "fill_depressions", "ConditionSummary", "route", "FlowModel", "load_flow",
    "BasinkitError", "InputError", "MemoryBudgetError", "OutputExistsError",
]
