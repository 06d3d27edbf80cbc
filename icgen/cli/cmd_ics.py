"""``icgen ics``: particle initial conditions (Zel'dovich or 2LPT) in one HDF5 file."""

import json
import os
import time
import warnings

import numpy as np

from .. import background, io_hdf5, io_output, pipeline
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
    """Run the initial-condition pipeline and write ``out``; returns (parts, seconds)."""
    io_output.check_output_path(out, overwrite)
    t0 = time.perf_counter()
    bg, pk, setup, a_start, advice = prepare(params)
    steps = pipeline.N_PROGRESS_STEPS[setup.lpt_order] + 1
    with progress_bar(steps, f"ics {setup.n}^3", disable=quiet) as bar:
        parts = pipeline.initial_conditions(pk, bg, setup, a_start, workers=workers,
                                            progress=lambda stage: bar.update(1))
        extra = {}
        if advice is not None:
            extra["start_rule"] = json.dumps({"rule": "auto (common practice, see icgen.start)",
                                              **advice.limits, "z_start_1lpt": advice.z_start_1lpt,
                                              "z_start_2lpt": advice.z_start_2lpt})
        io_hdf5.write_particles(out, parts, params.to_toml(), params.cosmology, setup.seed,
                                setup.fixed_amplitude, setup.paired, overwrite, extra)
        bar.update(1)
    return parts, time.perf_counter() - t0


def summary(parts, out, seconds):
    """Short human summary of a particle set."""
    g = parts.growth
    n = round(parts.n_particles ** (1 / 3))
    spacing = parts.box_size / n
    disp = np.asarray(parts.position, dtype=np.float64).reshape(n, n, n, 3)
    q = np.arange(n) * spacing
    d = np.stack([disp[..., 0] - q[:, None, None], disp[..., 1] - q[None, :, None],
                  disp[..., 2] - q[None, None, :]], axis=-1)
    d -= parts.box_size * np.rint(d / parts.box_size)  # undo the periodic wrap
    rms = float(np.sqrt(np.mean(d**2)))
    dmax = float(np.max(np.abs(d)))
    lines = [
        f"wrote {out}",
        f"  particles      {n}^3 = {parts.n_particles:,} in a {parts.box_size:g} Mpc/h box "
        f"(spacing {spacing:.4g} Mpc/h), order {parts.lpt_order}LPT",
        f"  particle mass  {parts.mass:.6e} Msun/h",
        f"  start          z = {1 / g.a - 1:.4g} (a = {g.a:.6g}); D1 = {g.D1:.6g}, f1 = {g.f1:.6f}, "
        f"D2 = {g.D2:.6g}, f2 = {g.f2:.6f}",
        f"  displacement   rms per component {rms:.4g} Mpc/h = {rms / spacing:.3f} spacing; "
        f"max {dmax:.4g} Mpc/h = {dmax / spacing:.3f} spacing",
        f"  velocity       rms per component {float(np.sqrt(np.mean(np.square(parts.velocity, dtype=np.float64)))):.4g} km/s",
        f"  time           {seconds:.2f} s",
    ]
    return "\n".join(lines)


def run(args):
    params = load_params(args)
    parts, seconds = generate(params, args.out, args.overwrite, args.workers, args.quiet)
    print(summary(parts, args.out, seconds))
    return 0
