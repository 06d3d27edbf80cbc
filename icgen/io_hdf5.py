"""HDF5 particle files: our own layout, written atomically.

Layout (``format = "icgen.particles"``, ``format_version = 1``)
-----------------------------------------------------------------
Root attributes:
  format, format_version, created_by (package version), parameters (TOML text that
  reproduces the run), cosmology (JSON of the resolved cosmology), box_size (Mpc/h),
  scale_factor, redshift, grid_per_side, n_particles, particle_mass (Msun/h),
  lpt_order, seed, fixed_amplitude, paired, D1, f1, D2, f2 (at the start),
  H (km/s/Mpc at the start), units (JSON map of quantity -> unit).
Datasets (each with a ``units`` attribute and ``checksum_crc32``, the zlib CRC-32 of its
values as little-endian bytes in row-major order):
  /particles/position  (n^3, 3) float32|float64  Mpc/h comoving, in [0, box_size)
  /particles/velocity  (n^3, 3) float32|float64  km/s peculiar, v = a dx/dt
  /particles/id        (n^3,)   uint64           (i n + j) n + k on the Lagrangian grid
"""

import json
import os
import sys
import threading

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from . import __version__, preflight
from .io_output import atomic_path

__all__ = ["Filters", "FORMAT", "FORMAT_VERSION", "REQUIRED_ATTRS", "write_particles", "write_particles_streamed",
           "read_particles", "checksum", "verify_file", "write_particles_parts", "part_path"]

#: Root attributes every particle file carries.
REQUIRED_ATTRS = ("format", "format_version", "created_by", "parameters", "cosmology", "box_size",
                  "scale_factor", "redshift", "grid_per_side", "n_particles", "particle_mass",
                  "lpt_order", "seed", "fixed_amplitude", "paired", "D1", "f1", "D2", "f2", "H", "units")


try:  # the same CRC-32 as zlib's (ISO 3309 polynomial), about 6x faster; releases the GIL
    from isal.isal_zlib import crc32 as _crc32
    from isal.isal_zlib import crc32_combine as _crc32_combine
except ImportError:  # pragma: no cover - python-isal is a dependency; zlib is the fallback
    from zlib import crc32 as _crc32

    from .parallel import crc32_combine as _crc32_combine


def checksum(values, crc=0):
    """Running CRC-32 (zlib's) of an array's values as little-endian bytes in row-major order."""
    arr = np.ascontiguousarray(values)
    arr = arr.astype(arr.dtype.newbyteorder("<"), copy=False)
    return _crc32(memoryview(arr).cast("B"), crc)


def verify_file(path, full=False):
    """Check a particle file: format, required attributes, dataset shapes and checksums.

    Parameters
    ----------
    path : str or Path
    full : bool
        Recompute every dataset's CRC-32 (reads the whole file); otherwise only check
        that the checksums are stored.

    Returns
    -------
    list of str
        Problems found (empty if the file is sound).
    """
    problems = []
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        return [f"cannot open {path} as HDF5: {exc}"]
    with f:
        if f.attrs.get("format") != FORMAT:
            problems.append(f"format attribute is {f.attrs.get('format')!r}, expected {FORMAT!r}")
        missing = [k for k in REQUIRED_ATTRS if k not in f.attrs]
        if missing:
            problems.append("missing root attributes: " + ", ".join(missing))
        n_part = int(f.attrs.get("n_particles", -1))
        if "part_files" in f.attrs:  # a distributed file: every part must be there and complete
            folder = Path(path).resolve().parent
            for name in json.loads(f.attrs["part_files"]):
                part = folder / name
                if not part.exists():
                    problems.append(f"missing part file {part.name}")
                    continue
                try:
                    with h5py.File(part, "r") as pf:
                        rows = int(pf.attrs["part_rows"])
                        if pf["particles/position"].shape != (rows, 3):
                            problems.append(f"part file {part.name} is incomplete")
                except (OSError, KeyError) as exc:
                    problems.append(f"part file {part.name} is unreadable or truncated: {exc}")
        grp = f.get("particles")
        if grp is None:
            return problems + ["missing group /particles"]
        for name, shape in (("position", (n_part, 3)), ("velocity", (n_part, 3)), ("id", (n_part,))):
            if name not in grp:
                if name != "id":
                    problems.append(f"missing dataset /particles/{name}")
                continue
            ds = grp[name]
            if ds.shape != shape:
                problems.append(f"/particles/{name} has shape {ds.shape}, expected {shape}")
            if "checksum_crc32" not in ds.attrs:
                problems.append(f"/particles/{name} has no checksum_crc32")
            elif full:
                crc, rows = 0, max(1, (1 << 22) // max(1, int(np.prod(ds.shape[1:]))))
                try:
                    for r0 in range(0, ds.shape[0], rows):
                        crc = checksum(ds[r0:r0 + rows], crc)
                except OSError as exc:
                    problems.append(f"/particles/{name}: cannot be read completely ({exc})")
                    continue
                if crc != int(ds.attrs["checksum_crc32"]):
                    problems.append(f"/particles/{name}: checksum mismatch (stored "
                                    f"{int(ds.attrs['checksum_crc32']):08x}, computed {crc:08x})")
    return problems


def _verify_or_raise(tmp, attrs):
    """Read back a just-written file's attributes and checksums before it is renamed."""
    problems = verify_file(tmp, full=False)
    with h5py.File(tmp, "r") as f:
        for key in ("format", "n_particles", "grid_per_side", "seed"):
            if f.attrs[key] != attrs[key]:
                problems.append(f"attribute {key} reads back as {f.attrs[key]!r}, wrote {attrs[key]!r}")
    if problems:
        raise OSError(f"verification of the written file failed: {'; '.join(problems)}")

FORMAT = "icgen.particles"
FORMAT_VERSION = 1
UNITS = {"position": "Mpc/h (comoving)", "velocity": "km/s (peculiar, a dx/dt)",
         "id": "1 (Lagrangian grid index (i n + j) n + k)", "particle_mass": "Msun/h",
         "box_size": "Mpc/h", "H": "km/s/Mpc"}


def _root_attrs(growth, box_size, n, mass, lpt_order, parameters_toml, cosmology, seed,
                fixed_amplitude, paired, extra_attrs):
    g = growth
    attrs = {
        "format": FORMAT, "format_version": FORMAT_VERSION, "created_by": f"icgen {__version__}",
        "parameters": parameters_toml, "cosmology": json.dumps(cosmology.as_dict()),
        "box_size": box_size, "scale_factor": g.a, "redshift": 1.0 / g.a - 1.0,
        "grid_per_side": n, "n_particles": n**3, "particle_mass": mass,
        "lpt_order": lpt_order, "seed": np.uint64(seed), "fixed_amplitude": bool(fixed_amplitude),
        "paired": bool(paired), "D1": g.D1, "f1": g.f1, "D2": g.D2, "f2": g.f2, "H": g.H,
        "units": json.dumps(UNITS),
    }
    attrs.update(extra_attrs or {})
    return attrs


def _write_attrs(f, attrs):
    for k, v in attrs.items():
        f.attrs[k] = v


def write_particles(path, parts, parameters_toml, cosmology, seed, fixed_amplitude=False,
                    paired=False, overwrite=False, extra_attrs=None, filters=None):
    """Write an in-memory ParticleSet to ``path`` atomically (temporary name, then rename).

    Parameters
    ----------
    path : str or Path
    parts : icgen.particles.ParticleSet
    parameters_toml : str
        TOML text that reproduces the run.
    cosmology : icgen.cosmology.Cosmology
    seed : int
    fixed_amplitude, paired : bool
    overwrite : bool
        Replace an existing file.
    extra_attrs : dict, optional
        More root attributes.
    filters : Filters, optional
        HDF5 compression and checksum filters (default none).
    """
    n = round(parts.n_particles ** (1 / 3))
    attrs = _root_attrs(parts.growth, parts.box_size, n, parts.mass, parts.lpt_order, parameters_toml,
                        cosmology, seed, fixed_amplitude, paired, extra_attrs)
    with atomic_path(path, overwrite) as tmp:
        with h5py.File(tmp, "w") as f:
            _write_attrs(f, attrs)
            grp = f.create_group("particles")
            for name in ("position", "velocity", "id"):
                arr = getattr(parts, name)
                if arr is None:
                    continue
                opts = filters.dataset_options(arr.shape[0], arr.shape) if filters is not None and filters.any else {}
                ds = grp.create_dataset(name, data=arr, **opts)
                ds.attrs["units"] = UNITS[name]
                ds.attrs["checksum_crc32"] = np.uint32(checksum(arr))
        _verify_or_raise(tmp, attrs)
    return path


#: Rows of particles per block: each lane (:func:`_write_field`) holds one block per kind.
_BLOCK_ROWS = preflight.BLOCK_ROWS


#: Rows per chunk of a filtered (compressed or checksummed) dataset; _BLOCK_ROWS is a multiple,
#: so every block fills whole chunks (no chunk is read back and rewritten).
_CHUNK_ROWS = 1 << 17


@dataclass(frozen=True)
class Filters:
    """HDF5 filters of the particle datasets (none by default: contiguous, written directly).

    Parameters
    ----------
    compression : {"none", "gzip"}
        "gzip": the HDF5 deflate filter after the byte shuffle filter (lossless).
    level : int
        Deflate level, 1 (fast) to 9 (small).
    fletcher32 : bool
        Add the HDF5 Fletcher-32 checksum filter to every chunk (checked by HDF5 on read).
    """

    compression: str = "none"
    level: int = 4
    fletcher32: bool = False

    def __post_init__(self):
        if self.compression not in ("none", "gzip"):
            raise ValueError(f"compression = {self.compression!r}: allowed values are 'none' and 'gzip'")
        if not 1 <= self.level <= 9:
            raise ValueError(f"compression level = {self.level!r} is outside the allowed range [1, 9]")

    @property
    def any(self):
        return self.compression != "none" or self.fletcher32

    def dataset_options(self, rows, shape):
        """Keyword arguments of h5py's create_dataset for a filtered dataset of ``rows`` rows."""
        opts = {"chunks": (max(1, min(rows, _CHUNK_ROWS)),) + tuple(shape[1:]), "fletcher32": self.fletcher32}
        if self.compression == "gzip":
            opts.update(compression="gzip", compression_opts=self.level, shuffle=True)
        return opts


def _create_particle_datasets(grp, rows, dtype, write_ids, filters=None):
    """Create /particles/{position, velocity[, id]} for ``rows`` particles.

    Without filters the datasets are contiguous and allocated at creation, and the data are
    written later straight to their byte offsets (:class:`_BlockWriter`), never filled
    with a fill value. With filters (:class:`Filters`) they are chunked and written
    through HDF5, which applies the filters chunk by chunk.

    Returns
    -------
    dict
        name -> (byte offset in the file, or None for an empty or filtered dataset, bytes per row).
    """
    targets = {}
    dcpl = h5py.h5p.create(h5py.h5p.DATASET_CREATE)
    dcpl.set_alloc_time(h5py.h5d.ALLOC_TIME_EARLY)
    dcpl.set_fill_time(h5py.h5d.FILL_TIME_NEVER)
    kinds = [("position", np.dtype(dtype), (rows, 3)), ("velocity", np.dtype(dtype), (rows, 3))]
    if write_ids:
        kinds.append(("id", np.dtype(np.uint64), (rows,)))
    for name, dt, shape in kinds:
        dt = dt.newbyteorder("<")  # the bytes written are little-endian (checksum's convention)
        if filters is not None and filters.any:
            ds = grp.create_dataset(name, shape=shape, dtype=dt, **filters.dataset_options(rows, shape))
            offset = None
        else:
            dsid = h5py.h5d.create(grp.id, name.encode(), h5py.h5t.py_create(dt), h5py.h5s.create_simple(shape),
                                   dcpl=dcpl)
            ds = h5py.Dataset(dsid)
            offset = ds.id.get_offset()
        ds.attrs["units"] = UNITS[name]
        targets[name] = (offset, int(np.prod(shape[1:], dtype=np.int64)) * dt.itemsize)
    return targets


def _preallocate(fd, size, path):
    """Reserve the file's blocks now (Linux fallocate), where the file system can.

    The allocated file is sparse; writing into reserved blocks is faster and steadier
    (400 MB into a new file: 0.10 s every time, against 0.11-0.51 s without, on this
    project's test machine), and a disk too small fails here, before any work is written.
    File systems without the call (EOPNOTSUPP) or other platforms are left as they are:
    glibc's posix_fallocate would emulate it by writing every block, so it is not used.

    Returns
    -------
    bool
        True if the blocks are reserved (no later write into them can meet a full disk).
    """
    if size <= 0 or not sys.platform.startswith("linux"):
        return False
    import ctypes
    import errno

    libc = ctypes.CDLL(None, use_errno=True)
    fallocate = getattr(libc, "fallocate64", None) or getattr(libc, "fallocate", None)
    if fallocate is None:  # pragma: no cover - every glibc has it
        return False
    fallocate.argtypes = (ctypes.c_int, ctypes.c_int, ctypes.c_int64, ctypes.c_int64)
    if fallocate(fd, 0, 0, size) != 0:
        err = ctypes.get_errno()
        if err in (errno.ENOSPC, errno.EFBIG, errno.EDQUOT):
            raise OSError(err, os.strerror(err), path)
        return False
    return True


#: Most bytes of a new particle file whose pages are prepared ahead of the writes (:class:`_PagePrefetch`).
PREFETCH_BYTES = 1 << 30


class _PagePrefetch:
    """Prepare the page-cache pages of a reserved file region in a background thread.

    Writing into a new file spends most of its time creating the file's page-cache pages
    (on this project's test machine, a virtual machine, 400 MB took 0.4 s with the kernels
    running beside it, against 0.1 s into existing pages). The pages can be created
    ahead, while the run is still busy with work that leaves a core idle (the start-up
    of the compiled kernels, the transforms): the region is mapped a window at a time
    and prefaulted with ``madvise(MADV_POPULATE_WRITE)`` (Linux 5.14 and later), which
    creates the pages without touching their contents, so it is safe beside the writes
    that fill them. Measured for 256^3 particles in float32 (``icgen ics`` from the
    shell, 8 runs each): 2.00 s median against 2.25 s without. Only used on blocks that
    :func:`_preallocate` reserved, and for at most :data:`PREFETCH_BYTES` (the prepared
    pages are dirty until the data replace them); does nothing where the call is missing.

    Parameters
    ----------
    fd : int
        The file, open for reading and writing (this object closes it).
    offset, length : int
        The byte region to prepare.
    """

    #: Bytes mapped and prepared per call.
    WINDOW = 32 << 20

    def __init__(self, fd, offset, length):
        self._fd = fd
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, args=(offset, length), daemon=True,
                                        name="icgen-prefetch")
        self._thread.start()

    def _run(self, offset, length):
        import ctypes
        import mmap

        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.madvise.argtypes = (ctypes.c_void_p, ctypes.c_size_t, ctypes.c_int)
            madv_populate_write = 23  # <linux/mman.h>
            start = offset - offset % mmap.ALLOCATIONGRANULARITY
            end = offset + length
            for pos in range(start, end, self.WINDOW):
                if self._stop.is_set():
                    return
                size = min(self.WINDOW, end - pos)
                with mmap.mmap(self._fd, size, offset=pos) as m:
                    anchor = ctypes.c_char.from_buffer(m)
                    failed = libc.madvise(ctypes.addressof(anchor), size, madv_populate_write) != 0
                    del anchor
                if failed:  # an older kernel (EINVAL) or no memory to spare: leave the rest to the writes
                    return
        except (OSError, ValueError):  # nothing depends on the prefetch
            return
        finally:
            os.close(self._fd)

    def stop(self):
        """Stop after the current window and wait for the thread."""
        self._stop.set()
        self._thread.join()


class _BlockWriter:
    """Thread-safe writes of row blocks into the allocated datasets of a closed file.

    Unfiltered datasets are written straight to their byte offsets with ``os.pwrite``
    (into blocks reserved by :func:`_preallocate`); filtered ones through HDF5, which
    applies the filters chunk by chunk. One write at a time (a lock; the kernel
    serialises writes to one file anyway), so after the first failure no other block is
    written: the failure re-raises in its caller, and later writes raise at once.

    Parameters
    ----------
    path : str or Path
        The HDF5 file, already created and closed, whose datasets are allocated.
    targets : dict
        name -> (byte offset, bytes per row), from :func:`_create_particle_datasets`; an
        offset of None means a filtered dataset (the file is then opened with h5py).
    """

    def __init__(self, path, targets):
        self.path = str(path)
        self._targets = targets
        self._lock = threading.Lock()
        self._failed = None
        self._h5 = h5py.File(self.path, "r+") if any(t[0] is None for t in targets.values()) else None
        self._fd = None
        self._prefetch = None
        if self._h5 is None:
            self._fd = os.open(self.path, os.O_RDWR)
            try:
                size = os.fstat(self._fd).st_size
                if _preallocate(self._fd, size, self.path):
                    first = min(off for off, _ in targets.values())
                    self._prefetch = _PagePrefetch(os.dup(self._fd), first, min(size - first, PREFETCH_BYTES))
            except BaseException:
                os.close(self._fd)
                raise

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self._prefetch is not None:
            self._prefetch.stop()
        if self._h5 is not None:
            self._h5.close()
        else:
            os.close(self._fd)

    @property
    def error(self):
        """The first write error (None while every write succeeded)."""
        return self._failed

    def write(self, name, row0, block):
        """Write ``block`` as rows row0, row0 + 1, ... of dataset ``name``."""
        offset, row_bytes = self._targets[name]
        with self._lock:
            if self._failed is not None:  # the run is ending: write nothing more
                raise self._failed
            try:
                if offset is None:  # a filtered dataset: through HDF5
                    self._h5["particles"][name][row0:row0 + block.shape[0]] = block
                    return
                if sys.byteorder != "little":  # pragma: no cover - every supported platform is little-endian
                    block = block.astype(block.dtype.newbyteorder("<"))
                data = memoryview(np.ascontiguousarray(block)).cast("B")
                pos = offset + row0 * row_bytes
                while data.nbytes:
                    done = os.pwrite(self._fd, data, pos)
                    data, pos = data[done:], pos + done
            except OSError as exc:
                self._failed = exc if offset is None else OSError(exc.errno, exc.strerror, self.path)
                raise self._failed from None


def _lanes_for(field):
    """How many blocks to compute side by side: one per FFT thread of the field (default: every
    core), at most :data:`icgen.preflight.MAX_LANES` (each lane holds its own block buffers)."""
    return preflight.lanes(field.workers)


def _write_field(out, kinds, field, box_size, dtype, row_bytes):
    """Turn ``field`` into particle blocks on a few threads side by side and write them.

    Each thread ("lane") takes the next block, makes its planes real, fills its own
    position and velocity buffers with the single-threaded kernels, checksums them and
    writes them (:func:`icgen.particles.fill_block`). Every lane runs the whole chain
    alone, so the cores are never shared between FFT threads, kernel threads and a
    writer; the numbers do not depend on the lane count.

    Returns
    -------
    crc : dict
        kind -> list of (CRC-32 of the block alone, bytes), in block order.
    stats : dict
        kind -> plane statistics (planes, 3).
    """
    from . import particles  # the numerical core; imported here to keep this module light

    n = field.n
    ranges = particles.block_planes(field.planes, n, _BLOCK_ROWS)
    lanes = min(_lanes_for(field), len(ranges))
    crc = {kind: [None] * len(ranges) for kind, _ in kinds}
    stats = {kind: [None] * len(ranges) for kind, _ in kinds}
    queue = iter(range(len(ranges)))
    take = threading.Lock()
    rows_max = (ranges[0][1] - ranges[0][0]) * n * n

    def lane():
        bufs = {kind: np.empty((rows_max, 3), dtype=dtype) for kind, _ in kinds}
        while True:
            with take:
                b = next(queue, None)
            if b is None:
                return
            i0, i1 = ranges[b]
            rows = (i1 - i0) * n * n
            outs = {kind: buf[:rows] for kind, buf in bufs.items()}
            st = particles.fill_block(field, kinds, i0, i1, box_size, outs)
            for kind, _ in kinds:
                out.write(kind, i0 * n * n, outs[kind])
                crc[kind][b] = (checksum(outs[kind]), rows * row_bytes[kind])
                stats[kind][b] = st[kind]

    if lanes == 1:
        lane()
    else:
        with ThreadPoolExecutor(max_workers=lanes, thread_name_prefix="icgen-lane") as pool:
            running = [pool.submit(lane) for _ in range(lanes)]
            errors = [f.exception() for f in running]
        if out.error is not None:  # the first failed write, whichever lane met it first
            raise out.error
        for exc in errors:
            if exc is not None:
                raise exc
    return crc, {kind: np.concatenate(planes) for kind, planes in stats.items()}


def _stream_fields(path, targets, fields, n, box_size, dtype, write_ids, row_start):
    """Fill the allocated datasets of the closed file ``path`` from ``fields`` (this process's rows).

    Returns the per-dataset CRC-32 and the per-plane statistics (planes, 6).
    """
    stats, parts = {}, {}
    row_bytes = {name: width for name, (_, width) in targets.items()}
    with _BlockWriter(path, targets) as out:
        fields = iter(fields() if callable(fields) else fields)  # (see write_particles_streamed)
        try:
            for kinds, field in fields:
                crc, st = _write_field(out, kinds, field, box_size, dtype, row_bytes)
                parts.update(crc)
                stats.update(st)
                del field  # let the generator free it before it computes the next field
        except Exception:
            # A failed write (a full disk, say): in a distributed run the other ranks are about to
            # transform the next field with this one, so take part in the remaining transforms
            # without writing, then fail (the ranks agree on failures afterwards).
            for kinds, field in fields:
                del field
            raise
        total = {}
        for name, blocks in parts.items():  # the blocks' checksums combined in row order
            total[name] = 0
            for value, length in blocks:
                total[name] = _crc32_combine(total[name], value, length)
        if write_ids:
            rows_total = stats["position"].shape[0] * n * n
            total["id"] = 0
            for r0 in range(0, rows_total, _BLOCK_ROWS):
                ids = np.arange(row_start + r0, row_start + min(rows_total, r0 + _BLOCK_ROWS), dtype=np.uint64)
                out.write("id", r0, ids)
                total["id"] = checksum(ids, total["id"])
    return total, np.concatenate([stats["position"], stats["velocity"]], axis=1)


def _check_stored_checksums(path, crc, label):
    """Raise OSError unless every dataset's stored ``checksum_crc32`` reads back as ``crc[name]``."""
    with h5py.File(path, "r") as f:
        for name, value in crc.items():
            if int(f["particles"][name].attrs["checksum_crc32"]) != value:
                raise OSError(f"{label}: checksum of {name} did not read back")


def _store_checksums(path, crc):
    """Write each dataset's CRC-32 as its ``checksum_crc32`` attribute."""
    with h5py.File(path, "r+") as f:
        for name, value in crc.items():
            f["particles"][name].attrs["checksum_crc32"] = np.uint32(value)


def write_particles_streamed(path, growth, fields, n, box_size, order, mass, dtype, write_ids,
                             parameters_toml, cosmology, seed, fixed_amplitude=False, paired=False,
                             overwrite=False, extra_attrs=None, filters=None):
    """Write the particles field by field and block by block (no real field is held whole).

    Parameters
    ----------
    path : str or Path
    growth : StartGrowth
    fields : iterable of (kinds, field), or a function returning one
        From :func:`icgen.lpt.output_fields` (the whole grid). A function is called once
        the file exists and its pages are being prepared (:class:`_PagePrefetch`), so that
        what it imports and computes overlaps that preparation.
    n : int
    box_size : float
    order : int
    mass : float
        Particle mass in Msun/h.
    dtype, write_ids, parameters_toml, cosmology, seed, fixed_amplitude, paired, overwrite, extra_attrs
        As in :func:`write_particles`.
    filters : Filters, optional
        HDF5 compression and checksum filters (default none).

    Returns
    -------
    dict
        Displacement and velocity statistics (:func:`icgen.particles.summarize`).
    """
    from . import particles

    attrs = _root_attrs(growth, box_size, n, mass, order, parameters_toml, cosmology, seed,
                        fixed_amplitude, paired, extra_attrs)
    with atomic_path(path, overwrite) as tmp:
        with h5py.File(tmp, "w") as f:
            _write_attrs(f, attrs)
            targets = _create_particle_datasets(f.create_group("particles"), n**3, dtype, write_ids, filters)
        crc, planes = _stream_fields(tmp, targets, fields, n, box_size, dtype, write_ids, 0)
        _store_checksums(tmp, crc)
        _verify_or_raise(tmp, attrs)
    return particles.summarize(planes)


def read_particles(path):
    """Read an icgen particle file: (attrs dict, dict of datasets as arrays)."""
    with h5py.File(path, "r") as f:
        attrs = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in f.attrs.items()}
        data = {k: f["particles"][k][...] for k in f["particles"]}
    return attrs, data


def part_path(path, rank, size):
    """File name of rank ``rank``'s part of a distributed particle file ``path``."""
    path = Path(path)
    return path.with_name(f"{path.stem}.part{rank:04d}-of-{size:04d}{path.suffix}")


def write_particles_parts(path, growth, fields, layout, box_size, order, mass, dtype, write_ids,
                          parameters_toml, cosmology, seed, fixed_amplitude=False, paired=False,
                          overwrite=False, extra_attrs=None, filters=None):
    """Distributed output: every rank writes its slab to a part file; rank 0 writes ``path``,
    whose /particles/* are HDF5 virtual datasets over the parts (same layout as a serial file).

    All files are written under temporary names; the parts are renamed once every
    rank has written and verified its part, the master last. The master stores the
    CRC-32 of each whole dataset (combined from the parts), so :func:`verify_file`
    with ``full=True`` on the master detects a missing or truncated part. Collective:
    call on every rank with this rank's ``fields`` (:func:`icgen.lpt.output_fields`).

    Returns
    -------
    dict
        Displacement and velocity statistics (on rank 0; None elsewhere).
    """
    from . import particles
    from .io_output import check_output_path
    from .parallel import agree, crc32_combine

    comm, rank, size, n = layout.comm, layout.rank, layout.size, layout.n
    path = Path(path)
    mine = part_path(path, rank, size)
    error = None
    try:
        check_output_path(mine, overwrite)
        if rank == 0:
            check_output_path(path, overwrite)
    except BaseException as exc:  # noqa: BLE001 - reported to every rank below
        error = exc
    agree(comm, error)

    attrs = _root_attrs(growth, box_size, n, mass, order, parameters_toml, cosmology, seed,
                        fixed_amplitude, paired, extra_attrs)
    rows = (layout.x1 - layout.x0) * n * n
    row_start = layout.x0 * n * n
    tmp_cm = atomic_path(mine, overwrite)
    error, crc, planes = None, None, None
    try:
        tmp = tmp_cm.__enter__()
        with h5py.File(tmp, "w") as f:
            _write_attrs(f, {**attrs, "part_rank": rank, "part_count": size, "part_first_row": row_start,
                             "part_rows": rows})
            targets = _create_particle_datasets(f.create_group("particles"), rows, dtype, write_ids, filters)
        crc, planes = _stream_fields(tmp, targets, fields, n, box_size, dtype, write_ids, row_start)
        _store_checksums(tmp, crc)
        _check_stored_checksums(tmp, crc, mine)  # read back before anything is renamed
    except BaseException as exc:  # noqa: BLE001
        error = exc
        if not isinstance(exc, KeyboardInterrupt):
            # The other ranks need this one in the transforms of the fields it has not
            # taken yet (its part file could not be made, say): take part, then agree.
            for _ in fields:
                pass
    try:
        agree(comm, error)
    except BaseException:
        tmp_cm.__exit__(*_exc_info())
        raise

    # Everyone wrote a verified part: gather sizes and checksums, rename the parts, write the master.
    info = comm.gather((rank, rows, dict(crc), planes), root=0)
    tmp_cm.__exit__(None, None, None)  # rename this rank's part
    error, summary = None, None
    if rank == 0:
        try:
            info.sort(key=lambda t: t[0])
            total = {k: 0 for k in crc}
            itemsize = {"position": 3 * np.dtype(dtype).itemsize, "velocity": 3 * np.dtype(dtype).itemsize,
                        "id": 8}
            for _, r_rows, r_crc, _ in info:
                for k in total:
                    total[k] = crc32_combine(total[k], r_crc[k], r_rows * itemsize[k])
            with atomic_path(path, overwrite) as tmp:
                with h5py.File(tmp, "w") as f:
                    _write_attrs(f, {**attrs, "part_files": json.dumps(
                        [part_path(path, r, size).name for r in range(size)])})
                    grp = f.create_group("particles")
                    for name in ("position", "velocity") + (("id",) if write_ids else ()):
                        shape = (n**3, 3) if name != "id" else (n**3,)
                        vdt = np.uint64 if name == "id" else dtype
                        vl = h5py.VirtualLayout(shape=shape, dtype=vdt)
                        start = 0
                        for r, r_rows, _, _ in info:
                            src_shape = (r_rows, 3) if name != "id" else (r_rows,)
                            vs = h5py.VirtualSource(part_path(path, r, size).name, f"particles/{name}",
                                                    shape=src_shape)
                            vl[start:start + r_rows] = vs
                            start += r_rows
                        ds = grp.create_virtual_dataset(name, vl, fillvalue=np.nan if name != "id" else 0)
                        ds.attrs["units"] = UNITS[name]
                        ds.attrs["checksum_crc32"] = np.uint32(total[name])
            summary = particles.summarize(np.concatenate([t[3] for t in info]))
        except BaseException as exc:  # noqa: BLE001
            error = exc
    agree(comm, error)
    return summary


def _exc_info():
    import sys

    return sys.exc_info()
