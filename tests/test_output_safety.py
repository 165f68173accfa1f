"""The output contract (DESIGN.md): an output folder changes as a transaction, a lock keeps
two runs out of one folder, ``--overwrite`` removes only the files the earlier run recorded
and that are unchanged, and errors of the operating system are one line with exit status 2.

Sources: POSIX rename(2) (atomic replacement of a name within one file system) and
open(2) with O_CREAT|O_EXCL for the lock, as the standard library exposes them; SHA-256 by
the standard library's hashlib (FIPS 180-4); errno names from the standard library's errno
module. The rest is common practice (no source) for tools that own an output folder: a
killed run leaves the old results or the new ones, never a mixture; nothing of the user's
is deleted; one clear line instead of a traceback.
"""

import errno
import hashlib
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from basinkit.io.lock import OutputLock, lock_path
from basinkit.io.transaction import MANIFEST, FolderTransaction, recover

REPO = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(REPO)}


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    """A small V-shaped valley (60 × 40 cells of 10 m) with one outlet, and a job file
    running every stage (report included) on it."""
    from affine import Affine

    from basinkit.io.writers import write_geotiff

    d = tmp_path_factory.mktemp("tiny")
    nr, nc = 60, 40
    rows = np.arange(nr)[:, None]
    cols = np.arange(nc)[None, :]
    z = 100.0 + 0.5 * (nr - 1 - rows) + 0.8 * np.abs(cols - nc // 2)
    t = Affine(10.0, 0, 500000.0, 0, -10.0, 5000600.0)
    write_geotiff(d / "dem.tif", z.astype(np.float32), t, "EPSG:32633", nodata=float("nan"))
    x, y = 500000.0 + 20.5 * 10, 5000600.0 - 55.5 * 10
    (d / "outlets.csv").write_text(f"id,x,y\ngauge,{x},{y}\nfar_away,900000,100\n")
    (d / "job.toml").write_text(textwrap.dedent("""
        [job]
        name = "tiny valley"
        [inputs]
        dem = "dem.tif"
        outlets = "outlets.csv"
        [outlets]
        snap_radius_m = 20
        snap_min_area = "0.1ha"
        [channels]
        min_area = "0.5ha"
        [outputs]
        report = true
        """), encoding="utf-8")
    return d


def _cli(*args, check=None):
    """Run ``python -m basinkit.cli ARGS`` in a new process; returns (status, stderr)."""
    out = subprocess.run([sys.executable, "-m", "basinkit.cli", *map(str, args)],
                         capture_output=True, text=True, env=ENV, timeout=600)
    if check is not None:
        assert out.returncode == check, out.stderr
    return out.returncode, out.stderr


def _main(args, capsys):
    from basinkit.cli.main import main

    with pytest.raises(SystemExit) as e:
        main([str(a) for a in args])
    return e.value.code, capsys.readouterr().err


def _one_line_error(err):
    """The error is one line (the last line, after any progress lines; no traceback)."""
    assert "Traceback" not in err, err
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert [ln for ln in lines if ln.startswith("error")] == lines[-1:], err
    return lines[-1]


def _files(folder):
    """``{relative name: SHA-256}`` of every file under ``folder``."""
    folder = Path(folder)
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _consistent(folder, user_files=()):
    """The folder holds exactly one complete run: every file its manifest lists, with that
    hash, and nothing else but the manifest and the user's files."""
    man = json.loads((Path(folder) / MANIFEST).read_text())["files"]
    have = _files(folder)
    assert set(have) == set(man) | {MANIFEST} | set(user_files), set(have) ^ set(man)
    for name, h in man.items():
        assert have[name] == h, name
    assert "provenance.json" in man
    return man


def _no_leftovers(folder):
    """No lock, staging folder, old copy or temporary file beside or inside ``folder``."""
    folder = Path(folder)
    beside = [p.name for p in folder.parent.iterdir()
              if p.name.startswith(f".{folder.name}.")]
    assert beside == [], beside
    assert not [p for p in folder.rglob("*") if ".part" in p.name]


# ---------------------------------------------------------------------- kill and swap
def test_sigkill_at_random_moments_leaves_old_or_new_run(tiny, tmp_path):
    """SIGKILL at random moments of ``run --overwrite`` over a good run: afterwards the
    folder holds one complete run (the old one or the new one, each file matching the
    manifest), the user's file is untouched, and the next run cleans up after the killed
    ones (takes their lock over, removes their staging folders)."""
    out = tmp_path / "OUT"
    t0 = time.monotonic()
    _cli("-q", "run", tiny / "job.toml", "-o", out, check=1)  # far_away fails: status 1
    seconds = time.monotonic() - t0  # kill anywhere in a run of about this length
    (out / "notes.txt").write_text("field visit, 3 May")
    first = _consistent(out, ["notes.txt"])
    rng = random.Random(11)
    for trial in range(4):
        p = subprocess.Popen([sys.executable, "-m", "basinkit.cli", "-q", "run",
                              tiny / "job.toml", "-o", out, "--overwrite"], env=ENV,
                             stderr=subprocess.DEVNULL, start_new_session=True)
        time.sleep(rng.uniform(0.3, 1.1 * seconds) if trial < 3 else 0.2)
        try:
            os.killpg(p.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass  # it had finished
        p.wait()
        man = _consistent(out, ["notes.txt"])
        assert set(man) == set(first)  # the old run or a new one: the same files
        assert (out / "notes.txt").read_text() == "field visit, 3 May"
        # the tables and rasters are the same in every complete run
        for name in ("catchments.csv", "catchments.gpkg", "flow/direction_d8.tif"):
            assert man[name] == first[name], name
    code, err = _cli("run", tiny / "job.toml", "-o", out, "--overwrite")
    assert code == 1, err
    _consistent(out, ["notes.txt"])
    _no_leftovers(out)


def test_second_run_into_the_same_folder_is_refused(tiny, tmp_path):
    """Two runs into one folder: while the first holds the lock, the second is refused
    with one line and status 2; the first completes and the folder is consistent."""
    out = tmp_path / "OUT"
    first = subprocess.Popen([sys.executable, "-m", "basinkit.cli", "-q", "run",
                              tiny / "job.toml", "-o", out], env=ENV,
                             stderr=subprocess.PIPE, text=True)
    lock = lock_path(out)
    for _ in range(600):
        if lock.exists() or first.poll() is not None:
            break
        time.sleep(0.05)
    assert lock.exists(), "the first run never took the lock"
    code, err = _cli("run", tiny / "job.toml", "-o", out, "--overwrite")
    assert code == 2
    line = _one_line_error(err)
    assert "another basinkit run" in line and str(first.pid) in line
    _, err1 = first.communicate(timeout=600)
    assert first.returncode == 1, err1  # the off-grid outlet fails
    _consistent(out)
    _no_leftovers(out)


def test_stale_lock_of_a_dead_process_is_taken_over(tiny, tmp_path, capsys):
    """A lock left by a process that is gone is taken over; one whose owner lives is
    not (the lock records pid, host and start time)."""
    import socket

    out = tmp_path / "flow"
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    lock = lock_path(out)
    lock.write_text(json.dumps({"pid": dead.pid, "host": socket.gethostname(),
                                "started": "2000-01-01 00:00:00"}))
    code, err = _main(["route", tiny / "dem.tif", "-o", out], capsys)
    assert code == 0, err
    assert "took over the lock" in err
    assert not lock.exists()
    held = OutputLock(out).acquire()  # a live owner (this process)
    try:
        code, err = _main(["route", tiny / "dem.tif", "-o", out, "--overwrite"], capsys)
        assert code == 2 and "another basinkit run" in _one_line_error(err)
    finally:
        held.release()
    assert not lock.exists()


def test_leftovers_of_killed_runs_are_cleaned_up(tiny, tmp_path, capsys):
    """A staging folder (with its temporary .part files) of a killed run is removed by
    the next run; a run killed between its two renames has its old copy put back."""
    out = tmp_path / "OUT"
    assert _main(["-q", "route", tiny / "dem.tif", "-o", out], capsys)[0] == 0
    good = _files(out)
    # killed while writing: a staging folder with a half-written file
    st = tmp_path / ".OUT.staging-999999"
    (st / "OUT").mkdir(parents=True)
    (st / ".basinkit-staging.json").write_text(json.dumps({"state": "writing"}))
    (st / "OUT" / ".direction_d8.tif.abc.part.tif").write_bytes(b"half")
    # killed between renaming the old folder aside and the new one in
    out.rename(tmp_path / ".OUT.old-999998")
    st2 = tmp_path / ".OUT.staging-999998"
    shutil.copytree(tmp_path / ".OUT.old-999998", st2 / "OUT")
    (st2 / ".basinkit-staging.json").write_text(json.dumps({"state": "swapping"}))
    # a temporary file of a writer killed inside the folder by an older version
    (st2 / "OUT" / ".catchments.csv.k2j4_9xq.part.csv").write_text("half")
    # a user's folder that merely looks similar is not touched
    (tmp_path / ".OUT.staging-5").mkdir()
    (tmp_path / ".OUT.staging-5" / "mine.txt").write_text("mine")
    lock = OutputLock(out).acquire()
    try:
        done = recover(out)
    finally:
        lock.release()
    assert _files(out) == good  # the old run is back, exactly
    assert any("restored" in d for d in done)
    assert not st.exists() and not st2.exists()
    assert not (tmp_path / ".OUT.old-999998").exists()
    assert (tmp_path / ".OUT.staging-5" / "mine.txt").read_text() == "mine"
    shutil.rmtree(tmp_path / ".OUT.staging-5")
    assert _main(["-q", "route", tiny / "dem.tif", "-o", out, "--overwrite"], capsys)[0] == 0
    _no_leftovers(out)


# ---------------------------------------------------------------------- --overwrite
def test_overwrite_keeps_edited_outputs_and_the_users_files(tiny, tmp_path):
    """``--overwrite`` removes only files the earlier run recorded and that are unchanged:
    an edited output and the user's own file are kept (an edited output under a .kept
    name, as the new run writes the name again), and named in a warning; a file of the
    user's that a foreign manifest lists with another hash is kept too."""
    from basinkit.workflow.progress import as_reporter
    from basinkit.workflow.runner import run_job

    class Notes:
        def __init__(self):
            self.warnings = []

        def warn(self, msg, **kw):
            self.warnings.append(msg)

    out = tmp_path / "OUT"
    run_job(tiny / "job.toml", output=out)
    (out / "catchments.csv").write_text("edited by hand\n")
    (out / "my_notes.txt").write_text("field visit")
    man = json.loads((out / MANIFEST).read_text())
    man["files"]["my_notes.txt"] = "0" * 64  # a manifest claiming the user's file
    (out / MANIFEST).write_text(json.dumps(man))
    notes = Notes()
    run_job(tiny / "job.toml", output=out, overwrite=True, console=as_reporter(notes))
    assert (out / "catchments.kept.csv").read_text() == "edited by hand\n"
    assert (out / "my_notes.txt").read_text() == "field visit"
    assert "edited by hand" not in (out / "catchments.csv").read_text()
    _consistent(out, ["catchments.kept.csv", "my_notes.txt"])
    assert any("catchments.csv (as catchments.kept.csv)" in w and "my_notes.txt" in w
               for w in notes.warnings), notes.warnings
    _no_leftovers(out)


def test_report_rewritten_in_a_run_folder_stays_basinkits(tiny, tmp_path, capsys):
    """``basinkit report RUN`` rewrites report.html under the folder's lock and records
    its new hash, so the next ``--overwrite`` replaces it rather than keeping it as the
    user's; a report written elsewhere leaves the run's manifest alone."""
    from basinkit.report import write_report
    from basinkit.workflow.runner import run_job

    out = tmp_path / "OUT"
    run_job(tiny / "job.toml", output=out, report=write_report)
    before = (out / "report.html").read_bytes()
    code, err = _main(["-q", "report", out, "--full-sections-max", "0"], capsys)
    assert code == 0, err
    assert (out / "report.html").read_bytes() != before
    _consistent(out)
    code, err = _main(["-q", "report", out, "-o", tmp_path / "elsewhere.html"], capsys)
    assert code == 0, err
    _consistent(out)
    run_job(tiny / "job.toml", output=out, overwrite=True, report=write_report)
    assert not (out / "report.kept.html").exists()
    _consistent(out)
    _no_leftovers(out)


def test_delineate_overwrite_leaves_nothing_of_the_earlier_run(tiny, tmp_path, capsys):
    """``delineate --overwrite`` with a good outlet and no label raster over a run with a
    failed outlet and a label raster: outlet_errors.csv and the raster go."""
    flow = tmp_path / "flow"
    assert _main(["-q", "route", tiny / "dem.tif", "-o", flow], capsys)[0] == 0
    out = tmp_path / "basin"
    code, _ = _main(["-q", "delineate", flow, "--outlets", tiny / "outlets.csv",
                     "--snap-radius", "20m", "--labels-raster", "-o", out], capsys)
    assert code == 1
    assert (out / "outlet_errors.csv").exists() and (out / "subcatchment_labels.tif").exists()
    code, err = _main(["-q", "delineate", flow, "--outlet", "500205,5000045",
                       "--snap-radius", "20m", "-o", out, "--overwrite"], capsys)
    assert code == 0, err
    assert not (out / "outlet_errors.csv").exists()
    assert not (out / "subcatchment_labels.tif").exists()
    man = json.loads((out / MANIFEST).read_text())["files"]
    assert set(_files(out)) == set(man) | {MANIFEST}
    _no_leftovers(out)


def test_condition_overwrite_keeps_a_file_it_did_not_write(tiny, tmp_path, capsys):
    """A single-file output: ``condition -o x.tif --overwrite`` replaces its own earlier
    file, keeps a file of the user's under a .kept name, and refuses a folder in the way
    with one line (status 2), leaving the folder as it was."""
    x = tmp_path / "x.tif"
    x.write_text("the user's own file")
    code, err = _main(["condition", tiny / "dem.tif", "-o", x, "--overwrite"], capsys)
    assert code == 0, err
    assert (tmp_path / "x.kept.tif").read_text() == "the user's own file"
    rec = json.loads((tmp_path / "x.json").read_text())
    assert rec["files"]["x.tif"] == hashlib.sha256(x.read_bytes()).hexdigest()
    code, err = _main(["-q", "condition", tiny / "dem.tif", "-o", x, "--overwrite"], capsys)
    assert code == 0, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.json", "x.kept.tif", "x.tif"]
    folder = tmp_path / "existing_folder.tif"
    folder.mkdir()
    (folder / "a.txt").write_text("a")
    code, err = _main(["condition", tiny / "dem.tif", "-o", folder, "--overwrite"], capsys)
    assert code == 2 and "is a folder" in _one_line_error(err)
    assert (folder / "a.txt").read_text() == "a"


# ---------------------------------------------------------------------- OS errors
@pytest.fixture
def small_disk(tmp_path):
    """A tmpfs of 1.2 MB (needs root and mount(8); skipped otherwise)."""
    d = tmp_path / "disk"
    d.mkdir()
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1200k", "tmpfs", str(d)],
                       capture_output=True)
    if r.returncode != 0:
        pytest.skip("cannot mount a tmpfs here (needs root)")
    try:
        yield d
    finally:
        subprocess.run(["umount", str(d)], capture_output=True)


def test_full_disk_leaves_the_old_run_and_says_so_in_one_line(tiny, small_disk):
    """A disk that holds the old run but not a second copy (a small tmpfs): the run fails
    with one line naming the disk problem (status 2); the old run is intact and no
    staging folder is left."""
    out = small_disk / "OUT"
    _cli("-q", "run", tiny / "job.toml", "-o", out, check=1)
    before = _files(out)
    code, err = _cli("-q", "run", tiny / "job.toml", "-o", out, "--overwrite")
    assert code == 2, err
    line = _one_line_error(err)
    assert "disk is full" in line or "space" in line, line
    assert _files(out) == before
    _consistent(out)
    _no_leftovers(out)


def test_read_only_disk_is_one_line(tiny, small_disk):
    """A read-only file system (tmpfs remounted ro): one line, status 2."""
    r = subprocess.run(["mount", "-o", "remount,ro", str(small_disk)], capture_output=True)
    if r.returncode != 0:
        pytest.skip("cannot remount read-only here")
    code, err = _cli("route", tiny / "dem.tif", "-o", small_disk / "flow")
    assert code == 2
    assert "read-only" in _one_line_error(err)


@pytest.mark.parametrize("error, expected", [
    (OSError(errno.ENOSPC, "No space left on device"), "disk is full"),
    (PermissionError(errno.EACCES, "Permission denied"), "check the permissions"),
])
def test_writer_errors_are_one_line_and_keep_the_old_run(tiny, tmp_path, capsys,
                                                         monkeypatch, error, expected):
    """A writer failing midway (full disk, permission denied; raised by a patched CSV
    writer) gives one line and status 2, and the earlier run stays as it was."""
    import basinkit.io.writers as writers

    out = tmp_path / "basin"
    flow = tmp_path / "flow"
    assert _main(["-q", "route", tiny / "dem.tif", "-o", flow], capsys)[0] == 0
    args = ["delineate", flow, "--outlet", "500205,5000045", "--snap-radius", "20m",
            "-o", out]
    assert _main(["-q", *args], capsys)[0] == 0
    before = _files(out)

    def broken(path, frame):
        raise error

    monkeypatch.setattr(writers, "write_csv", broken)
    code, err = _main([*args, "--overwrite"], capsys)
    assert code == 2
    line = _one_line_error(err)
    assert expected in line and "catchments.csv" in line, line
    assert _files(out) == before
    _no_leftovers(out)


def test_long_names_and_damaged_flow_folders_are_one_line(tiny, tmp_path, capsys):
    """A 300-character -o and a truncated raster inside a flow folder: one line each,
    status 2."""
    code, err = _main(["route", tiny / "dem.tif", "-o", tmp_path / ("x" * 300)], capsys)
    assert code == 2
    assert "too long" in _one_line_error(err)
    flow = tmp_path / "flow"
    assert _main(["-q", "route", tiny / "dem.tif", "-o", flow], capsys)[0] == 0
    d8 = flow / "direction_d8.tif"
    d8.write_bytes(d8.read_bytes()[:300])
    code, err = _main(["delineate", flow, "--outlet", "500205,5000045", "-o",
                       tmp_path / "b"], capsys)
    assert code == 2
    line = _one_line_error(err)
    assert "direction_d8.tif" in line and "route" in line, line
    assert not (tmp_path / "b").exists()


# ---------------------------------------------------------------------- determinism
def _job_files(folder):
    """:func:`_files` of a job's folder, with provenance.json as its JSON less the peak
    memory (``resources``) and the manifest less that file's hash."""
    got = _files(folder)
    prov = json.loads((Path(folder) / "provenance.json").read_text())
    assert prov.pop("resources")["peak_memory_bytes"] > 0
    got["provenance.json"] = prov
    man = json.loads((Path(folder) / MANIFEST).read_text())
    man["files"].pop("provenance.json")
    got[MANIFEST] = man
    return got


def test_reruns_are_byte_identical(tiny, tmp_path, capsys):
    """The job (report included) run twice into one folder, then into a second folder,
    and each command run twice over its own output: every file is byte for byte the same
    (GeoPackages included: their timestamp is fixed; no timings in the files, they go to
    the console), but for the job's peak memory in provenance.json's ``resources`` (and so
    that file's hash in the manifest)."""
    from basinkit.report import write_report
    from basinkit.workflow.runner import run_job

    run_job(tiny / "job.toml", output=tmp_path / "a", report=write_report)
    first = _job_files(tmp_path / "a")
    assert len(first) > 25 and "report.html" in first
    assert any(n.endswith(".gpkg") for n in first)
    run_job(tiny / "job.toml", output=tmp_path / "a", overwrite=True, report=write_report)
    assert _job_files(tmp_path / "a") == first
    run_job(tiny / "job.toml", output=tmp_path / "b", report=write_report)
    assert _job_files(tmp_path / "b") == first
    flow = tmp_path / "a" / "flow"
    o = ["--outlets", tiny / "outlets.csv", "--snap-radius", "20m"]
    commands = {
        "condition": ["condition", tiny / "dem.tif", "-o", "{out}/x.tif"],
        "route": ["route", tiny / "dem.tif", "-o", "{out}"],
        "delineate": ["delineate", flow, *o, "--labels-raster", "-o", "{out}"],
        "channels": ["channels", flow, "--min-area", "0.5ha", "-o", "{out}"],
        "profile": ["profile", flow, *o, "--min-area", "0.5ha", "--min-order", "1",
                    "-o", "{out}"],
        "morphometry": ["morphometry", flow, *o, "--min-area", "0.5ha", "-o", "{out}"],
        "report": ["report", tmp_path / "b", "-o", "{out}/report.html"],
    }
    for name, argv in commands.items():
        out = tmp_path / name
        if name in ("condition", "report"):
            out.mkdir()
        args = [str(x).replace("{out}", str(out)) for x in argv]
        got = []
        for extra in ([], ["--overwrite"]):
            assert _main(["-q", *args, *extra], capsys)[0] in (0, 1), name
            got.append(_files(out))
        assert got[0] == got[1] and got[0], name


def test_folder_transaction_by_hand(tmp_path, monkeypatch):
    """The transaction from Python: files appear only at commit; an abort leaves the old
    folder exactly as it was and removes the staging folder."""
    monkeypatch.chdir(tmp_path)
    tx = FolderTransaction("out").begin()
    (tx.staging / "a.txt").write_text("1")
    assert not Path("out").exists()
    tx.commit()
    assert _files("out")["a.txt"] == hashlib.sha256(b"1").hexdigest()
    tx = FolderTransaction("out", overwrite=True).begin()
    (tx.staging / "a.txt").write_text("2")
    tx.abort()
    assert (Path("out") / "a.txt").read_text() == "1"
    _no_leftovers(tmp_path / "out")


def test_a_kill_after_the_swap_is_finished_by_the_next_run(tmp_path, monkeypatch):
    """Killed after the new folder was swapped in but before the old copy was cleaned (a
    BaseException raised there stands for the kill): the new run is in place with the
    user's file; the next transaction deletes the old copy's recorded files and verified
    copies, and leaves nothing beside the folder."""
    import basinkit.io.transaction as T

    monkeypatch.chdir(tmp_path)
    tx = FolderTransaction("out").begin()
    (tx.staging / "a.txt").write_text("1")
    tx.commit()
    Path("out/mine.txt").write_text("mine")
    Path("out/.a.txt.abcd1234.part.txt").write_text("half")  # an older writer's leftover
    tx = FolderTransaction("out", overwrite=True).begin()
    (tx.staging / "a.txt").write_text("2")

    def killed(*args):
        raise KeyboardInterrupt

    finish = T._finish_old
    monkeypatch.setattr(T, "_finish_old", killed)
    with pytest.raises(KeyboardInterrupt):
        tx.commit()
    monkeypatch.setattr(T, "_finish_old", finish)
    assert Path("out/a.txt").read_text() == "2"
    assert Path("out/mine.txt").read_text() == "mine"
    assert not Path("out/.a.txt.abcd1234.part.txt").exists()
    assert [p for p in tmp_path.iterdir() if p.name.startswith(".out.")]
    tx = FolderTransaction("out", overwrite=True).begin()
    assert any("finished the swap" in d for d in tx.recovered), tx.recovered
    tx.abort()
    _no_leftovers(tmp_path / "out")
    assert sorted(_files("out")) == [MANIFEST, "a.txt", "mine.txt"]


def test_swap_by_two_renames_rolls_back_when_the_second_fails(tmp_path, monkeypatch):
    """Where the system cannot exchange two folders in one step, the swap is two renames;
    when the second fails, the first is undone: the old folder is back, exactly, and the
    error is an OutputError (one line at the command line)."""
    import basinkit.io.transaction as T
    from basinkit.errors import OutputError

    monkeypatch.chdir(tmp_path)
    tx = FolderTransaction("out").begin()
    (tx.staging / "a.txt").write_text("1")
    tx.commit()
    Path("out/mine.txt").write_text("mine")
    before = _files("out")
    monkeypatch.setattr(T, "_exchange", lambda a, b: False)
    calls = []
    rename = os.rename

    def second_fails(a, b):
        calls.append((a, b))
        if len(calls) == 2:
            raise OSError(errno.EIO, "Input/output error")
        return rename(a, b)

    tx = FolderTransaction("out", overwrite=True).begin()
    (tx.staging / "a.txt").write_text("2")
    monkeypatch.setattr(T.os, "rename", second_fails)
    with pytest.raises(OutputError) as e:
        tx.commit()
    monkeypatch.setattr(T.os, "rename", rename)
    assert "input/output error" in str(e.value).lower()
    assert _files("out") == before
    _no_leftovers(tmp_path / "out")


def test_a_folder_left_open_is_settled_by_the_command_line(tmp_path):
    """A command that opens its folder without ``with`` still gets it swapped in when it
    returns, and dropped when it fails (the command line settles open folders)."""
    from basinkit.workflow.output import OutputFolder, settle_open_folders

    out = OutputFolder(tmp_path / "ok").check().open()
    out.text("a.txt", "done")
    assert not (tmp_path / "ok").exists()
    settle_open_folders(True)
    assert (tmp_path / "ok" / "a.txt").read_text() == "done"
    bad = OutputFolder(tmp_path / "bad").check().open()
    bad.text("a.txt", "half")
    settle_open_folders(False)
    assert not (tmp_path / "bad").exists()
    _no_leftovers(tmp_path / "ok")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ok"]
