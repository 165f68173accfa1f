"""``basinkit delineate``: outputs, exit status, provenance, cautions, options.

External checks: GeoPackage/GeoJSON/GeoTIFF read back with pyogrio/geopandas/rasterio
(reference readers); the WGS 84 GeoJSON's geodesic areas from pyproj Geod (Karney 2013)
against the reported areas; SHA-256 of the outlet file from hashlib. The rest is common
practice (no source): one row per outlet, non-zero exit when an outlet fails.
"""

import hashlib
import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
from affine import Affine
from conftest import fractal_dem
from pyproj import Geod

from basinkit import write_flow_folder
from basinkit import route, terrain_from_array
from basinkit.cli.main import main


@pytest.fixture(scope="module")
def flowdir(tmp_path_factory):
    z = fractal_dem(90, 70, seed=12)
    t = terrain_from_array(z, transform=Affine(20, 0, 600000, 0, -20, 5001800),
                           crs="EPSG:32632")
    fm = route(t)
    p = tmp_path_factory.mktemp("flow") / "flow"
    write_flow_folder(fm, p)
    return p, fm


def run(argv):
    try:
        main([str(a) for a in argv])
    except SystemExit as exc:
        return exc.code
    return None


def test_outputs_and_exit_status(flowdir, tmp_path, capsys):
    p, fm = flowdir
    area = fm.d8_upstream_area_flat()
    cells = np.argsort(area)[-40:][::-3][:6]  # big, partly nested catchments
    x, y = fm.terrain.xy_of(cells // fm.ncols, cells % fm.ncols)
    csv = tmp_path / "pts.csv"
    rows = ["gauge,x,y"] + [f"g/{i},{a},{b}" for i, (a, b) in enumerate(zip(x, y))]
    rows += ["broken,12,abc", "away,1,1"]
    csv.write_text("\n".join(rows) + "\n")
    out = tmp_path / "out"
    code = run(["delineate", p, "--outlets", csv, "--snap-radius", "0m", "-o", out,
                "--labels-raster", "--web-geojson", "--outlet", "extra=600105,5000105"])
    err = capsys.readouterr().err
    assert code == 1  # two outlets failed
    assert "broken" in err and "outside the grid" in err
    assert err.count("DEM are estimates") == 1  # cautions printed once
    layers = dict(pyogrio.list_layers(out / "catchments.gpkg"))
    assert set(layers) == {"outlets", "catchments", "subcatchments", "errors"}
    assert layers["errors"] is None  # a plain table
    cat = gpd.read_file(out / "catchments.gpkg", layer="catchments")
    assert len(cat) == 7 and cat.crs.to_epsg() == 32632
    np.testing.assert_allclose(cat.geometry.area, cat["area_m2"], rtol=1e-9)
    np.testing.assert_allclose(cat.sort_values("outlet_id")["area_m2"],
                               cat.sort_values("outlet_id")["area_km2"] * 1e6)
    pts = gpd.read_file(out / "catchments.gpkg", layer="outlets")
    assert sorted(pts["position"].unique()) == ["given", "snapped"] and len(pts) == 14
    sub = gpd.read_file(out / "catchments.gpkg", layer="subcatchments")
    assert abs(sub["area_m2"].sum() - sub.geometry.area.sum()) < 1e-6 * sub["area_m2"].sum()
    errs = pyogrio.read_dataframe(out / "catchments.gpkg", layer="errors")
    assert sorted(errs["outlet_id"]) == ["away", "broken"]
    table = pd.read_csv(out / "catchments.csv")
    assert len(table) == 9  # one row per outlet given, failed ones included
    assert table["status"].value_counts().to_dict() == {"ok": 7, "failed": 2}
    assert {"area_km2", "perimeter_m", "touches_edge", "upstream_outlet_ids",
            "relief_m", "snap_distance_m"} <= set(table.columns)
    assert table["file_id"].dropna().str.contains("/").sum() == 0
    meta = json.loads((out / "delineation.json").read_text())
    assert "licensed professional" in meta["cautions"]
    assert meta["inputs"]["outlets"]["sha256"] == hashlib.sha256(csv.read_bytes()).hexdigest()
    assert meta["outlets_failed"] == 2 and meta["outlets_delineated"] == 7
    assert meta["crs_epsg"] == 32632 and meta["version"]
    info = pyogrio.read_info(out / "catchments.gpkg", layer="catchments")
    assert "field" in info["layer_metadata"]["cautions"]
    with rasterio.open(out / "subcatchment_labels.tif") as ds:
        lab = ds.read(1)
        assert ds.transform == fm.terrain.transform and ds.crs.to_epsg() == 32632
        mapping = json.loads(ds.tags()["label_to_outlet_id"])
    ok = table[table["status"] == "ok"]
    for r in ok.itertuples():
        assert mapping[str(int(r.label))] == r.outlet_id
        assert (lab == r.label).sum() * 400.0 == pytest.approx(r.subcatchment_area_m2)
    web = gpd.read_file(out / "catchments_wgs84.geojson")
    assert web.crs.to_epsg() == 4326
    geod = Geod(ellps="WGS84")
    # UTM areas are planar, the geodesic area of the reprojected polygon differs by the
    # scale factor squared (k ≈ 0.9996..1.0004 in the zone: within 0.2 %)
    for g, a in zip(web.geometry, web["area_km2"]):
        ga = abs(geod.geometry_area_perimeter(g)[0]) / 1e6
        assert abs(ga / a - 1) < 2e-3


def test_all_good_exit_zero_quiet_and_overwrite(flowdir, tmp_path, capsys):
    p, fm = flowdir
    out = tmp_path / "o"
    code = run(["--quiet", "delineate", p, "--outlet", "600705,5000905", "-o", out])
    assert code == 0
    assert capsys.readouterr().err == ""
    # the same folder again: refused without --overwrite, accepted with it
    code = run(["delineate", p, "--outlet", "600705,5000905", "-o", out])
    assert code == 2 and "--overwrite" in capsys.readouterr().err
    code = run(["delineate", p, "--outlet", "600705,5000905", "-o", out, "--overwrite",
                "--snap-to-channel", "0.02km2", "--snap-radius", "0.1km"])
    assert code == 0
    t = pd.read_csv(out / "catchments.csv")
    assert t["area_m2"][0] >= 0.02e6 and t["snap_distance_m"][0] <= 100


def test_outlet_crs_lonlat(flowdir, tmp_path):
    """An outlet given in EPSG:4326 lands where the same place given in UTM does (pyproj
    round trip)."""
    from pyproj import Transformer

    p, fm = flowdir
    lon, lat = Transformer.from_crs(32632, 4326, always_xy=True).transform(600705,
                                                                           5000905)
    a, b = tmp_path / "a", tmp_path / "b"
    assert run(["-q", "delineate", p, "--outlet", f"{lon},{lat}", "--outlet-crs",
                "EPSG:4326", "-o", a]) == 0
    assert run(["-q", "delineate", p, "--outlet", "600705,5000905", "-o", b]) == 0
    ta, tb = pd.read_csv(a / "catchments.csv"), pd.read_csv(b / "catchments.csv")
    assert ta["label"][0] == tb["label"][0] and ta["area_m2"][0] == tb["area_m2"][0]
    assert ta["x_snapped"][0] == tb["x_snapped"][0]


def test_user_errors_without_traceback(flowdir, tmp_path, capsys):
    p, _ = flowdir
    assert run(["delineate", tmp_path / "nothing", "--outlet", "1,2", "-o",
                tmp_path / "x"]) == 2
    e = capsys.readouterr().err
    assert "not a flow folder" in e and "Traceback" not in e
    assert run(["delineate", p, "-o", tmp_path / "y"]) == 2
    assert "no outlets" in capsys.readouterr().err
    assert run(["delineate", p, "--outlet", "1,2", "--snap-radius", "ten", "-o",
                tmp_path / "z"]) == 2
    assert "--snap-radius" in capsys.readouterr().err
    assert run(["delineate", p, "--outlet", "1,2", "-o", tmp_path / "w"]) == 2
    assert "none of the 1 outlets" in capsys.readouterr().err


def test_outputs_byte_identical_between_runs(flowdir, tmp_path):
    """The same inputs and options give byte-identical files (project rule: deterministic
    outputs; the GeoPackage gets a fixed timestamp)."""
    p, _ = flowdir
    outs = []
    for k in range(2):
        o = tmp_path / f"r{k}"
        assert run(["-q", "delineate", p, "--outlet", "600705,5000905", "--outlet",
                    "b=600305,5000505", "-o", o, "--labels-raster", "--web-geojson"]) == 0
        outs.append(o)
    names = sorted(f.name for f in outs[0].iterdir())
    assert names == sorted(f.name for f in outs[1].iterdir())
    for n in names:
        assert (outs[0] / n).read_bytes() == (outs[1] / n).read_bytes(), n


def test_fraction_rasters_on_d8_warns(flowdir, tmp_path, capsys):
    p, _ = flowdir
    assert run(["delineate", p, "--outlet", "600705,5000905", "-o", tmp_path / "f",
                "--fraction-rasters"]) == 0
    assert "D8" in capsys.readouterr().err
    assert not (tmp_path / "f" / "contributing_fraction").exists()


def test_fraction_rasters_on_dinf_folder(tmp_path):
    """A D∞ flow folder: one contributing-fraction GeoTIFF per outlet, named by its
    sanitised id, whose fractions × cell area sum to the contributing area in the table
    (rasterio reads them back)."""
    pytest.importorskip("basinkit.routing.contributing")
    z = fractal_dem(50, seed=13)
    fm = route(terrain_from_array(z, cellsize=10, crs="EPSG:32632"), method="dinf")
    write_flow_folder(fm, tmp_path / "flow")
    out = tmp_path / "out"
    code = run(["-q", "delineate", tmp_path / "flow", "--outlet", "../a b=255,255",
                "--outlet", "205,105", "-o", out, "--fraction-rasters"])
    assert code == 0
    t = pd.read_csv(out / "catchments.csv")
    assert "contributing_area_m2" in t
    files = sorted(p.name for p in (out / "contributing_fraction").iterdir())
    assert files == ["a_b.tif", "outlet_2.tif"]
    for fid, a in zip(t["file_id"], t["contributing_area_m2"]):
        with rasterio.open(out / "contributing_fraction" / f"{fid}.tif") as ds:
            f = ds.read(1).astype(float)
        assert abs(np.nansum(f) * 100.0 - a) <= 1e-4 * a
    meta = json.loads((out / "delineation.json").read_text())
    assert set(meta["contributing_fraction_rasters"]) == {"../a b", "outlet_2"}
