"""The report's figures, embedded as PNG data URIs: the overview map, the distributions,
and per outlet a map, the longest flow path's profile, the χ–elevation plot, the
hypsometric curve and the design hydrograph.

The per-outlet plots are drawn once, by the steps, into ``figures/`` (one style, one
drawing); the report embeds those files and draws a plot itself (with the same
:mod:`basinkit.plot` function) only when its file is not in the folder, e.g. for outlets
without figures or a folder written without them. The maps and the distributions are the
report's own."""

from __future__ import annotations

import base64
import math

import numpy as np

__all__ = ["Figures", "plot_uri", "OVERVIEW_LABELS_MAX", "OVERVIEW_SEGMENTS_MAX",
           "DISTRIBUTIONS"]

#: The overview labels its outlets only in a report of full sections with at most this many.
OVERVIEW_LABELS_MAX = 30
#: The overview draws at most about this many channel segments (the highest orders first).
OVERVIEW_SEGMENTS_MAX = 20_000
#: Histograms of the summary: (table, column, axis label, log axis).
DISTRIBUTIONS = [
    ("catchment", "area_km2", "catchment area (km²)", True),
    ("catchment", "relief_m", "relief (m)", False),
    ("path", "length_m", "longest flow path (m)", True),
    ("path", "slope_10_85_m_per_m", "flow path slope, 10–85 (m/m)", False),
    ("morphometry", "mean_slope_m_per_m", "mean slope (m/m)", False),
    ("morphometry", "hypsometric_integral", "hypsometric integral (–)", False),
    ("morphometry", "elongation_ratio", "elongation ratio (–)", False),
    ("morphometry", "drainage_density_km_per_km2", "drainage density (km/km²)", False),
]
DPI = 100


def png_uri(fig, dpi=DPI, colours=256):
    """A figure as a PNG data URI, reduced to an adaptive palette of ``colours`` colours
    (about a third of the bytes of full colour, no visible loss on these maps and plots;
    the octree palette keeps the small markers' colours, which the median cut merged into
    the relief's). The PNG holds no date, so the same figure gives the same bytes."""
    from ..plot.png import figure_png

    return _png_uri(figure_png(fig, dpi=dpi, colours=colours))


def plot_uri(plot, *args, **kwargs) -> str:
    """``plot(*args, **kwargs)`` (a :mod:`basinkit.plot` function, without ``ax``) as a PNG
    data URI like :func:`png_uri`, drawn on the figure kept for its kind
    (:func:`basinkit.plot.png.plot_png`: the same bytes, without making the axes and their
    ticks anew for every outlet)."""
    from ..plot.png import plot_png

    return _png_uri(plot_png(plot, *args, dpi=DPI, **kwargs))


def _png_uri(data: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


#: The step figures the report embeds: report figure -> (name after ``figures/<file_id>_``,
#: products whose data it shows; the figure is used only when they are in the folder too).
STEP_FIGURES = {
    "long_profile": ("longest_flow_path", ("profile", "knickpoints")),
    "chi": ("chi_elevation", ("profile", "steepness", "knickpoints")),
    "hypsometry": ("hypsometry", ("hypsometry", "morphometry")),
    "design_hydrograph": ("design_hydrograph", ("design_flows", "hydrographs")),
}


def step_figure_uri(d, oid, which):
    """The data URI of the figure a step wrote for outlet ``oid`` (``which`` a key of
    :data:`STEP_FIGURES`), or None when the file, or a product it was drawn from, is not in
    the folder."""
    name, needs = STEP_FIGURES[which]
    fid = d.file_id.get(oid)
    if fid is None or not all(d.run.has(k) for k in needs):
        return None
    data = d.run.png(f"figures/{fid}_{name}.png")
    return None if data is None else _png_uri(data)


class _PathView:
    """A longest flow path from profile.csv rows, shaped as plot.profiles expects."""

    def __init__(self, rows):
        rows = rows.sort_values("distance_from_outlet_m")
        self.kind = "longest_flow_path"
        self.distance_m = rows["distance_from_outlet_m"].to_numpy(float)
        self.elevation_m = rows["elevation_m"].to_numpy(float)
        zc = "elevation_conditioned_m" if "elevation_conditioned_m" in rows else "elevation_m"
        self.elevation_conditioned_m = rows[zc].to_numpy(float)
        self.x = rows["x"].to_numpy(float) if "x" in rows else None
        self.y = rows["y"].to_numpy(float) if "y" in rows else None

    def __len__(self):
        return int(self.distance_m.size)

    @property
    def length_m(self):
        return float(self.distance_m[-1]) if self.distance_m.size else 0.0


class Figures:
    """Draws the report's figures from what :func:`collect` gathered."""

    def __init__(self, d):
        self.d = d
        self.run = d.run
        self.dem = d.dem
        self._polys = None
        self._channels = None
        self._tree = None
        self._profile = None
        self.overview_labels = None

    def preload(self):
        """Read every layer and table the sections draw from (before forking workers)."""
        import shapely

        self.polygons()
        geoms, _ = self.channels()
        if len(geoms) and self._tree is None:
            self._tree = shapely.STRtree(geoms)
        self._profiles()

    # ------------------------------------------------------------------ layers
    def polygons(self):
        """{outlet id: catchment polygon} from catchments.gpkg."""
        if self._polys is None:
            g = self.run.layer("catchments_gpkg", ["catchments"], columns=["outlet_id"])
            self._polys = {} if g is None else dict(zip(g["outlet_id"].astype(str),
                                                        g.geometry))
        return self._polys

    def channels(self):
        """(geometries, Strahler orders) of channels.gpkg (empty when absent)."""
        if self._channels is None:
            g = self.run.layer("channels_gpkg", ["channels", "channel_segments"],
                               columns=["strahler_order"])
            if g is None or "strahler_order" not in g.columns:
                self._channels = (np.array([], dtype=object), np.array([], dtype=int))
            else:
                self._channels = (np.asarray(g.geometry.values, dtype=object),
                                  g["strahler_order"].fillna(1).to_numpy(int))
        return self._channels

    def _channels_in(self, window):
        import shapely

        geoms, orders = self.channels()
        if not len(geoms):
            return geoms, orders
        if self._tree is None:
            self._tree = shapely.STRtree(geoms)
        x0, x1, y0, y1 = window
        hit = np.sort(self._tree.query(shapely.box(x0, y0, x1, y1)))
        return geoms[hit], orders[hit]

    def _background(self, window=None, max_cells=600_000):
        from ..plot.maps import terrain_image

        path = self.dem.get("raster")
        if path is None:
            return None
        w = self.run.read_window(path, window, max_cells=max_cells)
        if w is None:
            return None
        mpu = self.dem.get("metres_per_unit", 1.0)
        dx = w.cell_size[0] * w.step * mpu
        dy = w.cell_size[1] * w.step * (111_000.0 if self.dem.get("geographic") else mpu)
        return terrain_image(w.array, dx, dy), w.extent

    def _lowered_in(self, window):
        """Cells lowered by conditioning inside ``window`` (none when there are so many
        that they would hide the map)."""
        pts = self.d.lowered_cells
        if pts is None or not len(pts):
            return None
        x0, x1, y0, y1 = window
        sel = pts[(pts[:, 0] >= x0) & (pts[:, 0] <= x1) & (pts[:, 1] >= y0) & (pts[:, 1] <= y1)]
        return sel if 0 < len(sel) <= 5000 else None

    # ------------------------------------------------------------------ maps
    def _window(self, poly, points, min_size_m=400.0, margin=0.12):
        xs = [p[0] for p in points if np.isfinite(p[0])]
        ys = [p[1] for p in points if np.isfinite(p[1])]
        if poly is not None and not poly.is_empty:
            bx0, by0, bx1, by1 = poly.bounds
            xs += [bx0, bx1]
            ys += [by0, by1]
        x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
        mpu = self.dem.get("metres_per_unit", 1.0)
        size = max(max(x1 - x0, y1 - y0) * (1 + 2 * margin), min_size_m / mpu)
        cx, cy, half = 0.5 * (x0 + x1), 0.5 * (y0 + y1), 0.5 * size
        ex = self.dem.get("extent")
        if ex is not None:
            if ex[1] - ex[0] > size:
                cx = min(max(cx, ex[0] + half), ex[1] - half)
            if ex[3] - ex[2] > size:
                cy = min(max(cy, ex[2] + half), ex[3] - half)
            return (max(cx - half, ex[0]), min(cx + half, ex[1]), max(cy - half, ex[2]),
                    min(cy + half, ex[3]))
        return (cx - half, cx + half, cy - half, cy + half)

    def outlet_map(self, oid):
        from ..plot.maps import plot_map

        rec = self.d.tables["catchment"].get(oid, {})
        given = np.array([[rec.get("x_given", np.nan), rec.get("y_given", np.nan)]], float)
        snapped = np.array([[rec.get("x_snapped", np.nan), rec.get("y_snapped", np.nan)]],
                           float)
        poly = self.polygons().get(oid)
        if poly is None and not np.isfinite(snapped).all():
            return None
        win = self._window(poly, [tuple(given[0]), tuple(snapped[0])])
        geoms, orders = self._channels_in(win)
        return plot_uri(plot_map, self._background(win), window=win,
                        divides=[poly] if poly is not None else [], channels=geoms,
                        orders=orders, lowered=self._lowered_in(win),
                        given=given[np.isfinite(given).all(axis=1)],
                        snapped=snapped[np.isfinite(snapped).all(axis=1)],
                        geographic=self.dem.get("geographic", False),
                        metres_per_unit=self.dem.get("metres_per_unit", 1.0),
                        title=f"Catchment of {oid}", legend="below")

    def overview(self):
        """The whole DEM with every catchment; outlet labels only in a report of full
        sections with at most OVERVIEW_LABELS_MAX outlets."""
        from ..plot.maps import plot_map

        d = self.d
        bg = self._background(None, max_cells=1_200_000)
        window = bg[1] if bg is not None else self.dem.get("extent")
        divides = []
        if d.summary_mode:
            g = self.run.layer("catchments_gpkg", ["subcatchments"], columns=["outlet_id"])
            if g is not None:
                divides = list(g.geometry)
        if not divides:
            polys = self.polygons()
            divides = sorted((polys[i] for i in d.ok_ids if polys.get(i) is not None),
                             key=lambda p: -p.area)
        geoms, orders = self.channels()
        if len(geoms) > OVERVIEW_SEGMENTS_MAX:
            cut = np.sort(orders)[::-1][OVERVIEW_SEGMENTS_MAX - 1]
            keep = orders > cut if (orders >= cut).sum() > OVERVIEW_SEGMENTS_MAX else \
                orders >= cut
            geoms, orders = geoms[keep], orders[keep]
        cat = d.tables["catchment"]
        pts = np.array([[cat.get(i, {}).get("x_snapped", np.nan),
                         cat.get(i, {}).get("y_snapped", np.nan)] for i in d.ok_ids], float)
        pts = pts.reshape(-1, 2)
        ok = np.isfinite(pts).all(axis=1)
        labels = None
        if not d.summary_mode and ok.sum() <= OVERVIEW_LABELS_MAX:
            labels = [i for i, k in zip(d.ok_ids, ok) if k]
        if window is None:
            if not ok.any():
                return None
            window = (pts[ok, 0].min(), pts[ok, 0].max(), pts[ok, 1].min(), pts[ok, 1].max())
        lowered = self._lowered_in(window) if not d.summary_mode else None
        fig = plot_map(bg, window=window, divides=divides, channels=geoms, orders=orders,
                       lowered=lowered, snapped=pts[ok], labels=labels,
                       geographic=self.dem.get("geographic", False),
                       metres_per_unit=self.dem.get("metres_per_unit", 1.0),
                       title="Overview: the whole DEM", legend="right", figsize=(8.2, 6.0))
        self.overview_labels = labels
        return png_uri(fig)

    def distributions(self):
        """Histograms of area and the key descriptors over every delineated outlet."""
        from matplotlib.figure import Figure

        from ..plot.distributions import plot_histogram

        d = self.d
        panels = []
        for src, col, label, log in DISTRIBUTIONS:
            tab = d.tables[src]
            vals = np.array([_num(tab.get(i, {}).get(col)) for i in d.ok_ids], float)
            if np.isfinite(vals).any():
                panels.append((vals, label, log))
        if not panels:
            return None, []
        ncol = 4 if len(panels) > 4 else len(panels)
        nrow = math.ceil(len(panels) / ncol)
        w, h = 2.9 * ncol, 2.35 * nrow
        fig = Figure(figsize=(w, h), dpi=DPI)
        # fixed margins in inches (a layout pass would draw the figure twice)
        fig.subplots_adjust(left=0.5 / w, right=1 - 0.12 / w, bottom=0.45 / h,
                            top=1 - 0.28 / h, wspace=0.32, hspace=0.62)
        for k, (vals, label, log) in enumerate(panels):
            ax = fig.add_subplot(nrow, ncol, k + 1)
            plot_histogram(vals, ax=ax, log=log, xlabel=label)
        return png_uri(fig), [p[1] for p in panels]

    # ------------------------------------------------------------------ per outlet
    def _profiles(self):
        if self._profile is None:
            ids = self.d.sections
            cols = ["outlet_id", "profile_kind", "profile_id", "is_main_stem", "x", "y",
                    "distance_from_outlet_m", "elevation_m", "elevation_conditioned_m",
                    "chi_m"]
            self._profile = {
                "profile": self.run.table("profile", outlet_ids=ids, usecols=cols),
                "steepness": self.run.table("steepness", outlet_ids=ids),
                "knickpoints": self.run.table("knickpoints", outlet_ids=ids),
                "hypsometry": self.run.table("hypsometry", outlet_ids=ids),
            }
        return self._profile

    def _rows(self, key, oid):
        t = self._profiles()[key]
        if t is None or "outlet_id" not in t.columns:
            return None
        r = t[t["outlet_id"] == oid]
        return r if len(r) else None

    def long_profile(self, oid):
        from ..plot.profiles import knickpoints_on, plot_long_profile

        uri = step_figure_uri(self.d, oid, "long_profile")
        if uri:
            return uri
        rows = self._rows("profile", oid)
        if rows is None or "profile_kind" not in rows.columns:
            return None
        lfp = rows[rows["profile_kind"] == "longest_flow_path"]
        if len(lfp) < 2:
            return None
        view = _PathView(lfp)
        knick = knickpoints_on(view, self._rows("knickpoints", oid))
        return plot_uri(plot_long_profile, view, knickpoints=knick,
                        title=f"longest flow path, outlet {oid}")

    def chi_plot(self, oid):
        from ..plot.profiles import plot_chi

        uri = step_figure_uri(self.d, oid, "chi")
        if uri:
            return uri
        rows = self._rows("profile", oid)
        if rows is None or "profile_kind" not in rows.columns:
            return None
        nodes = rows[rows["profile_kind"] == "channel"].copy()
        if len(nodes) < 2 or "chi_m" not in nodes.columns:
            return None
        nodes["is_main_stem"] = nodes["is_main_stem"].map(
            lambda v: str(v).strip().lower() in ("true", "1")).astype(bool)
        steep = self._rows("steepness", oid)
        theta = np.nan
        if steep is not None and "concavity" in steep.columns:
            theta = float(np.nanmedian(steep["concavity"].to_numpy(float)))
        nodes.attrs["concavity"] = theta
        return plot_uri(plot_chi, nodes, knickpoints=self._rows("knickpoints", oid),
                        steepness_table=steep, title=f"χ–elevation, outlet {oid}")

    def hypsometry(self, oid):
        from ..plot.hypsometry import plot_hypsometric_curve

        uri = step_figure_uri(self.d, oid, "hypsometry")
        if uri:
            return uri
        rows = self._rows("hypsometry", oid)
        if rows is None or not {"relative_height", "relative_area_above"} <= set(rows.columns):
            return None
        hi = _num(self.d.tables["morphometry"].get(oid, {}).get("hypsometric_integral"))
        return plot_uri(plot_hypsometric_curve, rows.sort_values("relative_height"),
                        integral=hi, label=f"outlet {oid}",
                        title=f"hypsometric curve, outlet {oid}")


def _num(v):
    try:
        return float(v)
    except (TypeError, ValueError):
        return np.nan
