"""Job files: the whole job (flow folder → catchments → channels → morphometry → design
flows → profiles → report) described in one TOML file; this module reads and checks them (the schema, with
every key's type and default), :mod:`basinkit.workflow.runner` runs them.

A job file names its inputs, the parameters of every stage and the outputs. Paths in it are
relative to the job file's folder. Example (abridged from the bundled demo,
``demo_rasters/demo_job.toml``)::

    [inputs]
    dem = "upland_valley.tif"
    outlets = "outlets.csv"
    burn_lines = ["culverts.geojson"]

    [conditioning]
    method = "fill"
    burn_depth_m = 1.0

    [outlets]
    snap_radius_m = 30
    snap_min_area = "1ha"

    [channels]
    min_area = "2ha"

    [profiles]
    concavity = 0.45

    [outputs]
    folder = "../basinkit-demo-output"

Every key, its type and default is listed in :data:`JOB_SCHEMA`; ``basinkit run JOB --check``
prints a job with the defaults filled in. Each section maps onto the options of one command
(``[channels] min_area`` is ``basinkit channels --min-area``, ...), and running a job writes
the products of those commands into one folder (listed in :data:`basinkit.io.products.PRODUCT_FILES`; see
:mod:`basinkit.workflow.steps`).
"""

from __future__ import annotations

import difflib
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError, JobFileError
from .steps.design_flow import DESIGN_FLOW_SCHEMA

__all__ = ["JobSpec", "read_job", "job_from_dict", "demo_job_path", "JOB_SCHEMA"]


# ----------------------------------------------------------------------------- schema
# kind: "str", "path", "paths", "float", "int", "bool", "area", "length", "choice:<a|b>",
#       "strs", "pair" (two numbers), "memory" (a size: "2GB"); default None means optional
#       with no value.
_S = dict
JOB_SCHEMA = {
    "job": {
        "name": _S(kind="str", default="basinkit job", help="Title used in the report."),
        "description": _S(kind="str", default="", help="A sentence or two for the report."),
        "workers": _S(kind="int", default=2,
                      help="Worker processes for per-outlet work (the products do not "
                           "depend on it; 1: none)."),
    },
    "inputs": {
        "dem": _S(kind="path", default=None, required=True,
                  help="DEM raster (GeoTIFF or anything rasterio opens)."),
        "outlets": _S(kind="path", default=None,
                      help="Outlet points: CSV with id, x, y columns (DEM CRS) or a point "
                           "layer (GeoPackage, GeoJSON, ...)."),
        "burn_lines": _S(kind="paths", default=[],
                         help="Line layers of culverts or known channels to burn in."),
        "band": _S(kind="int", default=None, help="Band holding elevation (1-based)."),
        "crs": _S(kind="str", default=None,
                  help="CRS of a DEM that has none (a different one is refused)."),
        "replace_crs": _S(kind="str", default=None,
                          help="CRS to use instead of the one the DEM file states."),
        "cell_size": _S(kind="float", default=None,
                        help="Cell size (CRS units) of a raster without georeferencing."),
        "origin": _S(kind="pair", default=None,
                     help="Upper-left corner [X, Y] of a raster without georeferencing."),
        "elevation_range_m": _S(kind="pair", default=[-500.0, 9000.0],
                                help="Plausible elevations [MIN, MAX] in metres."),
        "implausible_elevations": _S(kind="choice:refuse|nodata", default="refuse",
                                     help="Cells outside elevation_range_m: refuse the DEM "
                                          "or treat them as nodata."),
        "sea_level_m": _S(kind="float", default=None,
                          help="Cells at or below this elevation are exits."),
        "base_level": _S(kind="path", default=None,
                         help="Mask raster or polygon layer of exit cells (sea, lake)."),
        "copy_input": _S(kind="bool", default=False,
                         help="Keep a copy of the DEM as read in flow/elevation_input.tif "
                              "(default: flow.json names the DEM and its SHA-256)."),
    },
    "conditioning": {
        "method": _S(kind="choice:fill|breach|none", default="fill",
                     help="Priority-Flood filling, least-cost breaching, or none."),
        "burn_depth_m": _S(kind="float", default=1.0,
                           help="Metres to lower the cells under burn lines."),
        "epsilon": _S(kind="float", default=0.0,
                      help="Minimum drop on filled cells (0: exact filled surface)."),
        "max_breach_depth_m": _S(kind="float", default=None, help="Deepest breach cut."),
        "max_breach_length": _S(kind="length", default=None, help="Longest breach channel."),
    },
    "routing": {
        "method": _S(kind="choice:d8|dinf|mfd", default="d8",
                     help="Routing used for accumulation rasters."),
        "mfd_exponent": _S(kind="float", default=1.1, help="MFD partition exponent."),
        "max_memory": _S(kind="memory", default=None,
                         help="Peak memory allowed, e.g. '2GB' (basinkit route "
                              "--max-memory): a DEM whose in-memory route would need more "
                              "is routed by tiles (then catchments and channels are computed "
                              "by tiles; profiles, morphometry, design "
                              "flows and the report are skipped)."),
        "tile_size": _S(kind="int", default=None,
                        help="Route by tiles of this many cells a side (basinkit route "
                             "--tile-size)."),
        "scheduler": _S(kind="str", default=None,
                        help="Address of a running dask.distributed scheduler for the tile "
                             "tasks, e.g. 'tcp://host:8786' (basinkit route --scheduler)."),
    },
    "outlets": {
        "snap_radius_m": _S(kind="float", default=None,
                            help="Snap search radius in metres, as basinkit delineate "
                                 "--snap-radius (default: the larger of 30 m and one "
                                 "cell; 0: no snapping)."),
        "snap_min_area": _S(kind="area", default=None,
                            help="Snap to the nearest cell with at least this upstream "
                                 "area, as basinkit delineate --snap-to-channel (default: "
                                 "to the cell of greatest upstream area within the "
                                 "radius)."),
        "crs": _S(kind="str", default=None,
                  help="CRS of CSV x/y columns, as --outlet-crs (default: the DEM's; "
                       "lon/lat columns: EPSG:4326; vector files carry their own)."),
        "id_column": _S(kind="str", default=None,
                        help="Outlet id column (default: the first of outlet_id, id, name, "
                             "...; else the row number)."),
    },
    "channels": {
        "min_area": _S(kind="area", default=1e4,
                       help="Channel initiation threshold (m2, or with a unit: 2ha, 0.1km2)."),
        "min_order": _S(kind="int", default=1,
                        help="Lowest Strahler order written (basinkit channels --min-order) "
                             "and profiled (basinkit profile --min-order)."),
    },
    "profiles": {
        "concavity": _S(kind="float", default=0.45,
                        help="Reference concavity θ for χ and k_sn."),
        "reference_area": _S(kind="area", default=1.0,
                             help="Reference area A0 for χ (default 1 m², as on the CLI)."),
        "fit_concavity": _S(kind="bool", default=False,
                            help="Fit θ per outlet instead (basinkit profile "
                                 "--fit-concavity)."),
        "slope_window": _S(kind="length", default=None,
                           help="Window local slope is measured over (default 20 m)."),
        "slope_drop": _S(kind="length", default=None,
                         help="Measure local slope over this vertical interval instead."),
        "vertical_precision": _S(kind="length", default=1.0,
                                 help="Vertical precision of the DEM, for knickpoints."),
        "enabled": _S(kind="bool", default=True, help="Compute profiles."),
    },
    "morphometry": {
        "enabled": _S(kind="bool", default=True, help="Compute basin morphometry."),
    },
    "design_flow": DESIGN_FLOW_SCHEMA,
    "outputs": {
        "folder": _S(kind="path", default="basinkit-output",
                     help="Output folder (relative to the job file)."),
        "rasters": _S(kind="bool", default=True,
                      help="Also write the sub-catchment label raster (basinkit delineate "
                           "--labels-raster); the flow folder and the Strahler order "
                           "raster are always written."),
        "figures": _S(kind="bool", default=True,
                      help="Write PNG figures (profiles, hypsometric curves) for the "
                           "figure outlets."),
        "report": _S(kind="bool", default=True, help="Write report.html."),
        "report_outlets": _S(kind="strs", default=[],
                             help="Outlet ids that get figures and full report sections "
                                  "(default: the first 20 outlets)."),
    },
}


def _suggest(word, options):
    m = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
    return f" (did you mean {m[0]!r}?)" if m else ""


def _check_value(section, key, value, spec, base: Path):
    from ..units import parse_area, parse_length

    where = f"[{section}] {key}"
    kind = spec["kind"]

    def bad(expected):
        return JobFileError(f"{where} must be {expected}, got {value!r} "
                            f"({type(value).__name__}) in the job file")

    if kind == "str":
        if not isinstance(value, str):
            raise bad("a string")
        return value
    if kind == "strs":
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, (str, int)) for v in value):
            raise bad("a list of strings")
        return [str(v) for v in value]
    if kind == "path":
        if not isinstance(value, str) or not value:
            raise bad("a file path (a string)")
        return _resolve(value, base)
    if kind == "paths":
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
            raise bad("a list of file paths")
        return [_resolve(v, base) for v in value]
    if kind == "pair":  # two numbers, as [a, b] or "a,b"
        if isinstance(value, str):
            value = [v.strip() for v in value.split(",")]
        try:
            a, b = (float(v) for v in value)
        except (TypeError, ValueError):
            raise bad("two numbers such as [-500, 9000]") from None
        if not (np.isfinite(a) and np.isfinite(b)):
            raise bad("two finite numbers")
        return [a, b]
    if kind == "bool":
        if not isinstance(value, bool):
            raise bad("true or false")
        return value
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise bad("a whole number")
        return value
    if kind == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise bad("a number")
        if not np.isfinite(value):
            raise bad("a finite number")
        return float(value)
    if kind in ("depth", "duration"):  # text with its unit, kept as given (the step parses)
        from ..units import parse_depth, parse_duration

        try:
            (parse_depth if kind == "depth" else parse_duration)(value, where)
        except InputError as exc:
            raise JobFileError(f"{exc} (in the job file)") from None
        return value
    if kind in ("area", "length"):
        if isinstance(value, bool) or not isinstance(value, (int, float, str)):
            raise bad("a number or a quantity with a unit such as "
                      + ("'2ha'" if kind == "area" else "'200m'"))
        try:
            if kind == "area":
                return parse_area(value, where)
            return parse_length(value, where)
        except InputError as exc:
            raise JobFileError(f"{exc} (in the job file)") from None
    if kind == "memory":
        from ..units import parse_memory

        if isinstance(value, bool) or not isinstance(value, (str, int)):
            raise bad("a size such as '2GB'")
        try:
            return parse_memory(value, where) if isinstance(value, str) else int(value)
        except InputError as exc:
            raise JobFileError(f"{exc} in the job file") from None
    if kind.startswith("choice:"):
        options = kind.split(":", 1)[1].split("|")
        if not isinstance(value, str) or value not in options:
            raise JobFileError(f"{where} must be one of {', '.join(options)}, got {value!r} "
                               f"in the job file{_suggest(str(value), options)}")
        return value
    raise AssertionError(kind)  # pragma: no cover - schema error


def _resolve(value, base: Path) -> Path:
    p = Path(value).expanduser()
    return p if p.is_absolute() else (base / p)


@dataclass
class JobSpec:
    """A validated job: every section with its defaults filled in.

    Attributes
    ----------
    path : Path or None
        The job file (None for a job built from a dict).
    base : Path
        Folder that relative paths are resolved against.
    sections : dict
        ``{section: {key: value}}`` with paths resolved and quantities in m / m².
    """

    path: Path | None
    base: Path
    sections: dict

    def __getitem__(self, section):
        return self.sections[section]

    def parameters(self) -> dict:
        """Every parameter (paths as strings) for provenance."""
        out = {}
        for sec, vals in self.sections.items():
            out[sec] = {k: (str(v) if isinstance(v, Path) else
                            [str(x) for x in v] if isinstance(v, list) else v)
                        for k, v in vals.items()}
        return out


def job_from_dict(data: dict, base=".", path=None) -> JobSpec:
    """Validate a job given as a dict (the parsed TOML) and fill in defaults.

    Raises
    ------
    JobFileError
        Unknown sections or keys (with the closest valid name), wrong types, missing
        required keys, missing input files — each message names the key.
    """
    base = Path(base)
    if not isinstance(data, dict):
        raise JobFileError("a job file holds tables such as [inputs] and [outputs]")
    sections = {}
    for sec in data:
        if sec not in JOB_SCHEMA:
            raise JobFileError(f"unknown section [{sec}] in the job file{_suggest(sec, JOB_SCHEMA)}"
                               f"; the sections are {', '.join(JOB_SCHEMA)}")
        if not isinstance(data[sec], dict):
            raise JobFileError(f"{sec} must be a table ([{sec}] followed by key = value "
                               "lines) in the job file")
    for sec, schema in JOB_SCHEMA.items():
        given = data.get(sec, {})
        for key in given:
            if key not in schema:
                raise JobFileError(f"unknown key {key!r} in [{sec}] of the job file"
                                   f"{_suggest(key, schema)}; the keys of [{sec}] are "
                                   f"{', '.join(schema)}")
        vals = {}
        for key, spec in schema.items():
            if key in given and given[key] is not None:  # None (from JSON): not given
                vals[key] = _check_value(sec, key, given[key], spec, base)
            elif spec.get("required"):
                raise JobFileError(f"[{sec}] {key} is required in the job file: "
                                   f"{spec['help']}")
            else:
                d = spec["default"]
                if spec["kind"] in ("path",) and d is not None:
                    d = _resolve(d, base)
                vals[key] = list(d) if isinstance(d, list) else d
        sections[sec] = vals
    # input files must exist
    ins = sections["inputs"]
    for key in ("dem", "outlets", "base_level"):
        p = ins[key]
        if p is not None and not p.exists():
            raise JobFileError(f"[inputs] {key}: the file {str(p)!r} does not exist "
                               f"(paths are relative to {str(base)!r})")
    for p in ins["burn_lines"]:
        if not p.exists():
            raise JobFileError(f"[inputs] burn_lines: the file {str(p)!r} does not exist "
                               f"(paths are relative to {str(base)!r})")
    for sec, key in (("conditioning", "burn_depth_m"), ("outlets", "snap_radius_m"),
                     ("conditioning", "epsilon"), ("routing", "mfd_exponent")):
        if sections[sec][key] is not None and sections[sec][key] < 0:
            raise JobFileError(f"[{sec}] {key} must be zero or positive, got "
                               f"{sections[sec][key]!r}")
    lo, hi = ins["elevation_range_m"]
    if not lo < hi:
        raise JobFileError(f"[inputs] elevation_range_m must be [MIN, MAX] with MIN < MAX, "
                           f"got {[lo, hi]!r}")
    if (ins["cell_size"] is None) != (ins["origin"] is None):
        raise JobFileError("[inputs] cell_size and origin go together (a raster without "
                           "georeferencing needs both)")
    if ins["cell_size"] is not None and ins["cell_size"] <= 0:
        raise JobFileError(f"[inputs] cell_size must be positive, got {ins['cell_size']!r}")
    if ins["crs"] is not None and ins["replace_crs"] is not None:
        raise JobFileError("[inputs] give either crs (a DEM without one) or replace_crs "
                           "(replace the DEM's), not both")
    c = sections["profiles"]["concavity"]
    if not 0.0 <= c <= 2.0:
        raise JobFileError(f"[profiles] concavity must lie between 0 and 2 (typical 0.45), "
                           f"got {c!r}")
    if sections["job"]["workers"] < 1:
        raise JobFileError("[job] workers must be 1 or more")
    if sections["channels"]["min_order"] < 1:
        raise JobFileError("[channels] min_order must be 1 or more")
    if sections["channels"]["min_area"] <= 0:
        raise JobFileError("[channels] min_area must be positive (e.g. '1ha')")
    if sections["profiles"]["reference_area"] <= 0:
        raise JobFileError("[profiles] reference_area must be positive (e.g. '1km2')")
    pr = sections["profiles"]
    if pr["slope_window"] is not None and pr["slope_drop"] is not None:
        raise JobFileError("[profiles] give either slope_window or slope_drop, not both")
    for key in ("slope_window", "slope_drop", "vertical_precision"):
        if pr[key] is not None and pr[key] <= 0:
            raise JobFileError(f"[profiles] {key} must be positive, got {pr[key]!r}")
    df = sections["design_flow"]  # on when the section is given, unless enabled = false
    if df["enabled"] is None:
        df["enabled"] = "design_flow" in data
    return JobSpec(path=None if path is None else Path(path), base=base, sections=sections)


def read_job(path) -> JobSpec:
    """Read and validate a TOML job file (paths relative to its folder).

    Examples
    --------
    >>> from basinkit.workflow.jobfile import read_job, demo_job_path
    >>> job = read_job(demo_job_path())
    >>> job["channels"]["min_area"]  # '2ha' in the file, m² here
    20000.0
    """
    from ..io.text import read_text

    p = Path(path)
    if not p.exists():
        raise JobFileError(f"the job file {str(p)!r} does not exist")
    if p.is_dir():
        raise JobFileError(f"{str(p)!r} is a folder; give the job file (a .toml file)")
    try:  # a byte-order mark is dropped; TOML is UTF-8, so other encodings are refused
        text = read_text(p, "the job file", fallback=None).text
    except InputError as exc:
        raise JobFileError(f"{exc} (a job file is TOML text)") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise JobFileError(f"cannot read the job file {str(p)!r}: {exc}") from None
    return job_from_dict(data, base=p.resolve().parent, path=p.resolve())


def demo_job_path() -> Path:
    """The bundled demo job (``demo_rasters/demo_job.toml``).

    Looked for inside the installed package (``basinkit/demo_rasters``, when packaged as
    package data) and beside the package's source tree (a checkout or editable install).
    """
    here = Path(__file__).resolve().parents[1]
    for cand in (here / "demo_rasters" / "demo_job.toml",
                 here.parent / "demo_rasters" / "demo_job.toml"):
        if cand.exists():
            return cand
    raise InputError("the demo data (demo_rasters/demo_job.toml) is not installed with this "
                     "copy of basinkit; run from a checkout of the source, or reinstall "
                     "from the source tree")
