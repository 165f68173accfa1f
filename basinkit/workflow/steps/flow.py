"""The flow-folder step (``basinkit route``; ``flow/`` in a job): read the DEM, burn the
given lines, condition, route, accumulate, and write the flow folder."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ...terrain.checks import PLAUSIBLE_ELEVATION_M
from ..progress import as_reporter
from ._common import CAUTION_TEXT

__all__ = ["FlowSettings", "read_terrain", "flow_step"]


@dataclass
class FlowSettings:
    """Settings of the flow step (defaults as ``basinkit route``).

    Attributes
    ----------
    dem : str or Path
    band, crs, sea_level_m, base_level
        How to read the DEM (see :func:`basinkit.read_dem`).
    replace_crs, cell_size, origin
        A CRS replacing the file's; the georeferencing of a raster without any.
    elevation_range_m : (float, float)
        Plausible elevations (default -500 to 9 000 m).
    implausible_elevations : {"refuse", "nodata"}
        What to do with cells outside ``elevation_range_m``.
    conditioning : {"fill", "breach", "none"}
    epsilon, max_breach_depth_m, max_breach_length_m
        Conditioning options (see :func:`basinkit.condition`).
    burn_lines : list of paths
        Line layers (culverts, known channels) burned ``burn_depth_m`` deep first.
    method : {"d8", "dinf", "mfd"}
    mfd_exponent : float
    copy_input : bool
        Keep a copy of the DEM as read in the flow folder (elevation_input.tif); by
        default flow.json names the DEM file and its SHA-256 instead.
    """

    dem: object
    band: int | None = None
    crs: object = None
    sea_level_m: float | None = None
    base_level: object = None
    replace_crs: object = None
    cell_size: float | None = None
    origin: tuple | None = None
    elevation_range_m: tuple = PLAUSIBLE_ELEVATION_M
    implausible_elevations: str = "refuse"
    conditioning: str = "fill"
    epsilon: float = 0.0
    max_breach_depth_m: float | None = None
    max_breach_length_m: float | None = None
    burn_lines: list = field(default_factory=list)
    burn_depth_m: float = 2.0
    method: str = "d8"
    mfd_exponent: float = 1.1
    copy_input: bool = False

    def parameters(self) -> dict:
        return {"dem": str(self.dem), "band": self.band,
                "crs": None if self.crs is None else str(self.crs),
                "sea_level_m": self.sea_level_m,
                "base_level": None if self.base_level is None else str(self.base_level),
                "replace_crs": None if self.replace_crs is None else str(self.replace_crs),
                "cell_size": self.cell_size,
                "origin": None if self.origin is None else list(self.origin),
                "elevation_range_m": list(self.elevation_range_m),
                "implausible_elevations": self.implausible_elevations,
                "conditioning": self.conditioning, "epsilon": self.epsilon,
                "max_breach_depth_m": self.max_breach_depth_m,
                "max_breach_length_m": self.max_breach_length_m,
                "burn_lines": [str(p) for p in self.burn_lines],
                "burn_depth_m": self.burn_depth_m, "method": self.method,
                "mfd_exponent": self.mfd_exponent}

    @staticmethod
    def dem_check_fields(dem_checks: dict | None) -> dict:
        """Settings fields from :func:`basinkit.read_dem` keyword arguments (the
        command's ``dem_checks``)."""
        d = dict(dem_checks or {})
        if "elevation_range" in d:
            d["elevation_range_m"] = tuple(d.pop("elevation_range"))
        return d


def read_terrain(settings: FlowSettings):
    """Read the DEM as the settings say (raises InputError for a bad DEM).

    The kernels of ``route`` load in a background thread meanwhile
    (:mod:`basinkit.workflow.warmup`)."""
    import gc

    from ..warmup import start_warmup

    # loading numba and the kernels makes hundreds of thousands of objects that live as
    # long as the process: the cyclic collector, walking them again and again meanwhile,
    # took a tenth of a second or more; it runs again once they are loaded
    collecting = gc.isenabled()
    gc.disable()
    try:
        warm = start_warmup(_raster_cells(settings.dem), settings.method,
                            settings.conditioning)
        try:
            from ...io.dem import read_dem

            return read_dem(settings.dem, band=settings.band, crs=settings.crs,
                            sea_level=settings.sea_level_m, base_level=settings.base_level,
                            replace_crs=settings.replace_crs, cell_size=settings.cell_size,
                            origin=settings.origin,
                            elevation_range=settings.elevation_range_m,
                            implausible_elevations=settings.implausible_elevations)
        finally:
            warm.join()
    finally:
        if collecting:
            gc.enable()


def _raster_cells(path) -> int:
    """Cells of a raster from its header (0 when it cannot be opened: read_dem says why)."""
    try:
        import rasterio

        with rasterio.open(path) as ds:
            return ds.width * ds.height
    except Exception:  # noqa: BLE001 - read_dem reports an unreadable file properly
        return 0


def read_burn_lines(settings: FlowSettings, crs) -> list:
    """The burn lines of every layer, in the DEM's CRS (InputError for a missing or
    unreadable layer)."""
    from ...io.lines import read_lines

    geoms = []
    for p in settings.burn_lines:
        geoms.extend(read_lines(p, crs))
    return geoms


def flow_step(out, settings: FlowSettings, terrain=None, burn=None, reporter=None):
    """Condition and route the DEM and write the flow folder into ``out``.

    Parameters
    ----------
    out : OutputFolder
        The flow folder (a job passes ``folder.sub("flow")``).
    settings : FlowSettings
    terrain : Terrain, optional
        The DEM already read with :func:`read_terrain` (read here otherwise).
    burn : list of lines, optional
        The burn lines already read with :func:`read_burn_lines`.
    reporter : optional
        See :mod:`basinkit.workflow.progress`.

    Returns
    -------
    FlowModel
        The model as written (later steps of a job read the folder back, as the commands
        do, so that both see the same model).
    """
    import time

    from ...io.flow_folder import FILES, FlowFolderWriter
    from ...routing.flow_model import route

    rep = as_reporter(reporter)
    t0 = time.perf_counter()
    if terrain is None:
        terrain = read_terrain(settings)
    rep.info(f"read {settings.dem}: {terrain.shape[0]} x {terrain.shape[1]} cells, "
             f"{int(terrain.valid.sum()):,} valid")
    src = terrain.source or {}
    if src.get("implausible_elevation_cells"):
        lo, hi = src["elevation_range_m"]
        rep.warn(f"{src['implausible_elevation_cells']:,} cells with elevations outside "
                 f"{lo:g} to {hi:g} m were treated as nodata (implausible elevations)")
    if str(src.get("crs_from", "")).startswith("--replace-crs, replacing"):
        rep.warn(f"the DEM's CRS {src['crs_in_file']} was replaced by "
                 f"{settings.replace_crs} (--replace-crs); the outputs record it")
    if burn is None:
        burn = read_burn_lines(settings, terrain.crs)
    opts = dict(epsilon=settings.epsilon, max_breach_depth=settings.max_breach_depth_m,
                max_breach_length=settings.max_breach_length_m)
    if settings.burn_lines:
        opts.update(burn=burn, burn_depth=settings.burn_depth_m)
    folder = out.folder
    # the conditioned elevations and the directions are written in a background thread
    # while route() goes on; the rest once the model is complete
    with FlowFolderWriter(folder, overwrite=True) as writer:
        writer.georeference(terrain)
        fm = route(terrain, method=settings.method, conditioning=settings.conditioning,
                   mfd_exponent=settings.mfd_exponent, ready=writer.ready, **opts)
        if settings.burn_lines:  # the layers' names, not the geometries, in the record
            fm.parameters["burn"] = [str(p) for p in settings.burn_lines]
        if settings.sea_level_m is not None:
            fm.parameters["sea_level"] = settings.sea_level_m
        if settings.base_level is not None:
            fm.parameters["base_level"] = str(settings.base_level)
        for line in (fm.summary.lines() if fm.summary else []):
            rep.info(line)
        inputs = {}
        if settings.burn_lines:
            from ...io.hashing import file_sha256

            inputs = {f"burn_lines_{i + 1}": {"path": str(p), "sha256": file_sha256(p)}
                      for i, p in enumerate(settings.burn_lines)}
        writer.finish(fm, copy_input=settings.copy_input,
                      extra_provenance={"cautions": CAUTION_TEXT,
                                        "burn_line_inputs": inputs})
    for name in FILES.values():
        if (Path(folder) / name).exists():
            out.adopt(name)
    rep.info(f"wrote flow folder {out.destination} ({time.perf_counter() - t0:.1f} s)")
    return fm
