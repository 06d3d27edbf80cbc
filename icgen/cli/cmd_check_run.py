"""``icgen check-run SNAPSHOT ...``: do a run's snapshots follow linear theory on the largest scales?"""

import time

import numpy as np

from .. import background, io_output, io_snapshot, parameters, plotting, verify
from ..errors import InputError
from .cmd_inspect import report_lines, verdict_line
from .common import warn_line

NAME = "check-run"
HELP = ("measure P(k) in a run's snapshots and compare the growth of the largest-scale bins with "
        "D1(a)^2, the velocity divergence with f1 and the recorded time with t(a)")


def add_arguments(p):
    p.add_argument("snapshots", nargs="+", metavar="SNAPSHOT",
                   help="snapshot files of one run (icgen layouts, or any HDF5 file with the options below)")
    p.add_argument("--positions", metavar="DATASET", help="dataset of the (N, 3) positions in Mpc/h "
                   "(default: /particles/position of icgen files)")
    p.add_argument("--velocities", metavar="DATASET", help="dataset of the (N, 3) peculiar velocities in km/s")
    p.add_argument("--box-size", type=float, metavar="L", help="box side in Mpc/h (default: the box_size attribute)")
    p.add_argument("--scale-factor-attr", metavar="NAME",
                   help="root attribute holding the scale factor (default scale_factor; a name containing "
                        "'redshift' is read as z)")
    p.add_argument("--time-attr", metavar="NAME", help="root attribute holding the cosmic time in Gyr "
                   "(default time_gyr when present)")
    p.add_argument("--params", metavar="PARAMS.toml",
                   help="parameter file with the run's cosmology (default: the first snapshot's "
                        "'parameters' attribute)")
    p.add_argument("--mesh", type=int, default=None, help="estimator mesh per side (default ~3x the particle grid)")
    p.add_argument("--bins", type=int, default=3, help="largest-scale k bins compared (default 3)")
    p.add_argument("--n-sigma", type=float, default=3.0,
                   help="statistical allowance in units of the growth ratio's cosmic variance (default 3)")
    p.add_argument("--floor", type=float, default=0.01,
                   help="systematic allowance added to it, relative (default 0.01)")
    p.add_argument("--time-tolerance", type=float, default=1e-3,
                   help="allowed |t - t(a)| as a fraction of the age (default 1e-3)")
    p.add_argument("--wrap", action="store_true",
                   help="wrap positions outside [0, L] periodically (reported) instead of refusing them")
    p.add_argument("--plot", metavar="FILE.png", help="draw growth, velocity and time comparisons")
    p.add_argument("--overwrite", action="store_true", help="replace an existing plot")
    p.add_argument("--workers", type=int, default=None, help="FFT threads")


def _load(args):
    snaps = []
    for path in args.snapshots:
        s = io_snapshot.read_snapshot(path, positions=args.positions, velocities=args.velocities,
                                      box_size=args.box_size, scale_factor_attr=args.scale_factor_attr,
                                      time_attr=args.time_attr)
        pos = np.asarray(s.position)
        if pos.dtype not in (np.float32, np.float64):
            pos = pos.astype(np.float64)
        outside = int(np.count_nonzero((pos < 0) | (pos > s.box_size)))
        if outside:
            if not args.wrap:
                raise InputError(f"{path}: {outside} coordinates outside [0, {s.box_size:g}] Mpc/h; pass --wrap "
                                 "to wrap them periodically")
            warn_line(f"{path}: wrapped {outside} coordinates into [0, {s.box_size:g}) (--wrap)")
            pos = np.mod(pos, s.box_size)
            pos[pos >= s.box_size] = 0.0
        snaps.append(io_snapshot.SnapshotData(position=pos, velocity=s.velocity, box_size=s.box_size, a=s.a,
                                              time_gyr=s.time_gyr, source=s.source, attrs=s.attrs))
    return snaps


def _cosmology(args, snaps):
    if args.params:
        return parameters.load(args.params).cosmology
    attrs = snaps[0].attrs or {}
    if "parameters" not in attrs:
        raise InputError(f"{snaps[0].source} records no 'parameters'; give the run's cosmology with --params")
    return parameters.loads(attrs["parameters"], source=f"{snaps[0].source} parameters attribute").cosmology


def table_lines(res):
    """Per snapshot: a, z, time deviation, and per bin the growth and velocity errors."""
    head = f"  {'a':>8s} {'z':>8s} {'t [Gyr]':>9s} {'dt [Gyr]':>9s}"
    for k in res.k:
        head += f" | G/G_lin-1 k={k:.3g} (tol)"
    head += " | f/f1-1 (bin 1)"
    lines = [head]
    err = res.growth_error
    for i, a in enumerate(res.a):
        t = res.t_gyr[i]
        row = f"  {a:8.5f} {1 / a - 1:8.3f} {t:9.4f} {t - res.t_expected[i]:+9.1e}" if np.isfinite(t) else \
            f"  {a:8.5f} {1 / a - 1:8.3f} {'-':>9s} {'-':>9s}"
        for j in range(res.k.size):
            cell = "reference" if i == 0 else f"{err[i, j]:+.4f} ({res.growth_tolerance[i, j]:.4f})"
            row += f" | {cell:>24s}"
        f = res.f[i, 0]
        row += f" | {f / res.f_expected[i] - 1:+.4f} ({res.f_tolerance[i, 0]:.4f})" if np.isfinite(f) else " | -"
        lines.append(row)
    return lines


def plot_run(res, title, path):
    """Growth error per bin against a with its tolerance; f/f1; time deviation."""
    fig, axes = plotting.figure(1, 3, figsize=(18, 5))
    ax1, ax2, ax3 = axes
    err = res.growth_error
    for j, k in enumerate(res.k):
        ax1.errorbar(res.a[1:], err[1:, j], yerr=res.growth_sigma[1:, j], fmt="o-", ms=4, capsize=2,
                     color=f"C{j}", label=f"k = {k:.3g} h/Mpc ({res.n_modes[j]:g} modes)")
        ax1.plot(res.a[1:], res.growth_tolerance[1:, j], ":", color=f"C{j}")
        ax1.plot(res.a[1:], -res.growth_tolerance[1:, j], ":", color=f"C{j}")
    ax1.axhline(0, color="k", lw=1)
    ax1.set_xscale("log")
    ax1.set_xlabel("scale factor a")
    ax1.set_ylabel("[P(k,a)/P(k,a_ref)] / (D1/D1_ref)^2 - 1")
    ax1.set_title("growth of the largest scales (dotted: tolerance)")
    ax1.legend(loc="best", fontsize=8)
    ax1.grid(alpha=0.3, which="both")
    have = np.isfinite(res.f[:, 0])
    if have.any():
        for j, k in enumerate(res.k):
            ax2.plot(res.a[have], res.f[have, j] / res.f_expected[have] - 1, "o-", ms=4, color=f"C{j}",
                     label=f"k = {k:.3g}")
        ax2.axhline(0, color="k", lw=1)
        ax2.legend(loc="best", fontsize=8)
    else:
        ax2.text(0.5, 0.5, "no velocities", ha="center", va="center", transform=ax2.transAxes)
    ax2.set_xscale("log")
    ax2.set_xlabel("scale factor a")
    ax2.set_ylabel("f / f1 - 1")
    ax2.set_title("velocity divergence: f = -P_dt / (a H P_dd)")
    ax2.grid(alpha=0.3, which="both")
    have_t = np.isfinite(res.t_gyr)
    if have_t.any():
        ax3.plot(res.a[have_t], res.t_gyr[have_t] - res.t_expected[have_t], "o-", ms=4)
        ax3.axhline(0, color="k", lw=1)
    else:
        ax3.text(0.5, 0.5, "no recorded times", ha="center", va="center", transform=ax3.transAxes)
    ax3.set_xscale("log")
    ax3.set_xlabel("scale factor a")
    ax3.set_ylabel("t_file - t(a)  [Gyr]")
    ax3.set_title("a(t) against the background")
    ax3.grid(alpha=0.3, which="both")
    fig.suptitle(title)
    fig.tight_layout(rect=(0, 0, 1, 0.95))
    return plotting.save(fig, path)


def run(args):
    if args.plot:
        io_output.check_output_path(args.plot, args.overwrite)
    if len(args.snapshots) < 2:
        raise InputError("check-run needs at least two snapshots of the run")
    t0 = time.perf_counter()
    snaps = _load(args)
    cosmo = _cosmology(args, snaps)
    bg = background.solve(cosmo, a_max=max(1.0, max(s.a for s in snaps)))
    res = verify.check_run(snaps, bg, n_mesh=args.mesh, n_bins=args.bins, n_sigma=args.n_sigma,
                           floor=args.floor, time_tolerance=args.time_tolerance, workers=args.workers)
    box = snaps[0].box_size
    print(f"{len(snaps)} snapshots, {snaps[0].position.shape[0]:,} particles in a {box:g} Mpc/h box; "
          f"reference a = {res.a[0]:.6g}; bins k = {', '.join(f'{k:.3g}' for k in res.k)} h/Mpc "
          f"(non-linear scale of the last snapshot k_nl = {res.k_nl:.3g} h/Mpc)")
    print("\n".join(table_lines(res)))
    print("\n".join(report_lines(res.checks)))
    print(verdict_line(res.checks) + f"  [{time.perf_counter() - t0:.1f} s]")
    if args.plot:
        plot_run(res, f"{len(snaps)} snapshots, {snaps[0].position.shape[0]:,} particles, {box:g} Mpc/h: "
                      f"{'PASS' if res.passed else 'FAIL'} (k_nl = {res.k_nl:.3g} h/Mpc at a = {res.a[-1]:.3g})",
                 args.plot)
        print(f"wrote {args.plot}")
    return 0 if res.passed else 1
