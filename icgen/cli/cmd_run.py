"""``icgen run``: the whole job in one directory: ICs, schedule, step table, report and plots."""

import os
import shutil
import time
from pathlib import Path

import numpy as np

from .. import __version__, growth_check, io_hdf5, io_output, io_schedule, plotting, power, schedule
from .cmd_ics import generate, summary
from .cmd_schedule import plot_schedule
from .common import add_params_arguments, load_params

NAME = "run"
HELP = ("the whole job in one directory: initial conditions, snapshot schedule, step table, "
        "a report and plots (the bundled example when no PARAMS is given)")

#: Files of a run directory.
FILES = {"ics": "ics.h5", "parameters": "parameters.toml", "report": "report.txt",
         "pk_plot": "pk_start.png", "schedule_plot": "schedule.png"}


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out-dir", default="icgen_run", metavar="DIR",
                   help="output directory (default: icgen_run); created complete or not at all")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output directory")
    p.add_argument("--workers", type=int, default=os.cpu_count(), help="FFT threads")
    p.add_argument("--quiet", action="store_true", help="no progress bars")


def check_start_spectrum(positions, box_size, n, pk, z):
    """Measured P(k) of the particles against the target P(k, z), bin by bin.

    CIC with interlacing on a mesh of 2n per side; no shot-noise subtraction (a
    perturbed lattice has far less than Poisson noise: common practice). Bins up
    to half the particle Nyquist wavenumber are compared in units of their Gaussian
    error (where aliasing and the lattice are negligible).

    Returns
    -------
    measured : PowerSpectrum
    target : ndarray
        P(k, z) at the bins' mean k.
    pulls : ndarray
        (P_measured - P_target) / sigma_target for the compared bins (nan elsewhere).
    """
    ps = power.measure(positions, box_size, 2 * n, scheme="cic", interlace=True, subtract_shot_noise=False)
    ok = np.isfinite(ps.k) & (ps.k < 0.5 * np.pi * n / box_size) & (ps.n_modes > 0)
    target = np.full(ps.k.shape, np.nan)
    target[ok] = pk.P(ps.k[ok], z)
    pulls = np.full(ps.k.shape, np.nan)
    sig = target[ok] * np.sqrt(1.0 / ps.n_modes[ok])  # Gaussian error of P_hat for P = target
    pulls[ok] = (ps.power[ok] - target[ok]) / sig
    return ps, target, pulls


def plot_start_spectrum(ps, target, pulls, k_f, k_nyq, title, path):
    """P(k) of the initial particles against the target, with the ratio below."""
    fig, (ax1, ax2) = plotting.figure(2, 1, figsize=(6.5, 6), sharex=True,
                                      gridspec_kw={"height_ratios": [3, 1.4]})
    ok = np.isfinite(ps.k) & (ps.power > 0) & (ps.k < 1.25 * k_nyq)
    ax1.errorbar(ps.k[ok], ps.power[ok], yerr=ps.sigma[ok], fmt=".", ms=3, label="measured (CIC, interlaced)")
    cmp = np.isfinite(pulls)
    ax1.loglog(ps.k[cmp], target[cmp], "k-", lw=1, label="target P(k, z_start)")
    for k, lab in ((k_f, "fundamental"), (k_nyq, "particle Nyquist")):
        ax1.axvline(k, color="0.6", ls=":", lw=1)
        ax2.axvline(k, color="0.6", ls=":", lw=1)
        ax1.text(k, ax1.get_ylim()[0], f" {lab}", rotation=90, va="bottom", fontsize=7, color="0.4")
    ax1.set_ylabel("P(k) [(Mpc/h)^3]")
    ax1.set_title(title)
    ax1.legend(fontsize=8)
    ax1.grid(alpha=0.3, which="both")
    ax2.semilogx(ps.k[cmp], pulls[cmp], "o", ms=3)
    ax2.axhline(0, color="k", lw=0.8)
    ax2.fill_between([ps.k[cmp].min(), ps.k[cmp].max()], -2, 2, color="0.85")
    ax2.set_xlabel("k [h/Mpc]")
    ax2.set_ylabel("(meas - target)/sigma")
    ax2.grid(alpha=0.3, which="both")
    return plotting.save(fig, path)


def run(args):
    params = load_params(args)
    out_dir = io_output.check_output_dir(args.out_dir, args.overwrite)
    tmp = io_output.staging_dir(out_dir)
    t0 = time.perf_counter()
    try:
        lines = [f"icgen {__version__} run, parameters from {params.source}", ""]
        # 1. Initial conditions.
        info = generate(params, tmp / FILES["ics"], workers=args.workers, quiet=args.quiet)
        bg, pk, a_start = info["bg"], info["pk"], info["growth"].a
        lines += ["Initial conditions", summary(info).replace(str(tmp), str(out_dir)), ""]
        # 2. Snapshot schedule and step table, starting at the ICs' scale factor.
        snaps = schedule.from_parameters(params, bg, a_begin=a_start)
        plan = growth_check.from_parameters(params, bg, snaps)
        table, acc = plan.table, plan.accuracy
        written = io_schedule.write_schedule_outputs(tmp, snaps, table, acc)
        lines += ["Schedule",
                  f"  outputs        {len(snaps)} from z = {1 / snaps.a_begin - 1:.4g} to z = {1 / snaps.a_end - 1:.4g}, "
                  f"spacing {snaps.spacing}",
                  f"  steps          {table.n_steps}, even in {table.spacing}; largest d ln a = {table.dln_a.max():.4g}",
                  f"  growth error   at the last output (a = {acc.a[-1]:.6g}): displacement {acc.err_D1[-1]:+.3e}, "
                  f"velocity {acc.err_f1[-1]:+.3e} ({acc.leapfrog.upper()} on the linear growing mode)",
                  "  files          " + ", ".join(Path(p).name for p in written.values()), ""]
        # 3. P(k) of the particles against the target.
        _, data = io_hdf5.read_particles(tmp / FILES["ics"])
        n, box, z0 = info["n"], info["box_size"], 1.0 / a_start - 1.0
        ps, target, pulls = check_start_spectrum(data["position"], box, n, pk, z0)
        del data
        cmp = np.isfinite(pulls)
        chi2, dof = float(np.sum(pulls[cmp] ** 2)), int(cmp.sum())
        lines += ["Power spectrum of the initial particles (CIC, interlaced, mesh 2N)",
                  f"  bins with k < k_Nyquist/2: {dof}; chi2 = {chi2:.1f} for {dof} bins "
                  f"(Gaussian errors; the realisation's cosmic variance)",
                  f"  largest |pull| = {np.max(np.abs(pulls[cmp])):.2f} sigma", ""]
        plot_start_spectrum(ps, target, pulls, 2 * np.pi / box, np.pi * n / box,
                            f"{n}^3 particles, {box:g} Mpc/h, z = {z0:.4g}", tmp / FILES["pk_plot"])
        a_curve = np.geomspace(snaps.a_begin, snaps.a_end, 400)
        plot_schedule(bg.t(a_curve), a_curve, snaps.t_gyr, snaps.a, table.a_mid, table.dln_a,
                      acc.a, acc.err_D1, acc.err_f1,
                      f"{table.n_steps} steps even in {table.spacing}, {acc.leapfrog.upper()}",
                      tmp / FILES["schedule_plot"])
        (tmp / FILES["parameters"]).write_text(params.to_toml(), encoding="utf-8")
        lines += [f"Files: {', '.join(sorted(p.name for p in tmp.iterdir()))}",
                  f"Total time {time.perf_counter() - t0:.1f} s"]
        (tmp / FILES["report"]).write_text("\n".join(lines) + "\n", encoding="utf-8")
        old = io_output.swap_in_dir(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    print("\n".join(lines).replace(str(tmp), str(out_dir)))
    print(f"wrote {out_dir}/")
    return 0
