"""``icgen pm-evolve``: run icgen's compact particle-mesh stepper (a verification aid) over a step table.

NOT a production N-body code: it exists to prove that icgen's initial conditions and step
tables together reproduce linear growth (see :mod:`icgen.pm`). Check its snapshots with
``icgen check-run``.
"""

import time
from pathlib import Path

import numpy as np

from .. import background, io_output, io_snapshot, parameters, pm
from ..errors import InputError
from .cmd_inspect import read_file

NAME = "pm-evolve"
HELP = ("evolve an initial-condition file with the compact particle-mesh stepper over a step table "
        "(a verification aid, not a production N-body code) and write snapshots")


def add_arguments(p):
    p.add_argument("ics", metavar="ICS.h5", help="initial-condition file written by 'icgen ics'")
    p.add_argument("--steps", required=True, metavar="STEPS",
                   help="step table written by 'icgen schedule' (steps.csv or steps.h5, or its directory)")
    p.add_argument("--out-dir", required=True, metavar="DIR", help="directory for the snapshots (created)")
    p.add_argument("--mesh", type=int, default=None,
                   help="PM mesh per side (default and recommended: the particle grid, see icgen.pm)")
    p.add_argument("--prefix", default="snapshot_", help="snapshot file name prefix (default snapshot_)")
    p.add_argument("--kick-scale", type=float, default=1.0,
                   help="multiply every kick integral (testing only: 0.9 must fail 'icgen check-run')")
    p.add_argument("--overwrite", action="store_true", help="replace existing snapshots")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--workers", type=int, default=None, help="FFT threads (results do not depend on it)")


def read_step_table(path):
    """Named columns of a step table file (CSV with a header line, or HDF5 with one dataset per column)."""
    path = Path(path)
    if path.is_dir():
        for name in ("steps.csv", "steps.h5"):
            if (path / name).exists():
                path = path / name
                break
        else:
            raise InputError(f"--steps {path}: no steps.csv or steps.h5 in this directory")
    if not path.exists():
        raise InputError(f"--steps {path}: no such file")
    if path.suffix.lower() in (".h5", ".hdf5"):
        import h5py

        with h5py.File(path, "r") as f:
            return {k: f[k][...] for k in f if isinstance(f[k], h5py.Dataset)}
    try:
        table = np.genfromtxt(path, delimiter=",", names=True)
    except ValueError as exc:
        raise InputError(f"--steps {path}: not a CSV table with a header line ({exc})") from None
    if table.dtype.names is None or table.size == 0:
        raise InputError(f"--steps {path}: no columns or no rows")
    table = np.atleast_1d(table)
    return {name: table[name] for name in table.dtype.names}


def run(args):
    if not (0.0 < args.kick_scale <= 10.0):
        raise InputError(f"--kick-scale = {args.kick_scale}: need a value in (0, 10]")
    attrs, data = read_file(args.ics)
    for key in ("box_size", "scale_factor", "grid_per_side", "particle_mass", "parameters"):
        if key not in attrs:
            raise InputError(f"{args.ics}: attribute {key!r} missing; is this an 'icgen ics' file?")
    for key in ("position", "velocity"):
        if key not in data:
            raise InputError(f"{args.ics}: dataset /particles/{key} missing")
    params = parameters.loads(attrs["parameters"], source=f"{args.ics} parameters attribute")
    cosmo = params.cosmology
    n_side = int(attrs["grid_per_side"])
    n_mesh = args.mesh or n_side
    steps = pm.LeapfrogSteps.from_columns(read_step_table(args.steps))
    if args.kick_scale != 1.0:
        steps = pm.LeapfrogSteps(a_begin=steps.a_begin, a_end=steps.a_end, drift=steps.drift,
                                 kick_first_half=steps.kick_first_half * args.kick_scale,
                                 kick_second_half=steps.kick_second_half * args.kick_scale,
                                 output_after=steps.output_after, output_at_start=steps.output_at_start)
    a0 = float(attrs["scale_factor"])
    if not np.isclose(steps.a_begin[0], a0, rtol=1e-9, atol=0.0):
        raise InputError(f"the step table starts at a = {steps.a_begin[0]:.15g}, the initial conditions are at "
                         f"a = {a0:.15g}; build it with [snapshots] a_begin = {a0:.15g} (or the same start redshift)")
    # The outputs: the start (the initial conditions themselves) and every output step.
    n_out = int(steps.output_after.sum())
    out_dir = Path(args.out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"--out-dir {out_dir} exists and is not a directory")
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = [out_dir / f"{args.prefix}{i:03d}.h5" for i in range(n_out + 1)]
    for p in paths:
        io_output.check_output_path(p, args.overwrite)
    bg = background.solve(cosmo, a_max=max(1.0, float(steps.a_end[-1])))
    box = float(attrs["box_size"])
    ids = data.get("id")
    extra = {"produced_by": "icgen pm-evolve (verification aid, not a production N-body code)",
             "pm_mesh": n_mesh, "initial_conditions": str(args.ics), "kick_scale": args.kick_scale,
             "step_table": str(args.steps)}
    written = []

    def write(snap):
        path = paths[len(written)]
        io_snapshot.write_snapshot(path, snap.position, snap.velocity, ids, box, snap.a, cosmo,
                                   float(attrs["particle_mass"]), time_gyr=bg.t(snap.a), step=snap.step,
                                   parameters_toml=attrs["parameters"], overwrite=args.overwrite,
                                   extra_attrs=extra)
        written.append((path, snap.a))

    t0 = time.perf_counter()
    from tqdm import tqdm

    with tqdm(total=steps.n_steps, desc=f"pm {n_side}^3, mesh {n_mesh}^3", disable=args.quiet,
              leave=False, unit="step") as bar:
        # The initial conditions are the first snapshot (a at the start, step 0).
        x0 = np.array(data["position"], dtype=np.float64) % box
        x0[x0 >= box] = 0.0
        write(pm.PMSnapshot(a=a0, step=0, position=x0, velocity=np.array(data["velocity"], dtype=np.float64)))
        pm.evolve(data["position"], data["velocity"], a0, box, cosmo.omega_m, steps, n_mesh,
                  on_output=write, progress=lambda done, total: bar.update(1), workers=args.workers)
    took = time.perf_counter() - t0
    print(f"evolved {n_side}^3 particles in a {box:g} Mpc/h box with a {n_mesh}^3 PM mesh, "
          f"{steps.n_steps} KDK steps from a = {a0:.6g} to {steps.a_end[-1]:.6g} ({took:.1f} s)"
          + (f"; kicks scaled by {args.kick_scale:g}" if args.kick_scale != 1.0 else ""))
    for path, a in written:
        print(f"  wrote {path}  (a = {a:.6g}, z = {1 / a - 1:.4g})")
    return 0
