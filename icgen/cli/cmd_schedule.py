"""``icgen schedule``: output times, the integrator's step table and its measured growth error."""

import sys
import time
from pathlib import Path

import numpy as np

from .. import background, growth_check, io_output, io_schedule, plotting, schedule
from ..errors import InputError
from .common import add_params_arguments, load_params, provenance

NAME = "schedule"
HELP = ("snapshot times and the leapfrog step table (drift and kick integrals), "
        "with the step table's growth error measured on the linear growing mode")


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out-dir", required=True, metavar="DIR",
                   help=f"directory for {io_schedule.FILES['list']}, outputs.csv and steps.csv "
                        "(created if missing)")
    p.add_argument("--format", choices=("csv", "hdf5"), default="csv",
                   help="format of the two tables (default csv; hdf5 writes .h5)")
    p.add_argument("--plot", metavar="FILE.png",
                   help="also draw a(t) with the outputs, the step sizes and the growth errors")
    p.add_argument("--overwrite", action="store_true", help="replace existing outputs")


def _progress_bar():
    """A tqdm progress bar on stderr for the step-count search (shown after 0.5 s)."""
    from tqdm import tqdm

    bar = tqdm(desc="step-count search", unit="trial", file=sys.stderr, delay=0.5, leave=False)

    def update(count, n_steps, error):
        bar.update(1)
        bar.set_postfix_str(f"{n_steps} steps, error {error:.2e}", refresh=False)
    return bar, update


def plot_schedule(t_curve, a_curve, snap_t, snap_a, step_a_mid, step_dlna, acc_a, err_d1, err_f1,
                  title, path):
    """Three panels: a(t) with outputs marked; step widths in ln a; growth error per output."""
    fig, (ax1, ax2, ax3) = plotting.figure(1, 3, figsize=(15, 4.2))
    ax1.plot(t_curve, a_curve, color="k", lw=1)
    ax1.plot(snap_t, snap_a, "o", color="C3", ms=4, label=f"outputs ({len(snap_a)})")
    ax1.set_xlabel("cosmic time t [Gyr]")
    ax1.set_ylabel("scale factor a")
    ax1.set_title("expansion history and outputs")
    ax1.legend(loc="upper left")
    ax1.grid(alpha=0.3)

    ax2.semilogx(step_a_mid, step_dlna, ".", ms=3, color="C0")
    ax2.set_xlabel("scale factor a (step midpoint)")
    ax2.set_ylabel("d ln a per step")
    ax2.set_title(f"step sizes ({len(step_dlna)} steps)")
    ax2.grid(alpha=0.3, which="both")

    for err, lab, col in ((err_d1, "displacement  |psi/D1 - 1|", "C2"),
                          (err_f1, "velocity  |v/v_growing - 1|", "C1")):
        e = np.abs(err)
        ok = e > 0  # an output at the start has exactly zero error
        ax3.loglog(acc_a[ok], e[ok], "o-", ms=3, color=col, label=lab)
    ax3.set_xlabel("scale factor a (outputs)")
    ax3.set_ylabel("relative error, linear growing mode")
    ax3.set_title("growth error of the step table")
    ax3.legend(loc="best")
    ax3.grid(alpha=0.3, which="both")
    fig.suptitle(title)
    return plotting.save(fig, path)


def run(args):
    params = load_params(args)
    cosmo = params.cosmology
    paths = io_schedule.output_paths(args.out_dir, args.format)
    for p in paths.values():
        if p.exists() and not args.overwrite:
            raise InputError(f"output {p} exists; pass --overwrite to replace it")
    out_dir = Path(args.out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"--out-dir {out_dir} exists and is not a directory")
    # The directory (and missing parents) is created by the writer, once everything has been computed.
    if args.plot:
        io_output.check_output_path(args.plot, args.overwrite)
    t0 = time.perf_counter()
    bg = background.solve(cosmo)  # a <= 100, the range [snapshots] a_end allows
    snaps = schedule.from_parameters(params, bg)
    bar = None
    progress = None
    if params.get("steps", "target_growth_error") is not None:
        bar, progress = _progress_bar()
    try:
        plan = growth_check.from_parameters(params, bg, snaps, progress=progress)
    finally:
        if bar is not None:
            bar.close()
    table, acc = plan.table, plan.accuracy
    attrs = provenance(params)
    written = io_schedule.write_schedule_outputs(args.out_dir, snaps, table, acc,
                                                 overwrite=args.overwrite,
                                                 table_format=args.format, attrs=attrs)
    took = time.perf_counter() - t0

    dlna = table.dln_a
    i_big = int(np.argmax(dlna))
    print(f"outputs: {len(snaps)} from a_begin = {snaps.a_begin:.6g} (z = {1 / snaps.a_begin - 1:.6g}) "
          f"to a_end = {snaps.a_end:.6g} (z = {1 / snaps.a_end - 1:.6g}), spacing {snaps.spacing}")
    how = (f"smallest count meeting target {plan.search.target:g}: {plan.search.count} "
           f"({len(plan.search.trials)} trials)" if plan.search else f"nominal count {table.count}")
    print(f"steps: {table.n_steps}, even in {table.spacing}"
          + (f" (p = {table.power:g})" if table.spacing == "power" else "") + f"; {how}")
    print(f"largest step: d ln a = {dlna[i_big]:.4g} (a {table.a_begin[i_big]:.6g} -> "
          f"{table.a_end[i_big]:.6g}, {table.dt_gyr[i_big]:.4g} Gyr); "
          f"longest in time: {table.dt_gyr.max():.4g} Gyr")
    print(f"growth error ({acc.leapfrog.upper()}) at the last output a = {acc.a[-1]:.6g}: "
          f"displacement {acc.err_D1[-1]:+.3e}, velocity {acc.err_f1[-1]:+.3e}; "
          f"largest over outputs {np.max(np.abs(acc.err_D1)):.3e}")
    print("wrote " + ", ".join(str(p) for p in written.values()) + f" ({took:.2f} s)")
    if args.plot:
        a_curve = np.geomspace(snaps.a_begin, snaps.a_end, 400)
        plot_schedule(bg.t(a_curve), a_curve, snaps.t_gyr, snaps.a, table.a_mid, dlna,
                      acc.a, acc.err_D1, acc.err_f1,
                      f"h = {cosmo.h:g}, omega_m = {cosmo.omega_m:g}; {table.n_steps} {table.spacing} "
                      f"steps, {acc.leapfrog.upper()}", args.plot)
        print(f"wrote {args.plot}")
    return 0
