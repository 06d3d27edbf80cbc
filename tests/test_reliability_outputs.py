"""Issue 8, outputs: full disks, interrupts, overwrites and bit-for-bit reruns.

(a) A full disk. In process, every byte HDF5 or the CSV writer sends goes through a file
    object that raises ``OSError(ENOSPC)`` once a byte limit is reached (HDF5 through
    h5py's file-object driver, CSV through ``np.savetxt`` on a limited handle), at limits
    that fall in the attributes, in the datasets and at the very end. In a subprocess, a
    real write failure from the kernel: RLIMIT_FSIZE makes write() fail with EFBIG (no
    root needed; Python ignores SIGXFSZ). Either way: exit 1, one line on stderr, no
    output and no temporary file.
(b) An interrupt: a 128^3 ``icgen ics`` in a subprocess gets SIGINT or SIGTERM while its
    temporary ``.NAME.*.partial`` file is being written: exit 130 or 143, one line on
    stderr, nothing left behind.
(c) An existing output is never replaced without --overwrite (ics, background, spectrum,
    schedule, advise-start, plots included), and is replaced with it.
(d) Reproducibility: rerunning from a file's stored ``parameters`` attribute, and
    changing NUMBA_NUM_THREADS (and --workers) from 1 to 2, give bit-identical datasets;
    the file stores created_by, the resolved cosmology, the parameters and the input
    table's SHA-256; ``verify_file(full=True)`` passes on it and flags a corrupted copy.
"""

import contextlib
import errno
import hashlib
import io
import json
import os
import resource
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

import icgen
from icgen import io_hdf5, parameters
from icgen.cli import main

REPO = Path(__file__).resolve().parents[1]
TABLE_PARAMS = REPO / "parameter_files" / "spectrum_from_table.toml"
SMALL = ["--set", "box.particles_per_side=16", "--set", "box.size=50.0"]


def run_cli(argv):
    """In-process ``icgen``: (exit status, stdout, stderr)."""
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def _one_line(stderr):
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr[-2000:]
    assert "Traceback" not in stderr
    return lines[0]


def _listing(d):
    """Every name in ``d`` and below (temporary files start with a dot: they count)."""
    return sorted(str(p.relative_to(d)) for p in Path(d).rglob("*"))


# ---- (a) a full disk ----------------------------------------------------------------------------

class FullDisk(io.RawIOBase):
    """A file that takes ``limit`` bytes, then fails every write with ENOSPC, as a full disk does."""

    def __init__(self, path, limit):
        self._f = open(path, "r+b")  # noqa: SIM115 - closed in close()
        self.limit = limit
        self.refused = 0

    def readable(self):
        return True

    def writable(self):
        return True

    def seekable(self):
        return True

    def readinto(self, b):
        return self._f.readinto(b)

    def seek(self, offset, whence=0):
        return self._f.seek(offset, whence)

    def tell(self):
        return self._f.tell()

    def _full(self):
        self.refused += 1
        return OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def truncate(self, size=None):
        if size is not None and size > self.limit:
            raise self._full()
        return self._f.truncate(size)

    def write(self, b):
        n = memoryview(b).nbytes
        if self._f.tell() + n > self.limit:
            raise self._full()
        return self._f.write(b)

    def flush(self):
        self._f.flush()

    def close(self):
        if not self.closed:
            self._f.close()
        super().close()


class FullDiskText:
    """A text handle for np.savetxt that fails with ENOSPC after ``limit`` characters."""

    def __init__(self, fh, limit):
        self.fh, self.limit, self.written = fh, limit, 0

    def write(self, s):
        if self.written + len(s) > self.limit:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self.written += len(s)
        return self.fh.write(s)


@pytest.fixture
def full_disk(monkeypatch):
    """Make every HDF5 file opened for writing, and every np.savetxt, hit a full disk.

    Yields a dict; set its "limit" (bytes) before writing; "files" collects the FullDisk
    objects so a test can check that the limit was actually reached.
    """
    state = {"limit": 0, "files": []}
    real_file, real_savetxt = h5py.File, np.savetxt

    def file(name, mode="r", *args, **kwargs):
        if mode in ("w", "w-", "x") and isinstance(name, (str, os.PathLike)):
            Path(name).touch()
            fobj = FullDisk(name, state["limit"])
            state["files"].append(fobj)
            return real_file(fobj, mode, *args, **kwargs)
        return real_file(name, mode, *args, **kwargs)

    def savetxt(fname, X, *args, **kwargs):
        with open(fname, "w") as fh:
            limited = FullDiskText(fh, state["limit"])
            state["files"].append(limited)
            return real_savetxt(limited, X, *args, **kwargs)

    monkeypatch.setattr(h5py, "File", file)
    monkeypatch.setattr(np, "savetxt", savetxt)
    return state


#: Size of the 16^3 particle file (positions, velocities float32 and ids), for the limits.
N16_DATA = 16**3 * (12 + 12 + 8)


@pytest.mark.parametrize("limit", [0, 800, 4000, 20_000, N16_DATA // 2, N16_DATA])
def test_full_disk_during_ics_leaves_nothing(tmp_path, full_disk, limit):
    full_disk["limit"] = limit
    out = tmp_path / "ics.h5"
    code, stdout, stderr = run_cli(["ics", "--out", str(out), "--quiet"] + SMALL)
    line = _one_line(stderr)
    assert code == 1, stderr
    assert line.startswith("icgen ics: error: could not read or write")
    assert "No space left on device" in line and "no partial output was left behind" in line
    assert any(getattr(f, "refused", 0) for f in full_disk["files"])   # the disk did fill up
    assert _listing(tmp_path) == []


@pytest.mark.parametrize("limit", [0, 5000, N16_DATA // 2])
def test_full_disk_in_the_writer_thread_leaves_nothing(tmp_path, monkeypatch, limit):
    """The particle data go to their allocated offsets with os.pwrite from a worker thread
    (io_hdf5._BlockWriter, from the lanes of io_hdf5._write_field); a disk that fills up there must end the run as any other write
    failure does: exit 1, one line naming the file and ENOSPC, nothing left behind."""
    real_pwrite, state = os.pwrite, {"written": 0, "refused": 0}

    def pwrite(fd, data, offset):
        n = memoryview(data).nbytes
        if state["written"] + n > limit:
            state["refused"] += 1
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        state["written"] += n
        return real_pwrite(fd, data, offset)

    monkeypatch.setattr(os, "pwrite", pwrite)
    out = tmp_path / "ics.h5"
    code, stdout, stderr = run_cli(["ics", "--out", str(out), "--quiet"] + SMALL)
    line = _one_line(stderr)
    assert code == 1, stderr
    assert line.startswith("icgen ics: error: could not read or write"), line
    assert "No space left on device" in line and "no partial output was left behind" in line
    assert state["refused"] == 1            # the first refusal ended the run
    assert _listing(tmp_path) == []


@pytest.mark.parametrize("command, out_name, limit", [
    ("background", "bg.csv", 0), ("background", "bg.csv", 500), ("background", "bg.csv", 20_000),
    ("background", "bg.h5", 0), ("background", "bg.h5", 3000), ("background", "bg.h5", 30_000),
    ("spectrum", "pk.csv", 1000), ("spectrum", "pk.h5", 10_000),
    ("advise-start", "advice.csv", 100),
])
def test_full_disk_during_tables_leaves_nothing(tmp_path, full_disk, command, out_name, limit):
    full_disk["limit"] = limit
    extra = SMALL if command == "advise-start" else []
    code, stdout, stderr = run_cli([command, "--out", str(tmp_path / out_name)] + extra)
    line = _one_line(stderr)
    assert code == 1, stderr
    assert "No space left on device" in line and "no partial output was left behind" in line
    assert _listing(tmp_path) == []


def test_full_disk_during_schedule_leaves_no_file(tmp_path, full_disk):
    out = tmp_path / "sched"
    for fmt, limit in (("csv", 100), ("hdf5", 100), ("hdf5", 5000)):
        full_disk["limit"] = limit
        code, stdout, stderr = run_cli(["schedule", "--out-dir", str(out), "--format", fmt])
        line = _one_line(stderr)
        assert code == 1 and "No space left on device" in line, stderr
        # the directory was made for the outputs; nothing is in it, not even the staging directory
        assert _listing(tmp_path) == ["sched"]


def _limited(limit_bytes):
    def preexec():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit_bytes, limit_bytes))
    return preexec


@pytest.mark.parametrize("argv, name", [
    (["ics", "--quiet", "--set", "box.particles_per_side=32", "--set", "box.size=50.0"], "ics.h5"),
    (["background", "--points", "100000"], "bg.h5"),
    (["spectrum", "--points", "100000"], "pk.csv"),
])
def test_real_write_failure_in_a_subprocess(tmp_path, argv, name):
    """A real failing write(): RLIMIT_FSIZE of 256 KiB (bigger than any cache file the run
    writes, smaller than the output), so the kernel refuses the output's bytes with EFBIG."""
    out = tmp_path / "out"
    out.mkdir()
    res = subprocess.run([sys.executable, "-m", "icgen.cli", *argv, "--out", str(out / name)],
                         preexec_fn=_limited(256 * 1024), capture_output=True, text=True, timeout=300)
    line = _one_line(res.stderr)
    assert res.returncode == 1, res.stderr
    assert "could not read or write" in line and os.strerror(errno.EFBIG) in line
    assert "no partial output was left behind" in line
    assert _listing(out) == []


# ---- (b) interrupts -----------------------------------------------------------------------------

#: Runs ``icgen`` with io_hdf5.checksum slowed by 0.5 s a call (its values unchanged): the
#: write phase of a 128^3 file then lasts seconds instead of a fraction of one, so the
#: signal reliably lands while the temporary file is being written.
SLOW_WRITE = """
import os, sys, time
import icgen.io_hdf5 as h
_checksum = h.checksum
def checksum(*args, **kwargs):
    with open(os.environ["ICGEN_TEST_WRITES"], "a") as log:  # one line per block written
        log.write("block\\n")
    time.sleep(0.5)
    return _checksum(*args, **kwargs)
h.checksum = checksum
from icgen.cli import main
sys.exit(main(sys.argv[1:]))
"""


def _default_signals():
    # as in an interactive shell (a shell's background jobs may start with SIGINT ignored)
    signal.signal(signal.SIGINT, signal.SIG_DFL)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)


@pytest.mark.parametrize("signum, status, word", [(signal.SIGINT, 130, "interrupted"),
                                                   (signal.SIGTERM, 143, "terminated (SIGTERM)")])
def test_interrupt_128_cubed_mid_write(tmp_path, signum, status, word):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    out = out_dir / "ics128.h5"
    n = 128
    # The file is allocated at its full size before any particle is written (io_hdf5), so its
    # size says nothing; the slowed checksum logs each block instead. 128^3 makes 6 blocks of
    # 2^20 rows (positions, velocities, ids: 2 each), each held 0.5 s.
    writes = tmp_path / "writes.log"
    blocks_total = 6
    proc = subprocess.Popen(
        [sys.executable, "-c", SLOW_WRITE, "ics", "--out", str(out), "--quiet",
         "--set", f"box.particles_per_side={n}", "--set", "box.size=200.0", "--workers", "2"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, preexec_fn=_default_signals,
        env=dict(os.environ, ICGEN_TEST_WRITES=str(writes)))
    try:
        blocks, t0 = 0, time.monotonic()
        while time.monotonic() - t0 < 300:
            with contextlib.suppress(FileNotFoundError):
                blocks = writes.read_text().count("block")
            if blocks >= 1 and list(out_dir.glob(".ics128.h5.*.partial")):   # data are being written
                break
            if proc.poll() is not None:
                break
            time.sleep(0.005)
        assert proc.poll() is None, f"finished before the signal: {proc.communicate()}"
        assert 0 < blocks < blocks_total, blocks   # mid-write: some but not all of the data
        proc.send_signal(signum)
        stdout, stderr = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == status, stderr
    line = _one_line(stderr)
    assert line == f"icgen ics: {word}; no partial output was left behind"
    assert stdout == ""
    assert _listing(out_dir) == []


def test_interrupt_in_process_during_write_cleans_up(tmp_path, monkeypatch):
    """The same in process, for SIGTERM's exception (Terminated) and Ctrl-C's (KeyboardInterrupt),
    raised from inside the dataset writes."""
    from icgen.cli import Terminated

    real = io_hdf5.checksum
    for exc, status in ((KeyboardInterrupt, 130), (Terminated, 143)):
        calls = {"n": 0}

        def checksum(*args, _exc=exc, _calls=calls, **kwargs):
            _calls["n"] += 1
            if _calls["n"] == 2:
                raise _exc()
            return real(*args, **kwargs)

        monkeypatch.setattr(io_hdf5, "checksum", checksum)
        code, _, stderr = run_cli(["ics", "--out", str(tmp_path / "x.h5"), "--quiet"] + SMALL)
        assert code == status and "no partial output was left behind" in _one_line(stderr)
        assert _listing(tmp_path) == []


# ---- (c) no overwrite without --overwrite -------------------------------------------------------

SENTINEL = "an existing file that must survive\n"


def _refused(argv, existing, untouched_dir):
    before = _listing(untouched_dir)
    code, stdout, stderr = run_cli(argv)
    line = _one_line(stderr)
    assert code == 2, stderr
    assert f"output {existing} exists; pass --overwrite to replace it" in line
    assert existing.read_text() == SENTINEL
    assert _listing(untouched_dir) == before   # nothing else written, no temporary left


@pytest.mark.parametrize("command, out_name, extra", [
    ("ics", "ics.h5", ["--quiet"] + SMALL),
    ("background", "bg.csv", []),
    ("background", "bg.h5", []),
    ("spectrum", "pk.csv", []),
    ("spectrum", "pk.h5", []),
    ("advise-start", "advice.csv", SMALL),
])
def test_existing_output_needs_overwrite(tmp_path, command, out_name, extra):
    out = tmp_path / out_name
    out.write_text(SENTINEL)
    _refused([command, "--out", str(out)] + extra, out, tmp_path)
    code, _, stderr = run_cli([command, "--out", str(out), "--overwrite"] + extra)
    assert code == 0, stderr
    assert out.read_bytes() != SENTINEL.encode()
    if out.suffix == ".h5":
        with h5py.File(out, "r") as f:
            assert "created_by" in f.attrs or "format" in f.attrs
    if command == "ics":
        assert io_hdf5.verify_file(out, full=True) == []
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize("command", ["background", "spectrum"])
def test_existing_plot_is_refused_before_the_table_is_written(tmp_path, command):
    plot = tmp_path / "plot.png"
    plot.write_text(SENTINEL)
    _refused([command, "--out", str(tmp_path / "table.csv"), "--plot", str(plot)], plot, tmp_path)
    assert not (tmp_path / "table.csv").exists()


def test_existing_schedule_outputs_need_overwrite(tmp_path):
    out = tmp_path / "sched"
    out.mkdir()
    existing = out / "outputs.csv"
    existing.write_text(SENTINEL)
    _refused(["schedule", "--out-dir", str(out)], existing, tmp_path)
    assert _listing(out) == ["outputs.csv"]
    code, _, stderr = run_cli(["schedule", "--out-dir", str(out), "--overwrite"])
    assert code == 0, stderr
    assert _listing(out) == ["output_scale_factors.txt", "outputs.csv", "steps.csv"]
    assert existing.read_text() != SENTINEL


# ---- (d) reproducibility and provenance ---------------------------------------------------------

def _ics_subprocess(params, out, threads, extra=()):
    env = dict(os.environ, NUMBA_NUM_THREADS=str(threads), OMP_NUM_THREADS=str(threads))
    res = subprocess.run([sys.executable, "-m", "icgen.cli", "ics", str(params), "--out", str(out),
                          "--quiet", "--workers", str(threads), *extra],
                         env=env, capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr
    return res


def _datasets(path):
    with h5py.File(path, "r") as f:
        return {name: f["particles"][name][...] for name in f["particles"]}


def _attrs(path):
    with h5py.File(path, "r") as f:
        return {k: (v.decode() if isinstance(v, bytes) else v) for k, v in f.attrs.items()}


def _same_bits(a, b):
    return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()


@pytest.fixture(scope="module")
def table_run(tmp_path_factory):
    """One 32^3 run from a P(k) table, one thread; its stored parameters written out."""
    d = tmp_path_factory.mktemp("repro")
    first = d / "first.h5"
    _ics_subprocess(TABLE_PARAMS, first, 1,
                    ["--set", "box.particles_per_side=32", "--set", "box.size=100.0",
                     "--set", "phases.seed=8"])
    stored = d / "stored.toml"
    stored.write_text(_attrs(first)["parameters"])
    return d, first, stored


def test_provenance_stored_in_the_particle_file(table_run):
    d, first, stored = table_run
    a = _attrs(first)
    assert a["created_by"] == f"icgen {icgen.__version__}"
    params = parameters.load(stored)
    # the resolved cosmology (every parameter and the derived densities) as JSON
    assert json.loads(a["cosmology"]) == params.cosmology.as_dict()
    assert params.get("spectrum", "source") == "table"
    table = params.path("spectrum", "table")
    assert table.is_absolute() and table == (REPO / "parameter_files" / "planck18_camb_pk_z0.txt").resolve()
    assert a["input_table"] == str(table)
    assert a["input_table_sha256"] == hashlib.sha256(table.read_bytes()).hexdigest()
    assert params.get("box", "particles_per_side") == 32 and params.get("phases", "seed") == 8
    assert io_hdf5.verify_file(first, full=True) == []


def test_rerun_from_stored_parameters_and_other_thread_count_is_bit_identical(table_run):
    d, first, stored = table_run
    other_threads = d / "two_threads.h5"
    _ics_subprocess(TABLE_PARAMS, other_threads, 2,
                    ["--set", "box.particles_per_side=32", "--set", "box.size=100.0",
                     "--set", "phases.seed=8"])
    rerun = d / "rerun.h5"
    _ics_subprocess(stored, rerun, 2)   # nothing but the stored parameters
    ref = _datasets(first)
    assert set(ref) == {"position", "velocity", "id"}
    for other in (other_threads, rerun):
        data = _datasets(other)
        assert set(data) == set(ref)
        for name in ref:
            assert _same_bits(ref[name], data[name]), (other.name, name)
        # and every root attribute, the stored parameters included (a fixed point)
        assert _attrs(other) == _attrs(first), other.name
        assert io_hdf5.verify_file(other, full=True) == []


@pytest.mark.parametrize("name", ["position", "velocity", "id"])
def test_verify_file_flags_a_corrupted_copy(table_run, tmp_path, name):
    d, first, _ = table_run
    bad = tmp_path / "corrupt.h5"
    shutil.copyfile(first, bad)
    with h5py.File(bad, "r") as f:
        ds = f["particles"][name]
        offset = ds.id.get_offset()           # contiguous layout: the values start here
        nbytes = ds.size * ds.dtype.itemsize
    assert offset is not None
    with open(bad, "r+b") as fh:             # flip one bit in the middle of the values
        fh.seek(offset + nbytes // 2)
        b = fh.read(1)
        fh.seek(offset + nbytes // 2)
        fh.write(bytes([b[0] ^ 0x10]))
    problems = io_hdf5.verify_file(bad, full=True)
    assert len(problems) == 1 and f"/particles/{name}: checksum mismatch" in problems[0], problems
    assert io_hdf5.verify_file(bad, full=False) == []   # only full=True reads the values


def test_verify_file_on_truncated_and_foreign_files(table_run, tmp_path):
    d, first, _ = table_run
    cut = tmp_path / "cut.h5"
    cut.write_bytes(first.read_bytes()[: first.stat().st_size // 2])
    problems = io_hdf5.verify_file(cut, full=True)
    assert problems and any("cannot open" in p or "checksum" in p or "shape" in p for p in problems)
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["x"] = np.arange(3)
    problems = io_hdf5.verify_file(other, full=True)
    assert any("format attribute" in p for p in problems) and any("missing" in p for p in problems)


def test_table_outputs_store_version_cosmology_and_parameters(tmp_path):
    """HDF5 tables of background and spectrum carry the same provenance (CSV holds one header
    line only, by design)."""
    for command in ("background", "spectrum"):
        out = tmp_path / f"{command}.h5"
        code, _, stderr = run_cli([command, str(TABLE_PARAMS), "--out", str(out)])
        assert code == 0, stderr
        a = _attrs(out)
        params = parameters.loads(a["parameters"])
        assert a["created_by"] == f"icgen {icgen.__version__}"
        assert json.loads(a["cosmology"]) == params.cosmology.as_dict()


def test_spectrum_output_from_a_table_stores_its_sha256(tmp_path):
    out = tmp_path / "pk.h5"
    code, _, stderr = run_cli(["spectrum", str(TABLE_PARAMS), "--out", str(out)])
    assert code == 0, stderr
    table = REPO / "parameter_files" / "planck18_camb_pk_z0.txt"
    assert _attrs(out).get("input_table_sha256") == hashlib.sha256(table.read_bytes()).hexdigest()
