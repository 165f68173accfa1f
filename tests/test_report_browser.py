"""The HTML report, checked as a file and in a real browser.

Without a browser: every image is a PNG data URI that Pillow decodes (PNG specification,
ISO/IEC 15948), nothing refers to the network, the cautions are present, and the values in
the figure tables are those of the CSV tables the job wrote.

With Debian's chromium (installed by .ci/run; skipped with a reason otherwise): the report
is rendered headless; after the load event an injected script writes each image's
``naturalWidth`` (0 when an image fails to decode, per the HTML standard) into the document
title, read back with ``--dump-dom``; the table cells of the browser's DOM hold the CSV
values; and the screenshot is a real, non-blank rendering.
"""

import base64
import io
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from basinkit.workflow.jobs import demo_job_path, read_job, run_job

REPORT_OUTLETS = ["crossing", "main_4", "tributary_1"]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    job = read_job(demo_job_path())
    job["outputs"]["report_outlets"] = REPORT_OUTLETS
    job["outputs"]["rasters"] = False
    res = run_job(job, output=tmp_path_factory.mktemp("report") / "out")
    return res


class _Cells(HTMLParser):
    """Collects <img> sources and <td data-key> cells (with their outlet section)."""

    def __init__(self):
        super().__init__()
        self.images, self.cells, self.section = [], [], None
        self._cell = None
        self.urls = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section" and a.get("id", "").startswith("outlet-"):
            self.section = a["id"][len("outlet-"):]
        if tag == "img":
            self.images.append(a.get("src", ""))
        for k in ("src", "href"):
            if k in a and a[k] and not a[k].startswith(("data:", "#")):
                self.urls.append(a[k])
        if tag == "td" and "data-key" in a:
            self._cell = {"section": self.section, "key": a["data-key"],
                          "value": a.get("data-value", ""), "text": ""}

    def handle_data(self, data):
        if self._cell is not None:
            self._cell["text"] += data

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            self.cells.append(self._cell)
            self._cell = None
        if tag == "section":
            self.section = None


def _parse(text):
    p = _Cells()
    p.feed(text)
    return p


def _tables(res):
    f = res.folder
    return {"catchment": pd.read_csv(f / "catchments.csv", dtype={"outlet_id": str})
            .set_index("outlet_id"),
            "morphometry": pd.read_csv(f / "morphometry.csv", dtype={"outlet_id": str})
            .set_index("outlet_id"),
            "path": pd.read_csv(f / "profiles" / "flow_paths.csv", dtype={"outlet_id": str})
            .set_index("outlet_id")}


def _check_cells(cells, tables):
    """Every per-outlet figure cell equals the CSV value (CSV keeps 10 significant digits)
    and its text is that value formatted as the report's table says."""
    from basinkit.report.html import FIGURE_ROWS

    fmt = {f"{src}:{key}": f for _, src, key, _, f in FIGURE_ROWS if src != "outlet"}
    checked = 0
    for c in cells:
        if c["section"] is None or ":" not in c["key"]:
            continue
        src, key = c["key"].split(":", 1)
        csv_value = tables[src].loc[c["section"], key]
        if not np.isfinite(float(csv_value)):
            assert c["text"].strip() == "–"
            continue
        assert float(c["value"]) == pytest.approx(float(csv_value), rel=1e-9, abs=1e-12)
        f = fmt[c["key"]]
        want = f"{int(csv_value):d}" if f == "{:d}" else f.format(float(csv_value))
        assert c["text"].strip() == want, (c, want)
        checked += 1
    return checked


def test_report_is_self_contained_and_images_decode(report):
    from PIL import Image

    text = (report.folder / "report.html").read_text(encoding="utf-8")
    p = _parse(text)
    assert p.urls == []  # no links or sources outside the document
    assert not re.search(r"url\((?!#)", text)  # no CSS fetches
    # one overview, then per outlet: map, long profile, chi (when on a channel), hypsometry
    assert len(p.images) >= 1 + 3 * len(REPORT_OUTLETS)
    for src in p.images:
        assert src.startswith("data:image/png;base64,")
        im = Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1])))
        im.load()
        assert im.format == "PNG" and im.width >= 300 and im.height >= 200
        assert np.asarray(im.convert("L")).std() > 5  # not a blank canvas
    for phrase in ("estimates", "burned into the DEM", "Verify", "licensed professional"):
        assert phrase in text
    assert "@media print" in text


def test_report_tables_hold_the_csv_values(report):
    p = _parse((report.folder / "report.html").read_text(encoding="utf-8"))
    sections = {c["section"] for c in p.cells if c["section"]}
    assert sections == set(REPORT_OUTLETS)
    assert _check_cells(p.cells, _tables(report)) >= 20 * len(REPORT_OUTLETS)


def _chromium():
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--hide-scrollbars"]

PROBE = ("<script>window.addEventListener('load', function () {"
         "document.title = 'widths:' + Array.prototype.map.call(document.images,"
         " function (i) { return i.complete ? i.naturalWidth : -1; }).join(',');});"
         "</script>")


@pytest.mark.skipif(_chromium() is None, reason="chromium is not installed (.ci/run installs "
                    "Debian's chromium; apt-get install chromium to run this test)")
def test_report_in_headless_chromium(report, tmp_path):
    from PIL import Image

    browser = _chromium()
    text = (report.folder / "report.html").read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"
    probe.write_text(text.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    profile = tmp_path / "profile"
    dom = subprocess.run(
        [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--dump-dom",
         "--virtual-time-budget=10000", probe.as_uri()],
        capture_output=True, text=True, timeout=180)
    assert dom.returncode == 0, dom.stderr[-2000:]
    m = re.search(r"<title>widths:([^<]*)</title>", dom.stdout)
    assert m, "the load handler did not run"
    widths = [int(w) for w in m.group(1).split(",")]
    n_img = len(_parse(text).images)
    assert len(widths) == n_img and all(w > 0 for w in widths), widths
    # the browser's DOM still holds the computed values in the table cells
    p = _parse(dom.stdout)
    assert _check_cells(p.cells, _tables(report)) >= 20 * len(REPORT_OUTLETS)

    shot = tmp_path / "report.png"
    run = subprocess.run(
        [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}",
         f"--screenshot={shot}", "--window-size=1200,3000", (report.folder /
                                                             "report.html").as_uri()],
        capture_output=True, text=True, timeout=180)
    assert run.returncode == 0, run.stderr[-2000:]
    im = Image.open(shot)
    assert im.size == (1200, 3000)
    gray = np.asarray(im.convert("L"), dtype=float)
    # a page of text, tables and figures: dark ink on light paper in every band of the page
    for band in np.array_split(gray, 6):
        assert band.std() > 10 and band.min() < 80
