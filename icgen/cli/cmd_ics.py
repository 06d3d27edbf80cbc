"""``icgen ics``: particle initial conditions (Zel'dovich or 2LPT) in one HDF5 file."""

import hashlib
import json
import os
import time
import warnings

from .. import background, io_hdf5, io_output, particles, pipeline
from .common import add_params_arguments, load_params, progress_bar, warn_line

NAME = "ics"
HELP = "generate particle initial conditions (HDF5) from a parameter file"


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out", required=True, help="output particle file (.h5)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output")
    p.add_argument("--workers", type=int, default=os.cpu_count(),
                   help="FFT threads (the output is identical for any value)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def prepare(params):
    """Everything checked and set up before heavy work: (bg, pk, setup, a_start, advice)."""
    from .. import io_input, spectrum

    setup = pipeline.grid_setup(params)
    bg = background.solve(params.cosmology)
    pk = io_input.spectrum_from_parameters(params, bg)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pk.warn_if_extrapolating(*spectrum.required_k_range(setup.box_size, setup.n))
    for w in caught:
        warn_line(str(w.message))
    a_start, advice = pipeline.start_scale_factor(params, pk, bg, setup)
    return bg, pk, setup, a_start, advice


def generate(params, out, overwrite=False, workers=None, quiet=False):
    """Run the initial-condition pipeline and stream the particles into ``out``.

    Returns
    -------
    dict
        Summary figures (see :func:`summary`).
    """
    io_output.check_output_path(out, overwrite)
    t0 = time.perf_counter()
    bg, pk, setup, a_start, advice = prepare(params)
    cosmo = params.cosmology
    steps = pipeline.N_PROGRESS_STEPS[setup.lpt_order] + 1
    with progress_bar(steps, f"ics {setup.n}^3", disable=quiet) as bar:
        disp = pipeline.displacement_fields(pk, bg, setup, workers, progress=lambda stage: bar.update(1))
        growth = particles.StartGrowth.from_background(bg, a_start)
        mass = particles.particle_mass(cosmo.omega_m, setup.box_size, setup.n)
        extra = {}
        if params.get("spectrum", "source") == "table":
            table = params.path("spectrum", "table")
            extra["input_table"] = str(table)
            extra["input_table_sha256"] = hashlib.sha256(table.read_bytes()).hexdigest()
        if advice is not None:
            extra["start_rule"] = json.dumps({"rule": "auto (common practice, see icgen.start)",
                                              **advice.limits, "z_start_1lpt": advice.z_start_1lpt,
                                              "z_start_2lpt": advice.z_start_2lpt})
        stats = io_hdf5.write_particles_streamed(out, growth, disp, mass, setup.dtype, setup.write_ids,
                                         params.to_toml(), cosmo, setup.seed, setup.fixed_amplitude,
                                         setup.paired, overwrite, extra)
        bar.update(1)
    info = {"out": str(out), "bg": bg, "pk": pk, "n": setup.n, "box_size": setup.box_size, "order": setup.lpt_order,
            "mass": mass, "growth": growth, "disp": stats["displacement"], "vel": stats["velocity"],
            "seconds": time.perf_counter() - t0}
    return info


def summary(info):
    """Short human summary of a generated file."""
    g, n, box = info["growth"], info["n"], info["box_size"]
    spacing = box / n
    d, v = info["disp"], info["vel"]
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
        f"  time           {info['seconds']:.2f} s",
    ])


def run(args):
    params = load_params(args)
    print(summary(generate(params, args.out, args.overwrite, args.workers, args.quiet)))
    return 0
