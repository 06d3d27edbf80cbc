"""Running under MPI: detecting the launcher, agreeing on errors, combining checksums.

icgen runs serially unless it was started by an MPI launcher with more than one
rank (``mpiexec -n R icgen ...``); only then is mpi4py imported (it is an optional
dependency, ``pip install icgen[mpi]``).
"""

import os

from .errors import InputError

__all__ = ["launched_size", "launched_by_mpi", "launched_rank", "world", "shared_memory_type", "agree", "crc32_combine", "RankError"]

#: Environment variables through which MPI launchers announce the number of ranks
#: (MPICH/Hydra and Intel MPI: PMI_SIZE; Open MPI: OMPI_COMM_WORLD_SIZE; Slurm: PMI/PMIX).
_SIZE_VARIABLES = ("PMI_SIZE", "OMPI_COMM_WORLD_SIZE", "PMIX_SIZE", "MV2_COMM_WORLD_SIZE")


def launched_size():
    """Number of ranks the launcher announced (1 when not launched by MPI)."""
    for var in _SIZE_VARIABLES:
        value = os.environ.get(var)
        if value and value.isdigit():
            return int(value)
    return 1


def launched_by_mpi():
    """True when an MPI launcher started this process (even as a single rank, ``mpiexec -n 1``)."""
    return any(var in os.environ for var in _SIZE_VARIABLES)


_RANK_VARIABLES = ("PMI_RANK", "OMPI_COMM_WORLD_RANK", "PMIX_RANK", "MV2_COMM_WORLD_RANK")


def launched_rank():
    """This process's rank as the launcher announced it (0 when not launched by MPI)."""
    for var in _RANK_VARIABLES:
        value = os.environ.get(var)
        if value and value.isdigit():
            return int(value)
    return 0


def world():
    """mpi4py's COMM_WORLD when launched on several ranks, else None."""
    if launched_size() <= 1:
        return None
    try:
        from mpi4py import MPI
    except ImportError as exc:  # pragma: no cover - depends on the environment
        raise InputError("started by an MPI launcher with several ranks but mpi4py is not installed; "
                         "pip install 'icgen[mpi]' (mpi4py and an MPI library)") from exc
    comm = MPI.COMM_WORLD
    return comm if comm.Get_size() > 1 else None


def shared_memory_type():
    """MPI.COMM_TYPE_SHARED (for splitting a communicator into the ranks of one node)."""
    from mpi4py import MPI

    return MPI.COMM_TYPE_SHARED


class RankError(InputError):
    """Another rank failed; carries that rank's message."""


def agree(comm, error):
    """Collective: every rank learns whether any rank failed, and all raise the first failure.

    Parameters
    ----------
    comm : mpi4py communicator or None
    error : BaseException or None
        This rank's failure, if any.

    Raises
    ------
    The original exception on the failing rank, and on every other rank an
    exception of the same family (InputError -> RankError, OSError -> OSError)
    naming the rank and its message, so every rank ends with the same exit status.
    """
    if comm is None:
        if error is not None:
            raise error
        return
    report = None if error is None else (type(error).__name__, str(error), isinstance(error, OSError))
    reports = comm.allgather(report)
    failed = [(r, rep) for r, rep in enumerate(reports) if rep is not None]
    if not failed:
        return
    if error is not None:
        raise error
    rank, (name, message, is_os) = failed[0]
    text = f"rank {rank} failed: {message}"
    if is_os:
        raise OSError(text)
    raise RankError(text)


def _gf2_times(mat, vec):
    out, i = 0, 0
    while vec:
        if vec & 1:
            out ^= mat[i]
        vec >>= 1
        i += 1
    return out


def _gf2_square(mat):
    return [_gf2_times(mat, mat[i]) for i in range(32)]


def crc32_combine(crc1, crc2, len2):
    """CRC-32 of A + B from crc32(A), crc32(B) and len(B) in bytes.

    The zlib algorithm (crc32_combine in zlib's crc32.c, Adler 1995-2022): apply len2
    zero bytes to crc1 by repeated squaring of the GF(2) shift operator, then xor crc2.
    """
    if len2 <= 0:
        return crc1
    odd = [0xEDB88320] + [1 << i for i in range(31)]  # operator for one zero bit
    even = _gf2_square(odd)   # two zero bits
    odd = _gf2_square(even)   # four zero bits
    while True:
        even = _gf2_square(odd)
        if len2 & 1:
            crc1 = _gf2_times(even, crc1)
        len2 >>= 1
        if not len2:
            break
        odd = _gf2_square(even)
        if len2 & 1:
            crc1 = _gf2_times(odd, crc1)
        len2 >>= 1
        if not len2:
            break
    return (crc1 ^ crc2) & 0xFFFFFFFF
