"""The morphometry step (``basinkit morphometry``): network, shape and relief descriptors of
the full catchment of every placed outlet, and the hypsometric curves, one table each."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ...errors import InputError
from ..progress import as_reporter
from ._common import step_record

__all__ = ["MorphometrySettings", "MorphometryResult", "morphometry_step"]


@dataclass
class MorphometrySettings:
    """Settings of the morphometry step.

    Attributes
    ----------
    min_area_m2 : float, optional
        Channel threshold for the network measures (stream counts, Horton ratios,
        drainage density) when no network is given; without either they are left out.
    slope_area : (exponent, constant), optional
    figures : bool
        Write the hypsometric curves of the figure outlets as PNG.
    figure_outlets : tuple of str
        Ids of the outlets that get figures (default: the first 20).
    """

    min_area_m2: float | None = None
    slope_area: tuple | None = None
    figures: bool = True
    figure_outlets: tuple = field(default_factory=tuple)

    def check(self):
        if self.min_area_m2 is not None and not self.min_area_m2 > 0:
            raise InputError("the channel threshold (--min-area) must be positive, e.g. 2ha")
        if self.slope_area is not None and len(self.slope_area) != 2:
            raise InputError("the slope–area criterion needs an exponent and a constant")
        return self

    def parameters(self) -> dict:
        return {"min_area_m2": self.min_area_m2,
                "slope_area_exponent": None if self.slope_area is None else self.slope_area[0],
                "slope_area_constant": None if self.slope_area is None else self.slope_area[1],
                "figures": self.figures, "figure_outlets": list(self.figure_outlets)}


@dataclass
class MorphometryResult:
    """morphometry.csv (``table``, one row per outlet given) and hypsometry.csv
    (``hypsometry``); ``failed`` counts the rows with an error."""

    table: object
    hypsometry: object
    curves: dict = field(default_factory=dict)

    @property
    def failed(self) -> int:
        return int((self.table["error"].astype(str) != "").sum())


def morphometry_step(out, fm, placed, network=None, delineation=None,
                     settings: MorphometrySettings | None = None, reporter=None,
                     parameters: dict | None = None,
                     inputs: dict | None = None) -> MorphometryResult:
    """Measure the full catchment of every placed outlet; write morphometry.csv (one row
    per outlet given, ``error`` for those that could not be measured), hypsometry.csv,
    morphometry.json and the hypsometric curves of the figure outlets.

    Parameters
    ----------
    out : OutputFolder
    fm : FlowModel
    placed : PlacedOutlets
    network : ChannelNetwork, optional
        The channel network (else built from ``settings.min_area_m2``, if given).
    delineation : Delineation, optional
        The catchments of the placed outlets (else delineated here, without polygons).
    settings : MorphometrySettings, optional
    """
    import pandas as pd

    from ...analysis.catchments import delineate
    from ...analysis._measure_arrays import CurveFrames
    from ...analysis.morphometry import morphometry_table
    from ...plot.hypsometry import plot_hypsometric_curve
    from ._figures import draw_pngs

    s = (settings or MorphometrySettings()).check()
    rep = as_reporter(reporter)
    if delineation is None:
        delineation = delineate(fm, placed.table, polygons=False)
    d = delineation
    tab = d.table
    if network is None and s.min_area_m2 is not None:
        from .channels import build_network

        network = build_network(fm, s.min_area_m2, s.slope_area, placed.cells,
                                geometry=False)
    if network is None:
        rep.warn("no channel threshold given (--min-area): network measures (stream counts, "
                 "Horton ratios, drainage density) are left out")
    nested = bool((tab["upstream_outlet_count"] > 0).any())
    cells = tab["cell"].to_numpy(np.int64)
    ranges = None
    if nested:  # full catchments overlap: each is a depth-first label range
        ids = np.arange(1, len(tab) + 1)
        ranges = d.label_ranges()
    else:  # each sub-catchment is a full catchment: the label grid, one window each
        ids = tab["label"].to_numpy(np.int64)
    table, curves = morphometry_table(fm, d.labels, cells, ids=ids, network=network,
                                      return_curves=True, progress=rep.progress,
                                      label_ranges=ranges,
                                      polygons=d.polygons if nested else None)
    keys = [i.item() if hasattr(i, "item") else i for i in table["catchment_id"]]
    curves = [curves.arrays(i) if i in curves else None for i in keys]  # (h, area, elev)
    table = table.drop(columns="catchment_id")
    table.insert(0, "outlet_id", tab["outlet_id"].astype(str).to_numpy())
    table.insert(1, "file_id", tab["file_id"].to_numpy())
    table.insert(2, "source", tab["source"].astype(str).to_numpy())
    table.insert(3, "snap_distance_m", tab["snap_distance_m"].to_numpy())
    errors = placed.errors
    if len(errors):  # outlets that could not be placed: a row each, with the reason
        extra = pd.DataFrame({"outlet_id": errors["outlet_id"].astype(str),
                              "source": errors["source"].astype(str),
                              "error": errors["reason"].astype(str)})
        table = pd.concat([table, extra], ignore_index=True)
    table["error"] = table["error"].fillna("").astype(str)
    by_id = {}
    parts = [(oid, c) for oid, c in zip(tab["outlet_id"].astype(str), curves) if c is not None]
    for oid, c in parts:
        by_id.setdefault(oid, c)
    # one table of every curve, built from the arrays (no frame per outlet)
    hyps = (pd.DataFrame({"outlet_id": [oid for oid, c in parts for _ in range(c[0].size)],
                          "relative_height": np.concatenate([c[0] for _, c in parts]),
                          "relative_area_above": np.concatenate([c[1] / c[1][0]
                                                                 for _, c in parts]),
                          "elevation_m": np.concatenate([c[2] for _, c in parts]),
                          "area_above_km2": np.concatenate([c[1] for _, c in parts]) / 1e6})
            if parts else
            pd.DataFrame(columns=["outlet_id", "relative_height", "relative_area_above",
                                  "elevation_m", "area_above_km2"]))
    fig_rows, missing = placed.figure_rows(s.figure_outlets)
    files = ["morphometry.csv", "hypsometry.csv", "morphometry.json"]
    out.csv("morphometry.csv", table)
    out.csv("hypsometry.csv", hyps)
    if s.figures:
        jobs = []
        for k in fig_rows:
            if curves[k] is None:
                continue
            oid, fid = tab["outlet_id"].iloc[k], tab["file_id"].iloc[k]
            jobs.append((f"figures/{fid}_hypsometry.png", plot_hypsometric_curve,
                         (CurveFrames({0: curves[k]})[0],),
                         {"label": f"outlet {oid}", "title": f"hypsometric curve, outlet {oid}",
                          "integral": float(table["hypsometric_integral"].iloc[k])}))
        for name, png in draw_pngs(jobs):
            out.data(name, png)
            files.append(name)
    bad = table[table["error"] != ""]
    measured = table.iloc[:len(tab)]
    for r in measured[measured["error"] != ""].itertuples():  # placing failures: reported
        rep.outlet_failed(str(r.outlet_id), str(r.error), "morphometry",  # when placed
                          source=str(r.source))
    params = {**s.parameters(), **(parameters or {}), "snapping": placed.snapping,
              "channel_min_area_m2": (None if network is None
                                      else float(network.min_area_m2))}
    meta = step_record(fm, params, inputs, files=files, snapping=placed.snapping,
                       nested_outlets=nested, outlets_measured=int(len(table) - len(bad)),
                       outlets_failed=int(len(bad)), warnings=list(d.warnings)[:1000])
    out.json("morphometry.json", meta)
    rep.info(f"measured {len(table) - len(bad)} catchments"
             + (f"; {len(bad)} of {len(table)} outlets could not be measured (see the error "
                "column)" if len(bad) else ""))
    return MorphometryResult(table, hyps, CurveFrames(by_id))
