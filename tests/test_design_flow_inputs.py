"""Reading design-flow inputs (CN/C rasters and polygon layers, IDF and hyetograph CSVs)
and the hydrograph figure.

- Polygon CN weighting is checked against exact polygon ∩ catchment areas computed with
  shapely (a reference geometry library), to within the cell-centre placement error.
- Tables: closed forms (a power-law IDF curve read from a CSV in US units gives the SI
  intensities; a hyetograph CSV holds its depth).
"""

import numpy as np
import pandas as pd
import pytest
import rasterio
from affine import Affine

from basinkit import delineate, route, terrain_from_array
from basinkit.errors import InputError
from basinkit.hydrology import concentration as tc
from basinkit.hydrology.design import DesignFlowSettings, design_flows
from basinkit.hydrology.rainfall import design_storm
from basinkit.io.landcover import read_land_values, read_value_polygons, read_value_raster
from basinkit.io.rainfall import read_hyetograph, read_idf_table

from conftest import fractal_dem

CELL = 20.0
CRS = "EPSG:32633"


@pytest.fixture(scope="module")
def model():
    z = fractal_dem(64, seed=21, relief=90) + np.linspace(40, 0, 64)[:, None]
    t = terrain_from_array(z, transform=Affine(CELL, 0, 500000, 0, -CELL, 4000000), crs=CRS)
    fm = route(t)
    acc = fm.accumulation(unit="m2")
    c = int(np.nanargmax(np.where(fm.terrain.valid, acc, -1)))
    x, y = fm.terrain.xy_of(c // fm.ncols, c % fm.ncols)
    d = delineate(fm, [("site", float(x), float(y))], snap_radius_m=0)
    return fm, d


def _write_raster(path, arr, transform, crs=CRS, nodata=None):
    with rasterio.open(path, "w", driver="GTiff", width=arr.shape[1], height=arr.shape[0],
                       count=1, dtype="float32", transform=transform, crs=crs,
                       nodata=nodata) as ds:
        ds.write(arr.astype("float32"), 1)


def test_cn_raster_same_grid_and_other_grid(model, tmp_path):
    fm, _ = model
    t = fm.terrain
    cn = np.full(t.shape, 72.0)
    cn[:5] = -9999
    _write_raster(tmp_path / "cn.tif", cn, t.transform, nodata=-9999)
    got = read_value_raster(tmp_path / "cn.tif", t)
    assert np.isnan(got[:5]).all() and (got[5:] == 72.0).all()
    _write_raster(tmp_path / "shifted.tif", cn, t.transform @ Affine.translation(0.5, 0))
    with pytest.raises(InputError, match="another grid.*resample"):
        read_value_raster(tmp_path / "shifted.tif", t)
    _write_raster(tmp_path / "small.tif", cn[:30], t.transform)
    with pytest.raises(InputError, match="another grid"):
        read_value_raster(tmp_path / "small.tif", t)
    _write_raster(tmp_path / "crs.tif", cn, t.transform, crs="EPSG:32634")
    with pytest.raises(InputError, match="coordinate reference system"):
        read_value_raster(tmp_path / "crs.tif", t)
    with pytest.raises(InputError, match="does not exist"):
        read_value_raster(tmp_path / "none.tif", t)


def test_cn_polygons_area_weighted_against_shapely(model, tmp_path):
    """Area-weighted CN from a polygon layer equals the CN weighted by the exact areas of
    polygon ∩ catchment polygon (shapely), within the cell-centre placement error."""
    import geopandas as gpd
    from shapely.geometry import box

    fm, d = model
    t = fm.terrain
    x0, y1 = t.transform.c, t.transform.f
    w = t.shape[1] * CELL
    h = t.shape[0] * CELL
    # three bands of land cover with edges off the cell boundaries
    cuts = [x0, x0 + 0.31 * w + 7.0, x0 + 0.67 * w - 3.0, x0 + w]
    cns = [58.0, 77.0, 91.0]
    polys = [box(cuts[i], y1 - h, cuts[i + 1], y1) for i in range(3)]
    gdf = gpd.GeoDataFrame({"curve_no": cns}, geometry=polys, crs=CRS)
    gdf.to_file(tmp_path / "cover.gpkg")
    grid = read_land_values(tmp_path / "cover.gpkg", t, field="curve_no")
    assert np.isfinite(grid).all()
    catch = d.catchment_polygon("site")
    exact = sum(cn * p.intersection(catch).area for cn, p in zip(cns, polys)) / catch.area
    settings = DesignFlowSettings(storm=design_storm("100mm", "24h"), curve_number=grid,
                                  tc_method="kirpich")
    res = design_flows(fm, d, settings)
    got = res.table["curve_number_area_weighted"].iloc[0]
    # each band edge misplaces at most half a cell along its length inside the catchment
    from shapely.geometry import LineString

    tol = sum(LineString([(cuts[i], y1 - h), (cuts[i], y1)]).intersection(catch).length
              * CELL / 2 * abs(cns[i] - cns[i - 1]) for i in (1, 2)) / catch.area
    assert tol > 0
    assert got == pytest.approx(exact, abs=tol)
    with pytest.raises(InputError, match="no field 'cn'"):
        read_value_polygons(tmp_path / "cover.gpkg", "cn", t)
    with pytest.raises(InputError, match="read as a raster"):
        read_land_values(tmp_path / "x.tif", t, field="cn")


def test_idf_csv_us_units(tmp_path):
    """A power-law IDF curve written in in/h and minutes reads back in mm/h (closed form:
    1 in = 25.4 mm); a table with a unit-less intensity column is refused."""
    rows = [{"duration_min": dmin, "return_period_yr": 25,
             "intensity_in_per_h": 30.0 * dmin ** -0.65} for dmin in (5, 15, 60, 360, 1440)]
    pd.DataFrame(rows).to_csv(tmp_path / "idf.csv", index=False)
    idf = read_idf_table(tmp_path / "idf.csv")
    assert idf.intensity_mm_per_h(0.5, 25) == pytest.approx(25.4 * 30.0 * 30 ** -0.65)
    pd.DataFrame(rows).rename(columns={"intensity_in_per_h": "intensity"}).to_csv(
        tmp_path / "bad.csv", index=False)
    with pytest.raises(InputError, match="bad.csv.*no unit"):
        read_idf_table(tmp_path / "bad.csv")


def test_hyetograph_csv(tmp_path):
    (tmp_path / "h.csv").write_text("time_min,depth_mm\n15,2\n30,10\n45,4\n60,1\n")
    h = read_hyetograph(tmp_path / "h.csv")
    assert h.depth_mm == pytest.approx(17.0) and h.duration_h == pytest.approx(1.0)
    assert float(h.cumulative_at(0.5)) == pytest.approx(12.0)
    (tmp_path / "f.csv").write_text("time_h,cumulative_fraction\n0,0\n1,0.25\n2,1\n")
    f = read_hyetograph(tmp_path / "f.csv", depth="2in")
    assert f.depth_mm == pytest.approx(50.8)
    (tmp_path / "u.csv").write_text("time,depth\n1,2\n2,3\n")
    with pytest.raises(InputError, match="'time' has no unit"):
        read_hyetograph(tmp_path / "u.csv")


def test_plot_design_hydrograph(model):
    """The figure: hyetograph axes above (y inverted), hydrograph below with one peak marker
    at the table's peak, base flow shaded; given axes are used, not replaced."""
    from matplotlib.collections import PolyCollection
    from matplotlib.figure import Figure

    from basinkit.plot.hydrograph import plot_design_hydrograph

    fm, d = model
    s = DesignFlowSettings(storm=design_storm("100mm", "24h"), curve_number=80.0,
                           tc_method="kirpich", base_flow_m3_per_s=0.4,
                           velocity=tc.VelocityMethodInputs())
    res = design_flows(fm, d, s)
    tab, h = res.outlet("site")
    row = tab.set_index("method").loc["nrcs_unit_hydrograph"]
    fig = plot_design_hydrograph(h, row, title="site")
    rain_ax, flow_ax = fig.axes[1], fig.axes[0]
    lo, hi = rain_ax.get_ylim()
    assert lo > hi  # hangs from the top
    peaks = [ln for ln in flow_ax.lines if ln.get_marker() == "o"]
    assert len(peaks) == 1
    px, py = peaks[0].get_data()
    assert py[0] == pytest.approx(row["peak_discharge_m3_per_s"])
    assert px[0] == pytest.approx(row["time_to_peak_h"])
    shaded = [c for c in flow_ax.collections if isinstance(c, PolyCollection)]
    assert shaded and "base flow" in flow_ax.get_legend().get_texts()[0].get_text()
    # the default window holds the rain centroid, the peak and the recession down to 5 %
    # of the peak (common practice, no source) and is narrower than the 24-hour storm
    lo, hi = flow_ax.get_xlim()
    assert lo <= row["rain_centroid_h"] and hi > row["time_to_peak_h"]
    direct = (h["discharge_m3_per_s"] - h["base_flow_m3_per_s"]).to_numpy()
    late = h["time_h"].to_numpy()[direct >= 0.05 * direct.max()].max()
    assert hi >= late and hi - lo < 24
    whole = plot_design_hydrograph(h, row, xlim_h="all").axes[0].get_xlim()
    assert whole[0] == 0 and whole[1] >= 24
    f2 = Figure()
    a = f2.add_subplot(1, 1, 1)
    assert plot_design_hydrograph(h, None, ax=a) is f2
    f3 = Figure()
    pair = (f3.add_subplot(2, 1, 1), f3.add_subplot(2, 1, 2))
    assert plot_design_hydrograph(h, row, ax=pair) is f3 and len(f3.axes) == 2
