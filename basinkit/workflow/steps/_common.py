"""Helpers shared by the steps: the provenance record each step writes, the grid facts it
states, and the reporting of per-outlet failures."""

from __future__ import annotations

from ..cautions import CAUTION_TEXT, CAUTIONS

__all__ = ["step_record", "grid_facts", "flow_inputs", "report_failures", "CAUTIONS",
           "CAUTION_TEXT", "layer_metadata"]


def grid_facts(fm) -> dict:
    """CRS, grid shape, cell size (map units and metres) and vertical units of the grid."""
    t = fm.terrain
    g = t.geometry
    mid = t.shape[0] // 2
    crs = t.crs
    unit = "degree" if crs is not None and crs.is_geographic else (
        crs.axis_info[0].unit_name if crs is not None and crs.axis_info else "unknown")
    return {
        "grid_shape": [int(s) for s in t.shape],
        "cell_size": {"x": abs(float(t.transform.a)), "y": abs(float(t.transform.e)),
                      "unit": unit,
                      "x_m_middle_row": float(g.dx[mid]),
                      "y_m_middle_row": float(g.dy_down[mid]),
                      "area_m2_middle_row": float(g.area[mid])},
        "vertical_units": "m (elevations are read as metres)",
        "routing_method": fm.method,
    }


def flow_inputs(fm) -> dict:
    """The flow folder and DEM a step read (for provenance)."""
    return {"flow_folder": fm.parameters.get("flow_folder"), "dem": fm.terrain.source}


def step_record(fm, parameters: dict, inputs: dict | None = None, **extra) -> dict:
    """The provenance record of a step (software, version, parameters, inputs, CRS, grid,
    cautions and anything in ``extra``)."""
    from ...io.writers import provenance

    rec = provenance(parameters, {**flow_inputs(fm), **(inputs or {})}, crs=fm.terrain.crs,
                     shape=fm.shape, cautions=CAUTION_TEXT, **extra)
    rec.update({k: v for k, v in grid_facts(fm).items() if k != "grid_shape"})
    return rec


def layer_metadata() -> dict:
    """GeoPackage layer metadata: the cautions and the software (the step's full record
    is in its JSON file beside; no parameters or timings here, so that the same data give
    the same file from a command and from a job)."""
    from ... import __version__

    return {"cautions": CAUTION_TEXT, "software": f"basinkit {__version__}"}


def report_failures(reporter, errors, stage):
    """Tell the reporter about every failed outlet of an errors table (``outlet_id``,
    ``source``, ``reason``)."""
    for r in errors.itertuples(index=False):
        reporter.outlet_failed(str(r.outlet_id), str(r.reason), stage,
                               source=str(getattr(r, "source", "") or ""))
