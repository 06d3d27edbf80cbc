"""``icgen inspect FILE.h5``: check an initial-condition file and compare its P(k) with the target."""

import time
import warnings

from .. import background, io_hdf5, io_output, parameters, plotting, preflight, verify
from ..errors import InputError
from .common import warn_line

NAME = "inspect"
HELP = ("check an initial-condition file: layout, counts, particle mass, ids, displacements, "
        "and its P(k) against the target spectrum in units of cosmic variance")


def add_arguments(p):
    p.add_argument("file", metavar="FILE.h5", help="initial-condition file written by 'icgen ics'")
    p.add_argument("--params", metavar="PARAMS.toml",
                   help="parameter file giving cosmology and target spectrum (default: the file's own "
                        "'parameters' attribute)")
    p.add_argument("--mesh", type=int, default=None,
                   help="estimator mesh per side (default: twice the particle grid, or the grid itself "
                        "where the finer mesh would not fit in the memory available)")
    p.add_argument("--k-max", type=float, default=None,
                   help="largest k compared, h/Mpc (default: half the particle Nyquist wavenumber)")
    p.add_argument("--plot", metavar="FILE.png", help="draw the measured and target P(k)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing plot")
    p.add_argument("--workers", type=int, default=None, help="FFT threads")


def read_file(path):
    """Root attributes and whatever datasets /particles holds (missing ones are simply absent)."""
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise InputError(f"cannot open {path}: {exc}") from None
    with f:
        attrs = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in f.attrs.items()}
        data = {}
        if "particles" in f and isinstance(f["particles"], h5py.Group):
            for name, ds in f["particles"].items():
                if isinstance(ds, h5py.Dataset):
                    data[name] = ds[...]
    return attrs, data


def target_for(attrs, params_path=None):
    """(params, background, spectrum) of the file, or Nones with a reason."""
    from .. import io_input

    try:
        if params_path:
            params = parameters.load(params_path)
        elif "parameters" in attrs:
            params = parameters.loads(attrs["parameters"], source="the file's parameters attribute")
        else:
            return None, None, None, "no 'parameters' attribute; pass --params"
        bg = background.solve(params.cosmology)
        with warnings.catch_warnings(record=True):
            warnings.simplefilter("always")
            pk = io_input.spectrum_from_parameters(params, bg)
    except InputError as exc:
        return None, None, None, str(exc)
    return params, bg, pk, ""


def plot_inspection(res, title, path):
    """P(k) measured against the target (top) and their ratio in units of the errors (bottom)."""
    ps = res.spectrum
    fig, (ax1, ax2) = plotting.figure(2, 1, figsize=(7, 7), sharex=True,
                                      gridspec_kw={"height_ratios": [2, 1]})
    ax1.loglog(ps.k, res.target, "-", color="k", label="target P(k, z) (bin-averaged)")
    ax1.errorbar(ps.k, ps.power, yerr=res.sigma, fmt="o", ms=3, color="C0",
                 label="measured (CIC, interlaced)")
    ax1.set_ylabel("P(k)  [(Mpc/h)^3]")
    ax1.legend(loc="lower left")
    ax1.grid(alpha=0.3, which="both")
    ax2.axhline(0.0, color="k", lw=1)
    ax2.fill_between(ps.k, -res.sigma / res.target, res.sigma / res.target, color="0.85",
                     label="Gaussian error (cosmic variance)")
    ax2.plot(ps.k, ps.power / res.target - 1.0, "o-", ms=3, color="C0")
    ax2.set_xscale("log")
    ax2.set_xlabel("k  [h/Mpc]")
    ax2.set_ylabel("P / P_target - 1")
    ax2.legend(loc="upper left")
    ax2.grid(alpha=0.3, which="both")
    fig.suptitle(title)
    return plotting.save(fig, path)


def spectrum_lines(res):
    """The P(k) comparison bin by bin: k, modes, measured, target, ratio and deviation in sigma."""
    ps = res.spectrum
    lines = [f"  {'k [h/Mpc]':>10s} {'modes':>8s} {'P [(Mpc/h)^3]':>14s} {'P_target':>12s} {'P/P_t - 1':>10s} "
             f"{'(P-P_t)/sigma':>13s}"]
    for k, nm, p, t, s in zip(ps.k, ps.n_modes, ps.power, res.target, res.sigma):
        lines.append(f"  {k:10.4g} {nm:8.1f} {p:14.6g} {t:12.6g} {p / t - 1:+10.4f} {(p - t) / s:+13.2f}")
    return lines


def report_lines(checks):
    """One line per check: status, name, reason."""
    mark = {"pass": "PASS", "fail": "FAIL", "skip": "skip"}
    width = max(len(c.name) for c in checks)
    return [f"  {mark[c.status]:4s}  {c.name:<{width}s}  {c.detail}" for c in checks]


def verdict_line(checks):
    n_fail = sum(c.status == "fail" for c in checks)
    n_skip = sum(c.status == "skip" for c in checks)
    n_pass = len(checks) - n_fail - n_skip
    if n_fail:
        names = ", ".join(c.name for c in checks if c.status == "fail")
        return f"verdict: FAIL ({n_fail} failed: {names}; {n_pass} passed, {n_skip} skipped)"
    return f"verdict: PASS ({n_pass} passed, {n_skip} skipped)"


def default_mesh(n_side, data_bytes, available):
    """Estimator mesh: twice the particle grid if it fits in ``available`` bytes, else the grid.

    The interlaced estimator (:func:`icgen.power.mesh_modes`) holds a float64 mesh and two
    complex128 half spectra at once, about 26 n_mesh^3 bytes, beside the particle data and
    the float64 displacements the other checks make (counted as twice the data).
    """
    fine = 2 * n_side
    if available is None or 26 * fine**3 + 2 * data_bytes <= 0.9 * available:
        return fine
    return n_side


def run(args):
    if args.plot:
        io_output.check_output_path(args.plot, args.overwrite)
    if args.mesh is not None and not (8 <= args.mesh <= 4096 and args.mesh % 2 == 0):
        raise InputError(f"--mesh = {args.mesh}: need an even integer in [8, 4096]")
    t0 = time.perf_counter()
    attrs, data = read_file(args.file)
    params, bg, pk, why = target_for(attrs, args.params)
    if pk is None:
        warn_line(f"no target spectrum ({why}); the spectrum checks are skipped")
    n_mesh = args.mesh
    n_side = int(attrs.get("grid_per_side", 0) or 0)
    if n_mesh is None and n_side >= 4:
        n_mesh = default_mesh(n_side, sum(v.nbytes for v in data.values() if hasattr(v, "nbytes")),
                              preflight.available_memory())
        if n_mesh == n_side:
            warn_line(f"estimator mesh {n_mesh}^3 (twice the grid would not fit in the memory available); "
                      "P(k) is compared up to a quarter of its Nyquist wavenumber")
    res = verify.inspect_initial_conditions(attrs, data, bg, pk, n_mesh=n_mesh, k_max=args.k_max,
                                            workers=args.workers)
    # Integrity: stored CRC-32 of every dataset recomputed, parts of a distributed file present.
    problems = io_hdf5.verify_file(args.file, full=True)
    integrity = verify.Check("integrity", "fail" if problems else "pass",
                             "; ".join(problems) if problems else "checksums of every dataset verified")
    checks = [integrity, *res.checks]
    z = f", z = {float(attrs['redshift']):.4g}" if "redshift" in attrs else ""
    print(f"{args.file}: {attrs.get('grid_per_side', '?')}^3 particles, box {attrs.get('box_size', '?')} "
          f"Mpc/h{z}")
    if res.spectrum is not None:
        print("P(k) against the target at the file's redshift (sigma: Gaussian, from the target):")
        print("\n".join(spectrum_lines(res)))
    print("\n".join(report_lines(checks)))
    print(verdict_line(checks) + f"  [{time.perf_counter() - t0:.1f} s]")
    passed = res.passed and not problems
    if args.plot:
        if res.spectrum is None:
            warn_line("nothing to plot: P(k) was not measured")
        else:
            plot_inspection(res, f"{args.file}: {'PASS' if passed else 'FAIL'}, chi2 = {res.chi2:.1f} "
                                 f"for {len(res.spectrum)} bins, amplitude ratio {res.amplitude_ratio:.4f}",
                            args.plot)
            print(f"wrote {args.plot}")
    return 0 if passed else 1


