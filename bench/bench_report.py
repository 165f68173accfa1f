"""Report benchmark: the HTML report of a job with many outlets on a real DEM.

Run by hand (not part of the tests):

    python bench/bench_report.py --outlets 2000
    python bench/bench_report.py --outlets 2000 --folder /tmp/many2000/out   # reuse a folder

The folder is a job on matplotlib's real 3-arc-second DEM (jacksboro_fault_dem.npz, written
as a GeoTIFF) with N outlets on channel cells (fixed seed), built by tests/report_folders.py:
the job (profiles on), then the contract's profile tables from the ``profile`` command
(slow: that command still draws four PNGs per outlet). Only ``write_report`` is timed, in a
fresh process per repeat, and the size of report.html is reported.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent

TIMED = """
import sys, time
from basinkit.report import write_report
t = time.perf_counter()
p = write_report(sys.argv[1], sys.argv[2], workers=int(sys.argv[3]))
print(time.perf_counter() - t)
"""


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--outlets", type=int, default=2000)
    ap.add_argument("--folder", type=Path, default=None,
                    help="an existing output folder (default: build one under bench/out)")
    ap.add_argument("--repeat", type=int, default=2)
    a = ap.parse_args(argv)
    folder = a.folder
    if folder is None:
        sys.path.insert(0, str(ROOT / "tests"))
        from report_folders import many_outlet_folder

        base = HERE / "out" / f"report_{a.outlets}"
        folder = base / "out"
        if not (folder / "flow_paths.csv").is_file():
            t = time.perf_counter()
            many_outlet_folder(a.outlets, base, profiles=True)
            print(f"built {folder} in {time.perf_counter() - t:.0f} s")
    out = folder.parent / "bench_report.html"
    for workers in (2, 1):
        times = []
        for _ in range(a.repeat):
            r = subprocess.run([sys.executable, "-c", TIMED, str(folder), str(out),
                                str(workers)], capture_output=True, text=True, check=True,
                               env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})
            times.append(float(r.stdout.strip().splitlines()[-1]))
        print(f"{a.outlets} outlets, workers={workers}: write_report best "
              f"{min(times):.2f} s of {len(times)}; report.html "
              f"{out.stat().st_size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
