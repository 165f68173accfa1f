"""CPU time of compiling the kernels a job uses, on a new machine (an empty kernel cache).

Run by hand (not part of the tests):

    python bench/bench_compile.py --runs 3
    python bench/bench_compile.py --runs 3 --package /path/to/other/checkout   # A/B in turn

Each run is a fresh process with a new, empty ``NUMBA_CACHE_DIR``. It first routes the
warm-up surface of the demo's size (``warmup.warm_route_kernels``: route's kernels, as a
job's read stage compiles them), then compiles every entry of ``warmup.LATER_KERNELS`` in
the job's stage order, one at a time (``Dispatcher.compile`` for the listed argument
types), and prints the CPU seconds (``time.process_time``) of each. A kernel's time
includes whatever it calls that was not compiled before (numba compiles a callee once
per process, with its first caller). With several ``--package`` checkouts the runs go in
turn (A, B, A, B, ...) and the medians per stage are printed side by side.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile

_CHILD = r"""
import json, sys, time
t0 = time.process_time()
from basinkit.workflow import warmup
t_import = time.process_time() - t0
out = {"import": t_import, "kernels": []}
t = time.process_time()
warmup.warm_route_kernels(90_000)
out["route"] = time.process_time() - t
for stage, entries in warmup.LATER_KERNELS.items():
    for e in entries:
        kernel, types = warmup._kernel(e[0], e[1]), warmup.argument_types(e[2])
        t = time.process_time()
        kernel.compile(types)
        out["kernels"].append([stage, e[0] + "." + e[1], e[2], time.process_time() - t])
print(json.dumps(out))
"""


def one_run(package: str) -> dict:
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache, PYTHONPATH=package)
        res = subprocess.run([sys.executable, "-c", _CHILD], env=env, cwd=package,
                             capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def by_stage(run: dict) -> dict:
    out = {"route (read)": run["route"]}
    for stage, _, _, s in run["kernels"]:
        out[stage] = out.get(stage, 0.0) + s
    out["total"] = sum(out.values())
    return out


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--runs", type=int, default=3)
    p.add_argument("--package", action="append",
                   help="a checkout to time (repeat for A/B); default: this one")
    p.add_argument("--top", type=int, default=15, help="kernels listed, by median CPU")
    a = p.parse_args(argv)
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    packages = a.package or [here]
    runs = {pkg: [] for pkg in packages}
    for i in range(a.runs):
        for pkg in packages:
            r = one_run(pkg)
            runs[pkg].append(r)
            print(f"run {i + 1} {pkg}: {by_stage(r)['total']:.1f} s CPU", flush=True)
    stages = []  # every stage of every checkout (a list may have gained one)
    for pkg in packages:
        stages += [st for st in by_stage(runs[pkg][0]) if st not in stages]
    stages.append(stages.pop(stages.index("total")))
    print("\nmedian CPU seconds of compiling, by stage")
    print("stage".ljust(16) + "".join(os.path.basename(pkg.rstrip('/'))[:14].rjust(16)
                                      for pkg in packages))
    for st in stages:
        print(st.ljust(16) + "".join(
            f"{statistics.median(by_stage(r).get(st, 0.0) for r in runs[pkg]):16.2f}"
            for pkg in packages))
    for pkg in packages:
        med = {}
        for r in runs[pkg]:
            for stage, name, types, s in r["kernels"]:
                med.setdefault((stage, name, types), []).append(s)
        top = sorted(med.items(), key=lambda kv: -statistics.median(kv[1]))[:a.top]
        print(f"\n{pkg}: the {a.top} costliest kernels (median CPU s)")
        for (stage, name, types), v in top:
            print(f"{statistics.median(v):7.2f}  {stage:12s} {name}  {types}")


if __name__ == "__main__":
    main()
