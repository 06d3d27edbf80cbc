"""Benchmark: deposit 256^3 particles on a 256^3 mesh (icgen.power.assign) against NumPy baselines.

Reports the absolute time of each scheme and its ratio to two baselines run in the same
process on the same particles:

* ``np.histogramdd`` nearest-grid-point counts (NumPy's own binning), and
* cloud-in-cell with ``np.add.at`` (the same algorithm in plain NumPy).

Usage: python scripts/bench_power.py [--n 256] [--mesh 256] [--repeat 3] [--no-add-at]
"""

import argparse
import os
import time

import numpy as np

from icgen import power


def _best(fn, repeat):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def _cic_add_at(pos, box, n):
    u = pos / (box / n)
    j = np.floor(u).astype(np.int64)
    d = u - j
    mesh = np.zeros((n, n, n))
    for a in (0, 1):
        wa = d[:, 0] if a else 1 - d[:, 0]
        ia = (j[:, 0] + a) % n
        for b in (0, 1):
            wb = d[:, 1] if b else 1 - d[:, 1]
            ib = (j[:, 1] + b) % n
            for c in (0, 1):
                wc = d[:, 2] if c else 1 - d[:, 2]
                np.add.at(mesh, (ia, ib, (j[:, 2] + c) % n), wa * wb * wc)
    return mesh


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=256, help="particles per side (default 256)")
    ap.add_argument("--mesh", type=int, default=256, help="mesh points per side (default 256)")
    ap.add_argument("--repeat", type=int, default=3, help="repetitions, best time kept")
    ap.add_argument("--no-add-at", action="store_true", help="skip the slow np.add.at baseline")
    args = ap.parse_args()
    box, n, nm = 1000.0, args.n, args.mesh
    rng = np.random.default_rng(42)
    # A perturbed lattice in the order an initial-condition file stores it (0.3 cells rms).
    q = (np.indices((n, n, n), dtype=np.float32).reshape(3, -1).T + 0.5) * np.float32(box / n)
    pos = (q + rng.normal(0.0, 0.3 * box / n, q.shape).astype(np.float32)) % np.float32(box)
    pos[pos >= box] = 0.0
    del q
    print(f"{n}^3 = {n**3:,} particles (float32), {nm}^3 mesh, numba threads: "
          f"{os.environ.get('NUMBA_NUM_THREADS', 'all')} of {os.cpu_count()} cores")

    for scheme in ("ngp", "cic", "tsc"):  # compile (cached after the first run)
        power.assign(pos[:1000], box, 16, scheme)
    t_hist, h = _best(lambda: np.histogramdd(pos, bins=nm, range=[(0, box)] * 3)[0], 1)
    print(f"baseline np.histogramdd (NGP):      {t_hist:8.3f} s")
    t_add = None
    if not args.no_add_at:
        t_add, ref = _best(lambda: _cic_add_at(pos.astype(np.float64), box, nm), 1)
        print(f"baseline np.add.at (CIC):           {t_add:8.3f} s")
    for scheme in ("ngp", "cic", "tsc"):
        t, mesh = _best(lambda: power.assign(pos, box, nm, scheme), args.repeat)
        line = f"icgen.power.assign {scheme.upper()}:           {t:8.3f} s   " \
               f"{t_hist / t:6.1f}x faster than histogramdd"
        if t_add is not None:
            line += f", {t_add / t:6.1f}x faster than np.add.at CIC"
        print(line)
        if scheme == "cic" and t_add is not None:
            print(f"  CIC max |difference| to np.add.at: {np.abs(mesh - ref).max():.2e} particles")
    t, ps = _best(lambda: power.measure(pos, box, nm, "cic", True), 1)
    print(f"full P(k) (CIC, interlaced, {nm}^3): {t:8.3f} s ({len(ps)} bins)")


if __name__ == "__main__":
    main()
