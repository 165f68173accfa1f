"""The design-flow step: ``basinkit design-flow``, the ``[design_flow]`` job section and the
report's design-flow part, on a small fractal basin with two nested outlets.

Sources named beside each check:
- Mass balance: hydrograph volume = runoff depth × catchment area (closed form), here
  recomputed from the files the command wrote.
- Unit definitions (international foot and acre, 1959): 1 m³/s = 1/0.3048³ cfs,
  1 in = 25.4 mm, 1 acre-ft = 4046.8564224 m² × 0.3048 m (closed form).
- The TR-55 velocity method's Tc is the sum of the segments' travel times (TR-55 1986
  ch. 3, eq. 3-5).
- Curve-number runoff Q = (P − 0.2S)²/(P + 0.8S), S = 1000/CN − 10 in (TR-55 ch. 2).
- That a job and the command with the same settings give the same bytes is the products
  contract of the project (common practice, no source); so are one-line errors with exit
  status 2 and nothing written.
"""

import json
import textwrap

import numpy as np
import pandas as pd
import pytest

from conftest import fractal_dem, run_cli

CELL = 20.0
X0, Y1 = 500000.0, 4001600.0
IN = 25.4


run = run_cli  # the real entry point, returning (code, out, err)


@pytest.fixture(scope="module")
def basin(tmp_path_factory):
    """An 80 × 80 fractal basin of 20 m cells tilted south, routed by the command; two
    nested outlets on the main stem (lower, and upper with about a third of its area);
    an IDF CSV (power law), a CN raster on the grid and one shifted off it."""
    from affine import Affine

    from basinkit.io.flow_folder import load_flow
    from basinkit.io.writers import write_geotiff

    d = tmp_path_factory.mktemp("design")
    z = fractal_dem(80, seed=5, relief=120) + np.linspace(50, 0, 80)[:, None]
    tr = Affine(CELL, 0, X0, 0, -CELL, Y1)
    write_geotiff(d / "dem.tif", z.astype(np.float32), tr, "EPSG:32633", nodata=float("nan"))
    assert run(["-q", "route", d / "dem.tif", "-o", d / "flow"])[0] == 0
    fm = load_flow(d / "flow")
    acc = fm.accumulation(unit="m2")
    main_cell = int(np.nanargmax(np.where(fm.terrain.valid, acc, -1)))
    up = fm.d8_upstream_area_flat()
    cell = main_cell
    while up[cell] > up[main_cell] / 3:
        donors = np.nonzero(fm.receiver == cell)[0]
        cell = int(donors[np.argmax(up[donors])])
    lines = ["id,x,y"]
    for oid, c in (("lower", main_cell), ("upper", cell)):
        x, y = fm.terrain.xy_of(c // fm.ncols, c % fm.ncols)
        lines.append(f"{oid},{float(x)},{float(y)}")
    (d / "outlets.csv").write_text("\n".join(lines) + "\n")
    rows = ["duration_min,return_period_yr,intensity_mm_per_h"]
    for T, k in ((2, 600.0), (100, 1300.0)):
        for m in (5, 10, 15, 30, 60, 120, 360, 720, 1440):
            rows.append(f"{m},{T},{k / (m + 10) ** 0.8:.4f}")
    (d / "idf.csv").write_text("\n".join(rows) + "\n")
    cn = np.where(np.arange(80)[None, :] < 40, 65.0, 85.0) * np.ones((80, 1))
    write_geotiff(d / "cn.tif", cn.astype(np.float32), tr, "EPSG:32633")
    write_geotiff(d / "cn_shifted.tif", cn.astype(np.float32),
                  tr @ Affine.translation(0.5, 0), "EPSG:32633")
    write_geotiff(d / "cn_bad.tif", np.full((80, 80), 120.0, np.float32), tr, "EPSG:32633")
    (d / "hyeto.csv").write_text("time_min,cumulative_depth_mm\n0,0\n30,8\n60,30\n90,52\n"
                                 "120,60\n180,64\n")
    return d, fm


OUTLETS = ["--snap-radius", "0"]
BASE = ["--curve-number", "78", "--runoff-coefficient", "0.45", "--sheet-flow-n", "0.15",
        "--channel-n", "0.045", "--hydraulic-radius", "0.5m", "--channel-threshold", "5ha"]


def _design(basin, tmp, *extra, capsys=None, name="out"):
    d, _ = basin
    out = tmp / name
    res = run(["design-flow", d / "flow", "--outlets", d / "outlets.csv", *OUTLETS,
               "--idf-table", d / "idf.csv", "--return-period", "100", *BASE, *extra,
               "-o", out], capsys)
    return out, res


@pytest.fixture(scope="module")
def command_run(basin, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("cmd")
    out, (code, _, _) = _design(basin, tmp, "--base-flow", "0.2")
    assert code == 0
    return out


def test_command_writes_every_product(command_run):
    out = command_run
    for name in ("design_flows.csv", "hydrographs.csv", "design_flows.gpkg",
                 "design_flows.json", "figures/lower_design_hydrograph.png",
                 "figures/upper_design_hydrograph.png"):
        assert (out / name).is_file(), name
    t = pd.read_csv(out / "design_flows.csv")
    # one row per outlet and method (3 Tc methods, 2 peak methods)
    assert sorted(t.groupby("outlet_id").size().items()) == [("lower", 5), ("upper", 5)]
    assert set(t["method"]) == {"kirpich", "nrcs_lag", "tr55_velocity", "rational",
                                "nrcs_unit_hydrograph"}
    assert (t["status"] == "ok").all()
    assert t["caution"].str.contains("licensed professional").all()
    h = pd.read_csv(out / "hydrographs.csv")
    assert list(h.columns[:4]) == ["outlet_id", "time_h", "time_min", "rainfall_in_step_mm"]
    assert {"excess_in_step_mm", "discharge_m3_per_s", "discharge_cfs",
            "base_flow_m3_per_s"} <= set(h.columns)


def test_us_columns_beside_si(command_run):
    """International foot, inch and acre (1959): closed-form unit factors."""
    t = pd.read_csv(command_run / "design_flows.csv")
    pk = t[t["method_kind"] == "peak_discharge"]
    np.testing.assert_allclose(pk["peak_discharge_cfs"],
                               pk["peak_discharge_m3_per_s"] / 0.3048 ** 3, rtol=1e-9)
    np.testing.assert_allclose(t["runoff_depth_in"], t["runoff_depth_mm"] / IN, rtol=1e-9)
    np.testing.assert_allclose(t["runoff_volume_acre_ft"],
                               t["runoff_volume_m3"] / (4046.8564224 * 0.3048), rtol=1e-9)
    np.testing.assert_allclose(t["area_acres"], t["area_m2"] / 4046.8564224, rtol=1e-9)
    h = pd.read_csv(command_run / "hydrographs.csv")
    np.testing.assert_allclose(h["discharge_cfs"], h["discharge_m3_per_s"] / 0.3048 ** 3,
                               rtol=1e-9)
    np.testing.assert_allclose(h["rainfall_in_step_in"], h["rainfall_in_step_mm"] / IN,
                               rtol=1e-9)


def test_mass_balance_and_runoff_from_the_files(command_run):
    """Hydrograph volume = runoff depth × area within 0.1 % (closed form); the runoff
    depth is the curve-number equation for the storm depth (TR-55 ch. 2, in inches)."""
    t = pd.read_csv(command_run / "design_flows.csv")
    h = pd.read_csv(command_run / "hydrographs.csv")
    for oid, g in h.groupby("outlet_id"):
        row = t[(t["outlet_id"] == oid) & (t["method"] == "nrcs_unit_hydrograph")].iloc[0]
        dt_s = float(g["time_h"].iloc[1] - g["time_h"].iloc[0]) * 3600
        vol = float(g["direct_runoff_m3_per_s"].sum()) * dt_s
        assert vol == pytest.approx(row["runoff_depth_mm"] * 1e-3 * row["area_m2"], rel=1e-3)
        p_in = row["rainfall_depth_mm"] / IN
        s = 1000 / 78 - 10
        q_in = (p_in - 0.2 * s) ** 2 / (p_in + 0.8 * s)
        assert row["runoff_depth_in"] == pytest.approx(q_in, rel=1e-9)
        # base flow under the whole hydrograph, and the peak includes it
        assert np.allclose(g["discharge_m3_per_s"] - g["direct_runoff_m3_per_s"], 0.2)
        assert row["peak_discharge_m3_per_s"] == pytest.approx(g["discharge_m3_per_s"].max())


def test_nested_outlets_have_their_own_catchments(basin, command_run, tmp_path):
    """Each outlet's area is its own catchment's, as basinkit delineate gives it with the
    same outlet options (one pipeline), and the nested one is smaller."""
    d, _ = basin
    assert run(["-q", "delineate", d / "flow", "--outlets", d / "outlets.csv", *OUTLETS,
                "-o", tmp_path / "c"])[0] == 0
    cat = pd.read_csv(tmp_path / "c" / "catchments.csv").set_index("outlet_id")
    t = pd.read_csv(command_run / "design_flows.csv")
    for oid, g in t.groupby("outlet_id"):
        assert np.allclose(g["area_m2"], cat.loc[oid, "area_m2"], rtol=1e-12)
    a = t.groupby("outlet_id")["area_m2"].first()
    assert a["upper"] < a["lower"]
    # the Rational method is flagged above about 80 ha (range stated on the row)
    rat = t[t["method"] == "rational"].set_index("outlet_id")
    for oid, r in rat.iterrows():
        assert "80 ha" in r["range_of_applicability"]
        if r["area_ha"] > 80:
            assert r["outside_range"] and "80 ha" in r["range_flags"]


def test_segments_layer_sums_to_the_velocity_tc(command_run):
    """TR-55 eq. 3-5: Tc is the sum of the segments' travel times; the outlets layer holds
    one point per outlet with the peaks of the table."""
    import pyogrio

    out = command_run
    layers = [n for n, _ in pyogrio.list_layers(out / "design_flows.gpkg")]
    assert layers == ["flow_path_segments", "outlets"]
    seg = pyogrio.read_dataframe(out / "design_flows.gpkg", layer="flow_path_segments")
    t = pd.read_csv(out / "design_flows.csv")
    for oid, g in seg.groupby("outlet_id"):
        tc = t[(t["outlet_id"] == oid) & (t["method"] == "tr55_velocity")]["tc_min"].iloc[0]
        assert g["travel_time_min"].sum() == pytest.approx(tc, rel=1e-9)
        assert set(g["flow_regime"]) <= {"sheet", "shallow_concentrated", "channel"}
        # segment lines lie end to end along the path: their lengths on the map add up
        assert g.geometry.length.sum() == pytest.approx(g["length_m"].sum(), rel=0.05)
    pts = pyogrio.read_dataframe(out / "design_flows.gpkg", layer="outlets")
    assert sorted(pts["outlet_id"]) == ["lower", "upper"]
    uh = t[t["method"] == "nrcs_unit_hydrograph"].set_index("outlet_id")
    for r in pts.itertuples():
        assert r.peak_nrcs_unit_hydrograph_m3_per_s == pytest.approx(
            uh.loc[r.outlet_id, "peak_discharge_m3_per_s"])


def test_width_depth_relation_in_channels(basin, tmp_path):
    """Channel segments with a bankfull width-depth relation instead of one hydraulic
    radius: r = w·d/(w + 2d) of a rectangular section with w = a·A^b, d = c·A^f
    (Leopold & Maddock 1953 form; closed form), and Manning's V = r^(2/3)·S^(1/2)/n (SI)."""
    import pyogrio

    d, _ = basin
    base = [v for v in BASE if v not in ("--hydraulic-radius", "0.5m")]
    out = tmp_path / "wd"
    code, _, _ = run(["-q", "design-flow", d / "flow", "--outlets", d / "outlets.csv",
                      *OUTLETS, "--idf-table", d / "idf.csv", "--return-period", "100",
                      *base, "--bankfull-width", "4.0,0.4", "--bankfull-depth", "0.35,0.25",
                      "-o", out])
    assert code == 0
    seg = pyogrio.read_dataframe(out / "design_flows.gpkg", layer="flow_path_segments")
    ch = seg[seg["flow_regime"] == "channel"]
    assert len(ch)
    a_km2 = ch["upstream_area_m2"].to_numpy() / 1e6
    w, dep = 4.0 * a_km2 ** 0.4, 0.35 * a_km2 ** 0.25
    np.testing.assert_allclose(ch["hydraulic_radius_m"], w * dep / (w + 2 * dep), rtol=1e-9)
    np.testing.assert_allclose(ch["velocity_m_per_s"],
                               ch["hydraulic_radius_m"] ** (2 / 3)
                               * ch["slope_m_per_m"] ** 0.5 / 0.045, rtol=1e-9)
    # both ways of giving the channel at once, or half a relation, are refused
    for extra in (["--hydraulic-radius", "0.5m", "--bankfull-width", "4,0.4",
                   "--bankfull-depth", "0.35,0.25"], ["--bankfull-width", "4,0.4"]):
        code, _, _ = run(["-q", "design-flow", d / "flow", "--outlets", d / "outlets.csv",
                          *OUTLETS, "--idf-table", d / "idf.csv", "--return-period", "100",
                          *base, *extra, "-o", tmp_path / "bad"])
        assert code == 2 and not (tmp_path / "bad").exists()


def test_json_records_inputs_ranges_and_cautions(command_run, basin):
    d, _ = basin
    j = json.loads((command_run / "design_flows.json").read_text())
    ins = j["design_flow_inputs"]
    assert ins["curve_number"] == 78 and ins["runoff_coefficient"] == 0.45
    assert ins["idf_table"] == "idf.csv" and ins["return_period_yr"] == 100
    assert ins["velocity_method"]["channel_threshold_m2"] == 5e4
    assert set(j["ranges_of_applicability"]) == {"kirpich", "nrcs_lag", "tr55_velocity",
                                                 "rational", "nrcs_unit_hydrograph"}
    assert "planning-level" in j["cautions"] and "licensed professional" in j["cautions"]
    assert "drainage manual" in j["cautions"]
    import hashlib

    assert j["inputs"]["design_flow_idf_table"]["sha256"] == hashlib.sha256(
        (d / "idf.csv").read_bytes()).hexdigest()


def test_command_prints_peaks_and_cautions_once(basin, tmp_path, capsys):
    out, (code, _, err) = _design(basin, tmp_path, capsys=capsys)
    assert code == 0
    assert "lower:" in err and "m3/s" in err and "cfs" in err
    assert err.count("caution:") == 1
    assert "planning-level" in err and "licensed professional" in err


# ---------------------------------------------------------------------- bad input
def _refused(basin, tmp_path, capsys, *args, match, base=None, rain=None):
    d, _ = basin
    out = tmp_path / "refused"
    rain = ["--idf-table", d / "idf.csv", "--return-period", "100"] if rain is None else rain
    code, _, err = run(["-q", "design-flow", d / "flow", "--outlets", d / "outlets.csv",
                        *OUTLETS, *rain, *(BASE if base is None else base), *args,
                        "-o", out], capsys)
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert code == 2, err
    assert len(lines) == 1 and "Traceback" not in err, err
    assert match in lines[0], lines[0]
    assert not out.exists()  # nothing written
    return lines[0]


def _without(opt):
    i = BASE.index(opt)
    return BASE[:i] + BASE[i + 2:]


@pytest.mark.parametrize("value", ["25", "101"])
def test_curve_number_outside_range(basin, tmp_path, capsys, value):
    _refused(basin, tmp_path, capsys, "--curve-number", value, base=_without("--curve-number"),
             match="outside 30-100")


def test_runoff_coefficient_outside_range(basin, tmp_path, capsys):
    _refused(basin, tmp_path, capsys, "--runoff-coefficient", "1.3",
             base=_without("--runoff-coefficient"), match="outside 0-1")


def test_cn_raster_on_another_grid_or_out_of_range(basin, tmp_path, capsys):
    d, _ = basin
    _refused(basin, tmp_path, capsys, "--curve-number-file", d / "cn_shifted.tif",
             base=_without("--curve-number"), match="another grid")
    _refused(basin, tmp_path, capsys, "--curve-number-file", d / "cn_bad.tif",
             base=_without("--curve-number"), match="outside 30-100")


def test_idf_not_monotonic(basin, tmp_path, capsys):
    d, _ = basin
    text = (d / "idf.csv").read_text().splitlines()
    text[3] = text[3].rsplit(",", 1)[0] + ",999"  # 15-min 2-year intensity jumps up
    (tmp_path / "bad_idf.csv").write_text("\n".join(text) + "\n")
    _refused(basin, tmp_path, capsys, rain=["--idf-table", tmp_path / "bad_idf.csv",
                                            "--return-period", "100"],
             match="not monotonic")


def test_idf_lacking_the_needed_duration(basin, tmp_path, capsys):
    """A table from 60 min up cannot give the Rational intensity at Tc (minutes here)."""
    d, _ = basin
    lines = (d / "idf.csv").read_text().splitlines()
    keep = [lines[0]] + [ln for ln in lines[1:] if int(ln.split(",")[0]) >= 60]
    (tmp_path / "long_idf.csv").write_text("\n".join(keep) + "\n")
    _refused(basin, tmp_path, capsys, rain=["--idf-table", tmp_path / "long_idf.csv",
                                            "--return-period", "100"],
             match="lacks the needed duration")


def test_rainfall_without_units(basin, tmp_path, capsys):
    d, _ = basin
    _refused(basin, tmp_path, capsys, rain=["--rainfall-depth", "110"], match="no unit")
    (tmp_path / "idf_nounit.csv").write_text(
        (d / "idf.csv").read_text().replace("intensity_mm_per_h", "intensity"))
    _refused(basin, tmp_path, capsys, rain=["--idf-table", tmp_path / "idf_nounit.csv",
                                            "--return-period", "100"], match="no unit")
    (tmp_path / "h_nounit.csv").write_text("time,depth\n30,5\n60,10\n")
    _refused(basin, tmp_path, capsys, rain=["--hyetograph", tmp_path / "h_nounit.csv"],
             match="has no unit")


def test_missing_rainfall_or_curve_number(basin, tmp_path, capsys):
    _refused(basin, tmp_path, capsys, rain=[], match="design rainfall")
    _refused(basin, tmp_path, capsys, base=_without("--curve-number"), match="curve number")


def test_job_refuses_rainfall_without_units(basin, tmp_path, capsys):
    """[design_flow] rainfall_depth = 110 (a bare number): one line, exit 2, the output
    folder not created."""
    d, _ = basin
    job = tmp_path / "job.toml"
    job.write_text(textwrap.dedent(f"""
        [inputs]
        dem = "{d / 'dem.tif'}"
        outlets = "{d / 'outlets.csv'}"
        [design_flow]
        rainfall_depth = 110
        curve_number = 70
        [outputs]
        folder = "{tmp_path / 'jobout'}"
        """))
    code, _, err = run(["-q", "run", job], capsys)
    assert code == 2 and "rainfall_depth" in err and "no unit" in err
    assert len(err.strip().splitlines()) == 1
    assert not (tmp_path / "jobout").exists()


# ---------------------------------------------------------------------- job = command
def test_job_and_command_give_the_same_bytes(basin, tmp_path):
    """A job with [design_flow] (CN raster, own hyetograph, Kirpich Tc) and the command with
    the same settings write the same design-flow files byte for byte; the report of the
    job's folder shows each outlet's design flows from those files."""
    from basinkit.report import write_report
    from basinkit.workflow.runner import run_job

    d, _ = basin
    job = tmp_path / "job.toml"
    job.write_text(textwrap.dedent(f"""
        [inputs]
        dem = "{d / 'dem.tif'}"
        outlets = "{d / 'outlets.csv'}"
        [outlets]
        snap_radius_m = 0
        [profiles]
        enabled = false
        [morphometry]
        enabled = false
        [design_flow]
        hyetograph = "{d / 'hyeto.csv'}"
        return_period_yr = 50
        curve_number_file = "{d / 'cn.tif'}"
        cn_weighting = "runoff_per_cell"
        tc_method = "kirpich"
        base_flow_m3_per_s = 0.1
        [outputs]
        folder = "{tmp_path / 'jobout'}"
        """))
    res = run_job(job, report=write_report)
    assert res.exit_status == 0 and res.stages["design_flow"]["status"] == "done"
    code, _, _ = run(["-q", "design-flow", d / "flow", "--outlets", d / "outlets.csv",
                      *OUTLETS, "--hyetograph", d / "hyeto.csv", "--return-period", "50",
                      "--curve-number-file", d / "cn.tif", "--cn-weighting",
                      "runoff_per_cell", "--tc-method", "kirpich", "--base-flow", "0.1",
                      "-o", tmp_path / "cmd"])
    assert code == 0
    made = sorted(p.relative_to(tmp_path / "cmd").as_posix()
                  for p in (tmp_path / "cmd").rglob("*") if p.is_file()
                  and p.name != ".basinkit-manifest.json")  # each folder's own record
    assert len(made) == 6
    for name in made:
        a, b = (tmp_path / "cmd" / name), (res.folder / name)
        if name.endswith(".json"):
            ja, jb = json.loads(a.read_text()), json.loads(b.read_text())
            assert ja["cautions"] == jb["cautions"] and ja["files"] == jb["files"]
            assert ja["design_flow_inputs"] == jb["design_flow_inputs"]
            continue
        assert a.read_bytes() == b.read_bytes(), name
    # the job's provenance lists the design-flow input files with their hashes
    prov = json.loads((res.folder / "provenance.json").read_text())
    assert "design_flow_hyetograph" in prov["inputs"]
    # the report: a design-flow part per outlet, built from the files
    html = (res.folder / "report.html").read_text()
    t = pd.read_csv(res.folder / "design_flows.csv")
    assert html.count("Design flows (planning-level estimate)") == 2
    assert "design storm and hydrograph" in html
    for oid in ("lower", "upper"):
        q = t[(t["outlet_id"] == oid) & (t["method"] == "nrcs_unit_hydrograph")][
            "peak_discharge_m3_per_s"].iloc[0]
        assert f"{q:.3g}" in html
    assert "Time of concentration by method" in html and "Inputs used" in html
    assert "hyeto.csv" not in html or "user hyetograph" in html
    assert "Ranges of applicability" in html and "licensed professional" in html


def test_report_of_a_design_flow_folder(command_run, tmp_path):
    """The report of the command's folder alone (no catchments.csv): the outlets come from
    design_flows.csv, each with its design-flow part, the Rational flag where the
    catchment exceeds about 80 ha, and the design cautions first."""
    from basinkit.report import write_report

    p = write_report(command_run, tmp_path / "report.html")
    html = p.read_text()
    t = pd.read_csv(command_run / "design_flows.csv")
    assert html.count("Design flows (planning-level estimate)") == t["outlet_id"].nunique()
    assert "Peak discharge by method" in html and "Spread between the methods" in html
    assert "idf.csv" in html  # the inputs used
    big = t[(t["method"] == "rational") & (t["area_ha"] > 80)]
    if len(big):
        assert "This catchment is outside it" in html
    first_caution = html.split('<section class="cautions">', 1)[1].split("</li>", 1)[0]
    assert "planning-level" in first_caution
