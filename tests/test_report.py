"""The report built from an output folder's files (basinkit.report.write_report).

Folders: the demo job's output with the contract's tables added from the ``profile``
command (tests/report_folders.py), and a job of 300 outlets on matplotlib's real
3-arc-second DEM (jacksboro_fault_dem.npz, written as a GeoTIFF). External references
are named beside each check.
"""

import base64
import io
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from report_folders import demo_folder, many_outlet_folder

ACRE_M2 = 4046.8564224          # international acre (1959 yard and pound agreement), exact
SQUARE_MILE_M2 = 2589988.110336  # international square mile, exact


class Page(HTMLParser):
    """Ids, images, sections, outlet-table rows and figure-table cells of a report."""

    def __init__(self, text):
        super().__init__()
        self.ids, self.images, self.urls, self.sections = [], [], [], []
        self.rows, self.cells = [], []
        self._section = None
        self._in_table = False
        self._row = None
        self._cell = None
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "section" and a.get("id", "").startswith("outlet-"):
            self._section = a["id"][len("outlet-"):]
            self.sections.append(self._section)
        if tag == "img":
            self.images.append(a.get("src", ""))
        for k in ("src", "href"):
            if a.get(k) and not a[k].startswith(("data:", "#")):
                self.urls.append(a[k])
        if tag == "table" and a.get("id") == "outlet-table":
            self._in_table = True
        if tag == "tr" and self._in_table:
            self._row = []
        if tag == "td":
            self._cell = {"section": self._section, "key": a.get("data-key"),
                          "value": a.get("data-value", a.get("data-v")), "text": ""}

    def handle_data(self, data):
        if self._cell is not None:
            self._cell["text"] += data

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            if self._row is not None:
                self._row.append(self._cell)
            elif self._cell["key"]:
                self.cells.append(self._cell)
            self._cell = None
        if tag == "tr" and self._row is not None:
            if self._row:
                self.rows.append(self._row)
            self._row = None
        if tag == "table":
            self._in_table = False
        if tag == "section":
            self._section = None


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """A copy of the demo folder and its report (default options)."""
    from basinkit.report import write_report

    folder = tmp_path_factory.mktemp("demo") / "out"
    shutil.copytree(demo_folder(), folder)
    seen = []

    def progress(it, total, desc):
        seen.append((total, desc))
        return it

    path = write_report(folder, progress=progress)
    return folder, path.read_text(encoding="utf-8"), seen


def _csv(folder, name):
    return pd.read_csv(folder / name, dtype={"outlet_id": str}).drop_duplicates("outlet_id") \
        .set_index("outlet_id")


def test_demo_report_is_self_contained_and_images_decode(demo):
    """Nothing outside the document is referenced; every image is a PNG data URI that Pillow
    decodes (PNG specification, ISO/IEC 15948) and is not a blank canvas."""
    from PIL import Image

    _, text, _ = demo
    p = Page(text)
    assert p.urls == [] and not re.search(r"url\((?!#)", text)
    assert "<script src" not in text
    # overview + distributions + per outlet: map, profile, χ, hypsometry (χ may be absent
    # for an outlet below the lowest profiled order)
    assert len(p.images) >= 2 + 3 * len(p.sections)
    for src in p.images:
        assert src.startswith("data:image/png;base64,")
        im = Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1])))
        im.load()
        assert im.format == "PNG" and im.width >= 300 and im.height >= 200
        assert np.asarray(im.convert("L")).std() > 5


def input_dem(folder):
    """The DEM as route read it: flow.json names the file (no copy without --copy-input;
    README, the flow folder)."""
    rec = json.loads((folder / "flow" / "flow.json").read_text())["input_elevation"]
    assert rec["stored"] == "reference" and rec["band"] == 1
    assert not (folder / "flow" / "elevation_input.tif").exists()
    return Path(rec["path"])


def test_demo_report_states_cautions_and_the_dem(demo):
    """The cautions of the house rules; the DEM's cell size and CRS as the GeoTIFF says
    (read back with rasterio, a reference library); the snapping of the job file; the
    vertical units line (common practice, no source)."""
    import rasterio

    folder, text, _ = demo
    for phrase in ("estimates", "Culverts, storm sewers, diversions",
                   "unless they were burned into the DEM", "in the field",
                   "local drainage manual", "local codes", "licensed professional practice"):
        assert phrase in text, phrase
    with rasterio.open(input_dem(folder)) as ds:
        res, epsg = ds.res, ds.crs.to_epsg()
    assert f"{res[0]:g} × {res[1]:g} m" in text
    assert f"EPSG:{epsg}" in text
    assert "Vertical units" in text
    assert "within 30 m" in text and "1 ha" in text  # demo_job.toml: 30 m, 1 ha


def test_demo_report_has_a_section_per_outlet_with_the_csv_values(demo):
    """13 outlets ≤ 50: a full section each, anchored by the file_id column; every value
    of the figure tables equals the CSV value (CSV keeps 10 significant digits); acres and
    mi² follow from m² with the exact international acre and square mile."""
    folder, text, seen = demo
    cat = _csv(folder, "catchments.csv")
    p = Page(text)
    assert p.sections == list(cat["file_id"])
    tables = {"catchment": cat, "morphometry": _csv(folder, "morphometry.csv")}
    paths = pd.read_csv(folder / "flow_paths.csv", dtype={"outlet_id": str})
    tables["path"] = paths[paths["kind"] == "longest_flow_path"].set_index("outlet_id")
    by_fid = dict(zip(cat["file_id"], cat.index))
    checked = 0
    for c in p.cells:
        src, key = c["key"].split(":", 1)
        if src == "outlet":
            continue
        oid = by_fid[c["section"]]
        if src == "calc":
            want = cat.loc[oid, "area_m2"] / (ACRE_M2 if key == "area_acres"
                                              else SQUARE_MILE_M2)
        else:
            if oid not in tables[src].index:
                continue
            want = float(tables[src].loc[oid, key])
        if not np.isfinite(want):
            assert c["text"].strip() == "–"
            continue
        assert float(c["value"]) == pytest.approx(want, rel=1e-9), c
        checked += 1
    assert checked >= 25 * len(p.sections)
    for oid in cat.index:  # acres and mi² beside km², from the exact definitions
        a = cat.loc[oid, "area_m2"]
        sec = [c for c in p.cells if c["section"] == cat.loc[oid, "file_id"]]
        got = {c["key"].split(":")[1]: float(c["value"]) for c in sec
               if c["key"].endswith(("area_acres", "area_mi2", "area_km2"))}
        assert got["area_km2"] == pytest.approx(a / 1e6, rel=1e-9)
        assert got["area_acres"] == pytest.approx(a / ACRE_M2, rel=1e-9)
        assert got["area_mi2"] == pytest.approx(a / SQUARE_MILE_M2, rel=1e-9)
    assert seen == [(len(p.sections), "report sections")]


def test_demo_report_warns_where_conditioning_filled_deep(demo):
    """The filled-depression warning of an outlet agrees with the definition: the largest
    difference between the conditioned DEM and the DEM as read inside the catchment polygon
    (rasterised with rasterio.features, a reference library)."""
    import geopandas as gpd
    import rasterio
    from rasterio.features import geometry_mask

    folder, text, _ = demo
    with rasterio.open(input_dem(folder)) as a, \
            rasterio.open(folder / "flow" / "elevation_conditioned.tif") as c:
        diff = c.read(1).astype(float) - a.read(1).astype(float)
        tr, shape = a.transform, a.shape
    polys = gpd.read_file(folder / "catchments.gpkg", layer="catchments")
    poly = polys.loc[polys["outlet_id"] == "crossing"].geometry.iloc[0]
    inside = ~geometry_mask([poly], out_shape=shape, transform=tr)
    deepest = float(np.nanmax(np.where(inside, diff, 0.0)))
    assert deepest >= 1.0  # the demo valley holds a deep filled pit above the crossing
    section = text.split('id="outlet-crossing"')[1].split("</section>")[0]
    m = re.search(r"Conditioning filled closed depressions in this catchment up to "
                  r"([0-9.]+) m deep", section)
    assert m and float(m.group(1)) == pytest.approx(deepest, abs=0.051)
    # the run's own record of the same warning (lower case, its rounding) is not shown a
    # second time (common practice, no source)
    assert section.lower().count("filled closed depressions in this catchment") == 1


def test_missing_products_leave_their_parts_out(demo, tmp_path):
    """A folder without the profile and morphometry tables (steps turned off): the report
    is written, names each missing file and shows no profile, χ or hypsometry figure
    (common practice, no source)."""
    from basinkit.report import write_report

    folder = tmp_path / "out"
    shutil.copytree(demo[0], folder)
    gone = ["profile.csv", "steepness.csv", "knickpoints.csv", "flow_paths.csv",
            "morphometry.csv", "hypsometry.csv", "channels.gpkg"]
    for name in gone:
        (folder / name).unlink()
    (folder / "report.html").unlink()
    text = write_report(folder, report_outlets=["crossing"]).read_text(encoding="utf-8")
    for name in gone:
        assert f"<code>{name}</code>: not in this folder" in text
    p = Page(text)
    assert p.sections == ["crossing"]
    assert "long profile of" not in text and "hypsometric curve of" not in text
    assert "Not shown, not in this folder for this outlet" in text
    assert len(p.images) >= 2  # overview and the crossing's map


def test_anchors_come_from_the_file_id_column_and_are_unique(demo, tmp_path):
    """Ids that clean to one file name, a 300-character id and accents, delineated by the
    ``delineate`` command: every section's anchor is ``outlet-`` + the file_id the command
    wrote, and no id repeats in the document (HTML standard: an element's id must be unique
    in its tree, WHATWG HTML §3.2.6.1)."""
    from basinkit.cli.main import main
    from basinkit.report import write_report

    cat = pd.read_csv(demo[0] / "catchments.csv")
    xy = cat[["x_snapped", "y_snapped"]].to_numpy()[:6]
    ids = ["a/b", "a_b", "a b", "A_B", "x" * 300, "Zürich Süd"]
    pd.DataFrame({"id": ids, "x": xy[:, 0], "y": xy[:, 1]}).to_csv(tmp_path / "o.csv",
                                                                  index=False)
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as e:
        main(["-q", "delineate", str(demo[0] / "flow"), "--outlets", str(tmp_path / "o.csv"),
              "--snap-radius", "0", "-o", str(out)])
    assert e.value.code == 0
    shutil.copytree(demo[0] / "flow", out / "flow")
    text = write_report(out).read_text(encoding="utf-8")
    written = pd.read_csv(out / "catchments.csv", dtype=str)
    p = Page(text)
    assert p.sections == list(written["file_id"])
    assert len(set(p.ids)) == len(p.ids)
    assert len({s.lower() for s in p.sections}) == len(ids)
    assert [r[0]["text"] for r in p.rows] == ids  # every id in the table, as given


# ----------------------------------------------------------------------------- many outlets
@pytest.fixture(scope="module")
def many(tmp_path_factory):
    folder, ids = many_outlet_folder(300, tmp_path_factory.mktemp("many"))
    return folder, ids


def test_many_outlets_give_a_summary(many, monkeypatch):
    """300 outlets > 50: a sortable table of every outlet with its CSV area, full sections
    for the first 10 only, histograms, an overview drawn without outlet labels, and a file
    under the 25 MB bound for 2 000 outlets scaled to 300 (3.75 MB). Common practice (no
    source) for the layout; areas checked against catchments.csv."""
    import basinkit.plot.maps as maps
    from basinkit.report import write_report

    folder, ids = many
    drawn = []
    real = maps.plot_map

    def spy(*a, **k):
        fig = real(*a, **k)
        drawn.append((k.get("title"), fig))
        return fig

    monkeypatch.setattr(maps, "plot_map", spy)
    path = write_report(folder, workers=1)
    text = path.read_text(encoding="utf-8")
    assert path.stat().st_size < 25e6 * 300 / 2000
    p = Page(text)
    assert [r[0]["text"] for r in p.rows] == ids
    cat = _csv(folder, "catchments.csv")
    for r in p.rows:
        assert float(r[2]["value"]) == pytest.approx(cat.loc[r[0]["text"], "area_km2"],
                                                     rel=1e-9)
    assert p.sections == list(cat.loc[ids[:10], "file_id"])
    assert 'id="outlet-table"' in text and "basinkitSortOutlets" in text
    assert "histograms of catchment area" in text
    overview = [f for t, f in drawn if t and t.startswith("Overview")]
    assert len(overview) == 1
    texts = [t.get_text() for ax in overview[0].axes for t in ax.texts if t.get_text()]
    assert not set(texts) & set(ids)
    assert len(texts) <= 3  # scale bar (2) and the north arrow's N


def test_many_outlets_named_sections(many):
    """[outputs] report_outlets picks the full sections in a summary; an unknown id is
    named in the report (common practice, no source)."""
    from basinkit.report import render_report

    folder, ids = many
    want = [ids[250], ids[3], ids[120]]
    text = render_report(folder, report_outlets=want + ["nowhere"], workers=1)
    cat = _csv(folder, "catchments.csv")
    assert Page(text).sections == list(cat.loc[want, "file_id"])
    assert "nowhere" in text


def test_report_refuses_a_path_that_is_not_a_folder(tmp_path):
    """One clear error for a wrong folder (InputError, a ValueError)."""
    from basinkit.errors import InputError
    from basinkit.report import write_report

    with pytest.raises(InputError, match="is not a folder"):
        write_report(tmp_path / "nothing-here")


def _section_images(text, fid):
    section = text.split(f'id="outlet-{fid}"')[1].split("</section>")[0]
    return Page(section).images


def test_report_embeds_the_figures_the_steps_drew(demo, tmp_path):
    """Each plot is drawn once: the report embeds the very bytes of the step's PNG under
    figures/ (longest flow path, χ, hypsometric curve, design hydrograph); a folder without
    figures/ gets the same plots drawn by the report instead, none missing (common practice,
    no source)."""
    from basinkit.report import write_report

    folder, text, _ = demo
    names = ["longest_flow_path", "chi_elevation", "hypsometry", "design_hydrograph"]
    shown = _section_images(text, "crossing")
    for name in names:
        data = (folder / "figures" / f"crossing_{name}.png").read_bytes()
        assert "data:image/png;base64," + base64.b64encode(data).decode("ascii") in shown
    bare = tmp_path / "bare"
    shutil.copytree(folder, bare)
    shutil.rmtree(bare / "figures")
    (bare / "report.html").unlink()
    text = write_report(bare, report_outlets=["crossing"]).read_text(encoding="utf-8")
    drawn = _section_images(text, "crossing")
    assert len(drawn) == len(shown)
    for alt in ("long profile of crossing", "chi plot of crossing",
                "hypsometric curve of crossing"):
        assert f'alt="{alt}"' in text
    assert 'alt="design storm and hydrograph of crossing' in text


def test_report_the_same_drawn_in_workers(many):
    """The overview, the distributions and the full sections drawn in forked workers give
    the HTML drawn in this process, byte for byte, and the progress counts the sections
    only (common practice, no source: a figure is a function of the folder's files)."""
    from basinkit.report import render_report

    folder, ids = many
    seen = []

    def progress(it, total=None, desc=""):
        seen.append((total, desc))
        return it

    two = render_report(folder, workers=2, progress=progress)
    assert "histograms of catchment area" in two and "overview map" in two
    assert two == render_report(folder, workers=1)
    assert [s for s in seen if s[1] == "report sections"] == [(10, "report sections")]
