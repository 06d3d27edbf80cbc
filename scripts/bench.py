#!/usr/bin/env python3
"""Benchmark `icgen ics` against the plain numpy/scipy lower-bound pipeline (../shared/bench/floor.py).

Both run as separate processes at the same N, LPT order and precision, alternating, several
repeats; the script prints each one's median wall time (whole process, imports included), the
ratio icgen / floor, and each one's peak resident memory per particle from the operating
system's accounting of that process (ru_maxrss of the child via os.wait4).

Both write positions and velocities of N^3 particles (float32 by default) to an HDF5 file in a
temporary directory; icgen runs with `write_ids = false` so the outputs hold the same data.

usage: scripts/bench.py [--n 256] [--order 1] [--precision float32] [--repeats 3]
                        [--floor PATH] [--scaling 64,128,256,512]
"""

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_FLOOR = HERE.parent.parent / "shared" / "bench" / "floor.py"


def timed(cmd, env=None):
    """Run cmd; return (wall seconds, peak RSS bytes) of that process alone."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    err = proc.stderr.read().decode()
    proc.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"{' '.join(map(str, cmd))} failed:\n{err}")
    return wall, usage.ru_maxrss * 1024  # Linux reports KiB


def icgen_cmd(n, order, precision, workdir):
    params = Path(workdir) / f"bench_{n}_{order}.toml"
    params.write_text(
        "[box]\nsize = 100.0\n"
        f"particles_per_side = {n}\n"
        f"[start]\nredshift = 49.0\nlpt_order = {order}\n"
        f'[output]\nprecision = "{precision}"\nwrite_ids = false\n')
    out = Path(workdir) / "icgen.h5"
    return [sys.executable, "-m", "icgen.cli", "ics", str(params), "--out", str(out), "--overwrite", "--quiet"]


def floor_cmd(floor, n, order, precision, workdir):
    return [sys.executable, str(floor), str(n), "--order", str(order), "--dtype", precision,
            "--out", str(Path(workdir) / "floor.h5")]


def compare(floor, n, order, precision, repeats, workdir):
    ours, base = [], []
    cmds = (icgen_cmd(n, order, precision, workdir), floor_cmd(floor, n, order, precision, workdir))
    timed(cmds[0])  # warm the numba cache and the file system once
    for _ in range(repeats):
        ours.append(timed(cmds[0]))
        base.append(timed(cmds[1]))
    t_ours = statistics.median(w for w, _ in ours)
    t_base = statistics.median(w for w, _ in base)
    m_ours = max(m for _, m in ours) / n**3
    m_base = max(m for _, m in base) / n**3
    return t_ours, t_base, m_ours, m_base


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=256)
    p.add_argument("--order", type=int, default=1, choices=(1, 2))
    p.add_argument("--precision", default="float32", choices=("float32", "float64"))
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--floor", default=str(DEFAULT_FLOOR))
    p.add_argument("--scaling", default="", help="comma-separated N for a time-per-particle table")
    a = p.parse_args()
    if not Path(a.floor).exists():
        raise SystemExit(f"floor pipeline not found at {a.floor}; pass --floor")
    # Measure icgen as installed: pip byte-compiles a package on install, but an editable
    # install under PYTHONDONTWRITEBYTECODE=1 would compile every module on every run.
    import compileall

    import icgen
    compileall.compile_dir(Path(icgen.__file__).parent, quiet=1)
    with tempfile.TemporaryDirectory() as work:
        t_o, t_b, m_o, m_b = compare(a.floor, a.n, a.order, a.precision, a.repeats, work)
        print(f"N = {a.n}^3, order {a.order}, {a.precision}, median of {a.repeats} alternating runs")
        print(f"  icgen ics : {t_o:7.3f} s   peak {m_o:6.1f} bytes/particle")
        print(f"  floor.py  : {t_b:7.3f} s   peak {m_b:6.1f} bytes/particle")
        print(f"  ratio icgen/floor = {t_o / t_b:.3f} (wall time)")
        if a.scaling:
            print("\n  N     icgen s   ns/particle   floor s   ns/particle   ratio")
            for n in (int(x) for x in a.scaling.split(",")):
                t_o, t_b, m_o, m_b = compare(a.floor, n, a.order, a.precision, a.repeats, work)
                print(f"  {n:<5d} {t_o:8.3f} {1e9 * t_o / n**3:12.1f} {t_b:9.3f} {1e9 * t_b / n**3:12.1f}"
                      f"   {t_o / t_b:.3f}")


if __name__ == "__main__":
    main()
