"""basinkit: watershed delineation and basin morphometry from DEMs.

The data path runs one way: read a DEM (:func:`read_dem`) into a :class:`Terrain`,
condition it (:func:`condition`), route flow (:func:`route`) into a :class:`FlowModel`, then
derive catchments (:func:`delineate`), channels (:func:`extract_channels`), profiles
(:func:`longest_flow_path`, :func:`main_stem`, :func:`chi_transform`) and morphometry
(:func:`basin_morphometry`) from that model.

DEM-derived boundaries and flow paths are estimates: culverts, storm sewers and diversions
are represented only where burned in; verify in the field and defer to local codes and
licensed professional practice.
"""

__version__ = "0.1.0"

from .conditioning import ConditionSummary, condition, fill_depressions  # noqa: E402
from .errors import (BasinkitError, InputError, MemoryBudgetError,  # noqa: E402
                     OutletError, OutputExistsError)
from .routing import FlowModel, load_flow, route  # noqa: E402
from .terrain import Terrain, read_dem, terrain_from_array  # noqa: E402

# loaded on first use, so that importing basinkit (and starting the CLI) stays quick
_LAZY = {
    "breach_depressions": "breaching",
    "burn_lines": "burning",
    "delineate": "catchments",
    "Delineation": "catchments",
    "prepare_outlets": "outlets",
    "read_outlet_file": "outlets",
    "contributing_fraction": "contributing",
    "contributing_area_m2": "contributing",
    "extract_channels": "channels",
    "ChannelNetwork": "channels",
    "constant_drop_test": "channels",
    "basin_morphometry": "morphometry",
    "morphometry_table": "morphometry",
    "longest_flow_path": "profiles",
    "main_stem": "profiles",
    "channel_profiles": "profiles",
    "chi_transform": "profiles",
    "fit_concavity": "profiles",
    "steepness": "profiles",
    "find_knickpoints": "profiles",
    "slope_area_fit": "profiles",
    "hack_law_fit": "profiles",
    "read_job": "jobs",
    "run_job": "jobs",
    "write_report": "report",
}


def __getattr__(name):
    mod = _LAZY.get(name)
    if mod is None:
        raise AttributeError(f"module 'basinkit' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(f"basinkit.{mod}"), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(list(globals()) + list(_LAZY))


__all__ = [
    "__version__", "Terrain", "read_dem", "terrain_from_array", "condition",
    "fill_depressions", "ConditionSummary", "route", "FlowModel", "load_flow",
    "BasinkitError", "InputError", "MemoryBudgetError", "OutputExistsError", "OutletError",
    *_LAZY,
]
