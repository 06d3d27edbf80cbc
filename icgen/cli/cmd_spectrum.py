"""``icgen spectrum``: tabulate the normalised linear matter power spectrum P(k, z).

Output columns (CSV with one header line, or HDF5 datasets for .h5/.hdf5):

* ``k_h_mpc`` -- wavenumber k in h/Mpc (log-spaced);
* ``P_z<z>`` -- linear P(k, z) in (Mpc/h)^3 for each requested redshift, e.g.
  ``P_z0``, ``P_z49``, ``P_z0.5``;
* ``Delta2_z<z>`` -- the dimensionless Delta^2(k, z) = k^3 P(k, z) / (2 pi^2).

P(k, z) = P(k, 0) D1(z)^2 with this cosmology's linear growth D1 (D1(z=0) = 1).
"""

import time
import warnings

import numpy as np

from .. import background, io_input, io_output, plotting, spectrum
from ..errors import InputError
from .common import provenance, add_params_arguments, load_params, warn_line

NAME = "spectrum"
HELP = ("tabulate the normalised linear P(k, z): k in h/Mpc, P in (Mpc/h)^3, and Delta^2 "
        "(CSV, or HDF5 for .h5)")

#: Default k range (h/Mpc) for analytic sources; tables default to their own range.
DEFAULT_K_RANGE = (1e-4, 1e2)
#: Allowed range of --z (that of [spectrum] redshift).
Z_RANGE = (0.0, 1e4)


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out", required=True,
                   help="output table (.csv, or .h5 for HDF5): columns k_h_mpc [h/Mpc], "
                        "P_z<z> [(Mpc/h)^3] and Delta2_z<z> [dimensionless] for each z")
    p.add_argument("--z", type=float, nargs="+", default=[0.0], metavar="Z",
                   help="redshift(s) to tabulate (default 0)")
    p.add_argument("--k-min", type=float, default=None,
                   help="smallest k in h/Mpc (default: the table's first k, or 1e-4)")
    p.add_argument("--k-max", type=float, default=None,
                   help="largest k in h/Mpc (default: the table's last k, or 100)")
    p.add_argument("--points", type=int, default=500, help="number of log-spaced k (default 500)")
    p.add_argument("--plot", metavar="FILE.png",
                   help="also draw P(k), marking the box's fundamental and Nyquist wavenumbers")
    p.add_argument("--overwrite", action="store_true", help="replace existing outputs")


def z_label(z):
    """Column suffix of a redshift: 0 -> 'z0', 49.0 -> 'z49', 0.5 -> 'z0.5'."""
    return f"z{z:g}"


def table(spec, k, redshifts):
    """Columns k_h_mpc, P_z<z>, Delta2_z<z> (dict name -> array) and their units."""
    cols = {"k_h_mpc": k}
    units = {"k_h_mpc": "h/Mpc"}
    for z in redshifts:
        p = np.asarray(spec.P(k, z))
        cols[f"P_{z_label(z)}"] = p
        units[f"P_{z_label(z)}"] = "(Mpc/h)^3"
    for z in redshifts:
        cols[f"Delta2_{z_label(z)}"] = k**3 * cols[f"P_{z_label(z)}"] / (2.0 * np.pi**2)
        units[f"Delta2_{z_label(z)}"] = "1"
    return cols, units


def plot_spectrum(k, p_by_z, path, title, box=None, k_range=None, overwrite=True):
    """Draw P(k) for each redshift (log-log) and write it to ``path`` (PNG).

    Parameters
    ----------
    k : ndarray
        Wavenumbers in h/Mpc.
    p_by_z : dict[float, ndarray]
        Redshift -> P(k, z) in (Mpc/h)^3.
    path : str or Path
        Output PNG.
    title : str
    box : tuple (box_size, particles_per_side), optional
        Marks the fundamental 2 pi/L and the particle Nyquist pi N/L.
    k_range : tuple (k_min, k_max), optional
        Where P is tabulated; outside it is shaded as extrapolated.
    """
    fig, ax = plotting.figure(figsize=(7, 5))
    for z, p in p_by_z.items():
        ax.loglog(k, p, label=f"z = {z:g}")
    if k_range is not None:
        lo, hi = k_range
        if k[0] < lo:
            ax.axvspan(k[0], lo, color="0.85", label="power-law extrapolation")
        if k[-1] > hi:
            ax.axvspan(hi, k[-1], color="0.85",
                       label=None if k[0] < lo else "power-law extrapolation")
    if box is not None:
        size, n = box
        k_f, k_ny = 2.0 * np.pi / size, np.pi * n / size
        ax.axvline(k_f, color="k", ls="--", lw=1, label=f"fundamental 2pi/L = {k_f:.3g} h/Mpc")
        ax.axvline(k_ny, color="k", ls=":", lw=1, label=f"particle Nyquist pi N/L = {k_ny:.3g} h/Mpc")
    ax.set_xlim(k[0], k[-1])
    ax.set_xlabel("k [h/Mpc]")
    ax.set_ylabel("linear P(k) [(Mpc/h)$^3$]")
    ax.set_title(title)
    ax.grid(alpha=0.3, which="both")
    ax.legend(fontsize=8)
    return plotting.save(fig, path, overwrite=overwrite)


def _check_args(args):
    if not (2 <= args.points <= 10**7):
        raise InputError(f"--points = {args.points} is outside the allowed range [2, 1e7]")
    for z in args.z:
        if not (Z_RANGE[0] <= z <= Z_RANGE[1]):
            raise InputError(f"--z = {z:g} is outside the allowed range [{Z_RANGE[0]:g}, {Z_RANGE[1]:g}]")
    if len(set(z_label(z) for z in args.z)) != len(args.z):
        raise InputError(f"--z {' '.join(f'{z:g}' for z in args.z)}: each redshift once, please")
    for name in ("k_min", "k_max"):
        v = getattr(args, name)
        if v is not None and not (0.0 < v < np.inf):
            raise InputError(f"--{name.replace('_', '-')} = {v:g} must be a positive wavenumber in h/Mpc")


def run(args):
    _check_args(args)
    params = load_params(args)
    cosmo = params.cosmology
    io_output.check_output_path(args.out, args.overwrite)
    if args.plot:
        io_output.check_output_path(args.plot, args.overwrite)
    t0 = time.perf_counter()
    bg = background.solve(cosmo)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        spec = io_input.spectrum_from_parameters(params, bg)
        lo_def, hi_def = ((spec.k_min, spec.k_max) if spec.source == "table" else DEFAULT_K_RANGE)
        k_min = args.k_min if args.k_min is not None else lo_def
        k_max = args.k_max if args.k_max is not None else hi_def
        if not k_min < k_max:
            raise InputError(f"need --k-min < --k-max, got {k_min:g} and {k_max:g} h/Mpc")
        box = io_input.box_parameters(params)
        if box is not None:
            spec.warn_if_extrapolating(*spectrum.required_k_range(*box))
        if args.k_min is not None or args.k_max is not None:
            spec.warn_if_extrapolating(k_min, k_max)
    for w in caught:
        warn_line(str(w.message))
    k = np.geomspace(k_min, k_max, args.points)
    cols, units = table(spec, k, args.z)
    attrs = {"format": "icgen.spectrum", **provenance(params), "source": spec.label, "normalisation": spec.normalisation,
             "sigma_8": spec.sigma_8, "k_min_table": spec.k_min, "k_max_table": spec.k_max}
    io_output.write_columns(args.out, cols, units=units, attrs=attrs, overwrite=args.overwrite)
    took = time.perf_counter() - t0
    print(f"wrote {args.out}: {args.points} rows, k in [{k_min:.4g}, {k_max:.4g}] h/Mpc, "
          f"z = {', '.join(f'{z:g}' for z in args.z)} ({took:.3f} s)")
    norm = {"sigma_8": f"sigma_8 = {cosmo.sigma_8}",
            "a_s": f"a_s = {cosmo.a_s}",
            "table": "the table's own amplitude"}[spec.normalisation]
    print(f"spectrum: {spec.label}; normalised to {norm}; sigma_8 = {spec.sigma_8:.6f}; "
          f"tabulated for {spec.k_min:.4g} <= k <= {spec.k_max:.4g} h/Mpc, "
          f"power-law slopes {spec.slope_lo:.4g} below and {spec.slope_hi:.4g} above")
    if box is not None:
        k_lo, k_hi = spectrum.required_k_range(*box)
        print(f"the box (L = {box[0]:g} Mpc/h, N = {box[1]}) needs {k_lo:.4g} <= k <= {k_hi:.4g} h/Mpc")
    if args.plot:
        p_by_z = {z: cols[f"P_{z_label(z)}"] for z in args.z}
        plot_spectrum(k, p_by_z, args.plot, f"linear P(k): {spec.label}", box=box,
                      k_range=(spec.k_min, spec.k_max), overwrite=args.overwrite)
        print(f"wrote {args.plot}")
    return 0
