"""One particle file written collectively by every MPI rank (parallel HDF5 through h5py's mpio driver).

The alternative to :func:`icgen.io_hdf5.write_particles_parts` (one part file per rank plus a
master file of virtual datasets) where h5py is built with MPI: all ranks open one temporary
file together, rank r writes its x-slab's rows of each dataset, and rank 0 verifies the file
and renames it. The layout, attributes, units and per-dataset ``checksum_crc32`` are those of
:func:`icgen.io_hdf5.write_particles_streamed` (see :mod:`icgen.io_hdf5`), and the particle data
are bit-identical to a serial run's.

Parallel HDF5 rules followed here (HDF5 user's guide, "Parallel HDF5"; h5py docs, "Parallel
HDF5"): creating groups and datasets and writing attributes are collective, so every rank makes
those calls in the same order with the same values (the root attributes are broadcast from
rank 0, the checksums are combined from every rank's); the rows themselves are written
independently, each rank its own contiguous block.
"""

import sys

import h5py
import numpy as np

from .errors import InputError
from .io_hdf5 import (_check_stored_checksums, _create_particle_datasets, _root_attrs, _verify_or_raise,
                      _write_attrs, checksum)
from .io_output import atomic_path

__all__ = ["available", "write_particles_collective"]


def available():
    """True when h5py was built against parallel HDF5 (``h5py.get_config().mpi``)."""
    return bool(h5py.get_config().mpi)


def write_particles_collective(path, growth, fields, layout, box_size, order, mass, dtype, write_ids,
                               parameters_toml, cosmology, seed, fixed_amplitude=False, paired=False,
                               overwrite=False, extra_attrs=None, filters=None):
    """Distributed output into one shared file: every rank writes its own slab's rows into it.

    Collective: call on every rank with this rank's ``fields``
    (:func:`icgen.lpt.output_fields`); needs h5py built with MPI (:func:`available`).
    Rank 0 creates the temporary file and renames it onto ``path`` once every rank has
    written its rows and rank 0 has read the attributes and checksums back; on any
    failure every rank raises (:func:`icgen.parallel.agree`) and no file is left.

    Parameters
    ----------
    path : str or Path
    growth : StartGrowth
    fields : iterable of (kinds, field)
        This rank's x-slab of each field, from :func:`icgen.lpt.output_fields`.
    layout : icgen.decomp.Layout
        The slab decomposition (its ``comm`` is the communicator of the file).
    box_size, order, mass, dtype, write_ids, parameters_toml, cosmology, seed, fixed_amplitude, paired, \
overwrite, extra_attrs
        As in :func:`icgen.io_hdf5.write_particles_streamed`.
    filters : icgen.io_hdf5.Filters, optional
        Must request no filter: this writer writes contiguous datasets only.

    Returns
    -------
    dict
        Displacement and velocity statistics (:func:`icgen.particles.summarize`) on rank 0;
        None elsewhere.

    Raises
    ------
    InputError
        If ``filters`` asks for compression or checksums (every rank alike, before any file
        is made): parallel HDF5 applies filters only in collective writes, which this
        writer does not make.
    """
    from . import particles
    from .parallel import agree

    if filters is not None and getattr(filters, "any", False):
        raise InputError("--single-file writes uncompressed datasets only: set [output] compression = "
                         "\"none\" and fletcher32 = false, or leave --single-file out to write part files")
    comm, rank = layout.comm, layout.rank
    # Attributes are collective metadata: every rank must write the same values, so take rank 0's.
    attrs = comm.bcast(_root_attrs(growth, box_size, layout.n, mass, order, parameters_toml, cosmology, seed,
                                   fixed_amplitude, paired, extra_attrs) if rank == 0 else None, root=0)

    target = atomic_path(path, overwrite) if rank == 0 else None
    tmp, error = None, None
    if rank == 0:
        try:
            tmp = str(target.__enter__())
        except BaseException as exc:  # noqa: BLE001 - reported to every rank below
            error = exc
    agree(comm, error)
    tmp = comm.bcast(tmp, root=0)

    error, planes = None, None
    try:
        planes, totals = _write_file(tmp, comm, attrs, fields, layout, box_size, dtype, write_ids)
        if rank == 0:  # read back before the rename, as the serial writer does
            _verify_or_raise(tmp, attrs)
            _check_stored_checksums(tmp, totals, tmp)
    except BaseException as exc:  # noqa: BLE001
        error = exc
    try:
        agree(comm, error)
    except BaseException:
        if rank == 0:
            target.__exit__(*sys.exc_info())  # removes the temporary file
        raise

    error = None
    if rank == 0:
        try:
            target.__exit__(None, None, None)  # rename onto path
        except BaseException as exc:  # noqa: BLE001
            error = exc
    gathered = comm.gather(planes, root=0)  # rank order
    agree(comm, error)
    return particles.summarize(np.concatenate(gathered)) if rank == 0 else None


def _write_file(tmp, comm, attrs, fields, layout, box_size, dtype, write_ids):
    """Every rank: write this rank's rows of /particles/* into ``tmp`` (parallel HDF5).

    The datasets are created as the serial writer creates them
    (:func:`icgen.io_hdf5._create_particle_datasets`: contiguous, little-endian, allocated at
    creation, never filled), which parallel HDF5 does collectively. Returns this rank's
    per-plane statistics (planes, 6) and the CRC-32 of each whole dataset. A failed write on
    one rank does not stop it taking part in the collective calls that follow (the FFTs
    inside ``fields``, closing the file); the ranks agree on failures before the checksums
    are written.
    """
    from . import particles
    from .parallel import agree, crc32_combine

    n, x0 = layout.n, layout.x0
    row_start, rows = x0 * n * n, (layout.x1 - x0) * n * n
    crc, stats = {}, {}
    failed = None  # this rank's first write error

    def write(name, row0, block):  # this rank's rows, independently of the other ranks
        nonlocal failed
        if failed is None:
            try:
                grp[name][row_start + row0:row_start + row0 + block.shape[0]] = block
            except OSError as exc:
                failed = exc
        crc[name] = checksum(block, crc.get(name, 0))

    with h5py.File(tmp, "w", driver="mpio", comm=comm) as f:
        _write_attrs(f, attrs)
        grp = f.create_group("particles")
        _create_particle_datasets(grp, n**3, dtype, write_ids)
        for kinds, field in fields:
            blocks = {kind: [] for kind, _ in kinds}
            for kind, row0, block, st in particles.particle_blocks(field, kinds, box_size, dtype):
                write(kind, row0, block)
                blocks[kind].append(st)
            for kind, planes in blocks.items():
                stats[kind] = np.concatenate(planes)
            del field  # let the generator free it before it computes the next field
        if write_ids:
            step = 1 << 22
            for r0 in range(0, rows, step):
                write("id", r0, np.arange(row_start + r0, row_start + min(rows, r0 + step), dtype=np.uint64))
        agree(comm, failed)  # every rank raises, so every rank closes the file
        # Checksum of each whole dataset: the ranks' CRCs combined in rank (= row) order.
        everyone = comm.allgather((rows, crc))
        totals = {}
        for name in crc:
            width = 8 if name == "id" else 3 * np.dtype(dtype).itemsize  # bytes per row
            total = 0
            for r_rows, r_crc in everyone:
                total = crc32_combine(total, r_crc[name], r_rows * width)
            grp[name].attrs["checksum_crc32"] = np.uint32(total)
            totals[name] = total
    return np.concatenate([stats["position"], stats["velocity"]], axis=1), totals
