"""Outlet ids in batches: a repeated id, ids that clean to one file name, a 300-character
id, two ids on one cell; and a 200-outlet job on a real DEM with every kind of bad row.

External checks: the V-valley catchment in closed form (tests/test_jobs.py,
v_valley_catchment_cells); on matplotlib's real 3-arc-second DEM (jacksboro_fault_dem.npz,
its ymin/ymax swapped in the file, rows north to south) the catchment areas are checked
against cell areas computed independently with pyproj's Geod on the WGS 84 ellipsoid
(Karney 2013) over the sub-catchment label raster the job wrote (read with rasterio); the
tables are read back with pandas and the GeoPackage with pyogrio. That a bad row fails
alone and the rest go on is the batch rule of DESIGN.md (common practice, no source).
"""

import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from affine import Affine

from basinkit.cli.main import main
from test_jobs import v_valley_catchment_cells

ROOT = Path(__file__).resolve().parents[1]
LONG = "L" * 300
X0, Y0 = 500000.0, 5000600.0  # the valley's north-west corner (10 m cells, 60 x 40)


def run(argv, capsys):
    with pytest.raises(SystemExit) as e:
        main([str(a) for a in argv])
    return e.value.code, capsys.readouterr().err


def centre(row, col=20):
    """Map coordinates of a cell centre of the valley."""
    return X0 + (col + 0.5) * 10, Y0 - (row + 0.5) * 10


@pytest.fixture(scope="module")
def valley(tmp_path_factory):
    """The V valley of tests/test_jobs.py routed into a flow folder, and an outlet table
    with every awkward id on the centre column (rows 20 to 55)."""
    from basinkit.io.writers import write_geotiff

    d = tmp_path_factory.mktemp("ids")
    nr, nc = 60, 40
    r = np.arange(nr)[:, None]
    c = np.arange(nc)[None, :]
    z = 100.0 + 0.5 * (nr - 1 - r) + 0.8 * np.abs(c - nc // 2)
    write_geotiff(d / "dem.tif", z.astype(np.float32),
                  Affine(10.0, 0, X0, 0, -10.0, Y0), "EPSG:32633", nodata=float("nan"))
    rows = [("a/b", 20), ("a_b", 25), ("a b", 30), (LONG, 35), ("gauge", 40),
            ("gauge", 45), ("twin_1", 50), ("twin_2", 50), ("down", 55)]
    lines = ["id,x,y"] + [f'"{i}",{centre(k)[0]},{centre(k)[1]}' for i, k in rows]
    (d / "outlets.csv").write_text("\n".join(lines) + "\n")
    from basinkit import read_dem, route, write_flow_folder

    write_flow_folder(route(read_dem(d / "dem.tif")), d / "flow")
    return d


def _argv(cmd, d, out):
    common = ["--outlets", d / "outlets.csv", "--snap-radius", "0m", "-o", out]
    return {"delineate": ["delineate", d / "flow", *common],
            "profile": ["profile", d / "flow", *common, "--min-area", "0.5ha",
                        "--min-order", "1"],
            "morphometry": ["morphometry", d / "flow", *common, "--min-area", "0.5ha"]}[cmd]


def test_awkward_ids_in_the_catchments_step(valley, tmp_path, capsys):
    """The repeated id fails as a bad row with its line number (outlet_errors.csv and the
    errors layer) and the status is 1; ids cleaning to one name and the 300-character id
    get distinct file ids of at most 64 characters; the two ids on one cell both get the
    closed-form catchment of that cell, with a note in their warning column."""
    import pyogrio

    code, err = run(_argv("delineate", valley, tmp_path / "d"), capsys)
    assert code == 1, err
    assert "Traceback" not in err
    assert "failed: outlet 'gauge' (outlets.csv line 7): duplicate id" in err
    errors = pd.read_csv(tmp_path / "d" / "outlet_errors.csv")
    assert errors[["outlet_id", "source"]].values.tolist() == [["gauge",
                                                                 "outlets.csv line 7"]]
    assert "outlets.csv line 6 already has the id 'gauge'" in errors["reason"][0]
    layer = pyogrio.read_dataframe(tmp_path / "d" / "catchments.gpkg", layer="errors")
    assert layer["source"].tolist() == ["outlets.csv line 7"]
    cat = pd.read_csv(tmp_path / "d" / "catchments.csv", keep_default_na=False)
    ok = cat[cat["status"] == "ok"].set_index("outlet_id")
    assert sorted(ok.index) == sorted(["a/b", "a_b", "a b", LONG, "gauge", "twin_1",
                                       "twin_2", "down"])
    fids = ok["file_id"]
    assert fids.str.lower().is_unique and (fids.str.len() <= 64).all()
    assert fids["a_b"] == "a_b" and fids["a/b"].startswith("a_b_")
    assert fids["a b"].startswith("a_b_") and len(fids[LONG]) == 64
    assert fids.str.fullmatch(r"[A-Za-z0-9._-]+").all()
    for oid, row in (("twin_1", 50), ("twin_2", 50), ("down", 55), ("gauge", 40)):
        want = v_valley_catchment_cells(60, 40, row, 20).sum() * 100.0
        assert float(ok.loc[oid, "area_m2"]) == pytest.approx(want, rel=1e-12), oid
    assert "shares its cell with outlet 'twin_2'" in ok.loc["twin_1", "warning"]
    assert "shares its cell with outlet 'twin_1'" in ok.loc["twin_2", "warning"]
    # the twins are upstream of "down" both, and count as two outlets there
    ups = ok.loc["down", "upstream_outlet_ids"].split(";")
    assert {"twin_1", "twin_2", "gauge", LONG} <= set(ups)
    assert int(ok.loc["down", "upstream_outlet_count"]) == len(ups) == 7


def test_awkward_ids_get_their_own_figures(valley, tmp_path, capsys):
    """Per-outlet files (figures) are named by file id: no two outlets write one file, a
    300-character id does not abort the run (profile and morphometry commands)."""
    code, err = run(_argv("profile", valley, tmp_path / "p"), capsys)
    assert code == 1 and "Traceback" not in err  # the repeated id
    code, err = run(_argv("morphometry", valley, tmp_path / "m"), capsys)
    assert code == 1 and "Traceback" not in err
    cat = pd.read_csv(tmp_path / "p" / "flow_paths.csv", keep_default_na=False)
    fids = sorted(set(cat["file_id"]))
    assert len(fids) == 8
    for folder, kinds in ((tmp_path / "p", ("long_profile", "longest_flow_path",
                                            "chi_elevation", "slope_area")),
                          (tmp_path / "m", ("hypsometry",))):
        names = sorted(p.name for p in (folder / "figures").iterdir())
        assert names == sorted(f"{f}_{k}.png" for f in fids for k in kinds)
    morph = pd.read_csv(tmp_path / "m" / "morphometry.csv", keep_default_na=False)
    assert (morph["outlet_id"] == "gauge").sum() == 2  # one measured, one failed row
    bad = morph[morph["error"] != ""]
    assert bad[["outlet_id", "source"]].values.tolist() == [["gauge", "outlets.csv line 7"]]


def test_job_and_commands_agree_on_file_ids(valley, tmp_path, capsys):
    """The job runner gives the awkward ids the same file ids as the commands (one
    sanitiser), and also exits with status 1 for the repeated id."""
    (valley / "job.toml").write_text(
        '[inputs]\ndem = "dem.tif"\noutlets = "outlets.csv"\n[outlets]\nsnap_radius_m = 0\n'
        '[channels]\nmin_area = "0.5ha"\n[outputs]\nreport = false\n')
    code, err = run(["run", valley / "job.toml", "-o", tmp_path / "j"], capsys)
    assert code == 1 and "Traceback" not in err
    code, _ = run(["-q", *_argv("delineate", valley, tmp_path / "d")], capsys)
    a = pd.read_csv(tmp_path / "j" / "catchments.csv", keep_default_na=False)
    b = pd.read_csv(tmp_path / "d" / "catchments.csv", keep_default_na=False)
    assert a["file_id"].tolist() == b["file_id"].tolist()


def _bench_module():
    spec = importlib.util.spec_from_file_location("bench_batch_job",
                                                  ROOT / "bench" / "bench_batch_job.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_batch_of_200_outlets_on_a_real_dem(tmp_path, capsys):
    """The batch of bench/bench_batch_job.py with 200 outlets (a repeated id, two ids
    cleaning to one file name, a 300-character id, two ids on one cell, a point off the
    grid, an unreadable row): status 1, no traceback, only the three bad rows fail, every
    good outlet's results present and distinct; the catchment areas equal the sum of the
    ellipsoidal areas of their cells (pyproj Geod, independent of basinkit's cell
    geometry) to 1e-9."""
    import rasterio
    from pyproj import Geod

    bench = _bench_module()
    info = bench.build_batch(tmp_path / "in", n=200)
    job = tmp_path / "in" / "job.toml"
    job.write_text(job.read_text().replace("[outputs]", "[outputs]\nrasters = true"))
    code, err = run(["run", job, "-o", tmp_path / "out"], capsys)
    assert code == 1, err[-2000:]
    assert "Traceback" not in err
    cat = bench.check_outputs(tmp_path / "out", info)
    prov = json.loads((tmp_path / "out" / "provenance.json").read_text())
    assert prov["outlets"]["failed"] == 3 and len(prov["failures"]) == 3
    with rasterio.open(tmp_path / "out" / "subcatchment_labels.tif") as ds:
        labels = ds.read(1)
        t = ds.transform
    geod = Geod(ellps="WGS84")
    lat_edges = t.f + t.e * np.arange(labels.shape[0] + 1)
    row_area = np.array([abs(geod.polygon_area_perimeter(
        [t.c, t.c + t.a, t.c + t.a, t.c], [lat_edges[i], lat_edges[i],
                                          lat_edges[i + 1], lat_edges[i + 1]])[0])
        for i in range(labels.shape[0])])
    ok = cat[cat["status"] == "ok"].copy()
    ok["label"] = ok["label"].astype(int)
    sub = ok.drop_duplicates("label").set_index("label")["subcatchment_area_m2"]
    for lab, area in list(sub.items())[:25]:
        rows = np.nonzero(labels == lab)[0]
        # the CSV keeps 10 significant digits
        assert float(area) == pytest.approx(row_area[rows].sum(), rel=1e-9), lab
