"""Maps: a shaded-relief background with catchment divides, channels by Strahler order and
outlets, a scale bar and a north arrow.

Every function takes ``ax=None`` (a new bare Figure is made when it is None) and returns the
figure; nothing here selects a matplotlib backend. Coordinates are map coordinates of the
DEM's CRS.

References
----------
Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the IEEE
69(1):14-47 (the shaded relief, through matplotlib's LightSource).
Strahler, A. N. (1957). Quantitative analysis of watershed geomorphology. Transactions,
American Geophysical Union 38(6):913-920 (the channel orders).
"""

from __future__ import annotations

import math

import numpy as np

from . import _style as S

__all__ = ["terrain_image", "plot_map", "nice_length"]


def terrain_image(elevation, dx_m, dy_m, vert_exag=1.5):
    """An RGBA image of a DEM: grey shaded relief (light from the north-west, 40° up)
    under a light elevation tint; transparent where the elevation is NaN.

    Parameters
    ----------
    elevation : 2-D array
        Elevations (NaN outside the data), rows north to south.
    dx_m, dy_m : float
        Cell width and height on the ground (m), for the slopes of the shading.
    vert_exag : float
        Vertical exaggeration of the shading.

    Returns
    -------
    ndarray (rows, cols, 4) of float in [0, 1]
    """
    from matplotlib.colors import LightSource, LinearSegmentedColormap, Normalize

    z = np.asarray(elevation, dtype=np.float64)
    fin = np.isfinite(z)
    if not fin.any():
        return np.zeros(z.shape + (4,))
    lo, hi = float(z[fin].min()), float(z[fin].max())
    zf = np.where(fin, z, lo)
    hs = LightSource(azdeg=315, altdeg=40).hillshade(zf, vert_exag=vert_exag,
                                                    dx=float(dx_m), dy=float(dy_m))
    tint = LinearSegmentedColormap.from_list("basinkit_terrain", S.TERRAIN_TINT)
    col = tint(Normalize(lo, hi if hi > lo else lo + 1.0)(zf))[..., :3]
    rgb = 0.65 * hs[..., None] + 0.35 * col
    return np.concatenate([np.clip(rgb, 0, 1), fin[..., None].astype(float)], axis=2)


def nice_length(target_m):
    """A round length (1, 2 or 5 × 10^k metres) not longer than ``target_m``.

    >>> nice_length(730.0), nice_length(2600.0), nice_length(0.4)
    (500.0, 2000.0, 0.2)
    """
    if not target_m > 0:
        return 1.0
    k = math.floor(math.log10(target_m))
    for m in (5, 2, 1):
        if m * 10.0 ** k <= target_m * (1 + 1e-12):
            return float(m * 10.0 ** k)
    return float(10.0 ** k)


def _order_style(max_order):
    from matplotlib.colors import BoundaryNorm, ListedColormap

    n = max(int(max_order), 1)
    cols = (S.ORDER_COLOURS + [S.ORDER_COLOURS[-1]] * n)[:n]
    return ListedColormap(cols), BoundaryNorm(np.arange(0.5, n + 1.5), n)


def _rings(geom):
    """Exterior and interior rings of a (Multi)Polygon as coordinate arrays."""
    out = []
    if geom is None or geom.is_empty:
        return out
    for g in getattr(geom, "geoms", [geom]):
        if g.geom_type != "Polygon":
            continue
        out.append(np.asarray(g.exterior.coords)[:, :2])
        out.extend(np.asarray(i.coords)[:, :2] for i in g.interiors)
    return out


def _lines(geoms):
    out = []
    for g in geoms:
        if g is None or g.is_empty:
            out.append(None)
            continue
        parts = getattr(g, "geoms", [g])
        out.append([np.asarray(p.coords)[:, :2] for p in parts])
    return out


def _scale_bar(ax, window, metres_per_unit):
    from matplotlib.patches import Rectangle

    xmin, xmax, ymin, ymax = window
    width_m = (xmax - xmin) * metres_per_unit
    L = nice_length(width_m / 4.0)
    Lu = L / metres_per_unit
    h = (ymax - ymin) * 0.012
    x0 = xmin + (xmax - xmin) * 0.05
    y0 = ymin + (ymax - ymin) * 0.05
    ax.add_patch(Rectangle((x0 - 0.02 * (xmax - xmin), y0 - 2.2 * h),
                           Lu + 0.04 * (xmax - xmin), 6.2 * h, fc="white", ec="none",
                           alpha=0.8, zorder=9))
    for i in range(2):
        ax.add_patch(Rectangle((x0 + i * Lu / 2, y0), Lu / 2, h,
                               fc=S.INK if i == 0 else "white", ec=S.INK, lw=0.8, zorder=10))
    label = f"{L / 1000:g} km" if L >= 1000 else f"{L:g} m"
    ax.text(x0 + Lu / 2, y0 + 1.6 * h, label, ha="center", va="bottom", fontsize=7.5,
            color=S.INK, zorder=10)
    ax.text(x0, y0 - 0.6 * h, "0", ha="center", va="top", fontsize=6.5, color=S.INK,
            zorder=10)


def _north_arrow(ax):
    ax.annotate("", xy=(0.93, 0.95), xytext=(0.93, 0.83), xycoords="axes fraction",
                arrowprops=dict(arrowstyle="-|>,head_width=0.35,head_length=0.6", lw=1.6,
                                color=S.INK), zorder=11)
    ax.text(0.93, 0.965, "N", transform=ax.transAxes, ha="center", va="bottom",
            fontsize=10, fontweight="bold", color=S.INK, zorder=11,
            bbox=dict(boxstyle="circle,pad=0.15", fc="white", ec="none", alpha=0.8))


def _legend(ax, orders, burned, lowered, given, snapped, divides, where):
    from matplotlib.lines import Line2D

    handles = []
    if divides:
        handles.append(Line2D([], [], color=S.DIVIDE, lw=1.8, label="catchment divide"))
    if orders is not None and len(orders):
        lo, hi = int(np.min(orders)), int(np.max(orders))
        cmap, norm = _order_style(hi)
        for k in range(max(lo, 1), hi + 1):
            handles.append(Line2D([], [], color=cmap(norm(k)), lw=0.9 + 0.5 * (k - 1),
                                  label=f"channel, Strahler order {k}"))
    if burned:
        handles.append(Line2D([], [], color=S.BURNED, lw=2.6, label="burned line (culvert)"))
    if lowered:
        handles.append(Line2D([], [], marker="s", ms=4, ls="none", color=S.BURNED,
                              label="cell lowered by conditioning"))
    if given:
        handles.append(Line2D([], [], marker="o", mfc="none", mec=S.GIVEN, ls="none", ms=7,
                              label="outlet as given"))
    if snapped:
        handles.append(Line2D([], [], marker="^", color=S.SNAPPED, ls="none", ms=7,
                              label="outlet, snapped"))
    if not handles:
        return
    if where == "below":
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=2,
                  fontsize=7.5, frameon=False, borderaxespad=0, columnspacing=1.2)
    else:
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0),
                  fontsize=7.5, frameon=False, borderaxespad=0)


def plot_map(background=None, ax=None, *, window=None, divides=(), channels=(),
             orders=None, burned=(), lowered=None, given=None, snapped=None, labels=None,
             geographic=False, metres_per_unit=1.0, title=None, legend="below",
             figsize=(5.6, 6.3)):
    """A map of catchments on shaded relief.

    Parameters
    ----------
    background : (image, extent), optional
        An RGBA image (e.g. from :func:`terrain_image`) and its extent
        (xmin, xmax, ymin, ymax).
    ax : matplotlib Axes, optional
        Draw into this axes; default: a new figure.
    window : (xmin, xmax, ymin, ymax), optional
        Part of the map shown (default: the background's extent).
    divides : sequence of shapely (Multi)Polygons
        Catchments whose boundaries are drawn; the first is drawn thickest (all thin when
        there are more than 50).
    channels : sequence of shapely (Multi)LineStrings
        Channel lines, coloured and widened by ``orders`` (Strahler order, one per line).
    burned : sequence of shapely lines
        Lines burned into the DEM (culverts and the like).
    lowered : array (n, 2), optional
        Centres of cells that conditioning lowered (burned lines, breaches), drawn as small
        squares.
    given, snapped : array (n, 2), optional
        Outlets as given (open circles) and snapped (triangles).
    labels : sequence of str, optional
        A text label beside each snapped outlet. None draws no labels.
    geographic : bool
        Map units are degrees: axes labelled longitude/latitude and the aspect corrected
        for the convergence of meridians at the window's centre.
    metres_per_unit : float
        Ground metres per map unit along x at the window's centre (for the scale bar).
    title : str, optional
    legend : {"below", "right", None}

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.collections import LineCollection
    from matplotlib.ticker import ScalarFormatter

    rect = [0.14, 0.29, 0.82, 0.66] if legend == "below" else [0.09, 0.08, 0.62, 0.86]
    fig, ax = S.new_axes(ax, figsize, rect, kind="map")
    if window is None:
        window = background[1] if background is not None else (0.0, 1.0, 0.0, 1.0)
    xmin, xmax, ymin, ymax = window
    if background is not None:
        img, ext = background
        ax.imshow(img, extent=ext, interpolation="bilinear", zorder=0)
    if len(channels):
        orders = np.ones(len(channels), int) if orders is None else np.asarray(orders, int)
        cmap, norm = _order_style(int(orders.max()) if orders.size else 1)
        segs, ords = [], []
        for parts, o in zip(_lines(channels), orders):
            for p in parts or ():
                segs.append(p)
                ords.append(o)
        if segs:
            ords = np.asarray(ords)
            lc = LineCollection(segs, cmap=cmap, norm=norm, linewidths=0.9 + 0.5 * (ords - 1),
                                zorder=3, capstyle="round")
            lc.set_array(ords.astype(float))
            ax.add_collection(lc)
    for parts in _lines(burned):
        for p in parts or ():
            ax.plot(p[:, 0], p[:, 1], color=S.BURNED, lw=2.6, zorder=5,
                    solid_capstyle="butt")
    if lowered is not None and len(lowered):
        lw = np.asarray(lowered, float)
        ax.plot(lw[:, 0], lw[:, 1], marker="s", ms=2.6, ls="none", color=S.BURNED, zorder=5)
    rings, widths = [], []
    for k, poly in enumerate(divides):
        r = _rings(poly)
        rings.extend(r)
        widths.extend([1.8 if k == 0 and len(divides) <= 50 else
                       0.9 if len(divides) <= 50 else 0.5] * len(r))
    if rings:
        ax.add_collection(LineCollection(rings, colors=S.DIVIDE, linewidths=widths, zorder=4))
    n_out = 0
    if given is not None and len(given):
        g = np.asarray(given, float)
        ax.plot(g[:, 0], g[:, 1], marker="o", mfc="none", mec=S.GIVEN, mew=1.3, ms=7,
                ls="none", zorder=6)
    if snapped is not None and len(snapped):
        s = np.asarray(snapped, float)
        n_out = len(s)
        big = n_out <= 50
        ax.plot(s[:, 0], s[:, 1], marker="^", color=S.SNAPPED, mec="white",
                mew=0.6 if big else 0.2, ms=7 if big else 3.5, ls="none", zorder=7)
        if labels is not None:
            for k, (xy, text) in enumerate(zip(s, labels)):
                right = k % 2 == 0  # alternate sides: neighbours' labels overlap less
                ax.annotate(str(text), tuple(xy), xytext=(7 if right else -7, 2),
                            textcoords="offset points", ha="left" if right else "right",
                            va="center", fontsize=7, color=S.INK, zorder=8,
                            bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none",
                                      alpha=0.75))
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_facecolor("#f4f2ec")
    ax.set_aspect(1.0 / math.cos(math.radians(0.5 * (ymin + ymax))) if geographic
                  else "equal")
    for axis in (ax.xaxis, ax.yaxis):
        f = ScalarFormatter(useOffset=False)
        f.set_scientific(False)
        axis.set_major_formatter(f)
    ax.tick_params(labelsize=7)
    unit = "m" if abs(metres_per_unit - 1.0) < 1e-12 else "map units"
    ax.set_xlabel("longitude (°)" if geographic else f"easting ({unit})", fontsize=8)
    ax.set_ylabel("latitude (°)" if geographic else f"northing ({unit})", fontsize=8)
    for lab in ax.get_yticklabels():
        lab.set_rotation(90)
        lab.set_va("center")
    if title:
        ax.set_title(title, fontsize=10, color=S.INK, y=1.0)
    _scale_bar(ax, window, metres_per_unit)
    _north_arrow(ax)
    if legend:
        _legend(ax, orders if len(channels) else None, len(burned) > 0,
                lowered is not None and len(lowered) > 0,
                given is not None and len(given) > 0, n_out > 0, len(divides) > 0, legend)
    return fig
