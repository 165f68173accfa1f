"""Job files: the whole job (condition → route → delineate → channels → profiles →
morphometry → report) described in one TOML file and run in one call.

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
prints a job with the defaults filled in. Running a job writes everything into the output folder plus ``provenance.json`` (basinkit
version, every parameter with its default filled in, SHA-256 of every input, timings per
stage). Two runs of the same job give byte-identical tables (CSV) and rasters (GeoTIFF).
"""

from __future__ import annotations

import difflib
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import BasinkitError, InputError, JobFileError

__all__ = ["JobSpec", "JobResult", "read_job", "job_from_dict", "run_job", "JOB_SCHEMA"]


# ----------------------------------------------------------------------------- schema
# kind: "str", "path", "paths", "float", "int", "bool", "area", "length", "choice:<a|b>",
#       "strs"; default None means optional with no value.
_S = dict
JOB_SCHEMA = {
    "job": {
        "name": _S(kind="str", default="basinkit job", help="Title used in the report."),
        "description": _S(kind="str", default="", help="A sentence or two for the report."),
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
        "crs": _S(kind="str", default=None, help="CRS to assume when the DEM has none."),
        "sea_level_m": _S(kind="float", default=None,
                          help="Cells at or below this elevation are exits."),
        "base_level": _S(kind="path", default=None,
                         help="Mask raster or polygon layer of exit cells (sea, lake)."),
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
    },
    "outlets": {
        "snap_radius_m": _S(kind="float", default=None,
                            help="Snap search radius in metres, as basinkit delineate "
                                 "--snap-radius (default: 3 cells; 10 cells with "
                                 "snap_min_area; 0: no snapping)."),
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
        "x_column": _S(kind="str", default="x", help="Easting / longitude column."),
        "y_column": _S(kind="str", default="y", help="Northing / latitude column."),
    },
    "channels": {
        "min_area": _S(kind="area", default=1e4,
                       help="Channel initiation threshold (m2, or with a unit: 2ha, 0.1km2)."),
        "min_order": _S(kind="int", default=1,
                        help="Lowest Strahler order written and drawn."),
    },
    "profiles": {
        "concavity": _S(kind="float", default=0.45,
                        help="Reference concavity θ for χ and k_sn."),
        "reference_area": _S(kind="area", default=1.0,
                             help="Reference area A0 for χ (default 1 m², as on the CLI)."),
        "enabled": _S(kind="bool", default=True, help="Compute profiles."),
    },
    "morphometry": {
        "enabled": _S(kind="bool", default=True, help="Compute basin morphometry."),
    },
    "outputs": {
        "folder": _S(kind="path", default="basinkit-output",
                     help="Output folder (relative to the job file)."),
        "rasters": _S(kind="bool", default=True,
                      help="Write the flow rasters (GeoTIFF)."),
        "report": _S(kind="bool", default=True, help="Write report.html."),
        "report_outlets": _S(kind="strs", default=[],
                             help="Outlet ids to put in the report (default: all)."),
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
    c = sections["profiles"]["concavity"]
    if not 0.0 <= c <= 2.0:
        raise JobFileError(f"[profiles] concavity must lie between 0 and 2 (typical 0.45), "
                           f"got {c!r}")
    if sections["channels"]["min_order"] < 1:
        raise JobFileError("[channels] min_order must be 1 or more")
    if sections["channels"]["min_area"] <= 0:
        raise JobFileError("[channels] min_area must be positive (e.g. '1ha')")
    if sections["profiles"]["reference_area"] <= 0:
        raise JobFileError("[profiles] reference_area must be positive (e.g. '1km2')")
    return JobSpec(path=None if path is None else Path(path), base=base, sections=sections)


def read_job(path) -> JobSpec:
    """Read and validate a TOML job file (paths relative to its folder).

    Examples
    --------
    >>> from basinkit.workflow.jobs import read_job, demo_job_path
    >>> job = read_job(demo_job_path())
    >>> job["channels"]["min_area"]  # '2ha' in the file, m² here
    20000.0
    """
    p = Path(path)
    if not p.exists():
        raise JobFileError(f"the job file {str(p)!r} does not exist")
    if p.is_dir():
        raise JobFileError(f"{str(p)!r} is a folder; give the job file (a .toml file)")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise JobFileError(f"{str(p)!r} is not a text file; a job file is TOML") from None
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


# ----------------------------------------------------------------------------- running
class _Quiet:
    def info(self, msg, **fields):
        pass

    def warn(self, msg, **fields):
        pass


@dataclass
class JobResult:
    """What a job run produced.

    Attributes
    ----------
    folder : Path
        The output folder.
    files : dict
        ``{name: Path}`` of every file written (relative names as keys).
    stages : dict
        ``{stage: {"status": "done" | "skipped" | "failed", "seconds": float, "note": str}}``.
    flow : FlowModel
    outlets : pandas.DataFrame or None
        One row per outlet: id, original and snapped coordinates, snap distance.
    catchments : object or None
        The delineation result.
    network : ChannelNetwork or None
    morphometry : pandas.DataFrame or None
    curves : dict
        Hypsometric curves by outlet id.
    profiles : dict
        Per outlet id, the profile results (tables and figures data).
    warnings : dict
        ``{outlet id or "job": [message, ...]}``.
    provenance : dict
    """

    folder: Path
    files: dict = field(default_factory=dict)
    stages: dict = field(default_factory=dict)
    flow: object = None
    terrain: object = None
    outlets: object = None
    catchments: object = None
    masks: dict = field(default_factory=dict)
    network: object = None
    morphometry: object = None
    curves: dict = field(default_factory=dict)
    profiles: dict = field(default_factory=dict)
    warnings: dict = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)
    job: JobSpec | None = None


class _Stage:
    """Times a stage and records its status; a BasinkitError from a stage that others do
    not depend on is recorded and the job carries on."""

    def __init__(self, result, name, console):
        self.result, self.name, self.console = result, name, console

    def __enter__(self):
        self.t0 = time.perf_counter()
        self.console.info(f"{self.name} ...")
        self.result.stages[self.name] = {"status": "running", "seconds": 0.0, "note": ""}
        return self

    def skip(self, note):
        self.result.stages[self.name].update(status="skipped", note=note)
        self.console.warn(f"{self.name} skipped: {note}")

    def __exit__(self, et, ev, tb):
        rec = self.result.stages[self.name]
        rec["seconds"] = round(time.perf_counter() - self.t0, 3)
        if et is None:
            if rec["status"] == "running":
                rec["status"] = "done"
            return False
        rec["status"] = "failed"
        rec["note"] = str(ev)
        return False


def _module_available(name):
    import importlib

    try:
        importlib.import_module(f"basinkit.{name}")
        return True
    except ModuleNotFoundError as exc:
        if exc.name == f"basinkit.{name}":
            return False
        raise


def _read_burn_lines(paths, crs):
    from ..io.lines import read_lines

    geoms = []
    for p in paths:
        geoms.extend(read_lines(p, crs))
    return geoms


def _hashes(job):
    from ..io.hashing import file_sha256

    ins = job["inputs"]
    out = {}
    for key in ("dem", "outlets", "base_level"):
        if ins[key] is not None:
            out[key] = {"path": str(ins[key]), "sha256": file_sha256(ins[key])}
    for i, p in enumerate(ins["burn_lines"]):
        out[f"burn_lines_{i + 1}"] = {"path": str(p), "sha256": file_sha256(p)}
    if job.path is not None:
        out["job_file"] = {"path": str(job.path), "sha256": file_sha256(job.path)}
    return out


def run_job(job, output=None, overwrite: bool = False, console=None) -> JobResult:
    """Run a job: condition → route → delineate → channels → profiles → morphometry →
    report.

    Parameters
    ----------
    job : JobSpec, str or Path
        A validated job or the path of a TOML job file.
    output : str or Path, optional
        Output folder; overrides ``[outputs] folder``.
    overwrite : bool
        Replace the files of an existing output folder.
    console : object with ``info(msg)`` and ``warn(msg)``, optional
        Where progress messages go (the command line's console); silent by default.

    Returns
    -------
    JobResult

    Notes
    -----
    Outputs (names inside the folder): ``flow/`` (the flow folder of ``basinkit route``),
    ``catchments.csv`` (one row per outlet: given and snapped positions, areas, relief,
    warnings), ``outlet_errors.csv`` (outlets that could not be used, if any),
    ``catchments.gpkg`` (catchments, sub-catchments, snapped and given outlets) and
    ``catchment_labels.tif``,
    ``channel_segments.csv``, ``channels.gpkg`` and ``strahler_order.tif``,
    ``profiles/``, ``morphometry.csv``, ``hypsometry/``, ``report.html`` and
    ``provenance.json``. Every table and raster is deterministic; ``provenance.json`` and
    the report also hold timings, which are not.

    A stage whose module is missing, or that has nothing to work on (no outlets), is
    skipped with a note in ``stages`` and ``provenance.json``; outlets that cannot be used
    are listed in ``outlet_errors.csv`` and the job carries on.

    Examples
    --------
    >>> from basinkit.workflow.jobs import demo_job_path, run_job
    >>> res = run_job(demo_job_path(), output="demo-out", overwrite=True)  # doctest: +SKIP
    >>> res.outlets.set_index("outlet_id").loc["crossing", "area_km2"]  # doctest: +SKIP
    2.7346
    """
    from .. import __version__
    from ..io.writers import prepare_output_dir, write_json

    console = console or _Quiet()
    if not isinstance(job, JobSpec):
        job = read_job(job)
    folder = Path(output) if output is not None else job["outputs"]["folder"]
    folder = prepare_output_dir(folder, overwrite)
    earlier = _files_of_earlier_run(folder)
    res = JobResult(folder=folder, job=job)
    t_start = time.perf_counter()
    inputs = _hashes(job)

    _stage_route(job, res, console)
    _stage_delineate(job, res, console)
    _stage_channels(job, res, console)
    _stage_profiles(job, res, console)
    _stage_morphometry(job, res, console)
    _collect_warnings(job, res)

    fm = res.flow
    res.provenance = {
        "software": "basinkit", "version": __version__,
        "job": {"name": job["job"]["name"], "file": str(job.path) if job.path else None},
        "parameters": job.parameters(), "inputs": inputs,
        "crs": fm.terrain.crs.to_wkt(),
        "crs_epsg": fm.terrain.crs.to_epsg(),
        "grid_shape": [int(s) for s in fm.shape],
        "conditioning": fm.summary.to_dict() if fm.summary else None,
        "stages": res.stages,
        "warnings": res.warnings,
        "outputs": {},
    }
    if job["outputs"]["report"]:
        known = set() if res.outlets is None else set(res.outlets["outlet_id"])
        unknown = [i for i in job["outputs"]["report_outlets"] if i not in known]
        if unknown:
            res.warnings["job"].append(
                f"[outputs] report_outlets names outlets that were not delineated: "
                f"{', '.join(unknown)}")
            console.warn(res.warnings["job"][-1])
        with _Stage(res, "report", console) as st:
            try:
                from ..report import write_report
            except ModuleNotFoundError:
                st.skip("the report module is not available in this version")
            else:
                res.provenance["seconds_total"] = round(time.perf_counter() - t_start, 3)
                # the report is built from the folder's files, provenance.json among them
                write_json(folder / "provenance.json", res.provenance)
                res.files["report.html"] = write_report(
                    folder, folder / "report.html",
                    report_outlets=job["outputs"]["report_outlets"],
                    progress=getattr(console, "progress", None))
    res.provenance["seconds_total"] = round(time.perf_counter() - t_start, 3)
    res.provenance["outputs"] = _output_hashes(res)
    res.provenance["files"] = sorted(set(res.files) | {"provenance.json"})
    res.files["provenance.json"] = write_json(folder / "provenance.json", res.provenance)
    stale = _remove_stale(folder, earlier, set(res.provenance["files"]))
    if stale:
        console.info(f"removed {stale} file(s) left from an earlier run of a job in {folder}")
    console.info(f"wrote {folder} ({res.provenance['seconds_total']:.1f} s)")
    return res


def _files_of_earlier_run(folder):
    """Files an earlier job wrote into ``folder``, as listed in its provenance.json (only
    those are ever removed, never anything else a user keeps there)."""
    import json

    p = Path(folder) / "provenance.json"
    try:
        listed = json.loads(p.read_text(encoding="utf-8")).get("files", [])
    except (OSError, ValueError, AttributeError):
        return set()
    return {str(f) for f in listed if isinstance(f, str)}


def _remove_stale(folder, earlier, current):
    """Remove files of an earlier run that this run did not write again (an outlet dropped
    from the job, a stage turned off), and folders left empty by that. Returns the count."""
    root = Path(folder).resolve()
    removed = 0
    for name in sorted(earlier - current):
        p = (root / name).resolve()
        if root not in p.parents or not p.is_file():
            continue  # only plain files inside the output folder
        p.unlink()
        removed += 1
        d = p.parent
        while d != root and d.is_dir() and not any(d.iterdir()):
            d.rmdir()
            d = d.parent
    return removed


def _output_hashes(res):
    from ..io.hashing import file_sha256

    out = {}
    for name, p in sorted(res.files.items()):
        p = Path(p)
        if p.is_file() and p.suffix in (".csv", ".tif"):
            out[name] = file_sha256(p)
    return out


def _add(res, path):
    path = Path(path)
    res.files[path.relative_to(res.folder).as_posix()] = path
    return path


def _stage_route(job, res, console):
    from ..io.flow_folder import FILES, write_flow_folder
    from ..routing.flow_model import route
    from ..io.dem import read_dem

    ins, cond, rt = job["inputs"], job["conditioning"], job["routing"]
    with _Stage(res, "read", console):
        terrain = read_dem(ins["dem"], band=ins["band"], crs=ins["crs"],
                           sea_level=ins["sea_level_m"], base_level=ins["base_level"])
        res.terrain = terrain
    with _Stage(res, "condition and route", console):
        opts = dict(epsilon=cond["epsilon"], max_breach_depth=cond["max_breach_depth_m"],
                    max_breach_length=cond["max_breach_length"])
        if ins["burn_lines"]:
            opts.update(burn=_read_burn_lines(ins["burn_lines"], terrain.crs),
                        burn_depth=cond["burn_depth_m"])
        fm = route(terrain, method=rt["method"], conditioning=cond["method"],
                   mfd_exponent=rt["mfd_exponent"], **opts)
        # the burn lines as their file names, not geometry reprs, in the parameters
        if ins["burn_lines"]:
            fm.parameters["burn"] = [p.name for p in ins["burn_lines"]]
        res.flow = fm
        for line in (fm.summary.lines() if fm.summary else []):
            console.info("  " + line)
        if job["outputs"]["rasters"]:
            write_flow_folder(fm, res.folder / "flow", overwrite=True)
            for k, name in FILES.items():
                p = res.folder / "flow" / name
                if p.exists():
                    _add(res, p)


def _raster_tags(job, what):
    """Provenance tags of a raster: what it holds and the parameters that made it (no
    timings, no output settings, so that reruns are byte-identical)."""
    from .. import __version__

    params = {k: v for k, v in job.parameters().items() if k not in ("outputs", "job")}
    return {"software": f"basinkit {__version__}", "content": what,
            "job_parameters": params}


def _write_gpkg(path, layers):
    """Write GeoDataFrames as layers of one GeoPackage (temporary file, then rename)."""
    from ..io.writers import atomic_path

    with atomic_path(path) as tmp:
        for i, (name, gdf) in enumerate(layers.items()):
            gdf.to_file(tmp, layer=name, driver="GPKG", mode="w" if i == 0 else "a")
    return Path(path)


def _stage_channels(job, res, console):
    from ..analysis.channels import extract_channels
    from ..io.writers import write_csv, write_geotiff

    ch = job["channels"]
    with _Stage(res, "channels", console):
        fm = res.flow
        cells = None
        if res.outlets is not None:
            ok = res.outlets["cell"].to_numpy() >= 0
            cells = res.outlets["cell"].to_numpy()[ok].astype(np.int64)
        net = extract_channels(fm, ch["min_area"], outlet_cells=cells)
        res.network = net
        seg = net.segments
        keep = seg[seg["strahler_order"] >= ch["min_order"]]
        mo = net.max_order() if callable(net.max_order) else net.max_order
        console.info(f"  {len(seg):,} segments, highest Strahler order {mo}")
        write_csv(_add(res, res.folder / "channel_segments.csv"),
                  keep.drop(columns="geometry"))
        _add(res, _write_gpkg(res.folder / "channels.gpkg",
                              {"channel_segments": keep, "channel_junctions": net.junctions}))
        if job["outputs"]["rasters"]:
            order = np.where(net.strahler >= ch["min_order"], net.strahler, 0).astype(np.int16)
            order[~fm.terrain.valid] = -1
            write_geotiff(_add(res, res.folder / "strahler_order.tif"), order,
                          fm.terrain.transform, fm.terrain.crs, nodata=-1,
                          tags=_raster_tags(job, "Strahler order of channel cells (0: not a "
                                                 "channel)"))


def _stage_morphometry(job, res, console):
    from ..io.writers import write_csv

    with _Stage(res, "morphometry", console) as st:
        if not job["morphometry"]["enabled"]:
            st.skip("turned off in the job file ([morphometry] enabled = false)")
            return
        if not res.masks:
            st.skip("no catchments were delineated")
            return
        from ..analysis.morphometry import morphometry_table, write_hypsometric_curve

        ids = list(res.masks)
        cells = [int(res.outlets.set_index("outlet_id").loc[i, "cell"]) for i in ids]
        table, curves = morphometry_table(res.flow, [res.masks[i] for i in ids], cells,
                                          ids=np.array(ids, dtype=object),
                                          network=res.network, return_curves=True)
        table = table.rename(columns={"catchment_id": "outlet_id"})
        res.morphometry = table
        res.curves = curves
        write_csv(_add(res, res.folder / "morphometry.csv"), table)
        for i, curve in curves.items():
            if curve is not None:
                write_hypsometric_curve(curve, _add(res, res.folder / "hypsometry"
                                                    / f"hypsometry_{_safe(i)}.csv"))


def _safe(name) -> str:
    """A file-name-safe version of an outlet id."""
    import re

    s = re.sub(r"[^A-Za-z0-9_.-]+", "_", str(name)).strip("._")
    return s or "outlet"


def _collect_warnings(job, res):
    fm = res.flow
    w = {"job": []}
    crs = fm.terrain.crs
    if crs.is_geographic:
        w["job"].append("The DEM is in geographic coordinates: cells are not square and "
                        "shrink towards the poles; areas and lengths were computed on the "
                        "ellipsoid, but slopes near steep terrain are less reliable than on "
                        "a projected grid. Consider reprojecting to a local projected CRS.")
    if not job["inputs"]["burn_lines"]:
        w["job"].append("No culverts, storm sewers or diversions were burned in: road and "
                        "rail embankments act as dams and the catchments above them may be "
                        "wrong.")
    if fm.parameters.get("cells_without_outlet"):
        w["job"].append(f"{fm.parameters['cells_without_outlet']:,} cells have no outlet "
                        "after routing (unconditioned depressions).")
    s = fm.summary
    if s is not None and s.depressions >= 100:
        w["job"].append(f"Conditioning filled {s.depressions:,} closed depressions "
                        f"({s.filled_volume_m3:,.0f} m³). Most are usually noise, but real "
                        "ponds, sinkholes and quarries may hold water that never reaches the "
                        "outlets.")
    if res.outlets is not None and res.masks:
        raised = None
        if fm.input_elevation is not None:
            raised = np.where(fm.terrain.valid,
                              fm.terrain.elevation - fm.input_elevation, 0.0)
        area = fm.terrain.cell_area()
        for row in res.outlets.itertuples():
            msgs = []
            oid = row.outlet_id
            if getattr(row, "error", ""):
                msgs.append(str(row.error))
            mask = res.masks.get(oid)
            if mask is not None:
                if getattr(row, "touches_edge", False):
                    msgs.append("The catchment reaches the edge of the DEM (or a nodata "
                                "hole): it may continue beyond it. Extend the DEM and run "
                                "again.")
                if raised is not None:
                    d = np.where(mask, raised, 0.0)
                    deep = float(d.max())
                    frac = float((d > 0.05).sum()) / max(int(mask.sum()), 1)
                    vol = float((d * area).sum())
                    if deep >= 1.0 or frac >= 0.02:
                        msgs.append(f"Conditioning filled closed depressions in this "
                                    f"catchment up to {deep:.1f} m deep ({vol:,.0f} m³, "
                                    f"{100 * frac:.1f} % of its cells). If a depression "
                                    "really holds water (pond, sinkhole, quarry) or drains "
                                    "through a structure, the area behind it may not reach "
                                    "the outlet: check it.")
            sw = getattr(row, "snap_warning", "")
            if isinstance(sw, str) and sw:
                msgs.append(f"Snapping: {sw}. Check that the outlet landed on the intended "
                            "stream.")
            w[oid] = msgs
    res.warnings = w


def _descriptions(path):
    """``{outlet id: description}`` from a CSV's ``description`` column (else empty)."""
    import pandas as pd

    if Path(path).suffix.lower() not in (".csv", ".txt"):
        return {}
    try:
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
    except Exception:  # noqa: BLE001 - the outlets reader reports unreadable files
        return {}
    idc = next((c for c in df.columns if c.lower() in ("outlet_id", "id", "name")), None)
    if idc is None or "description" not in df.columns:
        return {}
    return dict(zip(df[idc].astype(str).str.strip(), df["description"]))


def _stage_delineate(job, res, console):
    """Snap the outlets and delineate their catchments (basinkit.analysis.catchments)."""
    import pandas as pd

    from ..io.writers import write_csv, write_geotiff

    with _Stage(res, "delineate", console) as st:
        if job["inputs"]["outlets"] is None:
            st.skip("no outlets file in [inputs]; catchments, profiles and morphometry need "
                    "outlets")
            return
        if not _module_available("analysis.catchments"):
            st.skip("the catchments module is not available in this version")
            return
        from ..analysis.catchments import delineate

        oc = job["outlets"]
        fm, t = res.flow, res.flow.terrain
        # outlets are placed with basinkit.analysis.outlets.prepare_outlets and the same settings as
        # the delineate/profile/morphometry commands; the profile and morphometry stages
        # use the cells placed here
        d = delineate(fm, job["inputs"]["outlets"], crs=oc["crs"],
                      snap_radius_m=oc["snap_radius_m"],
                      snap_to_channel_m2=oc["snap_min_area"], id_column=oc["id_column"],
                      progress=getattr(console, "progress", None))
        res.catchments = d
        tab = d.table
        desc = _descriptions(job["inputs"]["outlets"])
        ids = tab["outlet_id"].astype(str)
        out = pd.DataFrame({
            "outlet_id": ids, "description": [desc.get(i, "") for i in ids],
            "x_given": tab["x"].to_numpy(float), "y_given": tab["y"].to_numpy(float),
            "x_snapped": tab["x_snapped"].to_numpy(float),
            "y_snapped": tab["y_snapped"].to_numpy(float),
            "row": tab["row"].to_numpy(np.int64), "col": tab["col"].to_numpy(np.int64),
            "cell": tab["cell"].to_numpy(np.int64),
            "snap_distance_m": tab["snap_distance_m"].to_numpy(float),
            "area_km2": tab["area_km2"].to_numpy(float),
            "touches_edge": tab["touches_edge"].to_numpy(bool),
            "snap_warning": tab["snap_warning"].fillna("").astype(str), "error": ""})
        if len(d.errors):
            e = d.errors
            eids = e["outlet_id"].astype(str)
            bad = pd.DataFrame({"outlet_id": eids,
                                "description": [desc.get(i, "") for i in eids],
                                "x_given": e["x_given"].to_numpy(float),
                                "y_given": e["y_given"].to_numpy(float), "cell": -1,
                                "row": -1, "col": -1, "error": e["reason"].astype(str)})
            for r in bad.itertuples():
                console.warn(f"outlet {r.outlet_id}: {r.error}")
            out = pd.concat([out, bad], ignore_index=True)
            write_csv(_add(res, res.folder / "outlet_errors.csv"), e)
        res.outlets = out
        res.masks = {oid: d.catchment_mask(oid) for oid in ids}
        write_csv(_add(res, res.folder / "catchments.csv"), tab)
        layers = {"catchments": d.catchments_frame(),
                  "subcatchments": d.subcatchments_frame(),
                  "outlets_snapped": d.outlets_frame("snapped"),
                  "outlets_given": d.outlets_frame("given")}
        _add(res, _write_gpkg(res.folder / "catchments.gpkg", layers))
        if job["outputs"]["rasters"]:
            lab = np.where(t.valid, d.labels, -1).astype(np.int32)
            write_geotiff(_add(res, res.folder / "catchment_labels.tif"), lab, t.transform,
                          t.crs, nodata=-1,
                          tags=_raster_tags(job, "sub-catchment label of every cell (0: "
                                                 "drains to no outlet); labels in "
                                                 "catchments.csv"))
        console.info(f"  {len(tab)} of {len(out)} outlets delineated")


def _stage_profiles(job, res, console):
    import pandas as pd

    from ..io.writers import write_csv

    pr = job["profiles"]
    with _Stage(res, "profiles", console) as st:
        if not pr["enabled"]:
            st.skip("turned off in the job file ([profiles] enabled = false)")
            return
        if not res.masks:
            st.skip("no catchments were delineated")
            return
        from ..analysis import profiles as P
        from ..analysis.steepness import find_knickpoints, steepness

        fm, net = res.flow, res.network
        theta, a0 = pr["concavity"], pr["reference_area"]
        min_order = job["channels"]["min_order"]
        summaries = []
        for row in res.outlets[res.outlets["cell"] >= 0].itertuples():
            oid, cell = row.outlet_id, int(row.cell)
            name = _safe(oid)
            lfp = P.longest_flow_path(fm, cell, network=net, concavity=theta,
                                      reference_area_m2=a0)
            out = {"longest_flow_path": lfp}
            write_csv(_add(res, res.folder / "profiles" / f"longest_flow_path_{name}.csv"),
                      lfp.to_frame())
            summaries.append({"outlet_id": oid, **lfp.summary()})
            try:
                out["knickpoints_flow_path"] = find_knickpoints(lfp)
            except InputError as exc:
                out["knickpoints_flow_path"] = None
                console.warn(f"outlet {oid}: knickpoints of the flow path: {exc}")
            if net is not None and net.strahler.ravel()[cell] > 0:
                nodes = P.channel_profiles(fm, net, outlet_cell=cell, min_order=min_order,
                                           concavity=theta, reference_area_m2=a0)
                nodes["outlet_id"] = oid  # our id, not the position in this call
                out["channel_nodes"] = nodes
                write_csv(_add(res, res.folder / "profiles" / f"channel_nodes_{name}.csv"),
                          nodes)
                if len(nodes):
                    steep = steepness(nodes, by="profile_id")
                    knick = find_knickpoints(nodes)
                    steep["outlet_id"] = oid
                    knick["outlet_id"] = oid
                    out["steepness"], out["knickpoints"] = steep, knick
                    write_csv(_add(res, res.folder / "profiles" / f"steepness_{name}.csv"),
                              steep)
                    write_csv(_add(res, res.folder / "profiles" / f"knickpoints_{name}.csv"),
                              knick)
            res.profiles[oid] = out
        if summaries:
            write_csv(_add(res, res.folder / "profiles" / "flow_paths.csv"),
                      pd.DataFrame(summaries).drop(columns=["kind"]))
