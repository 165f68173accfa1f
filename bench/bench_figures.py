"""CPU time of drawing the package's figures, per figure kind, on the demo's data.

Run by hand (not part of the tests):

    python bench/bench_figures.py capture            # runs the demo job once, keeps the inputs
    python bench/bench_figures.py time --draws 5     # CPU per figure, each kind drawn in turn
    python bench/bench_figures.py time --package /path/to/other/checkout   # its basinkit
    python bench/bench_figures.py demo --runs 3 --package A --package B  # warm demos in turn
    python bench/bench_figures.py kept --draws 4     # new figure against kept, interleaved

``capture`` runs the demo job in this process (one worker), with the profiles step's
``_figures`` and the steps' ``draw_pngs`` wrapped so that their arguments are pickled to
bench/out/figure_args.pkl; the job's output folder is kept under bench/out/figures_demo
for the report's figures (maps, histograms, drawn from the folder).

``demo`` runs the warm ``basinkit --log-json demo -o FOLDER --overwrite`` of each checkout
given with ``--package`` in turn (A, B, A, B, ...; one warm-up run each first) and prints
the medians of wall time, CPU (user + system of the command and its workers) and the
stages' seconds (the ``stage_done`` records).

``kept`` draws every captured step figure on a new figure (``figure_png(plot(...))``, as
before kept figures) and on the kept one (``plot_png``), one after the other for each
figure, so that both see the same load; it checks that the bytes are equal and prints the
median CPU of each per kind.

``time`` draws every captured figure ``--draws`` times, the outlets one after another as
a job does (so that whatever a figure kind keeps between draws is used as in a job), and
prints the median CPU (``time.process_time``) per figure of each kind, PNG bytes included.
"""

from __future__ import annotations

import argparse
import pickle
import shutil
import statistics
import sys
import tempfile
import time
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
OUT = HERE / "out"
ARGS = OUT / "figure_args.pkl"
FOLDER = OUT / "figures_demo"
sys.path.insert(0, str(ROOT))


def capture():
    from basinkit.workflow.jobfile import read_job
    from basinkit.workflow.runner import run_job
    from basinkit.workflow.steps import _figures as FG
    from basinkit.workflow.steps import profiles as P

    OUT.mkdir(exist_ok=True)
    tmp = Path(tempfile.mkdtemp())
    shutil.copytree(ROOT / "demo_rasters", tmp / "demo")
    job = tmp / "demo" / "demo_job.toml"
    text = job.read_text()
    job.write_text(text.replace("[job]\n", "[job]\nworkers = 1\n", 1))
    got = {"profiles": [], "pngs": []}
    old_fig, old_draw = P._figures, FG.draw_pngs

    def fig(*args):
        got["profiles"].append(args)
        return old_fig(*args)

    def draw(jobs, workers=2):
        got["pngs"].extend(jobs)
        return old_draw(jobs, workers=1)

    P._figures, FG.draw_pngs = fig, draw
    try:
        run_job(read_job(job), output=FOLDER, overwrite=True)
    finally:
        P._figures, FG.draw_pngs = old_fig, old_draw
    with open(ARGS, "wb") as f:
        pickle.dump(got, f)
    shutil.rmtree(tmp)
    print(f"{len(got['profiles'])} profile outlets, {len(got['pngs'])} step figures "
          f"-> {ARGS}; folder {FOLDER}")


def _report_figures():
    from basinkit.io.products import RunFolder
    from basinkit.report.build import SUMMARY_SECTIONS
    from basinkit.report.collect import collect
    from basinkit.report.figures import Figures

    d = collect(RunFolder(FOLDER), summary_sections=SUMMARY_SECTIONS)
    figs = Figures(d)
    figs.preload()
    return d, figs


def time_figures(draws):
    from basinkit.workflow.steps import profiles as P
    from basinkit.workflow.steps._figures import _draw

    with open(ARGS, "rb") as f:
        got = pickle.load(f)
    d, rf = _report_figures()
    kinds = {}

    def run(kind, n, fn):
        fn()  # warm: imports, fonts, caches
        per = []
        for _ in range(draws):
            t0 = time.process_time()
            fn()
            per.append((time.process_time() - t0) / n)
        kinds[kind] = statistics.median(per)

    warnings.simplefilter("ignore")
    run("profiles (4 figures) per outlet", len(got["profiles"]),
        lambda: [P._figures(*a) for a in got["profiles"]])
    by = {}
    for job in got["pngs"]:
        by.setdefault(job[1].__name__, []).append(job)
    for k, jobs in by.items():  # as the steps draw them (draw_pngs' _draw)
        run(k, len(jobs), lambda jobs=jobs: [_draw(j) for j in jobs])
    ids = list(d.ok_ids)
    run("report outlet_map", len(ids), lambda: [rf.outlet_map(i) for i in ids])
    run("report overview", 1, rf.overview)
    run("report distributions", 1, rf.distributions)
    import basinkit

    print(f"basinkit from {Path(basinkit.__file__).parent.parent}")
    for k, v in kinds.items():
        print(f"{k:36s} {1000 * v:8.1f} ms CPU")


def demo(packages, runs):
    import json
    import os
    import resource
    import subprocess

    out = Path(tempfile.mkdtemp())
    rows = {p: [] for p in packages}

    def once(pkg):
        env = {**os.environ, "PYTHONPATH": str(pkg)}
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        t0 = time.perf_counter()
        res = subprocess.run([sys.executable, "-m", "basinkit.cli", "--log-json", "demo",
                              "-o", str(out / "demo"), "--overwrite"], env=env, cwd=out,
                             capture_output=True, text=True)
        wall = time.perf_counter() - t0
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu = (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)
        stages = {}
        for line in (res.stdout + res.stderr).splitlines():
            try:
                rec = json.loads(line)
            except ValueError:
                continue
            if isinstance(rec, dict) and rec.get("event") == "stage_done":
                stages[rec["stage"]] = rec["seconds"]
        return {"wall": wall, "cpu": cpu, **stages}

    for p in packages:
        once(p)  # warm-up
    for _ in range(runs):
        for p in packages:
            rows[p].append(once(p))
    keys = list(rows[packages[0]][0])
    print("package".ljust(24) + "".join(k[:11].rjust(12) for k in keys))
    for p, rs in rows.items():
        med = [statistics.median(r.get(k, float("nan")) for r in rs) for k in keys]
        print(Path(p).name.ljust(24) + "".join(f"{v:12.2f}" for v in med))
    shutil.rmtree(out)


def kept(draws):
    from basinkit.analysis import profile_fits as F
    from basinkit.plot import profiles as G
    from basinkit.plot.png import figure_png, plot_png

    with open(ARGS, "rb") as f:
        got = pickle.load(f)
    warnings.simplefilter("ignore")
    jobs = []
    for oid, nodes, steep, knick, lfp, ms in got["profiles"]:
        sa = (F.slope_area_fit(nodes["upstream_area_m2"], nodes["slope_m_per_m"])
              if len(nodes) >= 3 else None)
        jobs += [("long profile", G.plot_long_profile, (ms,), {"title": "a"}),
                 ("long profile", G.plot_long_profile, (lfp,),
                  {"knickpoints": G.knickpoints_on(lfp, knick), "title": "b"}),
                 ("chi", G.plot_chi, (nodes,),
                  {"knickpoints": knick, "steepness_table": steep, "title": "c"}),
                 ("slope-area", G.plot_slope_area,
                  (nodes["upstream_area_m2"], nodes["slope_m_per_m"]),
                  {"fit": sa, "title": "d"})]
    jobs += [(j[1].__name__, j[1], j[2], j[3]) for j in got["pngs"]]
    res = {}
    for rnd in range(draws + 1):  # the first round warms up
        for kind, p, a, k in jobs:
            t0 = time.process_time()
            b1 = figure_png(p(*a, **k))
            t1 = time.process_time()
            b2 = plot_png(p, *a, **k)
            t2 = time.process_time()
            assert b1 == b2, kind
            if rnd:
                r = res.setdefault(kind, ([], []))
                r[0].append(t1 - t0)
                r[1].append(t2 - t1)
    for kind, (f, k) in res.items():
        a, b = statistics.median(f), statistics.median(k)
        print(f"{kind:24s} new figure {1000 * a:6.1f} ms   kept {1000 * b:6.1f} ms   "
              f"ratio {a / b:.2f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", choices=["capture", "time", "demo", "kept"])
    ap.add_argument("--draws", type=int, default=5)
    ap.add_argument("--package", action="append", default=[],
                    help="import basinkit from this checkout (demo: each in turn)")
    ap.add_argument("--runs", type=int, default=3)
    a = ap.parse_args(argv)
    if a.what == "demo":
        return demo([str(Path(p).resolve()) for p in a.package or [ROOT]], a.runs)
    if a.package:
        sys.path.insert(0, str(Path(a.package[-1]).resolve()))
    if a.what == "capture":
        capture()
    elif a.what == "kept":
        kept(a.draws)
    else:
        time_figures(a.draws)


if __name__ == "__main__":
    main()
