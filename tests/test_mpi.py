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


def _failing_run(tmp_path, script_text, out, extra=(), status=2):
    """Run ``icgen ics`` (32^3, second order) on 3 ranks through a script that makes one rank
    fail; check every rank ended with ``status`` and return the single ``icgen`` message line."""
    params = _params(tmp_path, 32, 2)
    script = tmp_path / "fail.py"
    script.write_text(script_text)
    cmd = [MPIEXEC, "-n", "3", sys.executable, str(script), "ics", str(params), "--out", out, "--quiet", *extra]
    res = subprocess.run(cmd, cwd=tmp_path, capture_output=True, text=True, timeout=300)
    # mpiexec reports the worst exit status of the ranks
    assert res.returncode == status, (res.returncode, res.stderr)
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("icgen")]
    assert len(lines) == 1, res.stderr  # one message, from rank 0
    return lines[0]


def _serial(tmp_path, n, order):
    """The parameter file and the serial run's data and checksums (the reference)."""
    params = _params(tmp_path, n, order)
    res = subprocess.run([sys.executable, "-m", "icgen.cli", "ics", str(params), "--out", "serial.h5", "--quiet"],
                         cwd=tmp_path, capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    return (params,) + _data(tmp_path / "serial.h5")


@needs_mpi
@pytest.mark.parametrize("n,order", [(64, 1), (64, 2), (48, 1), (48, 2)])
def test_distributed_runs_are_bit_identical_to_serial(tmp_path, n, order):
    params, serial, serial_crc = _serial(tmp_path, n, order)
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
    line = _failing_run(tmp_path, _FAIL_ON_RANK_1, "x.h5", status=2)  # every rank exits with status 2
    assert "rank 1 failed" in line and "rank1.txt" in line
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


# ---- --single-file: one file written collectively (parallel HDF5) --------------------------------------

H5PY_MPI = h5py.get_config().mpi
needs_parallel_h5py = pytest.mark.skipif(not H5PY_MPI, reason="h5py is not built with MPI (parallel HDF5); "
                                         "see the README's MPI section")


def _leftovers(tmp_path, stem):
    """Files named after an output stem: the output, its parts and its temporary files (".NAME.*.partial")."""
    return sorted(p.name for p in tmp_path.iterdir() if p.name.lstrip(".").startswith(stem + "."))


@needs_mpi
@pytest.mark.skipif(H5PY_MPI, reason="h5py is built with MPI here, so --single-file is not refused")
def test_single_file_is_refused_without_parallel_h5py(tmp_path):
    # Project rule: bad input gets one line naming the option, exit status 2, before any file is written.
    params = _params(tmp_path, 32, 1)
    res = _mpi(2, ["ics", str(params), "--out", "s.h5", "--quiet", "--single-file"], tmp_path)
    assert res.returncode == 2, (res.returncode, res.stderr)
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("icgen")]
    assert len(lines) == 1 and "--single-file" in lines[0] and "h5py built with MPI" in lines[0], res.stderr
    assert _leftovers(tmp_path, "s") == []  # no output, no part, no temporary file


def test_single_file_is_refused_without_an_mpi_launcher(tmp_path):
    # Project rule as above: the option only means something under mpiexec, so a plain run refuses it.
    params = _params(tmp_path, 16, 1)
    env = {k: v for k, v in os.environ.items() if k not in parallel._SIZE_VARIABLES}
    res = subprocess.run([sys.executable, "-m", "icgen.cli", "ics", str(params), "--out", "s.h5", "--quiet",
                          "--single-file"], cwd=tmp_path, capture_output=True, text=True, env=env)
    assert res.returncode == 2, (res.returncode, res.stderr)
    assert res.stderr.count("\n") == 1 and "--single-file" in res.stderr and "MPI" in res.stderr, res.stderr
    assert _leftovers(tmp_path, "s") == []


@needs_mpi
@needs_parallel_h5py
@pytest.mark.parametrize("n,order", [(64, 1), (64, 2), (48, 1), (48, 2)])
def test_single_file_runs_are_bit_identical_to_serial(tmp_path, n, order):
    # Reference: the serial writer (icgen.io_hdf5.write_particles_streamed) on the same parameters;
    # the collective file must hold the same bytes in every dataset, the same attributes and checksums.
    params, serial, serial_crc = _serial(tmp_path, n, order)

    def layout(ds):  # how the dataset is stored: type, chunking, storage, allocation and fill times
        dcpl = ds.id.get_create_plist()
        return ds.dtype.str, ds.chunks, dcpl.get_layout(), dcpl.get_alloc_time(), dcpl.get_fill_time()

    with h5py.File(tmp_path / "serial.h5", "r") as f:
        serial_attrs = dict(f.attrs)
        serial_ds = {k: (layout(f[f"particles/{k}"]), dict(f[f"particles/{k}"].attrs))
                     for k in ("position", "velocity", "id")}
    for ranks in (1, 2, 3, 4):
        out = f"c{ranks}.h5"
        res = _mpi(ranks, ["ics", str(params), "--out", out, "--quiet", "--single-file"], tmp_path)
        assert res.returncode == 0, res.stderr
        data, crc = _data(tmp_path / out)
        for key in ("position", "velocity", "id"):
            np.testing.assert_array_equal(data[key], serial[key], err_msg=f"{key}, {ranks} ranks")
            assert data[key].tobytes() == serial[key].tobytes()  # bit for bit (-0.0 is not 0.0 here)
        assert crc == serial_crc  # combined from the ranks' CRCs (zlib crc32_combine)
        with h5py.File(tmp_path / out, "r") as f:
            attrs = dict(f.attrs)
            assert attrs.keys() == serial_attrs.keys()  # no part_files: a plain file
            for key, value in serial_attrs.items():
                assert np.array_equal(attrs[key], value), key
            for key, (ds_layout, ds_attrs) in serial_ds.items():
                ds = f[f"particles/{key}"]
                assert not ds.is_virtual and layout(ds) == ds_layout, key
                assert dict(ds.attrs) == ds_attrs, key
        assert io_hdf5.verify_file(tmp_path / out, full=True) == []
        assert _leftovers(tmp_path, f"c{ranks}") == [out]  # no part files, no temporary file
    res = subprocess.run([sys.executable, "-m", "icgen.cli", "inspect", "c4.h5"], cwd=tmp_path,
                         capture_output=True, text=True)
    assert res.returncode == 0 and "verdict: PASS" in res.stdout, res.stdout + res.stderr


_WRITE_FAILS_ON_RANK_1 = textwrap.dedent("""
    import errno, os, sys
    import h5py
    real = h5py.Dataset.__setitem__
    def failing(self, key, value):
        if os.environ.get("PMI_RANK") == "1" and self.name == "/particles/velocity":
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(self, key, value)
    h5py.Dataset.__setitem__ = failing
    from icgen.cli import main
    sys.exit(main(sys.argv[1:]))
""")


@needs_mpi
@needs_parallel_h5py
def test_single_file_write_error_on_one_rank_ends_every_rank_cleanly(tmp_path):
    # A failed write on one rank (disk full, simulated) must not leave the others waiting in a collective
    # call: every rank ends with the I/O-error status (1) and no file is left.
    line = _failing_run(tmp_path, _WRITE_FAILS_ON_RANK_1, "w.h5", ["--single-file"], status=1)
    assert "no partial output" in line
    assert _leftovers(tmp_path, "w") == []


_PWRITE_FAILS_ON_RANK_1 = textwrap.dedent("""
    import errno, os, sys
    real = os.pwrite
    def failing(fd, data, offset):
        if os.environ.get("PMI_RANK") == "1":
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(fd, data, offset)
    os.pwrite = failing
    import icgen.io_hdf5
    icgen.io_hdf5._BLOCK_ROWS = 1024  # many blocks per field, so the failure surfaces mid-field
    from icgen.cli import main
    sys.exit(main(sys.argv[1:]))
""")


_PART_FILE_CANNOT_BE_MADE_ON_RANK_1 = textwrap.dedent("""
    import errno, os, sys
    import h5py
    real = h5py.File
    def failing(name, mode="r", *args, **kwargs):
        if os.environ.get("PMI_RANK") == "1" and mode == "w":
            raise OSError(errno.EACCES, "Permission denied")
        return real(name, mode, *args, **kwargs)
    h5py.File = failing
    from icgen.cli import main
    sys.exit(main(sys.argv[1:]))
""")


@needs_mpi
def test_part_file_that_cannot_be_made_on_one_rank_ends_every_rank_cleanly(tmp_path):
    # The fields are computed as the part files are written; rank 1 cannot even make its part
    # file, so it never starts on its fields. It must still take part in their transforms
    # (io_hdf5.write_particles_parts drains them), or the other ranks wait in a transpose
    # for ever. Every rank ends with the I/O-error status 1, one message, nothing left.
    line = _failing_run(tmp_path, _PART_FILE_CANNOT_BE_MADE_ON_RANK_1, "w.h5", status=1)
    assert "Permission denied" in line and "no partial output" in line
    assert _leftovers(tmp_path, "w") == []


@needs_mpi
def test_part_file_write_error_on_one_rank_ends_every_rank_cleanly(tmp_path):
    # Second order: after the positions are written come the velocity transforms, which need
    # every rank. Rank 1's first write fails (a full disk, simulated); it must keep taking part
    # in those transforms (io_hdf5._stream_fields), so no rank hangs (without that, this run
    # hung until killed: checked by hand once), every rank ends with the
    # I/O-error status 1, one message, and no file of any kind is left.
    line = _failing_run(tmp_path, _PWRITE_FAILS_ON_RANK_1, "w.h5", status=1)
    assert "No space left on device" in line and "no partial output" in line
    assert _leftovers(tmp_path, "w") == []


@needs_mpi
def test_compressed_part_files_hold_the_serial_values(tmp_path):
    # [output] compression applies to every part file; the master's virtual datasets read them as usual.
    params, serial, serial_crc = _serial(tmp_path, 32, 2)
    gz = ["--set", "output.compression=gzip", "--set", "output.fletcher32=true"]
    res = _mpi(2, ["ics", str(params), "--out", "gz.h5", "--quiet"] + gz, tmp_path)
    assert res.returncode == 0, res.stderr
    data, crc = _data(tmp_path / "gz.h5")
    for k in serial:
        np.testing.assert_array_equal(data[k], serial[k])
    assert crc == serial_crc
    with h5py.File(tmp_path / "gz.part0001-of-0002.h5") as f:
        assert f["particles/position"].compression == "gzip" and f["particles/position"].fletcher32
    assert io_hdf5.verify_file(tmp_path / "gz.h5", full=True) == []
