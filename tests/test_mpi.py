"""Distributed initial conditions under mpiexec: bit-identical to the serial run on any rank count.

These tests launch `mpiexec -n R` (oversubscribed on a 2-core machine). They need mpi4py and an
MPI launcher (`pip install mpich mpi4py`, part of the [test] extra on Linux); without them they
are skipped with the reason.
"""

import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import h5py
import numpy as np
import pytest

from icgen import io_hdf5, parallel

try:  # pragma: no cover - depends on the environment
    import mpi4py  # noqa: F401

    MPIEXEC = shutil.which("mpiexec", path=str(Path(sys.executable).parent)) or shutil.which("mpiexec")
except ImportError:  # pragma: no cover
    MPIEXEC = None

needs_mpi = pytest.mark.skipif(MPIEXEC is None, reason="mpi4py and mpiexec are not installed")


def _params(tmp_path, n, order):
    p = tmp_path / f"p{n}_{order}.toml"
    p.write_text(f"[box]\nsize = 80.0\nparticles_per_side = {n}\n[start]\nredshift = 30.0\nlpt_order = {order}\n"
                 "[phases]\nseed = 4242\n")
    return p


def _mpi(ranks, args, cwd, env=None):
    cmd = [MPIEXEC, "-n", str(ranks), sys.executable, "-m", "icgen.cli"] + args
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=300,
                          env=dict(os.environ, **(env or {})))


def _data(path):
    with h5py.File(path, "r") as f:
        return {k: f[f"particles/{k}"][...] for k in ("position", "velocity", "id")}, \
            {k: int(f[f"particles/{k}"].attrs["checksum_crc32"]) for k in ("position", "velocity", "id")}


@needs_mpi
@pytest.mark.parametrize("n,order", [(64, 1), (64, 2), (48, 1), (48, 2)])
def test_distributed_runs_are_bit_identical_to_serial(tmp_path, n, order):
    params = _params(tmp_path, n, order)
    res = subprocess.run([sys.executable, "-m", "icgen.cli", "ics", str(params), "--out", "serial.h5", "--quiet"],
                         cwd=tmp_path, capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    serial, serial_crc = _data(tmp_path / "serial.h5")
    for ranks in (1, 2, 3, 4):
        out = f"r{ranks}.h5"
        res = _mpi(ranks, ["ics", str(params), "--out", out, "--quiet"], tmp_path)
        assert res.returncode == 0, res.stderr
        data, crc = _data(tmp_path / out)
        for key in ("position", "velocity", "id"):
            np.testing.assert_array_equal(data[key], serial[key], err_msg=f"{key}, {ranks} ranks")
        assert crc == serial_crc  # combined from the parts (zlib crc32_combine)
        assert io_hdf5.verify_file(tmp_path / out, full=True) == []
        parts = sorted(p.name for p in tmp_path.glob(f"r{ranks}.part*"))
        assert len(parts) == (ranks if ranks > 1 else 0)


@needs_mpi
def test_missing_or_truncated_part_is_detected(tmp_path):
    params = _params(tmp_path, 32, 1)
    assert _mpi(2, ["ics", str(params), "--out", "d.h5", "--quiet"], tmp_path).returncode == 0
    part = tmp_path / "d.part0001-of-0002.h5"
    blob = part.read_bytes()
    part.write_bytes(blob[: len(blob) // 2])  # truncated
    problems = io_hdf5.verify_file(tmp_path / "d.h5", full=True)
    assert any("d.part0001-of-0002.h5" in p for p in problems)
    assert any("checksum mismatch" in p or "cannot be read" in p for p in problems)
    part.unlink()  # missing
    problems = io_hdf5.verify_file(tmp_path / "d.h5", full=True)
    assert any("missing part file" in p for p in problems)


_FAIL_ON_RANK_1 = textwrap.dedent("""
    import os, sys
    from icgen import io_input
    from icgen.errors import TableError
    real = io_input.spectrum_from_parameters
    def failing(params, bg):
        if os.environ.get("PMI_RANK") == "1":  # a table path that only this rank cannot open
            raise TableError("cannot read table /nonexistent/on/rank1.txt: No such file or directory")
        return real(params, bg)
    io_input.spectrum_from_parameters = failing
    from icgen.cli import main
    sys.exit(main(sys.argv[1:]))
""")


@needs_mpi
def test_an_error_on_one_rank_ends_every_rank_cleanly(tmp_path):
    params = _params(tmp_path, 32, 2)
    script = tmp_path / "fail.py"
    script.write_text(_FAIL_ON_RANK_1)
    cmd = [MPIEXEC, "-n", "3", sys.executable, str(script), "ics", str(params), "--out", "x.h5", "--quiet"]
    res = subprocess.run(cmd, cwd=tmp_path, capture_output=True, text=True, timeout=300)
    # Every rank exits with status 2 (mpiexec reports the worst exit status); one message, from rank 0.
    assert res.returncode == 2, (res.returncode, res.stderr)
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("icgen")]
    assert len(lines) == 1 and "rank 1 failed" in lines[0] and "rank1.txt" in lines[0]
    assert not list(tmp_path.glob("x*"))  # no output, no part, no temporary file


def test_crc32_combine_matches_zlib():
    # zlib's crc32_combine algorithm (used for the master file's checksums) against zlib.crc32.
    import zlib

    rng = np.random.default_rng(3)
    for la, lb in ((0, 7), (7, 0), (1, 1), (1000, 33), (12345, 100001)):
        a, b = rng.bytes(la), rng.bytes(lb)
        assert parallel.crc32_combine(zlib.crc32(a), zlib.crc32(b), lb) == zlib.crc32(a + b)


def test_decomposition_splits_evenly():
    from icgen.decomp import split

    for n, r in ((48, 4), (64, 3), (10, 10), (7, 2)):
        b = split(n, r)
        sizes = [y - x for x, y in b]
        assert b[0][0] == 0 and b[-1][1] == n and max(sizes) - min(sizes) <= 1
        assert all(b[i][1] == b[i + 1][0] for i in range(r - 1))
