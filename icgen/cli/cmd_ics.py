"""``icgen ics``: particle initial conditions (Zel'dovich or 2LPT) in one HDF5 file."""

import json
import os
import time
import warnings

from .. import background, io_hdf5, io_output, parallel, particles, pipeline, preflight
from ..errors import InputError
from .common import add_params_arguments, load_params, progress_bar, provenance, warn_line

NAME = "ics"
HELP = "generate particle initial conditions (HDF5) from a parameter file"


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out", required=True, help="output particle file (.h5)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output")
    p.add_argument("--workers", type=int, default=os.cpu_count(),
                   help="FFT threads (the output is identical for any value)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--max-memory", metavar="SIZE",
                   help="refuse runs whose modelled peak memory per process exceeds SIZE (e.g. 20G); "
                        "default: the memory available now")
    p.add_argument("--single-file", action="store_true",
                   help="under MPI, write one file collectively (needs h5py built with MPI) instead of "
                        "a part file per rank plus a master file")


def prepare(params, quiet=False):
    """Everything checked and set up before heavy work: (bg, pk, setup, a_start, advice)."""
    from .. import io_input, spectrum

    setup = pipeline.grid_setup(params)
    bg = background.solve(params.cosmology)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pk = io_input.spectrum_from_parameters(params, bg)
        pk.warn_if_extrapolating(*spectrum.required_k_range(setup.box_size, setup.n))
    if not quiet:
        for w in caught:
            warn_line(str(w.message))
    a_start, advice = pipeline.start_scale_factor(params, pk, bg, setup)
    return bg, pk, setup, a_start, advice


def output_filters(params):
    """The HDF5 filters asked for in [output] (compression, compression_level, fletcher32)."""
    return io_hdf5.Filters(compression=params.get("output", "compression"),
                           level=params.get("output", "compression_level"),
                           fletcher32=params.get("output", "fletcher32"))


def check_single_file(filters):
    """Refuse ``--single-file`` at once (every rank alike) where it cannot work."""
    if filters.any:
        raise InputError("--single-file writes uncompressed datasets only: set [output] compression = "
                         "\"none\" and fletcher32 = false, or leave --single-file out to write part files")
    if not parallel.launched_by_mpi():
        raise InputError("--single-file applies to MPI runs (mpiexec -n R icgen ics ...); "
                         "a run without MPI always writes one file")
    from .. import io_hdf5_collective

    if not io_hdf5_collective.available():
        raise InputError("--single-file needs h5py built with MPI (parallel HDF5), and this h5py is a serial "
                         "build; see the README section on MPI, or leave the option out to write part files")


def generate(params, out, overwrite=False, workers=None, quiet=False, max_memory=None, single_file=False):
    """Run the initial-condition pipeline and stream the particles into ``out``.

    Under MPI (``mpiexec -n R``) every rank computes its slab and writes a part
    file; ``out`` is then a master file of virtual datasets over the parts
    (:func:`icgen.io_hdf5.write_particles_parts`), or with ``single_file`` one file
    that all ranks write together (:func:`icgen.io_hdf5_collective.write_particles_collective`,
    h5py built with MPI). Collective in that case.

    Returns
    -------
    dict
        Summary figures (see :func:`summary`); on ranks other than 0 the statistics are None.
    """
    filters = output_filters(params)
    if single_file:
        check_single_file(filters)
    comm = parallel.world()
    ranks, rank = (1, 0) if comm is None else (comm.Get_size(), comm.Get_rank())
    t0 = time.perf_counter()
    # Ranks sharing this node's memory (a collective call: every rank makes it, before anything can fail).
    here = 1 if comm is None else comm.Split_type(parallel.shared_memory_type()).Get_size()
    error = None
    try:
        if rank == 0:
            io_output.check_output_path(out, overwrite)
        bg, pk, setup, a_start, advice = prepare(params, quiet=rank != 0)
        preflight.check(setup.n, setup.lpt_order, setup.dtype.name, setup.write_ids, out, ranks,
                        None if max_memory is None else preflight.parse_size(max_memory), here, workers)
    except BaseException as exc:  # noqa: BLE001 - every rank must learn of it (parallel.agree)
        if comm is None:
            raise
        error = exc
    parallel.agree(comm, error)
    cosmo = params.cosmology
    steps = pipeline.N_PROGRESS_STEPS[setup.lpt_order] + 1
    with progress_bar(steps, f"ics {setup.n}^3" + (f" on {ranks} ranks" if ranks > 1 else ""),
                      disable=quiet or rank != 0) as bar:

        def fields(layout=None):
            # scipy.fft and the compiled kernels load here: in a serial run, once the output file
            # exists and its pages are being prepared (io_hdf5._PagePrefetch) on the idle core.
            from .. import decomp

            layout = layout or decomp.Layout(setup.n, comm)
            return pipeline.particle_fields(pk, bg, setup, a_start, workers, progress=lambda stage: bar.update(1),
                                            layout=layout)[1]

        growth = particles.StartGrowth.from_background(bg, a_start)
        mass = particles.particle_mass(cosmo.omega_m, setup.box_size, setup.n)
        extra = {k: v for k, v in provenance(params).items() if k.startswith("input_table")}
        if advice is not None:
            extra["start_rule"] = json.dumps({"rule": "auto (common practice, see icgen.start)",
                                              **advice.limits, "z_start_1lpt": advice.z_start_1lpt,
                                              "z_start_2lpt": advice.z_start_2lpt})
        common = dict(parameters_toml=params.to_toml(), cosmology=cosmo, seed=setup.seed,
                      fixed_amplitude=setup.fixed_amplitude, paired=setup.paired, overwrite=overwrite,
                      extra_attrs=extra, filters=filters)
        if ranks > 1:
            from .. import decomp, io_hdf5_collective

            layout = decomp.Layout(setup.n, comm)
            write = io_hdf5_collective.write_particles_collective if single_file else io_hdf5.write_particles_parts
            stats = write(out, growth, fields(layout), layout, setup.box_size, setup.lpt_order, mass, setup.dtype,
                          setup.write_ids, **common)
        else:
            stats = io_hdf5.write_particles_streamed(out, growth, fields, setup.n, setup.box_size,
                                                     setup.lpt_order, mass, setup.dtype, setup.write_ids,
                                                     **common)
        bar.update(1)
    info = {"out": str(out), "bg": bg, "pk": pk, "n": setup.n, "box_size": setup.box_size,
            "order": setup.lpt_order, "mass": mass, "growth": growth, "ranks": ranks,
            "single_file": single_file,
            "disp": stats["displacement"] if stats else None, "vel": stats["velocity"] if stats else None,
            "seconds": time.perf_counter() - t0}
    return info


def summary(info):
    """Short human summary of a generated file."""
    g, n, box = info["growth"], info["n"], info["box_size"]
    spacing = box / n
    d, v = info["disp"], info["vel"]
    files = "one file written collectively" if info.get("single_file") else "one part file each"
    return "\n".join([
        f"wrote {info['out']}",
        f"  particles      {n}^3 = {n**3:,} in a {box:g} Mpc/h box (spacing {spacing:.4g} Mpc/h), "
        f"{info['order']}LPT",
        f"  particle mass  {info['mass']:.6e} Msun/h",
        f"  start          z = {1 / g.a - 1:.4g} (a = {g.a:.6g}); D1 = {g.D1:.6g}, f1 = {g.f1:.6f}, "
        f"D2 = {g.D2:.6g}, f2 = {g.f2:.6f}",
        f"  displacement   rms per component {d['rms']:.4g} Mpc/h = {d['rms'] / spacing:.3f} spacing; "
        f"max {d['max']:.4g} Mpc/h = {d['max'] / spacing:.3f} spacing; mean {d['mean']:.2e} Mpc/h",
        f"  velocity       rms per component {v['rms']:.4g} km/s, max {v['max']:.4g} km/s",
        f"  time           {info['seconds']:.2f} s" + (f" on {info['ranks']} MPI ranks ({files})"
                                                     if info.get("ranks", 1) > 1 else ""),
    ])


def run(args):
    params = load_params(args)
    info = generate(params, args.out, args.overwrite, args.workers, args.quiet, args.max_memory, args.single_file)
    if info["disp"] is not None:  # rank 0 (or a serial run) holds the statistics
        print(summary(info))
    return 0
