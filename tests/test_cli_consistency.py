"""The subcommands agree with one another: one outlet given with the same options is one
cell in delineate, profile, morphometry and the job runner; every subcommand documents a
worked example; --quiet and --log-json are honoured; user errors are one line.

External checks: the snapped cell is recomputed here by brute force over the whole grid from
the definition of the two snapping modes (greatest D8 upstream area among the cells whose
centre lies within the radius; or the nearest cell whose upstream area reaches the channel
threshold) -- common practice (no source) -- independently of basinkit.analysis.outlets' windowed
search. JSON log lines are parsed with the standard library's json (RFC 8259).

The demo DEM (300 x 300 cells) is larger than the usual test grids, but agreement *on the
demo basin* is the point here; it is routed once per module.
"""

import json
import shlex
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from basinkit.cli.main import SUBCOMMANDS, cli

from conftest import run_cli

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_rasters"
CROSSING = (513544.15, 5204342.62)  # the proposed road crossing in demo_rasters/outlets.csv
OUTLET = f"crossing={CROSSING[0]},{CROSSING[1]}"
# the two snapping modes, with the demo job's settings for the channel mode
MODES = {
    "greatest_area": ["--snap-radius", "30m"],
    "nearest_channel": ["--snap-radius", "30m", "--snap-to-channel", "1ha"],
}


run = run_cli  # the real entry point, returning (code, out, err)


@pytest.fixture(scope="module")
def flow(tmp_path_factory):
    """The demo DEM routed with the culvert burned (as the demo job does, 1 m deep)."""
    from basinkit.io.flow_folder import load_flow

    base = tmp_path_factory.mktemp("consistency")
    code, _, _ = run(["-q", "route", DEMO / "upland_valley.tif", "--burn",
                      DEMO / "culverts.geojson", "--burn-depth", "1m", "-o", base / "flow"])
    assert code == 0
    return base, load_flow(base / "flow")


def brute_force_cell(fm, x, y, radius_m, channel_m2=None):
    """The snapped cell from the definitions, over every cell of the grid (projected grid in
    metres: planar distances to cell centres)."""
    nr, nc = fm.shape
    rows, cols = np.divmod(np.arange(nr * nc), nc)
    xc, yc = fm.terrain.xy_of(rows, cols)
    d = np.hypot(np.asarray(xc) - x, np.asarray(yc) - y)
    area = np.asarray(fm.d8_upstream_area_flat(), dtype=float)
    near = (d <= radius_m) & fm.terrain.valid.ravel()
    if channel_m2 is None:
        cand = np.flatnonzero(near & (area == area[near].max()))
    else:
        cand = np.flatnonzero(near & (area >= channel_m2))
    assert cand.size
    best = cand[np.argmin(d[cand])]  # nearest; ties: lowest index (argmin takes the first)
    return divmod(int(best), nc)


@pytest.mark.parametrize("mode", sorted(MODES))
def test_same_outlet_same_cell_in_every_command(flow, mode, capsys):
    """delineate, profile and morphometry put the crossing on the same cell, and that cell
    is the one the definition of the snapping mode gives."""
    base, fm = flow
    opts = MODES[mode]
    out = base / mode
    channel = 1e4 if "--snap-to-channel" in opts else None
    expected = brute_force_cell(fm, *CROSSING, 30.0, channel)

    assert run(["-q", "delineate", base / "flow", "--outlet", OUTLET, *opts,
                "-o", out / "d"])[0] == 0
    tab = pd.read_csv(out / "d" / "catchments.csv")
    r, c = fm.terrain.rowcol_of(tab["x_snapped"].to_numpy(), tab["y_snapped"].to_numpy())
    cell_delineate = (int(r[0]), int(c[0]))

    assert run(["-q", "profile", base / "flow", "--outlet", OUTLET, *opts, "--min-area",
                "2ha", "--min-order", "1", "-o", out / "p"])[0] == 0
    summ = json.loads((out / "p" / "profiles.json").read_text())["outlets"][0]
    cell_profile = (summ["outlet_row"], summ["outlet_col"])

    assert run(["-q", "morphometry", base / "flow", "--outlet", OUTLET, *opts,
                "--min-area", "2ha", "--no-figures", "-o", out / "m"])[0] == 0
    m = pd.read_csv(out / "m" / "morphometry.csv").iloc[0]
    cell_morph = (int(m["outlet_row"]), int(m["outlet_col"]))

    assert cell_delineate == cell_profile == cell_morph == expected
    # and the catchment above it is the same one in delineate and morphometry
    assert tab["area_m2"][0] == pytest.approx(m["area_m2"], rel=1e-12)
    capsys.readouterr()


def test_the_two_modes_differ_on_the_crossing(flow):
    """The options matter (else the test above could not tell the modes apart): on the
    crossing the two modes pick different cells (value from this demo basin)."""
    _, fm = flow
    assert (brute_force_cell(fm, *CROSSING, 30.0) !=
            brute_force_cell(fm, *CROSSING, 30.0, 1e4))


def test_job_runner_places_outlets_like_the_commands(flow, tmp_path):
    """basinkit run with the same settings puts the crossing on the same cell, and its
    profile stage starts from that cell."""
    from basinkit.workflow.jobfile import job_from_dict
    from basinkit.workflow.runner import run_job

    _, fm = flow
    pts = tmp_path / "outlets.csv"
    pd.DataFrame({"id": ["crossing"], "x": [CROSSING[0]], "y": [CROSSING[1]]}).to_csv(
        pts, index=False)
    for channel, section in ((None, {"snap_radius_m": 30}),
                             (1e4, {"snap_radius_m": 30, "snap_min_area": "1ha"})):
        job = job_from_dict({
            "inputs": {"dem": str(DEMO / "upland_valley.tif"), "outlets": str(pts),
                       "burn_lines": [str(DEMO / "culverts.geojson")]},
            "conditioning": {"burn_depth_m": 1.0}, "outlets": section,
            "channels": {"min_area": "2ha"}, "morphometry": {"enabled": False},
            "outputs": {"report": False, "rasters": False}}, base=tmp_path)
        res = run_job(job, output=tmp_path / f"run_{channel}", overwrite=True)
        row = res.outlets.set_index("outlet_id").loc["crossing"]
        expected = brute_force_cell(fm, *CROSSING, 30.0, channel)
        assert (int(row["row"]), int(row["col"])) == expected
        lfp = res.profiles["crossing"]["longest_flow_path"]
        start = int(lfp.cells[int(np.argmin(lfp.distance_m))])
        assert divmod(start, fm.ncols) == expected


def _help_text(name):
    """The --help text on one line, shell line continuations removed."""
    return " ".join(_help(name).split()).replace(" \\ ", " ")


def _help(name):
    from click.testing import CliRunner

    r = CliRunner().invoke(cli, [name, "--help"], terminal_width=100)
    assert r.exit_code == 0, r.output
    return r.output


@pytest.mark.parametrize("name", sorted(SUBCOMMANDS))
def test_every_subcommand_help_has_a_worked_example(name):
    """Each --help shows an 'Example:' running that subcommand on the demo files (or on the
    demo job / its output folder)."""
    text = _help_text(name)
    assert "Example: basinkit " + name in text
    example = text.split("Example: ", 1)[1]
    assert any(k in example.split(" Options:")[0] for k in
               ("demo_rasters/", "basinkit demo", "basinkit-demo-output", "crossing="))


def _example_argv(name):
    text = _help_text(name)
    cmd = text.split("Example: ", 1)[1].split(" Options:")[0].strip()
    argv = shlex.split(cmd)[1:]
    return [str(DEMO / a[len("demo_rasters/"):]) if a.startswith("demo_rasters/") else a
            for a in argv]


def test_examples_run_as_written(tmp_path, monkeypatch, capsys):
    """The worked examples of the step commands run on the demo files, in order (route
    writes the flow/ folder the others read)."""
    monkeypatch.chdir(tmp_path)
    for name in ("condition", "route", "delineate", "channels", "profile", "morphometry"):
        code, _, err = run(["-q", *_example_argv(name)], capsys)
        assert code == 0, (name, err)
        assert err == "", (name, err)


@pytest.fixture(scope="module")
def commands(flow):
    """Every step subcommand with working arguments on the demo flow folder."""
    base, _ = flow
    f = base / "flow"
    return {
        "condition": ["condition", DEMO / "upland_valley.tif", "--burn",
                      DEMO / "culverts.geojson", "-o", "{out}/filled.tif"],
        "delineate": ["delineate", f, "--outlets", DEMO / "outlets.csv", "-o", "{out}"],
        "channels": ["channels", f, "--min-area", "2ha", "--outlet", OUTLET, "-o", "{out}"],
        "profile": ["profile", f, "--outlet", OUTLET, "--min-area", "2ha", "--min-order",
                    "1", "-o", "{out}"],
        "morphometry": ["morphometry", f, "--outlet", OUTLET, "--min-area", "2ha",
                        "--no-figures", "-o", "{out}"],
    }


def _argv(cmd, out):
    return [str(a).replace("{out}", str(out)) for a in cmd]


@pytest.mark.parametrize("name", ["condition", "delineate", "channels", "profile",
                                  "morphometry"])
def test_quiet_prints_nothing_on_success(commands, name, tmp_path, capsys):
    """--quiet: no messages, no progress bars, nothing on stdout."""
    (tmp_path / "o").mkdir()
    code, out, err = run(["--quiet", *_argv(commands[name], tmp_path / "o")], capsys)
    assert code == 0
    assert out == "" and err == ""
    # without --quiet the same command does talk (so the check above can fail)
    code, out, err = run([*_argv(commands[name], tmp_path / "o"), "--overwrite"], capsys)
    assert code == 0 and err.strip()


@pytest.mark.parametrize("name", ["condition", "delineate", "channels", "profile",
                                  "morphometry"])
def test_log_json_lines_parse(commands, name, tmp_path, capsys):
    """--log-json: every line on stderr is one JSON object with a level and a message."""
    (tmp_path / "o").mkdir()
    code, out, err = run(["--log-json", *_argv(commands[name], tmp_path / "o")], capsys)
    assert code == 0 and out == ""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert lines
    for ln in lines:
        rec = json.loads(ln)
        assert rec["level"] in ("info", "warning", "error") and rec["message"]


@pytest.mark.parametrize("argv, fragment", [
    (["delineate", "{flow}", "--outlet", "1,2", "--snap-radius", "ten", "-o", "{out}"],
     "--snap-radius"),
    (["profile", "{flow}", "--outlet", "1,2", "--snap-to-channel", "lots", "-o", "{out}"],
     "--snap-to-channel"),
    (["morphometry", "{flow}", "-o", "{out}"], "no outlets given"),
    (["channels", "{flow}", "--min-area", "2ha", "--outlet", "1,2", "-o", "{out}"],
     "none of the 1 outlets"),
])
def test_user_errors_are_one_line(flow, tmp_path, capsys, argv, fragment):
    """A user error prints one 'error:' line without traceback, exits with status 2 and
    writes nothing; --debug (before or after the subcommand) shows the traceback too and
    keeps the status (DESIGN.md, the output contract)."""
    base, _ = flow
    args = [a.replace("{flow}", str(base / "flow")).replace("{out}", str(tmp_path / "o"))
            for a in argv]
    code, out, err = run(args, capsys)
    assert code == 2
    lines = [ln for ln in err.splitlines() if ln.strip()]
    errors = [ln for ln in lines if ln.startswith("error")]
    assert len(errors) == 1 and errors[0].startswith("error: ") and fragment in errors[0]
    assert "Traceback" not in err
    assert not (tmp_path / "o").exists()
    for debug_args in (["--debug", *args[:-1], str(tmp_path / "o2")],
                       [*args[:-1], str(tmp_path / "o3"), "--debug"]):
        code, _, err = run(debug_args, capsys)
        assert code == 2 and "Traceback" in err and fragment in err


def test_snap_distance_is_gone_from_morphometry(flow, tmp_path, capsys):
    """One spelling of the snap radius: morphometry takes --snap-radius like the others
    (common practice, no source: one option name per meaning)."""
    base, _ = flow
    code, _, err = run(["morphometry", base / "flow", "--outlet", OUTLET, "--snap-distance",
                        "30m", "-o", tmp_path / "m"], capsys)
    assert code == 2 and "--snap-distance" in err
    for name in ("delineate", "profile", "morphometry", "channels"):
        text = _help(name)
        for opt in ("--outlet ", "--outlets", "--outlet-crs", "--id-column", "--snap-radius",
                    "--snap-to-channel"):
            assert opt in text, (name, opt)


def test_user_error_is_a_json_line_with_log_json(tmp_path):
    """With --log-json a user error is one JSON log line of level error (scripts parse
    stderr; common practice, no source), every other line is JSON too, and the exit status
    is 2."""
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", "basinkit.cli", "--log-json", "route",
                          str(tmp_path / "missing.tif"), "-o", str(tmp_path / "flow")],
                         capture_output=True, text=True)
    assert out.returncode == 2
    recs = [json.loads(ln) for ln in out.stderr.splitlines() if ln.strip()]
    errors = [r for r in recs if r["level"] == "error"]
    assert len(errors) == 1 and "does not exist" in errors[0]["message"]
    assert "Traceback" not in out.stderr
    assert not (tmp_path / "flow").exists()


# ------------------------------------------------------------------ the output contract
FAR = "far=1,2"  # off the demo grid: this outlet fails, the crossing goes on


@pytest.fixture(scope="module")
def mixed(flow):
    """Each outlet-taking command with one good outlet and one off the grid."""
    base, _ = flow
    f = base / "flow"
    pair = ["--outlet", OUTLET, "--outlet", FAR, "--snap-radius", "30m"]
    return {
        "delineate": ["delineate", f, *pair, "-o", "{out}"],
        "channels": ["channels", f, "--min-area", "2ha", *pair, "-o", "{out}"],
        "profile": ["profile", f, *pair, "--min-area", "2ha", "--min-order", "1",
                    "--no-figures", "-o", "{out}"],
        "morphometry": ["morphometry", f, *pair, "--min-area", "2ha", "--no-figures",
                        "-o", "{out}"],
    }


@pytest.mark.parametrize("name", ["delineate", "channels", "profile", "morphometry"])
def test_exit_status_one_when_an_outlet_fails(mixed, name, tmp_path, capsys):
    """DESIGN.md, the output contract: status 1 when some outlets failed, the failure
    listed (with its reason), the good outlet written, the cautions printed once; 0 with
    the good outlet alone."""
    code, out, err = run(_argv(mixed[name], tmp_path / "o"), capsys)
    assert code == 1, err
    assert "failed: outlet 'far'" in err and "outside the grid" in err
    assert "Traceback" not in err and out == ""
    assert err.count("caution: ") == 1
    assert any((tmp_path / "o").iterdir())
    ok = [a for a in mixed[name] if a != FAR]
    ok = ok[:ok.index("--outlet") + 2] + ok[ok.index("--outlet") + 3:]
    code, _, err = run(_argv(ok, tmp_path / "ok"), capsys)
    assert code == 0, err
    assert err.count("caution: ") == 1


@pytest.mark.parametrize("name", ["condition", "route"])
def test_cautions_once_for_the_dem_commands(name, tmp_path, capsys):
    """route and condition print the cautions once too (and not with --quiet)."""
    argv = {"condition": ["condition", DEMO / "upland_valley.tif", "-o", "{out}/f.tif"],
            "route": ["route", DEMO / "upland_valley.tif", "-o", "{out}/flow"]}[name]
    code, _, err = run(_argv(argv, tmp_path), capsys)
    assert code == 0 and err.count("caution: ") == 1
    code, _, err = run(_argv(argv, tmp_path / "q") + ["--quiet"], capsys)
    assert code == 0 and err == ""


def test_run_exit_status_and_cautions(tmp_path, capsys):
    """basinkit run: status 1 when an outlet of the job failed, 0 when none did; the
    cautions once; a bad job file is status 2 and writes nothing."""
    pts = tmp_path / "pts.csv"
    pts.write_text(f"id,x,y\ncrossing,{CROSSING[0]},{CROSSING[1]}\nfar,1,2\n")
    body = (f'[inputs]\ndem = "{DEMO / "upland_valley.tif"}"\noutlets = "pts.csv"\n'
            '[outlets]\nsnap_radius_m = 30\nsnap_min_area = "1ha"\n[channels]\n'
            'min_area = "2ha"\n[profiles]\nenabled = false\n[outputs]\nreport = false\n'
            'figures = false\n')
    (tmp_path / "job.toml").write_text(body)
    code, _, err = run(["run", tmp_path / "job.toml", "-o", tmp_path / "r1"], capsys)
    assert code == 1, err
    assert "failed: outlet 'far' (pts.csv line 3)" in err and err.count("caution: ") == 1
    pts.write_text(f"id,x,y\ncrossing,{CROSSING[0]},{CROSSING[1]}\n")
    code, _, err = run(["run", tmp_path / "job.toml", "-o", tmp_path / "r2"], capsys)
    assert code == 0, err
    (tmp_path / "bad.toml").write_text(body.replace("min_area", "min_aera"))
    code, _, err = run(["run", tmp_path / "bad.toml", "-o", tmp_path / "r3"], capsys)
    assert code == 2 and "min_aera" in err and not (tmp_path / "r3").exists()


def test_internal_error_is_status_three(flow, tmp_path, capsys, monkeypatch):
    """A bug (here: a step that raises RuntimeError) is status 3 with one line asking for a
    report; the traceback only with --debug (DESIGN.md, the output contract)."""
    import basinkit.workflow.steps as steps

    def broken(*a, **k):
        raise RuntimeError("boom")

    monkeypatch.setattr(steps, "catchments_step", broken)
    base, _ = flow
    argv = ["delineate", base / "flow", "--outlet", OUTLET, "-o", tmp_path / "o"]
    code, _, err = run(argv, capsys)
    assert code == 3
    errors = [ln for ln in err.splitlines() if ln.startswith("error")]
    assert len(errors) == 1 and "internal error" in errors[0] and "report" in errors[0]
    assert "boom" in errors[0] and "Traceback" not in err
    code, _, err = run([*argv[:-1], tmp_path / "o2", "--debug"], capsys)
    assert code == 3 and "Traceback" in err and "RuntimeError: boom" in err


def test_global_options_after_the_subcommand(commands, tmp_path, capsys):
    """--quiet, -q, --log-json and --debug are accepted after the subcommand too."""
    code, out, err = run([*_argv(commands["delineate"], tmp_path / "a"), "--quiet"], capsys)
    assert code == 0 and out == "" and err == ""
    code, out, err = run([*_argv(commands["delineate"], tmp_path / "b"), "-q"], capsys)
    assert code == 0 and err == ""
    code, out, err = run([*_argv(commands["delineate"], tmp_path / "c"), "--log-json",
                          "--debug"], capsys)
    assert code == 0
    assert all(json.loads(ln)["level"] for ln in err.splitlines() if ln.strip())


def test_progress_lines_in_a_log(tmp_path, capsys, monkeypatch, flow):
    """stderr is not a terminal under pytest: no bar, but a line when each stage starts
    and ends and progress lines 'stage: done/total' (every item here, the interval set to
    0 s through BASINKIT_PROGRESS_SECONDS)."""
    import re

    base, _ = flow
    monkeypatch.setenv("BASINKIT_PROGRESS_SECONDS", "0")
    code, _, err = run(["morphometry", base / "flow", "--outlets", DEMO / "outlets.csv",
                        "--snap-radius", "30m", "--no-figures", "-o", tmp_path / "m"],
                       capsys)
    assert code == 0, err
    lines = err.splitlines()
    for stage in ("read", "outlets", "morphometry"):
        assert f"{stage} ..." in lines
        assert any(re.fullmatch(rf"{stage} done \(\d+\.\d s\)", ln) for ln in lines)
    done = [int(m.group(1)) for ln in lines
            if (m := re.fullmatch(r"  morphometry: (\d+)/13", ln))]
    assert done[:13] == list(range(1, 14))
    assert "\r" not in err  # no bar drawn into the log


def test_progress_and_failures_as_json_records(tmp_path, capsys, monkeypatch, flow):
    """--log-json: progress records carry stage, done and total; a failed outlet is a
    record with its outlet_id, source and reason (JSON per RFC 8259, parsed with json)."""
    base, _ = flow
    monkeypatch.setenv("BASINKIT_PROGRESS_SECONDS", "0")
    code, _, err = run(["--log-json", "profile", base / "flow", "--outlets",
                        DEMO / "outlets.csv", "--outlet", FAR, "--snap-radius", "30m",
                        "--min-area", "2ha", "--min-order", "1", "--no-figures",
                        "-o", tmp_path / "p"], capsys)
    assert code == 1
    recs = [json.loads(ln) for ln in err.splitlines() if ln.strip()]
    prog = [r for r in recs if r.get("event") == "progress" and r["stage"] == "profiles"]
    assert [r["done"] for r in prog][-1] == 13 and {r["total"] for r in prog} == {13}
    fails = [r for r in recs if r.get("event") == "outlet_failed"]
    assert len(fails) == 1
    assert fails[0]["outlet_id"] == "far" and "outside the grid" in fails[0]["reason"]
    assert fails[0]["stage"] == "outlets" and fails[0]["source"] == f"--outlet {FAR}"
    stages = [r["stage"] for r in recs if r.get("event") == "stage_done"]
    assert stages == ["read", "outlets", "channels", "profiles"]


def test_progress_interval_in_a_log():
    """About one line per interval in a log, whatever the number of items (the clock is
    simulated: 4 s per item, interval 10 s gives a line every third item; common practice,
    no source)."""
    import io
    from contextlib import redirect_stderr

    import basinkit.cli.console as con

    clock = iter(range(0, 1000, 4))
    con_time = con.time

    class FakeTime:
        def monotonic(self):
            return float(next(clock))

        def __getattr__(self, name):
            return getattr(con_time, name)

    buf = io.StringIO()
    c = con.Console(interval=10.0, isatty=False)
    try:
        con.time = FakeTime()
        with redirect_stderr(buf):
            assert list(c.progress(range(9), desc="work")) == list(range(9))
    finally:
        con.time = con_time
    lines = buf.getvalue().splitlines()
    assert lines == ["  work: 3/9", "  work: 6/9", "  work: 9/9"]
    buf = io.StringIO()
    with redirect_stderr(buf):  # a short stage in a log: no progress line at all
        assert list(con.Console(interval=10.0, isatty=False).progress(range(9))) == \
            list(range(9))
    assert buf.getvalue() == ""
