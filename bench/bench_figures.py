"""CPU time of drawing the package's figures, per figure kind, on the demo's data.

Run by hand (not part of the tests):

    python bench/bench_figures.py capture            # runs the demo job once, keeps the inputs
    python bench/bench_figures.py time --draws 5     # CPU per figure, each kind drawn in turn

``capture`` runs the demo job in this process (one worker), with the profiles step's
``_figures`` and the steps' ``draw_pngs`` wrapped so that their arguments are pickled to
bench/out/figure_args.pkl; the job's output folder is kept under bench/out/figures_demo
for the report's figures (maps, histograms, drawn from the folder).

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
    from basinkit.plot.png import figure_png
    from basinkit.workflow.steps import profiles as P

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
    for name, plot, args, kw in got["pngs"]:
        by.setdefault(plot.__name__, []).append((plot, args, kw))
    for k, jobs in by.items():
        run(k, len(jobs), lambda jobs=jobs: [figure_png(p(*a, **kw)) for p, a, kw in jobs])
    ids = list(d.ok_ids)
    run("report outlet_map", len(ids), lambda: [rf.outlet_map(i) for i in ids])
    run("report overview", 1, rf.overview)
    run("report distributions", 1, rf.distributions)
    for k, v in kinds.items():
        print(f"{k:36s} {1000 * v:8.1f} ms CPU")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", choices=["capture", "time"])
    ap.add_argument("--draws", type=int, default=5)
    a = ap.parse_args(argv)
    if a.what == "capture":
        capture()
    else:
        time_figures(a.draws)


if __name__ == "__main__":
    main()
