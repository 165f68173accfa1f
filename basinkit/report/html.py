"""The HTML report of a job: one self-contained file (figures embedded as PNG, CSS inline,
nothing fetched from the network), printable to PDF from a browser.

For every outlet: a map (hillshade, catchment divide, channels by Strahler order, given and
snapped outlet, scale bar, north arrow, map coordinates), a table of catchment figures with
units, the longitudinal profile of the longest flow path, the χ–elevation plot of the
channels, the hypsometric curve and the warnings. Before them: the cautions, an overview
map and a summary table; after them: the provenance (version, parameters, input hashes,
timings).
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
from pathlib import Path

import numpy as np

__all__ = ["render_report", "write_report", "CAUTIONS", "FIGURE_ROWS"]

CAUTIONS = [
    "Catchment boundaries, flow paths and channels derived from a DEM are estimates; their "
    "accuracy depends on the DEM's resolution, vertical accuracy and date.",
    "Culverts, storm sewers, diversions and other structures are represented only where "
    "they were burned into the DEM (see the burned lines in the provenance). Anything not "
    "burned in is treated as solid ground: embankments act as dams.",
    "Verify catchment boundaries and outlet positions in the field before relying on them.",
    "For permits and design, defer to local codes, agency procedures and licensed "
    "professional judgement.",
]

# palette of our own
INK = "#1c2b36"
ACCENT = "#1f6f78"
DIVIDE = "#e07b24"
GIVEN = "#111111"
SNAPPED = "#c0392b"
BURNED = "#7a3db8"
PLOT_SIZE = (5.4, 3.5)  # inches: profile, χ and hypsometric figures
ORDER_COLOURS = ["#7ccdf0", "#3fa9e0", "#1f82c8", "#1d5cae", "#1b3d8f", "#16246b",
                 "#0f1450", "#0b0633"]

#: Rows of the per-outlet figure table: (label, table, column, unit, format).
#: ``table`` is "catchment" (catchments.csv), "morphometry" (morphometry.csv) or "path"
#: (profiles/flow_paths.csv).
FIGURE_ROWS = [
    ("Catchment area", "catchment", "area_km2", "km²", "{:.4g}"),
    ("Catchment area", "catchment", "area_ha", "ha", "{:.4g}"),
    ("Perimeter (smoothed)", "morphometry", "perimeter_m", "m", "{:,.0f}"),
    ("Outlet, snapped (x, y)", "outlet", "xy_snapped", "map units", None),
    ("Outlet as given (x, y)", "outlet", "xy_given", "map units", None),
    ("Snap distance", "catchment", "snap_distance_m", "m", "{:.1f}"),
    ("Outlets upstream", "catchment", "upstream_outlet_count", "", "{:d}"),
    ("Lowest elevation", "morphometry", "min_elevation_m", "m", "{:.1f}"),
    ("Mean elevation", "morphometry", "mean_elevation_m", "m", "{:.1f}"),
    ("Highest elevation", "morphometry", "max_elevation_m", "m", "{:.1f}"),
    ("Relief", "morphometry", "relief_m", "m", "{:.1f}"),
    ("Mean slope", "morphometry", "mean_slope_m_per_m", "m/m", "{:.3f}"),
    ("Longest flow path", "path", "length_m", "m", "{:,.0f}"),
    ("Flow path slope, 10–85", "path", "slope_10_85_m_per_m", "m/m", "{:.4f}"),
    ("Flow path slope, average", "path", "average_slope_m_per_m", "m/m", "{:.4f}"),
    ("Basin length (straight)", "morphometry", "basin_length_straight_m", "m", "{:,.0f}"),
    ("Elongation ratio (Schumm)", "morphometry", "elongation_ratio", "–", "{:.3f}"),
    ("Circularity ratio (Miller)", "morphometry", "circularity_ratio", "–", "{:.3f}"),
    ("Form factor (Horton)", "morphometry", "form_factor", "–", "{:.3f}"),
    ("Relief ratio (Schumm)", "morphometry", "relief_ratio", "m/m", "{:.4f}"),
    ("Melton ruggedness", "morphometry", "melton_ruggedness", "–", "{:.3f}"),
    ("Hypsometric integral", "morphometry", "hypsometric_integral", "–", "{:.3f}"),
    ("Highest Strahler order", "morphometry", "max_strahler_order", "", "{:d}"),
    ("Streams (Strahler)", "morphometry", "stream_count", "", "{:d}"),
    ("Total stream length", "morphometry", "total_stream_length_m", "m", "{:,.0f}"),
    ("Drainage density", "morphometry", "drainage_density_km_per_km2", "km/km²", "{:.2f}"),
    ("Bifurcation ratio", "morphometry", "bifurcation_ratio", "–", "{:.2f}"),
]

CSS = """
:root { --ink: %(ink)s; --accent: %(accent)s; --paper: #fbfaf7; --rule: #d9d4c7;
        --warn: #8a3a12; --warnbg: #fdf1e6; --cautionbg: #eef5f3; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.45 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
main { max-width: 1120px; margin: 0 auto; padding: 0 24px 48px; }
header.top { background: var(--ink); color: #f3f1ea; padding: 22px 24px 18px; }
header.top .inner { max-width: 1120px; margin: 0 auto; }
header.top h1 { margin: 0 0 4px; font-size: 26px; font-weight: 600; letter-spacing: .2px; }
header.top p { margin: 2px 0; color: #cfd8dc; }
h2 { font-size: 20px; margin: 34px 0 10px; padding-bottom: 4px;
     border-bottom: 2px solid var(--accent); }
h3 { font-size: 16px; margin: 18px 0 6px; color: var(--accent); }
.cautions { background: var(--cautionbg); border-left: 5px solid var(--accent);
            padding: 10px 16px; margin: 20px 0; }
.cautions h2 { border: none; margin: 4px 0; font-size: 17px; }
.cautions li { margin: 3px 0; }
.warnings { background: var(--warnbg); border-left: 5px solid var(--warn);
            padding: 8px 16px; margin: 10px 0; }
.warnings h3 { color: var(--warn); margin: 4px 0; }
.warnings li { margin: 3px 0; }
.ok { color: #3c6e47; }
table { border-collapse: collapse; width: 100%%; font-size: 13.5px; }
th, td { padding: 4px 8px; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: #efece4; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.unit { color: #5b6770; white-space: nowrap; }
table.summary td, table.summary th { white-space: nowrap; }
table.summary td.desc { white-space: normal; }
.outlet { margin-top: 26px; padding-top: 4px; border-top: 1px dashed var(--rule); }
.outlet .desc { color: #4a5861; margin: 0 0 8px; }
.pair { display: grid; grid-template-columns: 1fr 1fr; gap: 18px; align-items: start;
        margin-top: 12px; }

figure { margin: 0; }
figure img { width: 100%%; height: auto; display: block; border: 1px solid var(--rule);
             background: white; }
figcaption { font-size: 12.5px; color: #5b6770; margin-top: 3px; }
nav.toc { columns: 3; font-size: 13.5px; margin: 6px 0 0; }
nav.toc a { color: var(--accent); text-decoration: none; }
pre.params { background: #f2efe8; padding: 10px; font-size: 12px; overflow-x: auto;
             white-space: pre-wrap; word-break: break-all; }
code { font-size: 12.5px; }
footer { margin-top: 40px; font-size: 12.5px; color: #6b767e; }
@media (max-width: 860px) { .pair { grid-template-columns: 1fr; } nav.toc { columns: 1; } }
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { background: white; font-size: 10.5pt; }
  header.top { background: white; color: var(--ink); border-bottom: 2px solid var(--ink);
               padding: 0 0 6px; }
  header.top p { color: #333; }
  main { max-width: none; padding: 0; }
  nav.toc { display: none; }
  .outlet { break-before: page; border-top: none; }
  .pair { grid-template-columns: 1fr 1fr; }
  figure, table, .warnings, .cautions { break-inside: avoid; }
  a { color: inherit; text-decoration: none; }
}
""" % {"ink": INK, "accent": ACCENT}


# ----------------------------------------------------------------------------- helpers
def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _png(fig, dpi=110, quantize=None) -> str:
    """Render a matplotlib Figure to a base64 PNG data URI."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from PIL import Image

    canvas = FigureCanvasAgg(fig)
    fig.set_dpi(dpi)  # tight_layout, if any, was computed in inches: unaffected
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    img = Image.fromarray(rgba[..., :3].copy())
    if quantize:  # an adaptive 8-bit palette: a third of the bytes, no visible loss
        img = img.quantize(colors=quantize, method=Image.Quantize.MEDIANCUT, dither=0)
    buf = io.BytesIO()
    img.save(buf, format="PNG", optimize=False, compress_level=3)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _img(uri, alt, caption=None, cls="") -> str:
    cap = f"<figcaption>{_esc(caption)}</figcaption>" if caption else ""
    return (f'<figure class="{cls}"><img src="{uri}" alt="{_esc(alt)}">{cap}</figure>')


def _fmt(value, fmt):
    if value is None:
        return "–"
    try:
        if isinstance(value, (float, np.floating)) and not np.isfinite(value):
            return "–"
    except TypeError:
        pass
    if fmt == "{:d}":
        try:
            return f"{int(value):d}"
        except (TypeError, ValueError):
            return "–"
    try:
        return fmt.format(float(value))
    except (TypeError, ValueError):
        return _esc(value)


def _num_cell(key, value, fmt, cls="num"):
    """A table cell carrying the raw value (``data-value``) and the column name."""
    raw = ""
    if value is not None:
        try:
            v = float(value)
            raw = repr(v) if np.isfinite(v) else ""
        except (TypeError, ValueError):
            raw = ""
    return (f'<td class="{cls}" data-key="{_esc(key)}" data-value="{raw}">'
            f"{_fmt(value, fmt)}</td>")


def _new_figure(w, h):
    from matplotlib.figure import Figure

    return Figure(figsize=(w, h), dpi=110)


def _order_cmap(max_order):
    from matplotlib.colors import BoundaryNorm, ListedColormap

    n = max(int(max_order), 1)
    cols = ORDER_COLOURS[:n] if n <= len(ORDER_COLOURS) else (
        ORDER_COLOURS + [ORDER_COLOURS[-1]] * (n - len(ORDER_COLOURS)))
    return ListedColormap(cols), BoundaryNorm(np.arange(0.5, n + 1.5), n)


def _nice_length(target_m):
    """A round length (1, 2 or 5 × 10^k metres) close to ``target_m``."""
    if target_m <= 0:
        return 1.0
    k = math.floor(math.log10(target_m))
    for m in (5, 2, 1):
        if m * 10 ** k <= target_m:
            return float(m * 10 ** k)
    return float(10 ** k)


class _MapContext:
    """Full-grid layers shared by every map (computed once)."""

    def __init__(self, res):
        from matplotlib.colors import LightSource

        fm = res.flow
        t = fm.terrain
        self.t = t
        z = fm.input_elevation if fm.input_elevation is not None else t.elevation
        z = np.where(t.valid, z, np.nan).astype(np.float64)
        self.z = z
        g = t.geometry
        mid = t.shape[0] // 2
        dx, dy = float(g.dx[mid]), float(g.dy_down[mid])
        zf = np.where(np.isfinite(z), z, np.nanmin(z) if np.isfinite(z).any() else 0.0)
        ls = LightSource(azdeg=315, altdeg=40)
        self.hillshade = ls.hillshade(zf, vert_exag=1.5, dx=dx, dy=dy)
        self.hillshade[~t.valid] = np.nan
        tr = t.transform
        nr, nc = t.shape
        self.extent = (tr.c, tr.c + nc * tr.a, tr.f + nr * tr.e, tr.f)
        # metres per map unit along x at mid-grid (degrees on geographic grids)
        self.m_per_unit_x = dx / abs(tr.a)
        self.geographic = bool(t.crs.is_geographic)
        self.net = res.network
        self.min_order = res.job["channels"]["min_order"] if res.job else 1
        self.segments = None
        if res.network is not None and hasattr(res.network.segments, "geometry"):
            seg = res.network.segments
            self.segments = seg[seg["strahler_order"] >= self.min_order]
        self.max_order = int(res.network.strahler.max()) if res.network is not None else 0
        # one RGB image: grey hillshade under a light elevation tint (35 % opacity)
        from matplotlib.colors import LinearSegmentedColormap, Normalize

        fin = np.isfinite(z)
        lo, hi = (float(z[fin].min()), float(z[fin].max())) if fin.any() else (0.0, 1.0)
        tint = LinearSegmentedColormap.from_list(
            "basinkit_terrain", ["#5f8f6a", "#c9c08a", "#b08a64", "#efe9e0"])
        col = tint(Normalize(lo, hi if hi > lo else lo + 1)(zf))[..., :3]
        hs = np.where(np.isfinite(self.hillshade), self.hillshade, 1.0)[..., None]
        rgb = 0.65 * hs + 0.35 * col
        self.rgb = np.concatenate([rgb, t.valid[..., None].astype(float)], axis=2)
        self.burned = []
        if res.job is not None and res.job["inputs"]["burn_lines"]:
            try:
                from ..io.lines import read_lines

                for p in res.job["inputs"]["burn_lines"]:
                    self.burned.extend(read_lines(p, t.crs))
            except Exception:  # noqa: BLE001 - a map without burn lines is still useful
                self.burned = []


    def crop(self, window):
        """Hillshade, elevation and extent of the cells covering ``window`` (one cell of
        margin), so that a map resamples only what it shows."""
        tr = self.t.transform
        nr, nc = self.t.shape
        xmin, xmax, ymin, ymax = window
        c0 = max(int(math.floor((xmin - tr.c) / tr.a)) - 1, 0)
        c1 = min(int(math.ceil((xmax - tr.c) / tr.a)) + 1, nc)
        r0 = max(int(math.floor((ymax - tr.f) / tr.e)) - 1, 0)
        r1 = min(int(math.ceil((ymin - tr.f) / tr.e)) + 1, nr)
        if c1 <= c0 or r1 <= r0:
            return self.rgb, self.extent
        ext = (tr.c + c0 * tr.a, tr.c + c1 * tr.a, tr.f + r1 * tr.e, tr.f + r0 * tr.e)
        return self.rgb[r0:r1, c0:c1], ext


def _draw_map(ctx, ax, window, polygons, outlets, title=None, label_outlets=False):
    """Hillshade, divides, channels, burned lines and outlets inside ``window``
    (xmin, xmax, ymin, ymax)."""
    import shapely
    from matplotlib.collections import LineCollection
    from matplotlib.ticker import ScalarFormatter

    xmin, xmax, ymin, ymax = window
    rgb, ext = ctx.crop(window)
    ax.imshow(rgb, extent=ext, interpolation="bilinear", zorder=0)
    if ctx.segments is not None and len(ctx.segments):
        cmap, norm = _order_cmap(ctx.max_order)
        box = shapely.box(xmin, ymin, xmax, ymax)
        seg = ctx.segments
        hit = shapely.intersects(np.asarray(seg.geometry.values), box)
        seg = seg[hit]
        if len(seg):
            lines = [np.asarray(g.coords) for g in seg.geometry]
            orders = seg["strahler_order"].to_numpy()
            widths = 0.9 + 0.5 * (orders - 1)
            lc = LineCollection(lines, cmap=cmap, norm=norm, linewidths=widths, zorder=3,
                                capstyle="round")
            lc.set_array(orders.astype(float))
            ax.add_collection(lc)
    for g in ctx.burned:
        xy = np.asarray(g.coords)
        ax.plot(xy[:, 0], xy[:, 1], color=BURNED, lw=2.6, zorder=5, solid_capstyle="butt")
    for k, poly in enumerate(polygons):
        if poly is None:
            continue
        for ring in _rings(poly):
            ax.plot(ring[:, 0], ring[:, 1], color=DIVIDE, lw=1.8 if k == 0 else 1.0,
                    zorder=4)
    for k, o in enumerate(outlets):
        if np.isfinite(o["x_given"]):
            ax.plot(o["x_given"], o["y_given"], marker="o", mfc="none", mec=GIVEN, mew=1.3,
                    ms=7, ls="none", zorder=6)
        if np.isfinite(o.get("x_snapped", np.nan)):
            ax.plot(o["x_snapped"], o["y_snapped"], marker="^", color=SNAPPED, mec="white",
                    mew=0.6, ms=7, ls="none", zorder=7)
            if label_outlets:
                # alternate sides so that labels of neighbouring outlets do not overlap
                right = k % 2 == 0
                ax.annotate(o["outlet_id"], (o["x_snapped"], o["y_snapped"]),
                            xytext=(7 if right else -7, 2), textcoords="offset points",
                            ha="left" if right else "right", va="center", fontsize=7,
                            color=INK, zorder=8,
                            bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none",
                                      alpha=0.75))
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_facecolor("#f4f2ec")
    ax.set_aspect(1.0 / math.cos(math.radians(0.5 * (ymin + ymax))) if ctx.geographic
                  else "equal")
    for axis in (ax.xaxis, ax.yaxis):
        f = ScalarFormatter(useOffset=False)
        f.set_scientific(False)
        axis.set_major_formatter(f)
    ax.tick_params(labelsize=7)
    ax.set_xlabel("longitude (°)" if ctx.geographic else "easting (m)", fontsize=8)
    ax.set_ylabel("latitude (°)" if ctx.geographic else "northing (m)", fontsize=8)
    for lab in ax.get_yticklabels():
        lab.set_rotation(90)
        lab.set_va("center")
    if title:
        ax.set_title(title, fontsize=10, color=INK)
    _scale_bar(ctx, ax, window)
    _north_arrow(ax)


def _rings(poly):
    geoms = getattr(poly, "geoms", [poly])
    out = []
    for g in geoms:
        if g.geom_type != "Polygon":
            continue
        out.append(np.asarray(g.exterior.coords))
        out.extend(np.asarray(i.coords) for i in g.interiors)
    return out


def _scale_bar(ctx, ax, window):
    from matplotlib.patches import Rectangle

    xmin, xmax, ymin, ymax = window
    width_m = (xmax - xmin) * ctx.m_per_unit_x
    L = _nice_length(width_m / 4.0)
    Lu = L / ctx.m_per_unit_x
    h = (ymax - ymin) * 0.012
    x0 = xmin + (xmax - xmin) * 0.05
    y0 = ymin + (ymax - ymin) * 0.05
    ax.add_patch(Rectangle((x0 - 0.02 * (xmax - xmin), y0 - 2.2 * h),
                           Lu + 0.04 * (xmax - xmin), 6.2 * h, fc="white", ec="none",
                           alpha=0.8, zorder=9))
    for i in range(2):
        ax.add_patch(Rectangle((x0 + i * Lu / 2, y0), Lu / 2, h,
                               fc=INK if i == 0 else "white", ec=INK, lw=0.8, zorder=10))
    label = f"{L / 1000:g} km" if L >= 1000 else f"{L:g} m"
    ax.text(x0 + Lu / 2, y0 + 1.6 * h, label, ha="center", va="bottom", fontsize=7.5,
            color=INK, zorder=10)
    ax.text(x0, y0 - 0.6 * h, "0", ha="center", va="top", fontsize=6.5, color=INK, zorder=10)


def _north_arrow(ax):
    ax.annotate("", xy=(0.93, 0.95), xytext=(0.93, 0.83), xycoords="axes fraction",
                arrowprops=dict(arrowstyle="-|>,head_width=0.35,head_length=0.6", lw=1.6,
                                color=INK), zorder=11)
    ax.text(0.93, 0.965, "N", transform=ax.transAxes, ha="center", va="bottom",
            fontsize=10, fontweight="bold", color=INK, zorder=11,
            bbox=dict(boxstyle="circle,pad=0.15", fc="white", ec="none", alpha=0.8))


def _legend(ctx, ax, overview=False, below=False):
    from matplotlib.lines import Line2D

    cmap, norm = _order_cmap(ctx.max_order)
    handles = [Line2D([], [], color=DIVIDE, lw=1.8, label="catchment divide")]
    for k in range(max(ctx.min_order, 1), ctx.max_order + 1):
        handles.append(Line2D([], [], color=cmap(norm(k)), lw=0.9 + 0.5 * (k - 1),
                              label=f"channel, Strahler order {k}"))
    if ctx.burned:
        handles.append(Line2D([], [], color=BURNED, lw=2.6, label="burned line (culvert)"))
    handles.append(Line2D([], [], marker="o", mfc="none", mec=GIVEN, ls="none", ms=7,
                          label="outlet as given"))
    handles.append(Line2D([], [], marker="^", color=SNAPPED, ls="none", ms=7,
                          label="outlet, snapped"))
    if below:
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=2,
                  fontsize=7.5, frameon=False, borderaxespad=0, columnspacing=1.2)
    else:
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0),
                  fontsize=7.5, frameon=False, borderaxespad=0)


def _window_for(ctx, poly, points, min_size_m=400.0, margin=0.12):
    if poly is not None:
        x0, y0, x1, y1 = poly.bounds
    else:
        xs = [p[0] for p in points]
        ys = [p[1] for p in points]
        x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
    for p in points:
        x0, x1 = min(x0, p[0]), max(x1, p[0])
        y0, y1 = min(y0, p[1]), max(y1, p[1])
    w, h = x1 - x0, y1 - y0
    min_u = min_size_m / ctx.m_per_unit_x
    size = max(w, h) * (1 + 2 * margin)
    size = max(size, min_u)
    cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    ex = ctx.extent
    half = 0.5 * size
    # keep inside the grid (a window wider than the grid is cut to it)
    cx = min(max(cx, ex[0] + half), ex[1] - half) if ex[1] - ex[0] > size else cx
    cy = min(max(cy, ex[2] + half), ex[3] - half) if ex[3] - ex[2] > size else cy
    return (max(cx - half, ex[0]), min(cx + half, ex[1]), max(cy - half, ex[2]),
            min(cy + half, ex[3]))


# ----------------------------------------------------------------------------- figures
def _outlet_map(ctx, res, oid, row):
    poly = None
    if res.catchments is not None:
        poly = res.catchments.catchment_polygon(oid)
    pts = [(row["x_given"], row["y_given"]), (row["x_snapped"], row["y_snapped"])]
    win = _window_for(ctx, poly, pts)
    fig = _new_figure(5.6, 6.3)
    ax = fig.add_axes([0.14, 0.29, 0.82, 0.66])
    _draw_map(ctx, ax, win, [poly], [row], title=f"Catchment of {oid}")
    _legend(ctx, ax, below=True)
    return _png(fig, dpi=100)


def _overview_map(ctx, res):
    polys = []
    rows = []
    if res.outlets is not None:
        ok = res.outlets[res.outlets["cell"] >= 0]
        for r in ok.to_dict("records"):
            rows.append(r)
            if res.catchments is not None:
                polys.append(res.catchments.catchment_polygon(r["outlet_id"]))
    # the largest catchment first (thickest line)
    order = np.argsort([-(p.area if p is not None else 0) for p in polys]) if polys else []
    polys = [polys[i] for i in order]
    fig = _new_figure(8.2, 6.0)
    ax = fig.add_axes([0.09, 0.08, 0.62, 0.86])
    _draw_map(ctx, ax, ctx.extent, polys, rows, title="Overview: the whole DEM",
              label_outlets=True)
    _legend(ctx, ax, overview=True)
    return _png(fig, dpi=100)


def _hypsometry_figure(curve, integral, oid):
    fig = _new_figure(*PLOT_SIZE)
    ax = fig.add_axes([0.13, 0.15, 0.83, 0.75])
    ax.fill_between(curve["relative_area_above"], curve["relative_height"], color=ACCENT,
                    alpha=0.18, lw=0)
    ax.plot(curve["relative_area_above"], curve["relative_height"], color=ACCENT, lw=2,
            label=f"{oid}: integral {integral:.3f}" if np.isfinite(integral) else oid)
    ax.plot([0, 1], [1, 0], color="#8c8c8c", lw=1, ls=":", label="integral 0.5")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_xlabel("relative area above, a/A (–)")
    ax.set_ylabel("relative height, h/H (–)")
    ax.set_title(f"Hypsometric curve of {oid}")
    ax.grid(True, color="#e6e6e6", lw=0.6)
    ax.set_axisbelow(True)
    ax.legend(frameon=False, fontsize=8, loc="upper right")
    for s in ("top", "right"):
        ax.spines[s].set_visible(False)
    return _png(fig, dpi=100)


def _profile_figures(prof, oid):
    from ..plot.profiles import plot_chi, plot_long_profile

    out = {}
    lfp = prof.get("longest_flow_path")
    if lfp is not None and len(lfp) > 1:
        fig = _new_figure(*PLOT_SIZE)
        plot_long_profile(lfp, ax=fig.add_subplot(1, 1, 1),
                            knickpoints=prof.get("knickpoints_flow_path"),
                            title=f"Longest flow path of {oid}")
        out["long"] = _png(fig, dpi=100)
    nodes = prof.get("channel_nodes")
    if nodes is not None and len(nodes) > 1:
        fig = _new_figure(*PLOT_SIZE)
        plot_chi(nodes, ax=fig.add_subplot(1, 1, 1), knickpoints=prof.get("knickpoints"),
                   steepness_table=prof.get("steepness"),
                   title=f"χ–elevation, channels above {oid}")
        out["chi"] = _png(fig, dpi=100)
    return out


# ----------------------------------------------------------------------------- tables
def _lookup(res):
    """Per-outlet dicts of the catchment, morphometry and flow-path tables."""
    cat, mor, path = {}, {}, {}
    if res.catchments is not None:
        for r in res.catchments.table.to_dict("records"):
            cat[str(r["outlet_id"])] = r
    if res.morphometry is not None:
        for r in res.morphometry.to_dict("records"):
            mor[str(r["outlet_id"])] = r
    for oid, prof in res.profiles.items():
        lfp = prof.get("longest_flow_path")
        if lfp is not None:
            path[str(oid)] = lfp.summary()
    return {"catchment": cat, "morphometry": mor, "path": path}


def _figure_table(tabs, oid, orow):
    rows = []
    for label, src, key, unit, fmt in FIGURE_ROWS:
        if src == "outlet":
            if key == "xy_snapped":
                x, y = orow.get("x_snapped"), orow.get("y_snapped")
            else:
                x, y = orow.get("x_given"), orow.get("y_given")
            text = ("–" if x is None or not np.isfinite(x)
                    else f"{x:,.1f}, {y:,.1f}" if abs(x) > 360 else f"{x:.6f}, {y:.6f}")
            rows.append(f"<tr><th>{_esc(label)}</th><td class=\"num\" data-key=\"{key}\">"
                        f"{text}</td><td class=\"unit\">{_esc(unit)}</td></tr>")
            continue
        rec = tabs[src].get(oid)
        if rec is None or key not in rec:
            continue
        rows.append(f"<tr><th>{_esc(label)}</th>{_num_cell(src + ':' + key, rec[key], fmt)}"
                    f"<td class=\"unit\">{_esc(unit)}</td></tr>")
    return ('<table class="figures"><thead><tr><th>Figure</th><th>Value</th><th>Unit</th>'
            "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def _summary_table(res, tabs, ids):
    head = ("<tr><th>Outlet</th><th>Description</th><th>Area (km²)</th>"
            "<th>Relief (m)</th><th>Longest flow path (m)</th><th>10–85 slope (m/m)</th>"
            "<th>Snap (m)</th><th>Warnings</th></tr>")
    body = []
    for oid in ids:
        orow = res.outlets.set_index("outlet_id").loc[oid]
        c = tabs["catchment"].get(oid, {})
        m = tabs["morphometry"].get(oid, {})
        p = tabs["path"].get(oid, {})
        nw = len(res.warnings.get(oid, []))
        body.append(
            f'<tr><td><a href="#outlet-{_esc(_anchor(oid))}">{_esc(oid)}</a></td>'
            f'<td class="desc">{_esc(orow.get("description", ""))}</td>'
            + _num_cell("catchment:area_km2", c.get("area_km2"), "{:.4g}")
            + _num_cell("morphometry:relief_m", m.get("relief_m"), "{:.1f}")
            + _num_cell("path:length_m", p.get("length_m"), "{:,.0f}")
            + _num_cell("path:slope_10_85_m_per_m", p.get("slope_10_85_m_per_m"), "{:.4f}")
            + _num_cell("catchment:snap_distance_m", c.get("snap_distance_m"), "{:.1f}")
            + f'<td class="num">{nw}</td></tr>')
    bad = res.outlets[res.outlets["cell"] < 0]
    for r in bad.itertuples():
        body.append(f"<tr><td>{_esc(r.outlet_id)}</td><td class=\"desc\" colspan=\"7\">"
                    f"not delineated: {_esc(r.error)}</td></tr>")
    return ('<table class="summary"><thead>' + head + "</thead><tbody>" + "".join(body)
            + "</tbody></table>")


def _anchor(oid):
    from ..workflow.jobs import _safe

    return _safe(oid)


def _warning_box(msgs, title="Warnings"):
    if not msgs:
        return '<p class="ok">No warnings for this outlet.</p>'
    items = "".join(f"<li>{_esc(m)}</li>" for m in msgs)
    return f'<div class="warnings"><h3>{_esc(title)}</h3><ul>{items}</ul></div>'


def _provenance_html(prov):
    rows = []
    for name, st in prov.get("stages", {}).items():
        status = "writing this report" if st["status"] == "running" else st["status"]
        rows.append(f"<tr><td>{_esc(name)}</td><td>{_esc(status)}</td>"
                    f"<td class=\"num\">{st['seconds']:.2f}</td><td>{_esc(st['note'])}</td></tr>")
    stages = ("<table><thead><tr><th>Stage</th><th>Status</th><th style=\"text-align:right\">"
              "Seconds</th><th>Note</th>"
              "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>")
    ins = []
    for key, v in prov.get("inputs", {}).items():
        ins.append(f"<tr><td>{_esc(key)}</td><td><code>{_esc(Path(v['path']).name)}</code>"
                   f"</td><td><code>{_esc(v['sha256'])}</code></td></tr>")
    inputs = ("<table><thead><tr><th>Input</th><th>File</th><th>SHA-256</th></tr></thead>"
              "<tbody>" + "".join(ins) + "</tbody></table>")
    cond = prov.get("conditioning") or {}
    cond_rows = "".join(f"<tr><td>{_esc(k)}</td><td class=\"num\">{_esc(_plain(v))}</td></tr>"
                        for k, v in cond.items())
    crs = prov.get("crs_epsg")
    shape = prov.get("grid_shape", ["?", "?"])
    params = json.dumps(prov.get("parameters", {}), indent=2, sort_keys=True, default=str)
    return (f"<p>basinkit {_esc(prov.get('version'))}; CRS "
            f"{_esc('EPSG:' + str(crs) if crs else 'custom (WKT in provenance.json)')}; grid "
            f"{shape[0]} × {shape[1]} cells; total {prov.get('seconds_total', 0):.1f} s.</p>"
            "<h3>Inputs</h3>" + inputs + "<h3>Stages</h3>" + stages
            + "<h3>Conditioning</h3><table><tbody>" + cond_rows + "</tbody></table>"
            + "<h3>Parameters (job file with defaults)</h3><pre class=\"params\">"
            + _esc(params) + "</pre>")


def _plain(v):
    if isinstance(v, float):
        return f"{v:,.3f}"
    if isinstance(v, int):
        return f"{v:,d}"
    return v


# ----------------------------------------------------------------------------- rendering
_STATE: dict = {}


def _outlet_figures(oid):
    """Every figure of one outlet as data URIs (runs in a worker process or in-line)."""
    ctx, res, tabs = _STATE["ctx"], _STATE["res"], _STATE["tabs"]
    orow = res.outlets.set_index("outlet_id").loc[oid].to_dict()
    orow["outlet_id"] = oid
    out = {"map": _outlet_map(ctx, res, oid, orow)}
    out.update(_profile_figures(res.profiles.get(oid, {}), oid))
    curve = res.curves.get(oid)
    if curve is not None:
        hi = tabs["morphometry"].get(oid, {}).get("hypsometric_integral", np.nan)
        out["hyps"] = _hypsometry_figure(curve, float(hi), oid)
    return oid, out


def _render_all(ids, workers, progress=None):
    """Figures of every outlet: in ``workers`` forked processes when that is possible
    (figures are independent and matplotlib draws on one core), else one by one."""
    import os

    if workers is None:
        workers = min(2, os.cpu_count() or 1)
    if workers > 1 and len(ids) >= 4:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        try:
            ctx = mp.get_context("fork")
        except ValueError:  # no fork on this platform
            ctx = None
        if ctx is not None:
            try:
                with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
                    it = pool.map(_outlet_figures, ids, timeout=600)
                    if progress is not None:
                        it = progress(it, total=len(ids), desc="report figures")
                    return dict(it)
            except Exception:  # noqa: BLE001 - fall back to drawing in this process
                pass
    it = (_outlet_figures(i) for i in ids)
    if progress is not None:
        it = progress(it, total=len(ids), desc="report figures")
    return dict(it)


# ----------------------------------------------------------------------------- public
def render_report(res, workers: int | None = None, progress=None) -> str:
    """The report of a job run as one HTML string.

    Parameters
    ----------
    res : basinkit.workflow.jobs.JobResult
        From :func:`basinkit.workflow.jobs.run_job`.
    workers : int, optional
        Processes drawing the figures (default: up to 2; 1 draws in this process). The
        output does not depend on it.
    progress : callable, optional
        ``progress(iterable, total=, desc=)`` wrapper (e.g. a tqdm-like bar).

    Returns
    -------
    str
        A complete, self-contained HTML document (UTF-8): figures are base64 PNG data URIs,
        the CSS is inline and nothing refers to the network.

    References
    ----------
    Strahler, A. N. (1952). Hypsometric (area-altitude) analysis of erosional topography.
    GSA Bulletin 63:1117-1142 (the hypsometric curve).
    Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile
    analysis. Earth Surface Processes and Landforms 38:570-576 (the χ plot).

    Examples
    --------
    >>> from basinkit.workflow.jobs import demo_job_path, read_job, run_job
    >>> job = read_job(demo_job_path())
    >>> job["outputs"]["report"] = False
    >>> res = run_job(job, output="demo-out", overwrite=True)  # doctest: +SKIP
    >>> html = render_report(res)  # doctest: +SKIP
    >>> html.startswith("<!DOCTYPE html>")  # doctest: +SKIP
    True
    """
    job = res.job
    title = job["job"]["name"] if job is not None else "basinkit report"
    desc = job["job"]["description"] if job is not None else ""
    prov = res.provenance or {}
    ctx = _MapContext(res)
    tabs = _lookup(res)
    ids = []
    if res.outlets is not None:
        ids = [str(i) for i in res.outlets.loc[res.outlets["cell"] >= 0, "outlet_id"]]
    chosen = ids
    if job is not None and job["outputs"]["report_outlets"]:
        want = set(job["outputs"]["report_outlets"])
        chosen = [i for i in ids if i in want]
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_esc(title)} – basinkit report</title>", f"<style>{CSS}</style>",
        "</head><body>",
        f'<header class="top"><div class="inner"><h1>{_esc(title)}</h1>',
        f"<p>{_esc(desc)}</p>" if desc else "",
        f"<p>DEM <code>{_esc(_input_name(prov, 'dem'))}</code> · "
        f"{len(ids)} outlet(s) delineated · basinkit {_esc(prov.get('version', ''))}</p>",
        "</div></header><main>",
        '<section class="cautions"><h2>Read this first</h2><ul>'
        + "".join(f"<li>{_esc(c)}</li>" for c in CAUTIONS) + "</ul></section>",
    ]
    jw = res.warnings.get("job", [])
    if jw:
        parts.append(_warning_box(jw, "Warnings about the whole job"))
    parts.append("<h2>Overview</h2>")
    parts.append(_img(_overview_map(ctx, res), "overview map",
                      "Hillshade of the DEM as read, catchment divides of every outlet, "
                      "channels coloured by Strahler order."))
    if ids:
        parts.append("<h2>Outlets</h2>")
        parts.append(_summary_table(res, tabs, ids))
        parts.append('<nav class="toc">' + "".join(
            f'<div><a href="#outlet-{_esc(_anchor(i))}">{_esc(i)}</a></div>' for i in chosen)
            + "</nav>")
    olook = res.outlets.set_index("outlet_id") if res.outlets is not None else None
    _STATE.update(ctx=ctx, res=res, tabs=tabs)
    try:
        figures = _render_all(chosen, workers, progress)
    finally:
        _STATE.clear()
    for oid in chosen:
        figs = figures[oid]
        orow = olook.loc[oid].to_dict()
        orow["outlet_id"] = oid
        parts.append(f'<section class="outlet" id="outlet-{_esc(_anchor(oid))}">')
        parts.append(f"<h2>Outlet {_esc(oid)}</h2>")
        if orow.get("description"):
            parts.append(f'<p class="desc">{_esc(orow["description"])}</p>')
        parts.append('<div class="pair">')
        parts.append(_img(figs["map"], f"map of the catchment of {oid}",
                          "Hillshade with the catchment divide, channels by Strahler order, "
                          "the outlet as given (circle) and snapped (triangle). Coordinates "
                          "in the DEM's CRS."))
        parts.append("<div><h3>Catchment figures</h3>" + _figure_table(tabs, oid, orow)
                     + "</div></div>")
        parts.append('<div class="pair">')
        if "long" in figs:
            parts.append(_img(figs["long"], f"long profile of {oid}",
                              "Elevation along the longest flow path, DEM as read and "
                              "conditioned; knickpoints where the χ–elevation line bends."))
        if "chi" in figs:
            parts.append(_img(figs["chi"], f"chi plot of {oid}",
                              "χ against elevation for the channels upstream (main stem "
                              "dark); a straight line means uniform steepness k_sn."))
        parts.append("</div>")
        parts.append('<div class="pair">')
        if "hyps" in figs:
            parts.append(_img(figs["hyps"], f"hypsometric curve of {oid}",
                              "Share of the catchment above each relative height "
                              "(Strahler 1952)."))
        parts.append("<div>" + _warning_box(res.warnings.get(oid, [])) + "</div>")
        parts.append("</div>")
        parts.append("</section>")
    parts.append('<section class="provenance"><h2>Provenance</h2>')
    parts.append(_provenance_html(prov))
    parts.append("</section>")
    parts.append("<footer>Written by basinkit. Methods: Priority-Flood depression filling "
                 "(Barnes et al. 2014), D8 routing (O'Callaghan &amp; Mark 1984) on a stack "
                 "(Braun &amp; Willett 2013), Strahler (1957) order, χ (Perron &amp; Royden "
                 "2013), hypsometry (Strahler 1952).</footer>")
    parts.append("</main></body></html>")
    return "\n".join(p for p in parts if p)


def _input_name(prov, key):
    v = prov.get("inputs", {}).get(key)
    return Path(v["path"]).name if v else "?"


def write_report(res, path, workers: int | None = None, progress=None) -> Path:
    """Write :func:`render_report` to ``path`` (temporary file, then rename)."""
    from ..io.writers import atomic_path

    text = render_report(res, workers=workers, progress=progress)
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
    return Path(path)
