"""The channels step (``basinkit channels``): the channel network with Strahler order,
Shreve magnitude, segments and junctions; optionally its threshold chosen by the
constant-drop test."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...errors import InputError
from ..progress import as_reporter
from ._common import CAUTION_TEXT, layer_metadata, step_record

__all__ = ["ChannelSettings", "ChannelsResult", "channels_step", "build_network",
           "choose_threshold"]


@dataclass
class ChannelSettings:
    """Settings of the channel network.

    Attributes
    ----------
    min_area_m2 : float, optional
        Upstream area at which channels begin; required unless ``choose_threshold`` picks
        it (then the fallback when no threshold passes).
    slope_area : (exponent, constant), optional
        Slope–area criterion A·S^exponent ≥ constant (Montgomery & Dietrich 1988).
    choose_threshold : (low_m2, high_m2), optional
        Pick the threshold in this range by the constant-drop test.
    threshold_steps : int
    critical_t : float
    min_order : int
        Lowest Strahler order written (segments table and layer; the order raster holds 0
        below it).
    order_raster : bool
        Write strahler_order.tif.
    """

    min_area_m2: float | None = None
    slope_area: tuple | None = None
    choose_threshold: tuple | None = None
    threshold_steps: int = 12
    critical_t: float = 2.0
    min_order: int = 1
    order_raster: bool = True

    def check(self):
        """Raise InputError for settings that cannot work (before any work is done)."""
        if self.min_area_m2 is None and self.choose_threshold is None:
            raise InputError("give --min-area (e.g. 0.5km2) or --choose-threshold LOW:HIGH")
        if self.min_area_m2 is not None and not self.min_area_m2 > 0:
            raise InputError("the channel threshold (--min-area) must be positive, e.g. 2ha")
        if self.slope_area is not None and len(self.slope_area) != 2:
            raise InputError("the slope–area criterion needs an exponent and a constant")
        if int(self.min_order) < 1:
            raise InputError("--min-order must be 1 or more")
        return self

    def parameters(self) -> dict:
        return {"min_area_m2": self.min_area_m2,
                "slope_area_exponent": None if self.slope_area is None else self.slope_area[0],
                "slope_area_constant": None if self.slope_area is None else self.slope_area[1],
                "choose_threshold_m2": (None if self.choose_threshold is None
                                        else list(self.choose_threshold)),
                "threshold_steps": self.threshold_steps, "critical_t": self.critical_t,
                "min_order": int(self.min_order)}


@dataclass
class ChannelsResult:
    """The network and, when the threshold was chosen, the constant-drop test."""

    network: object
    drop_test: object = None

    @property
    def min_area_m2(self) -> float:
        return float(self.network.min_area_m2)


def choose_threshold(fm, settings: ChannelSettings, reporter=None):
    """The channel threshold (m²) and the constant-drop test (None when not run)."""
    from ...analysis.channels import constant_drop_test, threshold_range

    rep = as_reporter(reporter)
    if settings.choose_threshold is None:
        return settings.min_area_m2, None
    lo, hi = settings.choose_threshold
    ths = threshold_range(lo, hi, settings.threshold_steps)
    drop = constant_drop_test(fm, ths, slope_area=settings.slope_area,
                              critical_t=settings.critical_t)
    for r in drop.table.itertuples():
        rep.info(f"  {r.min_area_km2:10.4f} km2  first-order streams "
                 f"{r.first_order_streams:6d}  t = {r.t_statistic:7.2f}  "
                 f"{'passes' if r.passes else 'fails'}")
    if drop.chosen_min_area_m2 is not None:
        rep.info(f"constant-drop test: chose {drop.chosen_min_area_m2 / 1e6:.4f} km2")
        return drop.chosen_min_area_m2, drop
    if settings.min_area_m2 is not None:
        rep.warn("no threshold in the range passes the constant-drop test; using the "
                 f"given --min-area ({settings.min_area_m2:g} m2)")
        return settings.min_area_m2, drop
    raise InputError("no threshold in the range passes the constant-drop test; widen "
                     "--choose-threshold or give --min-area")


def build_network(fm, min_area_m2, slope_area=None, outlet_cells=None, geometry=True):
    """The channel network as every step builds it: segments split at the outlet cells
    (each cell once), so that a segment lies wholly inside or outside each catchment."""
    from ...analysis.channels import extract_channels

    cells = None if outlet_cells is None else np.unique(np.asarray(outlet_cells, np.int64))
    return extract_channels(fm, min_area_m2, slope_area=slope_area, outlet_cells=cells,
                            geometry=geometry)


def channels_step(out, fm, settings: ChannelSettings, outlet_cells=None, reporter=None,
                  parameters: dict | None = None, inputs: dict | None = None,
                  network=None) -> ChannelsResult:
    """Extract the channel network and write channel_segments.csv, channels.gpkg (layers
    ``channels`` and ``junctions``), strahler_order.tif, channels.json and, when the
    threshold was chosen, constant_drop_test.csv.

    Parameters
    ----------
    out : OutputFolder
    fm : FlowModel
    settings : ChannelSettings
    outlet_cells : array of int, optional
        Cells where segments are also split (the placed outlets).
    network : ChannelNetwork, optional
        A network already built with these settings (written as it is).
    """
    rep = as_reporter(reporter)
    settings.check()
    drop = None
    if network is None:
        min_area, drop = choose_threshold(fm, settings, rep)
        network = build_network(fm, min_area, settings.slope_area, outlet_cells)
    net = network
    s = net.summary()
    rep.info(f"{s['segments']:,} segments, {s['junctions']:,} junctions, highest Strahler "
             f"order {s['max_strahler_order']}, {s['total_length_m'] / 1e3:,.1f} km of "
             "channels")
    k = int(settings.min_order)
    seg = net.segments[net.segments["strahler_order"] >= k]
    jun = net.junctions
    files = ["channel_segments.csv", "channels.gpkg", "channels.json"]
    if settings.order_raster:
        files.append("strahler_order.tif")
    if drop is not None:
        files.append("constant_drop_test.csv")
    params = {**settings.parameters(), **(parameters or {}),
              "min_area_given_m2": settings.min_area_m2,
              "min_area_m2": float(net.min_area_m2),
              "outlet_cells_split": int(np.unique(net.outlet_cells).size)}
    meta = step_record(fm, params, inputs, network=s, files=files,
                       constant_drop_test=drop.to_dict() if drop is not None else None)
    out.gpkg("channels.gpkg", {"channels": seg, "junctions": jun},
             metadata=layer_metadata(),
             geometry_types={"channels": "LineString", "junctions": "Point"})
    out.csv("channel_segments.csv", seg.drop(columns="geometry"))
    if settings.order_raster:
        t = fm.terrain
        order = np.where(net.strahler >= k, net.strahler, 0)
        order = np.where(t.valid, order, -1).astype(np.int16)
        out.geotiff("strahler_order.tif", order, t.transform, t.crs, nodata=-1,
                    tags={"cautions": CAUTION_TEXT,
                          "content": f"Strahler order of channel cells of order >= {k} (0: "
                                     "not a channel)",
                          "min_area_m2": f"{float(net.min_area_m2):.10g}"})
    if drop is not None:
        out.csv("constant_drop_test.csv", drop.table)
    out.json("channels.json", meta)
    return ChannelsResult(net, drop)
