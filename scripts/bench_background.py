#!/usr/bin/env python3
"""Benchmark of ``icgen background``: solve + 10,000-point table + CSV write, after import.

It times the command's work in-process (``icgen.cli.main``, output to a temporary
directory, stdout discarded), repeated, and reports the median, the median of each stage
(solve, table, write) and the ratio against a baseline measured in the same process:
a plain numpy evaluation of E(a) on the same scale factors plus ``np.savetxt`` of an
8-column table of the same size and format -- the unavoidable I/O cost of the output.

usage: bench_background.py [--points N] [--repeats R] [--format csv|h5]
Target (issue 2): the work takes under 0.5 s.
"""

import argparse
import contextlib
import io
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from icgen import background, io_output
from icgen.cli import main
from icgen.cli.cmd_background import COLUMNS, table
from icgen.cli.common import default_params_text
from icgen.parameters import loads

TARGET_S = 0.5


def _median_time(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), min(times)


def main_bench():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--points", type=int, default=10_000)
    p.add_argument("--repeats", type=int, default=15)
    p.add_argument("--format", choices=("csv", "h5"), default="csv")
    args = p.parse_args()
    n, reps = args.points, args.repeats

    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / f"bench.{args.format}"
        argv = ["background", "--out", str(out), "--points", str(n), "--overwrite"]

        def command():
            with contextlib.redirect_stdout(io.StringIO()):
                status = main(argv)
            assert status == 0

        cosmo = loads(default_params_text()).cosmology
        a = np.geomspace(1e-3, 1.0, n)  # the command's default grid
        state = {}

        def solve():
            state["bg"] = background.solve(cosmo, a_min=1e-8, a_max=1.0)

        def tabulate():
            state["cols"] = table(state["bg"], a)

        def write():
            io_output.write_columns(out, state["cols"], units=COLUMNS, overwrite=True)

        base_out = Path(tmp) / "baseline.csv"

        def baseline():
            # Friedmann E(a) in plain numpy, the 8 columns, and np.savetxt: the floor of the job.
            e = np.sqrt(cosmo.omega_r / a**4 + cosmo.omega_m / a**3 + cosmo.omega_k / a**2
                        + cosmo.omega_de)
            cols = np.column_stack([a, 1.0 / a - 1.0, e, 100.0 * cosmo.h * e, a, e, a * a, e])
            np.savetxt(base_out, cols, delimiter=",", header=",".join(COLUMNS), comments="",
                       fmt=io_output.CSV_FORMAT)

        command()  # warm-up: first-call imports (h5py, scipy submodules), page cache
        baseline()
        work, work_min = _median_time(command, reps)
        stages = {name: _median_time(fn, reps)[0] for name, fn in
                  (("solve", solve), ("table", tabulate), ("write", write))}
        base, base_min = _median_time(baseline, reps)

    print(f"icgen background, {n} points, {args.format}: median {work:.4f} s "
          f"(min {work_min:.4f} s) over {reps} runs")
    print("  stages (median): " + ", ".join(f"{k} {v:.4f} s" for k, v in stages.items()))
    print(f"baseline, numpy E(a) + np.savetxt of 8 columns: median {base:.4f} s (min {base_min:.4f} s)")
    print(f"ratio work / baseline: {work / base:.2f}")
    print(f"target work < {TARGET_S} s: {'met' if work < TARGET_S else 'NOT met'}")


if __name__ == "__main__":
    main_bench()
