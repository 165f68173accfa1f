"""The profiles step (``basinkit profile``): longitudinal profiles, χ, k_sn per channel
segment, knickpoints and the flow paths (longest flow path and main stem) of every placed
outlet, in one table per product with an ``outlet_id`` column."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ...errors import BasinkitError, InputError
from ..parallel import FORK_MIN_ITEMS, map_outlets, shared
from ._figures import FIGURE_FORK_MIN_ITEMS
from ..progress import as_reporter
from ._common import layer_metadata, step_record

__all__ = ["ProfileSettings", "ProfilesResult", "profiles_step", "FIGURES"]

# the profile figures of a figure outlet: figures/<file_id>_<what>.png
FIGURES = ("long_profile", "longest_flow_path", "chi_elevation", "slope_area")


@dataclass
class ProfileSettings:
    """Settings of the profiles step (defaults as ``basinkit profile``).

    Attributes
    ----------
    min_order : int
        Lowest Strahler order of the channels profiled.
    concavity : float, optional
        θ for χ and k_sn (default 0.45); ``fit_concavity`` fits it per outlet instead.
    reference_area_m2 : float
        A0 for χ.
    slope_window_m, slope_drop_m : float, optional
        Local slope over a distance window (default 20 m) or a vertical interval.
    vertical_precision_m : float
        Vertical precision of the DEM, for knickpoint detection.
    figures : bool
        Write PNG figures for the figure outlets.
    figure_outlets : tuple of str
        Ids of the outlets that get figures (default: the first 20).
    workers : int
        Processes sharing the outlets (forked; 1 = this process). The products do not
        depend on it.
    """

    min_order: int = 2
    concavity: float | None = None
    fit_concavity: bool = False
    reference_area_m2: float = 1.0
    slope_window_m: float | None = None
    slope_drop_m: float | None = None
    vertical_precision_m: float = 1.0
    figures: bool = True
    figure_outlets: tuple = field(default_factory=tuple)
    workers: int = 2

    def check(self):
        """Raise InputError for settings that cannot work (before any work is done)."""
        from ...analysis.profiles import _check_theta

        if self.concavity is not None and self.fit_concavity:
            raise InputError("give either --concavity or --fit-concavity, not both")
        _check_theta(self.theta)
        if not self.reference_area_m2 > 0:
            raise InputError("the reference area must be positive (e.g. 1m2)")
        if self.slope_window_m is not None and self.slope_drop_m is not None:
            raise InputError("give either --slope-window or --slope-drop, not both")
        if int(self.min_order) < 1:
            raise InputError("--min-order must be 1 or more")
        if not self.vertical_precision_m > 0:
            raise InputError("the vertical precision must be positive (e.g. 0.5m)")
        if int(self.workers) < 1:
            raise InputError("--workers must be 1 or more")
        return self

    @property
    def theta(self) -> float:
        from ...analysis.profiles import DEFAULT_CONCAVITY

        return DEFAULT_CONCAVITY if self.concavity is None else float(self.concavity)

    def parameters(self) -> dict:
        return {"min_order": int(self.min_order),
                "concavity": None if self.fit_concavity else self.theta,
                "fit_concavity": self.fit_concavity,
                "reference_area_m2": self.reference_area_m2,
                "slope_window_m": self.slope_window_m, "slope_drop_m": self.slope_drop_m,
                "vertical_precision_m": self.vertical_precision_m, "figures": self.figures,
                "figure_outlets": list(self.figure_outlets)}


@dataclass
class ProfilesResult:
    """Tables written by the profiles step, and the flow paths per outlet.

    Attributes
    ----------
    flow_paths : pandas.DataFrame
        flow_paths.csv. profile.csv (the nodes), steepness.csv and knickpoints.csv are
        written as the outlets come and not kept: read them back with pandas.
    paths : dict
        ``{outlet_id: {"warnings": [...]}}`` for every outlet profiled; for the figure
        outlets also ``"longest_flow_path"`` and ``"main_stem"`` (Profile), ``"steepness"``
        and ``"knickpoints"`` (the other outlets' are in the files only, so that a batch
        of thousands holds no per-outlet tables).
    failures : pandas.DataFrame
        ``outlet_id, source, reason`` of outlets whose profiles failed.
    """

    flow_paths: object
    paths: dict
    failures: object

    @property
    def failed(self) -> int:
        return int(len(self.failures))


def profiles_step(out, fm, placed, network, settings: ProfileSettings | None = None,
                  reporter=None, parameters: dict | None = None,
                  inputs: dict | None = None) -> ProfilesResult:
    """Profiles of every placed outlet; writes profile.csv, steepness.csv,
    knickpoints.csv, flow_paths.csv, profiles.gpkg (layers ``profiles`` and
    ``knickpoints``), profiles.json and the figures of the figure outlets.

    Every outlet gets its longest flow path and main stem (two rows of flow_paths.csv and
    their nodes in profile.csv). An outlet on a channel of Strahler order ≥ ``min_order``
    also gets the profiles of every such channel upstream, k_sn per channel segment
    (steepness.csv) and knickpoints; an outlet off those channels gets a warning instead.
    An outlet whose computation fails keeps two rows in flow_paths.csv with the reason in
    ``error``; the others go on.

    Parameters
    ----------
    out : OutputFolder
    fm : FlowModel
    placed : PlacedOutlets
    network : ChannelNetwork
        With geometry (:func:`basinkit.workflow.steps.build_network`).
    settings : ProfileSettings, optional
    """
    import pandas as pd

    s = (settings or ProfileSettings()).check()
    rep = as_reporter(reporter)
    tab = placed.table
    fig_rows, missing = placed.figure_rows(s.figure_outlets)
    if missing:
        rep.warn(f"no figures for {', '.join(map(repr, missing[:10]))}: not among the "
                 "outlets placed")
    fig_rows = set(fig_rows) if s.figures else set()
    nc = fm.ncols
    rows = list(tab[["outlet_id", "file_id", "cell", "source"]].itertuples(index=False))
    items = [(k, str(o), str(f), int(c), k in fig_rows) for k, (o, f, c, _) in
             enumerate(rows)]
    # outlets with figures are heavy (four figures each): a pool pays off with a few of them
    results = map_outlets(_profile_item, items, workers=s.workers, progress=rep.progress,
                          desc="profiles",
                          min_items=FIGURE_FORK_MIN_ITEMS if fig_rows else FORK_MIN_ITEMS,
                          shared={"fm": fm, "network": network, "settings": s,
                                  "strahler": np.asarray(network.strahler).ravel()})
    layers = _Layers(fm, network)
    with out.csv_stream("profile.csv", NODE_COLUMNS) as node_table, \
            out.csv_stream("steepness.csv", STEEPNESS_COLUMNS) as steep_table, \
            out.csv_stream("knickpoints.csv", KNICKPOINT_COLUMNS) as knick_table, \
            out.gpkg_stream("profiles.gpkg", layers.schema, metadata=layer_metadata(),
                            geometry_types={"profiles": "LineString",
                                            "knickpoints": "Point"}) as write_layer:
        layers.write, layers.tables = write_layer, (steep_table, knick_table)
        c = _collect(out, results, items, rows, nc, rep, node_table, layers)
    summaries, fails, paths = c.summaries, c.fails, c.paths
    flow_paths = _concat([pd.DataFrame(c.path_rows)], _PATH_FIRST)
    failures = pd.DataFrame(fails, columns=["outlet_id", "source", "reason"])
    files = ["profile.csv", "steepness.csv", "knickpoints.csv", "flow_paths.csv",
             "profiles.gpkg", "profiles.json"]
    params = {**s.parameters(), **(parameters or {}),
              "channel_min_area_m2": float(network.min_area_m2),
              "snapping": placed.snapping}
    meta = step_record(fm, params, inputs, files=files, snapping=placed.snapping,
                       outlets=summaries, failures=fails,
                       outlets_profiled=len(summaries), outlets_failed=len(fails))
    out.csv("flow_paths.csv", flow_paths)
    out.json("profiles.json", meta)
    rep.info(f"profiles of {len(summaries)} outlet(s)"
             + (f", {len(fails)} failed" if fails else ""))
    return ProfilesResult(flow_paths, paths, failures)


# profile.csv: channel nodes (``profile_id`` .. ``ksn_local_m_per_m``) and flow-path nodes
# (``node``), one fixed header whatever the outlets; a column a row's kind lacks is empty
NODE_COLUMNS = ["outlet_id", "profile_kind", "profile_id", "is_main_stem", "segment_id",
                "strahler_order", "cell", "row", "col", "x", "y", "downstream_cell",
                "distance_from_outlet_m", "elevation_m", "elevation_conditioned_m",
                "upstream_area_m2", "slope_m_per_m", "chi_m", "ksn_local_m_per_m", "node"]
# steepness.csv and knickpoints.csv (the columns of analysis.steepness's tables, the outlet
# first), streamed as the outlets come
STEEPNESS_COLUMNS = ["outlet_id", "segment_id", "profile_id", "strahler_order", "ksn_m_per_m",
                     "ksn_stderr_m_per_m", "r2", "node_count", "chi_min_m", "chi_max_m",
                     "elevation_min_m", "elevation_max_m", "concavity", "reference_area_m2"]
KNICKPOINT_COLUMNS = ["outlet_id", "profile_id", "row", "col", "x", "y",
                      "distance_from_outlet_m", "elevation_m", "chi_m", "upstream_area_m2",
                      "ksn_below_m_per_m", "ksn_above_m_per_m", "ksn_change_ratio", "step_m",
                      "relief_m", "kind", "in_filled_depression"]
_PATH_FIRST = ["outlet_id", "file_id", "kind", "length_m", "slope_10_85_m_per_m",
               "average_slope_m_per_m", "outlet_elevation_m", "head_elevation_m",
               "outlet_elevation_conditioned_m", "head_elevation_conditioned_m",
               "upstream_area_m2", "concavity", "reference_area_m2", "chi_head_m",
               "node_count", "outlet_x", "outlet_y", "head_x", "head_y", "warning", "error"]


@dataclass
class _Collected:
    """What the parent keeps of the outlets' results (the node rows are streamed)."""

    path_rows: list = field(default_factory=list)
    summaries: list = field(default_factory=list)
    fails: list = field(default_factory=list)
    paths: dict = field(default_factory=dict)


def _collect(out, results, items, rows, nc, rep, node_table, layers) -> _Collected:
    """Take the outlets' results in order: their rows to profile.csv as they come, to
    steepness.csv, knickpoints.csv and profiles.gpkg by chunks of outlets (``layers``);
    the flow paths' rows and the summaries kept."""
    c = _Collected()
    path_rows, summaries, fails, paths = c.path_rows, c.summaries, c.fails, c.paths
    # results first in zip: the progress generator then runs to its end (its last line)
    try:  # an error or an interrupt here ends the workers now (not at exit)
        for r, (k, oid, fid, cell, _) in zip(results, items):
            src = str(rows[k].source)
            if "error" in r:
                fails.append({"outlet_id": oid, "source": src, "reason": r["error"]})
                rep.outlet_failed(oid, r["error"], "profiles", source=src)
                for kind in ("longest_flow_path", "main_stem"):
                    path_rows.append({"outlet_id": oid, "file_id": fid, "kind": kind,
                                      "error": r["error"]})
                continue
            summary = r["summary"]
            summary.update(outlet_row=cell // nc, outlet_col=cell % nc, source=src)
            for w in summary.get("warnings", []):
                rep.warn(f"outlet {oid!r}: {w}")
            node_table.write_text(r["node_rows"])
            warning = "; ".join(summary.get("warnings", []))
            for ps in r["path_summaries"]:
                path_rows.append({"outlet_id": oid, "file_id": fid, **ps,
                                  "warning": warning, "error": ""})
            layers.add(oid, r["steepness"], r["knickpoints"],
                       zip(r["path_summaries"], r["path_lines"]))
            summaries.append(summary)
            paths[oid] = {"warnings": summary.get("warnings", [])}
            if "lfp" in r:
                paths[oid].update(longest_flow_path=r["lfp"], main_stem=r["ms"],
                                  steepness=r["steepness"], knickpoints=r["knickpoints"])
            for what, png in r.get("figures", {}).items():
                out.data(f"figures/{fid}_{what}.png", png)
        layers.flush()
    finally:
        results.close()
    return c


def _concat(frames, first):
    import pandas as pd

    frames = [f for f in frames if len(f)] or frames[:1]
    df = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=first)
    for c in first:
        if c not in df.columns:
            df[c] = pd.Series(dtype=object)
    lead = [c for c in first if c in df.columns]
    return df[lead + [c for c in df.columns if c not in lead]]


def _profile_item(item):
    """One outlet's profiles (and figures), from the shared flow model and network: a dict
    with ``frames`` (channel nodes, main stem, longest flow path), ``steepness``,
    ``knickpoints``, ``lfp``, ``ms``, ``summary`` and ``figures`` (PNG bytes), or
    ``error``."""
    k, oid, fid, cell, figures = item
    fm, net, s = shared("fm"), shared("network"), shared("settings")
    try:
        channel, steep, knick, (lfp, ms), summary = _one_outlet(
            fm, net, shared("strahler"), oid, fid, cell, s)
    except BasinkitError as exc:
        return {"error": str(exc)}
    from ...io.writers import csv_rows

    # the rows of profile.csv, formatted here (in the worker) and streamed by the parent:
    # the nodes of a batch are millions of rows, never held whole
    text = [csv_rows(channel, NODE_COLUMNS)]
    for prof in (ms, lfp):
        f = prof.to_frame()
        f.insert(0, "outlet_id", oid)
        text.append(csv_rows(f, NODE_COLUMNS))
    r = {"node_rows": "".join(text), "steepness": steep, "knickpoints": knick,
         "summary": summary, "path_summaries": [lfp.summary(), ms.summary()],
         "path_lines": [_line_wkb(lfp), _line_wkb(ms)]}
    if figures:  # the flow paths themselves travel back only for the figure outlets
        r["figures"] = _figures(oid, channel, steep, knick, lfp, ms)
        r["lfp"], r["ms"] = lfp, ms
    return r


def _line_wkb(prof) -> bytes:
    """A flow path as a WKB line string (a one-node path as a line of two equal nodes)."""
    import shapely

    xy = np.column_stack([prof.x, prof.y])
    if len(xy) == 1:
        xy = np.vstack([xy, xy])
    return shapely.to_wkb(shapely.linestrings(xy))


def _one_outlet(fm, net, strahler, oid, fid, cell, s):
    """Profiles of one outlet: (channel nodes, steepness, knickpoints,
    (longest flow path, main stem), summary)."""
    from ...analysis import profile_fits as F
    from ...analysis import profiles as P
    from ...analysis.steepness import find_knickpoints, steepness

    summary = {"outlet_id": oid, "file_id": fid}
    warnings = []
    theta = s.theta
    order_here = int(strahler[cell])
    on_channel = order_here >= int(s.min_order)
    if s.fit_concavity and on_channel:
        cf = F.fit_concavity(fm, net, cell, min_order=s.min_order,
                             reference_area_m2=s.reference_area_m2)
        theta = float(cf.concavity)
        summary["concavity_fit"] = cf.to_dict()
        if cf.at_grid_edge:
            warnings.append(f"the best-fit concavity {theta:.2f} lies at the end of the range "
                            "tried; the fit is not reliable (too few or too short "
                            "tributaries?)")
    opts = dict(concavity=theta, reference_area_m2=s.reference_area_m2,
                slope_window_m=s.slope_window_m, slope_drop_m=s.slope_drop_m)
    if on_channel:
        nodes = P.channel_profiles(fm, net, cell, min_order=s.min_order, **opts)
    else:
        nodes = P.channel_profiles(fm, net, cell, min_order=s.min_order, **opts).iloc[:0]
        warnings.append(f"the outlet lies on a channel of Strahler order {order_here}, below "
                        f"the lowest order profiled ({s.min_order}): flow paths only, no "
                        "channel profiles, k_sn or knickpoints (snap it onto a channel with "
                        "--snap-to-channel AREA, or lower --min-order or the channel "
                        "threshold)")
    nodes["outlet_id"] = oid
    nodes.insert(1, "profile_kind", "channel")
    steep = steepness(nodes, by="segment_id")
    steep["outlet_id"] = oid
    knick = find_knickpoints(nodes, vertical_precision_m=s.vertical_precision_m)
    knick["outlet_id"] = oid
    lfp = P.longest_flow_path(fm, cell, network=net, **opts)
    ms = P.main_stem(fm, cell, network=net, **opts)
    summary.update(concavity=theta, reference_area_m2=s.reference_area_m2,
                   strahler_order_at_outlet=order_here, channel_node_count=int(len(nodes)),
                   segment_count=int(len(steep)), knickpoint_count=int(len(knick)))
    if len(nodes) >= 3:
        try:
            summary["slope_area_fit"] = F.slope_area_fit(nodes["upstream_area_m2"],
                                                         nodes["slope_m_per_m"]).to_dict()
        except InputError as exc:
            summary["slope_area_fit"] = {"error": str(exc)}
        try:
            summary["hack_law_fit"] = F.hack_law_fit(fm, net, cell).to_dict()
        except InputError as exc:
            summary["hack_law_fit"] = {"error": str(exc)}
    if warnings:
        summary["warnings"] = warnings
    return nodes, steep, knick, (lfp, ms), summary


def _figures(oid, nodes, steep, knick, lfp, ms) -> dict:
    """The four profile figures of one figure outlet, as PNG bytes by name."""
    import warnings

    from ...analysis import profile_fits as F
    from ...plot import profiles as G
    from ...plot.png import plot_png

    ms_k = None
    if len(knick) and nodes["is_main_stem"].astype(bool).any():
        main_id = nodes.loc[nodes["is_main_stem"].astype(bool), "profile_id"].iloc[0]
        ms_k = knick[knick["profile_id"] == main_id]
    sa = None
    if len(nodes) >= 3:
        try:
            sa = F.slope_area_fit(nodes["upstream_area_m2"], nodes["slope_m_per_m"])
        except InputError:
            sa = None
    # each drawn before the next is made: plot_png reuses the figure kept for its kind
    plots = {
        "long_profile": (G.plot_long_profile, (ms,),
                         {"knickpoints": ms_k, "title": f"main stem, outlet {oid}"}),
        "longest_flow_path": (G.plot_long_profile, (lfp,),
                              {"knickpoints": G.knickpoints_on(lfp, knick),
                               "title": f"longest flow path, outlet {oid}"}),
        "chi_elevation": (G.plot_chi, (nodes,),
                          {"knickpoints": knick, "steepness_table": steep,
                           "title": f"χ–elevation, outlet {oid}"}),
        "slope_area": (G.plot_slope_area, (nodes["upstream_area_m2"],
                                           nodes["slope_m_per_m"]),
                       {"fit": sa, "title": f"slope–area, outlet {oid}"}),
    }
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # empty plots of outlets without channels
        return {what: plot_png(plot, *args, **kw) for what, (plot, args, kw) in plots.items()}


# the layer ``profiles`` of profiles.gpkg: the channel segments of every outlet with their
# k_sn, and each outlet's main stem and longest flow path
PROFILE_LAYER_COLUMNS = ["outlet_id", "kind", "segment_id", "profile_id", "strahler_order",
                         "ksn_m_per_m", "ksn_stderr_m_per_m", "r2", "node_count", "chi_min_m",
                         "chi_max_m", "elevation_min_m", "elevation_max_m", "concavity",
                         "reference_area_m2", "length_m", "slope_10_85_m_per_m",
                         "average_slope_m_per_m"]
_KNICK_TYPES = {"outlet_id": object, "profile_id": "int32", "row": "int32", "col": "int32",
                "kind": object, "in_filled_depression": bool}
# outlets per chunk written to profiles.gpkg
LAYER_CHUNK = 128


class _Layers:
    """steepness.csv's, knickpoints.csv's and profiles.gpkg's rows, gathered for a chunk
    of outlets and then written (``tables``: the two CsvStreams; ``write``: the
    GeoPackage's, :meth:`OutputFolder.gpkg_stream`). In the GeoPackage, per chunk, the
    outlets' channel segments, then their flow paths; the knickpoints in the second
    layer."""

    def __init__(self, fm, net):
        import geopandas as gpd
        import pandas as pd

        self.crs = fm.terrain.crs.to_wkt() if fm.terrain.crs is not None else None
        seg = net.segments.set_index("segment_id")
        self.geom = seg.geometry
        self.length = seg["length_m"]
        self.write = self.tables = None
        self.chunk = []

        def empty(cols, types):
            return gpd.GeoDataFrame({c: pd.Series(dtype=types.get(c, float)) for c in cols},
                                    geometry=gpd.GeoSeries([], crs=self.crs), crs=self.crs)

        self.schema = {
            "profiles": empty(PROFILE_LAYER_COLUMNS, {"outlet_id": object, "kind": object}),
            "knickpoints": empty(KNICKPOINT_COLUMNS, _KNICK_TYPES)}

    def add(self, oid, steep, knick, paths):
        self.chunk.append((oid, steep, knick, list(paths)))
        if len(self.chunk) >= LAYER_CHUNK:
            self.flush()

    def flush(self):
        import geopandas as gpd
        import pandas as pd
        import shapely

        from ...io.writers import csv_rows

        if not self.chunk:
            return
        steep = [s for _, s, _, _ in self.chunk if len(s)]
        knick = [k for _, _, k, _ in self.chunk if len(k)]
        extra, wkb = [], []
        for oid, _, _, ps_lines in self.chunk:
            for ps, line in ps_lines:
                extra.append({"outlet_id": oid, "kind": ps["kind"], "length_m": ps["length_m"],
                              "concavity": ps["concavity"],
                              "reference_area_m2": ps["reference_area_m2"],
                              "slope_10_85_m_per_m": ps["slope_10_85_m_per_m"],
                              "average_slope_m_per_m": ps["average_slope_m_per_m"]})
                wkb.append(line)
        self.chunk = []
        parts, geoms = [], []
        if steep:
            s = pd.concat(steep, ignore_index=True)
            self.tables[0].write_text(csv_rows(s, STEEPNESS_COLUMNS))
            s["kind"] = "channel_segment"
            s["length_m"] = self.length.reindex(s["segment_id"]).to_numpy()
            parts.append(s)
            geoms.extend(self.geom.reindex(s["segment_id"]).to_numpy())
        if extra:
            parts.append(pd.DataFrame(extra))
            geoms.extend(shapely.from_wkb(wkb))
        if parts:
            table = pd.concat(parts, ignore_index=True).reindex(columns=PROFILE_LAYER_COLUMNS)
            self.write("profiles", gpd.GeoDataFrame(table, geometry=geoms, crs=self.crs))
        if knick:
            k = pd.concat(knick, ignore_index=True).reindex(columns=KNICKPOINT_COLUMNS)
            self.tables[1].write_text(csv_rows(k, KNICKPOINT_COLUMNS))
            pts = shapely.points(k["x"].to_numpy(float), k["y"].to_numpy(float))
            self.write("knickpoints", gpd.GeoDataFrame(k, geometry=pts, crs=self.crs))
