"""basinkit: watershed delineation and basin morphometry from DEMs.

The data path runs one way: read a DEM (:func:`read_dem`) into a :class:`Terrain`,
condition it (:func:`condition`), route flow (:func:`route`) into a :class:`FlowModel`, then
derive catchments (:func:`delineate`), channels (:func:`extract_channels`), profiles
(:func:`longest_flow_path`, :func:`main_stem`, :func:`chi_transform`) and morphometry
(:func:`basin_morphometry`) from that model, and design flows at outlets
(:func:`design_flows`: time of concentration, curve-number runoff, peak discharge and the
design hydrograph).

DEM-derived boundaries and flow paths are estimates: culverts, storm sewers and diversions
are represented only where burned in; verify in the field and defer to local codes and
licensed professional practice.
"""

__version__ = "0.1.0"

# every public name is loaded on first use (PEP 562), so that importing basinkit, and
# starting the CLI, loads neither numba nor the kernels until a command needs them
_LAZY = {
    "ConditionSummary": "conditioning",
    "condition": "conditioning",
    "fill_depressions": "conditioning",
    "BasinkitError": "errors",
    "InputError": "errors",
    "MemoryBudgetError": "errors",
    "OutletError": "errors",
    "OutputExistsError": "errors",
    "read_dem": "io.dem",
    "load_flow": "io.flow_folder",
    "write_flow_folder": "io.flow_folder",
    "FlowModel": "routing",
    "route": "routing",
    "Terrain": "terrain",
    "terrain_from_array": "terrain",
    "breach_depressions": "conditioning.breach",
    "burn_lines": "conditioning.burn",
    "read_lines": "io.lines",
    "delineate": "analysis.catchments",
    "Delineation": "analysis.catchments",
    "prepare_outlets": "analysis.outlets",
    "read_outlet_file": "io.outlets",
    "contributing_fraction": "routing.contributing",
    "contributing_area_m2": "routing.contributing",
    "extract_channels": "analysis.channels",
    "ChannelNetwork": "analysis.channels",
    "constant_drop_test": "analysis.channels",
    "basin_morphometry": "analysis.morphometry",
    "morphometry_table": "analysis.morphometry",
    "longest_flow_path": "analysis.profiles",
    "main_stem": "analysis.profiles",
    "channel_profiles": "analysis.profiles",
    "chi_transform": "analysis.profiles",
    "fit_concavity": "analysis.profile_fits",
    "steepness": "analysis.steepness",
    "find_knickpoints": "analysis.steepness",
    "slope_area_fit": "analysis.profile_fits",
    "hack_law_fit": "analysis.profile_fits",
    "read_job": "workflow.jobfile",
    "job_from_dict": "workflow.jobfile",
    "demo_job_path": "workflow.jobfile",
    "JOB_SCHEMA": "workflow.jobfile",
    "run_job": "workflow.runner",
    "write_report": "report",
    "design_flows": "hydrology.design",
    "DesignFlowSettings": "hydrology.design",
    "VelocityMethodInputs": "hydrology.concentration",
    "design_storm": "hydrology.rainfall",
    "storm_from_idf": "hydrology.rainfall",
    "IDFTable": "hydrology.rainfall",
    "read_idf_table": "io.rainfall",
    "read_hyetograph": "io.rainfall",
    "read_land_values": "io.landcover",
    "plot_design_hydrograph": "plot.hydrograph",
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


__all__ = ["__version__", *_LAZY]
