"""The HTML report, checked in a real browser.

With Debian's chromium (installed by .ci/run; skipped with a reason otherwise): the report
of the demo folder (tests/report_folders.py) is rendered headless; after the load event an
injected script writes each image's ``naturalWidth`` (0 when an image fails to decode, per
the HTML standard) and the outlet order after clicking the table's area heading once and
twice into the document title, read back with ``--dump-dom``; the figure-table cells of
the browser's DOM hold the CSV values; the sorted order is the order of the CSV's areas
(numpy argsort, a reference library); and the screenshot is a real, non-blank rendering.
"""

import re
import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest

from report_folders import demo_folder
from test_report import Page

REPORT_OUTLETS = ["crossing", "main_4", "tributary_1"]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    from basinkit.report import write_report

    folder = tmp_path_factory.mktemp("report") / "out"
    shutil.copytree(demo_folder(), folder)
    write_report(folder, report_outlets=REPORT_OUTLETS)
    return folder


def _tables(folder):
    def read(name):
        return pd.read_csv(folder / name, dtype={"outlet_id": str}).drop_duplicates(
            "outlet_id").set_index("outlet_id")

    paths = pd.read_csv(folder / "flow_paths.csv", dtype={"outlet_id": str})
    return {"catchment": read("catchments.csv"), "morphometry": read("morphometry.csv"),
            "path": paths[paths["kind"] == "longest_flow_path"].set_index("outlet_id")}


def _check_cells(cells, tables):
    """Every per-outlet figure cell equals the CSV value (CSV keeps 10 significant digits)
    and its text is that value formatted as the report's table says."""
    from basinkit.report.sections import FIGURE_ROWS

    fmt = {f"{src}:{key}": f for _, src, key, _, f in FIGURE_ROWS if src != "outlet"}
    by_fid = dict(zip(tables["catchment"]["file_id"], tables["catchment"].index))
    checked = 0
    for c in cells:
        src, key = c["key"].split(":", 1)
        if src not in tables or c["section"] is None:
            continue
        oid = by_fid[c["section"]]
        csv_value = float(tables[src].loc[oid, key])
        if not np.isfinite(csv_value):
            assert c["text"].strip() == "–"
            continue
        assert float(c["value"]) == pytest.approx(csv_value, rel=1e-9, abs=1e-12)
        f = fmt[c["key"]]
        want = f"{int(csv_value):d}" if f == "{:d}" else f.format(csv_value)
        assert c["text"].strip() == want, (c, want)
        checked += 1
    return checked


def _chromium():
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--hide-scrollbars"]

# after load: image widths, then the outlet order after one and two clicks on the area
# heading (third column)
PROBE = ("<script>window.addEventListener('load', function () {"
         "var ids = function () { return Array.prototype.map.call("
         "document.getElementById('outlet-table').tBodies[0].rows,"
         " function (r) { return r.cells[0].textContent; }).join(','); };"
         "var head = document.getElementById('outlet-table').tHead.rows[0].cells[2];"
         "head.click(); var up = ids(); head.click(); var down = ids();"
         "document.title = 'widths:' + Array.prototype.map.call(document.images,"
         " function (i) { return i.complete ? i.naturalWidth : -1; }).join(',')"
         " + '|up:' + up + '|down:' + down;});"
         "</script>")


@pytest.mark.skipif(_chromium() is None, reason="chromium is not installed (.ci/run installs "
                    "Debian's chromium; apt-get install chromium to run this test)")
def test_report_in_headless_chromium(report, tmp_path):
    from PIL import Image

    browser = _chromium()
    text = (report / "report.html").read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"
    probe.write_text(text.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    profile = tmp_path / "profile"
    dom = subprocess.run(
        [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--dump-dom",
         "--virtual-time-budget=10000", probe.as_uri()],
        capture_output=True, text=True, timeout=180)
    assert dom.returncode == 0, dom.stderr[-2000:]
    m = re.search(r"<title>widths:([^|<]*)\|up:([^|<]*)\|down:([^<]*)</title>", dom.stdout)
    assert m, "the load handler did not run"
    widths = [int(w) for w in m.group(1).split(",")]
    n_img = len(Page(text).images)
    assert len(widths) == n_img and all(w > 0 for w in widths), widths
    # the table sorted by area, up then down, as numpy orders the CSV's areas
    cat = _tables(report)["catchment"]
    order = list(cat.index[np.argsort(cat["area_km2"].to_numpy(), kind="stable")])
    assert m.group(2).split(",") == order
    assert m.group(3).split(",") == order[::-1]
    # the browser's DOM still holds the computed values in the figure tables
    p = Page(dom.stdout)
    assert {c["section"] for c in p.cells} == set(cat.loc[REPORT_OUTLETS, "file_id"])
    assert _check_cells(p.cells, _tables(report)) >= 25 * len(REPORT_OUTLETS)

    shot = tmp_path / "report.png"
    run = subprocess.run(
        [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}",
         f"--screenshot={shot}", "--window-size=1200,3000",
         (report / "report.html").as_uri()],
        capture_output=True, text=True, timeout=180)
    assert run.returncode == 0, run.stderr[-2000:]
    im = Image.open(shot)
    assert im.size == (1200, 3000)
    gray = np.asarray(im.convert("L"), dtype=float)
    # a page of text, tables and figures: dark ink on light paper in every band of the page
    for band in np.array_split(gray, 6):
        assert band.std() > 10 and band.min() < 80
