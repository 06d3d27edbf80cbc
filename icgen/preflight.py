"""Memory and disk preflight: will a run fit, before any work is done?

Peak resident memory of ``icgen ics`` is modelled as a fixed runtime base plus a
number of bytes per particle that depends on the LPT order and the precision:

    peak = BASE_BYTES + lanes * lane_bytes(precision) + bytes_per_particle(order, precision) * N^3 / R

with R MPI ranks and ``lanes`` blocks of particles made side by side
(:func:`icgen.io_hdf5._write_field`; one per core, at most :data:`MAX_LANES`). The
per-particle figures count the arrays alive at the peak of :func:`icgen.lpt.output_fields`
(see :func:`bytes_per_particle`) and were checked against measured peaks on 2 cores in
float32: 246, 423 and 884 MB in first order and 262, 543 and 1320 MB in second order for
128^3, 256^3 and 384^3 (model: 282, 476, 994 and 290, 610, 1447 MB). The output file holds
positions and velocities (3 values each) and optionally 8-byte ids per particle.
"""

import shutil
from pathlib import Path

from .errors import InputError

__all__ = ["BASE_BYTES", "BLOCK_ROWS", "MAX_LANES", "lanes", "lane_bytes", "bytes_per_particle", "peak_memory", "file_size", "available_memory",
           "largest_grid", "check", "parse_size"]

import os

#: Resident memory of the Python runtime with numpy, scipy, h5py and the compiled kernels
#: (measured 177 MB serial and 196 MB per MPI rank, with mpi4py and MPICH).
BASE_BYTES = 220 * 2**20

#: Rows of particles per block of the streamed output (whole planes of the grid, at least one).
BLOCK_ROWS = 1 << 19

#: Most blocks made side by side (one lane per core up to this).
MAX_LANES = 8


def lanes(workers=None):
    """Lanes of the streamed output for ``workers`` FFT threads (default: every core)."""
    return max(1, min(MAX_LANES, workers or os.cpu_count() or 1))


def lane_bytes(precision):
    """Buffers of one lane: a block of positions and one of velocities (3 values per row each)
    and the block's three real components: 9 words per row of :data:`BLOCK_ROWS`."""
    return 9 * (4 if precision == "float32" else 8) * BLOCK_ROWS


def bytes_per_particle(order, precision, distributed=False):
    """Array bytes per particle at the peak (model in the module notes).

    In words of 4 bytes (float32) or 8 (float64) per particle, with a half spectrum
    counting one word (N^2 (N/2 + 1) complex values for N^3 particles). First order:
    3 (the three components' half spectra, the modes' memory reused for the last one);
    second order: 5 (the modes, the 2LPT source spectrum and the three components of
    a field). A quarter word more is kept as a margin. Measured slopes between 256^3
    and 384^3 in float32: 11.9 and 20.0 bytes per particle (13 and 21 in the model).
    A distributed run holds a transform's input and output during each transpose, one
    word more (512^3 on 2 ranks: 15.8 and 24.8 bytes per particle of its slab beyond a
    rank's runtime); a quarter word more is kept for ranks with one plane more than
    the average.
    """
    word = 4 if precision == "float32" else 8
    words = (3.25 if order == 1 else 5.25) + (1.25 if distributed else 0.0)
    return word * words


def peak_memory(n, order, precision, ranks=1, workers=None):
    """Modelled peak resident memory in bytes, per rank (``workers``: FFT threads, see :func:`lanes`)."""
    return (BASE_BYTES + lanes(workers) * lane_bytes(precision)
            + bytes_per_particle(order, precision, ranks > 1) * n**3 / ranks)


def file_size(n, precision, write_ids):
    """Bytes of the particle file's datasets (positions, velocities, ids)."""
    word = 4 if precision == "float32" else 8
    return n**3 * (6 * word + (8 if write_ids else 0))


def available_memory():
    """Memory the system can give this process now (MemAvailable of /proc/meminfo), in bytes, or None."""
    try:
        with open("/proc/meminfo") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:  # pragma: no cover - not Linux
        return None
    return None  # pragma: no cover


def largest_grid(limit, order, precision, ranks=1, workers=None):
    """Largest even N whose modelled peak stays within ``limit`` bytes (0 if none)."""
    per = bytes_per_particle(order, precision, ranks > 1) / ranks
    base = BASE_BYTES + lanes(workers) * lane_bytes(precision)
    if limit <= base:
        return 0
    n = int(((limit - base) / per) ** (1 / 3))
    n -= n % 2
    while n >= 4 and base + per * n**3 > limit:
        n -= 2
    return max(n, 0)


def check(n, order, precision, write_ids, out, ranks=1, max_memory=None, ranks_here=1, workers=None):
    """Refuse a run that would not fit in memory or on disk (before any work).

    Parameters
    ----------
    n, order, precision, write_ids
        The grid and output settings.
    out : str or Path
        The output file (its file system is checked for room).
    ranks : int
        MPI ranks sharing the grid (the model is per rank).
    ranks_here : int
        Ranks on this node, sharing its memory.
    workers : int, optional
        FFT threads per process (default every core); sets the lanes (:func:`lanes`).
    max_memory : float, optional
        A limit in bytes (``--max-memory``); default: the memory available now.

    Raises
    ------
    InputError
        Naming the estimate, the limit and the largest grid that would fit.
    """
    need = peak_memory(n, order, precision, ranks, workers)
    limit = max_memory if max_memory is not None else available_memory()
    if limit is not None and max_memory is None:
        limit /= ranks_here
    if limit is not None and need > limit:
        what = "--max-memory" if max_memory is not None else "the memory available now"
        raise InputError(
            f"{n}^3 particles at order {order} in {precision} need about {need / 2**30:.1f} GiB per process "
            f"(model in icgen.preflight), more than {what} ({limit / 2**30:.1f} GiB); the largest grid "
            f"that fits is {largest_grid(limit, order, precision, ranks, workers)}^3")
    size = file_size(n, precision, write_ids)
    folder = Path(out).resolve().parent
    if folder.is_dir():
        free = shutil.disk_usage(folder).free
        if size > free:
            raise InputError(
                f"the output needs about {size / 2**30:.1f} GiB but {folder} has {free / 2**30:.1f} GiB free; "
                "free some space, choose another --out, or set [output] write_ids = false "
                f"(saves {n**3 * 8 / 2**30:.1f} GiB)")
    return need, size


def parse_size(text):
    """Bytes from a size such as "20G", "512M", "1.5GiB" or a plain number of bytes."""
    units = {"": 1, "B": 1, "K": 2**10, "KB": 2**10, "KIB": 2**10, "M": 2**20, "MB": 2**20, "MIB": 2**20,
             "G": 2**30, "GB": 2**30, "GIB": 2**30, "T": 2**40, "TB": 2**40, "TIB": 2**40}
    t = str(text).strip().upper()
    num = t.rstrip("KMGTIB")
    unit = t[len(num):]
    try:
        value = float(num)
    except ValueError:
        value = -1.0
    if unit not in units or not value > 0:
        raise InputError(f"--max-memory = {text!r}: expected a positive size such as 20G or 512M")
    return value * units[unit]

