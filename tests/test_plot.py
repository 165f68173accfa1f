"""Figures (basinkit.plot) and writing them (basinkit.io.figures).

External references: the PNG signature and the pHYs chunk (PNG specification, ISO/IEC
15948 §5.2, §11.3.5.3) read back with Pillow; the PDF header (ISO 32000-1 §7.5.2); SVG as
XML (W3C SVG 1.1) parsed with the standard library. The rest is common practice (no
source): the same figure gives the same bytes, every plotting function takes ``ax=None``.
"""

import hashlib
import io
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest


def _figure():
    from matplotlib.figure import Figure

    fig = Figure(figsize=(4, 3))
    ax = fig.add_subplot(1, 1, 1)
    ax.plot([0, 1, 2], [1, 0, 2], label="a line")
    ax.legend()
    return fig


@pytest.mark.parametrize("fmt", ["png", "svg", "pdf"])
def test_figures_are_written_the_same_every_time(fmt, tmp_path):
    """Two saves of equal figures give equal bytes (no dates, fixed SVG ids), with the
    format's signature; the file lands under its name only when complete."""
    from basinkit.io.figures import figure_bytes, save_figure

    a = figure_bytes(_figure(), fmt, dpi=90)
    b = save_figure(_figure(), tmp_path / f"f.{fmt}", dpi=90).read_bytes()
    assert hashlib.sha256(a).digest() == hashlib.sha256(b).digest()
    if fmt == "png":
        assert a[:8] == b"\x89PNG\r\n\x1a\n"
    elif fmt == "pdf":
        assert a.startswith(b"%PDF-") and b"CreationDate" not in a and b"ModDate" not in a
    else:
        root = ET.fromstring(a)
        assert root.tag.endswith("svg")
        assert not re.search(rb"<dc:date>", a)
    assert [p.name for p in tmp_path.iterdir()] == [f"f.{fmt}"]


def test_png_resolution_is_the_chosen_dpi():
    """A 4 × 3 inch figure at 75 dpi is 300 × 225 pixels and records 75 dpi in pHYs."""
    from PIL import Image

    from basinkit.io.figures import figure_bytes

    im = Image.open(io.BytesIO(figure_bytes(_figure(), "png", dpi=75)))
    assert im.size == (300, 225)
    assert im.info["dpi"] == pytest.approx((75, 75), abs=0.01)


def test_bad_format_or_dpi_is_one_clear_error(tmp_path):
    from basinkit.errors import InputError
    from basinkit.io.figures import figure_bytes, save_figure

    with pytest.raises(InputError, match="png, svg, pdf"):
        save_figure(_figure(), tmp_path / "f.gif")
    with pytest.raises(InputError, match="positive"):
        figure_bytes(_figure(), "png", dpi=0)


def _calls():
    import shapely

    from basinkit.plot.distributions import plot_histogram
    from basinkit.plot.hypsometry import plot_hypsometric_curve
    from basinkit.plot.maps import plot_map, terrain_image

    z = np.add.outer(np.arange(20.0), np.arange(30.0))
    img = terrain_image(z, 10.0, 10.0)
    curve = pd.DataFrame({"relative_height": np.linspace(0, 1, 11),
                          "relative_area_above": 1 - np.linspace(0, 1, 11) ** 0.5})
    poly = shapely.box(50, 50, 200, 150)
    line = shapely.LineString([(60, 60), (190, 140)])
    return [
        lambda ax: plot_map((img, (0, 300, 0, 200)), ax=ax, divides=[poly], channels=[line],
                            orders=[2], given=[[61, 59]], snapped=[[60, 60]],
                            labels=["x"], legend=None),
        lambda ax: plot_hypsometric_curve(curve, ax=ax, integral=0.4, label="x"),
        lambda ax: plot_histogram(np.arange(1.0, 50.0), ax=ax, log=True),
    ]


def test_every_plot_takes_ax_none_and_returns_its_figure():
    """ax=None makes a new Figure; a given axes is drawn into and its figure returned."""
    from matplotlib.figure import Figure

    for call in _calls():
        fig = call(None)
        assert isinstance(fig, Figure) and fig.axes
        host = Figure()
        ax = host.add_subplot(1, 1, 1)
        assert call(ax) is host
        assert ax.has_data() or ax.images


def test_plot_room_never_selects_a_backend():
    """No module of basinkit/plot calls matplotlib.use (the CLI alone may)."""
    root = Path(__file__).resolve().parents[1] / "basinkit" / "plot"
    for p in root.glob("*.py"):
        assert "matplotlib.use(" not in p.read_text(encoding="utf-8"), p.name


def test_terrain_image_is_transparent_outside_the_data():
    """NaN cells are transparent; on a plane rising to the south every row is one colour:
    the shading of a plane is uniform (Horn 1981: the reflectance depends on the slope and
    aspect only) and the tint follows the elevation, constant along a row."""
    from basinkit.plot.maps import terrain_image

    z = np.add.outer(np.arange(10.0), np.zeros(12))  # rises to the south: one slope
    z[0, 0] = np.nan
    img = terrain_image(z, 10.0, 10.0)
    assert img.shape == (10, 12, 4)
    assert img[0, 0, 3] == 0 and (img[1:, 1:, 3] == 1).all()
    inner = img[2:-2, 2:-2, :3]
    assert np.ptp(inner, axis=1).max() < 1e-9
    assert np.ptp(inner[:, 0, 0]) > 0  # the tint changes with elevation


def test_figure_png_gives_the_same_palette_png_every_time():
    """figure_png: two equal figures give equal bytes (no date); the PNG decodes (Pillow,
    PNG specification ISO/IEC 15948) as a palette image of at most 256 colours, at the
    chosen size and resolution (4 × 3 inches at 75 dpi = 300 × 225 pixels, closed form);
    colours=0 keeps full colour."""
    from PIL import Image

    from basinkit.plot.png import figure_png

    a, b = figure_png(_figure(), dpi=75), figure_png(_figure(), dpi=75)
    assert a == b and a[:8] == b"\x89PNG\r\n\x1a\n"
    im = Image.open(io.BytesIO(a))
    assert im.mode == "P" and im.size == (300, 225)
    assert len(im.getcolors(256)) <= 256 and len(im.getcolors(256)) > 2
    assert im.info["dpi"] == pytest.approx((75, 75), abs=0.01)
    assert Image.open(io.BytesIO(figure_png(_figure(), dpi=75, colours=0))).mode == "RGB"
    with pytest.raises(ValueError):
        figure_png(_figure(), colours=300)


def _step_figures():
    """The figures the steps draw, on data with wide tick labels (4-digit elevations, km
    distances, log axes over six decades, a 24-hour storm)."""
    from types import SimpleNamespace

    import pandas as pd

    from basinkit.plot.hydrograph import plot_design_hydrograph
    from basinkit.plot.hypsometry import plot_hypsometric_curve
    from basinkit.plot.profiles import plot_chi, plot_long_profile, plot_slope_area

    d = np.linspace(0, 12_345.0, 400)
    z = 1234.5 + 0.08 * d
    prof = SimpleNamespace(kind="longest_flow_path", distance_m=d, elevation_m=z + 2,
                           elevation_conditioned_m=z, length_m=float(d[-1]),
                           x=d, y=d * 0)
    rng = np.random.default_rng(0)
    nodes = pd.DataFrame({"chi_m": np.r_[d / 7, rng.uniform(0, 1500, 300)],
                          "elevation_conditioned_m": np.r_[z, rng.uniform(1234, 2300, 300)],
                          "is_main_stem": np.r_[np.ones(400, bool), np.zeros(300, bool)],
                          "outlet_id": "a"})
    nodes.attrs["concavity"] = 0.45
    area = 10 ** rng.uniform(3, 9, 500)
    t = np.arange(0, 24, 0.05)
    rain = np.exp(-((t - 12) / 0.7) ** 2)
    q = 40 * np.exp(-((t - 12.6) / 0.6) ** 2)
    h = pd.DataFrame({"time_h": t, "rainfall_in_step_mm": rain,
                      "excess_in_step_mm": 0.6 * rain, "direct_runoff_m3_per_s": q,
                      "base_flow_m3_per_s": np.full_like(t, 1.5),
                      "discharge_m3_per_s": q + 1.5})
    curve = pd.DataFrame({"relative_height": np.linspace(0, 1, 50),
                          "relative_area_above": 1 - np.linspace(0, 1, 50) ** 0.5})
    return [plot_long_profile(prof, title="longest flow path, outlet a long name"),
            plot_chi(nodes, title="χ–elevation, outlet a"),
            plot_slope_area(area, 50 * area ** -0.5, title="slope–area, outlet a"),
            plot_hypsometric_curve(curve, integral=0.42, label="outlet a"),
            plot_design_hydrograph(h, title="outlet a: design storm and hydrograph")]


def test_step_figures_keep_every_label_inside_the_figure():
    """With fixed margins (no layout pass) every tick label, axis label, title and legend of
    the step figures still lies inside the figure, so nothing is cut off in the PNG (common
    practice, no source: a clipped label cannot be read)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    for fig in _step_figures():
        fig.set_dpi(100)
        canvas = FigureCanvasAgg(fig)
        canvas.draw()
        r = canvas.get_renderer()
        box = fig.bbox
        boxes = [ax.get_tightbbox(r) for ax in fig.axes]  # drawn ticks, labels, legend
        boxes += [t.get_window_extent(r) for t in fig.texts]
        for e in boxes:
            assert (e.x0 >= box.x0 - 0.5 and e.x1 <= box.x1 + 0.5 and e.y0 >= box.y0 - 0.5
                    and e.y1 <= box.y1 + 0.5), (fig.axes[0].get_title(), e)


def test_knickpoints_on_a_path_take_the_path_distance():
    """knickpoints_on keeps the knickpoints on the profile's cells and gives each the
    distance along that profile (closed form: the path's own distance column)."""
    from types import SimpleNamespace

    import pandas as pd

    from basinkit.plot.profiles import knickpoints_on

    p = SimpleNamespace(x=np.array([100.0, 110, 120, 130]), y=np.array([5.0, 5, 15, 25]),
                        distance_m=np.array([0.0, 10, 24.1, 38.3]))
    k = pd.DataFrame({"x": [120.0, 500, 130.0000000001], "y": [15.0, 5, 25],
                      "elevation_m": [1.0, 2, 3], "distance_from_outlet_m": [9.0, 9, 9]})
    on = knickpoints_on(p, k)
    assert on["elevation_m"].tolist() == [1.0, 3.0]
    assert on["distance_from_outlet_m"].tolist() == [24.1, 38.3]
    assert knickpoints_on(p, k.iloc[[1]]) is None and knickpoints_on(p, None) is None


def test_figures_drawn_in_workers_are_those_drawn_here():
    """draw_pngs: the same names in the given order and the same bytes in forked workers
    as in this process (the products do not depend on --workers, DESIGN.md)."""
    import pandas as pd

    from basinkit.plot.hypsometry import plot_hypsometric_curve
    from basinkit.workflow.steps._figures import FIGURE_FORK_MIN_ITEMS, draw_pngs

    h = np.linspace(0, 1, 30)
    jobs = [(f"f{k}.png", plot_hypsometric_curve,
             (pd.DataFrame({"relative_height": h, "relative_area_above": 1 - h ** (k + 1)}),),
             {"label": f"c{k}"}) for k in range(FIGURE_FORK_MIN_ITEMS + 2)]
    here, forked = draw_pngs(jobs, workers=1), draw_pngs(jobs, workers=2)
    assert [n for n, _ in here] == [j[0] for j in jobs]
    assert here == forked
    assert len({png for _, png in here}) == len(jobs)  # each its own curve


def _plot_variants():
    """Each kind of figure drawn on a kept figure, with data of different extents and
    scales: ``{kind: [(plot, args, kwargs), ...]}``; the last of each kind draws no data
    (an outlet without channels) where the function allows it."""
    from types import SimpleNamespace

    from basinkit.plot.hydrograph import plot_design_hydrograph
    from basinkit.plot.hypsometry import plot_hypsometric_curve
    from basinkit.plot.maps import plot_map
    from basinkit.plot.profiles import plot_chi, plot_long_profile, plot_slope_area

    rng = np.random.default_rng(1)

    def prof(n, length, z0):
        d = np.linspace(0, length, n)
        z = z0 + 0.05 * d
        return SimpleNamespace(kind="main_stem", distance_m=d, elevation_m=z + 1,
                               elevation_conditioned_m=z, length_m=float(d[-1]))

    def nodes(n, top):
        t = pd.DataFrame({"chi_m": rng.uniform(0, top, n),
                          "elevation_conditioned_m": rng.uniform(10, 10 + top, n),
                          "is_main_stem": np.arange(n) < n // 2, "outlet_id": "a"})
        t.attrs["concavity"] = 0.45
        return t

    def storm(peak, hours):
        t = np.arange(0, hours, 0.1)
        rain = np.exp(-((t - hours / 2) / 0.7) ** 2)
        q = peak * np.exp(-((t - hours / 2 - 0.5) / 0.6) ** 2)
        return pd.DataFrame({"time_h": t, "rainfall_in_step_mm": rain,
                             "excess_in_step_mm": 0.5 * rain, "direct_runoff_m3_per_s": q,
                             "base_flow_m3_per_s": np.full_like(t, 0.4),
                             "discharge_m3_per_s": q + 0.4})

    from shapely.geometry import LineString, Polygon

    img = np.dstack([rng.uniform(0, 1, (40, 50, 3)), np.ones((40, 50))])
    empty = nodes(0, 1)
    area = 10 ** rng.uniform(2, 8, 300)
    h = np.linspace(0, 1, 40)
    return {
        "long_profile": [(plot_long_profile, (prof(300, 12_000.0, 900.0),),
                          {"title": "far"}),
                         (plot_long_profile, (prof(20, 80.0, 3.0),),
                          {"knickpoints": pd.DataFrame({"distance_from_outlet_m": [40.0],
                                                        "elevation_m": [5.0]})})],
        "chi": [(plot_chi, (nodes(400, 3000),), {"title": "big"}),
                (plot_chi, (nodes(30, 5),), {}), (plot_chi, (empty,), {})],
        "slope_area": [(plot_slope_area, (area, 30 * area ** -0.45), {}),
                       (plot_slope_area, (area[:20] / 1e4, area[:20] ** 0.1), {}),
                       (plot_slope_area, ([], []), {"title": "none"})],
        "hypsometry": [(plot_hypsometric_curve, (pd.DataFrame(
            {"relative_height": h, "relative_area_above": 1 - h ** 2}),),
            {"integral": 0.6, "label": "a"}),
            (plot_hypsometric_curve, (pd.DataFrame(
                {"relative_height": h, "relative_area_above": 1 - h ** 0.3}),), {})],
        "hydrograph": [(plot_design_hydrograph, (storm(40.0, 24.0),), {"title": "a"}),
                       (plot_design_hydrograph, (storm(0.3, 6.0),), {"xlim_h": "all"})],
        "map": [(plot_map, ((img, (0, 5000, 0, 4000)),),
                 {"divides": [Polygon([(500, 500), (4000, 600), (2500, 3500)])],
                  "channels": [LineString([(600, 600), (2000, 2000)])], "orders": [2],
                  "snapped": np.array([[600.0, 600.0]]), "labels": ["a"], "title": "a"}),
                (plot_map, (), {"window": (10.0, 10.5, 45.0, 45.4), "geographic": True,
                                "metres_per_unit": 78_000.0})],
    }


def test_kept_figures_draw_what_new_figures_draw():
    """plot_png draws each kind of figure on the one kept from the last drawing of that
    kind, cleared: the bytes are those of a new figure, whatever was drawn before it (data
    of other extents, log scales, no data at all), in either order (common practice, no
    source: a figure shows only its own data; the products do not depend on the order in
    which the outlets are drawn, DESIGN.md). Outside plot_png nothing is kept."""
    import warnings

    from basinkit.plot._style import _KEPT, forget_kept_figures
    from basinkit.plot.png import figure_png, plot_png

    warnings.simplefilter("ignore")
    for kind, variants in _plot_variants().items():
        fresh = [figure_png(p(*a, **k)) for p, a, k in variants]
        assert len(set(fresh)) == len(fresh), kind
        n = len(variants)
        for order in (range(n), range(n)[::-1], [*range(n), *range(n)]):
            forget_kept_figures()
            kept = [plot_png(variants[i][0], *variants[i][1], **variants[i][2])
                    for i in order]
            assert kept == [fresh[i] for i in order], (kind, list(order))
        # between drawings the kept figure holds no data (e.g. a map's relief image)
        (fig,) = _KEPT.figures.values()
        for ax in fig.axes:
            assert not (ax.lines or ax.collections or ax.images or ax.patches or ax.texts)
        p, a, k = variants[0]
        assert p(*a, **k) is not p(*a, **k)  # new figures outside plot_png


def _text_figures(shift):
    """Figures of text alone: sizes, angles (90°, 30°), fallback glyphs, mathtext, text
    without antialiasing and text running off the figure's edges, moved by ``shift``
    pixels."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3, 2), dpi=100)
    dx = shift / 300
    fig.text(0.1 + dx, 0.8, "slope–area, outlet a₁ (m²)", size=9)
    fig.text(0.05 + dx, 0.1, "elevation (m)", rotation=90, size=8)
    fig.text(0.3 + dx, 0.3, "χ–elevation 1234.5", rotation=30, size=11)
    fig.text(0.5 + dx, 0.55, r"$k_{sn}$ = 42", size=10)
    fig.text(0.55 + dx, 0.1, "no antialiasing", antialiased=False, size=7)
    fig.text(-0.05 + dx, 0.45, "off the left edge", size=12)
    fig.text(0.85 + dx, 0.97, "off the top right", size=12)
    return fig


def test_cached_text_draws_the_pixels_of_matplotlib():
    """Text drawn through the font, layout and glyph caches (basinkit.plot._agg_text)
    gives the PNG bytes of matplotlib's own Agg canvas: every kind of figure the steps and
    the report draw, and text at other angles, sizes and fractions of a pixel, drawn with
    the caches filled by earlier drawings (reference: matplotlib's Agg renderer)."""
    import warnings

    from basinkit.plot._agg_text import cached_text_available
    from basinkit.plot.png import figure_png

    if not cached_text_available():
        pytest.skip("this matplotlib lacks the internals of the text caches")
    warnings.simplefilter("ignore")
    calls = [v for variants in _plot_variants().values() for v in variants]
    for _ in range(2):  # the second round draws from filled caches
        for p, a, k in calls:
            assert figure_png(p(*a, **k)) == figure_png(p(*a, **k), cached_text=False), p
        for fig in _step_figures():
            assert figure_png(fig) == figure_png(fig, cached_text=False)
        for shift in (0.0, 0.3, 1.0, 2.71, 17.5):
            assert (figure_png(_text_figures(shift), colours=0)
                    == figure_png(_text_figures(shift), colours=0, cached_text=False))
