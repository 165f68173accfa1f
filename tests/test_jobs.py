"""Job files: validation of bad job files (each message names the key), defaults, path
resolution, units, and a small job run end to end on a synthetic V-shaped valley.

Sources: TOML 1.0 (toml.io) for the file syntax, read with the standard library's tomllib;
SI definitions of the hectare (10^4 m²) and the square kilometre (10^6 m²); the catchment
of the V valley in closed form (D8 on the surface z = a + b·(rows to the bottom) +
c·|column − centre| with c > b: see test_small_job_runs_and_carries_on_past_a_bad_outlet);
the rest is common practice (no source) for command-line tools: one clear message, the
exit status of DESIGN.md, no traceback.
"""

import textwrap

import numpy as np
import pytest

from basinkit.errors import BasinkitError, InputError
from basinkit.errors import JobFileError
from basinkit.workflow.jobfile import job_from_dict, read_job
from basinkit.workflow.runner import run_job


@pytest.fixture(scope="module")
def valley(tmp_path_factory):
    """A small V-shaped valley draining south (60 × 40 cells of 10 m) written as a GeoTIFF,
    an outlets CSV (one good point, one off the grid) and a culvert line."""
    from affine import Affine

    from basinkit.io.writers import write_geotiff

    d = tmp_path_factory.mktemp("valley")
    nr, nc = 60, 40
    rows = np.arange(nr)[:, None]
    cols = np.arange(nc)[None, :]
    z = 100.0 + 0.5 * (nr - 1 - rows) + 0.8 * np.abs(cols - nc // 2)
    t = Affine(10.0, 0, 500000.0, 0, -10.0, 5000600.0)
    write_geotiff(d / "dem.tif", z.astype(np.float32), t, "EPSG:32633", nodata=float("nan"))
    x_out, y_out = 500000.0 + 20.5 * 10, 5000600.0 - 55.5 * 10
    (d / "outlets.csv").write_text(
        "id,x,y,description\n"
        f"gauge,{x_out},{y_out},the valley outlet\n"
        "far_away,900000,100,off the grid\n")
    return d


# the valley with its outlets, snapped within 20 m, channels from 0.5 ha, no report
VALLEY_OUTLET_JOB = textwrap.dedent("""
    [inputs]
    dem = "dem.tif"
    outlets = "outlets.csv"
    [outlets]
    snap_radius_m = 20
    snap_min_area = "0.1ha"
    [channels]
    min_area = "0.5ha"
    [outputs]
    report = false
    """)


def _write(path, text):
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def test_unknown_key_is_named_with_a_suggestion(valley):
    job = _write(valley / "j1.toml", """
        [inputs]
        dem = "dem.tif"
        [channels]
        min_aera = "2ha"
        """)
    with pytest.raises(JobFileError) as e:
        read_job(job)
    msg = str(e.value)
    assert "min_aera" in msg and "[channels]" in msg and "did you mean 'min_area'" in msg


def test_unknown_section_is_named(valley):
    job = _write(valley / "j2.toml", """
        [inputs]
        dem = "dem.tif"
        [chanels]
        min_area = 1
        """)
    with pytest.raises(JobFileError, match=r"unknown section \[chanels\].*'channels'"):
        read_job(job)


@pytest.mark.parametrize("section,key,value,expect", [
    ("outlets", "snap_radius_m", '"forty"', "must be a number"),
    ("channels", "min_order", "1.5", "must be a whole number"),
    ("channels", "min_order", "true", "must be a whole number"),
    ("outputs", "report", '"yes"', "must be true or false"),
    ("conditioning", "method", '"flood"', "must be one of fill, breach, none"),
    ("channels", "min_area", '"2 acres"', "cannot read"),
    ("inputs", "burn_lines", "[1, 2]", "must be a list of file paths"),
])
def test_wrong_types_name_the_key(valley, section, key, value, expect):
    body = '[inputs]\ndem = "dem.tif"\n' if section != "inputs" else ""
    if section == "inputs":
        body = f'[inputs]\ndem = "dem.tif"\n{key} = {value}\n'
    else:
        body += f"[{section}]\n{key} = {value}\n"
    job = _write(valley / "jt.toml", body)
    with pytest.raises(JobFileError) as e:
        read_job(job)
    assert key in str(e.value) and expect in str(e.value)


def test_missing_required_and_missing_files(valley):
    with pytest.raises(JobFileError, match=r"\[inputs\] dem is required"):
        read_job(_write(valley / "j3.toml", "[outputs]\nreport = false\n"))
    with pytest.raises(JobFileError, match=r"\[inputs\] dem: the file .*nope.tif.* does not "
                                           r"exist"):
        read_job(_write(valley / "j4.toml", '[inputs]\ndem = "nope.tif"\n'))
    with pytest.raises(JobFileError, match=r"\[inputs\] burn_lines: the file"):
        read_job(_write(valley / "j5.toml",
                        '[inputs]\ndem = "dem.tif"\nburn_lines = ["gone.geojson"]\n'))
    with pytest.raises(JobFileError, match="does not exist"):
        read_job(valley / "no_such_job.toml")


def test_bad_toml_syntax_and_ranges(valley):
    with pytest.raises(JobFileError, match="cannot read the job file"):
        read_job(_write(valley / "j6.toml", '[inputs\ndem = "dem.tif"\n'))
    with pytest.raises(JobFileError, match=r"\[outlets\] snap_radius_m must be zero or "
                                           "positive"):
        job_from_dict({"inputs": {"dem": "dem.tif"}, "outlets": {"snap_radius_m": -5}},
                      base=valley)
    with pytest.raises(JobFileError, match=r"\[profiles\] concavity must lie between"):
        job_from_dict({"inputs": {"dem": "dem.tif"}, "profiles": {"concavity": 3}},
                      base=valley)
    # every job-file error is a user error (InputError) and so prints without a traceback
    assert issubclass(JobFileError, InputError) and issubclass(JobFileError, BasinkitError)


def test_defaults_units_and_relative_paths(valley, tmp_path, monkeypatch):
    """Paths resolve against the job file's folder, not the working directory; areas
    accept m2, ha and km2 (SI: 1 ha = 1e4 m², 1 km² = 1e6 m²)."""
    job = _write(valley / "j7.toml", """
        [inputs]
        dem = "dem.tif"
        [channels]
        min_area = "2ha"
        [profiles]
        reference_area = "0.5km2"
        [outlets]
        snap_min_area = 300
        """)
    monkeypatch.chdir(tmp_path)  # somewhere else entirely
    j = read_job(job)
    assert j["inputs"]["dem"] == valley / "dem.tif"
    assert j["channels"]["min_area"] == pytest.approx(2e4)
    assert j["profiles"]["reference_area"] == pytest.approx(5e5)
    assert j["outlets"]["snap_min_area"] == pytest.approx(300.0)  # bare number: m²
    # defaults filled in
    assert j["conditioning"]["method"] == "fill"
    assert j["routing"]["method"] == "d8"
    assert j["outputs"]["folder"] == valley / "basinkit-output"


def v_valley_catchment_cells(nr, nc, row, col):
    """Cells draining to (row, col) on the centre column of the valley's surface, in
    closed form. z = 100 + 0.5·(nr − 1 − r) + 0.8·|c − nc/2| on 10 m cells: the drop to
    the south is 0.5 m over 10 m (0.05), towards the centre 0.8 m over 10 m (0.08), along
    the diagonal towards the centre 1.3 m over 14.14 m (0.092), the steepest; so D8
    (O'Callaghan & Mark 1984) moves an off-centre cell one row down and one column towards
    the centre per step, reaching the centre column at row r + |c − centre|, and the centre
    column flows south. A cell drains through (row, centre) when it lies at or above that
    row and r + |c − centre| ≤ row."""
    r = np.arange(nr)[:, None]
    c = np.arange(nc)[None, :]
    assert col == nc // 2
    return (r <= row) & (r + np.abs(c - col) <= row)


def test_small_job_runs_and_carries_on_past_a_bad_outlet(valley, tmp_path):
    """A job on the synthetic valley: the good outlet is delineated, the one off the grid
    is recorded with its reason and its line, the run carries on (batch rule) and its exit
    status is 1. The outlet's catchment is exactly the closed-form set of cells of the V
    valley (1 840 cells of 100 m², see v_valley_catchment_cells)."""
    import pandas as pd

    job = _write(valley / "j8.toml",
                 '[job]\nname = "synthetic valley"\n' + VALLEY_OUTLET_JOB)
    res = run_job(job, output=tmp_path / "out")
    assert res.stages["catchments"]["status"] == "done"
    assert res.exit_status == 1
    bad = res.outlets[res.outlets["outlet_id"] == "far_away"]
    assert len(bad) == 1 and "outside the grid" in bad["error"].iloc[0]
    assert bad["source"].iloc[0] == "outlets.csv line 3"
    good = res.outlets[res.outlets["outlet_id"] == "gauge"].iloc[0]
    assert (good["row"], good["col"]) == (55, 20)
    expected = v_valley_catchment_cells(60, 40, 55, 20)
    assert expected.sum() == 1840
    assert np.array_equal(res.catchments.catchment_mask("gauge"), expected)
    assert good["area_m2"] == pytest.approx(expected.sum() * 100.0, rel=1e-12)
    # the job let go of the polygons before its profiles; asked for, they come back from
    # catchments.gpkg, with the closed-form area of the 1 840 cells
    assert res.catchments.polygons is None
    assert res.catchments.catchment_polygon("gauge").area == pytest.approx(184000.0,
                                                                           rel=1e-12)
    assert len(res.catchments.polygons) == len(res.catchments.table)  # read once, held
    frame = res.catchments.subcatchments_frame()
    assert frame.geometry.area.sum() == pytest.approx(184000.0, rel=1e-12)
    errors = pd.read_csv(tmp_path / "out" / "outlet_errors.csv")
    assert errors["outlet_id"].tolist() == ["far_away"]
    assert (tmp_path / "out" / "provenance.json").exists()
    assert "report" not in res.stages  # [outputs] report = false
    assert not (tmp_path / "out" / "report.html").exists()


def test_job_without_outlets_skips_outlet_stages(valley, tmp_path):
    job = _write(valley / "j9.toml", """
        [inputs]
        dem = "dem.tif"
        [outputs]
        report = false
        """)
    res = run_job(job, output=tmp_path / "o")
    assert res.stages["flow"]["status"] == "done"
    assert res.stages["channels"]["status"] == "done"
    assert res.exit_status == 0
    for stage in ("catchments", "profiles", "morphometry"):
        assert res.stages[stage]["status"] == "skipped"
        assert res.stages[stage]["note"]


def test_cli_prints_one_message_and_exits_nonzero(valley, capsys):
    from basinkit.cli.main import main

    job = _write(valley / "j10.toml", '[inputs]\ndem = "dem.tif"\n[routing]\nmethod = 8\n')
    with pytest.raises(SystemExit) as e:
        main(["run", str(job)])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert "[routing] method must be one of d8, dinf, mfd" in err
    assert "Traceback" not in err


def test_cli_check_prints_the_job_with_defaults(valley, capsys):
    import json

    from basinkit.cli.main import main

    job = _write(valley / "j11.toml", '[inputs]\ndem = "dem.tif"\n')
    with pytest.raises(SystemExit) as e:
        main(["run", str(job), "--check"])
    assert e.value.code == 0
    out = json.loads(capsys.readouterr().out)
    assert out["inputs"]["dem"].endswith("dem.tif")
    assert out["channels"]["min_area"] == 1e4


def test_report_command_rewrites_the_report_of_a_run(valley, tmp_path, capsys):
    """``basinkit report RUN`` writes report.html from the files of the run (nothing is
    computed again: the run's record is untouched) with a full section for the chosen
    outlet; a path that is not a folder is refused with one message and exit status 2
    (DESIGN.md, the output contract)."""
    import json
    import shutil

    from basinkit.cli.main import main

    d = tmp_path / "inputs"
    shutil.copytree(valley, d)
    job = _write(d / "jr.toml", VALLEY_OUTLET_JOB)
    run = tmp_path / "run"
    run_job(job, output=run)
    assert not (run / "report.html").exists()
    before = (run / "provenance.json").read_bytes()
    with pytest.raises(SystemExit) as e:
        main(["-q", "report", str(run), "--outlet", "gauge"])
    assert e.value.code == 0
    text = (run / "report.html").read_text(encoding="utf-8")
    assert 'id="outlet-gauge"' in text
    assert (run / "provenance.json").read_bytes() == before
    prov = json.loads(before)
    assert prov["parameters"]["outputs"]["report"] is False
    with pytest.raises(SystemExit) as e:
        main(["report", str(tmp_path / "no-such-run"), "-o", str(tmp_path / "again.html")])
    assert e.value.code == 2
    assert "is not a folder" in capsys.readouterr().err


def test_rerun_with_overwrite_removes_only_its_own_stale_files(valley, tmp_path):
    """Rerunning a job into the same folder with fewer outputs removes the files the first
    run listed in its provenance.json and this run did not write again; a file the user
    put there is kept (common practice for tools that own an output folder, no source)."""
    import json

    first = _write(valley / "j10.toml", VALLEY_OUTLET_JOB)
    out = tmp_path / "out"
    run_job(first, output=out)
    listed = set(json.loads((out / "provenance.json").read_text())["files"])
    per_outlet = {f for f in listed if "gauge" in f}
    assert per_outlet and "outlet_errors.csv" in listed
    (out / "my_notes.txt").write_text("field visit 3 May")
    second = _write(valley / "j11.toml", """
        [inputs]
        dem = "dem.tif"
        [outputs]
        report = false
        """)
    res = run_job(second, output=out, overwrite=True)
    now = set(json.loads((out / "provenance.json").read_text())["files"])
    for f in listed - now:
        assert not (out / f).exists(), f
    for f in now:
        assert (out / f).exists(), f
    assert (out / "my_notes.txt").read_text() == "field visit 3 May"
    assert not any("gauge" in p.name for p in out.rglob("*"))
    assert res.stages["catchments"]["status"] == "skipped"
