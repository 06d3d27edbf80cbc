#!/usr/bin/env python3
"""Measure the distributed FFT's pieces and predict larger runs (a model, clearly labelled).

Run under MPI, e.g. `mpiexec -n 2 python scripts/bench_mpi.py --n 256`. On each rank it times,
for one inverse real 3-D transform of an n^3 complex64 half spectrum in the slab layout of
icgen.decomp: the axis-0 pass, the all-to-all transpose, and the axis-1/axis-2 passes (median of
repeats). Rank 0 prints the measured rates and a model for a larger run:

    t_fft(N, P)       = c_fft * N^3 log2(N^3) / P            (P nodes, per transform)
    t_transpose(N, P) = 8 N^3 / 2 / P * (P - 1)/P / B_node   (bytes each node sends, complex64)

with c_fft measured here per node (all the node's cores) and B_node the network bandwidth per
node, an assumption given on the command line (default 10 GB/s, about 100 Gb/s InfiniBand).
Memory per rank per transform: the rank's spectral slab, one receive buffer and the real slab,
about 3 * 4 N^3 / P bytes in float32/complex64.
"""

import argparse
import statistics
import time

import numpy as np
from mpi4py import MPI

from icgen import _fft
from icgen.decomp import Layout


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=256)
    p.add_argument("--repeats", type=int, default=5)
    p.add_argument("--predict-n", type=int, default=4096)
    p.add_argument("--predict-nodes", type=int, default=64)
    p.add_argument("--bandwidth-gb-s", type=float, default=10.0, help="assumed network bandwidth per node")
    a = p.parse_args()
    comm = MPI.COMM_WORLD
    lay = Layout(a.n, comm)
    rng = np.random.default_rng(comm.rank)
    base = (rng.standard_normal(lay.spec_shape) + 1j * rng.standard_normal(lay.spec_shape)).astype(np.complex64)
    t_x, t_tr, t_yz = [], [], []
    for _ in range(a.repeats):
        work = base.copy()
        comm.Barrier()
        t0 = time.perf_counter()
        x = _fft.inverse_pass_x(work)
        t1 = time.perf_counter()
        b = lay._to_x_slabs(x) if lay.distributed else x
        comm.Barrier()
        t2 = time.perf_counter()
        _fft.inverse_pass_yz(b, a.n)
        t3 = time.perf_counter()
        t_x.append(t1 - t0)
        t_tr.append(t2 - t1)
        t_yz.append(t3 - t2)
    med = [statistics.median(v) for v in (t_x, t_tr, t_yz)]
    allmed = comm.gather(med, root=0)
    if comm.rank:
        return
    fx, tr, fyz = (max(m[i] for m in allmed) for i in range(3))
    n, ranks = a.n, comm.size
    sent = 8 * n**3 / 2 / ranks * (ranks - 1) / ranks  # bytes per rank per transform
    print(f"measured on this machine: n = {n}, {ranks} rank(s), one inverse real FFT of complex64")
    print(f"  axis-0 pass {fx:.4f} s, transpose {tr:.4f} s, axis-1/2 passes {fyz:.4f} s (slowest rank)")
    if ranks > 1:
        print(f"  transpose: {sent / 1e6:.1f} MB sent per rank, {sent / tr / 1e9:.2f} GB/s per rank (shared memory)")
    c_fft = (fx + fyz) * ranks / (n**3 * np.log2(float(n) ** 3))
    print(f"  c_fft = {c_fft:.3e} s per (N^3 log2 N^3) on one node of this kind")
    big, nodes, bw = a.predict_n, a.predict_nodes, a.bandwidth_gb_s * 1e9
    t_fft = c_fft * big**3 * np.log2(float(big) ** 3) / nodes
    t_trans = 8 * big**3 / 2 / nodes * (nodes - 1) / nodes / bw
    mem = 3 * 4 * big**3 / nodes
    print(f"MODEL (not a measurement): {big}^3 on {nodes} nodes like this one, {a.bandwidth_gb_s:g} GB/s per node")
    print(f"  per transform: FFT {t_fft:.1f} s + transpose {t_trans:.1f} s; "
          f"~{mem / 1e9:.1f} GB of field buffers per node per transform")
    print(f"  2LPT (13 transforms): ~{13 * (t_fft + t_trans):.0f} s; 1LPT (3): ~{3 * (t_fft + t_trans):.0f} s")


if __name__ == "__main__":
    main()
